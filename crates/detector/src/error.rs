//! The detector crate's error type: what can be wrong with an image or with the options.

use thiserror::Error;

/// Everything the detector refuses. Not finding features is an outcome (empty lists), never an
/// error.
#[derive(Debug, Error, Clone, PartialEq)]
#[non_exhaustive]
pub enum DetectError {
    /// A pixel buffer whose length does not match the image size.
    #[error("image buffer holds {got} values, {width} x {height} needs {need}")]
    BufferSize {
        /// Width, pixels.
        width: usize,
        /// Height, pixels.
        height: usize,
        /// Values supplied.
        got: usize,
        /// Values needed.
        need: usize,
    },
    /// A pixel that is NaN or infinite.
    #[error("pixel ({x}, {y}) is not finite")]
    NonFinitePixel {
        /// Column.
        x: usize,
        /// Row.
        y: usize,
    },
    /// An image larger than [`crate::DetectorOptions::max_pixels`].
    #[error("image of {width} x {height} pixels exceeds the limit of {limit} pixels")]
    TooLarge {
        /// Width, pixels.
        width: usize,
        /// Height, pixels.
        height: usize,
        /// The limit.
        limit: u64,
    },
    /// An option outside its valid range.
    #[error("option `{field}` = {value}: {reason}")]
    InvalidOption {
        /// The option's field name.
        field: &'static str,
        /// Its value.
        value: f64,
        /// What is required.
        reason: &'static str,
    },
    /// A plane-to-image mapping that cannot be used (singular, or the circle's image is not an
    /// ellipse because the circle crosses the vanishing line).
    #[error("plane-to-image mapping unusable: {reason}")]
    DegenerateMapping {
        /// Why.
        reason: &'static str,
    },
}
