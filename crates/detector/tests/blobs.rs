//! Dots (with the perspective correction), square corners and face-code marks on renders of
//! the bundled targets (`facetcal-render`), standard scene of the detector issue.
#![allow(clippy::needless_range_loop)]

mod common;

use common::*;
use facetcal_detector::{DetectorOptions, correct_dot_centre, detect};
use facetcal_model::{Face, PatternKind, PatternSpec, Pose, Target};
use facetcal_render::{Photometry, Scene, render_view};
use nalgebra::{Matrix3, Point2};

/// (tilt, tilt axis, in-plane spin), degrees.
const POSES: [(f64, f64, f64); 4] =
    [(0.0, 0.0, 3.0), (25.0, 30.0, 10.0), (45.0, 0.0, 7.0), (45.0, 90.0, -25.0)];

fn scene_of(target: Target, dist: f64) -> Scene {
    scene_blurred(target, dist, 1.0)
}

fn scene_blurred(target: Target, dist: f64, psf: f64) -> Scene {
    scene_with(target, dist, psf, Photometry { noise_sigma: 2.0, ..Photometry::default() })
}

fn scene_with(target: Target, dist: f64, psf: f64, photometry: Photometry) -> Scene {
    let (fw, fh) = target.faces()[0].size();
    let centre = Point2::new(fw / 2.0, fh / 2.0);
    let poses = POSES
        .iter()
        .map(|&(t, a, s)| tilted_pose(centre, dist, t.to_radians(), a.to_radians(), s.to_radians()))
        .collect();
    Scene::builder(target, standard_camera())
        .poses(poses)
        .psf_sigma_px(psf)
        .photometry(photometry)
        .seed(11)
        .build()
        .unwrap()
}

/// Plane-to-image homography of a face: `H = K [r1 r2 t]` of the face-to-camera pose.
fn face_homography(scene: &Scene, pose: &Pose, face: &Face) -> Matrix3<f64> {
    let p = pose.compose(face.pose());
    let r = p.matrix();
    let m = Matrix3::from_columns(&[r.column(0).into(), r.column(1).into(), p.translation]);
    scene.camera().intrinsics.matrix() * m
}

fn dot_grid(polarity: &str) -> Target {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../targets/dot-grid.json"
    ))
    .unwrap();
    Target::from_json(&text.replace("dark-on-light", polarity)).unwrap()
}

#[test]
fn dots_after_perspective_correction() {
    for polarity in ["dark-on-light", "light-on-dark"] {
        let target = dot_grid(polarity);
        let face = target.faces()[0].clone();
        let PatternSpec::DotGrid { diameter, .. } = *face.pattern() else { panic!("dot grid") };
        let scene = scene_of(target, 700.0);
        let opts = DetectorOptions::for_kind(PatternKind::DotGrid);
        let mut all = Errors::default();
        let mut per_tilt = Vec::new();
        for i in 0..POSES.len() {
            let view = render_view(&scene, i).unwrap();
            let det = detect(&to_detector(&view.image), &opts).unwrap();
            let h = face_homography(&scene, &scene.poses()[i], &face);
            let found: Vec<Point2<f64>> = det.dots.iter().map(|d| d.centre).collect();
            let mut e = Errors::default();
            for t in &view.truth.visible {
                e.total += 1;
                all.total += 1;
                if let Some(f) = nearest(t.pixel, &found, 3.0) {
                    let local = face.feature_local(t.id.row, t.id.col, 0).unwrap();
                    let corrected = correct_dot_centre(f, &h, local, diameter / 2.0).unwrap();
                    e.add(corrected - t.pixel);
                    all.add(corrected - t.pixel);
                }
            }
            println!(
                "{polarity} view {i} tilt {}: dots {} marks {} matched {}/{} rms {:.4} bias {:?}",
                POSES[i].0,
                det.dots.len(),
                det.marks.len(),
                e.n,
                e.total,
                e.rms(),
                e.bias()
            );
            assert_eq!(det.dots.len(), e.n, "every dot is a true dot");
            assert_eq!(det.marks.len(), 5, "the five marks of the face code");
            per_tilt.push(e);
        }
        println!(
            "{polarity}: recall {:.4} rms {:.4} bias {:?}",
            all.recall(),
            all.rms(),
            all.bias()
        );
        assert!(all.recall() >= 0.995);
        assert!(all.rms() <= 0.02, "rms {}", all.rms());
        // No bias trend against tilt: every view's mean error below 0.005 px per axis.
        for e in &per_tilt {
            let (bx, by) = e.bias();
            assert!(bx.abs() < 0.005 && by.abs() < 0.005, "bias {bx} {by}");
        }
    }
}

/// One rendered view's square corners against the truth: the detections, the errors of the
/// corners matched within 3 px, and for the sigma check the sums of squared per-axis errors and
/// of reported variances. Asserts that every detected corner is a true corner.
struct SquareView {
    squares: usize,
    marks: usize,
    errors: Errors,
    err2: f64,
    var: f64,
}

fn square_view(scene: &Scene, i: usize, opts: &DetectorOptions) -> SquareView {
    let view = render_view(scene, i).unwrap();
    let det = detect(&to_detector(&view.image), opts).unwrap();
    let found: Vec<Point2<f64>> = det.squares.iter().flat_map(|s| s.corners).collect();
    let sigmas: Vec<f64> = det.squares.iter().flat_map(|s| [s.sigma; 4]).collect();
    let mut out = SquareView {
        squares: det.squares.len(),
        marks: det.marks.len(),
        errors: Errors::default(),
        err2: 0.0,
        var: 0.0,
    };
    for t in &view.truth.visible {
        out.errors.total += 1;
        if let Some(f) = nearest(t.pixel, &found, 3.0) {
            out.errors.add(f - t.pixel);
            let k = found.iter().position(|p| *p == f).unwrap();
            out.err2 += 0.5 * (f - t.pixel).norm_squared();
            out.var += sigmas[k] * sigmas[k];
        }
    }
    assert_eq!(found.len(), out.errors.n, "view {i}: every corner is a true corner");
    out
}

fn merge(all: &mut Errors, e: &Errors) {
    all.n += e.n;
    all.total += e.total;
    all.se += e.se;
    all.sx += e.sx;
    all.sy += e.sy;
}

#[test]
fn square_corners() {
    let target = bundled("square-grid.json");
    let scene = scene_of(target, 650.0);
    let opts = DetectorOptions::for_kind(PatternKind::SquareGrid);
    let mut all = Errors::default();
    // Sums of squared errors and of reported variances, per axis, for the sigma check.
    let (mut err2, mut var) = (0.0, 0.0);
    for i in 0..POSES.len() {
        let v = square_view(&scene, i, &opts);
        let e = &v.errors;
        merge(&mut all, e);
        (err2, var) = (err2 + v.err2, var + v.var);
        println!(
            "view {i}: squares {} marks {} matched {}/{} rms {:.4} bias {:?}",
            v.squares,
            v.marks,
            e.n,
            e.total,
            e.rms(),
            e.bias()
        );
        // Squares that are lost lose their marks too (see the recall note below); no mark is
        // ever invented.
        assert!(v.marks <= 5, "no false marks");
    }
    let ratio = (err2 / var).sqrt();
    println!(
        "squares: recall {:.4} rms {:.4} bias {:?}; per-axis error rms / reported sigma {ratio:.3}",
        all.recall(),
        all.rms(),
        all.bias()
    );
    // The targets: recall at least 99.5 % of the visible corners, RMS at most 0.03 px
    // (measured 1.0 and 0.0264; the 45-degree views alone 0.029 and 0.034).
    assert!(all.recall() >= 0.995, "recall {}", all.recall());
    assert!(all.rms() <= 0.03, "rms {}", all.rms());
    // The reported sigma (from the line fits' residuals) against the errors measured on the
    // renderer's exact corners: consistent within a factor 1.5 either way.
    assert!((1.0 / 1.5..=1.5).contains(&ratio), "error / sigma {ratio}");
}

/// The detector issue's strongest blur, PSF sigma 2.5 px, on the standard scene's square grid
/// (sides of 29 to 34 px): corners round over a third of the side and the outline reads as
/// nearly round, yet every square is found and no corner is invented. Accuracy is reported
/// and guarded, not a target of the issue: measured recall 1.0, RMS 0.134 px (views 0.086,
/// 0.112, and the two 45-degree views 0.174 and 0.146). Before the square's final fit between
/// its fitted corners and the rounded-square test, a view at 45 degrees lost 17 of its 70
/// squares and the corners found were 0.2 to 0.6 px off.
#[test]
fn square_corners_under_a_strong_blur() {
    let scene = scene_blurred(bundled("square-grid.json"), 650.0, 2.5);
    let opts = DetectorOptions::for_kind(PatternKind::SquareGrid);
    let mut all = Errors::default();
    for i in 0..POSES.len() {
        let v = square_view(&scene, i, &opts);
        merge(&mut all, &v.errors);
        let e = &v.errors;
        println!(
            "blur 2.5, view {i}: squares {} matched {}/{} rms {:.4}",
            v.squares,
            e.n,
            e.total,
            e.rms()
        );
    }
    println!("squares at blur 2.5: recall {:.4} rms {:.4}", all.recall(), all.rms());
    assert!(all.recall() >= 0.995, "recall {}", all.recall());
    assert!(all.rms() <= 0.2, "rms {}", all.rms());
}

/// Square corners in images stored with a gamma: the midway level between ink and paper moves
/// with the encoding, and the outline with it. With the encoding declared the detector takes
/// its levels in light (see `facetcal_detector::encoding`). Measured on the standard scene's
/// square grid (noise 2, PSF 1): gamma 2.2 (stored `lin^(1/2.2)`, like a display encoding)
/// undeclared 0.497 px RMS, declared 0.031; gamma 0.5 undeclared 0.666, declared 0.031; against
/// 0.026 for the linear image. The undeclared figures are guarded too, so that this test shows
/// what declaring is for.
#[test]
fn square_corners_in_encoded_images() {
    use facetcal_detector::Encoding;
    let target = bundled("square-grid.json");
    for (gamma, undeclared_min, declared_max) in [(2.2, 0.3, 0.04), (0.5, 0.3, 0.04)] {
        let photometry = Photometry { gamma, noise_sigma: 2.0, ..Photometry::default() };
        let scene = scene_with(target.clone(), 650.0, 1.0, photometry);
        let rms = |encoding: Encoding| {
            let opts =
                DetectorOptions { encoding, ..DetectorOptions::for_kind(PatternKind::SquareGrid) };
            let mut all = Errors::default();
            for i in 0..POSES.len() {
                merge(&mut all, &square_view(&scene, i, &opts).errors);
            }
            assert!(all.recall() >= 0.995, "gamma {gamma}, {encoding}: recall {}", all.recall());
            all.rms()
        };
        let (off, on) = (rms(Encoding::Linear), rms(Encoding::Gamma(gamma)));
        println!("squares at gamma {gamma}: undeclared rms {off:.4}, declared {on:.4}");
        assert!(off >= undeclared_min, "gamma {gamma}: undeclared rms {off}");
        assert!(on <= declared_max, "gamma {gamma}: declared rms {on}");
    }
}
