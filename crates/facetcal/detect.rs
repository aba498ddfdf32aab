//! `facetcal detect`: find and identify a target's features in images, one
//! `NAME.detections.json` (format `facetcal-detections`) per image, and optionally a quick-look
//! overlay per image.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;
use clap::Args;
use facetcal_detector::{DetectorOptions, GreyImage, MarkProbe, detect, mark_samples};
use facetcal_imageio::LoadOptions;
use facetcal_matcher::{DetectionsFile, Identification, MatchOptions, identify_with};
use facetcal_model::Target;
use image::{Rgb, RgbImage};

use crate::calibrate::EncodingArg;
use crate::output;

#[derive(Args, Debug)]
pub struct DetectArgs {
    /// Images of the target.
    #[arg(required = true)]
    images: Vec<PathBuf>,
    /// The target file.
    #[arg(long)]
    target: PathBuf,
    /// Folder for the NAME.detections.json files.
    #[arg(long, default_value = ".")]
    out: PathBuf,
    /// Also write NAME.overlay.png here: the image with each identified feature and the id of
    /// its face drawn.
    #[arg(long)]
    overlay: Option<PathBuf>,
    /// Replace outputs that already exist.
    #[arg(long)]
    force: bool,
    #[command(flatten)]
    encoding: EncodingArg,
}

pub fn run(args: DetectArgs) -> anyhow::Result<ExitCode> {
    let target = Target::load(&args.target)
        .with_context(|| format!("target file {}", args.target.display()))?;
    args.encoding.note(&target);
    output::create_dir(&args.out)?;
    if let Some(dir) = &args.overlay {
        output::create_dir(dir)?;
    }
    Ok(output::run_batch(&args.images, |path| detect_one(path, &target, &args)))
}

fn detect_one(path: &Path, target: &Target, args: &DetectArgs) -> anyhow::Result<String> {
    let loaded = facetcal_imageio::load(path, &LoadOptions::default())?;
    let grey = GreyImage::from_dynamic(&loaded.image);
    let opts = DetectorOptions {
        kinds: target.pattern_kinds(),
        encoding: args.encoding.encoding(),
        ..DetectorOptions::default()
    };
    let found = detect(&grey, &opts).with_context(|| format!("detecting in {}", path.display()))?;
    let probe = |p: &[MarkProbe]| mark_samples(&grey, p);
    let id = identify_with(&found, target, &MatchOptions::default(), &probe)?;
    let name = path.file_name().and_then(|s| s.to_str()).unwrap_or("image").to_string();
    let stem = path.file_stem().and_then(|s| s.to_str()).unwrap_or("image");
    let file = DetectionsFile::new(&name, [found.width, found.height], target, &id);
    let mut text = serde_json::to_string_pretty(&file)?;
    text.push('\n');
    output::write_new(
        &args.out.join(format!("{stem}.detections.json")),
        text.as_bytes(),
        args.force,
    )?;
    if let Some(dir) = &args.overlay {
        let img = overlay(loaded.image.to_rgb8(), &id);
        let mut bytes = std::io::Cursor::new(Vec::new());
        img.write_to(&mut bytes, image::ImageFormat::Png).context("encoding the overlay")?;
        output::write_new(&dir.join(format!("{stem}.overlay.png")), bytes.get_ref(), args.force)?;
    }
    let faces: Vec<String> =
        id.faces.iter().map(|f| format!("{} ({})", f.face, f.points.len())).collect();
    let reasons: Vec<String> =
        id.left_out_counts().into_iter().map(|(k, v)| format!("{k} {v}")).collect();
    Ok(format!(
        "{} identified on faces [{}], {} left out [{}]",
        id.point_count(),
        faces.join(", "),
        id.left_out.len(),
        reasons.join(", ")
    ))
}

/// Face colours of the overlay, cycled by face id.
const COLOURS: [[u8; 3]; 6] =
    [[230, 60, 40], [40, 170, 60], [50, 110, 230], [220, 170, 20], [170, 60, 200], [20, 180, 190]];

/// 3 x 5 digit glyphs, one row per byte, high bit left.
const DIGITS: [[u8; 5]; 10] = [
    [7, 5, 5, 5, 7],
    [2, 6, 2, 2, 7],
    [7, 1, 7, 4, 7],
    [7, 1, 3, 1, 7],
    [5, 5, 7, 1, 1],
    [7, 4, 7, 1, 7],
    [7, 4, 7, 5, 7],
    [7, 1, 1, 2, 2],
    [7, 5, 7, 5, 7],
    [7, 5, 7, 1, 7],
];

fn put(img: &mut RgbImage, x: i64, y: i64, c: [u8; 3]) {
    if x >= 0 && y >= 0 && (x as u32) < img.width() && (y as u32) < img.height() {
        img.put_pixel(x as u32, y as u32, Rgb(c));
    }
}

/// Draws a cross on every identified feature and the face id at the centroid of its features.
fn overlay(mut img: RgbImage, id: &Identification) -> RgbImage {
    for f in &id.faces {
        let c = COLOURS[f.face as usize % COLOURS.len()];
        let (mut sx, mut sy) = (0.0, 0.0);
        for p in &f.points {
            let (x, y) = (p.image[0].round() as i64, p.image[1].round() as i64);
            for d in -4..=4 {
                put(&mut img, x + d, y, c);
                put(&mut img, x, y + d, c);
            }
            sx += p.image[0];
            sy += p.image[1];
        }
        if f.points.is_empty() {
            continue;
        }
        let n = f.points.len() as f64;
        let (cx, cy) = ((sx / n).round() as i64, (sy / n).round() as i64);
        let digits: Vec<usize> = f.face.to_string().bytes().map(|b| (b - b'0') as usize).collect();
        let scale = 4;
        for (k, &d) in digits.iter().enumerate() {
            for (row, bits) in DIGITS[d].iter().enumerate() {
                for col in 0..3 {
                    if bits >> (2 - col) & 1 == 1 {
                        for dy in 0..scale {
                            for dx in 0..scale {
                                let x = cx + (k as i64 * 4 + col) * scale + dx;
                                put(&mut img, x, cy + row as i64 * scale + dy, c);
                            }
                        }
                    }
                }
            }
        }
    }
    img
}
