//! The local quadratic fit over a 5 x 5 window of lattice cells: the leave-one-out prediction
//! of the window's centre from whichever of its 24 other cells are present.
//!
//! Each image coordinate is fitted by `b0 + b1 i + b2 j + b3 i^2 + b4 ij + b5 j^2` over the
//! integer offsets `(i, j)` of the present cells. The design matrix depends on which cells are
//! present (the window's mask) and nothing else, so the fit is a linear combination of the
//! cells' positions with weights fixed by the mask: computed once per mask from the normal
//! matrix (the whole window's, a constant, minus the missing cells' terms) and kept in a
//! per-thread memo, a fit costs one weighted sum. A quadratic follows lens distortion, which
//! bends the lattice, better than a homography, and over two steps, one-sided windows
//! included, it differs from a view's perspective by a small fraction of the growth gate and
//! of the residual test's tolerance (tested below).

use std::cell::RefCell;
use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hasher};

use nalgebra::{Point2, Vector2};

/// Bit `k` of a window mask stands for the offset `OFFSETS[k]`.
pub(crate) type Mask = u32;

/// Every cell of the window present.
pub(crate) const FULL: Mask = (1 << 24) - 1;

/// The 24 offsets of a 5 x 5 window without its centre, in increasing `(di, dj)` order.
pub(crate) const OFFSETS: [(i32, i32); 24] = offsets();

const fn offsets() -> [(i32, i32); 24] {
    let mut out = [(0, 0); 24];
    let (mut n, mut di) = (0, -2);
    while di <= 2 {
        let mut dj = -2;
        while dj <= 2 {
            if di != 0 || dj != 0 {
                out[n] = (di, dj);
                n += 1;
            }
            dj += 1;
        }
        di += 1;
    }
    out
}

/// The slot in [`OFFSETS`] of the offset `(di, dj)`, both within 2 and not both zero.
pub(crate) fn slot(di: i32, dj: i32) -> usize {
    let k = ((di + 2) * 5 + dj + 2) as usize;
    if k > 12 { k - 1 } else { k }
}

/// The monomials `1, i, j, i^2, ij, j^2` at an offset.
const fn monomials(o: (i32, i32)) -> [f64; 6] {
    let (i, j) = (o.0 as f64, o.1 as f64);
    [1.0, i, j, i * i, i * j, j * j]
}

/// Entries of a packed lower triangle of a symmetric 6 x 6 matrix, row by row.
const PACKED: usize = 21;

/// The index of entry `(r, c)`, `c <= r`, in a packed lower triangle.
const fn packed(r: usize, c: usize) -> usize {
    r * (r + 1) / 2 + c
}

/// Per slot, its monomials and their outer product `m m^T` (packed): one cell's terms of the
/// normal matrix.
const MONOMIALS: [[f64; 6]; 24] = {
    let mut out = [[0.0; 6]; 24];
    let mut k = 0;
    while k < 24 {
        out[k] = monomials(OFFSETS[k]);
        k += 1;
    }
    out
};

const OUTER: [[f64; PACKED]; 24] = {
    let mut out = [[0.0; PACKED]; 24];
    let mut k = 0;
    while k < 24 {
        let m = MONOMIALS[k];
        let mut r = 0;
        while r < 6 {
            let mut c = 0;
            while c <= r {
                out[k][packed(r, c)] = m[r] * m[c];
                c += 1;
            }
            r += 1;
        }
        k += 1;
    }
    out
};

/// The whole window's normal matrix (packed).
const FULL_NORMAL: [f64; PACKED] = {
    let mut out = [0.0; PACKED];
    let mut k = 0;
    while k < 24 {
        let mut e = 0;
        while e < PACKED {
            out[e] += OUTER[k][e];
            e += 1;
        }
        k += 1;
    }
    out
};

/// The largest variance of the predicted centre, in units of one cell's variance, for which a
/// fit is used. Windows near degenerate for a quadratic (two rows, a cross) exceed it and are
/// left to the caller's other fits. A whole window gives 0.18, a face's edge (three rows) 0.42,
/// its corner (a 3 x 3 block) 4.1, the worst a face's own nodes give.
const MAX_VARIANCE: f64 = 4.5;

/// The fit's value and first derivatives at the window's centre.
pub(crate) struct WindowFit {
    pub point: Point2<f64>,
    pub d_i: Vector2<f64>,
    pub d_j: Vector2<f64>,
}

/// Window masks whose weights are kept per thread; past this many the memo starts afresh, which
/// bounds it to about 2.4 MB.
const MEMO_CAP: usize = 4096;

/// Weights per window mask: rows of the fit's pseudo-inverse that give the centre's value and
/// its two derivatives (zero for absent cells), or `None` for a mask that does not determine
/// the centre well enough.
type Weights = Option<[[f64; 24]; 3]>;

thread_local! {
    // The weights depend on the mask alone, and masks recur across a face's windows. A memo of
    // a pure function: results are the same whatever it holds.
    static MEMO: RefCell<HashMap<Mask, Weights, BuildHasherDefault<MaskHasher>>> =
        RefCell::new(HashMap::default());
}

/// A multiplicative hash for the 24-bit masks (the default hasher costs more than the fit).
#[derive(Default)]
struct MaskHasher(u64);

impl Hasher for MaskHasher {
    fn finish(&self) -> u64 {
        self.0
    }

    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 = (self.0.rotate_left(8) ^ b as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15);
        }
    }

    fn write_u32(&mut self, v: u32) {
        self.0 = (v as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15);
    }
}

/// Fits the cells of `mask` (positions `pts`, indexed by slot; other slots are ignored), or
/// `None` when they do not determine the centre well enough.
pub(crate) fn fit(mask: Mask, pts: &[Point2<f64>; 24]) -> Option<WindowFit> {
    let mask = mask & FULL;
    MEMO.with_borrow_mut(|memo| {
        if memo.len() >= MEMO_CAP && !memo.contains_key(&mask) {
            memo.clear();
        }
        // Weights exist only for masks of six cells or more, so `origin` below has a cell.
        let w = memo.entry(mask).or_insert_with(|| weights(mask)).as_ref()?;
        // Coordinates about the first present cell: small values keep the sums free of
        // cancellation. Absent cells have zero weight.
        let origin = pts[mask.trailing_zeros() as usize];
        let sum = |r: usize| {
            pts.iter().zip(&w[r]).fold(Vector2::zeros(), |a, (p, &c)| a + (p - origin) * c)
        };
        let f = WindowFit { point: origin + sum(0), d_i: sum(1), d_j: sum(2) };
        let finite = f.point.iter().chain(f.d_i.iter()).chain(f.d_j.iter()).all(|v| v.is_finite());
        finite.then_some(f)
    })
}

/// The weights of a mask: with `N` the normal matrix of its cells, row `r` of `N^-1` dotted
/// with each present cell's monomials.
fn weights(mask: Mask) -> Weights {
    let l = factor(mask)?;
    if centre_variance(&l) > MAX_VARIANCE {
        return None;
    }
    let mut w = [[0.0; 24]; 3];
    for (r, row) in w.iter_mut().enumerate() {
        let e: [Vector2<f64>; 6] =
            std::array::from_fn(|c| Vector2::new((c == r) as u8 as f64, 0.0));
        let inv = solve(&l, e);
        for k in bits(mask) {
            row[k] = inv.iter().zip(&MONOMIALS[k]).map(|(v, m)| v.x * m).sum();
        }
    }
    Some(w)
}

/// The set bits of a mask, lowest first.
fn bits(mut mask: Mask) -> impl Iterator<Item = usize> {
    std::iter::from_fn(move || {
        (mask != 0).then(|| {
            let k = mask.trailing_zeros() as usize;
            mask &= mask - 1;
            k
        })
    })
}

/// The Cholesky factor (lower triangle) of the normal matrix of the cells of `mask`, or `None`
/// when that matrix is singular or nearly so. Its entries are small integers, so summing the
/// present cells' terms, or taking the missing cells' off the whole window's, is exact.
fn factor(mask: Mask) -> Option<[[f64; 6]; 6]> {
    let mut n = [0.0; PACKED];
    if mask.count_ones() >= 12 {
        n = FULL_NORMAL;
        for k in bits(!mask & FULL) {
            n.iter_mut().zip(&OUTER[k]).for_each(|(a, b)| *a -= b);
        }
    } else {
        for k in bits(mask) {
            n.iter_mut().zip(&OUTER[k]).for_each(|(a, b)| *a += b);
        }
    }
    let mut a = [[0.0; 6]; 6];
    let dot = |x: &[f64], y: &[f64]| x.iter().zip(y).map(|(u, v)| u * v).sum::<f64>();
    for c in 0..6 {
        let d = n[packed(c, c)] - dot(&a[c][..c], &a[c][..c]);
        // Integer matrices: a singular one leaves a pivot at rounding level, far below this
        // (a NaN fails the test too).
        if d.is_nan() || d <= 1e-9 {
            return None;
        }
        let d = d.sqrt();
        a[c][c] = d;
        for r in c + 1..6 {
            a[r][c] = (n[packed(r, c)] - dot(&a[r][..c], &a[c][..c])) / d;
        }
    }
    Some(a)
}

/// `e0^T (L L^T)^-1 e0 = |L^-1 e0|^2`: the variance of the fitted value at the centre for unit
/// variance per cell.
fn centre_variance(l: &[[f64; 6]; 6]) -> f64 {
    let mut z = [0.0; 6];
    for r in 0..6 {
        let mut s = if r == 0 { 1.0 } else { 0.0 };
        for k in 0..r {
            s -= l[r][k] * z[k];
        }
        z[r] = s / l[r][r];
    }
    z.iter().map(|v| v * v).sum()
}

/// `(L L^T)^-1 b` by forward and back substitution, for two right-hand sides at once.
fn solve(l: &[[f64; 6]; 6], mut b: [Vector2<f64>; 6]) -> [Vector2<f64>; 6] {
    for r in 0..6 {
        for k in 0..r {
            b[r] -= b[k] * l[r][k];
        }
        b[r] /= l[r][r];
    }
    for r in (0..6).rev() {
        for k in r + 1..6 {
            b[r] -= b[k] * l[k][r];
        }
        b[r] /= l[r][r];
    }
    b
}

#[cfg(test)]
mod tests {
    use super::*;

    fn gather(mask: Mask, map: &dyn Fn(f64, f64) -> Point2<f64>) -> [Point2<f64>; 24] {
        std::array::from_fn(|k| {
            let (i, j) = OFFSETS[k];
            if mask & (1 << k) != 0 { map(i as f64, j as f64) } else { Point2::origin() }
        })
    }

    fn mask_of(keep: impl Fn(i32, i32) -> bool) -> Mask {
        (0..24).filter(|&k| keep(OFFSETS[k].0, OFFSETS[k].1)).fold(0, |m, k| m | 1 << k)
    }

    #[test]
    fn offsets_and_slots_agree() {
        for (k, &(di, dj)) in OFFSETS.iter().enumerate() {
            assert_eq!(slot(di, dj), k);
        }
        assert_eq!(OFFSETS[0], (-2, -2));
        assert_eq!(OFFSETS[12], (0, 1));
    }

    /// Against the least-squares solution of the same design by nalgebra's SVD (a general
    /// reference solver), for windows with cells missing in many patterns and noisy points.
    #[test]
    fn fits_match_svd_least_squares() {
        let mut seed = 11u64;
        let mut next = || {
            seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            seed >> 11
        };
        let mut checked = 0;
        for _ in 0..400 {
            // About a quarter of the cells missing.
            let mask = (0..24).filter(|_| next() % 4 != 0).fold(0, |m, k| m | 1 << k);
            let pts: [Point2<f64>; 24] = std::array::from_fn(|k| {
                let (i, j) = (OFFSETS[k].0 as f64, OFFSETS[k].1 as f64);
                let e = (next() % 1000) as f64 / 1000.0 - 0.5;
                Point2::new(1800.0 + 21.0 * i + 3.0 * j + e, 950.0 - 2.0 * i + 19.0 * j - e)
            });
            let rows: Vec<usize> = bits(mask).collect();
            let mut x = nalgebra::DMatrix::<f64>::zeros(rows.len(), 6);
            let mut y = nalgebra::DMatrix::<f64>::zeros(rows.len(), 2);
            for (r, &k) in rows.iter().enumerate() {
                for (c, m) in monomials(OFFSETS[k]).into_iter().enumerate() {
                    x[(r, c)] = m;
                }
                y[(r, 0)] = pts[k].x;
                y[(r, 1)] = pts[k].y;
            }
            let svd = x.clone().svd(true, true);
            let Some(got) = fit(mask, &pts) else {
                // Refused: the design must then be singular or leave the centre poorly fixed.
                let sv = &svd.singular_values;
                let rank = sv.iter().filter(|&&s| s > 1e-9 * sv[0]).count();
                let var = (x.transpose() * &x).try_inverse().map_or(f64::INFINITY, |m| m[(0, 0)]);
                assert!(rank < 6 || var > MAX_VARIANCE, "mask {mask:#x} refused");
                continue;
            };
            let b = svd.solve(&y, 1e-12).unwrap();
            assert!((got.point - Point2::new(b[(0, 0)], b[(0, 1)])).norm() < 1e-9);
            assert!((got.d_i - Vector2::new(b[(1, 0)], b[(1, 1)])).norm() < 1e-9);
            assert!((got.d_j - Vector2::new(b[(2, 0)], b[(2, 1)])).norm() < 1e-9);
            checked += 1;
        }
        assert!(checked > 300, "{checked}");
    }

    #[test]
    fn quadratics_are_reproduced_and_projective_views_nearly() {
        // A quadratic map is reproduced exactly, with its derivatives. A strongly projective
        // map (w from 0.8 to 1.2 over the window, steeper than a real view's) is predicted
        // within a small fraction of a step, the one-sided windows of a face's edge and corner
        // included: against the residual test's 0.15, negligible.
        let quad = |i: f64, j: f64| {
            Point2::new(
                40.0 + 21.0 * i + 3.0 * j + 0.7 * i * i - 0.4 * i * j,
                30.0 - 2.0 * i + 19.0 * j + 0.3 * j * j,
            )
        };
        let proj = |i: f64, j: f64| {
            let w = 1.0 + 0.06 * i - 0.04 * j;
            Point2::new((40.0 + 21.0 * i + 3.0 * j) / w, (30.0 - 2.0 * i + 19.0 * j) / w)
        };
        let step = (proj(1.0, 0.0) - proj(0.0, 0.0)).norm();
        let windows = [
            ("whole", FULL, 0.004),
            ("one hole", FULL & !(1 << slot(1, 0)), 0.008),
            ("edge", mask_of(|i, _| i >= 0), 0.025),
            ("other edge", mask_of(|i, _| i <= 0), 0.025),
            ("corner", mask_of(|i, j| i >= 0 && j >= 0), 0.01),
        ];
        for (name, mask, tol) in windows {
            let q = fit(mask, &gather(mask, &quad)).unwrap();
            assert!((q.point - quad(0.0, 0.0)).norm() < 1e-9, "{name}");
            assert!((q.d_i - Vector2::new(21.0, -2.0)).norm() < 1e-9, "{name}");
            assert!((q.d_j - Vector2::new(3.0, 19.0)).norm() < 1e-9, "{name}");
            let p = fit(mask, &gather(mask, &proj)).unwrap();
            let err = (p.point - proj(0.0, 0.0)).norm() / step;
            assert!(err < tol, "{name}: {err}");
        }
    }

    #[test]
    fn degenerate_windows_are_refused() {
        let affine = |i: f64, j: f64| Point2::new(21.0 * i + 3.0 * j, 19.0 * j - 2.0 * i);
        for (name, mask) in [
            ("two rows", mask_of(|i, _| i == 1 || i == 2)),
            ("a cross", mask_of(|i, j| i == 0 || j == 0)),
        ] {
            assert!(fit(mask, &gather(mask, &affine)).is_none(), "{name}");
        }
    }

    /// The variances quoted on `MAX_VARIANCE`.
    #[test]
    fn centre_variances() {
        let var = |mask| factor(mask).map(|l| centre_variance(&l)).unwrap();
        assert!((var(FULL) - 0.18).abs() < 0.005, "{}", var(FULL));
        assert!((var(mask_of(|i, _| i >= 0)) - 0.42).abs() < 0.005);
        assert!((var(mask_of(|i, j| i >= 0 && j >= 0)) - 4.14).abs() < 0.005);
    }

    /// The memo holds a pure function's values: a fit is the same from a fresh memo, a warm
    /// one, and one that has just started afresh at its cap.
    #[test]
    fn fits_do_not_depend_on_the_memo() {
        let quad = |i: f64, j: f64| Point2::new(500.0 + 20.0 * i + 0.3 * i * j, 400.0 + 19.0 * j);
        let masks: Vec<Mask> =
            (0..MEMO_CAP as u32 + 50).map(|k| FULL & !(k.wrapping_mul(2654435761) >> 8)).collect();
        let fits = move |masks: &[Mask]| -> Vec<Option<[f64; 6]>> {
            masks
                .iter()
                .map(|&m| {
                    fit(m, &gather(m, &quad))
                        .map(|f| [f.point.x, f.point.y, f.d_i.x, f.d_i.y, f.d_j.x, f.d_j.y])
                })
                .collect()
        };
        MEMO.with_borrow_mut(|m| m.clear());
        let cold = fits(&masks);
        let warm = fits(&masks);
        assert_eq!(cold, warm);
        assert!(MEMO.with_borrow(|m| m.len()) <= MEMO_CAP);
        // The same from another thread, whose memo starts empty.
        let other = std::thread::spawn(move || fits(&masks)).join().unwrap();
        assert_eq!(cold, other);
        assert!(cold.iter().filter(|f| f.is_some()).count() > 1000);
    }
}
