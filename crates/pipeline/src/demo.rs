//! The built-in demonstration, a scenario of facetcal's own: the end-of-line station of a
//! camera-module line calibrates each module of a lot from a single shot of the three-face
//! corner fixture (`targets/corner.json`, embedded here). The modules' true intrinsics and
//! distortion vary from unit to unit as a real lot's would; the shots are rendered with exact
//! ground truth, so the estimates can be printed beside the truth.
//!
//! All numbers here are invented for the demonstration.

use facetcal_model::{Camera, Distortion, Intrinsics, SeededRng, Target};
use facetcal_render::{Optics, Photometry, PoseGenerator, RenderError, Scene};

/// The embedded corner target.
pub const CORNER_TARGET: &str = include_str!("../../../targets/corner.json");

/// Seed of the demonstration lot.
pub const DEMO_SEED: u64 = 20261201;

/// One module of the demonstration lot.
#[derive(Clone, Debug)]
pub struct DemoUnit {
    /// Serial number printed on the module.
    pub serial: String,
    /// The module's true camera.
    pub truth: Camera,
}

/// The corner target of the demonstration.
///
/// # Panics
/// Never for the embedded file, which the test suite checks.
// The embedded file is checked by this crate's tests.
#[allow(clippy::expect_used)]
pub fn demo_target() -> Target {
    Target::from_json(CORNER_TARGET).expect("the embedded corner target is valid")
}

/// The lot: `count` modules with a 1280 x 960 sensor and a lens of about 1100 px focal length,
/// scattered around nominal as a production lot would be.
pub fn demo_lot(count: usize) -> Vec<DemoUnit> {
    let mut rng = SeededRng::new(DEMO_SEED);
    (0..count)
        .map(|i| {
            let fx = 1100.0 * (1.0 + 0.015 * rng.normal());
            let fy = fx * (1.0 + 0.002 * rng.normal());
            DemoUnit {
                serial: format!("QX17-{:04}", 311 + 7 * i),
                truth: Camera {
                    width: 1280,
                    height: 960,
                    intrinsics: Intrinsics {
                        fx,
                        fy,
                        cx: 639.5 + 6.0 * rng.normal(),
                        cy: 479.5 + 6.0 * rng.normal(),
                        skew: 0.0,
                    },
                    distortion: Distortion::BrownConrady {
                        k1: -0.11 + 0.015 * rng.normal(),
                        k2: 0.06 + 0.01 * rng.normal(),
                        p1: 0.0,
                        p2: 0.0,
                        k3: 0.0,
                    },
                },
            }
        })
        .collect()
}

/// The station's shot of one module: the fixture seen from its front at 380 to 440 mm, with a
/// little play in the mount, a slightly soft lens and sensor noise.
pub fn demo_scene(unit: &DemoUnit, index: usize) -> Result<Scene, RenderError> {
    let mut poses = PoseGenerator::new(1, DEMO_SEED ^ (index as u64 + 1), [380.0, 440.0]);
    poses.tilt_deg = [0.0, 6.0];
    poses.roll_deg = [-5.0, 5.0];
    poses.coverage = 0.15;
    Scene::builder(demo_target(), unit.truth)
        .name(unit.serial.clone())
        .random_poses(poses)
        .optics(Optics { psf_sigma_px: 0.9, defocus_radius_px: 0.0 })
        .photometry(Photometry { noise_sigma: 2.0, ..Photometry::default() })
        .seed(DEMO_SEED + index as u64)
        .build()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_lot_is_reproducible_and_every_shot_sees_the_whole_fixture() {
        let a = demo_lot(3);
        let b = demo_lot(3);
        assert_eq!(a[2].truth, b[2].truth);
        for (i, unit) in a.iter().enumerate() {
            let scene = demo_scene(unit, i).unwrap();
            let truth = facetcal_render::view_truth_of(&scene, 0).unwrap();
            let all = demo_target().feature_count();
            assert_eq!(truth.visible.len(), all, "{}: every corner in view", unit.serial);
        }
    }
}
