//! The crate's error type.

use facetcal_model::ModelError;

/// What can go wrong with fleet files and shards.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum FleetError {
    /// A spec or fleet file is malformed; the model error names the field.
    #[error(transparent)]
    File(#[from] ModelError),
    /// A shard is not written `K/N` with `0 <= K < N`.
    #[error("shard {text:?}: {reason}")]
    Shard {
        /// What was given.
        text: String,
        /// What is wrong with it.
        reason: String,
    },
    /// A camera appears in more than one shard output.
    #[error("camera {id:?} is in more than one shard output")]
    DuplicateCamera {
        /// The camera id.
        id: String,
    },
    /// Shard outputs that do not belong to one fleet run.
    #[error("the shard outputs do not belong together: {0}")]
    Mismatch(String),
    /// Nothing to merge.
    #[error("no shard output to merge")]
    NothingToMerge,
}
