//! Property tests of the model crate: identities of the camera models, and parsers that never
//! panic whatever they are given.

use facetcal_model::{Camera, Distortion, Intrinsics, Target};
use nalgebra::{Point2, Point3};
use proptest::prelude::*;

fn camera() -> impl Strategy<Value = Camera> {
    let intrinsics = (300.0..3000.0f64, 0.9..1.1f64, -0.5..0.5f64);
    let brown = (-0.4..0.4f64, -0.2..0.2f64, -0.002..0.002f64, -0.002..0.002f64, -0.05..0.05f64)
        .prop_map(|(k1, k2, p1, p2, k3)| Distortion::BrownConrady { k1, k2, p1, p2, k3 });
    let fisheye = (-0.05..0.05f64, -0.01..0.01f64, -0.002..0.002f64, -0.0005..0.0005f64)
        .prop_map(|(k1, k2, k3, k4)| Distortion::KannalaBrandt { k1, k2, k3, k4 });
    let distortion = prop_oneof![Just(Distortion::None), brown, fisheye];
    (intrinsics, distortion).prop_map(|((f, aspect, skew), distortion)| Camera {
        width: 1280,
        height: 960,
        intrinsics: Intrinsics { fx: f, fy: f * aspect, cx: 640.0, cy: 480.0, skew },
        distortion,
    })
}

proptest! {
    /// Unproject then project is the identity wherever unprojection succeeds, and it succeeds
    /// everywhere inside the image for these moderate lenses.
    #[test]
    fn unproject_then_project_is_identity(cam in camera(), u in -0.5..1279.5f64, v in -0.5..959.5f64) {
        let px = Point2::new(u, v);
        match cam.unproject(&px) {
            Ok(ray) => {
                let back = cam.project(&Point3::from(ray * 2.0)).unwrap();
                prop_assert!((back - px).norm() < 1e-8, "{:?} -> {:?}", px, back);
            }
            Err(e) => {
                // Only strong barrel distortion with a short focal length folds inside the image.
                prop_assert!(matches!(cam.distortion, Distortion::BrownConrady { .. }), "{e}");
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
