//! Running the binary in a scratch folder, paths of the repository's test data, and the
//! rendered shots (facetcal-render, exact truth) that the calibrate and watch tests feed it.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use facetcal_model::{Camera, Distortion, Intrinsics, Target};
use facetcal_render::{PoseGenerator, Scene, render_all_par};

/// The repository root.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// A bundled target file.
pub fn bundled_target(name: &str) -> PathBuf {
    root().join("targets").join(format!("{name}.json"))
}

/// What a run of the binary gave.
pub struct Run {
    pub code: i32,
    pub stdout: String,
    pub stderr: String,
}

impl From<Output> for Run {
    fn from(o: Output) -> Self {
        Run {
            code: o.status.code().unwrap_or(-1),
            stdout: String::from_utf8_lossy(&o.stdout).into_owned(),
            stderr: String::from_utf8_lossy(&o.stderr).into_owned(),
        }
    }
}

/// Runs `facetcal ARGS` with `dir` as the working folder.
pub fn facetcal(dir: &Path, args: &[&str]) -> Run {
    Command::new(env!("CARGO_BIN_EXE_facetcal"))
        .args(args)
        .current_dir(dir)
        .env_remove("FACETCAL_LOG")
        .output()
        .expect("the facetcal binary runs")
        .into()
}

/// A fresh scratch folder, removed when dropped.
pub fn scratch() -> tempfile::TempDir {
    tempfile::tempdir().expect("a scratch folder")
}

/// A test lens: fy 0.1 % above fx and the principal point off the centre by (+2.7, -2.6) px, so
/// that a calibration that assumed square pixels or a centred point would show it.
pub fn lens(width: u32, height: u32, f: f64, k1: f64, k2: f64) -> Camera {
    Camera {
        width,
        height,
        intrinsics: Intrinsics {
            fx: f,
            fy: f * 1.001,
            cx: width as f64 / 2.0 - 0.5 + 3.2,
            cy: height as f64 / 2.0 - 0.5 - 2.1,
            skew: 0.0,
        },
        distortion: Distortion::BrownConrady { k1, k2, p1: 0.0, p2: 0.0, k3: 0.0 },
    }
}

/// `count` random views of a bundled target as PNG files' bytes: PSF 0.9 px, noise 2 grey
/// levels, roll within 20 degrees, the target covering 60 % of the image.
pub fn render_pngs(
    name: &str,
    camera: Camera,
    count: u32,
    distance: [f64; 2],
    tilt: [f64; 2],
) -> Vec<Vec<u8>> {
    let target = Target::load(&bundled_target(name)).unwrap();
    let mut poses = PoseGenerator::new(count, 1000 + count as u64, distance);
    poses.tilt_deg = tilt;
    poses.roll_deg = [-20.0, 20.0];
    poses.coverage = 0.6;
    let scene = Scene::builder(target, camera)
        .random_poses(poses)
        .psf_sigma_px(0.9)
        .noise_sigma(2.0)
        .seed(7)
        .build()
        .unwrap();
    render_all_par(&scene).unwrap().into_iter().map(|v| v.image.to_png().unwrap()).collect()
}

/// One view of the three-face corner (1024 x 768, cells of 40 px or more so that the face codes
/// read reliably), the shot the error-path and service tests reuse.
pub fn corner_shot() -> Vec<u8> {
    render_pngs("corner", lens(1024, 768, 900.0, -0.10, 0.03), 1, [450.0, 500.0], [0.0, 10.0])
        .remove(0)
}

/// Runs `facetcal ARGS` like [`facetcal`], but kills it after `secs` seconds: a run that would
/// block (a FIFO opened for reading) fails its test instead of hanging the suite.
pub fn facetcal_within(dir: &Path, args: &[&str], secs: u64) -> Run {
    let mut child = Command::new(env!("CARGO_BIN_EXE_facetcal"))
        .args(args)
        .current_dir(dir)
        .env_remove("FACETCAL_LOG")
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .expect("the facetcal binary runs");
    let start = std::time::Instant::now();
    while child.try_wait().expect("wait").is_none() {
        if start.elapsed() > std::time::Duration::from_secs(secs) {
            let _ = child.kill();
            let _ = child.wait();
            panic!("facetcal {args:?} still running after {secs} s");
        }
        std::thread::sleep(std::time::Duration::from_millis(20));
    }
    child.wait_with_output().expect("output").into()
}

/// Makes a FIFO at `path`.
#[cfg(unix)]
pub fn mkfifo(path: &Path) {
    let status = Command::new("mkfifo").arg(path).status().expect("mkfifo runs");
    assert!(status.success(), "mkfifo {}", path.display());
}
