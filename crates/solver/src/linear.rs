//! Closed-form initialisation: Hartley-normalised DLT for the 3x4 projection and its RQ
//! decomposition, plane-to-image homographies, Zhang's closed-form intrinsics, and linear
//! poses for a known camera.
//!
//! References: R. Hartley, "In defense of the eight-point algorithm", IEEE TPAMI 19(6), 1997
//! (normalisation); R. Hartley and A. Zisserman, "Multiple View Geometry", 2nd ed., 2003,
//! sections 4.4 and 7.1-7.2 (DLT and the decomposition of P); Z. Zhang, "A Flexible New
//! Technique for Camera Calibration", IEEE TPAMI 22(11), 2000, section 3.1 and appendix B.

use nalgebra::{
    DMatrix, Matrix3, Matrix3x4, Matrix4, Point2, Point3, SymmetricEigen, Vector2, Vector3,
};

use crate::error::SolverError;
use facetcal_model::{Intrinsics, Pose};

/// Flatness below which a point set counts as planar: sqrt(lambda_3 / lambda_1) of the
/// centred scatter matrix.
pub const PLANAR_LIMIT: f64 = 1e-3;
/// Thinness below which a point set counts as collinear: sqrt(lambda_2 / lambda_1).
pub const LINE_LIMIT: f64 = 1e-3;
/// The smallest acceptable ratio sigma_5 / sigma_1 of Zhang's normalised constraint matrix.
pub const ZHANG_CONDITION_LIMIT: f64 = 1e-4;

/// The shape of a 3-D point set: a frame whose z axis is the direction of least spread.
#[derive(Clone, Copy, Debug)]
pub struct Spread {
    /// Centroid.
    pub centroid: Vector3<f64>,
    /// Columns: principal directions, largest spread first (a proper rotation).
    pub axes: Matrix3<f64>,
    /// sqrt(lambda_3 / lambda_1).
    pub flatness: f64,
    /// sqrt(lambda_2 / lambda_1).
    pub thinness: f64,
}

/// Principal axes of a point set.
pub fn spread(points: &[Point3<f64>]) -> Spread {
    let n = points.len().max(1) as f64;
    let c = points.iter().fold(Vector3::zeros(), |a, p| a + p.coords) / n;
    let mut s = Matrix3::zeros();
    for p in points {
        let d = p.coords - c;
        s += d * d.transpose();
    }
    let e = SymmetricEigen::new(s / n);
    let mut idx = [0usize, 1, 2];
    idx.sort_by(|&a, &b| e.eigenvalues[b].total_cmp(&e.eigenvalues[a]));
    let l: Vec<f64> = idx.iter().map(|&i| e.eigenvalues[i].max(0.0)).collect();
    let mut axes = Matrix3::zeros();
    for (k, &i) in idx.iter().enumerate() {
        axes.set_column(k, &e.eigenvectors.column(i));
    }
    if axes.determinant() < 0.0 {
        let z = -axes.column(2);
        axes.set_column(2, &z);
    }
    let (flatness, thinness) =
        if l[0] > 0.0 { ((l[2] / l[0]).sqrt(), (l[1] / l[0]).sqrt()) } else { (0.0, 0.0) };
    Spread { centroid: c, axes, flatness, thinness }
}

/// Hartley's similarity for 2-D points: centroid to the origin, mean distance sqrt(2).
pub fn normalising_transform_2d(points: &[Point2<f64>]) -> Matrix3<f64> {
    let n = points.len().max(1) as f64;
    let c = points.iter().fold(Vector2::zeros(), |a, p| a + p.coords) / n;
    let mean = points.iter().map(|p| (p.coords - c).norm()).sum::<f64>() / n;
    let s = if mean > 0.0 { std::f64::consts::SQRT_2 / mean } else { 1.0 };
    Matrix3::new(s, 0.0, -s * c.x, 0.0, s, -s * c.y, 0.0, 0.0, 1.0)
}

/// Hartley's similarity for 3-D points: centroid to the origin, mean distance sqrt(3).
pub fn normalising_transform_3d(points: &[Point3<f64>]) -> Matrix4<f64> {
    let n = points.len().max(1) as f64;
    let c = points.iter().fold(Vector3::zeros(), |a, p| a + p.coords) / n;
    let mean = points.iter().map(|p| (p.coords - c).norm()).sum::<f64>() / n;
    let s = if mean > 0.0 { 3f64.sqrt() / mean } else { 1.0 };
    let mut t = Matrix4::identity() * s;
    t[(3, 3)] = 1.0;
    t[(0, 3)] = -s * c.x;
    t[(1, 3)] = -s * c.y;
    t[(2, 3)] = -s * c.z;
    t
}

/// The unit vector minimising `|A x|`: the right singular vector of the smallest singular
/// value, with the singular values (descending).
pub fn smallest_right_singular_vector(a: DMatrix<f64>) -> Option<(Vec<f64>, Vec<f64>)> {
    let n = a.ncols();
    // A tall A is first reduced to the n x n triangle R of A = QR (Householder, backward
    // stable): R has A's singular values and right singular vectors, and its SVD is cheap
    // (the "R-SVD" of Golub and Van Loan, "Matrix Computations", section 5.4, cited from
    // memory). A short A is padded with zero rows so that V^T is n x n.
    let a = if a.nrows() > n {
        a.qr().r()
    } else if a.nrows() < n {
        a.resize_vertically(n, 0.0)
    } else {
        a
    };
    let svd = a.try_svd(false, true, f64::EPSILON, 0)?;
    let vt = svd.v_t?;
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&i, &j| svd.singular_values[j].total_cmp(&svd.singular_values[i]));
    let k = *order.last()?;
    let sv = order.iter().map(|&i| svd.singular_values[i]).collect();
    Some((vt.row(k).iter().copied().collect(), sv))
}

/// The DLT system for `P` on already-normalised points: rows
/// `[X^T, 0, -u X^T]` and `[0, X^T, -v X^T]` (Hartley and Zisserman, eq. 7.2).
pub fn dlt_system(points: &[(Point3<f64>, Point2<f64>)]) -> DMatrix<f64> {
    let mut a = DMatrix::zeros(2 * points.len(), 12);
    for (k, (x, u)) in points.iter().enumerate() {
        let xh = [x.x, x.y, x.z, 1.0];
        for j in 0..4 {
            a[(2 * k, j)] = xh[j];
            a[(2 * k, 8 + j)] = -u.x * xh[j];
            a[(2 * k + 1, 4 + j)] = xh[j];
            a[(2 * k + 1, 8 + j)] = -u.y * xh[j];
        }
    }
    a
}

/// The 3x4 projection matrix from at least 6 non-coplanar correspondences by the
/// Hartley-normalised DLT, scaled to unit Frobenius norm with `det(P[:, :3]) > 0`.
///
/// `view` only labels errors. Fails for too few points, points on a line or in a plane.
pub fn dlt(
    view: usize,
    points: &[(Point3<f64>, Point2<f64>)],
) -> Result<Matrix3x4<f64>, SolverError> {
    if points.len() < 6 {
        return Err(SolverError::TooFewPoints { method: "DLT", got: points.len(), need: 6 });
    }
    let xs: Vec<Point3<f64>> = points.iter().map(|p| p.0).collect();
    let sp = spread(&xs);
    if sp.thinness < LINE_LIMIT {
        return Err(SolverError::PointsOnLine { view, thinness: sp.thinness });
    }
    if sp.flatness < PLANAR_LIMIT {
        return Err(SolverError::CoplanarPoints { view, flatness: sp.flatness });
    }
    let us: Vec<Point2<f64>> = points.iter().map(|p| p.1).collect();
    let t3 = normalising_transform_3d(&xs);
    let t2 = normalising_transform_2d(&us);
    let normed: Vec<(Point3<f64>, Point2<f64>)> = points
        .iter()
        .map(|(x, u)| {
            let xn = t3 * x.to_homogeneous();
            let un = t2 * u.to_homogeneous();
            (Point3::new(xn.x, xn.y, xn.z), Point2::new(un.x, un.y))
        })
        .collect();
    let (p, _) = smallest_right_singular_vector(dlt_system(&normed))
        .ok_or_else(|| SolverError::NoPhysicalSolution("DLT: SVD failed".into()))?;
    let pn = Matrix3x4::from_row_slice(&p);
    let t2_inv = t2
        .try_inverse()
        .ok_or_else(|| SolverError::NoPhysicalSolution("DLT: image normalisation".into()))?;
    // Denormalise: P = T2^-1 Pn T3.
    let mut pm = t2_inv * pn * t3;
    if pm.fixed_view::<3, 3>(0, 0).determinant() < 0.0 {
        pm = -pm;
    }
    let norm = pm.norm();
    if !(norm > 0.0 && norm.is_finite()) {
        return Err(SolverError::NoPhysicalSolution("DLT: zero projection".into()));
    }
    Ok(pm / norm)
}

/// RQ decomposition of a 3x3 matrix `M = K R` with `K` upper triangular with a positive
/// diagonal and `R` orthogonal (Hartley and Zisserman, section A4.1.1), through the QR
/// decomposition of the row-reversed transpose.
pub fn rq3(m: &Matrix3<f64>) -> (Matrix3<f64>, Matrix3<f64>) {
    let flip = Matrix3::new(0.0, 0.0, 1.0, 0.0, 1.0, 0.0, 1.0, 0.0, 0.0);
    let qr = (flip * m).transpose().qr();
    let (q, r) = (qr.q(), qr.r());
    let mut k = flip * r.transpose() * flip;
    let mut rot = flip * q.transpose();
    for i in 0..3 {
        if k[(i, i)] < 0.0 {
            // K D D R with D = diag(+-1): flip column i of K and row i of R.
            for row in 0..3 {
                k[(row, i)] = -k[(row, i)];
            }
            for col in 0..3 {
                rot[(i, col)] = -rot[(i, col)];
            }
        }
    }
    (k, rot)
}

/// Decomposes `P = K [R | t]` into intrinsics (normalised so `K[2][2] = 1`) and a pose, with
/// positive focal lengths, `det R = +1` and the points in front of the camera.
pub fn decompose_projection(
    p: &Matrix3x4<f64>,
    points: &[Point3<f64>],
) -> Result<(Intrinsics, Pose), SolverError> {
    let mut p = *p;
    if p.fixed_view::<3, 3>(0, 0).determinant() < 0.0 {
        p = -p;
    }
    let m: Matrix3<f64> = p.fixed_view::<3, 3>(0, 0).into_owned();
    if m.determinant().abs() < 1e-300 {
        return Err(SolverError::NoPhysicalSolution("singular left 3x3 block of P".into()));
    }
    let (k, r) = rq3(&m);
    let kinv = k
        .try_inverse()
        .ok_or_else(|| SolverError::NoPhysicalSolution("singular calibration matrix".into()))?;
    let t = kinv * p.column(3);
    let s = k[(2, 2)];
    let intr = Intrinsics {
        fx: k[(0, 0)] / s,
        fy: k[(1, 1)] / s,
        cx: k[(0, 2)] / s,
        cy: k[(1, 2)] / s,
        skew: k[(0, 1)] / s,
    };
    // K has a positive diagonal and det M > 0, so det R = +1 and the scale s > 0.
    let pose = Pose::from_matrix(&r, t);
    check_in_front(&pose, points)?;
    Ok((intr, pose))
}

fn check_in_front(pose: &Pose, points: &[Point3<f64>]) -> Result<(), SolverError> {
    let behind = points.iter().filter(|x| pose.transform(x).z <= 0.0).count();
    if behind * 2 > points.len() {
        return Err(SolverError::NoPhysicalSolution(format!(
            "{behind} of {} points lie behind the camera",
            points.len()
        )));
    }
    Ok(())
}

/// The homography `H` with `u ~ H (x, y, 1)` from plane coordinates to pixels, by the
/// Hartley-normalised DLT, scaled to unit Frobenius norm.
pub fn homography(
    view: usize,
    points: &[(Point2<f64>, Point2<f64>)],
) -> Result<Matrix3<f64>, SolverError> {
    if points.len() < 4 {
        return Err(SolverError::TooFewPoints { method: "homography", got: points.len(), need: 4 });
    }
    let xs: Vec<Point2<f64>> = points.iter().map(|p| p.0).collect();
    let sp = spread(&xs.iter().map(|p| Point3::new(p.x, p.y, 0.0)).collect::<Vec<_>>());
    if sp.thinness < LINE_LIMIT {
        return Err(SolverError::PointsOnLine { view, thinness: sp.thinness });
    }
    let us: Vec<Point2<f64>> = points.iter().map(|p| p.1).collect();
    let tx = normalising_transform_2d(&xs);
    let tu = normalising_transform_2d(&us);
    let mut a = DMatrix::zeros(2 * points.len(), 9);
    for (k, (x, u)) in points.iter().enumerate() {
        let xn = tx * x.to_homogeneous();
        let un = tu * u.to_homogeneous();
        let xh = [xn.x, xn.y, 1.0];
        for j in 0..3 {
            a[(2 * k, j)] = xh[j];
            a[(2 * k, 6 + j)] = -un.x * xh[j];
            a[(2 * k + 1, 3 + j)] = xh[j];
            a[(2 * k + 1, 6 + j)] = -un.y * xh[j];
        }
    }
    let (h, _) = smallest_right_singular_vector(a)
        .ok_or_else(|| SolverError::NoPhysicalSolution("homography: SVD failed".into()))?;
    let hn = Matrix3::from_row_slice(&h);
    let tu_inv = tu
        .try_inverse()
        .ok_or_else(|| SolverError::NoPhysicalSolution("homography normalisation".into()))?;
    let hm = tu_inv * hn * tx;
    let norm = hm.norm();
    if !(norm > 0.0 && norm.is_finite()) {
        return Err(SolverError::NoPhysicalSolution("zero homography".into()));
    }
    Ok(hm / norm)
}

/// Zhang's constraint row `v_ij` (Zhang 2000, eq. 8) of columns `i`, `j` of `H`.
fn zhang_row(h: &Matrix3<f64>, i: usize, j: usize) -> [f64; 6] {
    let (a, b) = (h.column(i), h.column(j));
    [
        a[0] * b[0],
        a[0] * b[1] + a[1] * b[0],
        a[1] * b[1],
        a[2] * b[0] + a[0] * b[2],
        a[2] * b[1] + a[1] * b[2],
        a[2] * b[2],
    ]
}

/// Closed-form intrinsics from plane-to-image homographies (Zhang 2000, section 3.1 and
/// appendix B). The pixel coordinates are first mapped by `norm` (a similarity that centres
/// and scales the image) so that the constraint matrix is well conditioned; `zero_skew` adds
/// Zhang's constraint `B12 = 0` (needed with two views).
pub fn zhang_intrinsics(
    homographies: &[Matrix3<f64>],
    norm: &Matrix3<f64>,
    zero_skew: bool,
) -> Result<Intrinsics, SolverError> {
    let need = if zero_skew { 2 } else { 3 };
    if homographies.len() < need {
        return Err(SolverError::TooFewViews {
            got: homographies.len(),
            need,
            reason: if zero_skew {
                "closed-form intrinsics with zero skew".into()
            } else {
                "closed-form intrinsics with free skew".into()
            },
        });
    }
    let rows = 2 * homographies.len() + usize::from(zero_skew);
    let mut v = DMatrix::zeros(rows, 6);
    for (k, h) in homographies.iter().enumerate() {
        // The constraints involve only h1 and h2 and are homogeneous of degree 2 in them, so
        // scaling both to unit mean length balances the rows whatever the target's unit.
        let hn = norm * h;
        let scale = 0.5 * (hn.column(0).norm() + hn.column(1).norm());
        let hn = hn / scale;
        let v12 = zhang_row(&hn, 0, 1);
        let v11 = zhang_row(&hn, 0, 0);
        let v22 = zhang_row(&hn, 1, 1);
        for j in 0..6 {
            v[(2 * k, j)] = v12[j];
            v[(2 * k + 1, j)] = v11[j] - v22[j];
        }
    }
    if zero_skew {
        v[(rows - 1, 1)] = 1.0;
    }
    let (b, sv) = smallest_right_singular_vector(v)
        .ok_or_else(|| SolverError::NoPhysicalSolution("Zhang: SVD failed".into()))?;
    let conditioning = if sv[0] > 0.0 { sv[4] / sv[0] } else { 0.0 };
    if conditioning < ZHANG_CONDITION_LIMIT {
        return Err(SolverError::ParallelViews { conditioning, limit: ZHANG_CONDITION_LIMIT });
    }
    let mut b = b;
    if b[0] < 0.0 {
        b.iter_mut().for_each(|x| *x = -*x);
    }
    let (b11, b12, b22, b13, b23, b33) = (b[0], b[1], b[2], b[3], b[4], b[5]);
    let den = b11 * b22 - b12 * b12;
    if !(den > 0.0 && b11 > 0.0) {
        return Err(SolverError::NoPhysicalSolution(
            "the image of the absolute conic is not positive definite".into(),
        ));
    }
    let v0 = (b12 * b13 - b11 * b23) / den;
    let lambda = b33 - (b13 * b13 + v0 * (b12 * b13 - b11 * b23)) / b11;
    if lambda / b11 <= 0.0 || !lambda.is_finite() {
        return Err(SolverError::NoPhysicalSolution(
            "negative squared focal length in Zhang's closed form".into(),
        ));
    }
    let alpha = (lambda / b11).sqrt();
    let beta = (lambda * b11 / den).sqrt();
    let gamma = -b12 * alpha * alpha * beta / lambda;
    let u0 = gamma * v0 / beta - b13 * alpha * alpha / lambda;
    let kn = Matrix3::new(alpha, gamma, u0, 0.0, beta, v0, 0.0, 0.0, 1.0);
    let ninv = norm
        .try_inverse()
        .ok_or_else(|| SolverError::NoPhysicalSolution("image normalisation".into()))?;
    let k = ninv * kn;
    let k = k / k[(2, 2)];
    let out =
        Intrinsics { fx: k[(0, 0)], fy: k[(1, 1)], cx: k[(0, 2)], cy: k[(1, 2)], skew: k[(0, 1)] };
    if ![out.fx, out.fy, out.cx, out.cy, out.skew].iter().all(|x| x.is_finite()) {
        return Err(SolverError::NoPhysicalSolution("non-finite closed-form intrinsics".into()));
    }
    Ok(if zero_skew { Intrinsics { skew: 0.0, ..out } } else { out })
}

/// The focal length of one planar view with known principal point, zero skew and unit aspect
/// ratio: Zhang's two constraints with `B = diag(1/f^2, 1/f^2, 1)` after moving the principal
/// point to the origin, solved in least squares for `1/f^2`.
pub fn focal_from_homographies(
    homographies: &[Matrix3<f64>],
    cx: f64,
    cy: f64,
) -> Result<f64, SolverError> {
    let shift = Matrix3::new(1.0, 0.0, -cx, 0.0, 1.0, -cy, 0.0, 0.0, 1.0);
    // With B = diag(w, w, 1): h_i^T B h_j = w (h1i h1j + h2i h2j) + h3i h3j.
    let (mut num, mut den) = (0.0, 0.0);
    for h in homographies {
        let h = shift * h;
        let h = h / h.norm();
        let (a, b) = (h.column(0), h.column(1));
        // v12: w (a0 b0 + a1 b1) + a2 b2 = 0; v11 - v22: w (a0^2 + a1^2 - b0^2 - b1^2) + a2^2 - b2^2 = 0
        let eqs = [
            (a[0] * b[0] + a[1] * b[1], a[2] * b[2]),
            (a[0] * a[0] + a[1] * a[1] - b[0] * b[0] - b[1] * b[1], a[2] * a[2] - b[2] * b[2]),
        ];
        for (c, d) in eqs {
            num -= c * d;
            den += c * c;
        }
    }
    let w = num / den;
    if !(w > 0.0 && w.is_finite()) {
        return Err(SolverError::ParallelViews { conditioning: 0.0, limit: ZHANG_CONDITION_LIMIT });
    }
    Ok(1.0 / w.sqrt())
}

/// The nearest rotation to `m` (Frobenius norm): `U V^T` with the sign of the last singular
/// direction fixed so `det = +1`.
pub fn nearest_rotation(m: &Matrix3<f64>) -> Matrix3<f64> {
    let svd = m.svd(true, true);
    let (u, vt) = match (svd.u, svd.v_t) {
        (Some(u), Some(vt)) => (u, vt),
        _ => return Matrix3::identity(),
    };
    let mut d = Matrix3::identity();
    if (u * vt).determinant() < 0.0 {
        d[(2, 2)] = -1.0;
    }
    u * d * vt
}

/// The pose of a plane (plane frame to camera frame) from its homography and intrinsics
/// (Zhang 2000, section 3.1): `[r1 r2 t] = lambda K^-1 H`, `r3 = r1 x r2`, then the nearest
/// rotation. The sign makes the plane's origin lie in front of the camera.
pub fn pose_from_homography(k: &Matrix3<f64>, h: &Matrix3<f64>) -> Result<Pose, SolverError> {
    let kinv = k
        .try_inverse()
        .ok_or_else(|| SolverError::NoPhysicalSolution("singular calibration matrix".into()))?;
    let a = kinv * h;
    let n1 = a.column(0).norm();
    let n2 = a.column(1).norm();
    if !(n1 > 0.0 && n2 > 0.0) {
        return Err(SolverError::NoPhysicalSolution("degenerate homography".into()));
    }
    let mut l = 2.0 / (n1 + n2);
    if a[(2, 2)] < 0.0 {
        l = -l;
    }
    let r1 = a.column(0) * l;
    let r2 = a.column(1) * l;
    let r3 = r1.cross(&r2);
    let r = nearest_rotation(&Matrix3::from_columns(&[r1, r2, r3]));
    Ok(Pose::from_matrix(&r, a.column(2) * l))
}

/// The pose from a projection matrix for a known `K`: `[R | t] ~ K^-1 P`, `R` the nearest
/// rotation, the scale the mean singular value of the left block.
pub fn pose_from_projection(
    k: &Matrix3<f64>,
    p: &Matrix3x4<f64>,
    points: &[Point3<f64>],
) -> Result<Pose, SolverError> {
    let kinv = k
        .try_inverse()
        .ok_or_else(|| SolverError::NoPhysicalSolution("singular calibration matrix".into()))?;
    let mut a = kinv * p;
    let mut m: Matrix3<f64> = a.fixed_view::<3, 3>(0, 0).into_owned();
    if m.determinant() < 0.0 {
        a = -a;
        m = -m;
    }
    let sv = m.singular_values();
    let s = sv.mean();
    if s <= 0.0 || !s.is_finite() {
        return Err(SolverError::NoPhysicalSolution("singular projection".into()));
    }
    let pose = Pose::from_matrix(&nearest_rotation(&m), a.column(3) / s);
    check_in_front(&pose, points)?;
    Ok(pose)
}

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::Vector3;

    fn pose() -> Pose {
        Pose::from_axis_angle(Vector3::new(0.3, -0.4, 0.2), Vector3::new(-0.1, 0.05, 3.0))
    }

    fn k() -> Matrix3<f64> {
        Matrix3::new(900.0, 1.5, 330.0, 0.0, 880.0, 250.0, 0.0, 0.0, 1.0)
    }

    fn cube() -> Vec<Point3<f64>> {
        let mut v = vec![];
        for i in 0..3 {
            for j in 0..3 {
                for l in 0..3 {
                    v.push(Point3::new(i as f64 * 0.4 - 0.4, j as f64 * 0.3 - 0.3, l as f64 * 0.2));
                }
            }
        }
        v
    }

    fn project(k: &Matrix3<f64>, pose: &Pose, x: &Point3<f64>) -> Point2<f64> {
        let p = k * pose.transform(x).coords;
        Point2::new(p.x / p.z, p.y / p.z)
    }

    /// DLT on exact data recovers K, R, t (a property of the method: P is determined up to
    /// scale by 6 or more points in general position, Hartley and Zisserman section 7.1).
    #[test]
    fn dlt_and_decomposition_recover_exact_camera() {
        let xs = cube();
        let pts: Vec<_> = xs.iter().map(|x| (*x, project(&k(), &pose(), x))).collect();
        let p = dlt(0, &pts).unwrap();
        let (intr, got) = decompose_projection(&p, &xs).unwrap();
        let km = intr.matrix();
        assert!((km - k()).norm() < 1e-8 * k().norm(), "{km}");
        assert!(got.angle_to(&pose()) < 1e-10);
        assert!((got.translation - pose().translation).norm() < 1e-9);
    }

    #[test]
    fn rq_gives_upper_triangular_positive_diagonal_and_rotation() {
        let m = k() * pose().matrix();
        let (kk, r) = rq3(&m);
        assert!((kk * r - m).norm() < 1e-9);
        assert!(kk[(1, 0)].abs() < 1e-12 && kk[(2, 0)].abs() < 1e-12 && kk[(2, 1)].abs() < 1e-12);
        assert!((r * r.transpose() - Matrix3::identity()).norm() < 1e-12);
        assert!((r.determinant() - 1.0).abs() < 1e-12);
    }

    #[test]
    fn dlt_refuses_coplanar_collinear_and_too_few_points() {
        let plane: Vec<_> = cube()
            .iter()
            .map(|x| Point3::new(x.x, x.y, 0.0))
            .map(|x| (x, project(&k(), &pose(), &x)))
            .collect();
        assert!(matches!(dlt(3, &plane), Err(SolverError::CoplanarPoints { view: 3, .. })));
        let line: Vec<_> = (0..10)
            .map(|i| Point3::new(i as f64 * 0.1, i as f64 * 0.05, i as f64 * 0.02))
            .map(|x| (x, project(&k(), &pose(), &x)))
            .collect();
        assert!(matches!(dlt(0, &line), Err(SolverError::PointsOnLine { .. })));
        assert!(matches!(
            dlt(0, &plane[..5]),
            Err(SolverError::TooFewPoints { got: 5, need: 6, .. })
        ));
    }

    fn grid() -> Vec<Point2<f64>> {
        (0..63).map(|i| Point2::new((i % 9) as f64 * 0.03, (i / 9) as f64 * 0.03)).collect()
    }

    fn views() -> Vec<Pose> {
        [(0.4, 0.1, 0.0), (-0.2, 0.45, 0.3), (0.1, -0.35, -0.5), (0.5, 0.4, 1.2)]
            .iter()
            .map(|&(a, b, c)| {
                Pose::from_axis_angle(Vector3::new(a, b, c), Vector3::new(-0.12, -0.1, 0.6))
            })
            .collect()
    }

    /// Zhang's closed form is exact on noise-free homographies (Zhang 2000, section 3.1).
    #[test]
    fn zhang_closed_form_is_exact_on_exact_data() {
        let hs: Vec<_> = views()
            .iter()
            .enumerate()
            .map(|(v, p)| {
                let pts: Vec<_> = grid()
                    .iter()
                    .map(|x| (*x, project(&k(), p, &Point3::new(x.x, x.y, 0.0))))
                    .collect();
                homography(v, &pts).unwrap()
            })
            .collect();
        let norm = normalising_transform_2d(&[Point2::new(0.0, 0.0), Point2::new(639.0, 479.0)]);
        let intr = zhang_intrinsics(&hs, &norm, false).unwrap();
        assert!((intr.matrix() - k()).norm() < 1e-6, "{:?}", intr);
        let p0 = pose_from_homography(&k(), &hs[0]).unwrap();
        assert!(p0.angle_to(&views()[0]) < 1e-9);
        assert!((p0.translation - views()[0].translation).norm() < 1e-9);
        // Two views with zero skew: the skew-free K is recovered too.
        let k0 = Matrix3::new(900.0, 0.0, 330.0, 0.0, 880.0, 250.0, 0.0, 0.0, 1.0);
        let hs2: Vec<_> = views()[..2]
            .iter()
            .map(|p| {
                let pts: Vec<_> = grid()
                    .iter()
                    .map(|x| (*x, project(&k0, p, &Point3::new(x.x, x.y, 0.0))))
                    .collect();
                homography(0, &pts).unwrap()
            })
            .collect();
        let intr2 = zhang_intrinsics(&hs2, &norm, true).unwrap();
        assert!((intr2.matrix() - k0).norm() < 1e-6, "{:?}", intr2);
        // One view, square pixels, known principal point: the focal length alone.
        let ks = Matrix3::new(900.0, 0.0, 330.0, 0.0, 900.0, 250.0, 0.0, 0.0, 1.0);
        let pts: Vec<_> = grid()
            .iter()
            .map(|x| (*x, project(&ks, &views()[1], &Point3::new(x.x, x.y, 0.0))))
            .collect();
        let f = focal_from_homographies(&[homography(0, &pts).unwrap()], 330.0, 250.0).unwrap();
        assert!((f - 900.0).abs() < 1e-6, "{f}");
    }

    /// Views that differ only by a rotation about the optical axis and a translation are a
    /// degenerate configuration of Zhang's method (Zhang 2000, section 3.3: a pure
    /// translation of the plane gives no new constraint).
    #[test]
    fn parallel_views_are_refused() {
        let hs: Vec<_> = [0.0, 0.7, 1.9]
            .iter()
            .map(|&c| {
                let p = Pose::from_axis_angle(
                    Vector3::new(0.0, 0.0, c),
                    Vector3::new(-0.1, -0.1, 0.5 + c * 0.1),
                );
                let pts: Vec<_> = grid()
                    .iter()
                    .map(|x| (*x, project(&k(), &p, &Point3::new(x.x, x.y, 0.0))))
                    .collect();
                homography(0, &pts).unwrap()
            })
            .collect();
        let norm = normalising_transform_2d(&[Point2::new(0.0, 0.0), Point2::new(639.0, 479.0)]);
        let e = zhang_intrinsics(&hs, &norm, false).unwrap_err();
        assert!(
            matches!(e, SolverError::ParallelViews { .. } | SolverError::NoPhysicalSolution(_)),
            "{e}"
        );
    }
}
