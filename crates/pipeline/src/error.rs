//! The pipeline's errors. Per-image problems are not errors (they are [`crate::ImageFailure`]
//! records and the batch goes on); these end a run.

use std::path::PathBuf;

use thiserror::Error;

/// Why a calibration run could not produce a result.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum PipelineError {
    /// The input folder cannot be listed.
    #[error("cannot read folder {}: {source}", path.display())]
    Folder {
        /// The folder.
        path: PathBuf,
        /// The system's error.
        source: std::io::Error,
    },
    /// Not one image could be used.
    #[error("no usable image among {images}{}", summary(reasons))]
    NoUsableImage {
        /// Images tried.
        images: usize,
        /// Why each failed.
        reasons: Vec<String>,
    },
    /// The solver refused the observations (degenerate configuration, too few points).
    #[error(transparent)]
    Solver(#[from] facetcal_solver::SolverError),
}

fn summary(reasons: &[String]) -> String {
    const SHOWN: usize = 5;
    if reasons.is_empty() {
        return String::new();
    }
    let mut s = format!(": {}", reasons.iter().take(SHOWN).cloned().collect::<Vec<_>>().join("; "));
    if reasons.len() > SHOWN {
        s.push_str(&format!("; and {} more", reasons.len() - SHOWN));
    }
    s
}
