//! `facetcal target check` and `facetcal target sheet`.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;
use clap::{Args, Subcommand};
use facetcal_model::{PatternSpec, Target};

use crate::output;

#[derive(Args, Debug)]
pub struct TargetArgs {
    #[command(subcommand)]
    action: TargetAction,
}

#[derive(Subcommand, Debug)]
enum TargetAction {
    /// Validate a target file and print a summary.
    Check {
        /// The target file.
        file: PathBuf,
    },
    /// Write one true-scale SVG sheet per face.
    Sheet {
        /// The target file.
        file: PathBuf,
        /// Output folder (created if missing).
        #[arg(long)]
        out: PathBuf,
        /// Replace sheets that already exist.
        #[arg(long)]
        force: bool,
    },
}

/// Loads a target file, naming the file in any error.
pub fn load(path: &Path) -> anyhow::Result<Target> {
    Target::load(path).with_context(|| format!("target file {}", path.display()))
}

pub fn run(args: TargetArgs) -> anyhow::Result<ExitCode> {
    match args.action {
        TargetAction::Check { file } => {
            let t = load(&file)?;
            print!("{}", summary(&t));
            Ok(ExitCode::SUCCESS)
        }
        TargetAction::Sheet { file, out, force } => {
            let t = load(&file)?;
            output::create_dir(&out)?;
            for face in t.faces() {
                let path = out.join(format!("face-{}.svg", face.id()));
                output::write_new(&path, facetcal_sheet::face_svg(&t, face).as_bytes(), force)?;
                let (w, h) = facetcal_sheet::page_size_mm(&t, face);
                println!("{}  ({w:.0} x {h:.0} mm page)", path.display());
            }
            Ok(ExitCode::SUCCESS)
        }
    }
}

fn summary(t: &Target) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    let u = t.unit().name();
    let _ = writeln!(s, "target   {}", t.name());
    let _ = writeln!(
        s,
        "faces    {} ({})",
        t.faces().len(),
        if t.is_planar() { "planar" } else { "non-planar" }
    );
    let _ = writeln!(s, "features {}", t.feature_count());
    let (lo, hi) = t.bounds();
    let d = hi - lo;
    let _ = writeln!(s, "extent   {:.2} x {:.2} x {:.2} {u}", d.x, d.y, d.z);
    for f in t.faces() {
        let pattern = match *f.pattern() {
            PatternSpec::Checkerboard { rows, columns, cell } => {
                format!("checkerboard {rows} x {columns} cells of {cell} {u}")
            }
            PatternSpec::DotGrid { rows, columns, pitch, diameter, layout, polarity } => format!(
                "dot grid {rows} x {columns}, pitch {pitch} {u}, diameter {diameter} {u}, {layout:?}, {polarity:?}"
            ),
            PatternSpec::SquareGrid { rows, columns, side, pitch } => {
                format!("square grid {rows} x {columns}, side {side} {u}, pitch {pitch} {u}")
            }
        };
        let _ = writeln!(
            s,
            "face {:<3} {pattern}; {} features, {} code marks",
            f.id(),
            f.feature_count(),
            f.marks().len()
        );
    }
    s.push_str("ok\n");
    s
}
