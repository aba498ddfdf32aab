//! Exact areas: a convex polygon (a sub-square mapped to a face plane, or an image-space
//! square) intersected with an axis-aligned rectangle or a disc.
//!
//! These are the only approximations-free integrals of the renderer: every sub-square value is
//! `area(quad ∩ ink) / area(quad)`, so edges and shapes land where geometry puts them.

/// A point as `[x, y]`.
pub type Xy = [f64; 2];

/// Most vertices a convex quadrilateral can have after clipping by a rectangle (4 + 4).
const MAX_CLIPPED: usize = 12;

/// A small fixed-capacity polygon, so the hot loop never allocates.
#[derive(Clone, Copy)]
struct Poly {
    n: usize,
    v: [Xy; MAX_CLIPPED],
}

impl Poly {
    fn from_slice(p: &[Xy]) -> Poly {
        let mut v = [[0.0; 2]; MAX_CLIPPED];
        let n = p.len().min(MAX_CLIPPED);
        v[..n].copy_from_slice(&p[..n]);
        Poly { n, v }
    }

    fn push(&mut self, p: Xy) {
        if self.n < MAX_CLIPPED {
            self.v[self.n] = p;
            self.n += 1;
        }
    }

    fn as_slice(&self) -> &[Xy] {
        &self.v[..self.n]
    }
}

/// Signed area by the shoelace formula, `A = 1/2 sum (x_i y_{i+1} - x_{i+1} y_i)`.
pub fn signed_area(p: &[Xy]) -> f64 {
    let n = p.len();
    if n < 3 {
        return 0.0;
    }
    let mut s = 0.0;
    for i in 0..n {
        let a = p[i];
        let b = p[(i + 1) % n];
        s += a[0] * b[1] - b[0] * a[1];
    }
    0.5 * s
}

/// One Sutherland-Hodgman step: keep the part of `p` where `side(q) >= 0`, `side` affine.
fn clip_half(p: &Poly, side: impl Fn(Xy) -> f64) -> Poly {
    let mut out = Poly { n: 0, v: [[0.0; 2]; MAX_CLIPPED] };
    let n = p.n;
    for i in 0..n {
        let a = p.v[i];
        let b = p.v[(i + 1) % n];
        let (sa, sb) = (side(a), side(b));
        if sa >= 0.0 {
            out.push(a);
        }
        if (sa >= 0.0) != (sb >= 0.0) {
            let t = sa / (sa - sb);
            out.push([a[0] + t * (b[0] - a[0]), a[1] + t * (b[1] - a[1])]);
        }
    }
    out
}

/// Area of a convex polygon (at most 4 vertices: any orientation) intersected with the
/// rectangle `[x0, x1] x [y0, y1]`. Exact up to rounding.
pub fn quad_rect_area(quad: &[Xy], x0: f64, y0: f64, x1: f64, y1: f64) -> f64 {
    let mut p = Poly::from_slice(quad);
    p = clip_half(&p, |q| q[0] - x0);
    p = clip_half(&p, |q| x1 - q[0]);
    p = clip_half(&p, |q| q[1] - y0);
    p = clip_half(&p, |q| y1 - q[1]);
    signed_area(p.as_slice()).abs()
}

/// Area of any simple polygon (convex or not) intersected with the rectangle
/// `[x0, x1] x [y0, y1]`: Sutherland-Hodgman against a convex window is exact for area even
/// when the subject is not convex (the degenerate edges it leaves along the window have zero
/// area).
pub fn polygon_rect_area(poly: &[Xy], x0: f64, y0: f64, x1: f64, y1: f64) -> f64 {
    let clip = |p: Vec<Xy>, side: &dyn Fn(Xy) -> f64| -> Vec<Xy> {
        let mut out = Vec::with_capacity(p.len() + 4);
        for i in 0..p.len() {
            let a = p[i];
            let b = p[(i + 1) % p.len()];
            let (sa, sb) = (side(a), side(b));
            if sa >= 0.0 {
                out.push(a);
            }
            if (sa >= 0.0) != (sb >= 0.0) {
                let t = sa / (sa - sb);
                out.push([a[0] + t * (b[0] - a[0]), a[1] + t * (b[1] - a[1])]);
            }
        }
        out
    };
    let mut p = poly.to_vec();
    p = clip(p, &|q| q[0] - x0);
    p = clip(p, &|q| x1 - q[0]);
    p = clip(p, &|q| q[1] - y0);
    p = clip(p, &|q| y1 - q[1]);
    signed_area(&p).abs()
}

/// Signed area of the triangle `(0, a, b)` intersected with the disc of radius `r` about the
/// origin. Summed over a polygon's edges it gives the polygon-disc intersection area
/// (the decomposition of a polygon into triangles fanning from the disc centre, common
/// practice). The segment is split where it crosses the circle; each piece inside contributes
/// its triangle `cross / 2`, each piece outside its sector `r^2 theta / 2`.
fn triangle_disc_signed(a: Xy, b: Xy, r: f64) -> f64 {
    let d = [b[0] - a[0], b[1] - a[1]];
    let qa = d[0] * d[0] + d[1] * d[1];
    if qa == 0.0 {
        return 0.0;
    }
    let r2 = r * r;
    let qb = 2.0 * (a[0] * d[0] + a[1] * d[1]);
    let qc = a[0] * a[0] + a[1] * a[1] - r2;
    let disc = qb * qb - 4.0 * qa * qc;
    let mut ts = [0.0, 1.0, 1.0, 1.0];
    let mut nt = 1;
    if disc > 0.0 {
        let s = disc.sqrt();
        // Numerically stable roots of qa t^2 + qb t + qc.
        let q = -0.5 * (qb + qb.signum() * s);
        let (mut t1, mut t2) = if q != 0.0 { (q / qa, qc / q) } else { (0.0, 0.0) };
        if t1 > t2 {
            std::mem::swap(&mut t1, &mut t2);
        }
        for t in [t1, t2] {
            if t > 0.0 && t < 1.0 {
                ts[nt] = t;
                nt += 1;
            }
        }
    }
    ts[nt] = 1.0;
    let point = |t: f64| [a[0] + t * d[0], a[1] + t * d[1]];
    let mut area = 0.0;
    for k in 0..nt {
        let (t0, t1) = (ts[k], ts[k + 1]);
        if t1 <= t0 {
            continue;
        }
        let p = point(t0);
        let q = point(t1);
        let cross = p[0] * q[1] - p[1] * q[0];
        let m = point(0.5 * (t0 + t1));
        if m[0] * m[0] + m[1] * m[1] <= r2 {
            area += 0.5 * cross;
        } else {
            let dot = p[0] * q[0] + p[1] * q[1];
            area += 0.5 * r2 * cross.atan2(dot);
        }
    }
    area
}

/// Area of a simple polygon intersected with the disc of centre `c` and radius `r`.
/// Exact up to rounding.
pub fn polygon_disc_area(poly: &[Xy], c: Xy, r: f64) -> f64 {
    let n = poly.len();
    let mut s = 0.0;
    for i in 0..n {
        let a = poly[i];
        let b = poly[(i + 1) % n];
        s += triangle_disc_signed([a[0] - c[0], a[1] - c[1]], [b[0] - c[0], b[1] - c[1]], r);
    }
    s.abs()
}

/// Area of the square `[x0, x0 + side] x [y0, y0 + side]` inside a disc.
pub fn square_disc_area(x0: f64, y0: f64, side: f64, c: Xy, r: f64) -> f64 {
    let sq = [[x0, y0], [x0 + side, y0], [x0 + side, y0 + side], [x0, y0 + side]];
    polygon_disc_area(&sq, c, r)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::PI;

    #[test]
    fn rectangle_clipping_matches_hand_computed_areas() {
        // A unit square rotated by 45 degrees about (0, 0): a diamond of area 2 with vertices on
        // the axes at distance 1. Clipped to x >= 0 it keeps half (elementary geometry).
        let diamond = [[1.0, 0.0], [0.0, 1.0], [-1.0, 0.0], [0.0, -1.0]];
        assert!((signed_area(&diamond).abs() - 2.0).abs() < 1e-15);
        assert!((quad_rect_area(&diamond, 0.0, -5.0, 5.0, 5.0) - 1.0).abs() < 1e-15);
        // Clipped to the first quadrant: the triangle (0,0), (1,0), (0,1) of area 1/2.
        assert!((quad_rect_area(&diamond, 0.0, 0.0, 5.0, 5.0) - 0.5).abs() < 1e-15);
        // Clipped to [0.5, 5] x [-5, 5]: triangle with legs 0.5 and height 1 -> 2 * 0.125.
        assert!((quad_rect_area(&diamond, 0.5, -5.0, 5.0, 5.0) - 0.25).abs() < 1e-15);
        // A non-convex L-shape (area 3) clipped to [0, 1] x [0, 2] keeps 2.
        let l = [[0.0, 0.0], [2.0, 0.0], [2.0, 1.0], [1.0, 1.0], [1.0, 2.0], [0.0, 2.0]];
        assert!((polygon_rect_area(&l, 0.0, 0.0, 1.0, 2.0) - 2.0).abs() < 1e-15);
        assert!((polygon_rect_area(&l, 0.5, 0.5, 3.0, 3.0) - 1.25).abs() < 1e-15);
    }

    #[test]
    fn disc_intersections_match_closed_forms() {
        // A square containing the disc: pi r^2.
        let r = 0.7;
        assert!((square_disc_area(-1.0, -1.0, 2.0, [0.0, 0.0], r) - PI * r * r).abs() < 1e-14);
        // Square inside the disc: its own area.
        assert!((square_disc_area(-0.1, -0.1, 0.2, [0.0, 0.0], 1.0) - 0.04).abs() < 1e-15);
        // Quarter disc: the square [0, 2]^2 with the disc centred at its corner.
        assert!((square_disc_area(0.0, 0.0, 2.0, [0.0, 0.0], 1.0) - PI / 4.0).abs() < 1e-14);
        // Circular segment beyond the chord x = h of a unit disc: acos(h) - h sqrt(1 - h^2)
        // (handbook formula for the area of a circular segment).
        for h in [0.0, 0.3, 0.8, -0.4] {
            let exact = f64::acos(h) - h * (1.0 - h * h).sqrt();
            let got =
                polygon_disc_area(&[[h, -3.0], [3.0, -3.0], [3.0, 3.0], [h, 3.0]], [0.0; 2], 1.0);
            assert!((got - exact).abs() < 1e-14, "h {h}: {got} vs {exact}");
        }
        // Disjoint.
        assert_eq!(square_disc_area(2.0, 2.0, 1.0, [0.0, 0.0], 1.0), 0.0);
    }

    /// The polygon-disc area agrees with a fine Monte-Carlo-free midpoint count on a
    /// quadrilateral that cuts the circle twice (independent check of the edge splitting).
    #[test]
    fn disc_area_agrees_with_a_fine_grid_count() {
        let quad = [[0.2, -0.9], [1.3, 0.1], [0.6, 1.2], [-0.5, 0.3]];
        let c = [0.1, 0.2];
        let r = 0.8;
        let exact = polygon_disc_area(&quad, c, r);
        let n = 2000;
        let h = 3.0 / n as f64;
        let inside_quad = |x: f64, y: f64| {
            (0..4).all(|i| {
                let a = quad[i];
                let b = quad[(i + 1) % 4];
                (b[0] - a[0]) * (y - a[1]) - (b[1] - a[1]) * (x - a[0]) >= 0.0
            })
        };
        let mut count = 0usize;
        for iy in 0..n {
            for ix in 0..n {
                let x = -1.5 + (ix as f64 + 0.5) * h;
                let y = -1.5 + (iy as f64 + 0.5) * h;
                if (x - c[0]).hypot(y - c[1]) <= r && inside_quad(x, y) {
                    count += 1;
                }
            }
        }
        let approx = count as f64 * h * h;
        // Grid-count error is bounded by the perimeter times the cell size, about 5 * h.
        assert!((exact - approx).abs() < 5.0 * h, "{exact} vs {approx}");
    }
}
