//! `facetcal demo`: the built-in demonstration (see the pipeline crate's `demo` module).

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;
use clap::Args;
use facetcal_model::files::{CalibrationFile, InputRecord};
use facetcal_pipeline::{Settings, calibrate_records, demo, observe_image};
use rayon::prelude::*;

use crate::{calibrate, output};

#[derive(Args, Debug)]
pub struct DemoArgs {
    /// Where to write the demonstration's images and results. Default: a new folder
    /// `facetcal-demo` (or `facetcal-demo-2`, ...) in the current folder.
    #[arg(long)]
    out: Option<PathBuf>,
    /// Number of camera modules in the lot.
    #[arg(long, default_value_t = 6, value_parser = clap::value_parser!(u32).range(1..=100))]
    units: u32,
}

/// A folder name that does not exist yet, so that nothing is ever overwritten.
fn fresh_folder(base: &Path) -> PathBuf {
    let mut candidate = base.to_path_buf();
    let mut k = 2;
    while candidate.exists() {
        candidate = PathBuf::from(format!("{}-{k}", base.display()));
        k += 1;
    }
    candidate
}

pub fn run(args: DemoArgs) -> anyhow::Result<ExitCode> {
    let out = match args.out {
        Some(p) => p,
        None => fresh_folder(Path::new("facetcal-demo")),
    };
    output::create_dir(&out)?;
    let lot = demo::demo_lot(args.units as usize);
    println!(
        "End-of-line station: {} camera modules, one shot each of the three-face corner fixture",
        lot.len()
    );
    let target = demo::demo_target();
    let target_record = InputRecord {
        path: "targets/corner.json (embedded)".into(),
        sha256: facetcal_imageio::sha256_hex(demo::CORNER_TARGET.as_bytes()),
    };
    let program = calibrate::program();
    let settings = Settings::default();
    let results: Vec<anyhow::Result<CalibrationFile>> = lot
        .par_iter()
        .enumerate()
        .map(|(i, unit)| {
            let dir = out.join(&unit.serial);
            output::create_dir(&dir)?;
            let scene = demo::demo_scene(unit, i)?;
            let view = facetcal_render::render_view(&scene, 0)?;
            let png = dir.join("shot.png");
            output::write_new(&png, &view.image.to_png().context("encoding the shot")?, false)?;
            let truth = facetcal_render::TruthFile::new(&scene, vec![view.truth]);
            output::write_new(&dir.join("truth.json"), truth.to_json().as_bytes(), false)?;
            let record = observe_image(&png, &target, &settings);
            let run = calibrate_records(
                std::slice::from_ref(&record),
                &target,
                target_record.clone(),
                &program,
                &settings,
            )?;
            let title = format!("Module {} (facetcal demo)", unit.serial);
            calibrate::write_results(&run, &title, &dir, false)?;
            Ok(run.file)
        })
        .collect();
    println!(
        "{:<10} {:<8} {:>9} {:>9} {:>8} {:>8} {:>9} {:>9} {:>7}  verdict",
        "module", "", "fx", "fy", "cx", "cy", "k1", "k2", "RMS px"
    );
    let (mut worst_f, mut worst_c, mut failed) = (0.0f64, 0.0f64, 0);
    for (unit, result) in lot.iter().zip(&results) {
        let t = &unit.truth.intrinsics;
        let tk = unit.truth.distortion.coefficients();
        match result {
            Ok(file) => {
                let e = &file.camera.intrinsics;
                let k = file.camera.distortion.coefficients();
                let passed = file.verdict.as_ref().is_some_and(|v| v.passed);
                println!(
                    "{:<10} {:<8} {:>9.2} {:>9.2} {:>8.2} {:>8.2} {:>9.5} {:>9.5} {:>7.3}  {}",
                    unit.serial,
                    "estimate",
                    e.fx,
                    e.fy,
                    e.cx,
                    e.cy,
                    k[0],
                    k[1],
                    file.rms_px,
                    if passed { "pass" } else { "FAILED" }
                );
                worst_f =
                    worst_f.max(((e.fx - t.fx) / t.fx).abs()).max(((e.fy - t.fy) / t.fy).abs());
                worst_c = worst_c.max((e.cx - t.cx).abs()).max((e.cy - t.cy).abs());
                if !passed {
                    failed += 1;
                }
            }
            Err(e) => {
                failed += 1;
                println!("{:<10} failed: {}", unit.serial, crate::exit::chain(e));
            }
        }
        println!(
            "{:<10} {:<8} {:>9.2} {:>9.2} {:>8.2} {:>8.2} {:>9.5} {:>9.5}",
            "", "truth", t.fx, t.fy, t.cx, t.cy, tk[0], tk[1]
        );
    }
    println!(
        "Largest error over the lot: focal length {:.3} %, principal point {:.2} px.",
        worst_f * 100.0,
        worst_c
    );
    println!(
        "Shots, truth, calibration.json and report.html of each module are in {}.",
        out.display()
    );
    println!(
        "All numbers are invented for this demonstration. Validate any real calibration yourself \
         before using it where an error can hurt someone."
    );
    Ok(if failed == 0 { ExitCode::SUCCESS } else { ExitCode::from(crate::exit::PARTIAL) })
}
