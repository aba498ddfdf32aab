//! Shared helpers of the solver's tests: reading Zhang's published data and projecting
//! bundled targets (synthetic correspondence sets, seeded).
#![allow(dead_code)]

use std::path::Path;

use facetcal_model::{Camera, Pose, SeededRng, Target};
use facetcal_solver::{Observation, ViewObservations};
use nalgebra::{Point2, Point3, Vector3};

/// Zhang's five views: model points (inches, Z = 0) and image points, in file order.
pub fn zhang_views(dir: &Path) -> Vec<ViewObservations> {
    let parse = |name: &str| -> Vec<f64> {
        std::fs::read_to_string(dir.join(name))
            .unwrap_or_else(|e| panic!("{name}: {e}"))
            .split_whitespace()
            .map(|t| t.parse::<f64>().unwrap())
            .collect()
    };
    let m = parse("Model.txt");
    assert_eq!(m.len(), 512, "Model.txt holds 256 corners");
    (1..=5)
        .map(|i| {
            let d = parse(&format!("data{i}.txt"));
            assert_eq!(d.len(), 512);
            ViewObservations {
                name: format!("data{i}"),
                points: (0..256)
                    .map(|k| Observation {
                        id: None,
                        target: Point3::new(m[2 * k], m[2 * k + 1], 0.0),
                        image: Point2::new(d[2 * k], d[2 * k + 1]),
                    })
                    .collect(),
            }
        })
        .collect()
}

/// A bundled target file.
pub fn target(name: &str) -> Target {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../targets").join(name);
    Target::load(&path).unwrap()
}

/// A pose looking at `centre` from `distance` along a direction tilted by (ax, ay) radians
/// from the target's -z axis... built as: camera at `centre + distance * dir`, looking at the
/// centre, with a roll.
pub fn look_at(centre: Point3<f64>, eye: Point3<f64>, roll: f64) -> Pose {
    let z = (centre - eye).normalize();
    let up = if z.x.abs() < 0.9 { Vector3::x() } else { Vector3::y() };
    let x = up.cross(&z).normalize();
    let y = z.cross(&x);
    // Rows of R are the camera axes in the target frame.
    let r = nalgebra::Matrix3::from_rows(&[x.transpose(), y.transpose(), z.transpose()]);
    let roll = nalgebra::Rotation3::from_axis_angle(&Vector3::z_axis(), roll).into_inner();
    let r = roll * r;
    Pose::from_matrix(&r, -(r * eye.coords))
}

/// Projects the points of `target` seen from `pose`, keeping those inside the image, adding
/// normal noise of `noise_px` per axis.
pub fn observe(
    camera: &Camera,
    target: &[(facetcal_model::FeatureId, Point3<f64>)],
    pose: &Pose,
    noise_px: f64,
    rng: &mut SeededRng,
    name: String,
) -> ViewObservations {
    let mut points = Vec::new();
    for (id, x) in target {
        let pc = pose.transform(x);
        if let Ok(px) = camera.project(&pc) {
            if camera.contains(&px, -2.0) {
                let noisy =
                    Point2::new(px.x + noise_px * rng.normal(), px.y + noise_px * rng.normal());
                points.push(Observation { id: Some(*id), target: *x, image: noisy });
            }
        }
    }
    ViewObservations { name, points }
}
