//! Running the binary in a scratch folder, and paths of the repository's test data.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// The repository root.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// A bundled target file.
pub fn bundled_target(name: &str) -> PathBuf {
    root().join("targets").join(format!("{name}.json"))
}

/// What a run of the binary gave.
pub struct Run {
    pub code: i32,
    pub stdout: String,
    pub stderr: String,
}

impl From<Output> for Run {
    fn from(o: Output) -> Self {
        Run {
            code: o.status.code().unwrap_or(-1),
            stdout: String::from_utf8_lossy(&o.stdout).into_owned(),
            stderr: String::from_utf8_lossy(&o.stderr).into_owned(),
        }
    }
}

/// Runs `facetcal ARGS` with `dir` as the working folder.
pub fn facetcal(dir: &Path, args: &[&str]) -> Run {
    Command::new(env!("CARGO_BIN_EXE_facetcal"))
        .args(args)
        .current_dir(dir)
        .env_remove("FACETCAL_LOG")
        .output()
        .expect("the facetcal binary runs")
        .into()
}

/// A fresh scratch folder, removed when dropped.
pub fn scratch() -> tempfile::TempDir {
    tempfile::tempdir().expect("a scratch folder")
}
