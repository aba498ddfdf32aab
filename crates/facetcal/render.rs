//! `facetcal render SCENE.json --out DIR`: synthetic images (PNG) of a scene and their
//! `truth.json`.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use clap::Args;
use facetcal_model::ModelError;
use facetcal_render::{RenderError, Scene, TruthFile, render_view};
use rayon::prelude::*;

use crate::{exit, output};

#[derive(Args, Debug)]
pub struct RenderArgs {
    /// The scene file (format facetcal-scene).
    scene: PathBuf,
    /// Output folder (created if missing): view-0000.png, ... and truth.json.
    #[arg(long)]
    out: PathBuf,
    /// Replace outputs that already exist.
    #[arg(long)]
    force: bool,
}

/// The exit code of a render error: unreadable inputs are `NO_INPUT`, the rest bad data.
fn code_of(e: &RenderError) -> u8 {
    let missing = |io: &std::io::Error| {
        matches!(io.kind(), std::io::ErrorKind::NotFound | std::io::ErrorKind::PermissionDenied)
    };
    match e {
        RenderError::Io { source, .. } if missing(source) => exit::NO_INPUT,
        RenderError::Input(i) | RenderError::Target { source: ModelError::Input(i), .. } => {
            exit::input_code(i)
        }
        RenderError::Target { source: ModelError::Io { source, .. }, .. } if missing(source) => {
            exit::NO_INPUT
        }
        _ => exit::DATA,
    }
}

fn fail(scene: &Path, e: RenderError) -> anyhow::Error {
    let mut message = format!("scene file {}: {e}", scene.display());
    let mut cause = std::error::Error::source(&e);
    while let Some(c) = cause {
        message.push_str(&format!(": {c}"));
        cause = c.source();
    }
    exit::coded(code_of(&e), message)
}

pub fn run(args: RenderArgs) -> anyhow::Result<ExitCode> {
    let scene = Scene::load(&args.scene).map_err(|e| fail(&args.scene, e))?;
    output::create_dir(&args.out)?;
    let truth_path = args.out.join("truth.json");
    if !args.force && truth_path.exists() {
        return Err(exit::coded(
            exit::CANT_CREATE,
            format!("{} already exists (use --force to replace it)", truth_path.display()),
        ));
    }
    // Each view is rendered, encoded and written on the pool; the truth is gathered in order.
    let results: Vec<anyhow::Result<facetcal_render::ViewTruth>> = (0..scene.view_count())
        .into_par_iter()
        .map(|i| {
            let view = render_view(&scene, i).map_err(|e| fail(&args.scene, e))?;
            let png = view.image.to_png().map_err(|e| {
                fail(&args.scene, RenderError::Encode { view: i, reason: e.to_string() })
            })?;
            output::write_new(&args.out.join(&view.truth.image), &png, args.force)?;
            Ok(view.truth)
        })
        .collect();
    let mut views = Vec::with_capacity(results.len());
    for r in results {
        views.push(r?);
    }
    let visible: usize = views.iter().map(|v| v.visible.len()).sum();
    let truth = TruthFile::new(&scene, views);
    output::write_new(&truth_path, truth.to_json().as_bytes(), args.force)?;
    println!(
        "{} views, {} visible features -> {}",
        scene.view_count(),
        visible,
        args.out.display()
    );
    Ok(ExitCode::from(exit::OK))
}
