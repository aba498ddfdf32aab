//! Writing outputs safely: never overwrite without `--force`, always atomically.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use rayon::prelude::*;

use anyhow::Context;

use crate::exit;

/// Creates a folder and its parents.
pub fn create_dir(dir: &Path) -> anyhow::Result<()> {
    std::fs::create_dir_all(dir).map_err(|e| {
        exit::coded(exit::CANT_CREATE, format!("cannot create folder {}: {e}", dir.display()))
    })
}

/// Writes a file atomically (temporary file in the same folder, fsync, rename). Refuses to
/// replace an existing file unless `force` is set.
pub fn write_new(path: &Path, bytes: &[u8], force: bool) -> anyhow::Result<()> {
    if !force && path.exists() {
        return Err(exit::coded(
            exit::CANT_CREATE,
            format!("{} already exists (use --force to replace it)", path.display()),
        ));
    }
    let dir = path.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    let fail = |e: std::io::Error| {
        exit::coded(exit::CANT_CREATE, format!("cannot write {}: {e}", path.display()))
    };
    let mut tmp = tempfile::Builder::new()
        .prefix(".facetcal-")
        .suffix(".tmp")
        .tempfile_in(dir)
        .map_err(fail)?;
    tmp.write_all(bytes).map_err(fail)?;
    tmp.as_file().sync_all().map_err(fail)?;
    // Without --force, a file that appeared since the check above still wins.
    let persisted = if force { tmp.persist(path) } else { tmp.persist_noclobber(path) };
    persisted.map_err(|e| fail(e.error)).with_context(|| "atomic rename")?;
    Ok(())
}

/// Runs `work` on every input in parallel and reports in input order: each success's line on
/// standard output, each failure (skipped, the batch goes on) on standard error. The exit code
/// is success, partial when some inputs failed, bad data when all did.
pub fn run_batch(
    inputs: &[PathBuf],
    work: impl Fn(&Path) -> anyhow::Result<String> + Sync,
) -> ExitCode {
    let results: Vec<anyhow::Result<String>> = inputs.par_iter().map(|p| work(p)).collect();
    let mut failed = 0;
    for (path, r) in inputs.iter().zip(&results) {
        match r {
            Ok(line) => println!("{}: {line}", path.display()),
            Err(e) => {
                failed += 1;
                eprintln!("skipped {}: {}", path.display(), exit::chain(e));
            }
        }
    }
    ExitCode::from(match failed {
        0 => exit::OK,
        n if n == results.len() => exit::DATA,
        _ => exit::PARTIAL,
    })
}
