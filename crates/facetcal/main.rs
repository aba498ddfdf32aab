//! The `facetcal` command: parses arguments and wires the library crates together.
//! Everything that computes lives in the library crates; see DEVELOPERS.md.

#![deny(clippy::unwrap_used, clippy::expect_used)]

use std::process::ExitCode;

use clap::{Parser, Subcommand};

mod calibrate;
mod demo;
mod detect;
mod exit;
mod fleet;
mod output;
mod regress;
mod render;
mod solve;
mod target;
mod undistort;
mod verify;
mod watch;

/// Automatic target detection and camera calibration.
#[derive(Parser, Debug)]
#[command(name = "facetcal", version, about, propagate_version = true)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Run the built-in demonstration: render an end-of-line station's shots and calibrate them.
    Demo(demo::DemoArgs),
    /// Calibrate a camera from a folder of images of a target.
    Calibrate(calibrate::CalibrateArgs),
    /// Calibrate a fleet of cameras, one folder each, against a spec; merge shard outputs.
    Fleet(fleet::FleetArgs),
    /// Check a target file or write its printable sheets.
    Target(target::TargetArgs),
    /// Find and identify a target's features in images.
    Detect(detect::DetectArgs),
    /// Render synthetic images of a scene with their exact ground truth.
    Render(render::RenderArgs),
    /// Remove the lens distortion from images with a calibration.
    Undistort(undistort::UndistortArgs),
    /// Check a calibration on new images of the target by its reprojection error.
    Verify(verify::VerifyArgs),
    /// Calibrate from a correspondence file (target points and their pixels, per view).
    Solve(solve::SolveArgs),
    /// Serve a drop folder: calibrate every batch handed over into it, exactly once.
    Watch(watch::WatchArgs),
    /// Run the detector accuracy regression suite on synthetic renders.
    Regress(regress::RegressArgs),
}

fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        Command::Calibrate(a) => calibrate::run(a),
        Command::Demo(a) => demo::run(a),
        Command::Fleet(a) => fleet::run(a),
        Command::Target(a) => target::run(a),
        Command::Detect(a) => detect::run(a),
        Command::Render(a) => render::run(a),
        Command::Undistort(a) => undistort::run(a),
        Command::Solve(a) => solve::run(a),
        Command::Watch(a) => watch::run(a),
        Command::Regress(a) => regress::run(a),
        Command::Verify(a) => verify::run(a),
    }
}

fn main() -> ExitCode {
    tracing_subscriber::fmt()
        .with_env_filter(
            tracing_subscriber::EnvFilter::try_from_env("FACETCAL_LOG")
                .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("warn")),
        )
        .with_writer(std::io::stderr)
        .init();
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let code = if e.use_stderr() { exit::USAGE } else { exit::OK };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    match run(cli) {
        Ok(code) => code,
        Err(e) => {
            eprintln!("error: {}", exit::chain(&e));
            ExitCode::from(exit::code_of(&e))
        }
    }
}
