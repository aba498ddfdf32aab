//! Analytic tests of the renderer: rendered edges and shapes sit where geometry puts them, to
//! the 0.002 px the project requires of ground truth.
//!
//! Both tests rest on first moments, which a symmetric blur kernel of unit sum and pixel
//! integration preserve (common practice in subpixel metrology):
//! - a straight edge between black (0) and white (1): along one row, the black mass in a window
//!   `[a - 0.5, b + 0.5]` that contains the whole blurred transition is `x_e - (a - 0.5)`, so
//!   `x_e = a - 0.5 + sum_x (1 - v(x))` for black on the left; that is also the 50 % crossing of
//!   the antisymmetric blurred profile;
//! - the intensity centroid `sum (1 - v) x / sum (1 - v)` of a black shape on white is the area
//!   centroid of its image.

use facetcal_model::{Camera, Distortion, Intrinsics, Pose, Target};
use facetcal_render::{Scene, render_view_noiseless};
use nalgebra::{Matrix3, Point2, Point3, Vector3};
use proptest::prelude::*;

/// A 2 x 2 checkerboard of 100 mm cells with a 10 mm margin: cell (0, 0) is black, so the
/// edge x = 110 (face frame) has black on its left for 10 < y < 110.
fn big_checker() -> Target {
    Target::from_json(
        r#"{"format": "facetcal-target", "version": 1, "name": "edge", "unit": "mm", "faces": [
        {"id": 1, "pose": {"rotation": [0,0,0], "translation": [0,0,0]},
         "pattern": {"kind": "checkerboard", "rows": 2, "columns": 2, "cell": 100}, "margin": 10}]}"#,
    )
    .unwrap()
}

/// A 2 x 2 grid of black dots of 30 mm diameter at a 100 mm pitch, 50 mm margin.
fn dots() -> Target {
    Target::from_json(
        r#"{"format": "facetcal-target", "version": 1, "name": "dots", "unit": "mm", "faces": [
        {"id": 1, "pose": {"rotation": [0,0,0], "translation": [0,0,0]},
         "pattern": {"kind": "dot-grid", "rows": 2, "columns": 2, "pitch": 100, "diameter": 30},
         "margin": 50}]}"#,
    )
    .unwrap()
}

/// A pose that looks at face point `(fx, fy)` from distance `z`, rotated about the optical
/// axis by `roll` and about the target's y axis by `tilt` (radians).
fn pose_at(fx: f64, fy: f64, z: f64, roll: f64, tilt: f64) -> Pose {
    let r = nalgebra::Rotation3::from_axis_angle(&Vector3::z_axis(), roll)
        * nalgebra::Rotation3::from_axis_angle(&Vector3::y_axis(), tilt);
    let t = Vector3::new(0.0, 0.0, z) - r * Vector3::new(fx, fy, 0.0);
    Pose::from_matrix(r.matrix(), t)
}

/// Where the image of the 3-D line `p + s d` crosses image row `y`, found by bisection on `s`
/// with the camera model itself (analytic for pinhole, exact to 1e-12 px for any model).
fn crossing_at_row(cam: &Camera, pose: &Pose, p: Point3<f64>, d: Vector3<f64>, y: f64) -> f64 {
    let at = |s: f64| cam.project(&pose.transform(&(p + d * s))).unwrap();
    let (mut lo, mut hi) = (-1.0, 1.0);
    let increasing = at(hi).y > at(lo).y;
    for _ in 0..200 {
        let m = 0.5 * (lo + hi);
        if (at(m).y < y) == increasing { lo = m } else { hi = m }
    }
    at(0.5 * (lo + hi)).x
}

/// The worst error of the mass-centre edge position over the rows where the edge is clean.
fn worst_edge_error(cam: Camera, pose: Pose, sigma: f64) -> f64 {
    let scene = Scene::builder(big_checker(), cam).pose(pose).psf_sigma_px(sigma).build().unwrap();
    let img = render_view_noiseless(&scene, 0).unwrap().optical;
    // The edge x = 110 between y = 10 and 110, as a line through (110, 60) along y (units of
    // 50 mm so that s in [-1, 1] spans it).
    let p = Point3::new(110.0, 60.0, 0.0);
    let d = Vector3::new(0.0, 50.0, 0.0);
    let top = cam.project(&pose.transform(&Point3::new(110.0, 25.0, 0.0))).unwrap();
    let bottom = cam.project(&pose.transform(&Point3::new(110.0, 95.0, 0.0))).unwrap();
    let mut worst: f64 = 0.0;
    let mut rows = 0;
    for y in (top.y.min(bottom.y).ceil() as usize)..=(top.y.max(bottom.y).floor() as usize) {
        // A row integrates the curve against the vertical kernel (pixel box and Gaussian, a
        // symmetric kernel of variance V = sigma^2 + 1/12), which moves a curve with second
        // derivative x'' by V x'' / 2 (Taylor expansion; zero for a straight edge).
        let x_at = |y: f64| crossing_at_row(&cam, &pose, p, d, y);
        let xe0 = x_at(y as f64);
        let h = 2.0;
        let second = (x_at(y as f64 + h) - 2.0 * xe0 + x_at(y as f64 - h)) / (h * h);
        let xe = xe0 + 0.5 * (sigma * sigma + 1.0 / 12.0) * second;
        // The window spans the black cell and the white one, clear of the black cell's left
        // edge (face x = 10) and of the face outline (x = 220) by the blur's reach (the
        // kernel is cut at 4 sigma) plus two pixels.
        let reach = 4.0 * sigma + 2.0;
        let left = crossing_at_row(&cam, &pose, Point3::new(10.0, 60.0, 0.0), d, y as f64);
        let right = crossing_at_row(&cam, &pose, Point3::new(220.0, 60.0, 0.0), d, y as f64);
        let (a, b) = ((left + reach).ceil() as usize, (right - reach).floor() as usize);
        assert!(xe - a as f64 > reach && b as f64 - xe > reach, "window too small at row {y}");
        let black: f64 = (a..=b).map(|x| 1.0 - img.get(x, y)).sum();
        let est = a as f64 - 0.5 + black;
        worst = worst.max((est - xe).abs());
        rows += 1;
    }
    assert!(rows > 40, "only {rows} rows checked");
    worst
}

/// A straight edge within 0.5 degrees of a pixel column, frontal and tilted by 35 degrees,
/// with and without blur: every row locates it at its analytic position to 0.002 px.
/// Source of the reference: the pinhole projection of the edge line (analytic).
#[test]
fn straight_edges_nearly_aligned_with_pixel_columns_sit_at_their_analytic_position() {
    let cam = Camera::pinhole(320, 240, 800.0, 800.0, 159.5, 119.5);
    for (roll_deg, tilt_deg, sigma) in
        [(0.4, 0.0, 1.0), (0.13, 0.0, 0.0), (-0.45, 35.0, 1.0), (0.0, 0.0, 2.5), (0.3, -20.0, 0.6)]
    {
        let pose =
            pose_at(110.0, 60.0, 1000.0, f64::to_radians(roll_deg), f64::to_radians(tilt_deg));
        let worst = worst_edge_error(cam, pose, sigma);
        eprintln!("edge roll {roll_deg} tilt {tilt_deg} sigma {sigma}: worst {worst:.2e} px");
        assert!(worst < 0.002, "roll {roll_deg} tilt {tilt_deg} sigma {sigma}: {worst} px");
    }
}

/// The same near a pixel row: a roll of 90 - 0.35 degrees turns the edge nearly horizontal;
/// the image is transposed by swapping the camera's axes in the pose, and the columns of the
/// rendered image checked through its transpose.
#[test]
fn straight_edges_nearly_aligned_with_pixel_rows_sit_at_their_analytic_position() {
    let cam = Camera::pinhole(240, 320, 800.0, 800.0, 119.5, 159.5);
    let pose = pose_at(110.0, 60.0, 1000.0, f64::to_radians(90.0 - 0.35), 0.0);
    let scene = Scene::builder(big_checker(), cam).pose(pose).psf_sigma_px(1.0).build().unwrap();
    let img = render_view_noiseless(&scene, 0).unwrap().optical;
    let p = Point3::new(110.0, 60.0, 0.0);
    let mut worst: f64 = 0.0;
    // Roll by ~90 degrees maps face x to image y and face y to image -x, so the edge runs
    // along x with black (face x < 110) above it.
    for x in 90..150usize {
        let at =
            |s: f64| cam.project(&pose.transform(&(p + Vector3::new(0.0, 50.0, 0.0) * s))).unwrap();
        let (mut lo, mut hi) = (-1.0, 1.0);
        let increasing = at(hi).x > at(lo).x;
        for _ in 0..200 {
            let m = 0.5 * (lo + hi);
            if (at(m).x < x as f64) == increasing { lo = m } else { hi = m }
        }
        let ye = at(0.5 * (lo + hi)).y;
        let (a, b) = ((ye - 25.0).round() as usize, (ye + 25.0).round() as usize);
        // Black above the edge: sum of blackness = y_e - (a - 0.5).
        let black: f64 = (a..=b).map(|y| 1.0 - img.get(x, y)).sum();
        let est = a as f64 - 0.5 + black;
        worst = worst.max((est - ye).abs());
    }
    eprintln!("near-horizontal edge: worst {worst:.2e} px");
    assert!(worst < 0.002, "{worst} px");
}

/// Lens distortion bends the pattern as the camera model says: under Brown-Conrady radial
/// distortion strong enough to bow a line by several pixels, each row's edge position follows
/// the distorted curve computed with the model's own projection.
#[test]
fn distorted_edges_follow_the_camera_model() {
    let cam = Camera {
        width: 640,
        height: 480,
        intrinsics: Intrinsics { fx: 400.0, fy: 400.0, cx: 319.5, cy: 239.5, skew: 0.0 },
        distortion: Distortion::BrownConrady { k1: -0.6, k2: 0.2, p1: 0.002, p2: -0.001, k3: 0.0 },
    };
    // The edge 250 px right of the image centre (before distortion), so that it bows.
    let pose = pose_at(-202.5, 60.0, 500.0, 0.002, 0.0);
    // How far the edge bows: distorted minus straight chord at the middle row.
    let e0 = cam.project(&pose.transform(&Point3::new(110.0, 25.0, 0.0))).unwrap();
    let e1 = cam.project(&pose.transform(&Point3::new(110.0, 95.0, 0.0))).unwrap();
    let em = cam.project(&pose.transform(&Point3::new(110.0, 60.0, 0.0))).unwrap();
    let bow = (em.x - 0.5 * (e0.x + e1.x)).abs();
    assert!(bow > 0.1, "the test needs a bowed edge, bow {bow}");
    for sigma in [0.0, 1.0, 2.0] {
        let worst = worst_edge_error(cam, pose, sigma);
        eprintln!("distorted edge, bow {bow:.3} px, sigma {sigma}: worst {worst:.2e} px");
        assert!(worst < 0.002, "sigma {sigma}: {worst} px");
    }
}

/// The 50 % crossing of an edge through pixel centres: with the edge exactly on the column
/// x = 160, that column reads 0.5 and columns at equal distances either side add up to 1
/// (antisymmetry of a step blurred by a symmetric kernel).
#[test]
fn an_edge_on_pixel_centres_reads_half_and_is_antisymmetric() {
    let cam = Camera::pinhole(320, 240, 800.0, 800.0, 159.5, 119.5);
    // u = 800 X / 1000 + 159.5 = 160 at X = 0.625 mm from the optical axis.
    let pose = Pose::from_axis_angle(Vector3::zeros(), Vector3::new(0.625 - 110.0, -60.0, 1000.0));
    let scene = Scene::builder(big_checker(), cam).pose(pose).psf_sigma_px(1.0).build().unwrap();
    let img = render_view_noiseless(&scene, 0).unwrap().optical;
    for y in [100usize, 120, 140] {
        assert!((img.get(160, y) - 0.5).abs() < 1e-9, "{}", img.get(160, y));
        for k in 1..10 {
            let s = img.get(160 + k, y) + img.get(160 - k, y);
            assert!((s - 1.0).abs() < 1e-9, "k {k}: {s}");
        }
    }
}

/// The intensity centroid of each rendered dot of a target tilted by 40 degrees equals the
/// centre of its exact image ellipse, the conic `C' = H^-T C H^-1` of the dot's circle `C`
/// under the face-to-image homography `H = K [r1 r2 t]` (R. Hartley and A. Zisserman,
/// "Multiple View Geometry in Computer Vision", 2nd ed., 2003, sec. 2.2.3, result 2.13); the
/// centre of a conic is `-M^-1 (c13, c23)` with `M` its upper 2 x 2 block, and the centre of an
/// ellipse is its area centroid. Not the projected circle centre: that differs by the
/// perspective bias, which the test also shows is much larger than the tolerance.
#[test]
fn dot_centroids_equal_the_centres_of_their_exact_image_ellipses() {
    let cam = Camera::pinhole(640, 480, 1000.0, 1000.0, 319.5, 239.5);
    let pose = pose_at(150.0, 150.0, 500.0, 0.3, f64::to_radians(40.0));
    let target = dots();
    for sigma in [1.0, 0.0, 2.0] {
        let scene =
            Scene::builder(target.clone(), cam).pose(pose).psf_sigma_px(sigma).build().unwrap();
        let img = render_view_noiseless(&scene, 0).unwrap().optical;
        let face = &target.faces()[0];
        let fc = pose.compose(face.pose());
        let r = fc.matrix();
        let h = cam.intrinsics.matrix()
            * Matrix3::from_columns(&[
                r.column(0).into_owned(),
                r.column(1).into_owned(),
                fc.translation,
            ]);
        let hinv = h.try_inverse().unwrap();
        let mut worst: f64 = 0.0;
        let mut bias: f64 = 0.0;
        for (_, c) in face.features_local() {
            let rad = 15.0;
            let conic = Matrix3::new(
                1.0,
                0.0,
                -c.x,
                0.0,
                1.0,
                -c.y,
                -c.x,
                -c.y,
                c.x * c.x + c.y * c.y - rad * rad,
            );
            let ci = hinv.transpose() * conic * hinv;
            let m = nalgebra::Matrix2::new(ci[(0, 0)], ci[(0, 1)], ci[(1, 0)], ci[(1, 1)]);
            let centre = -m.try_inverse().unwrap() * nalgebra::Vector2::new(ci[(0, 2)], ci[(1, 2)]);
            // Window: the ellipse's bounding box (from 64 boundary points) plus 6 sigma + 3 px.
            let mut bb = [f64::INFINITY, f64::INFINITY, f64::NEG_INFINITY, f64::NEG_INFINITY];
            for k in 0..64 {
                let a = k as f64 * std::f64::consts::TAU / 64.0;
                let p = cam
                    .project(&pose.transform(
                        &face.to_target(&Point2::new(c.x + rad * a.cos(), c.y + rad * a.sin())),
                    ))
                    .unwrap();
                bb = [bb[0].min(p.x), bb[1].min(p.y), bb[2].max(p.x), bb[3].max(p.y)];
            }
            let pad = 6.0 * sigma + 3.0;
            let (mut sw, mut sx, mut sy) = (0.0, 0.0, 0.0);
            for y in ((bb[1] - pad).floor() as usize)..=((bb[3] + pad).ceil() as usize) {
                for x in ((bb[0] - pad).floor() as usize)..=((bb[2] + pad).ceil() as usize) {
                    let w = 1.0 - img.get(x, y);
                    sw += w;
                    sx += w * x as f64;
                    sy += w * y as f64;
                }
            }
            let got = nalgebra::Vector2::new(sx / sw, sy / sw);
            worst = worst.max((got - centre).norm());
            let projected = cam.project(&pose.transform(&face.to_target(&c))).unwrap();
            bias = bias.max((projected.coords - centre).norm());
        }
        eprintln!(
            "dots sigma {sigma}: worst centroid error {worst:.2e} px, perspective bias {bias:.3} px"
        );
        assert!(worst < 0.002, "sigma {sigma}: {worst} px");
        assert!(bias > 0.02, "the tilt must make the perspective bias visible, {bias}");
    }
}

fn shifted_scene(dx: i32, dy: i32, distortion: Distortion) -> Scene {
    let cam = Camera {
        width: 96,
        height: 72,
        intrinsics: Intrinsics {
            fx: 150.0,
            fy: 150.0,
            cx: 47.5 + dx as f64,
            cy: 35.5 + dy as f64,
            skew: 0.0,
        },
        distortion,
    };
    let pose = pose_at(110.0, 110.0, 1000.0, 0.2, 0.3);
    let b = facetcal_render::Background {
        texture_amplitude: 0.3,
        texture_scale_px: 6.0,
        ..Default::default()
    };
    Scene::builder(big_checker(), cam).pose(pose).psf_sigma_px(0.8).background(b).build().unwrap()
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 8, ..ProptestConfig::default() })]

    /// Shifting the principal point by whole pixels shifts the noiseless image by exactly as
    /// many pixels (an identity of the pinhole model: u = fx x + cx).
    #[test]
    fn principal_point_shifts_shift_the_image(dx in -6i32..=6, dy in -6i32..=6, k1 in -0.3f64..0.3) {
        let dist = Distortion::BrownConrady { k1, k2: 0.0, p1: 0.0, p2: 0.0, k3: 0.0 };
        let a = render_view_noiseless(&shifted_scene(0, 0, dist), 0).unwrap().optical;
        let b = render_view_noiseless(&shifted_scene(dx, dy, dist), 0).unwrap().optical;
        let mut compared = 0;
        for y in 0..72i32 {
            for x in 0..96i32 {
                let (xs, ys) = (x + dx, y + dy);
                if xs < 0 || ys < 0 || xs >= 96 || ys >= 72 {
                    continue;
                }
                let va = a.get(x as usize, y as usize);
                let vb = b.get(xs as usize, ys as usize);
                prop_assert!((va - vb).abs() < 1e-12, "({x}, {y}): {va} vs {vb}");
                compared += 1;
            }
        }
        prop_assert!(compared >= 84 * 60);
        // The image is not flat, so the comparison has teeth.
        let (lo, hi) = a.data.iter().fold((1.0f64, 0.0f64), |(l, h), v| (l.min(*v), h.max(*v)));
        prop_assert!(hi - lo > 0.5);
    }
}
