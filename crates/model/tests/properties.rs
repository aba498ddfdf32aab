//! Property tests of the model crate: identities of the camera models, and parsers that never
//! panic whatever they are given.

use facetcal_model::{Camera, Distortion, Intrinsics, Target};
use nalgebra::{Point2, Point3};
use proptest::prelude::*;

/// Cameras whose whole 1280 x 960 image lies inside the model's valid domain.
fn moderate_camera() -> impl Strategy<Value = Camera> {
    let brown =
        (-0.15..0.15f64, -0.05..0.05f64, -0.002..0.002f64, -0.002..0.002f64, -0.01..0.01f64)
            .prop_map(|(k1, k2, p1, p2, k3)| Distortion::BrownConrady { k1, k2, p1, p2, k3 });
    let fisheye = (-0.02..0.02f64, -0.005..0.005f64, -0.001..0.001f64, -0.0002..0.0002f64)
        .prop_map(|(k1, k2, k3, k4)| Distortion::KannalaBrandt { k1, k2, k3, k4 });
    let distortion = prop_oneof![Just(Distortion::None), brown, fisheye];
    (1000.0..3000.0f64, 0.9..1.1f64, -0.5..0.5f64, distortion)
        .prop_map(|(f, aspect, skew, distortion)| camera(f, aspect, skew, distortion))
}

/// Radial cameras (no tangential terms) over wide ranges, some of them folding inside the image.
fn radial_camera() -> impl Strategy<Value = Camera> {
    let brown = (-0.6..0.3f64, -0.3..0.3f64, -0.1..0.1f64)
        .prop_map(|(k1, k2, k3)| Distortion::BrownConrady { k1, k2, p1: 0.0, p2: 0.0, k3 });
    let fisheye = (-0.1..0.05f64, -0.02..0.02f64, -0.005..0.005f64, -0.001..0.001f64)
        .prop_map(|(k1, k2, k3, k4)| Distortion::KannalaBrandt { k1, k2, k3, k4 });
    (200.0..1500.0f64, prop_oneof![brown, fisheye])
        .prop_map(|(f, distortion)| camera(f, 1.0, 0.0, distortion))
}

fn camera(f: f64, aspect: f64, skew: f64, distortion: Distortion) -> Camera {
    Camera {
        width: 1280,
        height: 960,
        intrinsics: Intrinsics { fx: f, fy: f * aspect, cx: 640.0, cy: 480.0, skew },
        distortion,
    }
}

/// The distorted normalised radius of the edge of the model's valid domain.
fn domain_edge_radius(d: &Distortion) -> f64 {
    let limit = d.valid_limit() * (1.0 - 1e-9);
    let c = d.coefficients();
    match d {
        Distortion::BrownConrady { .. } => {
            let u = limit * limit;
            limit * (1.0 + u * (c[0] + u * (c[1] + u * c[4])))
        }
        _ => {
            let s = limit * limit;
            limit * (1.0 + s * (c[0] + s * (c[1] + s * (c[2] + s * c[3]))))
        }
    }
}

proptest! {
    /// Unproject then project is the identity over the whole image.
    #[test]
    fn unproject_then_project_is_identity(cam in moderate_camera(), u in -0.5..1279.5f64, v in -0.5..959.5f64) {
        let px = Point2::new(u, v);
        let ray = cam.unproject(&px).map_err(|e| TestCaseError::fail(e.to_string()))?;
        let back = cam.project(&Point3::from(ray * 2.0)).unwrap();
        prop_assert!((back - px).norm() < 1e-8, "{:?} -> {:?}", px, back);
    }

    /// Unprojection refuses exactly the pixels beyond the image of the domain's edge, and round
    /// trips everywhere else.
    #[test]
    fn unprojection_refuses_only_outside_the_domain(cam in radial_camera(), u in -0.5..1279.5f64, v in -0.5..959.5f64) {
        let px = Point2::new(u, v);
        let r = cam.intrinsics.to_normalised(&px).norm();
        match cam.unproject(&px) {
            Ok(ray) => {
                let back = cam.project(&Point3::from(ray * 2.0)).unwrap();
                prop_assert!((back - px).norm() < 1e-8, "{:?} -> {:?}", px, back);
            }
            Err(e) => {
                let edge = domain_edge_radius(&cam.distortion);
                prop_assert!(r >= edge * (1.0 - 1e-6), "refused at radius {r} inside the edge {edge}: {e}");
            }
        }
    }

    /// Arbitrary text never panics the target parser.
    #[test]
    fn target_parser_never_panics(text in "\\PC{0,400}") {
        let _ = Target::from_json(&text);
    }

    /// Arbitrary numbers in a valid target's structure give a target or a field error, never
    /// a panic.
    #[test]
    fn target_checker_never_panics(
        rows in any::<i64>(), cell in any::<f64>(), margin in any::<f64>(),
        axis in prop::array::uniform3(any::<f64>()), mark in prop::array::uniform2(any::<i64>()),
    ) {
        let text = format!(
            r#"{{"format": "facetcal-target", "version": 1, "name": "p", "unit": "mm", "faces": [
              {{"id": 1, "pose": {{"origin": [0, 0, 0], "x_axis": [{}, {}, {}], "y_axis": [0, 1, 0]}},
               "pattern": {{"kind": "checkerboard", "rows": {rows}, "columns": 5, "cell": {cell:e}}},
               "margin": {margin:e}, "marks": [[{}, {}]]}}]}}"#,
            axis[0], axis[1], axis[2], mark[0], mark[1]
        );
        if let Ok(t) = Target::from_json(&text) {
            prop_assert!(t.feature_count() > 0);
            for (_, p) in t.features() {
                prop_assert!(p.coords.iter().all(|x| x.is_finite()));
            }
        }
    }
}
