//! The matcher's error type. Failing to identify an image is not an error (it is a result with
//! reasons); errors are for options and targets the matcher cannot work with.

use thiserror::Error;

/// Everything that can go wrong in the matcher crate.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum MatchError {
    /// A field of [`crate::MatchOptions`] is out of range.
    #[error("matcher option {field} = {value} must be {need}")]
    InvalidOption {
        /// The field.
        field: &'static str,
        /// Its value.
        value: f64,
        /// The valid range.
        need: &'static str,
    },
    /// The target has a face this matcher cannot identify.
    #[error("face {face}: {reason}")]
    UnsupportedPattern {
        /// Face id.
        face: u32,
        /// Why.
        reason: &'static str,
    },
}
