//! `facetcal solve`: calibrates from a correspondence file (format
//! `facetcal-correspondences`) and writes the calibration result (format
//! `facetcal-calibration`).

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context;
use clap::{Args, ValueEnum};
use facetcal_model::files::CorrespondenceFile;
use facetcal_solver::{Loss, Observation, Options, ViewObservations};
use nalgebra::{Point2, Point3};

use crate::{exit, output};

#[derive(Args, Debug)]
pub struct SolveArgs {
    /// The correspondence file: per view, target points and the pixels where they were seen.
    correspondences: PathBuf,
    /// Write the calibration result here (standard output when absent).
    #[arg(long, short)]
    out: Option<PathBuf>,
    /// Replace an existing result file.
    #[arg(long)]
    force: bool,
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

pub fn run(args: SolveArgs) -> anyhow::Result<ExitCode> {
    let path = &args.correspondences;
    let text = std::fs::read_to_string(path)
        .with_context(|| format!("cannot read correspondence file {}", path.display()))?;
    let file = CorrespondenceFile::from_json(&text)
        .with_context(|| format!("correspondence file {}", path.display()))?;
    let options = Options {
        free: file.free,
        survey_faces: file.survey_faces,
        loss: match args.loss {
            LossArg::Squared => Loss::Squared,
            LossArg::Huber => Loss::Huber { scale_px: args.loss_scale },
            LossArg::Cauchy => Loss::Cauchy { scale_px: args.loss_scale },
        },
        reject_sigmas: if args.keep_all { 0.0 } else { Options::default().reject_sigmas },
        ..Options::default()
    };
    let views: Vec<ViewObservations> = file
        .views
        .iter()
        .map(|v| ViewObservations {
            name: v.name.clone(),
            points: v
                .points
                .iter()
                .map(|p| Observation {
                    id: p.id,
                    target: Point3::from(p.target),
                    image: Point2::from(p.image),
                })
                .collect(),
        })
        .collect();
    let size = (file.image_size[0], file.image_size[1]);
    let cal = facetcal_solver::calibrate(&views, size, file.model, file.initial.as_ref(), &options)
        .map_err(|e| exit::coded(exit::DATA, format!("{}: {e}", path.display())))?;
    let mut result = cal.to_file(file.unit);
    result.program = Some(format!("facetcal {}", env!("CARGO_PKG_VERSION")));
    let json = result.to_json().map_err(|e| {
        exit::coded(exit::SOFTWARE, format!("refusing to write a non-finite result: {e}"))
    })?;
    match &args.out {
        Some(out) => output::write_new(out, format!("{json}\n").as_bytes(), args.force)?,
        None => println!("{json}"),
    }
    eprintln!("{}", cal.summary.brief_report());
    let i = cal.camera.intrinsics;
    eprintln!("fx {:.3}  fy {:.3}  cx {:.3}  cy {:.3}  skew {:.4}", i.fx, i.fy, i.cx, i.cy, i.skew);
    for w in &cal.warnings {
        eprintln!("warning: {}", w.message);
    }
    Ok(if cal.summary.is_usable() { ExitCode::SUCCESS } else { ExitCode::from(exit::DATA) })
}
