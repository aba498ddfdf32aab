//! Durable file operations: atomic replacement, folder fsync, and the owner id of a service.

use std::fs::File;
use std::io::Write;
use std::path::Path;

/// Flushes a folder's entries (a rename or a new file inside it) to stable storage.
pub fn sync_dir(dir: &Path) -> std::io::Result<()> {
    File::open(dir)?.sync_all()
}

/// Writes `bytes` to `path` atomically: a temporary file in the same folder, fsync, rename over
/// `path`, fsync of the folder. A reader sees the old file or the new one, never a part.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let dir = path.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let tmp = dir.join(format!(".{name}.{}.tmp", std::process::id()));
    let result = (|| {
        let mut f = File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)?;
        sync_dir(dir)
    })();
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result
}

/// Milliseconds since the Unix epoch (0 if the clock is before it).
pub fn now_ms() -> u64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_millis() as u64)
}

/// Who holds a claim: a host name and a process id, written `HOST-PID`.
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub struct Owner {
    /// Host name, with characters other than letters, digits, `.` and `_` replaced by `_`.
    pub host: String,
    /// Process id.
    pub pid: u32,
}

impl Owner {
    /// This process on this host.
    pub fn current() -> Owner {
        Owner { host: host_name(), pid: std::process::id() }
    }

    /// Parses `HOST-PID`; `None` for anything else.
    pub fn parse(s: &str) -> Option<Owner> {
        let (host, pid) = s.rsplit_once('-')?;
        if host.is_empty() {
            return None;
        }
        Some(Owner { host: host.to_string(), pid: pid.parse().ok()? })
    }

    /// Whether the process may still be running: true unless this host says no such process
    /// exists. A claim of another host is never taken to be abandoned.
    pub fn may_be_alive(&self) -> bool {
        self.host != host_name() || process_exists(self.pid)
    }
}

impl std::fmt::Display for Owner {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}-{}", self.host, self.pid)
    }
}

fn host_name() -> String {
    let raw = ["/proc/sys/kernel/hostname", "/etc/hostname"]
        .iter()
        .find_map(|p| std::fs::read_to_string(p).ok())
        .or_else(|| std::env::var("HOSTNAME").ok())
        .unwrap_or_default();
    let clean: String = raw
        .trim()
        .chars()
        .map(|c| if c.is_ascii_alphanumeric() || c == '.' || c == '_' { c } else { '_' })
        .collect();
    if clean.is_empty() { "localhost".into() } else { clean }
}

#[cfg(unix)]
fn process_exists(pid: u32) -> bool {
    let Ok(pid) = libc::pid_t::try_from(pid) else { return false };
    if pid <= 0 {
        return false;
    }
    // SAFETY: kill with signal 0 sends nothing; it only asks whether the process exists. It has
    // no memory effects. EPERM means it exists but belongs to someone else.
    let r = unsafe { libc::kill(pid, 0) };
    r == 0 || std::io::Error::last_os_error().raw_os_error() == Some(libc::EPERM)
}

#[cfg(not(unix))]
fn process_exists(_pid: u32) -> bool {
    // Without a way to ask, every claim is taken to be alive: never stolen.
    true
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn owner_round_trips_through_its_text_form_with_dashes_in_the_host() {
        let o = Owner { host: "line-3_station.local".into(), pid: 4711 };
        assert_eq!(Owner::parse(&o.to_string()), Some(o));
        assert_eq!(Owner::parse("nopid"), None);
        assert_eq!(Owner::parse("-12"), None);
        assert_eq!(Owner::parse("host-x12"), None);
    }

    #[test]
    fn this_process_is_alive_and_a_reaped_child_is_not() {
        assert!(Owner::current().may_be_alive());
        let mut child = std::process::Command::new("true").spawn().unwrap();
        let pid = child.id();
        child.wait().unwrap();
        // The pid could be reused in between; that would only make this check fail, never pass.
        assert!(!Owner { host: host_name(), pid }.may_be_alive());
        assert!(Owner { host: "another-host".into(), pid }.may_be_alive());
    }

    #[test]
    fn atomic_write_replaces_and_leaves_no_temporary_file() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("status.json");
        write_atomic(&p, b"one").unwrap();
        write_atomic(&p, b"two").unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"two");
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }
}
