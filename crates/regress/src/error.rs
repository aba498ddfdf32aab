//! The regression crate's error type.

use std::path::PathBuf;

use thiserror::Error;

/// Everything that can go wrong while reading a suite or baseline, rendering, or caching.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum RegressError {
    /// A field of a suite, baseline or result file is wrong; `path` is its JSON path, for
    /// example `scenarios[2].views`.
    #[error("{path}: {reason}")]
    Field {
        /// JSON path of the bad field.
        path: String,
        /// What is wrong with it.
        reason: String,
    },
    /// A file is not valid JSON or does not have the expected shape at its top level.
    #[error("{0}")]
    Parse(String),
    /// An input file is not a regular file, too large, or not UTF-8 text.
    #[error(transparent)]
    Input(#[from] facetcal_inputs::InputError),
    /// A file or folder could not be read or written.
    #[error("{action} {path}")]
    Io {
        /// What was being done: "cannot read", "cannot write".
        action: &'static str,
        /// The file or folder.
        path: PathBuf,
        /// The cause.
        source: std::io::Error,
    },
    /// A scenario's scene file is unusable.
    #[error("scenario {scenario}: scene file {path}")]
    Scene {
        /// The scenario's name.
        scenario: String,
        /// The scene file.
        path: PathBuf,
        /// The cause.
        source: facetcal_render::RenderError,
    },
    /// Rendering a view failed.
    #[error("scenario {scenario}: rendering view {view}")]
    Render {
        /// The scenario's name.
        scenario: String,
        /// The view.
        view: usize,
        /// The cause.
        source: facetcal_render::RenderError,
    },
    /// The detector refused an image or its options.
    #[error("scenario {scenario}: detector")]
    Detect {
        /// The scenario's name.
        scenario: String,
        /// The cause.
        source: facetcal_detector::DetectError,
    },
    /// The matcher refused the detections.
    #[error("scenario {scenario}: identification")]
    Identify {
        /// The scenario's name.
        scenario: String,
        /// The cause.
        source: facetcal_matcher::MatchError,
    },
    /// A cached file is not what its name promises (corrupt, or written by another program).
    #[error("cache file {path}: {reason} (delete it to render again)")]
    Cache {
        /// The cached file.
        path: PathBuf,
        /// What is wrong.
        reason: String,
    },
    /// A cache entry exists with other bytes than the ones just computed for the same key.
    #[error("cache file {path} holds other bytes than this run computed for the same key")]
    CacheConflict {
        /// The cached file.
        path: PathBuf,
    },
    /// The Cramer-Rao computation was asked for something impossible.
    #[error("Cramer-Rao bound: {0}")]
    Bound(String),
}

impl RegressError {
    /// A [`RegressError::Field`] error.
    pub fn field(path: impl Into<String>, reason: impl Into<String>) -> Self {
        RegressError::Field { path: path.into(), reason: reason.into() }
    }
}

/// Parses JSON naming the JSON path of a bad field, with the model crate's reader.
pub(crate) fn parse_json<T: serde::de::DeserializeOwned>(text: &str) -> Result<T, RegressError> {
    facetcal_model::files::parse_with_path(text).map_err(|e| match e {
        facetcal_model::ModelError::Field { path, reason } => RegressError::Field { path, reason },
        other => RegressError::Parse(other.to_string()),
    })
}
