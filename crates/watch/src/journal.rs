//! The journal: an append-only file of one JSON line per state change of a batch, each line
//! fsynced before the service goes on, so that a restart knows where every batch stood.

use std::fs::{File, OpenOptions};
use std::io::{Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};
use std::sync::Mutex;

use serde::{Deserialize, Serialize};

/// The journal's file name inside OUT.
pub const JOURNAL_FILE: &str = ".facetcal-watch.journal";

/// A state change of a batch.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Step {
    /// The batch was renamed into the owner's claim folder.
    Claimed,
    /// A restarted service took over a claim whose owner is gone.
    Recovered,
    /// The batch's result folder was renamed into place.
    ResultWritten,
    /// The batch was renamed into `done/` or `failed/`: finished.
    Moved,
}

/// One journal line.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Entry {
    /// When, milliseconds since the Unix epoch.
    pub time_ms: u64,
    /// The service that made the change (`HOST-PID`).
    pub owner: String,
    /// What happened.
    pub step: Step,
    /// The batch's folder name as delivered.
    pub batch: String,
    /// The claim's token: unique per claim, written into the result folder.
    pub token: String,
    /// For `result-written` and `moved`: `done` or `failed`; for `recovered`: the old owner.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub detail: Option<String>,
}

/// An open journal; appends from several threads are serialised.
#[derive(Debug)]
pub struct Journal {
    path: PathBuf,
    file: Mutex<File>,
}

impl Journal {
    /// Opens (creating) the journal. A last line cut short by a crash is closed with a newline
    /// so that the next line starts clean; readers skip the cut line.
    pub fn open(path: &Path) -> std::io::Result<Journal> {
        let mut file = OpenOptions::new().read(true).append(true).create(true).open(path)?;
        let len = file.metadata()?.len();
        if len > 0 {
            let mut last = [0u8];
            file.seek(SeekFrom::Start(len - 1))?;
            file.read_exact(&mut last)?;
            if last[0] != b'\n' {
                file.write_all(b"\n")?;
                file.sync_data()?;
            }
        }
        Ok(Journal { path: path.to_path_buf(), file: Mutex::new(file) })
    }

    /// The journal's path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Appends one line and waits until it is on stable storage. The line goes out in one
    /// `write` on a file opened for appending, so lines of two services sharing OUT do not mix.
    pub fn append(&self, entry: &Entry) -> std::io::Result<()> {
        let mut line = serde_json::to_string(entry).map_err(std::io::Error::other)?;
        line.push('\n');
        let mut file = self.file.lock().unwrap_or_else(|e| e.into_inner());
        file.write_all(line.as_bytes())?;
        file.sync_data()
    }

    /// Every readable line of the journal at `path` in order (none if it does not exist).
    pub fn read(path: &Path) -> std::io::Result<Vec<Entry>> {
        let text = match std::fs::read(path) {
            Ok(b) => b,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(Vec::new()),
            Err(e) => return Err(e),
        };
        Ok(text.split(|&b| b == b'\n').filter_map(|l| serde_json::from_slice(l).ok()).collect())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn entry(step: Step, batch: &str) -> Entry {
        Entry {
            time_ms: 1,
            owner: "h-1".into(),
            step,
            batch: batch.into(),
            token: "t".into(),
            detail: None,
        }
    }

    #[test]
    fn a_line_cut_by_a_crash_is_skipped_and_the_next_line_starts_clean() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join(JOURNAL_FILE);
        let j = Journal::open(&p).unwrap();
        j.append(&entry(Step::Claimed, "a b")).unwrap();
        drop(j);
        let mut f = OpenOptions::new().append(true).open(&p).unwrap();
        f.write_all(br#"{"time_ms":2,"owner":"h-1","st"#).unwrap();
        drop(f);
        let j = Journal::open(&p).unwrap();
        j.append(&entry(Step::Moved, "a b")).unwrap();
        let got = Journal::read(&p).unwrap();
        assert_eq!(got, vec![entry(Step::Claimed, "a b"), entry(Step::Moved, "a b")]);
        let text = std::fs::read_to_string(&p).unwrap();
        assert_eq!(text.lines().count(), 3, "{text}");
        assert!(text.contains(r#""step":"claimed""#), "{text}");
    }
}
