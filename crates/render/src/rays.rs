//! Rays through sub-square corners: the inverse of the camera model, solved with the model's
//! own forward projection and Jacobians.
//!
//! [`Camera::unproject`] recomputes the distortion's valid limit on every call, which is right
//! for one pixel but dominates the cost of the tens of millions of corners of a render. Here
//! the limit is computed once per camera and each ray found by Newton's method on
//! [`Camera::project_with_jacobians`] (Brown-Conrady: on the plane `Z = 1`; Kannala-Brandt: on
//! the incidence angle, safeguarded by bisection), stopping when the pixel residual is below
//! 1e-9 px. A test checks it against [`Camera::unproject`].

use facetcal_model::{Camera, Distortion};
use nalgebra::{Matrix2, Point2, Point3, Vector2, Vector3};

const MAX_ITERATIONS: usize = 60;
/// Pixel residual at which a ray is accepted.
const RESIDUAL_PX: f64 = 1e-9;

/// Unprojects pixels for one camera.
#[derive(Clone, Debug)]
pub(crate) struct RayCaster {
    camera: Camera,
    /// The model's valid limit (radius on `Z = 1`, or incidence angle).
    limit: f64,
    /// Kannala-Brandt: the distorted radius at the limit.
    theta_d_max: f64,
}

impl RayCaster {
    pub(crate) fn new(camera: &Camera) -> Self {
        let limit = camera.distortion.valid_limit();
        let theta_d_max = match camera.distortion {
            Distortion::KannalaBrandt { .. } => kb_theta_d(camera, limit).unwrap_or(0.0),
            _ => f64::INFINITY,
        };
        RayCaster { camera: *camera, limit, theta_d_max }
    }

    /// The unit ray through a pixel, or `None` outside the model's valid domain.
    pub(crate) fn ray(&self, px: &Point2<f64>) -> Option<Vector3<f64>> {
        let d = self.camera.intrinsics.to_normalised(px);
        match self.camera.distortion {
            Distortion::None => Some(Vector3::new(d.x, d.y, 1.0).normalize()),
            Distortion::BrownConrady { .. } => self.brown(px, d),
            Distortion::KannalaBrandt { .. } => self.kannala_brandt(d),
        }
    }

    fn brown(&self, px: &Point2<f64>, d: Vector2<f64>) -> Option<Vector3<f64>> {
        let mut xy = d;
        let project = |xy: &Vector2<f64>| {
            self.camera.project_with_jacobians(&Point3::new(xy.x, xy.y, 1.0)).ok()
        };
        let mut pr = project(&xy)?;
        for _ in 0..MAX_ITERATIONS {
            let f = pr.pixel - px;
            if f.norm() <= RESIDUAL_PX {
                return (xy.norm() <= self.limit)
                    .then(|| Vector3::new(xy.x, xy.y, 1.0).normalize());
            }
            // At Z = 1, d(u, v)/d(x, y) is the first two columns of d(u, v)/d(X, Y, Z).
            let j = Matrix2::new(
                pr.d_point[(0, 0)],
                pr.d_point[(0, 1)],
                pr.d_point[(1, 0)],
                pr.d_point[(1, 1)],
            );
            let step = j.try_inverse()? * f;
            // Halve the step while it leaves the model's domain.
            let mut scale = 1.0;
            let mut next = None;
            for _ in 0..40 {
                let cand = xy - step * scale;
                if let Some(p) = project(&cand) {
                    next = Some((cand, p));
                    break;
                }
                scale *= 0.5;
            }
            let (cand, p) = next?;
            xy = cand;
            pr = p;
        }
        None
    }

    fn kannala_brandt(&self, d: Vector2<f64>) -> Option<Vector3<f64>> {
        let theta_d = d.norm();
        if theta_d == 0.0 {
            return Some(Vector3::z());
        }
        if theta_d >= self.theta_d_max {
            return None;
        }
        let fx = self.camera.intrinsics.fx;
        let (mut lo, mut hi) = (0.0, self.limit);
        let mut t = theta_d.min(self.limit * 0.999);
        for _ in 0..MAX_ITERATIONS * 2 {
            let (s, c) = t.sin_cos();
            let pr = self.camera.project_with_jacobians(&Point3::new(s, 0.0, c)).ok()?;
            let r = (pr.pixel.x - self.camera.intrinsics.cx) / fx - theta_d;
            if (r * fx).abs() <= RESIDUAL_PX {
                return Some(Vector3::new(s * d.x / theta_d, s * d.y / theta_d, c));
            }
            if r > 0.0 {
                hi = t
            } else {
                lo = t
            }
            // d theta_d / d theta along the ray (sin t, 0, cos t).
            let slope = (pr.d_point[(0, 0)] * c - pr.d_point[(0, 2)] * s) / fx;
            let mut next = t - r / slope;
            if !(next > lo && next < hi) {
                next = 0.5 * (lo + hi);
            }
            t = next;
        }
        None
    }
}

/// The fisheye's distorted radius `theta_d` at incidence angle `theta`.
fn kb_theta_d(camera: &Camera, theta: f64) -> Option<f64> {
    let (s, c) = theta.sin_cos();
    let px = camera.project(&Point3::new(s, 0.0, c)).ok()?;
    Some((px.x - camera.intrinsics.cx) / camera.intrinsics.fx)
}

#[cfg(test)]
mod tests {
    use super::*;
    use facetcal_model::Intrinsics;

    /// The rays agree with the model crate's own inverse over the whole image, corners included.
    #[test]
    fn rays_agree_with_the_model_inverse() {
        let cams = [
            Camera::pinhole(640, 480, 500.0, 505.0, 320.2, 239.1),
            Camera {
                width: 640,
                height: 480,
                intrinsics: Intrinsics { fx: 400.0, fy: 401.0, cx: 321.0, cy: 238.0, skew: 0.3 },
                distortion: Distortion::BrownConrady {
                    k1: -0.3,
                    k2: 0.09,
                    p1: 0.001,
                    p2: -0.0008,
                    k3: -0.01,
                },
            },
            Camera {
                width: 640,
                height: 480,
                intrinsics: Intrinsics { fx: 200.0, fy: 200.0, cx: 319.5, cy: 239.5, skew: 0.0 },
                distortion: Distortion::KannalaBrandt {
                    k1: 0.02,
                    k2: -0.006,
                    k3: 0.001,
                    k4: -0.0002,
                },
            },
        ];
        for cam in cams {
            let rc = RayCaster::new(&cam);
            let mut worst: f64 = 0.0;
            for iy in 0..=24 {
                for ix in 0..=32 {
                    let p = Point2::new(-0.5 + ix as f64 * 20.0, -0.5 + iy as f64 * 20.0);
                    let a = cam.unproject(&p).unwrap();
                    let b = rc.ray(&p).unwrap();
                    worst = worst.max((a - b).norm());
                }
            }
            assert!(worst < 1e-11, "{:?}: {worst:e}", cam.distortion.kind());
        }
    }
}
