//! Camera models: pinhole intrinsics with skew and a lens distortion model, projection,
//! unprojection and the analytic Jacobians every solver in the project uses.
//!
//! Projection of a camera-frame point `X = (X, Y, Z)`:
//!
//! 1. a distortion model maps `X` to distorted normalised coordinates `(xd, yd)`;
//! 2. the intrinsics map them to pixels: `u = fx xd + skew yd + cx`, `v = fy yd + cy`.
//!
//! Distortion models:
//! - [`Distortion::None`]: `xd = X/Z`, `yd = Y/Z`.
//! - [`Distortion::BrownConrady`]: with `x = X/Z`, `y = Y/Z`, `r^2 = x^2 + y^2`,
//!   `a = 1 + k1 r^2 + k2 r^4 + k3 r^6`,
//!   `xd = x a + 2 p1 x y + p2 (r^2 + 2 x^2)`, `yd = y a + p1 (r^2 + 2 y^2) + 2 p2 x y`
//!   (D. C. Brown, "Decentering distortion of lenses", Photogrammetric Engineering 32(3), 1966,
//!   in the form of J. Heikkila and O. Silven, CVPR 1997, eq. 3-4).
//! - [`Distortion::KannalaBrandt`]: the equidistant fisheye model of J. Kannala and S. S. Brandt,
//!   "A generic camera model and calibration method for conventional, wide-angle, and fish-eye
//!   lenses", IEEE TPAMI 28(8), 2006, eq. 6 truncated after four terms:
//!   `theta = atan2(sqrt(X^2 + Y^2), Z)`,
//!   `theta_d = theta (1 + k1 theta^2 + k2 theta^4 + k3 theta^6 + k4 theta^8)`,
//!   `(xd, yd) = theta_d (X, Y) / sqrt(X^2 + Y^2)`.
//!
//! The parameter vector of a camera (what solvers estimate) is always ordered
//! `[fx, fy, cx, cy, skew, distortion...]`, with the distortion coefficients in the order of
//! [`Distortion::names`].

use nalgebra::{Matrix2, Matrix2x3, Matrix3, Point2, Point3, SMatrix, Vector2, Vector3};
use serde::{Deserialize, Serialize};

use crate::error::ModelError;
use crate::geometry::Pose;

/// The largest number of camera parameters of any model (5 intrinsics + 5 Brown-Conrady terms).
pub const MAX_CAMERA_PARAMS: usize = 10;

/// Convergence threshold of the iterative inverses, in normalised image units.
/// For focal lengths below 1e5 px this is below 1e-10 px.
const INVERSE_TOLERANCE: f64 = 1e-15;
const INVERSE_MAX_ITERATIONS: usize = 50;

/// Pinhole intrinsics, in pixels.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Intrinsics {
    /// Focal length along x, pixels.
    pub fx: f64,
    /// Focal length along y, pixels.
    pub fy: f64,
    /// Principal point x, pixels (pixel centres at integer coordinates).
    pub cx: f64,
    /// Principal point y, pixels.
    pub cy: f64,
    /// Skew: the coefficient of `yd` in `u`, pixels.
    #[serde(default)]
    pub skew: f64,
}

impl Intrinsics {
    /// The calibration matrix `K`.
    pub fn matrix(&self) -> Matrix3<f64> {
        Matrix3::new(self.fx, self.skew, self.cx, 0.0, self.fy, self.cy, 0.0, 0.0, 1.0)
    }

    /// Maps distorted normalised coordinates to pixels.
    pub fn to_pixel(&self, d: &Vector2<f64>) -> Point2<f64> {
        Point2::new(self.fx * d.x + self.skew * d.y + self.cx, self.fy * d.y + self.cy)
    }

    /// Maps pixels to distorted normalised coordinates (the inverse of [`Self::to_pixel`]).
    pub fn to_normalised(&self, p: &Point2<f64>) -> Vector2<f64> {
        let y = (p.y - self.cy) / self.fy;
        let x = (p.x - self.cx - self.skew * y) / self.fx;
        Vector2::new(x, y)
    }
}

/// A lens distortion model with its coefficients.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "model", rename_all = "kebab-case", deny_unknown_fields)]
pub enum Distortion {
    /// An ideal pinhole.
    None,
    /// Radial (k1, k2, k3) and tangential (p1, p2) terms on normalised coordinates.
    BrownConrady {
        /// First radial coefficient.
        k1: f64,
        /// Second radial coefficient.
        k2: f64,
        /// First tangential coefficient.
        p1: f64,
        /// Second tangential coefficient.
        p2: f64,
        /// Third radial coefficient.
        #[serde(default)]
        k3: f64,
    },
    /// Equidistant fisheye polynomial in the incidence angle.
    KannalaBrandt {
        /// Coefficient of theta^3.
        k1: f64,
        /// Coefficient of theta^5.
        k2: f64,
        /// Coefficient of theta^7.
        k3: f64,
        /// Coefficient of theta^9.
        k4: f64,
    },
}

/// Which distortion model, without coefficients.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum DistortionKind {
    /// [`Distortion::None`].
    None,
    /// [`Distortion::BrownConrady`].
    BrownConrady,
    /// [`Distortion::KannalaBrandt`].
    KannalaBrandt,
}

impl DistortionKind {
    /// The model with all coefficients zero.
    pub fn zero(self) -> Distortion {
        match self {
            DistortionKind::None => Distortion::None,
            DistortionKind::BrownConrady => {
                Distortion::BrownConrady { k1: 0.0, k2: 0.0, p1: 0.0, p2: 0.0, k3: 0.0 }
            }
            DistortionKind::KannalaBrandt => {
                Distortion::KannalaBrandt { k1: 0.0, k2: 0.0, k3: 0.0, k4: 0.0 }
            }
        }
    }

    /// The name used in files.
    pub fn name(self) -> &'static str {
        match self {
            DistortionKind::None => "none",
            DistortionKind::BrownConrady => "brown-conrady",
            DistortionKind::KannalaBrandt => "kannala-brandt",
        }
    }
}

/// Derivatives of the distorted normalised coordinates.
struct DistortionJacobian {
    /// d(xd, yd) / d(X, Y, Z).
    d_point: Matrix2x3<f64>,
    /// d(xd, yd) / d(coefficients), first `n` columns used.
    d_coeffs: SMatrix<f64, 2, 5>,
}

impl Distortion {
    /// Which model this is.
    pub fn kind(&self) -> DistortionKind {
        match self {
            Distortion::None => DistortionKind::None,
            Distortion::BrownConrady { .. } => DistortionKind::BrownConrady,
            Distortion::KannalaBrandt { .. } => DistortionKind::KannalaBrandt,
        }
    }

    /// Names of the coefficients, in parameter-vector order.
    pub fn names(&self) -> &'static [&'static str] {
        match self {
            Distortion::None => &[],
            Distortion::BrownConrady { .. } => &["k1", "k2", "p1", "p2", "k3"],
            Distortion::KannalaBrandt { .. } => &["k1", "k2", "k3", "k4"],
        }
    }

    /// The coefficients, in the order of [`Self::names`].
    pub fn coefficients(&self) -> Vec<f64> {
        match *self {
            Distortion::None => vec![],
            Distortion::BrownConrady { k1, k2, p1, p2, k3 } => vec![k1, k2, p1, p2, k3],
            Distortion::KannalaBrandt { k1, k2, k3, k4 } => vec![k1, k2, k3, k4],
        }
    }

    /// The same model with new coefficients, in the order of [`Self::names`].
    ///
    /// # Panics
    /// If `c` is shorter than the model's coefficient count (a programmer error).
    pub fn with_coefficients(&self, c: &[f64]) -> Distortion {
        match self {
            Distortion::None => Distortion::None,
            Distortion::BrownConrady { .. } => {
                Distortion::BrownConrady { k1: c[0], k2: c[1], p1: c[2], p2: c[3], k3: c[4] }
            }
            Distortion::KannalaBrandt { .. } => {
                Distortion::KannalaBrandt { k1: c[0], k2: c[1], k3: c[2], k4: c[3] }
            }
        }
    }

    /// The limit of the model's valid domain: the largest undistorted radius `r = |(X, Y)| / Z`
    /// (Brown-Conrady) or incidence angle `theta` in radians (Kannala-Brandt) up to which the
    /// radial mapping is strictly increasing, so that it can be inverted. `f64::INFINITY` for a
    /// pinhole, at most `pi` for Kannala-Brandt.
    pub fn valid_limit(&self) -> f64 {
        match *self {
            Distortion::None => f64::INFINITY,
            Distortion::BrownConrady { k1, k2, k3, .. } => {
                // d/dr [r (1 + k1 r^2 + k2 r^4 + k3 r^6)] = 1 + 3 k1 u + 5 k2 u^2 + 7 k3 u^3, u = r^2
                let slope = [1.0, 3.0 * k1, 5.0 * k2, 7.0 * k3, 0.0];
                smallest_root(&slope, 400.0).map_or(f64::INFINITY, f64::sqrt)
            }
            Distortion::KannalaBrandt { k1, k2, k3, k4 } => {
                // d theta_d / d theta = 1 + 3 k1 s + 5 k2 s^2 + 7 k3 s^3 + 9 k4 s^4, s = theta^2
                let slope = [1.0, 3.0 * k1, 5.0 * k2, 7.0 * k3, 9.0 * k4];
                let pi = std::f64::consts::PI;
                smallest_root(&slope, pi * pi).map_or(pi, f64::sqrt)
            }
        }
    }

    /// Distorted normalised coordinates of a camera-frame point, without domain checks.
    fn apply(&self, p: &Point3<f64>) -> Vector2<f64> {
        match *self {
            Distortion::None => Vector2::new(p.x / p.z, p.y / p.z),
            Distortion::BrownConrady { k1, k2, p1, p2, k3 } => {
                let x = p.x / p.z;
                let y = p.y / p.z;
                brown_forward(x, y, k1, k2, p1, p2, k3)
            }
            Distortion::KannalaBrandt { k1, k2, k3, k4 } => {
                let r = p.x.hypot(p.y);
                let theta = r.atan2(p.z);
                let s = theta * theta;
                let theta_d = theta * (1.0 + s * (k1 + s * (k2 + s * (k3 + s * k4))));
                if r < 1e-12 * p.z.abs().max(1e-300) {
                    // On the axis theta_d / r -> 1 / Z.
                    Vector2::new(p.x / p.z, p.y / p.z)
                } else {
                    Vector2::new(theta_d * p.x / r, theta_d * p.y / r)
                }
            }
        }
    }

    /// The domain coordinate compared with [`Self::valid_limit`].
    fn domain_coordinate(&self, p: &Point3<f64>) -> f64 {
        match self {
            Distortion::None => 0.0,
            Distortion::BrownConrady { .. } => p.x.hypot(p.y) / p.z,
            Distortion::KannalaBrandt { .. } => p.x.hypot(p.y).atan2(p.z),
        }
    }

    fn needs_positive_depth(&self) -> bool {
        !matches!(self, Distortion::KannalaBrandt { .. })
    }

    /// [`Self::apply`] and [`Self::jacobian`] together, sharing the divisions by `Z` (the
    /// projection hot path). Brown-Conrady evaluates the same expressions as the two
    /// separately, so the results are identical.
    #[inline]
    fn apply_with_jacobian(&self, p: &Point3<f64>) -> (Vector2<f64>, DistortionJacobian) {
        match *self {
            Distortion::BrownConrady { k1, k2, p1, p2, k3 } => {
                let iz = 1.0 / p.z;
                let x = p.x / p.z;
                let y = p.y / p.z;
                let r2 = x * x + y * y;
                let a = 1.0 + r2 * (k1 + r2 * (k2 + r2 * k3));
                let d = Vector2::new(
                    x * a + 2.0 * p1 * x * y + p2 * (r2 + 2.0 * x * x),
                    y * a + p1 * (r2 + 2.0 * y * y) + 2.0 * p2 * x * y,
                );
                let da = k1 + r2 * (2.0 * k2 + r2 * 3.0 * k3);
                let dxd_dx = a + 2.0 * x * x * da + 2.0 * p1 * y + 6.0 * p2 * x;
                let dxd_dy = 2.0 * x * y * da + 2.0 * p1 * x + 2.0 * p2 * y;
                let dyd_dy = a + 2.0 * y * y * da + 6.0 * p1 * y + 2.0 * p2 * x;
                let r4 = r2 * r2;
                let d_coeffs = SMatrix::<f64, 2, 5>::new(
                    x * r2,
                    x * r4,
                    2.0 * x * y,
                    r2 + 2.0 * x * x,
                    x * r4 * r2,
                    y * r2,
                    y * r4,
                    r2 + 2.0 * y * y,
                    2.0 * x * y,
                    y * r4 * r2,
                );
                // d_xy times the pinhole Jacobian [[1/Z, 0, -X/Z^2], [0, 1/Z, -Y/Z^2]].
                let (gx, gy) = (-p.x * iz * iz, -p.y * iz * iz);
                let d_point = Matrix2x3::new(
                    dxd_dx * iz,
                    dxd_dy * iz,
                    dxd_dx * gx + dxd_dy * gy,
                    dxd_dy * iz,
                    dyd_dy * iz,
                    dxd_dy * gx + dyd_dy * gy,
                );
                (d, DistortionJacobian { d_point, d_coeffs })
            }
            _ => (self.apply(p), self.jacobian(p)),
        }
    }

    fn jacobian(&self, p: &Point3<f64>) -> DistortionJacobian {
        let mut d_coeffs = SMatrix::<f64, 2, 5>::zeros();
        let d_point = match *self {
            Distortion::None => pinhole_point_jacobian(p),
            Distortion::BrownConrady { k1, k2, p1, p2, k3 } => {
                let x = p.x / p.z;
                let y = p.y / p.z;
                let r2 = x * x + y * y;
                let a = 1.0 + r2 * (k1 + r2 * (k2 + r2 * k3));
                let da = k1 + r2 * (2.0 * k2 + r2 * 3.0 * k3);
                let dxd_dx = a + 2.0 * x * x * da + 2.0 * p1 * y + 6.0 * p2 * x;
                let dxd_dy = 2.0 * x * y * da + 2.0 * p1 * x + 2.0 * p2 * y;
                let dyd_dx = dxd_dy;
                let dyd_dy = a + 2.0 * y * y * da + 6.0 * p1 * y + 2.0 * p2 * x;
                let d_xy = Matrix2::new(dxd_dx, dxd_dy, dyd_dx, dyd_dy);
                let r4 = r2 * r2;
                d_coeffs.set_column(0, &Vector2::new(x * r2, y * r2));
                d_coeffs.set_column(1, &Vector2::new(x * r4, y * r4));
                d_coeffs.set_column(2, &Vector2::new(2.0 * x * y, r2 + 2.0 * y * y));
                d_coeffs.set_column(3, &Vector2::new(r2 + 2.0 * x * x, 2.0 * x * y));
                d_coeffs.set_column(4, &Vector2::new(x * r4 * r2, y * r4 * r2));
                d_xy * pinhole_point_jacobian(p)
            }
            Distortion::KannalaBrandt { k1, k2, k3, k4 } => {
                let r = p.x.hypot(p.y);
                if r < 1e-12 * p.z.abs().max(1e-300) {
                    // On the axis the model is a pinhole to first order and the coefficient
                    // derivatives vanish with theta^3.
                    pinhole_point_jacobian(p)
                } else {
                    let rho2 = r * r + p.z * p.z;
                    let theta = r.atan2(p.z);
                    let s = theta * theta;
                    let theta_d = theta * (1.0 + s * (k1 + s * (k2 + s * (k3 + s * k4))));
                    let dtd = 1.0 + s * (3.0 * k1 + s * (5.0 * k2 + s * (7.0 * k3 + s * 9.0 * k4)));
                    // theta = atan2(r, Z): d theta / d(X, Y, Z)
                    let dth =
                        Vector3::new(p.z * p.x / (r * rho2), p.z * p.y / (r * rho2), -r / rho2);
                    // g = theta_d / r
                    let g = theta_d / r;
                    let r3 = r * r * r;
                    let dg = Vector3::new(
                        dtd * dth.x / r - theta_d * p.x / r3,
                        dtd * dth.y / r - theta_d * p.y / r3,
                        dtd * dth.z / r,
                    );
                    let ux = p.x / r;
                    let uy = p.y / r;
                    let mut t = theta * s;
                    for i in 0..4 {
                        d_coeffs.set_column(i, &Vector2::new(t * ux, t * uy));
                        t *= s;
                    }
                    Matrix2x3::new(
                        g + p.x * dg.x,
                        p.x * dg.y,
                        p.x * dg.z,
                        p.y * dg.x,
                        g + p.y * dg.y,
                        p.y * dg.z,
                    )
                }
            }
        };
        DistortionJacobian { d_point, d_coeffs }
    }
}

fn brown_forward(x: f64, y: f64, k1: f64, k2: f64, p1: f64, p2: f64, k3: f64) -> Vector2<f64> {
    let r2 = x * x + y * y;
    let a = 1.0 + r2 * (k1 + r2 * (k2 + r2 * k3));
    Vector2::new(
        x * a + 2.0 * p1 * x * y + p2 * (r2 + 2.0 * x * x),
        y * a + p1 * (r2 + 2.0 * y * y) + 2.0 * p2 * x * y,
    )
}

fn pinhole_point_jacobian(p: &Point3<f64>) -> Matrix2x3<f64> {
    let iz = 1.0 / p.z;
    Matrix2x3::new(iz, 0.0, -p.x * iz * iz, 0.0, iz, -p.y * iz * iz)
}

/// The `x` in `[0, hi]` with `f(x) = y` for a function increasing on that interval (slope
/// `df`), by Newton's method safeguarded by bisection; `None` when `y` is not below `f(hi)` or
/// the iteration does not settle.
fn invert_increasing(
    f: impl Fn(f64) -> f64,
    df: impl Fn(f64) -> f64,
    y: f64,
    hi: f64,
) -> Option<f64> {
    if y.is_nan() || y >= f(hi) {
        return None;
    }
    let (mut lo, mut up) = (0.0, hi);
    let mut x = y.min(hi * 0.999);
    for _ in 0..INVERSE_MAX_ITERATIONS * 2 {
        let r = f(x) - y;
        if r.abs() <= 2.0 * f64::EPSILON * y.abs() {
            return Some(x);
        }
        if r > 0.0 {
            up = x
        } else {
            lo = x
        }
        let mut next = x - r / df(x);
        if !(next > lo && next < up) {
            next = 0.5 * (lo + up);
        }
        let done = (next - x).abs() <= INVERSE_TOLERANCE * (1.0 + x);
        x = next;
        if done {
            return Some(x);
        }
    }
    None
}

/// Value of the polynomial `c[0] + c[1] x + ... + c[4] x^4`.
fn poly(c: &[f64; 5], x: f64) -> f64 {
    c[0] + x * (c[1] + x * (c[2] + x * (c[3] + x * c[4])))
}

/// The smallest root in `(0, hi]` of a polynomial of degree at most 4 with `c[0] > 0`, found
/// exactly (up to bisection to machine precision): the roots of the derivative split the
/// interval into monotone pieces, and the first piece whose end is not positive holds it.
fn smallest_root(c: &[f64; 5], hi: f64) -> Option<f64> {
    let mut cuts = critical_points(c, hi);
    cuts.push(hi);
    let mut lo = 0.0;
    for b in cuts {
        if poly(c, b) <= 0.0 {
            let (mut x0, mut x1) = (lo, b);
            for _ in 0..200 {
                let m = 0.5 * (x0 + x1);
                if m <= x0 || m >= x1 {
                    break;
                }
                if poly(c, m) > 0.0 { x0 = m } else { x1 = m }
            }
            return Some(x0);
        }
        lo = b;
    }
    None
}

/// The roots in `(0, hi)` of the derivative of a polynomial of degree at most 4, ascending.
fn critical_points(c: &[f64; 5], hi: f64) -> Vec<f64> {
    // Derivative c[1] + 2 c[2] x + 3 c[3] x^2 + 4 c[4] x^3 as a degree-4 array.
    let d = [c[1], 2.0 * c[2], 3.0 * c[3], 4.0 * c[4], 0.0];
    if d[1..].iter().all(|&v| v == 0.0) {
        return Vec::new();
    }
    // The derivative's own critical points make it monotone piecewise: recurse, then bisect.
    let mut cuts = critical_points(&d, hi);
    cuts.push(hi);
    let mut out = Vec::new();
    let mut lo = 0.0;
    for b in cuts {
        let (fa, fb) = (poly(&d, lo), poly(&d, b));
        if fa == 0.0 && lo > 0.0 {
            out.push(lo);
        } else if fa * fb < 0.0 {
            let (mut x0, mut x1) = (lo, b);
            for _ in 0..200 {
                let m = 0.5 * (x0 + x1);
                if m <= x0 || m >= x1 {
                    break;
                }
                if (poly(&d, m) < 0.0) == (fa < 0.0) { x0 = m } else { x1 = m }
            }
            out.push(0.5 * (x0 + x1));
        }
        lo = b;
    }
    out
}

/// A calibrated camera: image size, intrinsics and distortion.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Camera {
    /// Image width, pixels.
    pub width: u32,
    /// Image height, pixels.
    pub height: u32,
    /// Pinhole intrinsics.
    pub intrinsics: Intrinsics,
    /// Lens distortion.
    pub distortion: Distortion,
}

/// A projected point with its analytic Jacobians.
#[derive(Clone, Copy, Debug)]
pub struct Projection {
    /// The pixel.
    pub pixel: Point2<f64>,
    /// d(u, v) / d(X, Y, Z) of the camera-frame point.
    pub d_point: Matrix2x3<f64>,
    /// d(u, v) / d(camera parameters); the first [`Camera::param_count`] columns are used,
    /// in the order of [`Camera::param_names`].
    pub d_params: SMatrix<f64, 2, MAX_CAMERA_PARAMS>,
}

/// A projected target point with Jacobians with respect to the view pose too.
#[derive(Clone, Copy, Debug)]
pub struct PoseProjection {
    /// The pixel.
    pub pixel: Point2<f64>,
    /// d(u, v) / d(camera parameters), as in [`Projection::d_params`].
    pub d_params: SMatrix<f64, 2, MAX_CAMERA_PARAMS>,
    /// d(u, v) / d(omega, t) for the left increment of [`Pose::perturbed`].
    pub d_pose: SMatrix<f64, 2, 6>,
    /// d(u, v) / d(target point), for estimating the target's geometry.
    pub d_target_point: Matrix2x3<f64>,
}

impl Camera {
    /// A camera without distortion.
    pub fn pinhole(width: u32, height: u32, fx: f64, fy: f64, cx: f64, cy: f64) -> Camera {
        Camera {
            width,
            height,
            intrinsics: Intrinsics { fx, fy, cx, cy, skew: 0.0 },
            distortion: Distortion::None,
        }
    }

    /// Checks that every parameter is finite and the focal lengths are positive.
    pub fn validate(&self) -> Result<(), ModelError> {
        let i = &self.intrinsics;
        let named = [("fx", i.fx), ("fy", i.fy), ("cx", i.cx), ("cy", i.cy), ("skew", i.skew)];
        for (name, v) in named {
            if !v.is_finite() {
                return Err(ModelError::InvalidCamera(format!("{name} is not finite ({v})")));
            }
        }
        if i.fx <= 0.0 || i.fy <= 0.0 {
            return Err(ModelError::InvalidCamera(format!(
                "focal lengths must be positive (fx {}, fy {})",
                i.fx, i.fy
            )));
        }
        if self.width == 0 || self.height == 0 {
            return Err(ModelError::InvalidCamera(format!(
                "image size must be positive ({}x{})",
                self.width, self.height
            )));
        }
        for (name, v) in self.distortion.names().iter().zip(self.distortion.coefficients()) {
            if !v.is_finite() {
                return Err(ModelError::InvalidCamera(format!("{name} is not finite ({v})")));
            }
        }
        Ok(())
    }

    /// Number of parameters: 5 intrinsics plus the distortion coefficients.
    pub fn param_count(&self) -> usize {
        5 + self.distortion.names().len()
    }

    /// Parameter names, in parameter-vector order.
    pub fn param_names(&self) -> Vec<&'static str> {
        let mut v = vec!["fx", "fy", "cx", "cy", "skew"];
        v.extend_from_slice(self.distortion.names());
        v
    }

    /// The parameter vector `[fx, fy, cx, cy, skew, distortion...]`.
    pub fn params(&self) -> Vec<f64> {
        let i = &self.intrinsics;
        let mut v = vec![i.fx, i.fy, i.cx, i.cy, i.skew];
        v.extend(self.distortion.coefficients());
        v
    }

    /// The same camera with a new parameter vector.
    ///
    /// # Panics
    /// If `p` is shorter than [`Self::param_count`] (a programmer error).
    pub fn with_params(&self, p: &[f64]) -> Camera {
        Camera {
            width: self.width,
            height: self.height,
            intrinsics: Intrinsics { fx: p[0], fy: p[1], cx: p[2], cy: p[3], skew: p[4] },
            distortion: self.distortion.with_coefficients(&p[5..]),
        }
    }

    /// Whether a pixel lies inside the image, allowing `margin` pixels outside the centres of the
    /// border pixels (the image spans `[-0.5, width - 0.5]`).
    pub fn contains(&self, p: &Point2<f64>, margin: f64) -> bool {
        p.x >= -0.5 - margin
            && p.y >= -0.5 - margin
            && p.x <= self.width as f64 - 0.5 + margin
            && p.y <= self.height as f64 - 0.5 + margin
    }

    #[inline]
    fn check_domain(&self, p: &Point3<f64>) -> Result<(), ModelError> {
        if !(p.x.is_finite() && p.y.is_finite() && p.z.is_finite()) {
            return Err(ModelError::OutsideDomain("point is not finite".into()));
        }
        if self.distortion.needs_positive_depth() && p.z <= 0.0 {
            return Err(ModelError::OutsideDomain(format!(
                "point is not in front of the camera (z = {})",
                p.z
            )));
        }
        if !self.distortion.needs_positive_depth() && p.coords.norm() == 0.0 {
            return Err(ModelError::OutsideDomain("point is at the centre of projection".into()));
        }
        // A cheap test of the local slope: beyond the first turning point the slope is negative
        // for every model here until the next root, so this catches the fold.
        if !self.inside_fold(p) {
            let c = self.distortion.domain_coordinate(p);
            return Err(ModelError::OutsideDomain(format!(
                "point lies beyond the distortion model's valid domain (radial coordinate {c:.4})"
            )));
        }
        Ok(())
    }

    /// Whether the radial mapping is still increasing at the point's domain coordinate `c`
    /// (see [`Distortion::domain_coordinate`]); true at `c = 0`. Brown-Conrady needs only
    /// `c^2 = (X^2 + Y^2) / Z^2`, so the hot path takes no square root.
    #[inline]
    fn inside_fold(&self, p: &Point3<f64>) -> bool {
        match self.distortion {
            Distortion::None => true,
            Distortion::BrownConrady { k1, k2, k3, .. } => {
                let s = (p.x * p.x + p.y * p.y) / (p.z * p.z);
                s == 0.0 || 1.0 + s * (3.0 * k1 + s * (5.0 * k2 + s * 7.0 * k3)) > 0.0
            }
            Distortion::KannalaBrandt { k1, k2, k3, k4 } => {
                let c = self.distortion.domain_coordinate(p);
                let s = c * c;
                c == 0.0
                    || (c < std::f64::consts::PI
                        && 1.0 + s * (3.0 * k1 + s * (5.0 * k2 + s * (7.0 * k3 + s * 9.0 * k4)))
                            > 0.0)
            }
        }
    }

    /// Projects a camera-frame point to a pixel.
    ///
    /// Fails for a point behind the camera (pinhole and Brown-Conrady), at the centre of
    /// projection, or where the distortion's radial mapping is no longer increasing.
    pub fn project(&self, p: &Point3<f64>) -> Result<Point2<f64>, ModelError> {
        self.check_domain(p)?;
        Ok(self.intrinsics.to_pixel(&self.distortion.apply(p)))
    }

    /// Projects a camera-frame point with the Jacobians with respect to the point and to the
    /// camera parameters.
    #[inline]
    pub fn project_with_jacobians(&self, p: &Point3<f64>) -> Result<Projection, ModelError> {
        self.check_domain(p)?;
        let (d, dj) = self.distortion.apply_with_jacobian(p);
        let i = &self.intrinsics;
        // d(u, v) / d(xd, yd)
        let dk = Matrix2::new(i.fx, i.skew, 0.0, i.fy);
        let mut d_params = SMatrix::<f64, 2, MAX_CAMERA_PARAMS>::zeros();
        d_params[(0, 0)] = d.x; // fx
        d_params[(1, 1)] = d.y; // fy
        d_params[(0, 2)] = 1.0; // cx
        d_params[(1, 3)] = 1.0; // cy
        d_params[(0, 4)] = d.y; // skew
        let n = self.distortion.names().len();
        for c in 0..n {
            let col = dk * dj.d_coeffs.column(c);
            d_params.set_column(5 + c, &col);
        }
        Ok(Projection { pixel: i.to_pixel(&d), d_point: dk * dj.d_point, d_params })
    }

    /// Projects a target-frame point seen from a view pose (target to camera), with the
    /// Jacobians with respect to the camera parameters, the pose increment of
    /// [`Pose::perturbed`] and the target point.
    #[inline]
    pub fn project_posed(
        &self,
        pose: &Pose,
        target_point: &Point3<f64>,
    ) -> Result<PoseProjection, ModelError> {
        let rx = pose.rotation * target_point.coords;
        let pc = Point3::from(rx + pose.translation);
        let pr = self.project_with_jacobians(&pc)?;
        // d pc / d omega = -[R X]x for the left increment, d pc / d t = I; written out, as
        // this runs once per point and iteration: row j of J times -[v]x is v x j.
        let j = &pr.d_point;
        let mut d_pose = SMatrix::<f64, 2, 6>::zeros();
        for r in 0..2 {
            let (a, b, c) = (j[(r, 0)], j[(r, 1)], j[(r, 2)]);
            d_pose[(r, 0)] = c * rx.y - b * rx.z;
            d_pose[(r, 1)] = a * rx.z - c * rx.x;
            d_pose[(r, 2)] = b * rx.x - a * rx.y;
            d_pose[(r, 3)] = a;
            d_pose[(r, 4)] = b;
            d_pose[(r, 5)] = c;
        }
        Ok(PoseProjection {
            pixel: pr.pixel,
            d_params: pr.d_params,
            d_pose,
            d_target_point: pr.d_point * pose.matrix(),
        })
    }

    /// Removes the distortion from distorted normalised coordinates: the point `(x, y)` on the
    /// plane `Z = 1` (pinhole, Brown-Conrady) or the unit ray (all models) that maps to them.
    fn undistort_to_ray(&self, d: &Vector2<f64>) -> Result<Vector3<f64>, ModelError> {
        match self.distortion {
            Distortion::None => Ok(Vector3::new(d.x, d.y, 1.0).normalize()),
            Distortion::BrownConrady { k1, k2, p1, p2, k3 } => {
                let limit = self.distortion.valid_limit();
                // Radial part first, by a safeguarded 1-D inverse inside the valid domain; then
                // Newton's method in 2-D adds the small tangential terms.
                let rd = d.norm();
                let radial = |r: f64| {
                    let u = r * r;
                    r * (1.0 + u * (k1 + u * (k2 + u * k3)))
                };
                let slope = |r: f64| {
                    let u = r * r;
                    1.0 + u * (3.0 * k1 + u * (5.0 * k2 + u * 7.0 * k3))
                };
                let hi = if limit.is_finite() {
                    limit
                } else {
                    let mut h = rd.max(1.0);
                    while radial(h) < rd && h < 1e6 {
                        h *= 2.0;
                    }
                    h
                };
                let outside = || {
                    ModelError::OutsideDomain(format!(
                        "pixel lies outside the distortion model's valid domain \
                         (distorted radius {rd:.4}, domain edge {:.4} at radius {limit:.4})",
                        radial(limit)
                    ))
                };
                let r = if rd == 0.0 {
                    0.0
                } else {
                    invert_increasing(radial, slope, rd, hi).ok_or_else(outside)?
                };
                let mut xy = if rd == 0.0 { *d } else { d * (r / rd) };
                for _ in 0..INVERSE_MAX_ITERATIONS {
                    let f = brown_forward(xy.x, xy.y, k1, k2, p1, p2, k3) - d;
                    if !f.iter().all(|v| v.is_finite()) {
                        break;
                    }
                    // Where the mapping is nearly flat, rounding keeps the steps from settling
                    // below the tolerance: a residual at rounding level is as good as it gets.
                    if f.norm() <= 4.0 * f64::EPSILON * (1.0 + d.norm()) {
                        if xy.norm() >= limit {
                            return Err(outside());
                        }
                        return Ok(Vector3::new(xy.x, xy.y, 1.0).normalize());
                    }
                    let j = self.distortion.jacobian(&Point3::new(xy.x, xy.y, 1.0)).d_point;
                    let j2 = j.fixed_columns::<2>(0).into_owned();
                    let Some(inv) = j2.try_inverse() else { break };
                    let step = inv * f;
                    xy -= step;
                    if step.norm() <= INVERSE_TOLERANCE * (1.0 + xy.norm()) {
                        let residual = brown_forward(xy.x, xy.y, k1, k2, p1, p2, k3) - d;
                        if xy.norm() >= limit {
                            return Err(outside());
                        }
                        if residual.norm() <= 1e-12 * (1.0 + d.norm()) {
                            return Ok(Vector3::new(xy.x, xy.y, 1.0).normalize());
                        }
                    }
                }
                Err(ModelError::NoConvergence(format!(
                    "inverse distortion did not converge at normalised ({:.6}, {:.6})",
                    d.x, d.y
                )))
            }
            Distortion::KannalaBrandt { k1, k2, k3, k4 } => {
                let theta_d = d.norm();
                if theta_d == 0.0 {
                    return Ok(Vector3::z());
                }
                let limit = self.distortion.valid_limit();
                let f = |t: f64| {
                    let s = t * t;
                    t * (1.0 + s * (k1 + s * (k2 + s * (k3 + s * k4))))
                };
                if theta_d >= f(limit) {
                    return Err(ModelError::OutsideDomain(format!(
                        "pixel lies outside the fisheye model's valid domain \
                         (theta_d {theta_d:.4} >= {:.4})",
                        f(limit)
                    )));
                }
                let slope = |t: f64| {
                    let s = t * t;
                    1.0 + s * (3.0 * k1 + s * (5.0 * k2 + s * (7.0 * k3 + s * 9.0 * k4)))
                };
                if let Some(t) = invert_increasing(f, slope, theta_d, limit) {
                    let (s, c) = t.sin_cos();
                    return Ok(Vector3::new(s * d.x / theta_d, s * d.y / theta_d, c));
                }
                Err(ModelError::NoConvergence(format!(
                    "inverse fisheye mapping did not converge at theta_d {theta_d:.6}"
                )))
            }
        }
    }

    /// The unit ray (camera frame) through a pixel: the inverse of [`Self::project`] up to scale.
    ///
    /// Iterative for the distortion models (Newton's method, stopping when the step falls below
    /// 1e-15 normalised units); fails with [`ModelError::OutsideDomain`] where the pixel lies
    /// beyond the model's valid domain and with [`ModelError::NoConvergence`] otherwise.
    pub fn unproject(&self, pixel: &Point2<f64>) -> Result<Vector3<f64>, ModelError> {
        if !(pixel.x.is_finite() && pixel.y.is_finite()) {
            return Err(ModelError::OutsideDomain("pixel is not finite".into()));
        }
        self.undistort_to_ray(&self.intrinsics.to_normalised(pixel))
    }

    /// The pinhole pixel of the same ray: the pixel a distortion-free camera with the same
    /// intrinsics would see. Used to undistort images.
    pub fn undistort_pixel(&self, pixel: &Point2<f64>) -> Result<Point2<f64>, ModelError> {
        let ray = self.unproject(pixel)?;
        if ray.z <= 0.0 {
            return Err(ModelError::OutsideDomain(
                "ray does not reach the pinhole image plane".into(),
            ));
        }
        Ok(self.intrinsics.to_pixel(&Vector2::new(ray.x / ray.z, ray.y / ray.z)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn brown() -> Camera {
        Camera {
            width: 1280,
            height: 960,
            intrinsics: Intrinsics { fx: 1000.0, fy: 990.0, cx: 641.3, cy: 478.9, skew: 0.4 },
            distortion: Distortion::BrownConrady {
                k1: -0.28,
                k2: 0.09,
                p1: 0.001,
                p2: -0.0007,
                k3: -0.01,
            },
        }
    }

    fn fisheye() -> Camera {
        Camera {
            width: 1280,
            height: 960,
            intrinsics: Intrinsics { fx: 420.0, fy: 421.0, cx: 639.5, cy: 479.5, skew: 0.0 },
            distortion: Distortion::KannalaBrandt { k1: 0.02, k2: -0.008, k3: 0.001, k4: -0.0002 },
        }
    }

    fn pinhole() -> Camera {
        Camera::pinhole(1280, 960, 1100.0, 1100.0, 640.0, 480.0)
    }

    /// Project then unproject is the identity over a grid that covers the whole image,
    /// including the corners.
    #[test]
    fn unproject_round_trips_over_the_whole_image() {
        for cam in [pinhole(), brown(), fisheye()] {
            let mut worst: f64 = 0.0;
            for iy in 0..=48 {
                for ix in 0..=64 {
                    let px = Point2::new(
                        -0.5 + ix as f64 * cam.width as f64 / 64.0,
                        -0.5 + iy as f64 * cam.height as f64 / 48.0,
                    );
                    let ray = cam.unproject(&px).expect("inside the domain");
                    assert!((ray.norm() - 1.0).abs() < 1e-12);
                    let back = cam.project(&Point3::from(ray * 3.7)).unwrap();
                    worst = worst.max((back - px).norm());
                }
            }
            assert!(worst < 1e-9, "{:?}: worst round trip {worst:e} px", cam.distortion.kind());
        }
    }

    /// The domain limits against their closed forms: for Brown-Conrady with k1 only the radial
    /// slope 1 + 3 k1 r^2 vanishes at r = sqrt(-1 / (3 k1)); for Kannala-Brandt with k1 only,
    /// 1 + 3 k1 theta^2 vanishes at theta = sqrt(-1 / (3 k1)).
    #[test]
    fn valid_limits_match_closed_forms() {
        let b = Distortion::BrownConrady { k1: -0.3, k2: 0.0, p1: 0.0, p2: 0.0, k3: 0.0 };
        assert!((b.valid_limit() - (1.0f64 / 0.9).sqrt()).abs() < 1e-12);
        let k = Distortion::KannalaBrandt { k1: -0.1, k2: 0.0, k3: 0.0, k4: 0.0 };
        assert!((k.valid_limit() - (1.0f64 / 0.3).sqrt()).abs() < 1e-12);
        // Two positive roots of the slope, 1 - 3 u + 2 u^2 = (1 - u)(1 - 2u): the first, u = 1/2.
        let two = Distortion::BrownConrady { k1: -1.0, k2: 0.4, p1: 0.0, p2: 0.0, k3: 0.0 };
        assert!((two.valid_limit() - 0.5f64.sqrt()).abs() < 1e-12, "{}", two.valid_limit());
        // A slope that dips but stays positive: no limit.
        let dip = Distortion::BrownConrady { k1: -0.2, k2: 0.1, p1: 0.0, p2: 0.0, k3: 0.0 };
        assert!(dip.valid_limit().is_infinite());
        assert_eq!(
            Distortion::KannalaBrandt { k1: 0.0, k2: 0.0, k3: 0.0, k4: 0.0 }.valid_limit(),
            std::f64::consts::PI
        );
    }

    #[test]
    fn projection_fails_outside_the_domain() {
        assert!(matches!(
            pinhole().project(&Point3::new(0.0, 0.0, -1.0)),
            Err(ModelError::OutsideDomain(_))
        ));
        let cam = brown();
        let limit = cam.distortion.valid_limit();
        assert!(limit.is_finite() && limit > 0.5, "limit {limit}");
        assert!(cam.project(&Point3::new(limit * 1.2, 0.0, 1.0)).is_err());
        assert!(cam.project(&Point3::new(limit * 0.9, 0.0, 1.0)).is_ok());
        // Beyond the fold the inverse must refuse rather than return a second solution.
        let far = cam.intrinsics.to_pixel(&Vector2::new(10.0, 0.0));
        assert!(cam.unproject(&far).is_err());
        // A fisheye sees behind the image plane, up to its limit.
        let fe = fisheye();
        assert!(fe.project(&Point3::new(1.0, 0.0, -0.1)).is_ok());
        assert!(fe.project(&Point3::new(0.0, 0.0, 0.0)).is_err());
    }

    fn points() -> Vec<Point3<f64>> {
        vec![
            Point3::new(0.3, -0.2, 1.5),
            Point3::new(-0.9, 0.6, 2.0),
            Point3::new(0.01, 0.02, 0.8),
            Point3::new(1e-14, -1e-14, 1.0),
            Point3::new(1.1, 0.9, 1.0),
        ]
    }

    fn assert_close(a: f64, b: f64, what: &str) {
        let scale = a.abs().max(b.abs()).max(1e-3);
        assert!((a - b).abs() <= 1e-6 * scale, "{what}: analytic {a} numeric {b}");
    }

    /// Analytic Jacobians equal central finite differences (Richardson-extrapolated, so the
    /// truncation error is O(h^4)), relative 1e-6.
    #[test]
    fn jacobians_match_central_differences() {
        let pose =
            Pose::from_axis_angle(Vector3::new(0.1, -0.2, 0.05), Vector3::new(0.05, -0.02, 0.3));
        for cam in [pinhole(), brown(), fisheye()] {
            let names = cam.param_names();
            for x in points() {
                let pr = cam.project_posed(&pose, &x).unwrap();
                let p0 = cam.params();
                for (k, name) in names.iter().enumerate() {
                    let h = 1e-4 * p0[k].abs().max(1.0);
                    let num = central_difference(h, |e| {
                        let mut p = p0.clone();
                        p[k] += e;
                        cam.with_params(&p).project(&pose.transform(&x)).unwrap()
                    });
                    for r in 0..2 {
                        assert_close(
                            pr.d_params[(r, k)],
                            num[r],
                            &format!("row {r} d/d{name} at {x}"),
                        );
                    }
                }
                for k in 0..6 {
                    let num = central_difference(1e-4, |e| {
                        let mut d = nalgebra::Vector6::zeros();
                        d[k] = e;
                        cam.project(&pose.perturbed(&d).transform(&x)).unwrap()
                    });
                    for r in 0..2 {
                        assert_close(
                            pr.d_pose[(r, k)],
                            num[r],
                            &format!("row {r} d/dpose{k} at {x}"),
                        );
                    }
                }
                for k in 0..3 {
                    let num = central_difference(1e-4, |e| {
                        let mut xp = x;
                        xp[k] += e;
                        cam.project(&pose.transform(&xp)).unwrap()
                    });
                    for r in 0..2 {
                        assert_close(
                            pr.d_target_point[(r, k)],
                            num[r],
                            &format!("row {r} d/dX{k} at {x}"),
                        );
                    }
                }
            }
        }
    }

    /// Central difference with one Richardson step: (4 D(h/2) - D(h)) / 3.
    fn central_difference(h: f64, f: impl Fn(f64) -> Point2<f64>) -> Vector2<f64> {
        let d = |h: f64| (f(h) - f(-h)) / (2.0 * h);
        (d(h / 2.0) * 4.0 - d(h)) / 3.0
    }

    /// Brown-Conrady by value. Source: the formula of Heikkila and Silven (CVPR 1997, eq. 3-4),
    /// evaluated by hand in exact decimal arithmetic for x = 0.5, y = -0.25, k1 = 0.1,
    /// k2 = -0.02, k3 = 0.004, p1 = 0.001, p2 = 0.002:
    /// r^2 = 0.3125, a = 1 + 0.03125 - 0.001953125 + 0.0001220703125 = 1.0294189453125,
    /// xd = 0.51470947265625 - 0.00025 + 0.002 * 0.8125 = 0.51608447265625,
    /// yd = -0.257354736328125 + 0.001 * 0.4375 - 0.0005 = -0.257417236328125.
    #[test]
    fn brown_conrady_matches_hand_evaluated_formula() {
        let d = Distortion::BrownConrady { k1: 0.1, k2: -0.02, p1: 0.001, p2: 0.002, k3: 0.004 };
        let v = d.apply(&Point3::new(1.0, -0.5, 2.0));
        assert!((v.x - 0.51608447265625).abs() < 1e-15, "{}", v.x);
        assert!((v.y + 0.257417236328125).abs() < 1e-15, "{}", v.y);
    }

    /// Brown-Conrady against published data: the estimates and the first view's pose published
    /// with Z. Zhang, "A Flexible New Technique for Camera Calibration" (IEEE TPAMI 22(11), 2000),
    /// read from the reference folder, must reproject the published image points to within the
    /// paper's residual level (its RMS is about 0.24 px over all views).
    #[test]
    fn brown_conrady_reproduces_zhang_view_one() {
        let Some(dir) = crate::reference_dir("zhang1998") else {
            return;
        };
        let model = std::fs::read_to_string(dir.join("Model.txt")).unwrap();
        let data = std::fs::read_to_string(dir.join("data1.txt")).unwrap();
        let parse = |s: &str| -> Vec<f64> {
            s.split_whitespace().map(|t| t.parse::<f64>().unwrap()).collect()
        };
        let m = parse(&model);
        let d = parse(&data);
        assert_eq!(m.len(), 512);
        assert_eq!(d.len(), 512);
        let cam = Camera {
            width: 640,
            height: 480,
            intrinsics: Intrinsics {
                fx: 832.50,
                fy: 832.53,
                cx: 303.959,
                cy: 206.585,
                skew: 0.204494,
            },
            distortion: Distortion::BrownConrady {
                k1: -0.228601,
                k2: 0.190353,
                p1: 0.0,
                p2: 0.0,
                k3: 0.0,
            },
        };
        let r = nalgebra::Matrix3::new(
            0.992759, -0.026319, 0.117201, 0.0139247, 0.994339, 0.105341, -0.11931, -0.102947,
            0.987505,
        );
        let t = Vector3::new(-3.84019, 3.65164, 12.791);
        let mut sum = 0.0;
        for k in 0..256 {
            let x = Vector3::new(m[2 * k], m[2 * k + 1], 0.0);
            let pc = Point3::from(r * x + t);
            let px = cam.project(&pc).unwrap();
            let e = (px - Point2::new(d[2 * k], d[2 * k + 1])).norm_squared();
            sum += e;
        }
        let rms = (sum / 256.0).sqrt();
        // Without the distortion term the same pose misses by several pixels.
        assert!(rms < 0.5, "rms {rms}");
        let mut plain = cam;
        plain.distortion = Distortion::None;
        let mut sum0 = 0.0;
        for k in 0..256 {
            let x = Vector3::new(m[2 * k], m[2 * k + 1], 0.0);
            let px = plain.project(&Point3::from(r * x + t)).unwrap();
            sum0 += (px - Point2::new(d[2 * k], d[2 * k + 1])).norm_squared();
        }
        assert!((sum0 / 256.0).sqrt() > 2.0);
    }

    /// Kannala-Brandt by value against the classic fisheye projections listed by Kannala and
    /// Brandt (IEEE TPAMI 28(8), 2006, eq. 1-4): with zero coefficients the model is the
    /// equidistance projection r = f theta; with the Taylor coefficients of the stereographic
    /// projection, 2 tan(theta / 2) = theta + theta^3/12 + theta^5/120 + 17 theta^7/20160 +
    /// 31 theta^9/362880 + ... (series of tan, Abramowitz and Stegun 4.3.67; from memory),
    /// it follows 2 tan(theta / 2) to the size of the first omitted term.
    #[test]
    fn kannala_brandt_matches_classic_projections() {
        let f = 300.0;
        let mut cam = Camera {
            width: 1000,
            height: 1000,
            intrinsics: Intrinsics { fx: f, fy: f, cx: 500.0, cy: 500.0, skew: 0.0 },
            distortion: Distortion::KannalaBrandt { k1: 0.0, k2: 0.0, k3: 0.0, k4: 0.0 },
        };
        for deg in [5.0f64, 30.0, 60.0, 89.0] {
            let th = deg.to_radians();
            let px = cam.project(&Point3::new(th.sin(), 0.0, th.cos())).unwrap();
            assert!((px.x - 500.0 - f * th).abs() < 1e-9, "equidistance at {deg}");
        }
        cam.distortion = Distortion::KannalaBrandt {
            k1: 1.0 / 12.0,
            k2: 1.0 / 120.0,
            k3: 17.0 / 20160.0,
            k4: 31.0 / 362880.0,
        };
        for deg in [10.0f64, 30.0, 50.0] {
            let th = deg.to_radians();
            let px = cam.project(&Point3::new(0.0, th.sin(), th.cos())).unwrap();
            let exact = 2.0 * (th / 2.0).tan();
            // The first omitted term is 2764 theta^11 / 319334400, below 1e-5 theta^11.
            let bound = f * 2e-5 * th.powi(11) + 1e-9;
            assert!((px.y - 500.0 - f * exact).abs() < bound, "stereographic at {deg}");
        }
    }
}
