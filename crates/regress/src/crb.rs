//! The Cramer-Rao lower bound on a feature's image position, from the noiseless render.
//!
//! H. Cramer, "Mathematical Methods of Statistics", 1946; C. R. Rao, Bull. Calcutta Math.
//! Soc. 37, 1945. For pixels `i` of expected level `mu_i(p)` with independent Gaussian noise of
//! variance `var_i`, the Fisher information of the position `p` is
//! `J = sum_i d_mu_i d_mu_i^T / var_i` and any unbiased estimator has
//! `E |p_hat - p|^2 >= trace J^-1`. The derivatives `d_mu / d_p` are those of a translation of
//! the image content, taken by central differences of renders with the principal point moved
//! by `+-0.02` px: `cx` and `cy` enter every camera model only in the final affine step, so the
//! shift translates the optical image exactly, while illumination and vignetting (fixed to the
//! pixel grid) stay put, as they do when a feature moves.

use facetcal_render::{FloatImage, RenderError, Scene, render_view_noiseless};
use nalgebra::{Matrix2, Point2, Vector2};
use rayon::prelude::*;

use crate::error::RegressError;

/// Step of the central differences, pixels. The levels are exact area integrals, smooth in
/// the shift, so the step only has to stay well above rounding.
pub const SHIFT_STEP_PX: f64 = 0.02;

/// A view's noiseless grey levels (8-bit scale) and their derivatives with respect to a
/// translation of the image content, row-major.
#[derive(Clone, Debug)]
pub struct ShiftDerivatives {
    /// Image width, pixels.
    pub width: usize,
    /// Image height, pixels.
    pub height: usize,
    /// Noiseless levels.
    pub levels: Vec<f64>,
    /// Derivative with respect to a shift along +x, levels per pixel.
    pub dx: Vec<f64>,
    /// Derivative with respect to a shift along +y, levels per pixel.
    pub dy: Vec<f64>,
}

/// The same scene with the principal point moved by `(dx, dy)`.
fn shifted(scene: &Scene, dx: f64, dy: f64) -> Result<Scene, RenderError> {
    let mut cam = *scene.camera();
    cam.intrinsics.cx += dx;
    cam.intrinsics.cy += dy;
    Scene::builder(scene.target().clone(), cam)
        .name(scene.name())
        .poses(scene.poses().to_vec())
        .optics(*scene.optics())
        .photometry(*scene.photometry())
        .background(*scene.background())
        .occluders(scene.occluders().to_vec())
        .bits(scene.bits())
        .seed(scene.seed())
        .supersampling(scene.supersampling())
        .build()
}

/// Shift derivatives of view `index`, given its noiseless levels `base` (four more renders).
pub fn shift_derivatives_with_base(
    scene: &Scene,
    index: usize,
    base: &FloatImage,
) -> Result<ShiftDerivatives, RenderError> {
    let e = SHIFT_STEP_PX;
    let render = |dx: f64, dy: f64| -> Result<Vec<f64>, RenderError> {
        Ok(render_view_noiseless(&shifted(scene, dx, dy)?, index)?.levels.data)
    };
    let diff = |a: Vec<f64>, b: Vec<f64>| -> Vec<f64> {
        a.iter().zip(&b).map(|(a, b)| (a - b) / (2.0 * e)).collect()
    };
    let dx = diff(render(e, 0.0)?, render(-e, 0.0)?);
    let dy = diff(render(0.0, e)?, render(0.0, -e)?);
    Ok(ShiftDerivatives {
        width: base.width,
        height: base.height,
        levels: base.data.clone(),
        dx,
        dy,
    })
}

/// Shift derivatives of view `index` (five renders).
pub fn shift_derivatives(scene: &Scene, index: usize) -> Result<ShiftDerivatives, RenderError> {
    let base = render_view_noiseless(scene, index)?.levels;
    shift_derivatives_with_base(scene, index, &base)
}

/// The bound `sqrt(trace J^-1)`, pixels, on the Euclidean error of a position estimated from
/// the pixels whose centres lie within `radius` of `at`, for noise of variance `var(level)`.
/// `None` when the window holds no information (flat, or outside the image).
pub fn position_bound(
    d: &ShiftDerivatives,
    at: Point2<f64>,
    radius: f64,
    var: impl Fn(f64) -> f64,
) -> Option<f64> {
    if !(at.x.is_finite() && at.y.is_finite() && radius.is_finite() && radius > 0.0) {
        return None;
    }
    if d.width == 0 || d.height == 0 {
        return None;
    }
    let clamp = |v: f64, hi: usize| v.max(0.0).min(hi as f64) as usize;
    let (x0, x1) =
        (clamp((at.x - radius).floor(), d.width - 1), clamp((at.x + radius).ceil(), d.width - 1));
    let (y0, y1) =
        (clamp((at.y - radius).floor(), d.height - 1), clamp((at.y + radius).ceil(), d.height - 1));
    let mut j = Matrix2::<f64>::zeros();
    for y in y0..=y1 {
        for x in x0..=x1 {
            if (x as f64 - at.x).powi(2) + (y as f64 - at.y).powi(2) > radius * radius {
                continue;
            }
            let i = y * d.width + x;
            let g = Vector2::new(d.dx[i], d.dy[i]);
            j += g * g.transpose() / var(d.levels[i]).max(1e-12);
        }
    }
    // A window without two independent gradient directions bounds nothing.
    if j.determinant() <= 1e-12 * j.trace().powi(2).max(1e-300) {
        return None;
    }
    let b = j.try_inverse()?.trace().sqrt();
    b.is_finite().then_some(b)
}

/// Points of one view whose bounds are wanted: `(position, window radius)`, pixels.
pub type Windows = Vec<(Point2<f64>, f64)>;

/// Bounds of many points in one view: `points` are `(position, window radius)`.
pub fn view_bounds(
    scene: &Scene,
    index: usize,
    base: &FloatImage,
    points: &[(Point2<f64>, f64)],
) -> Result<Vec<Option<f64>>, RenderError> {
    let d = shift_derivatives_with_base(scene, index, base)?;
    Ok(points.iter().map(|&(p, r)| position_bound(&d, p, r, |l| scene.noise_variance(l))).collect())
}

/// [`view_bounds`] for several views on the rayon pool; `requests` are `(view index, points)`.
/// The result is in request order and does not depend on the thread count (each view is
/// computed alone, its sums in pixel order).
pub fn view_bounds_par(
    scene: &Scene,
    requests: &[(usize, Windows)],
) -> Result<Vec<Vec<Option<f64>>>, RegressError> {
    requests
        .par_iter()
        .map(|(index, points)| {
            let base = render_view_noiseless(scene, *index)
                .map_err(|e| RegressError::Bound(e.to_string()))?
                .levels;
            view_bounds(scene, *index, &base, points)
                .map_err(|e| RegressError::Bound(e.to_string()))
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A straight vertical edge carries no information along y, a corner of two edges does.
    /// For a single ideal step of height `a` blurred by a Gaussian of sigma `s` the Fisher
    /// information along x is `sum_i g(x_i)^2 / var` with `g` the Gaussian of height
    /// `a / (sqrt(2 pi) s)` (the derivative of the blurred step), a textbook result.
    fn synthetic(
        width: usize,
        height: usize,
        f: impl Fn(f64, f64) -> (f64, f64),
    ) -> ShiftDerivatives {
        let mut dx = vec![0.0; width * height];
        let mut dy = vec![0.0; width * height];
        for y in 0..height {
            for x in 0..width {
                let (a, b) = f(x as f64, y as f64);
                dx[y * width + x] = a;
                dy[y * width + x] = b;
            }
        }
        ShiftDerivatives { width, height, levels: vec![100.0; width * height], dx, dy }
    }

    #[test]
    fn an_edge_alone_bounds_nothing_and_two_edges_give_the_textbook_value() {
        let (a, s, var) = (200.0, 1.0, 4.0);
        let g =
            |u: f64| a / ((2.0 * std::f64::consts::PI).sqrt() * s) * (-u * u / (2.0 * s * s)).exp();
        let edge = synthetic(41, 41, |x, _| (-g(x - 20.3), 0.0));
        assert_eq!(position_bound(&edge, Point2::new(20.3, 20.0), 8.0, |_| var), None);
        // Two crossing edges: J = [jxx, jxy; jxy, jyy] summed over the whole image, with
        // jxy = sum_x g sum_y g / var from the product of the two edge profiles.
        let corner = synthetic(41, 41, |x, y| (-g(x - 20.3), -g(y - 19.6)));
        let b = position_bound(&corner, Point2::new(20.3, 19.6), 100.0, |_| var).unwrap();
        let sx2: f64 = (0..41).map(|x| g(x as f64 - 20.3).powi(2)).sum();
        let sy2: f64 = (0..41).map(|y| g(y as f64 - 19.6).powi(2)).sum();
        let sx: f64 = (0..41).map(|x| g(x as f64 - 20.3)).sum();
        let sy: f64 = (0..41).map(|y| g(y as f64 - 19.6)).sum();
        let (jxx, jyy, jxy) = (41.0 * sx2 / var, 41.0 * sy2 / var, sx * sy / var);
        let det = jxx * jyy - jxy * jxy;
        let expect = ((jxx + jyy) / det).sqrt();
        assert!((b - expect).abs() < 1e-9 * expect, "{b} vs {expect}");
        // The continuous limit: sum_x g^2 ~ a^2 / (2 sqrt(pi) s).
        let cont = a * a / (2.0 * std::f64::consts::PI.sqrt() * s);
        assert!((jxx * var / 41.0 - cont).abs() < 1e-3 * cont);
    }

    #[test]
    fn outside_or_degenerate_windows_give_none() {
        let d = synthetic(8, 8, |_, _| (1.0, 1.0));
        assert_eq!(position_bound(&d, Point2::new(f64::NAN, 1.0), 3.0, |_| 1.0), None);
        assert_eq!(position_bound(&d, Point2::new(1.0, 1.0), -1.0, |_| 1.0), None);
        // Parallel gradients: rank one.
        assert_eq!(position_bound(&d, Point2::new(4.0, 4.0), 3.0, |_| 1.0), None);
    }
}
