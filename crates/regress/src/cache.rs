//! The render cache: one folder of files named by the SHA-256 of what made them (the scene as
//! used, in canonical JSON with sorted keys, the target, the program version and the view
//! index), so a render is reused exactly when nothing that shapes its pixels changed.
//!
//! Files are written to a temporary name and renamed into place without replacing anything;
//! an entry that already exists is reused, and one that a concurrent run wrote first must hold
//! the same bytes (the renderer is deterministic), otherwise that is an error.

use std::io::Write;
use std::path::{Path, PathBuf};

use sha2::{Digest, Sha256};

use crate::error::RegressError;
use crate::suite::Scenario;

/// The program version that enters every key.
pub const PROGRAM_VERSION: &str = env!("CARGO_PKG_VERSION");

/// A cache folder.
#[derive(Clone, Debug)]
pub struct Cache {
    dir: PathBuf,
}

impl Cache {
    /// Opens (and creates) a cache folder.
    pub fn open(dir: &Path) -> Result<Cache, RegressError> {
        std::fs::create_dir_all(dir).map_err(|source| RegressError::Io {
            action: "cannot create the cache folder",
            path: dir.to_path_buf(),
            source,
        })?;
        Ok(Cache { dir: dir.to_path_buf() })
    }

    /// The folder.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// The key of a scenario's view: hex SHA-256 of the canonical description.
    pub fn key(scenario: &Scenario, index: usize) -> String {
        // serde_json's maps are sorted (no insertion-order feature), so this text is canonical.
        let description = serde_json::json!({
            "scene": scenario.scene_spec,
            "target": scenario.scene.target().spec(),
            "program": PROGRAM_VERSION,
            "seed": scenario.scene.seed(),
            "view": index,
        });
        hex(&Sha256::digest(description.to_string().as_bytes()))
    }

    /// The bytes of an entry, if present.
    pub fn read(&self, name: &str) -> Result<Option<Vec<u8>>, RegressError> {
        let path = self.dir.join(name);
        match std::fs::read(&path) {
            Ok(b) => Ok(Some(b)),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(None),
            Err(source) => Err(RegressError::Io { action: "cannot read", path, source }),
        }
    }

    /// Stores an entry atomically; never replaces an existing file.
    pub fn store(&self, name: &str, bytes: &[u8]) -> Result<(), RegressError> {
        let path = self.dir.join(name);
        let fail = |source| RegressError::Io { action: "cannot write", path: path.clone(), source };
        let mut tmp = tempfile::Builder::new()
            .prefix(".regress-")
            .suffix(".tmp")
            .tempfile_in(&self.dir)
            .map_err(fail)?;
        tmp.write_all(bytes).map_err(fail)?;
        tmp.as_file().sync_all().map_err(fail)?;
        match tmp.persist_noclobber(&path) {
            Ok(_) => Ok(()),
            Err(e) if e.error.kind() == std::io::ErrorKind::AlreadyExists => {
                match self.read(name)? {
                    Some(old) if old == bytes => Ok(()),
                    _ => Err(RegressError::CacheConflict { path }),
                }
            }
            Err(e) => Err(fail(e.error)),
        }
    }
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn entries_are_written_once_and_conflicts_refused() {
        let dir = tempfile::tempdir().unwrap();
        let c = Cache::open(&dir.path().join("c")).unwrap();
        assert_eq!(c.read("a").unwrap(), None);
        c.store("a", b"one").unwrap();
        c.store("a", b"one").unwrap();
        assert!(matches!(c.store("a", b"two"), Err(RegressError::CacheConflict { .. })));
        assert_eq!(c.read("a").unwrap().as_deref(), Some(&b"one"[..]));
        // No temporary file is left behind.
        let names: Vec<_> =
            std::fs::read_dir(c.dir()).unwrap().map(|e| e.unwrap().file_name()).collect();
        assert_eq!(names.len(), 1, "{names:?}");
    }

    /// SHA-256 of "abc" from FIPS 180-2, appendix B.1.
    #[test]
    fn hex_digest_matches_the_standard_example() {
        assert_eq!(
            hex(&Sha256::digest(b"abc")),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }
}
