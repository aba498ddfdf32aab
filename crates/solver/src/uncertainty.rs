//! The covariance of the estimates at the solution.
//!
//! With `J` the Jacobian of all inlier residuals and `sigma^2 = |r|^2 / (m - n)` the residual
//! variance (m residuals, n parameters), the covariance of the Gauss-Newton approximation is
//! `sigma^2 (J^T J)^-1` (common practice; e.g. Hartley and Zisserman, "Multiple View
//! Geometry", 2nd ed., section 5.2). Its block of the shared parameters is `sigma^2 S^-1`,
//! `S` the Schur complement of the pose blocks, and the covariance of view `v`'s pose is
//! `sigma^2 (V_v^-1 + V_v^-1 W_v^T S^-1 W_v V_v^-1)` (Triggs et al. 1999, section 6.1).

use nalgebra::{DMatrix, Matrix6};

use crate::options::Loss;
use crate::refine::{Layout, State, ViewBlock, ViewData, blocks, reduce, spd_inverse};

/// Covariances at a solution.
pub(crate) struct Covariance {
    /// Of the shared parameters (free camera columns, then 6 per face).
    pub global: DMatrix<f64>,
    /// Of each active view's pose increment.
    pub poses: Vec<Option<Matrix6<f64>>>,
    /// The residual variance, pixels squared.
    pub sigma2: f64,
    /// Whether `S` was singular (a pseudo-inverse was used) and the eigenvector of its
    /// smallest eigenvalue in Jacobi-scaled units.
    pub null_direction: Option<Vec<f64>>,
}

/// The covariance of the least-squares estimate on the inliers. `at_state` are the blocks
/// the minimiser ended with: when every loss weight was 1 they are the plain least-squares
/// blocks at `state` and are used as they are; otherwise those are evaluated.
pub(crate) fn covariance(
    state: &State,
    layout: &Layout,
    views: &[ViewData],
    at_state: Vec<Option<ViewBlock>>,
    residuals: usize,
    parameters: usize,
) -> Option<Covariance> {
    let ng = layout.n_global();
    let bl = if at_state.iter().flatten().all(|b| b.unit_weights) {
        at_state
    } else {
        blocks(state, layout, views, &Loss::Squared)
    };
    let sum_sq: f64 = bl.iter().flatten().map(|b| 2.0 * b.cost).sum();
    if residuals <= parameters || !sum_sq.is_finite() {
        return None;
    }
    let sigma2 = sum_sq / (residuals - parameters) as f64;
    let red = reduce(&bl, ng, 0.0)?;
    let mut null_direction = None;
    let s_inv = match spd_inverse(&red.s) {
        Some(inv) if well_conditioned(&red.s) => inv,
        _ => {
            let (inv, dir) = pseudo_inverse(&red.s);
            null_direction = Some(dir);
            inv
        }
    };
    let poses = bl
        .iter()
        .zip(&red.v_inv)
        .map(|(b, vi)| match (b, vi) {
            (Some(b), Some(vi)) => {
                let y = &b.w * vi; // ng x 6
                let extra = y.transpose() * &s_inv * &y;
                Some((vi + Matrix6::from_iterator(extra.iter().copied())) * sigma2)
            }
            _ => None,
        })
        .collect();
    Some(Covariance { global: s_inv * sigma2, poses, sigma2, null_direction })
}

/// The reciprocal condition number of the Jacobi-scaled `S` is above 1e-12.
fn well_conditioned(s: &DMatrix<f64>) -> bool {
    let n = s.nrows();
    if n == 0 {
        return true;
    }
    let sc = scaled(s);
    let e = sc.symmetric_eigenvalues();
    let max = e.max();
    let min = e.min();
    max > 0.0 && min / max > 1e-12
}

fn scaled(s: &DMatrix<f64>) -> DMatrix<f64> {
    let n = s.nrows();
    let d: Vec<f64> =
        (0..n).map(|i| if s[(i, i)] > 0.0 { 1.0 / s[(i, i)].sqrt() } else { 1.0 }).collect();
    DMatrix::from_fn(n, n, |i, j| s[(i, j)] * d[i] * d[j])
}

/// Pseudo-inverse of a symmetric matrix through its Jacobi-scaled eigen-decomposition,
/// dropping eigenvalues below 1e-12 of the largest; with the weakest direction.
fn pseudo_inverse(s: &DMatrix<f64>) -> (DMatrix<f64>, Vec<f64>) {
    let n = s.nrows();
    let d: Vec<f64> =
        (0..n).map(|i| if s[(i, i)] > 0.0 { 1.0 / s[(i, i)].sqrt() } else { 1.0 }).collect();
    let e = scaled(s).symmetric_eigen();
    let max = e.eigenvalues.max();
    let mut inv = DMatrix::zeros(n, n);
    let mut weakest = 0;
    for k in 0..n {
        if e.eigenvalues[k] < e.eigenvalues[weakest] {
            weakest = k;
        }
        if e.eigenvalues[k] > 1e-12 * max {
            let v = e.eigenvectors.column(k);
            inv += v * v.transpose() / e.eigenvalues[k];
        }
    }
    let inv = DMatrix::from_fn(n, n, |i, j| inv[(i, j)] * d[i] * d[j]);
    (inv, e.eigenvectors.column(weakest).iter().copied().collect())
}
