//! `facetcal watch INBOX --target FILE --out OUT`: the end-of-line service. Every batch folder
//! handed over into INBOX is calibrated once into `OUT/NAME/`; the protocol, the journal and the
//! recovery live in the `facetcal-watch` crate, this module only calibrates one batch.

use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::sync::Arc;
use std::sync::atomic::AtomicBool;
use std::time::Duration;

use clap::Args;
use facetcal_model::Target;
use facetcal_model::files::{InputRecord, ViewStatus};
use facetcal_pipeline::{Settings, calibrate_records, list_images, observe_images_par};
use facetcal_watch::{Config, HandOver, Outcome, Processor, WatchError};

use crate::calibrate::{CalibrationOptions, load_target, program, settings, write_results};
use crate::exit;

#[derive(Args, Debug)]
pub struct WatchArgs {
    /// The drop folder: one subfolder of images per batch, handed over by renaming it in.
    inbox: PathBuf,
    /// The target file.
    #[arg(long)]
    target: PathBuf,
    /// Results (one folder per batch), the journal and status.json (created if missing).
    #[arg(long)]
    out: PathBuf,
    #[command(flatten)]
    options: CalibrationOptions,
    /// Batches calibrated at the same time (default: the number of processors).
    #[arg(long)]
    jobs: Option<usize>,
    /// A folder is ready only once it holds a file of this name, written last (e.g. READY).
    #[arg(long, value_name = "NAME")]
    marker: Option<String>,
    /// Also take a folder whose listing has not changed for this many seconds (last resort).
    #[arg(long, value_name = "SECONDS")]
    settle: Option<f64>,
    /// Read the listing at least this often, seconds.
    #[arg(long, value_name = "SECONDS", default_value_t = 10.0)]
    rescan: f64,
    /// Look for changes by polling every SECONDS instead of file events (network file systems).
    #[arg(long, value_name = "SECONDS")]
    poll: Option<f64>,
    /// Process what is ready now, then exit.
    #[arg(long)]
    once: bool,
}

struct Calibrator {
    target: Target,
    target_record: InputRecord,
    settings: Settings,
}

impl Processor for Calibrator {
    fn process(&self, batch: &Path, results: &Path) -> Outcome {
        // Reasons name files inside the batch, not the claim folder they were read from.
        let shown = format!("{}/", batch.display());
        let failed = |reason: String| Outcome::Failed { reason: reason.replace(&shown, "") };
        let paths = match list_images(batch) {
            Ok((paths, _)) => paths,
            Err(e) => return failed(e.to_string()),
        };
        if paths.is_empty() {
            return failed("no image files (png, jpg, tif, bmp, gif)".into());
        }
        let records = observe_images_par(&paths, &self.target, &self.settings, &|_| {});
        let run = match calibrate_records(
            &records,
            &self.target,
            self.target_record.clone(),
            &program(),
            &self.settings,
        ) {
            Ok(r) => r,
            Err(e) => return failed(e.to_string()),
        };
        let name = batch.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
        if let Err(e) = write_results(&run, &format!("Calibration of {name}"), results, false) {
            return failed(format!("cannot write the results: {}", exit::chain(&e)));
        }
        let file = &run.file;
        let used = file.views.iter().filter(|v| v.status == ViewStatus::Used).count();
        let line = format!(
            "{used} of {} images used, RMS reprojection error {:.3} px",
            file.views.len(),
            file.rms_px
        );
        match &file.verdict {
            Some(v) if v.passed => Outcome::Done { summary: format!("{line}, verdict passed") },
            Some(v) => {
                let checks: Vec<String> = v
                    .checks
                    .iter()
                    .filter(|c| !c.passed)
                    .map(|c| format!("{} {:.4} (limit {} {})", c.name, c.value, c.bound, c.limit))
                    .collect();
                failed(format!("{line}, verdict failed: {}", checks.join(", ")))
            }
            None => failed(format!("{line}, no verdict")),
        }
    }
}

fn seconds(name: &str, s: f64) -> anyhow::Result<Duration> {
    Duration::try_from_secs_f64(s).ok().filter(|d| !d.is_zero()).ok_or_else(|| {
        exit::coded(exit::USAGE, format!("--{name} must be a positive number of seconds"))
    })
}

pub fn run(args: WatchArgs) -> anyhow::Result<ExitCode> {
    let settings = settings(&args.options)?;
    let (target, target_record) = load_target(&args.target)?;
    args.options.encoding().note(&target);
    if args.marker.as_deref().is_some_and(|m| m.is_empty() || m.contains('/')) {
        return Err(exit::coded(exit::USAGE, "--marker must be a plain file name"));
    }
    let mut config = Config::new(args.inbox.clone(), args.out.clone());
    config.handover = HandOver {
        marker: args.marker.clone(),
        settle: args.settle.map(|s| seconds("settle", s)).transpose()?,
    };
    config.jobs = match args.jobs {
        Some(0) => return Err(exit::coded(exit::USAGE, "--jobs must be at least 1")),
        Some(n) => n,
        None => std::thread::available_parallelism().map_or(1, |n| n.get()),
    };
    config.rescan = seconds("rescan", args.rescan)?;
    config.poll = args.poll.map(|s| seconds("poll", s)).transpose()?;
    config.once = args.once;
    if !args.inbox.is_dir() {
        return Err(exit::coded(
            exit::NO_INPUT,
            format!("{} is not a folder", args.inbox.display()),
        ));
    }

    // First SIGINT or SIGTERM: finish the batches in hand and exit 0. A second one exits at
    // once (75); the batches in hand stay claimed and the next start redoes them.
    let stop = Arc::new(AtomicBool::new(false));
    for sig in [signal_hook::consts::SIGINT, signal_hook::consts::SIGTERM] {
        signal_hook::flag::register_conditional_shutdown(sig, exit::TEMP_FAIL.into(), stop.clone())
            .and_then(|_| signal_hook::flag::register(sig, stop.clone()))
            .map_err(|e| exit::coded(exit::SOFTWARE, format!("cannot handle signals: {e}")))?;
    }

    let calibrator = Calibrator { target, target_record, settings };
    let totals = facetcal_watch::run(&config, &calibrator, &stop).map_err(|e| {
        let code = match &e {
            WatchError::NoInbox { .. } => exit::NO_INPUT,
            WatchError::Io { what, .. } if what.starts_with("cannot read") => exit::NO_INPUT,
            _ => exit::CANT_CREATE,
        };
        exit::coded(code, e.to_string())
    })?;
    if totals.errors > 0 {
        eprintln!(
            "{} batch(es) could not be finished and stay claimed for the next start (see the log)",
            totals.errors
        );
        return Ok(ExitCode::from(exit::TEMP_FAIL));
    }
    eprintln!("{} done, {} failed", totals.done, totals.failed);
    Ok(ExitCode::SUCCESS)
}
