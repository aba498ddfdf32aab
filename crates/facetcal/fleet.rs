//! `facetcal fleet ROOT --target FILE --out OUT`: every camera folder of ROOT calibrated in
//! parallel, judged against a spec, summarised in `fleet.json`, `fleet.csv` and `fleet.html`;
//! `--shard K/N` for one task of an array job, and `facetcal fleet merge` to combine shards.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;
use clap::{Args, Subcommand};
use facetcal_fleet::{CameraEntry, FleetFile, FleetHeader, FleetSpec, Shard, camera_entry};
use facetcal_model::Target;
use facetcal_model::files::{CalibrationFile, InputRecord};
use facetcal_pipeline::{Settings, calibrate_records, list_images};
use rayon::prelude::*;

use crate::calibrate::{
    CalibrationOptions, check_free, load_target, program, settings, write_results,
};
use crate::{exit, output};

#[derive(Args, Debug)]
#[command(args_conflicts_with_subcommands = true, subcommand_negates_reqs = true)]
pub struct FleetArgs {
    #[command(subcommand)]
    command: Option<FleetCommand>,
    /// Folder with one folder of images per camera (the folder name is the camera id).
    #[arg(required = true)]
    root: Option<PathBuf>,
    /// The target file.
    #[arg(long, required = true)]
    target: Option<PathBuf>,
    /// Output folder: one result folder per camera, fleet.json, fleet.csv, fleet.html.
    #[arg(long, required = true)]
    out: Option<PathBuf>,
    /// Spec file (format facetcal-fleet-spec): nominal intrinsics with tolerances, limits.
    #[arg(long)]
    spec: Option<PathBuf>,
    /// Calibrate only shard K of N (K from 0): cameras whose id's SHA-256 modulo N is K.
    #[arg(long)]
    shard: Option<Shard>,
    #[command(flatten)]
    options: CalibrationOptions,
    /// Replace existing results in OUT.
    #[arg(long)]
    force: bool,
}

#[derive(Subcommand, Debug)]
enum FleetCommand {
    /// Combine the outputs of every shard into the output a single run would have written.
    Merge(MergeArgs),
}

#[derive(Args, Debug)]
struct MergeArgs {
    /// The output folders of the shards.
    #[arg(required = true)]
    shards: Vec<PathBuf>,
    /// Output folder for the merged fleet.
    #[arg(long)]
    out: PathBuf,
    /// Replace existing results in OUT.
    #[arg(long)]
    force: bool,
}

const FLEET_JSON: &str = "fleet.json";
const FLEET_CSV: &str = "fleet.csv";
const FLEET_HTML: &str = "fleet.html";
const CAMERA_FILES: [&str; 2] = ["calibration.json", "report.html"];

fn load_spec(path: &Path) -> anyhow::Result<FleetSpec> {
    let text = facetcal_inputs::read_json_text(path)
        .with_context(|| format!("spec file {}", path.display()))?;
    FleetSpec::from_json(&text)
        .map_err(|e| exit::coded(exit::DATA, format!("spec file {}: {e}", path.display())))
}

/// The camera folders of ROOT, sorted by id; other entries are noted on standard error.
fn camera_folders(root: &Path) -> anyhow::Result<Vec<(String, PathBuf)>> {
    let entries = std::fs::read_dir(root)
        .map_err(|e| exit::coded(exit::NO_INPUT, format!("cannot read {}: {e}", root.display())))?;
    let mut cameras = Vec::new();
    for entry in entries {
        let path = entry
            .map_err(|e| {
                exit::coded(exit::NO_INPUT, format!("cannot read {}: {e}", root.display()))
            })?
            .path();
        let Some(name) = path.file_name().and_then(|n| n.to_str()).map(str::to_string) else {
            eprintln!("note: skipped {}: the name is not UTF-8", path.display());
            continue;
        };
        if name.starts_with('.') {
            if path.is_dir() {
                eprintln!("note: skipped {}: a dot-folder", path.display());
            }
            continue;
        }
        if !path.is_dir() {
            eprintln!("note: skipped {}: not a camera folder", path.display());
            continue;
        }
        cameras.push((name, path));
    }
    cameras.sort();
    Ok(cameras)
}

struct Shared<'a> {
    target: &'a Target,
    target_record: &'a InputRecord,
    settings: &'a Settings,
    spec: Option<&'a FleetSpec>,
    out: &'a Path,
    force: bool,
}

/// One camera, start to end; only a failure to write its results is an error.
fn run_one_camera(id: &str, dir: &Path, s: &Shared) -> anyhow::Result<CameraEntry> {
    let result = format!("{id}/{}", CAMERA_FILES[0]);
    let not_calibrated = |reason: String| Ok(camera_entry(id, Err(&reason), s.spec, &result));
    let paths = match list_images(dir) {
        Ok((paths, _)) if paths.is_empty() => {
            return not_calibrated(format!(
                "no image files in {} (png, jpg, tif, bmp, gif)",
                dir.display()
            ));
        }
        Ok((paths, _)) => paths,
        Err(e) => return not_calibrated(e.to_string()),
    };
    let records = facetcal_pipeline::observe_images_par(&paths, s.target, s.settings, &|_| {});
    let run = match calibrate_records(
        &records,
        s.target,
        s.target_record.clone(),
        &program(),
        s.settings,
    ) {
        Ok(r) => r,
        Err(e) => return not_calibrated(e.to_string()),
    };
    write_results(&run, &format!("Calibration of camera {id}"), &s.out.join(id), s.force)?;
    Ok(camera_entry(id, Ok(&run.file), s.spec, &result))
}

/// The page title depends on the fleet only, so that a merge writes the single run's page.
fn write_fleet(fleet: &FleetFile, out: &Path, force: bool) -> anyhow::Result<()> {
    let title = format!("Fleet of {} cameras", fleet.counts.cameras);
    let json = fleet.to_json().map_err(|e| {
        exit::coded(exit::SOFTWARE, format!("refusing to write a non-finite fleet file: {e}"))
    })?;
    output::create_dir(out)?;
    output::write_new(&out.join(FLEET_JSON), format!("{json}\n").as_bytes(), force)?;
    output::write_new(&out.join(FLEET_CSV), fleet.to_csv().as_bytes(), force)?;
    output::write_new(
        &out.join(FLEET_HTML),
        facetcal_fleet::fleet_html(&title, fleet).as_bytes(),
        force,
    )?;
    Ok(())
}

/// The summary on standard output, the failing cameras on standard error; the exit code.
fn report(fleet: &FleetFile, out: &Path) -> ExitCode {
    for c in fleet.cameras.iter().filter(|c| !c.reasons.is_empty()) {
        eprintln!("camera {} {}: {}", c.id, c.status.name(), c.reasons.join("; "));
    }
    for c in fleet.cameras.iter().filter(|c| !c.outliers.is_empty()) {
        eprintln!("camera {}: outlier in {}", c.id, c.outliers.join(", "));
    }
    let n = &fleet.counts;
    println!(
        "{} cameras: {} passed, {} failed a check, {} not calibrated",
        n.cameras, n.passed, n.failed, n.not_calibrated
    );
    println!(
        "wrote {}, {} and {}",
        out.join(FLEET_JSON).display(),
        out.join(FLEET_CSV).display(),
        out.join(FLEET_HTML).display()
    );
    println!(
        "Validate these calibrations yourself before using them where an error can hurt someone."
    );
    ExitCode::from(if n.passed == n.cameras {
        exit::OK
    } else if n.passed + n.failed == 0 {
        exit::DATA
    } else {
        exit::PARTIAL
    })
}

pub fn run(args: FleetArgs) -> anyhow::Result<ExitCode> {
    if let Some(FleetCommand::Merge(m)) = args.command {
        return run_merge(m);
    }
    let (Some(root), Some(target_path), Some(out)) = (args.root, args.target, args.out) else {
        return Err(exit::coded(exit::USAGE, "ROOT, --target and --out are required"));
    };
    let settings = settings(&args.options)?;
    let (target, target_record) = load_target(&target_path)?;
    args.options.encoding().note(&target);
    let spec = args.spec.as_deref().map(load_spec).transpose()?;
    if !root.is_dir() {
        return Err(exit::coded(
            exit::NO_INPUT,
            format!("{} is not a folder of camera folders", root.display()),
        ));
    }
    let all = camera_folders(&root)?;
    if all.is_empty() {
        return Err(exit::coded(exit::DATA, format!("no camera folders in {}", root.display())));
    }
    let cameras: Vec<(String, PathBuf)> = match args.shard {
        Some(s) => all.into_iter().filter(|(id, _)| s.contains(id)).collect(),
        None => all,
    };
    for name in [FLEET_JSON, FLEET_CSV, FLEET_HTML] {
        check_free(&out.join(name), args.force)?;
    }
    for (id, _) in &cameras {
        for name in CAMERA_FILES {
            check_free(&out.join(id).join(name), args.force)?;
        }
    }
    if let Some(s) = args.shard {
        eprintln!("shard {s}: {} cameras", cameras.len());
    }
    let shared = Shared {
        target: &target,
        target_record: &target_record,
        settings: &settings,
        spec: spec.as_ref(),
        out: &out,
        force: args.force,
    };
    let entries: Vec<anyhow::Result<CameraEntry>> =
        cameras.par_iter().map(|(id, dir)| run_one_camera(id, dir, &shared)).collect();
    let entries = entries.into_iter().collect::<anyhow::Result<Vec<_>>>()?;
    let header = FleetHeader {
        program: program(),
        target_file: target_record.clone(),
        settings_sha256: facetcal_imageio::sha256_hex(format!("{settings:?}").as_bytes()),
        spec,
        shard: args.shard.map(|s| s.to_string()),
    };
    let fleet = FleetFile::assemble(header, entries);
    write_fleet(&fleet, &out, args.force)?;
    Ok(report(&fleet, &out))
}

fn read_fleet(dir: &Path) -> anyhow::Result<FleetFile> {
    let path = dir.join(FLEET_JSON);
    let text = facetcal_inputs::read_json_text(&path)?;
    FleetFile::from_json(&text)
        .map_err(|e| exit::coded(exit::DATA, format!("{}: {e}", path.display())))
}

/// Re-derives a shard's camera entry from its result file: a result that does not match its
/// summary line is refused rather than merged.
fn check_camera(dir: &Path, fleet: &FleetFile, c: &CameraEntry) -> anyhow::Result<()> {
    let Some(result) = &c.result else { return Ok(()) };
    let path = dir.join(result);
    let text = facetcal_inputs::read_json_text(&path)?;
    let file = CalibrationFile::from_json(&text)
        .map_err(|e| exit::coded(exit::DATA, format!("{}: {e}", path.display())))?;
    let again = camera_entry(&c.id, Ok(&file), fleet.header.spec.as_ref(), result);
    if again != (CameraEntry { outliers: vec![], ..c.clone() }) {
        return Err(exit::coded(
            exit::DATA,
            format!(
                "{} does not match camera {} of {}",
                path.display(),
                c.id,
                dir.join(FLEET_JSON).display()
            ),
        ));
    }
    Ok(())
}

fn run_merge(args: MergeArgs) -> anyhow::Result<ExitCode> {
    let shards: Vec<FleetFile> =
        args.shards.iter().map(|d| read_fleet(d)).collect::<anyhow::Result<_>>()?;
    let merged = facetcal_fleet::merge(&shards)
        .map_err(|e| exit::coded(exit::DATA, format!("cannot merge: {e}")))?;
    for name in [FLEET_JSON, FLEET_CSV, FLEET_HTML] {
        check_free(&args.out.join(name), args.force)?;
    }
    let mut copies = Vec::new();
    for (dir, fleet) in args.shards.iter().zip(&shards) {
        for c in &fleet.cameras {
            check_camera(dir, fleet, c)?;
            if c.result.is_some() {
                for name in CAMERA_FILES {
                    let to = args.out.join(&c.id).join(name);
                    check_free(&to, args.force)?;
                    copies.push((dir.join(&c.id).join(name), to));
                }
            }
        }
    }
    for (from, to) in &copies {
        let bytes =
            std::fs::read(from).with_context(|| format!("cannot read {}", from.display()))?;
        if let Some(parent) = to.parent() {
            output::create_dir(parent)?;
        }
        output::write_new(to, &bytes, args.force)?;
    }
    write_fleet(&merged, &args.out, args.force)?;
    Ok(report(&merged, &args.out))
}
