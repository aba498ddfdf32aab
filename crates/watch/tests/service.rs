//! The service with a stand-in processor: refused batches, recovery from every crash point
//! (states built by hand as a crash leaves them), duplicate names, and stopping.

use std::path::Path;
use std::sync::Mutex;
use std::sync::atomic::{AtomicBool, Ordering};

use facetcal_watch::{
    Config, Entry, JOURNAL_FILE, Journal, Outcome, OutcomeFile, Owner, Step, run,
};

/// Counts the files of a batch; writes `count.txt`; fails an empty batch. Records each call.
struct Counter {
    calls: Mutex<Vec<String>>,
}

impl facetcal_watch::Processor for Counter {
    fn process(&self, batch: &Path, results: &Path) -> Outcome {
        let name = batch.file_name().unwrap().to_string_lossy().into_owned();
        self.calls.lock().unwrap().push(name);
        let n = std::fs::read_dir(batch).unwrap().count();
        std::fs::write(results.join("count.txt"), n.to_string()).unwrap();
        if n == 0 {
            Outcome::Failed { reason: "no files".into() }
        } else {
            Outcome::Done { summary: format!("{n} files") }
        }
    }
}

fn counter() -> Counter {
    Counter { calls: Mutex::new(Vec::new()) }
}

fn once(inbox: &Path, out: &Path) -> Config {
    let mut c = Config::new(inbox.to_path_buf(), out.to_path_buf());
    c.once = true;
    c.jobs = 2;
    c.status_line = false;
    c
}

fn batch(inbox: &Path, name: &str, files: &[(&str, &[u8])]) {
    let d = inbox.join(name);
    std::fs::create_dir_all(&d).unwrap();
    for (f, b) in files {
        std::fs::write(d.join(f), b).unwrap();
    }
}

fn journal(out: &Path) -> Vec<Entry> {
    Journal::read(&out.join(JOURNAL_FILE)).unwrap()
}

fn steps(out: &Path, batch: &str, step: Step) -> usize {
    journal(out).iter().filter(|e| e.batch == batch && e.step == step).count()
}

/// An owner on this host whose process is gone.
fn dead_owner() -> Owner {
    let mut child = std::process::Command::new("true").spawn().unwrap();
    let pid = child.id();
    child.wait().unwrap();
    Owner { pid, ..Owner::current() }
}

#[test]
fn refused_batches_go_to_failed_with_a_reason_and_the_rest_are_processed() {
    let root = tempfile::tempdir().unwrap();
    let (inbox, out) = (root.path().join("inbox"), root.path().join("out"));
    batch(&inbox, "good", &[("a.png", b"1"), ("b.png", b"22")]);
    batch(&inbox, "empty", &[]);
    batch(&inbox, ".incoming/half", &[("a.png", b"1")]);
    batch(&inbox, "copying.part", &[("a.png", b"1")]);
    batch(root.path(), "outside", &[("secret.png", b"s")]);
    std::os::unix::fs::symlink(root.path().join("outside"), inbox.join("linked")).unwrap();
    batch(&inbox, "has-link", &[("a.png", b"1")]);
    std::os::unix::fs::symlink(
        root.path().join("outside/secret.png"),
        inbox.join("has-link/b.png"),
    )
    .unwrap();
    let p = counter();
    let totals = run(&once(&inbox, &out), &p, &AtomicBool::new(false)).unwrap();
    assert_eq!((totals.done, totals.failed, totals.errors), (1, 3, 0));
    assert!(inbox.join("done/good/a.png").is_file());
    let good = OutcomeFile::read(&out.join("good")).unwrap();
    assert_eq!((good.outcome.as_str(), good.inputs.len()), ("done", 2));
    assert_eq!(std::fs::read_to_string(out.join("good/count.txt")).unwrap(), "2");
    for (name, reason) in [
        ("empty", "no files"),
        ("linked", "the batch is a symbolic link"),
        ("has-link", "b.png is a symbolic link"),
    ] {
        let r = std::fs::read_to_string(inbox.join(format!("failed/{name}.reason.txt"))).unwrap();
        assert!(r.contains(reason), "{name}: {r}");
        let in_out = std::fs::read_to_string(out.join(name).join("reason.txt")).unwrap();
        assert_eq!(in_out, r);
        assert_eq!(steps(&out, name, Step::Moved), 1, "{name}");
    }
    // The link was moved, not followed: its target is where it was, untouched.
    assert!(inbox.join("failed/linked").symlink_metadata().unwrap().file_type().is_symlink());
    assert_eq!(std::fs::read(root.path().join("outside/secret.png")).unwrap(), b"s");
    // Links never reach the processor; staging and temporary names are left alone.
    assert_eq!(p.calls.lock().unwrap().len(), 2);
    assert!(inbox.join(".incoming/half").is_dir() && inbox.join("copying.part").is_dir());
    let status: facetcal_watch::Status =
        serde_json::from_slice(&std::fs::read(out.join("status.json")).unwrap()).unwrap();
    assert_eq!((status.done, status.failed, status.state.as_str()), (1, 3, "stopped"));
}

#[test]
fn an_unreadable_batch_is_refused() {
    use std::os::unix::fs::PermissionsExt;
    let root = tempfile::tempdir().unwrap();
    let (inbox, out) = (root.path().join("inbox"), root.path().join("out"));
    batch(&inbox, "locked", &[("a.png", b"1")]);
    std::fs::set_permissions(inbox.join("locked"), std::fs::Permissions::from_mode(0o000)).unwrap();
    if std::fs::read_dir(inbox.join("locked")).is_ok() {
        println!("SKIPPED: running as root, where mode 000 does not stop reading");
        return;
    }
    let totals = run(&once(&inbox, &out), &counter(), &AtomicBool::new(false)).unwrap();
    assert_eq!((totals.done, totals.failed), (0, 1));
    let r = std::fs::read_to_string(inbox.join("failed/locked.reason.txt")).unwrap();
    assert!(r.contains("cannot read the batch folder"), "{r}");
    std::fs::set_permissions(inbox.join("failed/locked"), std::fs::Permissions::from_mode(0o755))
        .unwrap();
    assert_eq!(std::fs::read(inbox.join("failed/locked/a.png")).unwrap(), b"1");
}

fn journal_line(out: &Path, owner: &Owner, step: Step, batch: &str, token: &str) {
    std::fs::create_dir_all(out).unwrap();
    let j = Journal::open(&out.join(JOURNAL_FILE)).unwrap();
    let e = Entry {
        time_ms: 1,
        owner: owner.to_string(),
        step,
        batch: batch.into(),
        token: token.into(),
        detail: None,
    };
    j.append(&e).unwrap();
}

fn outcome(out: &Path, key: &str, batch: &str, token: &str) {
    std::fs::create_dir_all(out.join(key)).unwrap();
    let f = OutcomeFile {
        format: "facetcal-watch-outcome".into(),
        version: 1,
        batch: batch.into(),
        token: token.into(),
        outcome: "done".into(),
        message: "1 files".into(),
        inputs: Vec::new(),
        time_ms: 1,
    };
    std::fs::write(out.join(key).join("outcome.json"), serde_json::to_vec(&f).unwrap()).unwrap();
}

#[test]
fn a_restart_finishes_every_crash_point_once() {
    let root = tempfile::tempdir().unwrap();
    let (inbox, out) = (root.path().join("inbox"), root.path().join("out"));
    let dead = dead_owner();
    let claimed = inbox.join(".claimed").join(dead.to_string());
    // Claimed, journal line lost: processed.
    batch(&claimed, "no-line", &[("a.png", b"1")]);
    // Claimed and journalled, no result (a half-written staging folder): processed.
    batch(&claimed, "no-result", &[("a.png", b"1")]);
    journal_line(&out, &dead, Step::Claimed, "no-result", "t1");
    batch(&out.join(".staging").join(dead.to_string()), "no-result", &[("count.txt", b"9")]);
    // Result published, not moved: moved without processing.
    batch(&claimed, "not-moved", &[("a.png", b"1")]);
    journal_line(&out, &dead, Step::Claimed, "not-moved", "t2");
    outcome(&out, "not-moved", "not-moved", "t2");
    // Moved, the journal line lost: journalled only.
    batch(&inbox, "done/moved", &[("a.png", b"1")]);
    journal_line(&out, &dead, Step::Claimed, "moved", "t3");
    journal_line(&out, &dead, Step::ResultWritten, "moved", "t3");
    outcome(&out, "moved", "moved", "t3");

    let p = counter();
    let totals = run(&once(&inbox, &out), &p, &AtomicBool::new(false)).unwrap();
    assert_eq!((totals.done, totals.failed, totals.errors), (3, 0, 0));
    let mut calls = p.calls.lock().unwrap().clone();
    calls.sort();
    assert_eq!(calls, vec!["no-line", "no-result"]);
    for name in ["no-line", "no-result", "not-moved", "moved"] {
        assert_eq!(steps(&out, name, Step::Moved), 1, "{name}");
        assert_eq!(std::fs::read(inbox.join("done").join(name).join("a.png")).unwrap(), b"1");
        assert!(OutcomeFile::read(&out.join(name)).is_some(), "{name}");
    }
    assert_eq!(std::fs::read_to_string(out.join("no-result/count.txt")).unwrap(), "1");
    assert_eq!(OutcomeFile::read(&out.join("not-moved")).unwrap().token, "t2");
    assert!(!claimed.exists(), "the dead owner's claim folder is cleared");
    assert!(!out.join(".staging").join(dead.to_string()).exists());

    // A second start finds nothing to do.
    let p = counter();
    let totals = run(&once(&inbox, &out), &p, &AtomicBool::new(false)).unwrap();
    assert_eq!((totals.done, totals.failed), (0, 0));
    assert!(p.calls.lock().unwrap().is_empty());
}

#[test]
fn a_live_owners_claim_is_left_alone() {
    let root = tempfile::tempdir().unwrap();
    let (inbox, out) = (root.path().join("inbox"), root.path().join("out"));
    let other = Owner { host: "another-host".into(), pid: 1 };
    batch(&inbox.join(".claimed").join(other.to_string()), "theirs", &[("a.png", b"1")]);
    let totals = run(&once(&inbox, &out), &counter(), &AtomicBool::new(false)).unwrap();
    assert_eq!(totals.done, 0);
    assert!(inbox.join(".claimed").join(other.to_string()).join("theirs/a.png").is_file());
}

#[test]
fn a_name_seen_before_gets_its_own_key() {
    let root = tempfile::tempdir().unwrap();
    let (inbox, out) = (root.path().join("inbox"), root.path().join("out"));
    batch(&inbox, "cam", &[("a.png", b"first")]);
    run(&once(&inbox, &out), &counter(), &AtomicBool::new(false)).unwrap();
    batch(&inbox, "cam", &[("a.png", b"second"), ("b.png", b"x")]);
    let totals = run(&once(&inbox, &out), &counter(), &AtomicBool::new(false)).unwrap();
    assert_eq!(totals.done, 1);
    assert_eq!(std::fs::read(inbox.join("done/cam/a.png")).unwrap(), b"first");
    assert_eq!(std::fs::read_to_string(out.join("cam/count.txt")).unwrap(), "1");
    let moved: Vec<Entry> = journal(&out).into_iter().filter(|e| e.step == Step::Moved).collect();
    assert_eq!(moved.len(), 2);
    let key = format!("cam.{}", moved[1].token);
    assert_eq!(std::fs::read(inbox.join("done").join(&key).join("a.png")).unwrap(), b"second");
    assert_eq!(std::fs::read_to_string(out.join(&key).join("count.txt")).unwrap(), "2");
}

#[test]
fn a_stop_request_finishes_the_batch_in_hand_and_claims_no_more() {
    let root = tempfile::tempdir().unwrap();
    let (inbox, out) = (root.path().join("inbox"), root.path().join("out"));
    for name in ["a", "b", "c"] {
        batch(&inbox, name, &[("a.png", b"1")]);
    }
    let mut c = once(&inbox, &out);
    c.once = false;
    c.jobs = 1;
    let stop = AtomicBool::new(false);
    // The stop arrives while the first batch is being processed (as a SIGTERM would).
    let p = |batch: &Path, _: &Path| {
        stop.store(true, Ordering::Relaxed);
        std::thread::sleep(std::time::Duration::from_millis(300));
        Outcome::Done { summary: batch.display().to_string() }
    };
    let totals = run(&c, &p, &stop).unwrap();
    assert_eq!(totals.done, 1);
    assert!(inbox.join("done/a/a.png").is_file());
    assert!(inbox.join("b/a.png").is_file() && inbox.join("c/a.png").is_file());
}
