//! Synthetic truth: correspondence sets made by projecting the bundled targets with a known
//! camera (the model crate's projection) and adding seeded normal noise. The tolerances are
//! those of the solver's issue; the noise model (independent normal pixel noise) is common
//! practice for detected corners.

mod common;

use common::{look_at, observe, target};
use facetcal_model::files::FreeParameters;
use facetcal_model::{Camera, Distortion, DistortionKind, FeatureId, Intrinsics, Pose, SeededRng};
use facetcal_solver::{Options, SolverError, ViewObservations, calibrate};
use nalgebra::{Point3, Vector3};

fn truth() -> Camera {
    Camera {
        width: 1280,
        height: 960,
        intrinsics: Intrinsics { fx: 1150.0, fy: 1147.0, cx: 645.3, cy: 478.1, skew: 0.0 },
        distortion: Distortion::BrownConrady { k1: -0.12, k2: 0.05, p1: 0.0, p2: 0.0, k3: 0.0 },
    }
}

/// Views of the planar checkerboard (9 x 12 cells of 20 mm) from tilted directions.
fn planar_views(
    camera: &Camera,
    n: usize,
    noise: f64,
    rng: &mut SeededRng,
) -> (Vec<ViewObservations>, Vec<Pose>) {
    let t = target("checkerboard.json");
    let pts = t.features();
    let (lo, hi) = t.bounds();
    let c = Point3::from((lo.coords + hi.coords) / 2.0);
    let mut views = Vec::new();
    let mut poses = Vec::new();
    for v in 0..n {
        let tilt = rng.range(0.35, 0.9);
        let az = rng.range(0.0, std::f64::consts::TAU);
        let dist = rng.range(300.0, 420.0);
        // The board's features face -z of the target frame for a camera in front of it.
        let dir = Vector3::new(tilt.sin() * az.cos(), tilt.sin() * az.sin(), -tilt.cos());
        let eye = c + dir * dist;
        let pose = look_at(c, eye, rng.range(-0.5, 0.5));
        views.push(observe(camera, &pts, &pose, noise, rng, format!("view{v}")));
        poses.push(pose);
    }
    (views, poses)
}

/// One view of the three-face box corner.
fn corner_view(camera: &Camera, noise: f64, rng: &mut SeededRng) -> (ViewObservations, Pose) {
    let t = target("corner.json");
    let pts = t.features();
    let (lo, hi) = t.bounds();
    let c = Point3::from((lo.coords + hi.coords) / 2.0);
    let eye = c + Vector3::new(1.0, 0.9, 1.1).normalize() * 430.0;
    let pose = look_at(c, eye, 0.3);
    (observe(camera, &pts, &pose, noise, rng, "corner".into()), pose)
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

/// One image of the three-face target, 0.1 px noise: fx and fy within 0.1 %, cx and cy within
/// 1 px (issue requirement), from the DLT start with no camera given.
#[test]
fn one_image_of_the_three_face_target() {
    let cam = truth();
    let mut rng = SeededRng::new(11);
    let (view, _) = corner_view(&cam, 0.1, &mut rng);
    assert!(view.points.len() > 120, "{} points visible", view.points.len());
    let cal =
        calibrate(&[view], (1280, 960), DistortionKind::BrownConrady, None, &Options::default())
            .unwrap();
    let i = cal.camera.intrinsics;
    eprintln!("{}\n{i:?}", cal.summary.brief_report());
    assert!(cal.summary.is_usable());
    assert!(rel(i.fx, 1150.0) < 1e-3, "fx {}", i.fx);
    assert!(rel(i.fy, 1147.0) < 1e-3, "fy {}", i.fy);
    assert!((i.cx - 645.3).abs() < 1.0, "cx {}", i.cx);
    assert!((i.cy - 478.1).abs() < 1.0, "cy {}", i.cy);
    // The residual RMS matches the noise: E|r|^2 = 2 sigma^2 (m - n) / m.
    assert!((cal.summary.rms_px - 0.1 * 2f64.sqrt()).abs() < 0.02, "{}", cal.summary.rms_px);
}

/// 20 planar views, 0.1 px noise: fx, fy, cx, cy within 0.05 % (issue requirement).
#[test]
fn twenty_planar_views() {
    let cam = truth();
    let mut rng = SeededRng::new(5);
    let (views, poses) = planar_views(&cam, 20, 0.1, &mut rng);
    let cal =
        calibrate(&views, (1280, 960), DistortionKind::BrownConrady, None, &Options::default())
            .unwrap();
    let i = cal.camera.intrinsics;
    eprintln!("{}\n{i:?}\n{:?}", cal.summary.brief_report(), cal.parameters);
    assert!(cal.summary.is_usable());
    for (got, want, name) in
        [(i.fx, 1150.0, "fx"), (i.fy, 1147.0, "fy"), (i.cx, 645.3, "cx"), (i.cy, 478.1, "cy")]
    {
        assert!(rel(got, want) < 5e-4, "{name}: {got} vs {want}");
    }
    for (p, q) in cal.poses.iter().zip(&poses) {
        let p = p.unwrap();
        assert!(p.angle_to(q) < 1e-3 && (p.translation - q.translation).norm() < 0.5);
    }
    assert!(cal.rejected.is_empty());
    // Levenberg-Marquardt never increases the cost.
    let costs: Vec<f64> = cal.summary.records.iter().map(|r| r.cost).collect();
    assert!(costs.windows(2).all(|w| w[1] <= w[0]), "{costs:?}");
}

/// Honest uncertainty: over 200 seeded trials the errors divided by the reported standard
/// deviations have an RMS between 0.8 and 1.25 (issue requirement; for a correct covariance
/// the ratio is a standard normal deviate, RMS 1). A modest problem: 4 planar views,
/// 0.3 px noise, fx, fy, cx, cy, k1, k2 free.
#[test]
fn reported_standard_deviations_are_honest() {
    let cam = truth();
    let trials = 200;
    let mut sum_sq = [0.0f64; 6];
    for trial in 0..trials {
        let mut rng = SeededRng::stream(2024, trial);
        let (views, _) = planar_views(&cam, 4, 0.3, &mut rng);
        let o = Options { reject_sigmas: 0.0, ..Options::default() };
        let cal = calibrate(&views, (1280, 960), DistortionKind::BrownConrady, None, &o).unwrap();
        let truth = cam.params();
        for (k, idx) in [0usize, 1, 2, 3, 5, 6].iter().enumerate() {
            let p = &cal.parameters[*idx];
            let z = (p.value - truth[*idx]) / p.std_dev.unwrap();
            sum_sq[k] += z * z;
        }
    }
    let per: Vec<f64> = sum_sq.iter().map(|s| (s / trials as f64).sqrt()).collect();
    let all = (sum_sq.iter().sum::<f64>() / (6 * trials) as f64).sqrt();
    eprintln!("RMS of error / std dev: all {all:.3}, per parameter {per:.3?}");
    assert!((0.8..=1.25).contains(&all), "{all}");
    for (r, name) in per.iter().zip(["fx", "fy", "cx", "cy", "k1", "k2"]) {
        // Each per-parameter RMS has a sampling spread of about 1 / sqrt(400) = 5 %.
        assert!((0.75..=1.3).contains(r), "{name}: {r}");
    }
}

/// Results are bit-identical whatever the thread count.
#[test]
fn results_do_not_depend_on_the_thread_count() {
    let cam = truth();
    let mut rng = SeededRng::new(77);
    let (views, _) = planar_views(&cam, 12, 0.2, &mut rng);
    let run = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
        pool.install(|| {
            calibrate(&views, (1280, 960), DistortionKind::BrownConrady, None, &Options::default())
                .unwrap()
        })
    };
    let (a, b) = (run(1), run(2));
    assert_eq!(a.camera, b.camera);
    assert_eq!(a.poses, b.poses);
    assert_eq!(a.covariance, b.covariance);
    assert_eq!(a.summary, b.summary);
}

/// Gross outliers are rejected and reported with their residuals; the estimate is unharmed.
#[test]
fn outliers_are_rejected_and_reported() {
    let cam = truth();
    let mut rng = SeededRng::new(3);
    let (mut views, _) = planar_views(&cam, 6, 0.1, &mut rng);
    let bad = [(0usize, 5usize), (2, 40), (4, 17)];
    for &(v, k) in &bad {
        views[v].points[k].image.x += 9.0;
        views[v].points[k].image.y -= 6.0;
    }
    let cal =
        calibrate(&views, (1280, 960), DistortionKind::BrownConrady, None, &Options::default())
            .unwrap();
    let mut got: Vec<(usize, usize)> = cal.rejected.iter().map(|r| (r.view, r.index)).collect();
    got.sort();
    assert_eq!(got, bad.to_vec());
    for r in &cal.rejected {
        assert!((r.residual_px - 117f64.sqrt()).abs() < 1.0, "{r:?}");
    }
    assert!(rel(cal.camera.intrinsics.fx, 1150.0) < 1e-3);
}

/// The target self-survey: faces 2 and 3 of the box corner are off their nominal poses (a
/// hand-assembled corner); the solver recovers the corrections within a few standard
/// deviations, and the calibration is as good as with the true geometry.
#[test]
fn target_self_survey_recovers_face_poses() {
    let cam = truth();
    let t = target("corner.json");
    let nominal = t.features();
    let corrections = [
        (
            2u32,
            Pose::from_axis_angle(Vector3::new(0.006, -0.004, 0.003), Vector3::new(0.3, -0.2, 0.4)),
        ),
        (
            3u32,
            Pose::from_axis_angle(
                Vector3::new(-0.003, 0.005, -0.004),
                Vector3::new(-0.4, 0.2, 0.1),
            ),
        ),
    ];
    let actual: Vec<(FeatureId, Point3<f64>)> = nominal
        .iter()
        .map(|(id, x)| {
            let c = corrections.iter().find(|(f, _)| *f == id.face);
            (*id, c.map_or(*x, |(_, p)| p.transform(x)))
        })
        .collect();
    let mut rng = SeededRng::new(9);
    let (lo, hi) = t.bounds();
    let c = Point3::from((lo.coords + hi.coords) / 2.0);
    let mut views = Vec::new();
    for v in 0..6 {
        let dir = Vector3::new(
            1.0 + rng.range(-0.4, 0.4),
            1.0 + rng.range(-0.4, 0.4),
            1.0 + rng.range(-0.4, 0.4),
        );
        let pose = look_at(c, c + dir.normalize() * rng.range(420.0, 520.0), rng.range(-0.5, 0.5));
        let mut obs = observe(&cam, &actual, &pose, 0.1, &mut rng, format!("v{v}"));
        // The solver is given the nominal points.
        for p in &mut obs.points {
            p.target = t.feature_point(p.id.unwrap()).unwrap();
        }
        views.push(obs);
    }
    let o = Options { survey_faces: true, ..Options::default() };
    let cal = calibrate(&views, (1280, 960), DistortionKind::BrownConrady, None, &o).unwrap();
    assert_eq!(cal.faces.len(), 2);
    for (f, (id, truth)) in cal.faces.iter().zip(&corrections) {
        assert_eq!(f.face, *id);
        let dw = (f.correction.rotation * truth.rotation.inverse()).scaled_axis();
        let dt = f.correction.translation - truth.translation;
        for j in 0..3 {
            assert!(
                dw[j].abs() < 5.0 * f.std_dev[j],
                "face {id} w{j}: {} sd {}",
                dw[j],
                f.std_dev[j]
            );
            assert!(
                dt[j].abs() < 5.0 * f.std_dev[3 + j] + 0.05,
                "face {id} t{j}: {} sd {}",
                dt[j],
                f.std_dev[3 + j]
            );
        }
    }
    assert!((cal.summary.rms_px - 0.1 * 2f64.sqrt()).abs() < 0.02, "{}", cal.summary.rms_px);
    // Without the survey the same data leave a visible misfit.
    let plain =
        calibrate(&views, (1280, 960), DistortionKind::BrownConrady, None, &Options::default())
            .unwrap();
    assert!(plain.summary.rms_px > 2.0 * cal.summary.rms_px, "{}", plain.summary.rms_px);
}

/// Degenerate configurations give reasoned errors, not numbers.
#[test]
fn degenerate_configurations_are_refused() {
    let cam = truth();
    let mut rng = SeededRng::new(1);
    let (views, _) = planar_views(&cam, 3, 0.1, &mut rng);
    // One planar view with free intrinsics.
    let e = calibrate(
        &views[..1],
        (1280, 960),
        DistortionKind::BrownConrady,
        None,
        &Options::default(),
    )
    .unwrap_err();
    assert!(matches!(e, SolverError::TooFewViews { got: 1, need: 2, .. }), "{e}");
    // ... but with the principal point fixed, one view determines the focal length.
    let fixed = Options {
        free: FreeParameters {
            principal_point: false,
            aspect_ratio: false,
            ..FreeParameters::default()
        },
        ..Options::default()
    };
    assert!(calibrate(&views[..1], (1280, 960), DistortionKind::None, None, &fixed).is_ok());
    // Nearly parallel views: the same board orientation, only moved sideways.
    let t = target("checkerboard.json");
    let base = look_at(Point3::new(120.0, 90.0, 0.0), Point3::new(160.0, 60.0, -450.0), 0.2);
    let par: Vec<ViewObservations> = (0..3)
        .map(|v| {
            let mut p = base;
            p.translation += Vector3::new(v as f64 * 15.0, -(v as f64) * 10.0, v as f64 * 20.0);
            observe(
                &Camera { distortion: Distortion::None, ..cam },
                &t.features(),
                &p,
                0.0,
                &mut rng,
                format!("p{v}"),
            )
        })
        .collect();
    let e =
        calibrate(&par, (1280, 960), DistortionKind::None, None, &Options::default()).unwrap_err();
    assert!(matches!(e, SolverError::ParallelViews { .. }), "{e}");
    // Points on a line.
    let mut line = views[0].clone();
    line.points.retain(|p| p.id.unwrap().row == 3);
    let e = calibrate(
        &[line.clone(), line],
        (1280, 960),
        DistortionKind::None,
        None,
        &Options::default(),
    )
    .unwrap_err();
    assert!(matches!(e, SolverError::PointsOnLine { .. }), "{e}");
    // Too few points.
    let mut few = views[0].clone();
    few.points.truncate(3);
    let e = calibrate(&[few], (1280, 960), DistortionKind::None, None, &Options::default())
        .unwrap_err();
    assert!(matches!(e, SolverError::TooFewPoints { got: 3, .. }), "{e}");
}

/// Warnings where the data do not constrain a parameter: k3 free beside k1 and k2 (radial
/// terms of neighbouring order are strongly correlated over a small field, common practice),
/// and the focal length from two nearly fronto-parallel views (a plane parallel to the image
/// gives no constraint on the focal length, Zhang 2000, section 3.3).
#[test]
fn weakly_constrained_parameters_are_warned_about() {
    let cam = truth();
    let mut rng = SeededRng::new(21);
    let (views, _) = planar_views(&cam, 5, 0.2, &mut rng);
    let o = Options {
        free: FreeParameters { k3: true, ..FreeParameters::default() },
        ..Options::default()
    };
    let cal = calibrate(&views, (1280, 960), DistortionKind::BrownConrady, None, &o).unwrap();
    let corr: Vec<_> = cal.warnings.iter().filter(|w| w.kind == "strong-correlation").collect();
    assert!(corr.iter().any(|w| w.parameters.contains(&"k3".to_string())), "{:?}", cal.warnings);
    // Two distant views tilted by about 6 degrees.
    let t = target("checkerboard.json");
    let c = Point3::new(120.0, 90.0, 0.0);
    let flat: Vec<ViewObservations> = [(0.1, 0.0), (0.0, 0.1)]
        .iter()
        .enumerate()
        .map(|(v, &(a, b))| {
            let eye = c + Vector3::new(a, b, -1.0).normalize() * 900.0;
            observe(&cam, &t.features(), &look_at(c, eye, 0.0), 0.2, &mut rng, format!("f{v}"))
        })
        .collect();
    let cal =
        calibrate(&flat, (1280, 960), DistortionKind::BrownConrady, None, &Options::default());
    match cal {
        Ok(cal) => {
            let weak: Vec<_> = cal.warnings.iter().filter(|w| w.kind == "weak-parameter").collect();
            assert!(
                weak.iter().any(|w| w.parameters == ["fx"])
                    && weak.iter().any(|w| w.parameters == ["fy"]),
                "{:?}",
                cal.warnings
            );
        }
        // Refusing the configuration outright is also a reasoned outcome.
        Err(e) => assert!(matches!(e, SolverError::ParallelViews { .. }), "{e}"),
    }
}
