//! `facetcal undistort` end to end: a calibration file and images written to a scratch folder,
//! the binary run on them, the undistorted images read back.

use facetcal_model::files::{
    CALIBRATION_FORMAT, CalibrationFile, Correlation, FILES_VERSION, SolverRecord,
};
use facetcal_model::{Camera, Distortion, Intrinsics, Unit};
use nalgebra::{Point2, Point3};

use crate::util::{facetcal, scratch};

pub fn camera() -> Camera {
    Camera {
        width: 320,
        height: 240,
        intrinsics: Intrinsics { fx: 300.0, fy: 301.0, cx: 160.3, cy: 119.6, skew: 0.0 },
        distortion: Distortion::BrownConrady {
            k1: -0.3,
            k2: 0.1,
            p1: 0.0004,
            p2: -0.0002,
            k3: 0.0,
        },
    }
}

pub fn calibration(camera: Camera) -> CalibrationFile {
    CalibrationFile {
        format: CALIBRATION_FORMAT.into(),
        version: FILES_VERSION,
        program: None,
        unit: Unit::Mm,
        camera,
        parameters: vec![],
        correlation: Correlation::default(),
        rms_px: 0.1,
        views: vec![],
        rejected: vec![],
        faces: vec![],
        summary: SolverRecord {
            iterations: 1,
            initial_cost: 1.0,
            final_cost: 1.0,
            termination: "test".into(),
            usable: true,
            message: String::new(),
        },
        warnings: vec![],
        target_file: None,
        inputs: vec![],
        verdict: None,
    }
}

/// Gaussian blobs drawn where the distorted camera sees three 3-D points move, through the
/// command, to where a pinhole camera with the same intrinsics sees them; the 16-bit depth is
/// kept; a bad file is skipped with exit code 2; outputs are not overwritten without --force.
#[test]
fn undistort_moves_blobs_to_their_pinhole_positions() {
    let cam = camera();
    let pinhole = Camera { distortion: Distortion::None, ..cam };
    let points =
        [Point3::new(0.3, -0.2, 1.0), Point3::new(-0.3, 0.22, 1.0), Point3::new(0.0, 0.0, 1.0)];
    let distorted: Vec<Point2<f64>> = points.iter().map(|p| cam.project(p).unwrap()).collect();
    let img = image::ImageBuffer::from_fn(320, 240, |x, y| {
        let v: f64 = distorted
            .iter()
            .map(|c| (-((x as f64 - c.x).powi(2) + (y as f64 - c.y).powi(2)) / 8.0).exp())
            .sum();
        image::Luma([(60000.0 * v).round().min(65535.0) as u16])
    });
    let dir = scratch();
    img.save(dir.path().join("shot.png")).unwrap();
    std::fs::write(dir.path().join("broken.png"), b"\x89PNG\r\n\x1a\n not really").unwrap();
    std::fs::write(dir.path().join("cal.json"), calibration(cam).to_json().unwrap()).unwrap();
    let args =
        ["undistort", "shot.png", "broken.png", "--calibration", "cal.json", "--out", "flat"];
    let run = facetcal(dir.path(), &args);
    assert_eq!(run.code, 2, "one of two images is bad: {}", run.stderr);
    assert!(run.stderr.contains("skipped broken.png"), "{}", run.stderr);
    let out = image::open(dir.path().join("flat/shot.png")).unwrap();
    let out = out.as_luma16().expect("16-bit stays 16-bit");
    for p in &points {
        let want = pinhole.project(p).unwrap();
        let (mut sw, mut sx, mut sy) = (0.0, 0.0, 0.0);
        for (x, y, v) in out.enumerate_pixels() {
            if (x as f64 - want.x).abs() < 10.0 && (y as f64 - want.y).abs() < 10.0 {
                let v = v[0] as f64;
                sw += v;
                sx += v * x as f64;
                sy += v * y as f64;
            }
        }
        let got = Point2::new(sx / sw, sy / sw);
        assert!((got - want).norm() < 0.05, "blob at {got}, pinhole position {want}");
    }
    let again = facetcal(
        dir.path(),
        &["undistort", "shot.png", "--calibration", "cal.json", "--out", "flat"],
    );
    assert_eq!(again.code, 65, "the only good image's output exists: {}", again.stderr);
    assert!(again.stderr.contains("--force"), "{}", again.stderr);
}

#[test]
fn a_bad_calibration_file_names_the_field() {
    let dir = scratch();
    let text = calibration(camera()).to_json().unwrap().replace("\"version\": 1", "\"version\": 9");
    std::fs::write(dir.path().join("cal.json"), text).unwrap();
    let run =
        facetcal(dir.path(), &["undistort", "x.png", "--calibration", "cal.json", "--out", "o"]);
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(run.stderr.contains("cal.json") && run.stderr.contains("version"), "{}", run.stderr);
}
