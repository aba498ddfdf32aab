//! `facetcal verify IMAGE... --calibration FILE --target FILE`: checks a calibration on images
//! it was not computed from, by the reprojection error of the target at its estimated pose,
//! and optionally draws what the calibration predicts over each image.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;
use clap::Args;
use facetcal_pipeline::{ImageCheck, Settings, check_image};
use nalgebra::Point2;
use rayon::prelude::*;

use crate::calibrate::{EncodingArg, load_target};
use crate::undistort::load_calibration;
use crate::{exit, output};

#[derive(Args, Debug)]
pub struct VerifyArgs {
    /// Images of the target taken with the calibrated camera.
    #[arg(required = true)]
    images: Vec<PathBuf>,
    /// The calibration result (calibration.json).
    #[arg(long)]
    calibration: PathBuf,
    /// The target file.
    #[arg(long)]
    target: PathBuf,
    /// An image passes when its RMS reprojection error is at most this, pixels.
    #[arg(long, default_value_t = 1.0)]
    max_rms: f64,
    /// Write NAME.verify.png here: the calibration's prediction of every target feature
    /// (green) and each identified feature (red).
    #[arg(long)]
    overlay: Option<PathBuf>,
    /// Replace overlays that already exist.
    #[arg(long)]
    force: bool,
    #[command(flatten)]
    encoding: EncodingArg,
}

const PREDICTED: [u8; 3] = [40, 200, 60];
const OBSERVED: [u8; 3] = [230, 40, 40];

fn draw(path: &Path, check: &ImageCheck, dir: &Path, force: bool) -> anyhow::Result<()> {
    let loaded = facetcal_imageio::load(path, &Default::default())?;
    let mut marks: Vec<(Point2<f64>, [u8; 3])> =
        check.predicted.iter().map(|p| (*p, PREDICTED)).collect();
    marks.extend(check.points.iter().map(|(_, seen, _)| (*seen, OBSERVED)));
    let img = facetcal_remap::draw_crosses(&loaded.image, &marks, 4);
    let mut bytes = std::io::Cursor::new(Vec::new());
    img.write_to(&mut bytes, image::ImageFormat::Png).context("encoding the overlay")?;
    let stem = path.file_stem().and_then(|s| s.to_str()).unwrap_or("image");
    output::write_new(&dir.join(format!("{stem}.verify.png")), bytes.get_ref(), force)
}

pub fn run(args: VerifyArgs) -> anyhow::Result<ExitCode> {
    if args.max_rms.is_nan() || args.max_rms <= 0.0 {
        return Err(exit::coded(exit::USAGE, "--max-rms must be positive"));
    }
    let cal = load_calibration(&args.calibration)?;
    let (target, _) = load_target(&args.target)?;
    if let Some(dir) = &args.overlay {
        output::create_dir(dir)?;
    }
    let mut settings = Settings::default();
    settings.detector.encoding = args.encoding.encoding();
    args.encoding.note(&target);
    let results: Vec<anyhow::Result<ImageCheck>> = args
        .images
        .par_iter()
        .map(|path| {
            let check = check_image(path, &cal.camera, &target, &settings)
                .map_err(|f| anyhow::anyhow!("{} ({})", f.message, f.stage))?;
            if let Some(dir) = &args.overlay {
                draw(path, &check, dir, args.force)?;
            }
            Ok(check)
        })
        .collect();
    let mut bad = 0;
    for (path, r) in args.images.iter().zip(&results) {
        match r {
            Ok(c) => {
                let pass = c.rms_px <= args.max_rms;
                if !pass {
                    bad += 1;
                }
                let t = c.pose.translation;
                println!(
                    "{}: {} points, RMS {:.3} px, max {:.3} px, target at {:.1} {}: {}",
                    path.display(),
                    c.points.len(),
                    c.rms_px,
                    c.max_px,
                    t.norm(),
                    cal.unit.name(),
                    if pass { "pass" } else { "FAILED" }
                );
            }
            Err(e) => {
                bad += 1;
                eprintln!("{}: cannot verify: {}", path.display(), exit::chain(e));
            }
        }
    }
    Ok(if bad == 0 { ExitCode::SUCCESS } else { ExitCode::from(exit::DATA) })
}
