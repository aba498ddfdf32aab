//! Shared helpers of the detector's tests: scenes of the bundled targets rendered by
//! `facetcal-render` (exact sub-square area coverage, Gaussian PSF, photometry, noise), matching
//! detections to truth, and the Cramer-Rao bound.
#![allow(dead_code)]

use facetcal_detector::GreyImage;
use facetcal_model::{Camera, Pose, Target};
use facetcal_render::{GreyImage as RenderImage, Scene, render_view_noiseless};
use nalgebra::{Matrix2, Point2, Vector2, Vector3};

/// The standard scene's image size (detector issue).
pub const W: u32 = 1280;
/// The standard scene's image size (detector issue).
pub const H: u32 = 960;

/// A bundled target by file name.
pub fn bundled(name: &str) -> Target {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../../targets").join(name);
    Target::load(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

/// The standard camera: 1280 x 960, f = 1200 px, principal point at the centre.
pub fn standard_camera() -> Camera {
    Camera::pinhole(W, H, 1200.0, 1200.0, 639.5, 479.5)
}

/// The detector's image of a rendered view.
pub fn to_detector(img: &RenderImage) -> GreyImage {
    match img {
        RenderImage::Eight(g) => GreyImage::from_luma8(g),
        RenderImage::Sixteen(g) => GreyImage::from_luma16(g),
    }
}

/// A pose that puts the target-frame point `centre` (on the plane z = 0) at distance `dist` on
/// the optical axis, tilted by `tilt` radians about the in-plane axis at angle `axis`, after a
/// rotation by `spin` in the plane.
pub fn tilted_pose(centre: Point2<f64>, dist: f64, tilt: f64, axis: f64, spin: f64) -> Pose {
    let a = Vector3::new(axis.cos(), axis.sin(), 0.0) * tilt;
    let r_tilt = Pose::from_axis_angle(a, Vector3::zeros()).matrix();
    let r_spin = Pose::from_axis_angle(Vector3::new(0.0, 0.0, spin), Vector3::zeros()).matrix();
    let r = r_tilt * r_spin;
    let t = Vector3::new(0.0, 0.0, dist) - r * Vector3::new(centre.x, centre.y, 0.0);
    Pose::from_matrix(&r, t)
}

/// The nearest point within `gate` of `truth`.
pub fn nearest(truth: Point2<f64>, found: &[Point2<f64>], gate: f64) -> Option<Point2<f64>> {
    found
        .iter()
        .filter(|p| (**p - truth).norm() < gate)
        .min_by(|a, b| (**a - truth).norm().total_cmp(&(**b - truth).norm()))
        .copied()
}

/// A window of a view rendered on its own: the same camera with the principal point moved by
/// the window's origin, so pixel `(x, y)` of the window is pixel `(x + x0, y + y0)` of the view.
#[derive(Clone, Copy, Debug)]
pub struct Crop {
    pub x0: u32,
    pub y0: u32,
    pub width: u32,
    pub height: u32,
}

/// Noiseless grey levels of a window of view `index`, and their derivatives with respect to a
/// translation of the whole image content, by central differences of renders with the
/// principal point moved by `+-e` px (a principal-point shift translates a pinhole image
/// exactly).
pub fn translation_derivatives(
    scene: &Scene,
    index: usize,
    crop: Crop,
) -> (Vec<f64>, (Vec<f64>, Vec<f64>)) {
    let e = 0.02;
    let cam = *scene.camera();
    let shifted = |dx: f64, dy: f64| {
        let mut c = cam;
        c.width = crop.width;
        c.height = crop.height;
        c.intrinsics.cx += dx - crop.x0 as f64;
        c.intrinsics.cy += dy - crop.y0 as f64;
        let s = Scene::builder(scene.target().clone(), c)
            .poses(scene.poses().to_vec())
            .optics(*scene.optics())
            .photometry(*scene.photometry())
            .background(*scene.background())
            .supersampling(scene.supersampling())
            .build()
            .expect("scene stays valid");
        render_view_noiseless(&s, index).expect("view renders").levels.data
    };
    let (px, mx) = (shifted(e, 0.0), shifted(-e, 0.0));
    let (py, my) = (shifted(0.0, e), shifted(0.0, -e));
    let d = |a: Vec<f64>, b: Vec<f64>| a.iter().zip(&b).map(|(a, b)| (a - b) / (2.0 * e)).collect();
    (shifted(0.0, 0.0), (d(px, mx), d(py, my)))
}

/// Cramer-Rao lower bound (H. Cramer, "Mathematical Methods of Statistics", 1946; C. R. Rao,
/// Bull. Calcutta Math. Soc. 37, 1945) on the Euclidean error of a position estimated from the
/// pixels within `radius` of `truth`, for independent Gaussian noise of variance `var(level)`:
/// `J = sum d_mu d_mu^T / var`, bound `sqrt(trace J^-1)`.
pub fn crb(
    d: &(Vec<f64>, Vec<f64>),
    levels: &[f64],
    width: usize,
    truth: Point2<f64>,
    radius: f64,
    var: impl Fn(f64) -> f64,
) -> f64 {
    let height = levels.len() / width;
    let mut j = Matrix2::<f64>::zeros();
    let x0 = (truth.x - radius).floor().max(0.0) as usize;
    let x1 = ((truth.x + radius).ceil() as usize).min(width - 1);
    let y0 = (truth.y - radius).floor().max(0.0) as usize;
    let y1 = ((truth.y + radius).ceil() as usize).min(height - 1);
    for y in y0..=y1 {
        for x in x0..=x1 {
            if (x as f64 - truth.x).powi(2) + (y as f64 - truth.y).powi(2) > radius * radius {
                continue;
            }
            let i = y * width + x;
            let g = Vector2::new(d.0[i], d.1[i]);
            j += g * g.transpose() / var(levels[i]).max(1e-12);
        }
    }
    j.try_inverse().map(|ji| ji.trace().sqrt()).unwrap_or(f64::INFINITY)
}

/// Accumulated error statistics.
#[derive(Default, Debug)]
pub struct Errors {
    pub n: usize,
    pub total: usize,
    pub se: f64,
    pub sx: f64,
    pub sy: f64,
    pub crb2: f64,
}

impl Errors {
    pub fn add(&mut self, d: Vector2<f64>) {
        self.n += 1;
        self.se += d.norm_squared();
        self.sx += d.x;
        self.sy += d.y;
    }
    pub fn rms(&self) -> f64 {
        (self.se / self.n.max(1) as f64).sqrt()
    }
    pub fn bias(&self) -> (f64, f64) {
        (self.sx / self.n.max(1) as f64, self.sy / self.n.max(1) as f64)
    }
    pub fn recall(&self) -> f64 {
        self.n as f64 / self.total.max(1) as f64
    }
    pub fn crb_rms(&self) -> f64 {
        (self.crb2 / self.n.max(1) as f64).sqrt()
    }
}
