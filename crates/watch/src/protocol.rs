//! The hand-over protocol: which entries of INBOX are batches, when a batch is ready, and the
//! inventory of a claimed batch (refusing symbolic links).

use std::collections::HashMap;
use std::path::Path;
use std::time::{Duration, Instant, SystemTime};

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

/// INBOX's bookkeeping folders: claims in progress, finished batches, refused batches.
pub const CLAIMED: &str = ".claimed";
/// Processed batches.
pub const DONE: &str = "done";
/// Batches that could not be processed, each with `NAME.reason.txt` beside it.
pub const FAILED: &str = "failed";
/// The staging folder producers are asked to write into before the hand-over rename.
pub const INCOMING: &str = ".incoming";

/// When a folder in INBOX counts as delivered.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct HandOver {
    /// With a marker name, a folder is ready once it holds a file of that name (written last by
    /// the producer). Without one (and without `settle`) every folder is ready: it was handed
    /// over by one rename.
    pub marker: Option<String>,
    /// A folder without the marker is ready once its listing (names, sizes, modification times)
    /// has not changed for this long. A last resort for producers that can do neither.
    pub settle: Option<Duration>,
}

/// Whether an INBOX entry name is never a batch: dotfiles and dotfolders (the staging and claim
/// folders among them), temporary names (`*.tmp`, `*.part`, `*~`) and the `done` and `failed`
/// folders.
pub fn is_ignored(name: &str) -> bool {
    name.starts_with('.')
        || name.ends_with(".tmp")
        || name.ends_with(".part")
        || name.ends_with('~')
        || name == DONE
        || name == FAILED
}

type Fingerprint = Vec<(String, u64, Option<SystemTime>)>;

/// What the settle rule has seen of folders not yet ready.
#[derive(Debug, Default)]
pub struct SettleState {
    seen: HashMap<String, (Fingerprint, Instant)>,
}

/// The result of one look at INBOX.
#[derive(Debug, Default, PartialEq, Eq)]
pub struct Scan {
    /// Ready batches, by name, in name order.
    pub ready: Vec<String>,
    /// Folders waiting for their marker or to settle.
    pub waiting: usize,
    /// The soonest a waiting folder can settle.
    pub next_settle: Option<Duration>,
}

fn fingerprint(dir: &Path) -> std::io::Result<Fingerprint> {
    let mut fp = Vec::new();
    for e in std::fs::read_dir(dir)? {
        let e = e?;
        let md = e.path().symlink_metadata()?;
        fp.push((e.file_name().to_string_lossy().into_owned(), md.len(), md.modified().ok()));
    }
    fp.sort();
    Ok(fp)
}

/// Lists INBOX: the folders (and symbolic links, which are refused later) that are ready under
/// `rule`. Names that are not UTF-8 are left alone with a warning. A folder whose readiness
/// cannot be checked (unreadable) is ready, so that it is refused with its reason.
pub fn scan(inbox: &Path, rule: &HandOver, state: &mut SettleState) -> std::io::Result<Scan> {
    let mut out = Scan::default();
    let now = Instant::now();
    let mut present = Vec::new();
    for entry in std::fs::read_dir(inbox)? {
        let entry = entry?;
        let Some(name) = entry.file_name().to_str().map(str::to_string) else {
            tracing::warn!("ignoring {:?} in the inbox: not a UTF-8 name", entry.file_name());
            continue;
        };
        if is_ignored(&name) {
            continue;
        }
        let path = entry.path();
        let Ok(md) = path.symlink_metadata() else { continue };
        if md.file_type().is_symlink() {
            out.ready.push(name);
            continue;
        }
        if !md.is_dir() {
            continue;
        }
        if rule.marker.is_none() && rule.settle.is_none() {
            out.ready.push(name);
            continue;
        }
        if let Some(m) = &rule.marker {
            match path.join(m).symlink_metadata() {
                Ok(_) => {
                    out.ready.push(name);
                    continue;
                }
                Err(e) if e.kind() != std::io::ErrorKind::NotFound => {
                    out.ready.push(name);
                    continue;
                }
                Err(_) => {}
            }
        }
        let Some(settle) = rule.settle else {
            out.waiting += 1;
            continue;
        };
        let Ok(fp) = fingerprint(&path) else {
            out.ready.push(name);
            continue;
        };
        present.push(name.clone());
        let since = match state.seen.get(&name) {
            Some((old, since)) if *old == fp => *since,
            _ => {
                state.seen.insert(name.clone(), (fp, now));
                now
            }
        };
        let age = now.duration_since(since);
        if age >= settle {
            state.seen.remove(&name);
            out.ready.push(name);
        } else {
            out.waiting += 1;
            let left = settle - age;
            out.next_settle = Some(out.next_settle.map_or(left, |n| n.min(left)));
        }
    }
    state.seen.retain(|k, _| present.contains(k));
    out.ready.sort();
    Ok(out)
}

/// One input file of a batch as found when it was processed.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct InputFile {
    /// File name inside the batch folder.
    pub name: String,
    /// Size, bytes.
    pub size: u64,
    /// SHA-256 of the content, lower-case hex.
    pub sha256: String,
}

/// The files of a claimed batch with their hashes; the reason it is refused otherwise: the batch
/// or an entry in it is a symbolic link (never followed), or it cannot be read.
/// Subfolders are listed by name and not entered.
pub fn inventory(batch: &Path) -> Result<Vec<InputFile>, String> {
    let md = batch.symlink_metadata().map_err(|e| format!("cannot inspect the batch: {e}"))?;
    if md.file_type().is_symlink() {
        let to = std::fs::read_link(batch).map(|t| t.display().to_string()).unwrap_or_default();
        return Err(format!("the batch is a symbolic link (to {to}); links are not followed"));
    }
    if !md.is_dir() {
        return Err("the batch is not a folder".into());
    }
    let mut files = Vec::new();
    let entries =
        std::fs::read_dir(batch).map_err(|e| format!("cannot read the batch folder: {e}"))?;
    for e in entries {
        let e = e.map_err(|e| format!("cannot read the batch folder: {e}"))?;
        let name = e.file_name().to_string_lossy().into_owned();
        let path = e.path();
        let md = path.symlink_metadata().map_err(|e| format!("cannot inspect {name}: {e}"))?;
        if md.file_type().is_symlink() {
            return Err(format!("{name} is a symbolic link; links are not followed"));
        }
        if md.is_dir() {
            continue;
        }
        // A FIFO or device would block the job slot or never end: the batch fails instead.
        if let Some(kind) = facetcal_inputs::special_kind(&md) {
            return Err(format!("{name} is {kind}, not a regular file"));
        }
        let bytes = facetcal_inputs::read_capped(&path, facetcal_inputs::MAX_IMAGE_FILE_BYTES)
            .map_err(|e| match e {
                facetcal_inputs::InputError::Io { source, .. } => {
                    format!("cannot read {name}: {source}")
                }
                other => other.to_string(),
            })?;
        files.push(InputFile {
            name,
            size: bytes.len() as u64,
            sha256: hex(&Sha256::digest(&bytes)),
        });
    }
    files.sort_by(|a, b| a.name.cmp(&b.name));
    Ok(files)
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn temporary_and_bookkeeping_names_are_never_batches() {
        for n in [".incoming", ".claimed", ".x", "a.tmp", "a.part", "a~", "done", "failed"] {
            assert!(is_ignored(n), "{n}");
        }
        for n in ["cam-17", "lot 3", "done2", "a.tmp.d"] {
            assert!(!is_ignored(n), "{n}");
        }
    }

    #[test]
    fn readiness_follows_the_rule() {
        let inbox = tempfile::tempdir().unwrap();
        let i = inbox.path();
        for d in ["b", "a", ".incoming", "c.part"] {
            std::fs::create_dir(i.join(d)).unwrap();
        }
        std::fs::write(i.join("loose.png"), b"x").unwrap();
        let mut st = SettleState::default();
        let s = scan(i, &HandOver::default(), &mut st).unwrap();
        assert_eq!(s.ready, vec!["a", "b"]);

        let marker = HandOver { marker: Some("READY".into()), settle: None };
        let s = scan(i, &marker, &mut st).unwrap();
        assert_eq!((s.ready.len(), s.waiting), (0, 2));
        std::fs::write(i.join("b/READY"), b"").unwrap();
        assert_eq!(scan(i, &marker, &mut st).unwrap().ready, vec!["b"]);

        let settle =
            HandOver { marker: Some("READY".into()), settle: Some(Duration::from_millis(300)) };
        let s = scan(i, &settle, &mut st).unwrap();
        assert_eq!((s.ready.clone(), s.waiting), (vec!["b".to_string()], 1));
        assert!(s.next_settle.unwrap() <= Duration::from_millis(300));
        std::thread::sleep(Duration::from_millis(150));
        // A change restarts the clock.
        std::fs::write(i.join("a/shot.png"), b"12").unwrap();
        std::thread::sleep(Duration::from_millis(200));
        assert_eq!(scan(i, &settle, &mut st).unwrap().ready, vec!["b"]);
        std::thread::sleep(Duration::from_millis(350));
        assert_eq!(scan(i, &settle, &mut st).unwrap().ready, vec!["a", "b"]);
    }

    #[test]
    fn inventory_hashes_files_and_refuses_links() {
        let d = tempfile::tempdir().unwrap();
        let b = d.path().join("batch");
        std::fs::create_dir_all(b.join("sub")).unwrap();
        std::fs::write(b.join("x.png"), b"abc").unwrap();
        let inv = inventory(&b).unwrap();
        // SHA-256("abc") from FIPS 180-2, appendix B.1.
        assert_eq!(
            inv,
            vec![InputFile {
                name: "x.png".into(),
                size: 3,
                sha256: "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad".into()
            }]
        );
        #[cfg(unix)]
        {
            std::os::unix::fs::symlink("/etc/hostname", b.join("y.png")).unwrap();
            assert!(inventory(&b).unwrap_err().contains("y.png is a symbolic link"));
            let link = d.path().join("linked");
            std::os::unix::fs::symlink(&b, &link).unwrap();
            assert!(inventory(&link).unwrap_err().contains("the batch is a symbolic link"));
        }
    }
}
