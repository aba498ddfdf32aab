//! The seeded random pose generator: views at random distance, tilt, roll and image position
//! that keep the whole target inside the image.
//!
//! For each view, with `c` the centre of the target's bounding box and `v` its front direction
//! (the mean of the faces' viewer-side normals, `-z` of each face frame):
//! 1. draw the distance `d`, the tilt `tau` (angle between the line of sight and `v`), the tilt
//!    azimuth (uniform), the roll and the image point `p` where `c` should appear (uniform in
//!    the central `coverage` fraction of the image);
//! 2. place the camera at `C = c + d w`, `w = v` tilted by `tau`, looking at `c` with its x axis
//!    along the target's x axis (rolled), then rotate it about its centre so that `c` projects
//!    to `p`: `R = R_p R_0` with `R_0 (c - C) / d = z` and `R_p z = ray(p)`;
//! 3. accept the pose if every face's outline (16 points per side) projects inside the image
//!    with `margin_px` to spare, otherwise draw again.

use facetcal_model::{Camera, Pose, SeededRng, Target};
use nalgebra::{Matrix3, Point2, Point3, Rotation3, Unit, UnitQuaternion, Vector3};
use serde::{Deserialize, Serialize};

use crate::error::RenderError;
use crate::scene::in_range;

/// Settings of the random pose generator. Angles in degrees, lengths in the target's unit.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PoseGenerator {
    /// Number of views.
    pub count: u32,
    /// Seed of the draws (separate from the scene's noise seed).
    pub seed: u64,
    /// Range of the camera's distance from the target centre.
    pub distance: [f64; 2],
    /// Range of the tilt: the angle between the line of sight and the target's front direction.
    /// Default [0, 40].
    #[serde(default = "default_tilt")]
    pub tilt_deg: [f64; 2],
    /// Range of the roll about the line of sight. Default [-20, 20].
    #[serde(default = "default_roll")]
    pub roll_deg: [f64; 2],
    /// Fraction of the image (centred, per axis) in which the target centre may appear.
    /// Default 0.5; 0..=1.
    #[serde(default = "default_coverage")]
    pub coverage: f64,
    /// Least distance of the target's outline from the image border, pixels. Default 8.
    #[serde(default = "default_margin")]
    pub margin_px: f64,
    /// Draws per view before giving up. Default 2000.
    #[serde(default = "default_tries")]
    pub max_tries: u32,
}

fn default_tilt() -> [f64; 2] {
    [0.0, 40.0]
}
fn default_roll() -> [f64; 2] {
    [-20.0, 20.0]
}
fn default_coverage() -> f64 {
    0.5
}
fn default_margin() -> f64 {
    8.0
}
fn default_tries() -> u32 {
    2000
}

impl PoseGenerator {
    /// A generator with the default ranges for tilt, roll, coverage, margin and tries.
    pub fn new(count: u32, seed: u64, distance: [f64; 2]) -> Self {
        PoseGenerator {
            count,
            seed,
            distance,
            tilt_deg: default_tilt(),
            roll_deg: default_roll(),
            coverage: default_coverage(),
            margin_px: default_margin(),
            max_tries: default_tries(),
        }
    }

    fn validate(&self) -> Result<(), RenderError> {
        let p = "poses.random";
        if !(1..=100_000).contains(&self.count) {
            return Err(RenderError::field(
                format!("{p}.count"),
                format!("must be 1..=100000, got {}", self.count),
            ));
        }
        in_range(&format!("{p}.distance[0]"), self.distance[0], 1e-9, 1e12)?;
        in_range(&format!("{p}.distance[1]"), self.distance[1], self.distance[0], 1e12)?;
        in_range(&format!("{p}.tilt_deg[0]"), self.tilt_deg[0], 0.0, 89.0)?;
        in_range(&format!("{p}.tilt_deg[1]"), self.tilt_deg[1], self.tilt_deg[0], 89.0)?;
        in_range(&format!("{p}.roll_deg[0]"), self.roll_deg[0], -180.0, 180.0)?;
        in_range(&format!("{p}.roll_deg[1]"), self.roll_deg[1], self.roll_deg[0], 180.0)?;
        in_range(&format!("{p}.coverage"), self.coverage, 0.0, 1.0)?;
        in_range(&format!("{p}.margin_px"), self.margin_px, 0.0, 1e5)?;
        if !(1..=1_000_000).contains(&self.max_tries) {
            return Err(RenderError::field(
                format!("{p}.max_tries"),
                format!("must be 1..=1000000, got {}", self.max_tries),
            ));
        }
        Ok(())
    }
}

/// The target's front direction: the normalised mean of the faces' viewer-side normals.
pub fn front_direction(target: &Target) -> Vector3<f64> {
    let s: Vector3<f64> = target.faces().iter().map(|f| -f.normal()).sum();
    if s.norm() > 1e-9 { s.normalize() } else { -target.faces()[0].normal() }
}

/// Draws the scene's poses. The view `k` uses `SeededRng::stream(seed, k)`, so each view is
/// independent of the others and of the count.
pub fn generate_poses(
    g: &PoseGenerator,
    target: &Target,
    camera: &Camera,
) -> Result<Vec<Pose>, RenderError> {
    g.validate()?;
    let (lo, hi) = target.bounds();
    let centre = Point3::from((lo.coords + hi.coords) * 0.5);
    let v = front_direction(target);
    let outline = outline_points(target);
    let (w, h) = (camera.width as f64, camera.height as f64);
    let mut poses = Vec::with_capacity(g.count as usize);
    for view in 0..g.count as usize {
        let mut rng = SeededRng::stream(g.seed, view as u64);
        let mut found = None;
        for _ in 0..g.max_tries {
            let d = rng.range(g.distance[0], g.distance[1]);
            let tilt = rng.range(g.tilt_deg[0], g.tilt_deg[1]).to_radians();
            let azimuth = rng.range(0.0, std::f64::consts::TAU);
            let roll = rng.range(g.roll_deg[0], g.roll_deg[1]).to_radians();
            let px = Point2::new(
                (w - 1.0) * 0.5 + (rng.uniform() - 0.5) * g.coverage * w,
                (h - 1.0) * 0.5 + (rng.uniform() - 0.5) * g.coverage * h,
            );
            let Some(pose) = place_camera(camera, &centre, &v, d, tilt, azimuth, roll, &px) else {
                continue;
            };
            let in_view = outline.iter().all(|p| {
                camera.project(&pose.transform(p)).is_ok_and(|q| camera.contains(&q, -g.margin_px))
            });
            // In front of the camera: the pinhole projection accepts only positive depth, a
            // fisheye needs the explicit check.
            let in_front = outline.iter().all(|p| pose.transform(p).z > 0.0);
            if in_view && in_front {
                found = Some(pose);
                break;
            }
        }
        match found {
            Some(p) => poses.push(p),
            None => return Err(RenderError::NoPoseInView { view, tries: g.max_tries }),
        }
    }
    Ok(poses)
}

/// Points along every face's outline, target frame.
fn outline_points(target: &Target) -> Vec<Point3<f64>> {
    let mut out = Vec::new();
    for f in target.faces() {
        let (w, h) = f.size();
        let corners = [[0.0, 0.0], [w, 0.0], [w, h], [0.0, h]];
        for k in 0..4 {
            let a = corners[k];
            let b = corners[(k + 1) % 4];
            for i in 0..16 {
                let t = i as f64 / 16.0;
                let p = Point2::new(a[0] + t * (b[0] - a[0]), a[1] + t * (b[1] - a[1]));
                out.push(f.to_target(&p));
            }
        }
    }
    out
}

/// The pose of step 2 of the module doc, or `None` if the pixel has no ray.
#[allow(clippy::too_many_arguments)]
fn place_camera(
    camera: &Camera,
    centre: &Point3<f64>,
    front: &Vector3<f64>,
    distance: f64,
    tilt: f64,
    azimuth: f64,
    roll: f64,
    pixel: &Point2<f64>,
) -> Option<Pose> {
    // An axis perpendicular to the front direction, turned by the azimuth about it.
    let helper = if front.x.abs() < 0.9 { Vector3::x() } else { Vector3::y() };
    let e1 = front.cross(&helper).normalize();
    let e2 = front.cross(&e1);
    let axis = Unit::new_normalize(e1 * azimuth.cos() + e2 * azimuth.sin());
    let w = UnitQuaternion::from_axis_angle(&axis, tilt) * front;
    let cam_centre = centre + w * distance;
    // R_0: rows are the camera axes in the target frame.
    let z = -w;
    let x_target = Vector3::x();
    let mut x = x_target - z * z.dot(&x_target);
    if x.norm() < 1e-6 {
        x = Vector3::y() - z * z.y;
    }
    let x = UnitQuaternion::from_axis_angle(&Unit::new_normalize(z), roll) * x.normalize();
    let y = z.cross(&x);
    let r0 = Matrix3::from_rows(&[x.transpose(), y.transpose(), z.transpose()]);
    // R_p: the smallest rotation taking the optical axis to the ray through `pixel`.
    let ray = camera.unproject(pixel).ok()?;
    let rp = Rotation3::rotation_between(&Vector3::z(), &ray)
        .unwrap_or_else(Rotation3::identity)
        .into_inner();
    let r = rp * r0;
    let t = -(r * cam_centre.coords);
    Some(Pose::from_matrix(&r, t))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn checker() -> Target {
        let text = std::fs::read_to_string(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../../targets/checkerboard.json"
        ))
        .unwrap();
        Target::from_json(&text).unwrap()
    }

    #[test]
    fn generated_poses_keep_the_target_in_view_and_respect_the_ranges() {
        let t = checker();
        let cam = Camera::pinhole(1280, 960, 1400.0, 1400.0, 639.5, 479.5);
        let mut g = PoseGenerator::new(20, 5, [700.0, 900.0]);
        g.tilt_deg = [10.0, 45.0];
        let poses = generate_poses(&g, &t, &cam).unwrap();
        assert_eq!(poses.len(), 20);
        let (lo, hi) = t.bounds();
        let c = Point3::from((lo.coords + hi.coords) * 0.5);
        let front = front_direction(&t);
        for p in &poses {
            let inv = p.inverse();
            let cam_centre = inv.translation;
            let d = (cam_centre - c.coords).norm();
            assert!((700.0..=900.0).contains(&d), "distance {d}");
            let tilt = ((cam_centre - c.coords) / d).dot(&front).acos().to_degrees();
            assert!((10.0 - 1e-9..=45.0 + 1e-9).contains(&tilt), "tilt {tilt}");
            for q in outline_points(&t) {
                let px = cam.project(&p.transform(&q)).unwrap();
                assert!(cam.contains(&px, -8.0), "{px}");
            }
        }
        // Same seed, same poses; another seed, other poses.
        assert_eq!(generate_poses(&g, &t, &cam).unwrap(), poses);
        g.seed = 6;
        assert_ne!(generate_poses(&g, &t, &cam).unwrap()[0], poses[0]);
    }

    #[test]
    fn impossible_ranges_are_an_error() {
        let t = checker();
        let cam = Camera::pinhole(640, 480, 500.0, 500.0, 319.5, 239.5);
        let mut g = PoseGenerator::new(1, 1, [10.0, 20.0]);
        g.max_tries = 50;
        assert!(matches!(
            generate_poses(&g, &t, &cam),
            Err(RenderError::NoPoseInView { view: 0, tries: 50 })
        ));
        g.distance = [30.0, 20.0];
        let e = generate_poses(&g, &t, &cam).unwrap_err().to_string();
        assert!(e.starts_with("poses.random.distance[1]"), "{e}");
    }
}
