//! Rays through sub-square corners: the inverse of the camera model, solved with the model's
//! own forward projection and Jacobians, and the corner lattice of a whole view
//! ([`CornerRays`]), interpolated from a coarse lattice of exact rays where that is shown to
//! be within [`INTERP_TOL_PX`].
//!
//! [`Camera::unproject`] recomputes the distortion's valid limit on every call, which is right
//! for one pixel but dominates the cost of the tens of millions of corners of a render. Here
//! the limit is computed once per camera and each ray found by Newton's method on
//! [`Camera::project_with_jacobians`] (Brown-Conrady: on the plane `Z = 1`; Kannala-Brandt: on
//! the incidence angle, safeguarded by bisection), stopping when the pixel residual is below
//! 1e-9 px. A test checks it against [`Camera::unproject`].

use facetcal_model::{Camera, Distortion};
use nalgebra::{Matrix2, Point2, Point3, Vector2, Vector3};
use rayon::prelude::*;

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
    #[cfg(test)]
    pub(crate) fn ray(&self, px: &Point2<f64>) -> Option<Vector3<f64>> {
        self.ray_raw(px).map(|d| d.normalize())
    }

    /// The ray through a pixel up to a positive scale: `(x, y, 1)` on the plane `Z = 1` for
    /// the pinhole and Brown-Conrady models, the unit ray for Kannala-Brandt (which reaches
    /// beyond 90 degrees). The renderer only intersects rays with planes, which does not
    /// depend on the scale, so no normalisation is spent per corner.
    pub(crate) fn ray_raw(&self, px: &Point2<f64>) -> Option<Vector3<f64>> {
        let d = self.camera.intrinsics.to_normalised(px);
        match self.camera.distortion {
            Distortion::None => Some(Vector3::new(d.x, d.y, 1.0)),
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
                return (xy.norm() <= self.limit).then(|| Vector3::new(xy.x, xy.y, 1.0));
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

/// Spacing of the coarse lattice of exact rays, pixels.
const NODE_SPACING_PX: f64 = 8.0;
/// Largest interpolation error accepted, in pixels (ray error on `Z = 1`, or in angle for the
/// fisheye, times the larger focal length).
pub(crate) const INTERP_TOL_PX: f64 = 1e-5;

/// Cubic Lagrange weights of the nodes at `-1, 0, 1, 2` for a point at `t` in `[0, 1]`.
#[inline]
fn cubic_weights(t: f64) -> [f64; 4] {
    let (a, b, c, d) = (t + 1.0, t, t - 1.0, t - 2.0);
    [-b * c * d / 6.0, a * c * d / 2.0, -a * b * d / 2.0, a * b * c / 6.0]
}

/// Where a corner coordinate falls on the node lattice: its cell (the cell's first node) and
/// the four weights.
#[derive(Clone, Copy, Debug)]
struct Stencil {
    cell: usize,
    w: [f64; 4],
}

/// Exact rays at the nodes of one lattice row.
type NodeRow = Vec<Option<[f64; 3]>>;

/// The lattice of exact rays and the cells where interpolation is accepted.
#[derive(Debug)]
struct NodeLattice {
    nx: usize,
    nodes: Vec<Option<[f64; 3]>>,
    /// Per cell (`nx - 1` per row), whether interpolation is accepted there.
    smooth: Vec<bool>,
    cols: Vec<Stencil>,
    rows: Vec<Stencil>,
}

/// Rays through every corner of a view's sub-square lattice.
///
/// Without distortion each ray is exact and cheap. With distortion, exact rays are found on a
/// coarse lattice anchored at the principal point (so a whole-pixel shift of the principal
/// point moves the lattice with it) and interpolated by tensor-product cubic Lagrange
/// polynomials. In one variable the error of cubic interpolation is
/// `f''''(xi) h^4 (t + 1) t (t - 1) (t - 2) / 24`, whose factor in `t` is largest at the
/// middle of the cell (`t = 1/2`). A cell is accepted only if all 16 nodes of its stencil
/// exist and the interpolant agrees with the exact ray to [`INTERP_TOL_PX`] at the cell's
/// centre and at the middles of its four sides (where the x and y error terms are seen apart,
/// so that they cannot hide each other by cancelling at the centre). Every other cell, for
/// instance near the limit of the model's domain, is computed exactly corner by corner.
#[derive(Debug)]
pub(crate) struct CornerRays<'a> {
    caster: &'a RayCaster,
    xs: Vec<f64>,
    ys: Vec<f64>,
    lattice: Option<NodeLattice>,
}

impl<'a> CornerRays<'a> {
    /// The rays through the corners `(xs[i], ys[j])` (pixels, increasing).
    pub(crate) fn new(caster: &'a RayCaster, xs: Vec<f64>, ys: Vec<f64>) -> Self {
        let lattice = match caster.camera.distortion {
            Distortion::None => None,
            _ if xs.is_empty() || ys.is_empty() => None,
            _ => Some(NodeLattice::new(caster, &xs, &ys)),
        };
        CornerRays { caster, xs, ys, lattice }
    }

    /// How many corner cells of the lattice fall back to exact rays, and how many there are.
    #[cfg(test)]
    pub(crate) fn exact_cells(&self) -> (usize, usize) {
        self.lattice
            .as_ref()
            .map_or((0, 0), |l| (l.smooth.iter().filter(|s| !**s).count(), l.smooth.len()))
    }

    /// Corner rows `j0 .. j0 + n` into `out` (row-major, `xs.len()` per row).
    pub(crate) fn rows_into(&self, j0: usize, n: usize, out: &mut Vec<Option<Vector3<f64>>>) {
        out.clear();
        let exact = |x: f64, y: f64| self.caster.ray_raw(&Point2::new(x, y));
        let Some(l) = &self.lattice else {
            for &y in &self.ys[j0..j0 + n] {
                out.extend(self.xs.iter().map(|&x| exact(x, y)));
            }
            return;
        };
        let ncell = l.nx - 1;
        // The lattice columns interpolated to one corner row.
        let mut row: Vec<[f64; 3]> = vec![[0.0; 3]; l.nx];
        for (j, &y) in self.ys.iter().enumerate().skip(j0).take(n) {
            let sy = l.rows[j];
            for (kx, r) in row.iter_mut().enumerate() {
                let mut acc = [0.0; 3];
                for (b, wb) in sy.w.iter().enumerate() {
                    // A missing node only matters to cells that are not smooth, which never
                    // read `row`.
                    let v = l.nodes[(sy.cell + b - 1) * l.nx + kx].unwrap_or([0.0; 3]);
                    for c in 0..3 {
                        acc[c] += wb * v[c];
                    }
                }
                *r = acc;
            }
            for (i, &x) in self.xs.iter().enumerate() {
                let sx = l.cols[i];
                if !l.smooth[sy.cell * ncell + sx.cell] {
                    out.push(exact(x, y));
                    continue;
                }
                let mut acc = [0.0; 3];
                for (a, wa) in sx.w.iter().enumerate() {
                    let v = row[sx.cell + a - 1];
                    for c in 0..3 {
                        acc[c] += wa * v[c];
                    }
                }
                out.push(Some(Vector3::new(acc[0], acc[1], acc[2])));
            }
        }
    }
}

impl NodeLattice {
    fn new(caster: &RayCaster, xs: &[f64], ys: &[f64]) -> NodeLattice {
        let i = &caster.camera.intrinsics;
        let h = NODE_SPACING_PX;
        // Node k of an axis sits at `c + h (k + k0)`; the nodes reach one cell beyond the
        // corners on either side so that every corner's cell has its full stencil.
        let axis = |v: &[f64], c: f64| -> (f64, usize, Vec<Stencil>) {
            let (lo, hi) = (v[0], v[v.len() - 1]);
            let k0 = ((lo - c) / h).floor() - 1.0;
            let n = (((hi - c) / h).ceil() - k0) as usize + 3;
            let st = v
                .iter()
                .map(|&x| {
                    let u = (x - c) / h - k0;
                    let cell = (u.floor() as usize).clamp(1, n - 3);
                    Stencil { cell, w: cubic_weights(u - cell as f64) }
                })
                .collect();
            (k0, n, st)
        };
        let (kx0, nx, cols) = axis(xs, i.cx);
        let (ky0, ny, rows) = axis(ys, i.cy);
        let px = |k: f64, k0: f64, c: f64| c + h * (k + k0);
        let ray = |x: f64, y: f64| caster.ray_raw(&Point2::new(x, y)).map(|d| [d.x, d.y, d.z]);
        let node_rows: Vec<NodeRow> = (0..ny)
            .into_par_iter()
            .map(|ky| {
                let y = px(ky as f64, ky0, i.cy);
                (0..nx).map(|kx| ray(px(kx as f64, kx0, i.cx), y)).collect()
            })
            .collect();
        let nodes: Vec<Option<[f64; 3]>> = node_rows.into_iter().flatten().collect();
        let fmax = i.fx.abs().max(i.fy.abs());
        let node = |kx: usize, ky: usize| nodes[ky * nx + kx];
        // The interpolant of cell (kx, ky) at (tx, ty), or None if a stencil node is missing.
        let interp = |kx: usize, ky: usize, tx: f64, ty: f64| -> Option<[f64; 3]> {
            let (wx, wy) = (cubic_weights(tx), cubic_weights(ty));
            let mut acc = [0.0; 3];
            for (b, wb) in wy.iter().enumerate() {
                for (a, wa) in wx.iter().enumerate() {
                    let v = node(kx + a - 1, ky + b - 1)?;
                    for c in 0..3 {
                        acc[c] += wa * wb * v[c];
                    }
                }
            }
            Some(acc)
        };
        let agrees = |kx: usize, ky: usize, tx: f64, ty: f64| -> bool {
            let x = px(kx as f64 + tx, kx0, i.cx);
            let y = px(ky as f64 + ty, ky0, i.cy);
            match (interp(kx, ky, tx, ty), ray(x, y)) {
                (Some(p), Some(e)) => {
                    let d2: f64 = (0..3).map(|c| (p[c] - e[c]) * (p[c] - e[c])).sum();
                    d2.sqrt() * fmax <= INTERP_TOL_PX
                }
                _ => false,
            }
        };
        let ncell = nx - 1;
        // Cells with their full stencil: 1 ..= n - 3 on each axis.
        let full = |k: usize, n: usize| k >= 1 && k + 2 < n;
        // The sides are shared by neighbouring cells (both interpolants reduce to the same
        // one-dimensional one there), so each is checked once: through the cell after it
        // where that has a full stencil, else through the cell before it.
        let side = |k: usize, n: usize| if full(k, n) { (k, 0.0) } else { (k.max(1) - 1, 1.0) };
        let across: Vec<bool> = (0..ny * ncell)
            .into_par_iter()
            .map(|c| {
                let (ky, kx) = (c / ncell, c % ncell);
                let (cy, ty) = side(ky, ny);
                full(kx, nx) && full(cy, ny) && agrees(kx, cy, 0.5, ty)
            })
            .collect();
        let down: Vec<bool> = (0..(ny - 1) * nx)
            .into_par_iter()
            .map(|c| {
                let (ky, kx) = (c / nx, c % nx);
                let (cx, tx) = side(kx, nx);
                full(ky, ny) && full(cx, nx) && agrees(cx, ky, tx, 0.5)
            })
            .collect();
        let smooth_rows: Vec<Vec<bool>> = (0..ny - 1)
            .into_par_iter()
            .map(|ky| {
                (0..ncell)
                    .map(|kx| {
                        full(kx, nx)
                            && full(ky, ny)
                            && across[ky * ncell + kx]
                            && across[(ky + 1) * ncell + kx]
                            && down[ky * nx + kx]
                            && down[ky * nx + kx + 1]
                            && agrees(kx, ky, 0.5, 0.5)
                    })
                    .collect()
            })
            .collect();
        let smooth = smooth_rows.into_iter().flatten().collect();
        NodeLattice { nx, nodes, smooth, cols, rows }
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

    /// Strong Brown-Conrady distortion with tangential terms and skew.
    fn strong_brown() -> Camera {
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
        }
    }

    /// A Kannala-Brandt fisheye of short focal length, so the image corners lie far off axis.
    fn fisheye() -> Camera {
        Camera {
            width: 640,
            height: 480,
            intrinsics: Intrinsics { fx: 200.0, fy: 200.0, cx: 319.5, cy: 239.5, skew: 0.0 },
            distortion: Distortion::KannalaBrandt { k1: 0.02, k2: -0.006, k3: 0.001, k4: -0.0002 },
        }
    }

    /// The rays agree with the model crate's own inverse over the whole image, corners included.
    #[test]
    fn rays_agree_with_the_model_inverse() {
        let cams =
            [Camera::pinhole(640, 480, 500.0, 505.0, 320.2, 239.1), strong_brown(), fisheye()];
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

    /// Interpolated corner rays agree with exact ones over a whole sub-square lattice (4 per
    /// pixel, 20 px of padding), within the interpolation tolerance times 2 (the checks are at
    /// the points where the cubic error term peaks; elsewhere the leading term is smaller).
    /// Reference: the exact inverse above, itself checked against the model crate's.
    #[test]
    fn interpolated_corner_rays_agree_with_exact_rays() {
        let mild = Camera {
            width: 640,
            height: 480,
            intrinsics: Intrinsics { fx: 700.0, fy: 700.0, cx: 319.5, cy: 239.5, skew: 0.0 },
            distortion: Distortion::BrownConrady { k1: -0.2, k2: 0.05, p1: 0.0, p2: 0.0, k3: 0.0 },
        };
        let strong = strong_brown();
        let fisheye = fisheye();
        for (cam, most_smooth) in [(mild, true), (strong, false), (fisheye, false)] {
            let rc = RayCaster::new(&cam);
            let xs: Vec<f64> = (0..=(640 + 40) * 4).map(|i| -20.5 + i as f64 / 4.0).collect();
            let ys: Vec<f64> = (0..=(480 + 40) * 4).map(|j| -20.5 + j as f64 / 4.0).collect();
            let grid = CornerRays::new(&rc, xs.clone(), ys.clone());
            let (exact, cells) = grid.exact_cells();
            assert!(cells > 0);
            if most_smooth {
                // The outer ring of cells (about 5 % here) lacks a full stencil and is
                // never read; apart from it, nearly every cell interpolates.
                assert!(exact * 10 < cells, "{exact} of {cells} cells exact");
            }
            let fmax = cam.intrinsics.fx.max(cam.intrinsics.fy);
            let mut worst: f64 = 0.0;
            let mut out = Vec::new();
            for j in (0..ys.len()).step_by(7) {
                grid.rows_into(j, 1, &mut out);
                for i in (0..xs.len()).step_by(3) {
                    let e = rc.ray_raw(&Point2::new(xs[i], ys[j]));
                    match (out[i], e) {
                        (Some(a), Some(e)) => {
                            worst = worst.max((a.normalize() - e.normalize()).norm() * fmax)
                        }
                        (a, e) => assert_eq!(a.is_some(), e.is_some(), "({}, {})", xs[i], ys[j]),
                    }
                }
            }
            eprintln!("{:?}: {exact} of {cells} cells exact, worst {worst:.1e} px", cam.distortion);
            assert!(worst < 2.0 * INTERP_TOL_PX, "{worst:e} px");
        }
    }
}
