//! The problem and its minimiser: Levenberg-Marquardt over the shared parameters (free camera
//! parameters, optional face corrections) and one pose per view, with the pose blocks
//! eliminated by the Schur complement.
//!
//! Per view `v`, with `Jg` the Jacobian of its residuals with respect to the shared parameters
//! and `Jp` with respect to its pose, the normal equations are accumulated in parallel as
//! `U_v = Jg^T W Jg`, `W_v = Jg^T W Jp`, `V_v = Jp^T W Jp`, `g_v = Jg^T W r`, `e_v = Jp^T W r`
//! and then reduced in view order, so the result does not depend on the thread count. The
//! reduced system is `S dg = g - sum W_v V_v^-1 e_v` with `S = U - sum W_v V_v^-1 W_v^T`
//! (D. C. Brown, "The bundle adjustment: progress and prospects", 1976; B. Triggs et al.,
//! "Bundle adjustment: a modern synthesis", 1999, section 6.1); then
//! `dp_v = V_v^-1 (e_v - W_v^T dg)`. No Jacobian of the whole problem is ever formed.

use facetcal_model::{Camera, Pose, cross_matrix};
use nalgebra::{DMatrix, DVector, Matrix6, Point2, Point3, Vector6};
use rayon::prelude::*;

use crate::options::{Loss, Options};
use crate::summary::{IterationRecord, Termination};

/// Which parameters are shared by all views and how they map onto the camera.
#[derive(Clone, Debug)]
pub(crate) struct Layout {
    /// Free camera columns: each a list of `(camera parameter index, coefficient)`; fy tied to
    /// fx is the column `[(0, 1), (1, fy / fx)]`.
    pub cam_columns: Vec<Vec<(usize, f64)>>,
    /// Names of the free camera columns.
    pub cam_names: Vec<String>,
    /// Number of faces with a free correction (slots `0..faces`).
    pub faces: usize,
}

impl Layout {
    pub fn n_global(&self) -> usize {
        self.cam_columns.len() + 6 * self.faces
    }
}

/// The observations of one view as the minimiser sees them.
#[derive(Clone, Debug)]
pub(crate) struct ViewData {
    pub targets: Vec<Point3<f64>>,
    pub images: Vec<Point2<f64>>,
    /// Face correction slot of each point, `None` for the reference face.
    pub face_slot: Vec<Option<usize>>,
    pub inlier: Vec<bool>,
    pub active: bool,
}

impl ViewData {
    pub fn inliers(&self) -> usize {
        self.inlier.iter().filter(|&&b| b).count()
    }
}

/// The estimated quantities.
#[derive(Clone, Debug)]
pub(crate) struct State {
    pub camera: Camera,
    pub poses: Vec<Pose>,
    pub faces: Vec<Pose>,
}

impl State {
    /// The target-frame point after the face correction.
    pub fn corrected(&self, view: &ViewData, k: usize) -> Point3<f64> {
        match view.face_slot[k] {
            Some(f) => self.faces[f].transform(&view.targets[k]),
            None => view.targets[k],
        }
    }

    /// Residual `observed - projected` of one point, `None` outside the model's domain.
    pub fn residual(&self, v: usize, view: &ViewData, k: usize) -> Option<nalgebra::Vector2<f64>> {
        let x = self.poses[v].transform(&self.corrected(view, k));
        self.camera.project(&x).ok().map(|p| view.images[k] - p)
    }
}

/// One view's share of the normal equations.
pub(crate) struct ViewBlock {
    pub u: DMatrix<f64>,
    pub w: DMatrix<f64>,
    pub v: Matrix6<f64>,
    pub g: DVector<f64>,
    pub e: Vector6<f64>,
    /// `1/2 sum rho(|r|^2)`; infinite if a point left the model's domain.
    pub cost: f64,
    /// Every point had loss weight `rho' = 1` (inside a robust loss's quadratic part), so
    /// the block equals the plain least-squares one.
    pub unit_weights: bool,
}

/// Cost of one view without Jacobians.
fn view_cost(state: &State, v: usize, view: &ViewData, loss: &Loss) -> f64 {
    let mut cost = 0.0;
    for k in 0..view.targets.len() {
        if !view.inlier[k] {
            continue;
        }
        match state.residual(v, view, k) {
            Some(r) => cost += 0.5 * loss.evaluate(r.norm_squared()).0,
            None => return f64::INFINITY,
        }
    }
    cost
}

/// Adds `p p^T + q q^T` to the upper triangle of the `m x m` row-major `h` and
/// `p r0 + q r1` to `grad`, `m = p.len()`. Contiguous slices, so the inner loop vectorises.
#[inline]
fn add_rank2(h: &mut [f64], grad: &mut [f64], p: &[f64], q: &[f64], r0: f64, r1: f64) {
    let m = p.len();
    for a in 0..m {
        let (pa, qa) = (p[a], q[a]);
        grad[a] += pa * r0 + qa * r1;
        let row = &mut h[a * m + a..(a + 1) * m];
        for ((hv, &pb), &qb) in row.iter_mut().zip(&p[a..]).zip(&q[a..]) {
            *hv += pa * pb + qa * qb;
        }
    }
}

fn view_block(state: &State, layout: &Layout, v: usize, view: &ViewData, loss: &Loss) -> ViewBlock {
    let ng = layout.n_global();
    let nc = layout.cam_columns.len();
    // Unknowns of this view: the shared ones, then its pose. A point touches the camera
    // columns, the pose and at most one face, so its two weighted Jacobian rows sqrt(w) J are
    // kept compact and their products added to [Jg Jp]^T W [Jg Jp] and [Jg Jp]^T W r point by
    // point; the view's Jacobian is never formed. Points of the reference face touch
    // `[camera, pose]` only and go to the dense `m x m` `hl`; points with a face correction
    // also touch that face's 6 columns and go to the full `n x n` `h` through `idx`.
    // Both are upper triangles.
    let n = ng + 6;
    let m = nc + 6;
    let mut hl = vec![0.0; m * m];
    let mut gl = vec![0.0; m];
    let mut h = vec![0.0; if layout.faces > 0 { n * n } else { 0 }];
    let mut grad = vec![0.0; n];
    let mut j0 = vec![0.0; m + 6];
    let mut j1 = vec![0.0; m + 6];
    let mut idx: Vec<usize> = (0..m + 6).collect();
    let mut cost = 0.0;
    let mut unit_weights = true;
    let pose = &state.poses[v];
    for k in 0..view.targets.len() {
        if !view.inlier[k] {
            continue;
        }
        let x = state.corrected(view, k);
        let Ok(pr) = state.camera.project_posed(pose, &x) else {
            cost = f64::INFINITY;
            break;
        };
        let r = view.images[k] - pr.pixel;
        let (rho, weight) = loss.evaluate(r.norm_squared());
        cost += 0.5 * rho;
        unit_weights &= weight == 1.0;
        let sw = weight.sqrt();
        for (c, col) in layout.cam_columns.iter().enumerate() {
            let (mut a, mut b) = (0.0, 0.0);
            for &(i, coef) in col {
                a += coef * pr.d_params[(0, i)];
                b += coef * pr.d_params[(1, i)];
            }
            j0[c] = sw * a;
            j1[c] = sw * b;
        }
        let (r0, r1) = (sw * r.x, sw * r.y);
        match view.face_slot[k] {
            None => {
                for j in 0..6 {
                    j0[nc + j] = sw * pr.d_pose[(0, j)];
                    j1[nc + j] = sw * pr.d_pose[(1, j)];
                }
                add_rank2(&mut hl, &mut gl, &j0[..m], &j1[..m], r0, r1);
            }
            Some(f) => {
                // X' = exp([w]x) R_f X + t_f + dt: dX'/dw = -[R_f X]x, dX'/ddt = I.
                let rx = state.faces[f].rotation * view.targets[k].coords;
                let d_w = pr.d_target_point * (-cross_matrix(&rx));
                for j in 0..3 {
                    j0[nc + j] = sw * d_w[(0, j)];
                    j1[nc + j] = sw * d_w[(1, j)];
                    j0[nc + 3 + j] = sw * pr.d_target_point[(0, j)];
                    j1[nc + 3 + j] = sw * pr.d_target_point[(1, j)];
                }
                for j in 0..6 {
                    j0[m + j] = sw * pr.d_pose[(0, j)];
                    j1[m + j] = sw * pr.d_pose[(1, j)];
                    idx[nc + j] = nc + 6 * f + j;
                    idx[m + j] = ng + j;
                }
                // Global indices ascend along the compact row, so (a <= b) stays upper.
                for a in 0..m + 6 {
                    let (pa, qa) = (j0[a], j1[a]);
                    grad[idx[a]] += pa * r0 + qa * r1;
                    for b in a..m + 6 {
                        h[idx[a] * n + idx[b]] += pa * j0[b] + qa * j1[b];
                    }
                }
            }
        }
    }
    // The dense part in global indices: camera `i < nc` stays `i`, pose `nc + j` is `ng + j`.
    let global = |i: usize| if i < nc { i } else { ng + i - nc };
    let full = |i: usize, j: usize| {
        let (i, j) = (i.min(j), i.max(j));
        let local = |g: usize| {
            if g < nc {
                Some(g)
            } else if g >= ng {
                Some(nc + g - ng)
            } else {
                None
            }
        };
        let dense = match (local(i), local(j)) {
            (Some(a), Some(b)) => hl[a * m + b],
            _ => 0.0,
        };
        dense + if h.is_empty() { 0.0 } else { h[i * n + j] }
    };
    for a in 0..m {
        grad[global(a)] += gl[a];
    }
    ViewBlock {
        u: DMatrix::from_fn(ng, ng, full),
        w: DMatrix::from_fn(ng, 6, |i, j| full(i, ng + j)),
        v: Matrix6::from_fn(|i, j| full(ng + i, ng + j)),
        g: DVector::from_fn(ng, |i, _| grad[i]),
        e: Vector6::from_fn(|i, _| grad[ng + i]),
        cost,
        unit_weights,
    }
}

/// The normal-equation blocks of every active view (`None` for inactive ones), computed in
/// parallel, returned in view order.
pub(crate) fn blocks(
    state: &State,
    layout: &Layout,
    views: &[ViewData],
    loss: &Loss,
) -> Vec<Option<ViewBlock>> {
    views
        .par_iter()
        .enumerate()
        .map(|(v, view)| view.active.then(|| view_block(state, layout, v, view, loss)))
        .collect()
}

/// Total cost, summed in view order.
pub(crate) fn total_cost(state: &State, views: &[ViewData], loss: &Loss) -> f64 {
    let per: Vec<f64> = views
        .par_iter()
        .enumerate()
        .map(|(v, view)| if view.active { view_cost(state, v, view, loss) } else { 0.0 })
        .collect();
    per.iter().sum()
}

/// Inverse of a symmetric positive definite matrix through Jacobi scaling and Cholesky.
pub(crate) fn spd_inverse(a: &DMatrix<f64>) -> Option<DMatrix<f64>> {
    let n = a.nrows();
    if n == 0 {
        return Some(DMatrix::zeros(0, 0));
    }
    let d: Vec<f64> = (0..n).map(|i| a[(i, i)]).collect();
    if d.iter().any(|&x| !(x > 0.0 && x.is_finite())) {
        return None;
    }
    let s = DVector::from_iterator(n, d.iter().map(|x| 1.0 / x.sqrt()));
    let scaled = DMatrix::from_fn(n, n, |i, j| a[(i, j)] * s[i] * s[j]);
    let inv = scaled.cholesky()?.inverse();
    Some(DMatrix::from_fn(n, n, |i, j| inv[(i, j)] * s[i] * s[j]))
}

fn inverse6(a: &Matrix6<f64>) -> Option<Matrix6<f64>> {
    let d = a.diagonal();
    if d.iter().any(|&x| !(x > 0.0 && x.is_finite())) {
        return None;
    }
    let s = d.map(|x| 1.0 / x.sqrt());
    let scaled = Matrix6::from_fn(|i, j| a[(i, j)] * s[i] * s[j]);
    let inv = scaled.cholesky()?.inverse();
    Some(Matrix6::from_fn(|i, j| inv[(i, j)] * s[i] * s[j]))
}

/// The reduced camera system for a damping `lambda` (0 for the covariance): `S`, its right
/// side and the per-view `V_v^-1` (damped).
pub(crate) struct Reduced {
    pub s: DMatrix<f64>,
    pub rhs: DVector<f64>,
    pub v_inv: Vec<Option<Matrix6<f64>>>,
}

/// One view's `(V^-1, W V^-1 W^T, W V^-1 e)`.
type ViewReduction = (Matrix6<f64>, DMatrix<f64>, DVector<f64>);

/// A shared increment and one pose increment per view (`None` for inactive views).
type Step = (DVector<f64>, Vec<Option<Vector6<f64>>>);

pub(crate) fn reduce(blocks: &[Option<ViewBlock>], ng: usize, lambda: f64) -> Option<Reduced> {
    let mut u = DMatrix::zeros(ng, ng);
    let mut g = DVector::zeros(ng);
    for b in blocks.iter().flatten() {
        u += &b.u;
        g += &b.g;
    }
    for i in 0..ng {
        u[(i, i)] += lambda * u[(i, i)];
    }
    // Per view: V_v^-1, Y = W V^-1, the products Y W^T and Y e; computed in parallel,
    // subtracted in view order.
    let parts: Vec<Option<Option<ViewReduction>>> = blocks
        .par_iter()
        .map(|b| {
            b.as_ref().map(|b| {
                let mut vd = b.v;
                for i in 0..6 {
                    vd[(i, i)] += lambda * vd[(i, i)];
                }
                let vinv = inverse6(&vd)?;
                let y = &b.w * vinv;
                Some((vinv, &y * b.w.transpose(), &y * b.e))
            })
        })
        .collect();
    let mut v_inv = Vec::with_capacity(parts.len());
    for p in parts {
        match p {
            None => v_inv.push(None),
            Some(None) => return None,
            Some(Some((vinv, yw, ye))) => {
                u -= yw;
                g -= ye;
                v_inv.push(Some(vinv));
            }
        }
    }
    Some(Reduced { s: u, rhs: g, v_inv })
}

/// A damped step: shared increment and one pose increment per view.
fn step(blocks: &[Option<ViewBlock>], ng: usize, lambda: f64) -> Option<Step> {
    let red = reduce(blocks, ng, lambda)?;
    let dg = if ng == 0 {
        DVector::zeros(0)
    } else {
        let d: Vec<f64> = (0..ng).map(|i| red.s[(i, i)]).collect();
        if d.iter().any(|&x| !(x > 0.0 && x.is_finite())) {
            return None;
        }
        let sc = DVector::from_iterator(ng, d.iter().map(|x| 1.0 / x.sqrt()));
        let scaled = DMatrix::from_fn(ng, ng, |i, j| red.s[(i, j)] * sc[i] * sc[j]);
        let rhs = red.rhs.component_mul(&sc);
        scaled.cholesky()?.solve(&rhs).component_mul(&sc)
    };
    let dp = blocks
        .iter()
        .zip(&red.v_inv)
        .map(|(b, vi)| match (b, vi) {
            (Some(b), Some(vi)) => Some(vi * (b.e - b.w.transpose() * &dg)),
            _ => None,
        })
        .collect();
    Some((dg, dp))
}

fn apply(state: &State, layout: &Layout, dg: &DVector<f64>, dp: &[Option<Vector6<f64>>]) -> State {
    let mut p = state.camera.params();
    for (c, col) in layout.cam_columns.iter().enumerate() {
        for &(idx, coef) in col {
            p[idx] += coef * dg[c];
        }
    }
    let nc = layout.cam_columns.len();
    let faces = state
        .faces
        .iter()
        .enumerate()
        .map(|(f, pose)| {
            pose.perturbed(&Vector6::from_iterator(dg.rows(nc + 6 * f, 6).iter().copied()))
        })
        .collect();
    let poses = state
        .poses
        .iter()
        .zip(dp)
        .map(|(pose, d)| match d {
            Some(d) => pose.perturbed(d),
            None => *pose,
        })
        .collect();
    State { camera: state.camera.with_params(&p), poses, faces }
}

fn parameter_norm(state: &State, layout: &Layout, views: &[ViewData]) -> f64 {
    let p = state.camera.params();
    let mut s: f64 = layout.cam_columns.iter().map(|c| p[c[0].0].powi(2)).sum();
    for f in &state.faces {
        s += f.axis_angle().norm_squared() + f.translation.norm_squared();
    }
    for (pose, v) in state.poses.iter().zip(views) {
        if v.active {
            s += pose.axis_angle().norm_squared() + pose.translation.norm_squared();
        }
    }
    s.sqrt()
}

/// What one minimisation did.
pub(crate) struct Run {
    pub iterations: usize,
    pub termination: Termination,
    pub records: Vec<IterationRecord>,
    /// The blocks at the final state (the uncertainty reuses them when they are plain least
    /// squares).
    pub blocks: Vec<Option<ViewBlock>>,
}

/// Levenberg-Marquardt from `state`, which it updates.
pub(crate) fn minimise(state: &mut State, layout: &Layout, views: &[ViewData], o: &Options) -> Run {
    let ng = layout.n_global();
    let mut bl = blocks(state, layout, views, &o.loss);
    let mut cost: f64 = bl.iter().flatten().map(|b| b.cost).sum();
    let mut records = Vec::new();
    let mut lambda = o.initial_damping;
    let mut nu = 2.0;
    let mut iterations = 0;
    let termination = loop {
        if !cost.is_finite() {
            break Termination::InvalidStart;
        }
        // Gradient test: the largest cosine between the residual vector and a column.
        let mut worst: f64 = 0.0;
        let mut ug = DVector::zeros(ng);
        let mut gg = DVector::zeros(ng);
        for b in bl.iter().flatten() {
            ug += b.u.diagonal();
            gg += &b.g;
            for i in 0..6 {
                if b.v[(i, i)] > 0.0 {
                    worst = worst.max(b.e[i].abs() / b.v[(i, i)].sqrt());
                }
            }
        }
        for i in 0..ng {
            if ug[i] > 0.0 {
                worst = worst.max(gg[i].abs() / ug[i].sqrt());
            }
        }
        if cost == 0.0 || worst <= o.gradient_tolerance * (2.0 * cost).sqrt() {
            break Termination::GradientTolerance;
        }
        if iterations >= o.max_iterations {
            break Termination::MaxIterations;
        }
        if lambda > o.max_damping {
            break Termination::NoProgress;
        }
        iterations += 1;
        let Some((dg, dp)) = step(&bl, ng, lambda) else {
            lambda *= nu;
            nu *= 2.0;
            records.push(IterationRecord { cost, lambda, step_norm: 0.0, accepted: false });
            continue;
        };
        let step_norm =
            (dg.norm_squared() + dp.iter().flatten().map(|d| d.norm_squared()).sum::<f64>()).sqrt();
        let xnorm = parameter_norm(state, layout, views);
        if step_norm <= o.parameter_tolerance * (xnorm + o.parameter_tolerance) {
            records.push(IterationRecord { cost, lambda, step_norm, accepted: false });
            break Termination::ParameterTolerance;
        }
        // Predicted decrease of the quadratic model: 1/2 delta^T (lambda diag(A) delta + g).
        let mut predicted = 0.0;
        for (b, d) in bl.iter().zip(&dp) {
            if let (Some(b), Some(d)) = (b, d) {
                for i in 0..6 {
                    predicted += 0.5 * d[i] * (lambda * b.v[(i, i)] * d[i] + b.e[i]);
                }
            }
        }
        for i in 0..ng {
            predicted += 0.5 * dg[i] * (lambda * ug[i] * dg[i] + gg[i]);
        }
        // The candidate's blocks are computed at once (most steps are accepted, and the
        // cost comes with them), so each iteration projects every point once.
        let candidate = apply(state, layout, &dg, &dp);
        let cand_blocks = blocks(&candidate, layout, views, &o.loss);
        let new_cost: f64 = cand_blocks.iter().flatten().map(|b| b.cost).sum();
        let rho = (cost - new_cost) / predicted;
        if new_cost.is_finite() && new_cost < cost && predicted > 0.0 {
            records.push(IterationRecord { cost: new_cost, lambda, step_norm, accepted: true });
            let decrease = cost - new_cost;
            *state = candidate;
            lambda *= (1.0 - (2.0 * rho - 1.0).powi(3)).max(1.0 / 3.0);
            nu = 2.0;
            let old = cost;
            bl = cand_blocks;
            cost = new_cost;
            if decrease <= o.function_tolerance * old {
                break Termination::FunctionTolerance;
            }
        } else {
            records.push(IterationRecord { cost, lambda, step_norm, accepted: false });
            // At the noise floor a step's change of cost is rounding: the function test holds
            // for it too, and the state stays at the better point. Without this, damping is
            // raised until the step test fires, each try costing a pass over every point.
            if new_cost.is_finite() && (cost - new_cost).abs() <= o.function_tolerance * cost {
                break Termination::FunctionTolerance;
            }
            lambda *= nu;
            nu *= 2.0;
        }
    };
    Run { iterations, termination, records, blocks: bl }
}

#[cfg(test)]
mod tests {
    use super::*;
    use facetcal_model::{Distortion, Intrinsics};
    use nalgebra::Vector3;

    /// The assembled gradient `g = J^T r` equals minus the central difference of the cost
    /// `1/2 |r|^2` along every shared parameter (camera columns including a tied fy, face
    /// corrections) and every pose parameter: a finite-difference check of the chain rule
    /// from the model crate's analytic Jacobians to the normal equations.
    #[test]
    fn gradient_matches_central_differences() {
        let camera = Camera {
            width: 800,
            height: 600,
            intrinsics: Intrinsics { fx: 700.0, fy: 690.0, cx: 400.0, cy: 300.0, skew: 0.3 },
            distortion: Distortion::BrownConrady {
                k1: -0.2,
                k2: 0.05,
                p1: 0.001,
                p2: -0.002,
                k3: 0.01,
            },
        };
        let layout = Layout {
            cam_columns: vec![
                vec![(0, 1.0), (1, 690.0 / 700.0)],
                vec![(2, 1.0)],
                vec![(3, 1.0)],
                vec![(4, 1.0)],
                vec![(5, 1.0)],
                vec![(6, 1.0)],
                vec![(7, 1.0)],
                vec![(8, 1.0)],
                vec![(9, 1.0)],
            ],
            cam_names: vec![],
            faces: 1,
        };
        let targets: Vec<Point3<f64>> = (0..12)
            .map(|i| {
                Point3::new(
                    (i % 4) as f64 * 0.1 - 0.15,
                    (i / 4) as f64 * 0.1 - 0.1,
                    (i % 3) as f64 * 0.05,
                )
            })
            .collect();
        let view = ViewData {
            images: targets
                .iter()
                .map(|x| Point2::new(400.0 + 300.0 * x.x + 3.0, 300.0 + 280.0 * x.y - 2.0))
                .collect(),
            face_slot: (0..12).map(|i| (i % 2 == 1).then_some(0)).collect(),
            inlier: vec![true; 12],
            active: true,
            targets,
        };
        let views = vec![view];
        let state = State {
            camera,
            poses: vec![Pose::from_axis_angle(
                Vector3::new(0.1, -0.2, 0.05),
                Vector3::new(0.02, -0.01, 1.0),
            )],
            faces: vec![Pose::from_axis_angle(
                Vector3::new(0.01, 0.02, -0.03),
                Vector3::new(0.01, 0.0, -0.02),
            )],
        };
        let b = blocks(&state, &layout, &views, &Loss::Squared).pop().flatten().unwrap();
        let ng = layout.n_global();
        let h = 1e-6;
        let cost_at = |dg: &DVector<f64>, dp: &Vector6<f64>| {
            total_cost(&apply(&state, &layout, dg, &[Some(*dp)]), &views, &Loss::Squared)
        };
        for i in 0..ng {
            let mut d = DVector::zeros(ng);
            d[i] = h;
            let num =
                (cost_at(&d, &Vector6::zeros()) - cost_at(&(-d), &Vector6::zeros())) / (2.0 * h);
            assert!(
                (num + b.g[i]).abs() <= 1e-5 * b.g[i].abs().max(1.0),
                "shared {i}: {num} vs {}",
                -b.g[i]
            );
        }
        for i in 0..6 {
            let mut d = Vector6::zeros();
            d[i] = h;
            let num = (cost_at(&DVector::zeros(ng), &d) - cost_at(&DVector::zeros(ng), &(-d)))
                / (2.0 * h);
            assert!(
                (num + b.e[i]).abs() <= 1e-5 * b.e[i].abs().max(1.0),
                "pose {i}: {num} vs {}",
                -b.e[i]
            );
        }
    }
}
