//! The model crate's error type.

use thiserror::Error;

/// Everything that can go wrong in the model crate.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum ModelError {
    /// A point or pixel lies outside the camera model's valid domain.
    #[error("outside the camera model's domain: {0}")]
    OutsideDomain(String),
    /// An iterative inverse did not converge.
    #[error("no convergence: {0}")]
    NoConvergence(String),
    /// A camera's parameters are unusable.
    #[error("invalid camera: {0}")]
    InvalidCamera(String),
    /// A field of a file is wrong. `path` is the JSON path of the field, for example
    /// `faces[2].pattern.rows`.
    #[error("{path}: {reason}")]
    Field {
        /// JSON path of the bad field.
        path: String,
        /// What is wrong with it.
        reason: String,
    },
    /// A file is not valid JSON or does not have the expected shape.
    #[error("{0}")]
    Parse(String),
    /// An input file is not a regular file, too large, or not UTF-8 text.
    #[error(transparent)]
    Input(#[from] facetcal_inputs::InputError),
    /// A file could not be read.
    #[error("cannot read {path}")]
    Io {
        /// The file.
        path: std::path::PathBuf,
        /// The cause.
        source: std::io::Error,
    },
}

impl ModelError {
    /// A [`ModelError::Field`] error.
    pub fn field(path: impl Into<String>, reason: impl Into<String>) -> Self {
        ModelError::Field { path: path.into(), reason: reason.into() }
    }
}
