//! The watched drop folder of `facetcal watch`: a service that takes batch folders handed over
//! into an INBOX, processes each exactly once, and survives being killed at any moment.
//!
//! This crate owns the protocol and the bookkeeping, not the processing: a [`Processor`] (the
//! binary's calibration) turns a batch folder into files in an empty result folder and an
//! [`Outcome`]. The crate never deletes or changes an input file, never writes into a batch
//! folder, never follows a symbolic link, and writes only under OUT and INBOX's bookkeeping
//! folders (`.claimed`, `done`, `failed`).
//!
//! The life of a batch `NAME` (each step one atomic rename, each followed by a folder fsync
//! and a fsynced [`journal`] line):
//! 1. delivered: the producer renames a finished folder to `INBOX/NAME` (or uses a marker file,
//!    or the settle rule, see [`HandOver`]);
//! 2. claimed: `INBOX/NAME` is renamed to `INBOX/.claimed/HOST-PID/NAME`; only one service's
//!    rename can succeed;
//! 3. result written: the processor writes into `OUT/.staging/HOST-PID/NAME`, `outcome.json`
//!    (with the claim's token) is added, and the folder is renamed to `OUT/NAME`;
//! 4. moved: the batch is renamed to `INBOX/done/NAME` or `INBOX/failed/NAME` (with
//!    `INBOX/failed/NAME.reason.txt` written first).
//!
//! On start a service takes over the claims of dead services of its host: a batch without a
//! result is processed again, one with its result (same token) is only moved, and a move that
//! happened but is missing from the journal is journalled. A name that already has a result or
//! a finished batch gets the key `NAME.TOKEN` instead, so nothing is overwritten.
//!
//! ```no_run
//! use std::sync::atomic::AtomicBool;
//! use facetcal_watch::{Config, Outcome, run};
//! let config = Config::new("inbox".into(), "out".into());
//! let count = |batch: &std::path::Path, _results: &std::path::Path| {
//!     let n = std::fs::read_dir(batch).map(|d| d.count()).unwrap_or(0);
//!     if n > 0 { Outcome::Done { summary: format!("{n} files") } }
//!     else { Outcome::Failed { reason: "empty".into() } }
//! };
//! let totals = run(&config, &count, &AtomicBool::new(false)).unwrap();
//! println!("{} done, {} failed", totals.done, totals.failed);
//! ```
#![deny(missing_docs)]
// Library code never unwraps: every failure is a typed error or a batch's reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

pub mod files;
pub mod journal;
pub mod protocol;

use std::collections::{HashSet, VecDeque};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::mpsc;
use std::time::{Duration, Instant};

use serde::{Deserialize, Serialize};
use thiserror::Error;

pub use files::Owner;
pub use journal::{Entry, JOURNAL_FILE, Journal, Step};
pub use protocol::{HandOver, InputFile, is_ignored};

use files::{now_ms, sync_dir, write_atomic};
use protocol::{CLAIMED, DONE, FAILED, INCOMING};

/// The per-batch summary file in each result folder.
pub const OUTCOME_FILE: &str = "outcome.json";
/// The status file in OUT.
pub const STATUS_FILE: &str = "status.json";
const STAGING: &str = ".staging";

/// How the service runs.
#[derive(Clone, Debug)]
pub struct Config {
    /// The watched folder.
    pub inbox: PathBuf,
    /// Where result folders, the journal and the status file go.
    pub out: PathBuf,
    /// When a folder counts as delivered. Default: by rename.
    pub handover: HandOver,
    /// Batches processed at the same time. Default 1.
    pub jobs: usize,
    /// The listing is read again at least this often, events or not. Default 10 s.
    pub rescan: Duration,
    /// Use the polling event backend with this interval (network file systems). Default: the
    /// system's event backend.
    pub poll: Option<Duration>,
    /// Process what is ready at start, then return.
    pub once: bool,
    /// Write a one-line status to standard error after each change. Default: when standard
    /// error is a terminal.
    pub status_line: bool,
}

impl Config {
    /// The defaults for an INBOX and an OUT.
    pub fn new(inbox: PathBuf, out: PathBuf) -> Config {
        Config {
            inbox,
            out,
            handover: HandOver::default(),
            jobs: 1,
            rescan: Duration::from_secs(10),
            poll: None,
            once: false,
            status_line: std::io::stderr().is_terminal(),
        }
    }
}

/// What processing a batch came to.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Outcome {
    /// Processed: the batch goes to `done/`.
    Done {
        /// One line for the operator.
        summary: String,
    },
    /// Refused or unusable: the batch goes to `failed/` with this reason.
    Failed {
        /// Why, for the operator.
        reason: String,
    },
}

/// Turns one batch into results. Called from several threads at once.
pub trait Processor: Sync {
    /// Reads the batch folder `batch` (never changing it) and writes result files into the
    /// empty folder `results`. Must not panic; a panic is caught and fails the batch.
    fn process(&self, batch: &Path, results: &Path) -> Outcome;
}

impl<F: Fn(&Path, &Path) -> Outcome + Sync> Processor for F {
    fn process(&self, batch: &Path, results: &Path) -> Outcome {
        self(batch, results)
    }
}

/// Why the service stopped or could not start.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum WatchError {
    /// INBOX is missing or not a folder.
    #[error("{} is not a folder", path.display())]
    NoInbox {
        /// The path given.
        path: PathBuf,
    },
    /// A folder or file of the service's own cannot be created, read or written.
    #[error("{what} {}: {source}", path.display())]
    Io {
        /// What was being done.
        what: &'static str,
        /// The path.
        path: PathBuf,
        /// The system's error.
        source: std::io::Error,
    },
}

fn io(what: &'static str, path: &Path) -> impl FnOnce(std::io::Error) -> WatchError {
    let path = path.to_path_buf();
    move |source| WatchError::Io { what, path, source }
}

/// Counts of one service run.
#[derive(Clone, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Totals {
    /// Batches moved to `done/`.
    pub done: usize,
    /// Batches moved to `failed/`.
    pub failed: usize,
    /// Batches whose bookkeeping failed (left claimed for the next start).
    pub errors: usize,
}

/// The contents of the per-batch `outcome.json`.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct OutcomeFile {
    /// `"facetcal-watch-outcome"`.
    pub format: String,
    /// 1.
    pub version: u32,
    /// The batch's folder name as delivered.
    pub batch: String,
    /// The claim's token (also in the journal).
    pub token: String,
    /// `done` or `failed`.
    pub outcome: String,
    /// The operator's line: a summary or the reason.
    pub message: String,
    /// The batch's files when processed.
    pub inputs: Vec<InputFile>,
    /// When the result was written, milliseconds since the Unix epoch.
    pub time_ms: u64,
}

impl OutcomeFile {
    /// Reads `DIR/outcome.json`; `None` if missing or not one.
    pub fn read(dir: &Path) -> Option<OutcomeFile> {
        let text = std::fs::read(dir.join(OUTCOME_FILE)).ok()?;
        serde_json::from_slice::<OutcomeFile>(&text)
            .ok()
            .filter(|f| f.format == "facetcal-watch-outcome")
    }
}

/// The contents of `OUT/status.json`, rewritten atomically after every change.
#[derive(Clone, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Status {
    /// `"facetcal-watch-status"`.
    pub format: String,
    /// 1.
    pub version: u32,
    /// The service (`HOST-PID`).
    pub owner: String,
    /// Ready batches not yet claimed, at the last look.
    pub queued: usize,
    /// Folders waiting for their marker or to settle.
    pub waiting: usize,
    /// Batches in hand.
    pub running: usize,
    /// Finished by this service since it started.
    pub done: usize,
    /// Refused by this service since it started.
    pub failed: usize,
    /// Bookkeeping failures since it started.
    pub errors: usize,
    /// The last batch finished, and how.
    pub last_batch: Option<String>,
    /// `done` or `failed`.
    pub last_outcome: Option<String>,
    /// `running`, `stopping` or `stopped`.
    pub state: String,
    /// When written, milliseconds since the Unix epoch.
    pub time_ms: u64,
}

struct Ctx<'a> {
    config: &'a Config,
    owner: Owner,
    claim_dir: PathBuf,
    staging_dir: PathBuf,
    journal: Journal,
    processor: &'a dyn Processor,
    counter: AtomicU64,
}

struct Job {
    name: String,
    token: String,
}

enum Msg {
    Wake,
    Finished(String, Result<bool, String>),
}

impl Ctx<'_> {
    fn log(
        &self,
        step: Step,
        batch: &str,
        token: &str,
        detail: Option<String>,
    ) -> Result<(), String> {
        let e = Entry {
            time_ms: now_ms(),
            owner: self.owner.to_string(),
            step,
            batch: batch.to_string(),
            token: token.to_string(),
            detail,
        };
        self.journal.append(&e).map_err(|e| format!("cannot write the journal: {e}"))
    }

    fn new_token(&self) -> String {
        let n = self.counter.fetch_add(1, Ordering::Relaxed);
        format!("{}-{}-{n}", self.owner, now_ms())
    }

    /// Renames `INBOX/NAME` into our claim folder; `None` when another service was first (or the
    /// producer took it back).
    fn claim(&self, name: &str) -> Result<Option<Job>, String> {
        let from = self.config.inbox.join(name);
        let to = self.claim_dir.join(name);
        if to.symlink_metadata().is_ok() {
            return Err(format!("{} is already claimed by this service", to.display()));
        }
        match std::fs::rename(&from, &to) {
            Ok(()) => {}
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(None),
            Err(e) => return Err(format!("cannot claim {}: {e}", from.display())),
        }
        let sync = sync_dir(&self.claim_dir).and_then(|_| sync_dir(&self.config.inbox));
        sync.map_err(|e| format!("cannot sync the claim of {name}: {e}"))?;
        let job = Job { name: name.to_string(), token: self.new_token() };
        self.log(Step::Claimed, name, &job.token, None)?;
        Ok(Some(job))
    }

    fn finished_exists(&self, key: &str) -> bool {
        [DONE, FAILED]
            .iter()
            .any(|d| self.config.inbox.join(d).join(key).symlink_metadata().is_ok())
    }

    /// The key of a job's result folder and finished name: the batch name, or `NAME.TOKEN`
    /// when the name is taken by another claim. `Some(outcome)` when the result already exists.
    fn key_of(&self, job: &Job) -> (String, Option<OutcomeFile>) {
        let out = &self.config.out;
        let alt = format!("{}.{}", job.name, job.token);
        for key in [&job.name, &alt] {
            if let Some(f) = OutcomeFile::read(&out.join(key)).filter(|f| f.token == job.token) {
                return (key.clone(), Some(f));
            }
        }
        let taken =
            out.join(&job.name).symlink_metadata().is_ok() || self.finished_exists(&job.name);
        if taken {
            tracing::warn!("a batch named {} was seen before: its results go to {alt}", job.name);
            (alt, None)
        } else {
            (job.name.clone(), None)
        }
    }

    /// Processes (or resumes) one claimed batch to its end; `Ok(true)` for done.
    fn finish(&self, job: &Job) -> Result<bool, String> {
        let batch = self.claim_dir.join(&job.name);
        let (key, existing) = self.key_of(job);
        let outcome = match existing {
            Some(f) => {
                self.log(Step::ResultWritten, &job.name, &job.token, Some(f.outcome.clone()))?;
                f
            }
            None => self.write_result(job, &batch, &key)?,
        };
        let done = outcome.outcome == "done";
        let dest_dir = self.config.inbox.join(if done { DONE } else { FAILED });
        if !done {
            let reason = dest_dir.join(format!("{key}.reason.txt"));
            write_atomic(&reason, format!("{}\n", outcome.message).as_bytes())
                .map_err(|e| format!("cannot write {}: {e}", reason.display()))?;
        }
        let dest = dest_dir.join(&key);
        if dest.symlink_metadata().is_ok() {
            return Err(format!("{} exists already", dest.display()));
        }
        std::fs::rename(&batch, &dest)
            .and_then(|_| sync_dir(&dest_dir))
            .and_then(|_| sync_dir(&self.claim_dir))
            .map_err(|e| format!("cannot move {} to {}: {e}", batch.display(), dest.display()))?;
        self.log(Step::Moved, &job.name, &job.token, Some(outcome.outcome.clone()))?;
        Ok(done)
    }

    fn write_result(&self, job: &Job, batch: &Path, key: &str) -> Result<OutcomeFile, String> {
        let staging = self.staging_dir.join(&job.name);
        if staging.symlink_metadata().is_ok() {
            std::fs::remove_dir_all(&staging)
                .map_err(|e| format!("cannot clear {}: {e}", staging.display()))?;
        }
        std::fs::create_dir(&staging)
            .map_err(|e| format!("cannot create {}: {e}", staging.display()))?;
        let (outcome, inputs) = match protocol::inventory(batch) {
            Err(reason) => (Outcome::Failed { reason }, Vec::new()),
            Ok(inputs) => {
                let run = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                    self.processor.process(batch, &staging)
                }));
                let outcome = run.unwrap_or_else(|_| Outcome::Failed {
                    reason: "internal error while processing (please report it)".into(),
                });
                (outcome, inputs)
            }
        };
        let (word, message) = match outcome {
            Outcome::Done { summary } => ("done", summary),
            Outcome::Failed { reason } => ("failed", reason),
        };
        let file = OutcomeFile {
            format: "facetcal-watch-outcome".into(),
            version: 1,
            batch: job.name.clone(),
            token: job.token.clone(),
            outcome: word.into(),
            message,
            inputs,
            time_ms: now_ms(),
        };
        let fail = |e: std::io::Error| format!("cannot write the result of {}: {e}", job.name);
        if word == "failed" {
            write_atomic(&staging.join("reason.txt"), format!("{}\n", file.message).as_bytes())
                .map_err(fail)?;
        }
        let json = serde_json::to_string_pretty(&file).map_err(|e| e.to_string())?;
        write_atomic(&staging.join(OUTCOME_FILE), format!("{json}\n").as_bytes()).map_err(fail)?;
        // The processor's files are fsynced too: the rename below must not publish a folder
        // whose contents a power cut could still lose.
        for e in std::fs::read_dir(&staging).map_err(fail)? {
            let p = e.map_err(fail)?.path();
            if p.is_file() {
                std::fs::File::open(&p).and_then(|f| f.sync_all()).map_err(fail)?;
            }
        }
        sync_dir(&staging).map_err(fail)?;
        let dest = self.config.out.join(key);
        std::fs::rename(&staging, &dest)
            .and_then(|_| sync_dir(&self.config.out))
            .and_then(|_| sync_dir(&self.staging_dir))
            .map_err(|e| format!("cannot publish {}: {e}", dest.display()))?;
        self.log(Step::ResultWritten, &job.name, &job.token, Some(word.into()))?;
        Ok(file)
    }

    /// Takes over the claims of dead services of this host (and of an earlier process with our
    /// pid), and journals moves that a crash kept out of the journal.
    fn recover(&self) -> Result<Vec<Job>, WatchError> {
        let config = self.config;
        let claimed_root = config.inbox.join(CLAIMED);
        let entries =
            Journal::read(self.journal.path()).map_err(io("cannot read", self.journal.path()))?;
        let mut moved: HashSet<&str> = HashSet::new();
        for e in &entries {
            if e.step == Step::Moved {
                moved.insert(&e.token);
            }
        }
        let mut jobs = Vec::new();
        let mut dead_owners = HashSet::new();
        let owners = std::fs::read_dir(&claimed_root).map_err(io("cannot read", &claimed_root))?;
        for owner_entry in owners {
            let owner_entry = owner_entry.map_err(io("cannot read", &claimed_root))?;
            let owner_name = owner_entry.file_name().to_string_lossy().into_owned();
            let Some(owner) = Owner::parse(&owner_name) else { continue };
            let earlier_self = owner == self.owner;
            if !earlier_self && owner.may_be_alive() {
                continue;
            }
            dead_owners.insert(owner_name.clone());
            let dir = owner_entry.path();
            for b in std::fs::read_dir(&dir).map_err(io("cannot read", &dir))? {
                let b = b.map_err(io("cannot read", &dir))?;
                let Some(name) = b.file_name().to_str().map(str::to_string) else { continue };
                // Our own folder also holds what was just taken over from the others.
                if jobs.iter().any(|j: &Job| j.name == name) {
                    continue;
                }
                if !earlier_self {
                    let to = self.claim_dir.join(&name);
                    if to.symlink_metadata().is_ok() || std::fs::rename(b.path(), &to).is_err() {
                        continue;
                    }
                }
                // The token of the open claim, if its line made it into the journal.
                let token = entries
                    .iter()
                    .rev()
                    .find(|e| {
                        e.batch == name
                            && e.owner == owner_name
                            && matches!(e.step, Step::Claimed | Step::Recovered)
                            && !moved.contains(e.token.as_str())
                    })
                    .map(|e| e.token.clone())
                    .unwrap_or_else(|| self.new_token());
                let job = Job { name, token };
                self.log(Step::Recovered, &job.name, &job.token, Some(owner_name.clone()))
                    .map_err(|e| WatchError::Io {
                        what: "cannot journal",
                        path: self.journal.path().to_path_buf(),
                        source: std::io::Error::other(e),
                    })?;
                jobs.push(job);
            }
            sync_dir(&self.claim_dir).map_err(io("cannot sync", &self.claim_dir))?;
            if !earlier_self {
                let _ = std::fs::remove_dir(&dir);
                let _ = std::fs::remove_dir_all(config.out.join(STAGING).join(&owner_name));
            }
        }
        // Moves of dead owners that happened but were not journalled.
        let open: HashSet<&str> = jobs.iter().map(|j| j.token.as_str()).collect();
        for e in &entries {
            let claim = matches!(e.step, Step::Claimed | Step::Recovered);
            if !claim || moved.contains(e.token.as_str()) || open.contains(e.token.as_str()) {
                continue;
            }
            let dead = Owner::parse(&e.owner).is_some_and(|o| o == self.owner || !o.may_be_alive());
            if !dead {
                continue;
            }
            for key in [e.batch.clone(), format!("{}.{}", e.batch, e.token)] {
                let Some(f) = OutcomeFile::read(&config.out.join(&key)) else { continue };
                let dir = if f.outcome == "done" { DONE } else { FAILED };
                if f.token == e.token
                    && config.inbox.join(dir).join(&key).symlink_metadata().is_ok()
                {
                    let r = self.log(Step::Moved, &e.batch, &e.token, Some(f.outcome.clone()));
                    r.map_err(|m| WatchError::Io {
                        what: "cannot journal",
                        path: self.journal.path().to_path_buf(),
                        source: std::io::Error::other(m),
                    })?;
                    moved.insert(&e.token);
                    break;
                }
            }
        }
        Ok(jobs)
    }
}

fn start_watcher(config: &Config, tx: mpsc::Sender<Msg>) -> Option<Box<dyn notify::Watcher>> {
    use notify::Watcher;
    // Events only wake the loop; what happened is read from the listing, so every event, an
    // overflow and an error alike, is one wake-up.
    let handler = move |_: notify::Result<notify::Event>| {
        let _ = tx.send(Msg::Wake);
    };
    let made: notify::Result<Box<dyn Watcher>> = match config.poll {
        Some(interval) => notify::PollWatcher::new(
            handler,
            notify::Config::default().with_poll_interval(interval),
        )
        .map(|w| Box::new(w) as Box<dyn Watcher>),
        None => notify::recommended_watcher(handler).map(|w| Box::new(w) as Box<dyn Watcher>),
    };
    match made {
        Ok(mut w) => match w.watch(&config.inbox, notify::RecursiveMode::NonRecursive) {
            Ok(()) => Some(w),
            Err(e) => {
                tracing::warn!("no file events ({e}); the listing is read every rescan interval");
                None
            }
        },
        Err(e) => {
            tracing::warn!("no file events ({e}); the listing is read every rescan interval");
            None
        }
    }
}

fn create(dir: &Path) -> Result<(), WatchError> {
    std::fs::create_dir_all(dir).map_err(io("cannot create", dir))
}

/// Runs the service until `stop` is set (then the batches in hand are finished) or, with
/// [`Config::once`], until nothing ready is left.
pub fn run(
    config: &Config,
    processor: &dyn Processor,
    stop: &AtomicBool,
) -> Result<Totals, WatchError> {
    if !config.inbox.is_dir() {
        return Err(WatchError::NoInbox { path: config.inbox.clone() });
    }
    let owner = Owner::current();
    for d in [CLAIMED, DONE, FAILED, INCOMING] {
        create(&config.inbox.join(d))?;
    }
    let claim_dir = config.inbox.join(CLAIMED).join(owner.to_string());
    let staging_dir = config.out.join(STAGING).join(owner.to_string());
    create(&claim_dir)?;
    // Leftovers of an earlier process with our pid are ours to clear.
    let _ = std::fs::remove_dir_all(&staging_dir);
    create(&staging_dir)?;
    let journal_path = config.out.join(JOURNAL_FILE);
    let journal = Journal::open(&journal_path).map_err(io("cannot open", &journal_path))?;
    let ctx = Ctx {
        config,
        owner,
        claim_dir,
        staging_dir,
        journal,
        processor,
        counter: AtomicU64::new(0),
    };
    let mut pending: VecDeque<Job> = ctx.recover()?.into();

    let (tx, rx) = mpsc::channel::<Msg>();
    let _watcher = if config.once { None } else { start_watcher(config, tx.clone()) };
    let jobs = config.jobs.max(1);
    let mut status = Status {
        format: "facetcal-watch-status".into(),
        version: 1,
        owner: ctx.owner.to_string(),
        state: "running".into(),
        ..Status::default()
    };
    let mut totals = Totals::default();
    let mut settle = protocol::SettleState::default();
    let mut last = None;
    let ctx = &ctx;
    std::thread::scope(|s| -> Result<(), WatchError> {
        let mut running = 0usize;
        let mut ready: VecDeque<String> = VecDeque::new();
        let mut look = true;
        let mut next_rescan = Instant::now();
        let mut next_settle: Option<Instant> = None;
        loop {
            let stopping = stop.load(Ordering::Relaxed);
            let now = Instant::now();
            if !stopping && (look || now >= next_rescan || next_settle.is_some_and(|t| now >= t)) {
                let scan = protocol::scan(&config.inbox, &config.handover, &mut settle)
                    .map_err(io("cannot read", &config.inbox))?;
                ready = scan.ready.into();
                status.waiting = scan.waiting;
                next_settle = scan.next_settle.map(|d| now + d);
                next_rescan = now + config.rescan;
                look = false;
            }
            while !stopping && running < jobs {
                let job = match pending.pop_front() {
                    Some(j) => j,
                    None => {
                        let Some(name) = ready.pop_front() else { break };
                        match ctx.claim(&name) {
                            Ok(Some(j)) => j,
                            Ok(None) => continue,
                            Err(e) => {
                                tracing::error!("{e}");
                                totals.errors += 1;
                                continue;
                            }
                        }
                    }
                };
                running += 1;
                let tx = tx.clone();
                s.spawn(move || {
                    let r = ctx.finish(&job);
                    let _ = tx.send(Msg::Finished(job.name, r));
                });
            }
            status.queued = ready.len();
            status.running = running;
            status.state = if stopping { "stopping".into() } else { "running".into() };
            publish(config, &mut status, &totals, &mut last);
            if running == 0 && (stopping || (config.once && ready.is_empty() && pending.is_empty()))
            {
                break;
            }
            let wait = next_rescan.saturating_duration_since(Instant::now());
            let wait = next_settle
                .map_or(wait, |t| wait.min(t.saturating_duration_since(Instant::now())))
                .min(Duration::from_millis(200));
            let mut msgs: Vec<Msg> = rx.recv_timeout(wait).into_iter().collect();
            msgs.extend(rx.try_iter());
            for m in msgs {
                match m {
                    Msg::Wake => look = true,
                    Msg::Finished(name, r) => {
                        running -= 1;
                        look = true;
                        match r {
                            Ok(done) => {
                                if done {
                                    totals.done += 1
                                } else {
                                    totals.failed += 1
                                }
                                status.last_batch = Some(name);
                                status.last_outcome =
                                    Some(if done { "done" } else { "failed" }.into());
                            }
                            Err(e) => {
                                tracing::error!(
                                    "batch {name}: {e} (left claimed for the next start)"
                                );
                                totals.errors += 1;
                            }
                        }
                    }
                }
            }
        }
        Ok(())
    })?;
    status.state = "stopped".into();
    status.running = 0;
    publish(config, &mut status, &totals, &mut last);
    if config.status_line {
        eprintln!();
    }
    Ok(totals)
}

/// Writes the status file and line when anything but the time changed since `last`.
fn publish(config: &Config, status: &mut Status, totals: &Totals, last: &mut Option<Status>) {
    status.done = totals.done;
    status.failed = totals.failed;
    status.errors = totals.errors;
    status.time_ms = 0;
    if last.as_ref() == Some(status) {
        return;
    }
    *last = Some(status.clone());
    status.time_ms = now_ms();
    if let Ok(json) = serde_json::to_string_pretty(&*status) {
        if let Err(e) = write_atomic(&config.out.join(STATUS_FILE), format!("{json}\n").as_bytes())
        {
            tracing::warn!("cannot write the status file: {e}");
        }
    }
    if config.status_line {
        eprint!(
            "\r\x1b[Kqueued {} waiting {} running {} done {} failed {}{}",
            status.queued,
            status.waiting,
            status.running,
            status.done,
            status.failed,
            status.last_batch.as_ref().map_or(String::new(), |b| format!(" last {b}"))
        );
    }
}
