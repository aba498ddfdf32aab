//! Local plane-to-image fits: the homography and affine maps that predict where the next lattice
//! node lies, and that check every final identity.
//!
//! Both fits normalise first (R. I. Hartley, "In defense of the eight-point algorithm", IEEE
//! TPAMI 19(6), 1997): each point set is moved to its centroid and scaled so that the mean
//! distance from it is `sqrt(2)`. The homography is then the linear DLT with `h33 = 1`, solved
//! by the 8 x 8 normal equations: after normalisation the centroid maps near the origin, so
//! `h33` is far from zero and fixing it loses nothing, and the solve stays cheap enough to run
//! once per predicted node.

use nalgebra::{Matrix3, Point2, SMatrix, SVector};

/// A similarity `x' = s (x - c)` that normalises a point set (Hartley 1997).
fn normaliser(pts: &[Point2<f64>]) -> Option<Matrix3<f64>> {
    let n = pts.len() as f64;
    if pts.is_empty() {
        return None;
    }
    let (mut cx, mut cy) = (0.0, 0.0);
    for p in pts {
        cx += p.x;
        cy += p.y;
    }
    cx /= n;
    cy /= n;
    let mean =
        pts.iter().map(|p| ((p.x - cx).powi(2) + (p.y - cy).powi(2)).sqrt()).sum::<f64>() / n;
    if !(mean.is_finite() && mean > 1e-12) {
        return None;
    }
    let s = std::f64::consts::SQRT_2 / mean;
    Some(Matrix3::new(s, 0.0, -s * cx, 0.0, s, -s * cy, 0.0, 0.0, 1.0))
}

fn apply_raw(h: &Matrix3<f64>, p: &Point2<f64>) -> Option<Point2<f64>> {
    let w = h[(2, 0)] * p.x + h[(2, 1)] * p.y + h[(2, 2)];
    if w.abs() < 1e-12 {
        return None;
    }
    let x = (h[(0, 0)] * p.x + h[(0, 1)] * p.y + h[(0, 2)]) / w;
    let y = (h[(1, 0)] * p.x + h[(1, 1)] * p.y + h[(1, 2)]) / w;
    (x.is_finite() && y.is_finite()).then(|| Point2::new(x, y))
}

/// A fitted plane-to-image map (a homography; an affine map is the case `h31 = h32 = 0`).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PlaneMap {
    /// The 3 x 3 matrix, `dst ~ h src` in homogeneous coordinates.
    pub h: Matrix3<f64>,
}

impl PlaneMap {
    /// Maps a point, or `None` where the map sends it to infinity.
    pub fn apply(&self, p: &Point2<f64>) -> Option<Point2<f64>> {
        apply_raw(&self.h, p)
    }

    /// The inverse map, if the matrix is invertible.
    pub fn inverse(&self) -> Option<PlaneMap> {
        self.h.try_inverse().map(|h| PlaneMap { h })
    }

    /// The sign of the Jacobian determinant at `p`: positive where the map keeps the handedness
    /// of the source plane. For `H` with rows `h1, h2, h3` and `w = h3 . (p, 1)`, the
    /// determinant is `det(H) / w^3`.
    pub fn orientation_at(&self, p: &Point2<f64>) -> f64 {
        let w = self.h[(2, 0)] * p.x + self.h[(2, 1)] * p.y + self.h[(2, 2)];
        self.h.determinant() / (w * w * w)
    }
}

/// Least-squares homography from at least 4 point pairs (normalised DLT with `h33 = 1`).
/// `None` when the points are degenerate (fewer than 4, collinear, or an ill-conditioned system).
pub fn fit_homography(src: &[Point2<f64>], dst: &[Point2<f64>]) -> Option<PlaneMap> {
    if src.len() != dst.len() || src.len() < 4 {
        return None;
    }
    let ts = normaliser(src)?;
    let td = normaliser(dst)?;
    // The normal equations of the rows `[p, 0, -u q]` and `[0, p, -v q]` (p = (x, y, 1),
    // q = (x, y)) have block structure, so the 8 x 8 matrix is filled from 23 sums instead of
    // 2 x 64 products per point.
    let (sa, sd) = (ts[(0, 0)], td[(0, 0)]);
    let (ca, cb, cu, cv) = (ts[(0, 2)], ts[(1, 2)], td[(0, 2)], td[(1, 2)]);
    let mut m = [0.0f64; 23];
    for (a, b) in src.iter().zip(dst) {
        let (x, y) = (sa * a.x + ca, sa * a.y + cb);
        let (u, v) = (sd * b.x + cu, sd * b.y + cv);
        if !(x.is_finite() && y.is_finite() && u.is_finite() && v.is_finite()) {
            return None;
        }
        let (xx, xy, yy) = (x * x, x * y, y * y);
        let w = u * u + v * v;
        m[0] += xx;
        m[1] += xy;
        m[2] += yy;
        m[3] += x;
        m[4] += y;
        m[5] += 1.0;
        m[6] += u * xx;
        m[7] += u * xy;
        m[8] += u * yy;
        m[9] += u * x;
        m[10] += u * y;
        m[11] += v * xx;
        m[12] += v * xy;
        m[13] += v * yy;
        m[14] += v * x;
        m[15] += v * y;
        m[16] += w * xx;
        m[17] += w * xy;
        m[18] += w * yy;
        m[19] += u;
        m[20] += v;
        m[21] += w * x;
        m[22] += w * y;
    }
    let pp = [[m[0], m[1], m[3]], [m[1], m[2], m[4]], [m[3], m[4], m[5]]];
    // Sum of u p q^T: rows x, y, 1; columns x, y.
    let upq = [[m[6], m[7]], [m[7], m[8]], [m[9], m[10]]];
    let vpq = [[m[11], m[12]], [m[12], m[13]], [m[14], m[15]]];
    let mut ata = SMatrix::<f64, 8, 8>::zeros();
    for (r, ((p, u), v)) in pp.iter().zip(&upq).zip(&vpq).enumerate() {
        for (c, &e) in p.iter().enumerate() {
            ata[(r, c)] = e;
            ata[(r + 3, c + 3)] = e;
        }
        for (c, (&uc, &vc)) in u.iter().zip(v).enumerate() {
            ata[(r, 6 + c)] = -uc;
            ata[(6 + c, r)] = -uc;
            ata[(r + 3, 6 + c)] = -vc;
            ata[(6 + c, r + 3)] = -vc;
        }
    }
    ata[(6, 6)] = m[16];
    ata[(6, 7)] = m[17];
    ata[(7, 6)] = m[17];
    ata[(7, 7)] = m[18];
    let atb = SVector::<f64, 8>::from([m[9], m[10], m[19], m[14], m[15], m[20], -m[21], -m[22]]);
    let ch = ata.cholesky()?;
    // Collinear or nearly collinear points leave the system rank deficient; rounding may still
    // let the factorisation through, so test the pivots' spread as a condition estimate.
    let l = ch.l_dirty();
    let (mut lo, mut hi) = (f64::INFINITY, 0.0f64);
    for k in 0..8 {
        lo = lo.min(l[(k, k)].abs());
        hi = hi.max(l[(k, k)].abs());
    }
    if lo.is_nan() || lo <= 1e-7 * hi {
        return None;
    }
    let x = ch.solve(&atb);
    if x.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let hn = Matrix3::new(x[0], x[1], x[2], x[3], x[4], x[5], x[6], x[7], 1.0);
    let h = td.try_inverse()? * hn * ts;
    let scale = h[(2, 2)];
    let h = if scale.abs() > 1e-300 { h / scale } else { h };
    h.iter().all(|v| v.is_finite()).then_some(PlaneMap { h })
}

/// Least-squares affine map from at least 3 non-collinear point pairs.
pub fn fit_affine(src: &[Point2<f64>], dst: &[Point2<f64>]) -> Option<PlaneMap> {
    if src.len() != dst.len() || src.len() < 3 {
        return None;
    }
    let ts = normaliser(src)?;
    let td = normaliser(dst)?;
    let mut ata = nalgebra::Matrix3::<f64>::zeros();
    let mut atu = nalgebra::Vector3::<f64>::zeros();
    let mut atv = nalgebra::Vector3::<f64>::zeros();
    for (s, d) in src.iter().zip(dst) {
        let s = apply_raw(&ts, s)?;
        let d = apply_raw(&td, d)?;
        let a = nalgebra::Vector3::new(s.x, s.y, 1.0);
        ata += a * a.transpose();
        atu += a * d.x;
        atv += a * d.y;
    }
    let ch = ata.cholesky()?;
    let (pu, pv) = (ch.solve(&atu), ch.solve(&atv));
    // Reject near-collinear sets: the smallest eigenvalue of the normalised scatter tells.
    let det = ata.determinant();
    if !(det.is_finite() && det > 1e-6 * (src.len() as f64).powi(3)) {
        return None;
    }
    let an = Matrix3::new(pu[0], pu[1], pu[2], pv[0], pv[1], pv[2], 0.0, 0.0, 1.0);
    let h = td.try_inverse()? * an * ts;
    h.iter().all(|v| v.is_finite()).then_some(PlaneMap { h })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// P. S. Heckbert, "Fundamentals of Texture Mapping and Image Warping", MSc thesis,
    /// UC Berkeley, 1989, section 2.2.3: the closed-form projective map of the unit square
    /// (0,0), (1,0), (1,1), (0,1) onto a quadrilateral (x0,y0)..(x3,y3) (formulas from memory,
    /// an independent construction: no least squares, no normalisation).
    fn heckbert_square_to_quad(q: [(f64, f64); 4]) -> Matrix3<f64> {
        let [(x0, y0), (x1, y1), (x2, y2), (x3, y3)] = q;
        let sx = x0 - x1 + x2 - x3;
        let sy = y0 - y1 + y2 - y3;
        let (dx1, dx2, dy1, dy2) = (x1 - x2, x3 - x2, y1 - y2, y3 - y2);
        let den = dx1 * dy2 - dx2 * dy1;
        let g = (sx * dy2 - dx2 * sy) / den;
        let h = (dx1 * sy - sx * dy1) / den;
        Matrix3::new(
            x1 - x0 + g * x1,
            x3 - x0 + h * x3,
            x0,
            y1 - y0 + g * y1,
            y3 - y0 + h * y3,
            y0,
            g,
            h,
            1.0,
        )
    }

    #[test]
    fn four_point_homography_matches_heckberts_closed_form() {
        let quad = [(102.5, 40.0), (410.0, 77.25), (380.5, 301.0), (90.0, 260.75)];
        let src: Vec<Point2<f64>> = [(0.0, 0.0), (1.0, 0.0), (1.0, 1.0), (0.0, 1.0)]
            .iter()
            .map(|&(x, y)| Point2::new(x, y))
            .collect();
        let dst: Vec<Point2<f64>> = quad.iter().map(|&(x, y)| Point2::new(x, y)).collect();
        let got = fit_homography(&src, &dst).unwrap();
        let want = PlaneMap { h: heckbert_square_to_quad(quad) };
        for (u, v) in [(0.5, 0.5), (0.25, 0.9), (2.0, -1.0), (0.0, 1.0)] {
            let p = Point2::new(u, v);
            let (a, b) = (got.apply(&p).unwrap(), want.apply(&p).unwrap());
            assert!((a - b).norm() < 1e-9, "at {p}: {a} vs {b}");
        }
        assert!((got.h - want.h).norm() < 1e-9 * want.h.norm());
        // The quadrilateral keeps the square's orientation (clockwise in y-down coordinates).
        assert!(got.orientation_at(&Point2::new(0.5, 0.5)) > 0.0);
    }

    #[test]
    fn degenerate_sets_are_refused() {
        let line: Vec<Point2<f64>> =
            (0..6).map(|i| Point2::new(i as f64, 2.0 * i as f64)).collect();
        assert!(fit_homography(&line, &line).is_none());
        assert!(fit_affine(&line, &line).is_none());
        assert!(fit_homography(&line[..3], &line[..3]).is_none());
    }

    #[test]
    fn affine_fit_recovers_an_affine_map() {
        let a = Matrix3::new(2.0, 0.3, 5.0, -0.4, 1.5, -7.0, 0.0, 0.0, 1.0);
        let src: Vec<Point2<f64>> =
            (0..9).map(|k| Point2::new((k % 3) as f64, (k / 3) as f64)).collect();
        let dst: Vec<Point2<f64>> = src.iter().map(|p| apply_raw(&a, p).unwrap()).collect();
        let m = fit_affine(&src, &dst).unwrap();
        assert!((m.h - a).norm() < 1e-9);
    }
}
