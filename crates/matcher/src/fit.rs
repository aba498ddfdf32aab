//! Local plane-to-image fits: the homography and affine maps that predict where the next lattice
//! node lies, and that check every final identity.
//!
//! Both fits normalise first (R. I. Hartley, "In defense of the eight-point algorithm", IEEE
//! TPAMI 19(6), 1997): each point set is moved to its centroid and scaled so that its root
//! mean square distance from it is `sqrt(2)`. The homography is then the linear DLT with
//! `h33 = 1`: after normalisation the centroid maps near the origin, so `h33` is far from zero
//! and fixing it loses nothing. Its 8 x 8 normal equations are solved through their block
//! structure (a 3 x 3 and a 2 x 2 Cholesky factorisation), cheap enough to run once per
//! predicted node.

use nalgebra::{Matrix3, Point2};

/// A similarity `x' = s (x - c)` that normalises a point set (Hartley 1997): centroid to the
/// origin, root-mean-square distance from it `sqrt(2)`. Hartley scales the mean distance; the
/// root mean square is the common-practice variant that needs no square root per point.
fn normaliser(pts: &[Point2<f64>]) -> Option<Matrix3<f64>> {
    let first = pts.first()?;
    // One pass of first and second moments about the first point, which keeps the variance
    // free of cancellation however far the points lie from the origin.
    let (mut sx, mut sy, mut sq) = (0.0, 0.0, 0.0);
    for p in pts {
        let (dx, dy) = (p.x - first.x, p.y - first.y);
        sx += dx;
        sy += dy;
        sq += dx * dx + dy * dy;
    }
    let n = pts.len() as f64;
    let (mx, my) = (sx / n, sy / n);
    let mean_sq = sq / n - (mx * mx + my * my);
    if !(mean_sq.is_finite() && mean_sq > 1e-24) {
        return None;
    }
    let s = (2.0 / mean_sq).sqrt();
    let (cx, cy) = (first.x + mx, first.y + my);
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

/// The inverse of a normaliser `x' = s (x - c)` in closed form.
fn inverse_similarity(t: &Matrix3<f64>) -> Matrix3<f64> {
    let s = 1.0 / t[(0, 0)];
    Matrix3::new(s, 0.0, -s * t[(0, 2)], 0.0, s, -s * t[(1, 2)], 0.0, 0.0, 1.0)
}

/// The Cholesky factor `L` of a symmetric positive definite 3 x 3 matrix (`A = L L^T`).
struct Chol3 {
    l: [[f64; 3]; 3],
    /// Reciprocals of the diagonal: substitution multiplies instead of dividing.
    inv: [f64; 3],
}

impl Chol3 {
    fn new(a: [[f64; 3]; 3]) -> Option<Chol3> {
        let l00 = a[0][0].sqrt();
        let l10 = a[1][0] / l00;
        let l20 = a[2][0] / l00;
        let l11 = (a[1][1] - l10 * l10).sqrt();
        let l21 = (a[2][1] - l20 * l10) / l11;
        let l22 = (a[2][2] - l20 * l20 - l21 * l21).sqrt();
        // `sqrt` of a negative pivot is NaN, which fails these tests too.
        (l00 > 0.0 && l11 > 0.0 && l22 > 0.0).then_some(Chol3 {
            l: [[l00, 0.0, 0.0], [l10, l11, 0.0], [l20, l21, l22]],
            inv: [1.0 / l00, 1.0 / l11, 1.0 / l22],
        })
    }

    /// `A^-1 b` by forward and back substitution.
    fn solve(&self, b: [f64; 3]) -> [f64; 3] {
        let (l, d) = (&self.l, &self.inv);
        let y0 = b[0] * d[0];
        let y1 = (b[1] - l[1][0] * y0) * d[1];
        let y2 = (b[2] - l[2][0] * y0 - l[2][1] * y1) * d[2];
        let x2 = y2 * d[2];
        let x1 = (y1 - l[2][1] * x2) * d[1];
        let x0 = (y0 - l[1][0] * x1 - l[2][0] * x2) * d[0];
        [x0, x1, x2]
    }
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
    // acc[g][f]: the sums of g f over the points, g in (1, u, v, u^2 + v^2) and f in
    // (x^2, xy, y^2, x, y, 1): one product table per point.
    let mut acc = [[0.0f64; 6]; 4];
    for (a, b) in src.iter().zip(dst) {
        let (x, y) = (sa * a.x + ca, sa * a.y + cb);
        let (u, v) = (sd * b.x + cu, sd * b.y + cv);
        let f = [x * x, x * y, y * y, x, y, 1.0];
        let g = [1.0, u, v, u * u + v * v];
        for (row, gk) in acc.iter_mut().zip(g) {
            for (s, fk) in row.iter_mut().zip(f) {
                *s += gk * fk;
            }
        }
    }
    // A non-finite coordinate leaves its sums non-finite.
    if acc.iter().flatten().any(|v| !v.is_finite()) {
        return None;
    }
    let [p, au, av, aw] = acc;
    // The normal matrix is [[P, 0, -U], [0, P, -V], [-U^T, -V^T, W]] with P = sum p p^T,
    // U = sum u p q^T, V = sum v p q^T, W = sum (u^2 + v^2) q q^T. Its Cholesky factor is
    // diag(L_P, L_P) over the Schur complement's factor L_S, S = W - U^T P^-1 U - V^T P^-1 V,
    // so one 3 x 3 and one 2 x 2 factorisation give the same solution and the same pivots as
    // the full 8 x 8 one, at a fraction of the cost.
    let lp = Chol3::new([[p[0], p[1], p[3]], [p[1], p[2], p[4]], [p[3], p[4], p[5]]])?;
    // Columns of U and V (rows x, y, 1 of p; columns x, y of q).
    let u = [[au[0], au[1], au[3]], [au[1], au[2], au[4]]];
    let v = [[av[0], av[1], av[3]], [av[1], av[2], av[4]]];
    let (b1, b2) = ([au[3], au[4], au[5]], [av[3], av[4], av[5]]);
    let b3 = [-aw[3], -aw[4]];
    let zu = [lp.solve(u[0]), lp.solve(u[1])];
    let zv = [lp.solve(v[0]), lp.solve(v[1])];
    let (z1, z2) = (lp.solve(b1), lp.solve(b2));
    let dot = |a: &[f64; 3], b: &[f64; 3]| a[0] * b[0] + a[1] * b[1] + a[2] * b[2];
    let s = |r: usize, c: usize| dot(&u[r], &zu[c]) + dot(&v[r], &zv[c]);
    let (s00, s01, s11) = (aw[0] - s(0, 0), aw[1] - s(0, 1), aw[2] - s(1, 1));
    let r = [b3[0] + dot(&u[0], &z1) + dot(&v[0], &z2), b3[1] + dot(&u[1], &z1) + dot(&v[1], &z2)];
    // 2 x 2 Cholesky of S.
    let l00 = s00.sqrt();
    let l10 = s01 / l00;
    let l11 = (s11 - l10 * l10).sqrt();
    // Collinear or nearly collinear points leave the system rank deficient; rounding may still
    // let the factorisation through, so test the pivots' spread as a condition estimate.
    let pivots = [lp.l[0][0], lp.l[1][1], lp.l[2][2], l00, l11];
    let (mut lo, mut hi) = (f64::INFINITY, 0.0f64);
    for d in pivots {
        lo = lo.min(d.abs());
        hi = hi.max(d.abs());
    }
    if !(s00 > 0.0 && l11 > 0.0) || lo.is_nan() || lo <= 1e-7 * hi {
        return None;
    }
    let y0 = r[0] / l00;
    let g1 = (r[1] - l10 * y0) / l11 / l11;
    let g0 = (y0 - l10 * g1) / l00;
    let h1: [f64; 3] = std::array::from_fn(|k| z1[k] + zu[0][k] * g0 + zu[1][k] * g1);
    let h2: [f64; 3] = std::array::from_fn(|k| z2[k] + zv[0][k] * g0 + zv[1][k] * g1);
    let hn = Matrix3::new(h1[0], h1[1], h1[2], h2[0], h2[1], h2[2], g0, g1, 1.0);
    if hn.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let h = inverse_similarity(&td) * hn * ts;
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
    let h = inverse_similarity(&td) * an * ts;
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
    /// The block solve against the plain least-squares solution of the same normalised DLT
    /// system (`h33 = 1`), taken by nalgebra's SVD on the 2n x 8 matrix: noisy points, so the
    /// system is overdetermined and inconsistent.
    #[test]
    fn block_solve_matches_the_full_least_squares_solution() {
        let truth = Matrix3::new(21.0, 3.0, 40.0, -2.0, 19.0, 30.0, 0.01, -0.006, 1.0);
        let mut seed = 7u64;
        let mut noise = || {
            seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            ((seed >> 11) as f64 / (1u64 << 53) as f64 - 0.5) * 0.6
        };
        let src: Vec<Point2<f64>> =
            (0..20).map(|k| Point2::new((k % 5) as f64, (k / 5) as f64)).collect();
        let dst: Vec<Point2<f64>> = src
            .iter()
            .map(|p| {
                let q = apply_raw(&truth, p).unwrap();
                Point2::new(q.x + noise(), q.y + noise())
            })
            .collect();
        let got = fit_homography(&src, &dst).unwrap();
        let (ts, td) = (normaliser(&src).unwrap(), normaliser(&dst).unwrap());
        let n = src.len();
        let mut a = nalgebra::DMatrix::<f64>::zeros(2 * n, 8);
        let mut b = nalgebra::DVector::<f64>::zeros(2 * n);
        for (k, (s, d)) in src.iter().zip(&dst).enumerate() {
            let (s, d) = (apply_raw(&ts, s).unwrap(), apply_raw(&td, d).unwrap());
            let row = [s.x, s.y, 1.0, 0.0, 0.0, 0.0, -d.x * s.x, -d.x * s.y];
            let row2 = [0.0, 0.0, 0.0, s.x, s.y, 1.0, -d.y * s.x, -d.y * s.y];
            for c in 0..8 {
                a[(2 * k, c)] = row[c];
                a[(2 * k + 1, c)] = row2[c];
            }
            b[2 * k] = d.x;
            b[2 * k + 1] = d.y;
        }
        let x = a.svd(true, true).solve(&b, 1e-14).unwrap();
        let hn = Matrix3::new(x[0], x[1], x[2], x[3], x[4], x[5], x[6], x[7], 1.0);
        let want = td.try_inverse().unwrap() * hn * ts;
        let want = want / want[(2, 2)];
        assert!((got.h - want).norm() < 1e-9 * want.norm(), "{} vs {want}", got.h);
    }
}
