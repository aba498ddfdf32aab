//! `facetcal undistort`: remove the lens distortion from images with a calibration.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;
use clap::Args;
use facetcal_imageio::LoadOptions;
use facetcal_model::files::CalibrationFile;
use facetcal_remap::UndistortMap;

use crate::output;

#[derive(Args, Debug)]
pub struct UndistortArgs {
    /// Images taken with the calibrated camera.
    #[arg(required = true)]
    images: Vec<PathBuf>,
    /// The calibration result (calibration.json).
    #[arg(long)]
    calibration: PathBuf,
    /// Output folder; each image is written as NAME.png at its own bit depth.
    #[arg(long)]
    out: PathBuf,
    /// Replace outputs that already exist.
    #[arg(long)]
    force: bool,
}

/// Reads a calibration result, naming the file in any error.
pub fn load_calibration(path: &Path) -> anyhow::Result<CalibrationFile> {
    CalibrationFile::load(path).with_context(|| format!("calibration file {}", path.display()))
}

pub fn run(args: UndistortArgs) -> anyhow::Result<ExitCode> {
    let cal = load_calibration(&args.calibration)?;
    let camera = cal.camera;
    let map = UndistortMap::new(&camera, &camera.intrinsics);
    output::create_dir(&args.out)?;
    Ok(output::run_batch(&args.images, |path| {
        undistort_one(path, &map, &args.out, args.force).map(|out| format!("-> {}", out.display()))
    }))
}

fn undistort_one(
    path: &Path,
    map: &UndistortMap,
    out: &Path,
    force: bool,
) -> anyhow::Result<PathBuf> {
    let loaded = facetcal_imageio::load(path, &LoadOptions::default())?;
    let image = map.apply(&loaded.image)?;
    let stem = path.file_stem().and_then(|s| s.to_str()).unwrap_or("image");
    let target = out.join(format!("{stem}.png"));
    let mut bytes = std::io::Cursor::new(Vec::new());
    image
        .write_to(&mut bytes, image::ImageFormat::Png)
        .with_context(|| format!("encoding {}", target.display()))?;
    output::write_new(&target, bytes.get_ref(), force)?;
    Ok(target)
}
