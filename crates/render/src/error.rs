//! The render crate's error type.

use std::path::PathBuf;

use facetcal_model::ModelError;
use thiserror::Error;

/// Everything that can go wrong while checking a scene or rendering it.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum RenderError {
    /// A field of a scene or truth file is wrong. `path` is its JSON path, for example
    /// `optics.psf_sigma_px`.
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
    /// A file could not be read.
    #[error("cannot read {path}")]
    Io {
        /// The file.
        path: PathBuf,
        /// The cause.
        source: std::io::Error,
    },
    /// The target file a scene names is unusable.
    #[error("target file {path}")]
    Target {
        /// The target file, as resolved against the scene file's folder.
        path: PathBuf,
        /// The cause.
        source: ModelError,
    },
    /// A view index beyond the scene's poses.
    #[error("view {index} does not exist: the scene has {count} views")]
    NoSuchView {
        /// The requested index.
        index: usize,
        /// The number of views.
        count: usize,
    },
    /// The random pose generator found no pose that keeps the target in view.
    #[error(
        "view {view}: no random pose within the ranges kept the whole target in the image after {tries} tries"
    )]
    NoPoseInView {
        /// The view being generated.
        view: usize,
        /// How many poses were drawn.
        tries: u32,
    },
    /// An image could not be encoded.
    #[error("cannot encode view {view} as PNG: {reason}")]
    Encode {
        /// The view.
        view: usize,
        /// The encoder's message.
        reason: String,
    },
}

impl RenderError {
    /// A [`RenderError::Field`] error.
    pub fn field(path: impl Into<String>, reason: impl Into<String>) -> Self {
        RenderError::Field { path: path.into(), reason: reason.into() }
    }
}

/// Parses JSON with the model crate's reader, so that shape errors name the JSON path of the
/// bad field exactly as target files do.
pub(crate) fn parse_json<T: serde::de::DeserializeOwned>(text: &str) -> Result<T, RenderError> {
    facetcal_model::files::parse_with_path(text).map_err(|e| match e {
        ModelError::Field { path, reason } => RenderError::Field { path, reason },
        other => RenderError::Parse(other.to_string()),
    })
}
