//! `facetcal solve`: calibrates from a correspondence file (format
//! `facetcal-correspondences`) and writes the calibration result (format
//! `facetcal-calibration`).

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context;
use clap::Args;
use facetcal_model::files::CorrespondenceFile;
use facetcal_solver::{Observation, Options, ViewObservations};
use nalgebra::{Point2, Point3};

use crate::calibrate::RobustOptions;
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
    #[command(flatten)]
    robust: RobustOptions,
}

pub fn run(args: SolveArgs) -> anyhow::Result<ExitCode> {
    let path = &args.correspondences;
    let text = facetcal_inputs::read_json_text(path)
        .with_context(|| format!("correspondence file {}", path.display()))?;
    let file = CorrespondenceFile::from_json(&text)
        .with_context(|| format!("correspondence file {}", path.display()))?;
    let mut options =
        Options { free: file.free, survey_faces: file.survey_faces, ..Options::default() };
    args.robust.apply(&mut options);
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
