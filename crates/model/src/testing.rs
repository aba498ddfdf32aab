//! Support for tests across the workspace (not part of the public API).

use std::path::PathBuf;

/// The environment variable that points tests at the shared reference data.
pub const REFERENCE_ENV: &str = "FACETCAL_REFERENCE";

/// The folder of one reference data set, for tests that compare against published data.
///
/// Returns `None`, after saying so on standard error, when `FACETCAL_REFERENCE` is not set
/// outside CI. In CI (`CI` set) a missing data set is a failure, never a silent skip.
///
/// # Panics
/// In CI when the variable or the folder is missing.
pub fn reference_dir(name: &str) -> Option<PathBuf> {
    let in_ci = std::env::var_os("CI").is_some_and(|v| !v.is_empty() && v != "false");
    match std::env::var_os(REFERENCE_ENV) {
        Some(root) => {
            let dir = PathBuf::from(root).join(name);
            if dir.is_dir() {
                Some(dir)
            } else if in_ci {
                panic!("reference data set {} is missing (looked in {})", name, dir.display());
            } else {
                eprintln!("SKIPPED: reference data set {name} not found at {}", dir.display());
                None
            }
        }
        None if in_ci => {
            panic!("{REFERENCE_ENV} is not set: CI must point it at the reference data")
        }
        None => {
            eprintln!(
                "SKIPPED: {REFERENCE_ENV} is not set, so the test against {name} did not run"
            );
            None
        }
    }
}
