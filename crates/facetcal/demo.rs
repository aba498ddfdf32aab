//! `facetcal demo`: the built-in demonstration (see the pipeline crate's `demo` module).

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;
use clap::Args;
use facetcal_pipeline::demo;
use rayon::prelude::*;

use crate::output;

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
    if !base.exists() {
        return base.to_path_buf();
    }
    (2..)
        .map(|k| PathBuf::from(format!("{}-{k}", base.display())))
        .find(|p| !p.exists())
        .expect("some suffix is free")
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
    let shots: Vec<anyhow::Result<PathBuf>> = lot
        .par_iter()
        .enumerate()
        .map(|(i, unit)| {
            let scene = demo::demo_scene(unit, i)?;
            let view = facetcal_render::render_view(&scene, 0)?;
            let dir = out.join(&unit.serial);
            output::create_dir(&dir)?;
            let png = dir.join("shot.png");
            output::write_new(&png, &view.image.to_png().context("encoding the shot")?, false)?;
            let truth = facetcal_render::TruthFile::new(&scene, vec![view.truth]);
            output::write_new(&dir.join("truth.json"), truth.to_json().as_bytes(), false)?;
            Ok(png)
        })
        .collect();
    println!(
        "{:<12} {:>9} {:>9} {:>8} {:>8} {:>9} {:>9}",
        "module", "fx", "fy", "cx", "cy", "k1", "k2"
    );
    for (unit, shot) in lot.iter().zip(&shots) {
        let i = &unit.truth.intrinsics;
        let k = unit.truth.distortion.coefficients();
        println!(
            "{:<12} {:>9.2} {:>9.2} {:>8.2} {:>8.2} {:>9.5} {:>9.5}  true values; shot {}",
            unit.serial,
            i.fx,
            i.fy,
            i.cx,
            i.cy,
            k[0],
            k[1],
            match shot {
                Ok(p) => p.display().to_string(),
                Err(e) => format!("failed: {e:#}"),
            }
        );
    }
    println!(
        "Rendered into {}. Detection and calibration of these shots arrive with the calibrate command.",
        out.display()
    );
    Ok(ExitCode::SUCCESS)
}
