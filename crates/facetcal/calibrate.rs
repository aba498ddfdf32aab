//! `facetcal calibrate DIR --target FILE --out OUTDIR`: every image of a folder to
//! `calibration.json` (format `facetcal-calibration`) and `report.html`.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;
use clap::{Args, ValueEnum};
use facetcal_detector::Encoding;
use facetcal_imageio::{DecodeLimits, LoadOptions};
use facetcal_model::files::{InputRecord, ViewStatus};
use facetcal_model::{DistortionKind, PatternKind, Target};
use facetcal_pipeline::{CalibrationRun, PipelineError, Settings, calibrate_records, list_images};
use facetcal_solver::{Loss, Options};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

use crate::{exit, output};

#[derive(Args, Debug)]
pub struct CalibrateArgs {
    /// Folder of images of the target (PNG, JPEG, TIFF, BMP, GIF; 8 or 16 bit).
    dir: PathBuf,
    /// The target file.
    #[arg(long)]
    target: PathBuf,
    /// Output folder for calibration.json and report.html (created if missing).
    #[arg(long)]
    out: PathBuf,
    #[command(flatten)]
    options: CalibrationOptions,
    /// Print the result file on standard output (the human summary goes to standard error).
    #[arg(long)]
    json: bool,
    /// Replace an existing calibration.json and report.html in OUTDIR.
    #[arg(long)]
    force: bool,
}

/// The model, solver and verdict options shared by every command that calibrates.
#[derive(Args, Debug, Clone)]
pub struct CalibrationOptions {
    /// Lens distortion model.
    #[arg(long, value_enum, default_value_t = ModelArg::BrownConrady)]
    model: ModelArg,
    /// Also estimate these (comma-separated): skew, k3, tangential.
    #[arg(long, value_enum, value_delimiter = ',')]
    estimate: Vec<ExtraArg>,
    /// Hold these at their conventional values (comma-separated): aspect-ratio (fy = fx),
    /// principal-point (the image centre).
    #[arg(long, value_enum, value_delimiter = ',')]
    hold: Vec<HoldArg>,
    /// Also estimate the poses of faces 2..n relative to face 1 (target self-survey).
    #[arg(long)]
    survey_faces: bool,
    #[command(flatten)]
    robust: RobustOptions,
    /// Verdict: largest RMS reprojection error, pixels.
    #[arg(long, default_value_t = 1.0)]
    max_rms: f64,
    /// Verdict: smallest share of the image's 12 x 9 cells that hold points (0 to 1).
    #[arg(long, default_value_t = 0.25)]
    min_coverage: f64,
    /// Verdict: fewest images used (default 1 for a target off one plane, 3 for a flat one).
    #[arg(long)]
    min_images: Option<usize>,
    /// Refuse images with more pixels than this (decompression bombs).
    #[arg(long, default_value_t = DecodeLimits::default().max_pixels)]
    max_pixels: u64,
    #[command(flatten)]
    encoding: EncodingArg,
}

#[derive(Clone, Copy, Debug, ValueEnum)]
enum ModelArg {
    /// Pinhole, no distortion.
    None,
    /// Radial k1, k2 (k3 with --estimate k3), tangential p1, p2 with --estimate tangential.
    BrownConrady,
    /// Equidistant fisheye, k1..k4.
    KannalaBrandt,
}

#[derive(Clone, Copy, Debug, PartialEq, ValueEnum)]
enum ExtraArg {
    Skew,
    K3,
    Tangential,
}

#[derive(Clone, Copy, Debug, PartialEq, ValueEnum)]
enum HoldArg {
    AspectRatio,
    PrincipalPoint,
}

/// The robust loss and outlier rejection (shared with `facetcal solve`).
#[derive(Args, Debug, Clone)]
pub struct RobustOptions {
    /// Robust loss on each point's residual length.
    #[arg(long, value_enum, default_value_t = LossArg::Huber)]
    loss: LossArg,
    /// Scale of the robust loss, pixels.
    #[arg(long, default_value_t = 2.0)]
    loss_scale: f64,
    /// Keep every point (no outlier rejection).
    #[arg(long)]
    keep_all: bool,
}

#[derive(Clone, Copy, Debug, ValueEnum)]
enum LossArg {
    /// Plain least squares.
    Squared,
    /// Huber's loss.
    Huber,
    /// Cauchy's loss.
    Cauchy,
}

impl RobustOptions {
    /// Sets the loss and the outlier test of solver options.
    pub fn apply(&self, options: &mut Options) {
        options.loss = match self.loss {
            LossArg::Squared => Loss::Squared,
            LossArg::Huber => Loss::Huber { scale_px: self.loss_scale },
            LossArg::Cauchy => Loss::Cauchy { scale_px: self.loss_scale },
        };
        options.reject_sigmas = if self.keep_all { 0.0 } else { Options::default().reject_sigmas };
    }
}

const RESULT: &str = "calibration.json";
const REPORT: &str = "report.html";

/// The pipeline's settings for these options; a usage error when a threshold is out of range.
pub fn settings(args: &CalibrationOptions) -> anyhow::Result<Settings> {
    if !(args.max_rms > 0.0 && (0.0..=1.0).contains(&args.min_coverage)) {
        return Err(exit::coded(
            exit::USAGE,
            "--max-rms must be positive and --min-coverage between 0 and 1",
        ));
    }
    let mut s = Settings {
        model: match args.model {
            ModelArg::None => DistortionKind::None,
            ModelArg::BrownConrady => DistortionKind::BrownConrady,
            ModelArg::KannalaBrandt => DistortionKind::KannalaBrandt,
        },
        solver: Options { survey_faces: args.survey_faces, ..Options::default() },
        load: LoadOptions {
            limits: DecodeLimits { max_pixels: args.max_pixels, ..DecodeLimits::default() },
            ..LoadOptions::default()
        },
        ..Settings::default()
    };
    args.robust.apply(&mut s.solver);
    let free = &mut s.solver.free;
    free.skew = args.estimate.contains(&ExtraArg::Skew);
    free.k3 = args.estimate.contains(&ExtraArg::K3);
    free.tangential = args.estimate.contains(&ExtraArg::Tangential);
    free.aspect_ratio = !args.hold.contains(&HoldArg::AspectRatio);
    free.principal_point = !args.hold.contains(&HoldArg::PrincipalPoint);
    s.gate.max_rms_px = args.max_rms;
    s.gate.min_coverage = args.min_coverage;
    s.gate.min_used_images = args.min_images;
    s.detector.encoding = args.encoding.encoding();
    Ok(s)
}

/// The `--encoding` option of every command that detects.
#[derive(Args, Debug, Clone)]
pub struct EncodingArg {
    /// How the images' grey levels encode light: linear (default: raw data, most
    /// machine-vision cameras), srgb (most consumer cameras and phones), or gamma=G (stored
    /// level linear^(1/G)). Square outlines move with an undeclared encoding; a target with
    /// squares read without this option gets a note.
    #[arg(long, value_name = "ENCODING")]
    encoding: Option<Encoding>,
}

impl EncodingArg {
    /// The encoding to read the images with: the declared one, else linear.
    pub fn encoding(&self) -> Encoding {
        self.encoding.unwrap_or_default()
    }

    /// Square outlines move with an undeclared encoding (about 0.5 px for sRGB-like files), so
    /// a target with squares and no `--encoding` gets a note on standard error.
    pub fn note(&self, target: &Target) {
        if self.encoding.is_none() && target.pattern_kinds().contains(&PatternKind::SquareGrid) {
            eprintln!(
                "note: the target has squares and no --encoding was given, so the images are \
                 read as linear; for sRGB files (most consumer cameras and phones) pass \
                 --encoding srgb, or square corners move by about half a pixel"
            );
        }
    }
}

impl CalibrationOptions {
    /// The `--encoding` option.
    pub fn encoding(&self) -> &EncodingArg {
        &self.encoding
    }
}

/// Reads and checks a target file; its hash goes into every result.
pub fn load_target(path: &Path) -> anyhow::Result<(Target, InputRecord)> {
    // The input errors name the file themselves.
    let bytes = facetcal_inputs::read_capped(path, facetcal_inputs::MAX_JSON_BYTES)
        .context("target file")?;
    let text = facetcal_inputs::text_from_bytes(path, bytes.clone()).context("target file")?;
    let target = Target::from_json(&text)
        .map_err(|e| exit::coded(exit::DATA, format!("target file {}: {e}", path.display())))?;
    let record = InputRecord {
        path: path.display().to_string(),
        sha256: facetcal_imageio::sha256_hex(&bytes),
    };
    Ok((target, record))
}

/// The program name written into results.
pub fn program() -> String {
    format!("facetcal {}", env!("CARGO_PKG_VERSION"))
}

/// Writes `calibration.json` and `report.html` of a run into `out` (created if missing); returns
/// the result file's text.
pub fn write_results(
    run: &CalibrationRun,
    title: &str,
    out: &Path,
    force: bool,
) -> anyhow::Result<String> {
    let json = run.file.to_json().map_err(|e| {
        exit::coded(exit::SOFTWARE, format!("refusing to write a non-finite result: {e}"))
    })?;
    let html = facetcal_report::calibration_html(title, &run.file, &run.observations);
    output::create_dir(out)?;
    output::write_new(&out.join(RESULT), format!("{json}\n").as_bytes(), force)?;
    output::write_new(&out.join(REPORT), html.as_bytes(), force)?;
    Ok(json)
}

/// Refuses to replace an existing output unless `--force` was given (exit 73).
pub(crate) fn check_free(path: &Path, force: bool) -> anyhow::Result<()> {
    if !force && path.exists() {
        return Err(exit::coded(
            exit::CANT_CREATE,
            format!("{} already exists (use --force to replace it)", path.display()),
        ));
    }
    Ok(())
}

fn progress_bar(len: usize) -> ProgressBar {
    let bar = ProgressBar::with_draw_target(Some(len as u64), ProgressDrawTarget::stderr());
    if !std::io::stderr().is_terminal() {
        bar.set_draw_target(ProgressDrawTarget::hidden());
    }
    if let Ok(style) = ProgressStyle::with_template("{bar:40} {pos}/{len} images {msg}") {
        bar.set_style(style);
    }
    bar
}

pub fn run(args: CalibrateArgs) -> anyhow::Result<ExitCode> {
    let settings = settings(&args.options)?;
    let (target, target_record) = load_target(&args.target)?;
    args.options.encoding().note(&target);
    if !args.dir.is_dir() {
        return Err(exit::coded(
            exit::NO_INPUT,
            format!("{} is not a folder of images", args.dir.display()),
        ));
    }
    let (paths, skipped) = list_images(&args.dir).map_err(|e| match e {
        PipelineError::Folder { .. } => exit::coded(exit::NO_INPUT, e.to_string()),
        e => anyhow::Error::new(e),
    })?;
    let result_path = args.out.join(RESULT);
    let report_path = args.out.join(REPORT);
    check_free(&result_path, args.force)?;
    check_free(&report_path, args.force)?;
    for s in &skipped {
        eprintln!("skipped {}: {}", s.path.display(), s.reason);
    }
    if paths.is_empty() {
        return Err(exit::coded(
            exit::DATA,
            format!("no image files in {} (png, jpg, tif, bmp, gif)", args.dir.display()),
        ));
    }
    let bar = progress_bar(paths.len());
    let records =
        facetcal_pipeline::observe_images_par(&paths, &target, &settings, &|_| bar.inc(1));
    bar.finish_and_clear();
    for r in &records {
        if let Err(f) = &r.outcome {
            eprintln!("left out {} ({}): {}", r.name, f.stage, f.message);
        }
    }
    let run = calibrate_records(&records, &target, target_record, &program(), &settings)
        .map_err(|e| exit::coded(exit::DATA, format!("{}: {e}", args.dir.display())))?;
    let title = format!("Calibration of {}", args.dir.display());
    let json = write_results(&run, &title, &args.out, args.force)?;
    let summary = human_summary(&run.file, &result_path, &report_path);
    if args.json {
        println!("{json}");
        eprint!("{summary}");
    } else {
        print!("{summary}");
    }
    let passed = run.file.verdict.as_ref().is_some_and(|v| v.passed);
    Ok(if passed { ExitCode::SUCCESS } else { ExitCode::from(exit::DATA) })
}

fn human_summary(
    file: &facetcal_model::files::CalibrationFile,
    result: &Path,
    report: &Path,
) -> String {
    use std::fmt::Write;
    let mut o = String::new();
    let used = file.views.iter().filter(|v| v.status == ViewStatus::Used).count();
    let _ = writeln!(
        o,
        "{used} of {} images used, {} model, RMS reprojection error {:.3} px",
        file.views.len(),
        file.camera.distortion.kind().name(),
        file.rms_px
    );
    for p in &file.parameters {
        if let Some(sd) = p.std_dev {
            let _ = writeln!(o, "  {:<5} {:>14.6} +- {:.2e}", p.name, p.value, sd);
        }
    }
    for w in &file.warnings {
        let _ = writeln!(o, "warning: {}", w.message);
    }
    if let Some(v) = &file.verdict {
        let failed: Vec<String> = v
            .checks
            .iter()
            .filter(|c| !c.passed)
            .map(|c| format!("{} {:.4} (limit {} {})", c.name, c.value, c.bound, c.limit))
            .collect();
        if v.passed {
            let _ = writeln!(o, "verdict: every check passed");
        } else {
            let _ = writeln!(o, "verdict: FAILED: {}", failed.join(", "));
        }
    }
    let _ = writeln!(o, "wrote {} and {}", result.display(), report.display());
    let _ = writeln!(
        o,
        "Validate this calibration yourself before using it where an error can hurt someone."
    );
    o
}
