//! Dots, isolated squares and face-code marks: a local-mean threshold, connected components of
//! its runs, moment shape tests, then subpixel measurement on the grey values.
//!
//! - Threshold: a pixel is dark if `I < m - delta`, light if `I > m + delta`, with `m` the
//!   mean over a square of radius `threshold_radius` (exact integer box sums of the levels on a
//!   16-bit scale) and `delta = min_contrast / 4`; the result is kept as horizontal runs.
//! - Components: 8-connected runs of one ink joined by union-find (the labelling of
//!   `imageproc::region_labelling` on runs instead of pixels: a component's moments are sums
//!   over its runs in closed form, and its pixels need not be stored).
//! - Shape test in whitened coordinates `u = L^-1 (p - mean)` (`L L^T` the component's second
//!   moments): every point of a uniform ellipse lies within `|u| <= 2`, the corners of a
//!   parallelogram (an affine square) reach `|u| = sqrt(6) = 2.45`. Round: `max |u| < 2.2`.
//! - Dot centre: the centroid of `w = (b(p) - I(p)) / (b(p) - f)` over an ellipse 3 px larger
//!   than the blob, with `b` a plane fitted to an annulus outside it and `f` the ink level;
//!   the PSF and the pixel integration are symmetric kernels of unit sum, so they leave this
//!   first moment unchanged; the region is re-centred twice.
//! - Square corners: the intersections of lines fitted (total least squares) to the points
//!   where the grey level crosses the mid-level between ink and ground, along profiles normal
//!   to each side over its middle 80 %, every half pixel.

use facetcal_model::Ink;
use nalgebra::{Matrix2, Matrix3, Point2, SymmetricEigen, Vector2, Vector3};

use crate::encoding::Encoding;
use crate::features::{Dot, Ellipse, Mark, SquareOutline};
use crate::image::GreyImage;
use crate::options::DetectorOptions;

/// Moments of one connected component.
#[derive(Clone, Copy, Debug)]
struct Component {
    ink: Ink,
    area: f64,
    mean: Point2<f64>,
    cov: Matrix2<f64>,
    label: u32,
}

/// A round blob measured on the grey values, before classification.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Blob {
    pub(crate) dot: Dot,
    /// Equivalent diameter, pixels.
    pub(crate) diameter: f64,
}

/// A horizontal run of pixels of one ink: `x0..=x1` on row `y`.
#[derive(Clone, Copy, Debug)]
struct Run {
    x0: u32,
    x1: u32,
    y: u32,
    dark: bool,
}

/// Grey levels on a 16-bit integer scale, for exact box sums (8- and 16-bit input exactly;
/// values outside `[0, 1]` saturate).
fn levels16_into(src: &[f32], dst: &mut [u16]) {
    // Adding 2^23 leaves the nearest integer to `x` in [0, 65535] in the low mantissa bits,
    // a conversion that vectorises (a float-to-integer cast does not, on the baseline x86-64).
    const SHIFT: f32 = 8_388_608.0;
    for (o, &v) in dst.iter_mut().zip(src) {
        let x = v.clamp(0.0, 1.0) * 65535.0 + SHIFT;
        *o = (x.to_bits() & 0xffff) as u16;
    }
}

/// The thresholded image as runs, in raster order, with the index of each row's first run.
/// A pixel is dark if `I < m - delta`, light if `I > m + delta`, `m` the mean over the square
/// of radius `r` clipped at the border, on levels quantised to 16 bits (`delta` too). The box
/// sums are exact integers from column sums slid down the image and a prefix sum along each
/// row, so the working set is a few rows (an integral image of the whole picture costs 16
/// bytes per pixel and a cache miss per lookup) and no division is needed:
/// `q < S / n - dq` is `q n - S < -dq n` (in `f64`, exact below 2^53).
fn threshold_runs(img: &GreyImage, r: usize, delta: f64) -> (Vec<Run>, Vec<usize>) {
    let (w, h) = (img.width(), img.height());
    let d = img.data();
    let dq = (delta * 65535.0).round();
    // Column sums fit in u32: at most 65535 (2 r + 1) with r <= 10000.
    let mut col = vec![0u32; w];
    // Quantised rows y0..y1 in a ring (each row converted once).
    let slots = (2 * r + 2).min(h);
    let mut ring = vec![0u16; slots * w];
    let mut prefix = vec![0u64; w + 1];
    let mut class = vec![0u8; w];
    let mut runs = Vec::new();
    let mut row_start = Vec::with_capacity(h + 1);
    // Column sums over rows y0..y1 (exclusive).
    let mut y1 = 0usize;
    let mut y0 = 0usize;
    for y in 0..h {
        let (want0, want1) = (y.saturating_sub(r), (y + r + 1).min(h));
        while y0 < want0 {
            let q = &ring[(y0 % slots) * w..(y0 % slots + 1) * w];
            col.iter_mut().zip(q).for_each(|(c, &v)| *c -= v as u32);
            y0 += 1;
        }
        while y1 < want1 {
            let q = &mut ring[(y1 % slots) * w..(y1 % slots + 1) * w];
            levels16_into(&d[y1 * w..(y1 + 1) * w], q);
            col.iter_mut().zip(&*q).for_each(|(c, &v)| *c += v as u32);
            y1 += 1;
        }
        let mut acc = 0u64;
        for (p, &c) in prefix[1..].iter_mut().zip(&col) {
            acc += c as u64;
            *p = acc;
        }
        let rows = (y1 - y0) as f64;
        let q = &ring[(y % slots) * w..(y % slots + 1) * w];
        // 1 dark, 2 light, 0 neither. Columns whose square is not clipped share one count.
        let classify = |x: usize, x0: usize, x1: usize| {
            let n = (x1 - x0) as f64 * rows;
            let a = q[x] as f64 * n - (prefix[x1] - prefix[x0]) as f64;
            let t = dq * n;
            (a < -t) as u8 | (((a > t) as u8) << 1)
        };
        let (lo, hi) = (r.min(w), w.saturating_sub(r + 1).max(r.min(w)));
        for x in (0..lo).chain(hi..w) {
            class[x] = classify(x, x.saturating_sub(r), (x + r + 1).min(w));
        }
        let n_int = (2 * r + 1) as u64 * (y1 - y0) as u64;
        if lo < hi && (65535 + dq as u64) * n_int < 1 << 32 {
            // Exact in u32 (checked above), which vectorises: dark if (q + dq) n < S, light if
            // q n > S + dq n.
            let n = n_int as u32;
            let t = dq as u32 * n;
            let (qs, cs) = (&q[lo..hi], &mut class[lo..hi]);
            let (pa, pb) = (&prefix[0..hi - lo], &prefix[2 * r + 1..hi + r + 1]);
            for (((k, &qv), &p0), &p1) in cs.iter_mut().zip(qs).zip(pa).zip(pb) {
                let sum = p1.wrapping_sub(p0) as u32;
                let a = qv as u32 * n;
                *k = ((a + t) < sum) as u8 | (((a > sum + t) as u8) << 1);
            }
        } else if lo < hi {
            let n = (2 * r + 1) as f64 * rows;
            let t = dq * n;
            let (qs, cs) = (&q[lo..hi], &mut class[lo..hi]);
            let (pa, pb) = (&prefix[0..hi - lo], &prefix[2 * r + 1..hi + r + 1]);
            for (((k, &qv), &p0), &p1) in cs.iter_mut().zip(qs).zip(pa).zip(pb) {
                let a = qv as f64 * n - (p1 - p0) as f64;
                *k = (a < -t) as u8 | (((a > t) as u8) << 1);
            }
        }
        row_start.push(runs.len());
        let mut x = 0usize;
        while x < w {
            let c = class[x];
            if c == 0 {
                x += 1;
                continue;
            }
            let s = x;
            while x < w && class[x] == c {
                x += 1;
            }
            runs.push(Run { x0: s as u32, x1: x as u32 - 1, y: y as u32, dark: c == 1 });
        }
    }
    row_start.push(runs.len());
    (runs, row_start)
}

fn find(parent: &mut [u32], mut i: u32) -> u32 {
    while parent[i as usize] != i {
        let p = parent[i as usize];
        parent[i as usize] = parent[p as usize];
        i = p;
    }
    i
}

/// 8-connected components of the runs: for each run, the index of its component. Components
/// are numbered dark first, then light, each in the raster order of their first pixel.
fn label_runs(runs: &[Run], row_start: &[usize]) -> (Vec<u32>, usize) {
    let mut parent: Vec<u32> = (0..runs.len() as u32).collect();
    for y in 1..row_start.len().saturating_sub(1) {
        let (pa, pb) = (row_start[y - 1], row_start[y]);
        let (ca, cb) = (row_start[y], row_start[y + 1]);
        let mut j = pa;
        for i in ca..cb {
            let c = runs[i];
            // Runs of the previous row touching `c` diagonally or directly: x1 + 1 >= c.x0
            // and x0 <= c.x1 + 1. The previous row is sorted, so skip those ending too early.
            while j < pb && runs[j].x1 + 1 < c.x0 {
                j += 1;
            }
            let mut k = j;
            while k < pb && runs[k].x0 <= c.x1 + 1 {
                if runs[k].dark == c.dark {
                    let (a, b) = (find(&mut parent, i as u32), find(&mut parent, k as u32));
                    // The smaller index (earlier in raster order) becomes the root.
                    if a != b {
                        let (lo, hi) = if a < b { (a, b) } else { (b, a) };
                        parent[hi as usize] = lo;
                    }
                }
                k += 1;
            }
        }
    }
    // Roots are each component's first run; number dark components, then light ones.
    let mut id = vec![u32::MAX; runs.len()];
    let mut n = 0u32;
    for pass_dark in [true, false] {
        for i in 0..runs.len() {
            if runs[i].dark == pass_dark && find(&mut parent, i as u32) == i as u32 {
                id[i] = n;
                n += 1;
            }
        }
    }
    for i in 0..runs.len() {
        let root = find(&mut parent, i as u32) as usize;
        id[i] = id[root];
    }
    (id, n as usize)
}

/// Sum of `x` and of `x^2` over the integers `a..=b`.
fn run_sums(a: u32, b: u32) -> (f64, f64) {
    let s1 = |n: f64| n * (n + 1.0) / 2.0;
    let s2 = |n: f64| n * (n + 1.0) * (2.0 * n + 1.0) / 6.0;
    let (a, b) = (a as f64, b as f64);
    (s1(b) - s1(a - 1.0), s2(b) - s2(a - 1.0))
}

/// Moments of every component of acceptable size, and the runs grouped by component.
struct Components {
    list: Vec<Component>,
    /// Runs of component `label`: `order[start[label]..start[label + 1]]`.
    start: Vec<usize>,
    order: Vec<u32>,
}

fn components(img: &GreyImage, opts: &DetectorOptions) -> (Vec<Run>, Components) {
    let (w, h) = (img.width(), img.height());
    let (runs, row_start) = threshold_runs(img, opts.threshold_radius, opts.min_contrast / 4.0);
    let (id, n) = label_runs(&runs, &row_start);
    drop(row_start);
    // Sums: count, x, y, xx, xy, yy; border flag; ink.
    let mut s = vec![[0.0f64; 6]; n];
    let mut border = vec![false; n];
    let mut dark = vec![false; n];
    let mut count = vec![0usize; n + 1];
    for (r, &l) in runs.iter().zip(&id) {
        let l = l as usize;
        let len = (r.x1 - r.x0 + 1) as f64;
        let (sx, sxx) = run_sums(r.x0, r.x1);
        let fy = r.y as f64;
        let t = &mut s[l];
        t[0] += len;
        t[1] += sx;
        t[2] += len * fy;
        t[3] += sxx;
        t[4] += sx * fy;
        t[5] += len * fy * fy;
        if r.x0 == 0 || r.y == 0 || r.x1 as usize + 1 == w || r.y as usize + 1 == h {
            border[l] = true;
        }
        dark[l] = r.dark;
        count[l + 1] += 1;
    }
    for l in 0..n {
        count[l + 1] += count[l];
    }
    let mut fill = count.clone();
    let mut order = vec![0u32; runs.len()];
    for (i, &l) in id.iter().enumerate() {
        order[fill[l as usize]] = i as u32;
        fill[l as usize] += 1;
    }
    let max_area = opts.max_blob_fraction * (w * h) as f64;
    let mut out = Vec::new();
    for l in 0..n {
        let t = s[l];
        if border[l] || t[0] < opts.min_blob_area || t[0] > max_area {
            continue;
        }
        let mx = t[1] / t[0];
        let my = t[2] / t[0];
        // Pixel-area variance 1/12 added: each pixel is a unit square.
        let cov = Matrix2::new(
            t[3] / t[0] - mx * mx + 1.0 / 12.0,
            t[4] / t[0] - mx * my,
            t[4] / t[0] - mx * my,
            t[5] / t[0] - my * my + 1.0 / 12.0,
        );
        out.push(Component {
            ink: if dark[l] { Ink::Dark } else { Ink::Light },
            area: t[0],
            mean: Point2::new(mx, my),
            cov,
            label: l as u32,
        });
    }
    (runs, Components { list: out, start: count, order })
}

impl Components {
    fn runs_of<'a>(&'a self, c: &Component, runs: &'a [Run]) -> impl Iterator<Item = Run> + 'a {
        let l = c.label as usize;
        self.order[self.start[l]..self.start[l + 1]].iter().map(move |&i| runs[i as usize])
    }
}

/// The component with its holes filled: on each row, the span from its first pixel to its last
/// (exact for convex shapes; a square holding a face-code mark is a square again). Moments of
/// the filled shape and its spans.
fn row_hull(c: &Component, runs: impl Iterator<Item = Run>) -> (Component, Vec<Run>) {
    let mut spans: Vec<Run> = Vec::new();
    for r in runs {
        match spans.last_mut() {
            Some(s) if s.y == r.y => {
                s.x0 = s.x0.min(r.x0);
                s.x1 = s.x1.max(r.x1);
            }
            _ => spans.push(r),
        }
    }
    let mut t = [0.0f64; 6];
    for r in &spans {
        let len = (r.x1 - r.x0 + 1) as f64;
        let (sx, sxx) = run_sums(r.x0, r.x1);
        let fy = r.y as f64;
        t[0] += len;
        t[1] += sx;
        t[2] += len * fy;
        t[3] += sxx;
        t[4] += sx * fy;
        t[5] += len * fy * fy;
    }
    let (mx, my) = (t[1] / t[0], t[2] / t[0]);
    let cov = Matrix2::new(
        t[3] / t[0] - mx * mx + 1.0 / 12.0,
        t[4] / t[0] - mx * my,
        t[4] / t[0] - mx * my,
        t[5] / t[0] - my * my + 1.0 / 12.0,
    );
    (Component { area: t[0], mean: Point2::new(mx, my), cov, ..*c }, spans)
}

/// Largest whitened radius of a component's pixels. Along a row the whitened radius is a
/// convex function of x, so each run's largest value is at one of its ends.
fn max_whitened_radius(c: &Component, runs: &[Run]) -> Option<(f64, Matrix2<f64>)> {
    let inv = c.cov.try_inverse()?;
    let mut m: f64 = 0.0;
    for r in runs {
        for x in [r.x0, r.x1] {
            let d = Vector2::new(x as f64 - c.mean.x, r.y as f64 - c.mean.y);
            m = m.max(d.dot(&(inv * d)));
        }
    }
    Some((m.sqrt(), inv))
}

/// Smallest whitened radius of the ends of a component's row spans: the outline's nearest
/// approach to the centre, in the metric where the component's second moments are a circle's.
fn min_whitened_radius(c: &Component, spans: &[Run], inv: &Matrix2<f64>) -> f64 {
    let mut m = f64::INFINITY;
    for r in spans {
        for x in [r.x0, r.x1] {
            let d = Vector2::new(x as f64 - c.mean.x, r.y as f64 - c.mean.y);
            m = m.min(d.dot(&(inv * d)));
        }
    }
    m.sqrt()
}

fn ellipse_of(centre: Point2<f64>, cov: &Matrix2<f64>) -> Ellipse {
    let e = SymmetricEigen::new(*cov);
    let (i, j) = if e.eigenvalues[0] >= e.eigenvalues[1] { (0, 1) } else { (1, 0) };
    let v = e.eigenvectors.column(i);
    let mut angle = v[1].atan2(v[0]);
    if angle <= -std::f64::consts::FRAC_PI_2 {
        angle += std::f64::consts::PI;
    } else if angle > std::f64::consts::FRAC_PI_2 {
        angle -= std::f64::consts::PI;
    }
    Ellipse {
        centre,
        semi_major: 2.0 * e.eigenvalues[i].max(0.0).sqrt(),
        semi_minor: 2.0 * e.eigenvalues[j].max(0.0).sqrt(),
        angle,
    }
}

/// Subpixel centroid of a round blob on the grey values.
fn measure_dot(img: &GreyImage, c: &Component, noise: f64) -> Option<Blob> {
    let (w, h) = (img.width() as isize, img.height() as isize);
    let base = ellipse_of(c.mean, &c.cov);
    let (a, b) = (base.semi_major, base.semi_minor);
    let (ca, sa) = (base.angle.cos(), base.angle.sin());
    // Ellipse metric with semi-axes grown by `g` px.
    let metric = |d: Vector2<f64>, g: f64| {
        let u = ca * d.x + sa * d.y;
        let v = -sa * d.x + ca * d.y;
        (u / (a + g)).powi(2) + (v / (b + g)).powi(2)
    };
    let sign = if c.ink == Ink::Dark { 1.0 } else { -1.0 };
    let mut centre = c.mean;
    let reach = (a + 8.0).ceil() as isize;
    let mut result = None;
    let mut annulus: Vec<(Vector2<f64>, f64)> = Vec::new();
    for _ in 0..3 {
        let (cx, cy) = (centre.x.round() as isize, centre.y.round() as isize);
        let (x0, x1) = ((cx - reach).max(0), (cx + reach).min(w - 1));
        let (y0, y1) = ((cy - reach).max(0), (cy + reach).min(h - 1));
        // Ground plane b = p0 + p1 dx + p2 dy on the annulus; ink level from the core.
        annulus.clear();
        let (mut core, mut ncore) = (0.0, 0);
        for y in y0..=y1 {
            for x in x0..=x1 {
                let d = Vector2::new(x as f64 - centre.x, y as f64 - centre.y);
                let v = img.get(x as usize, y as usize)? as f64;
                let m_out = metric(d, 4.0);
                if m_out > 1.0 && metric(d, 7.0) <= 1.0 {
                    annulus.push((d, v));
                }
                if metric(d, 0.0) <= 0.25 {
                    core += v;
                    ncore += 1;
                }
            }
        }
        if ncore == 0 {
            return None;
        }
        let fit = |keep: &dyn Fn(Vector2<f64>, f64) -> bool| {
            let mut ata = Matrix3::<f64>::zeros();
            let mut atb = Vector3::<f64>::zeros();
            for &(d, v) in annulus.iter().filter(|(d, v)| keep(*d, *v)) {
                let r = Vector3::new(1.0, d.x, d.y);
                ata += r * r.transpose();
                atb += r * v;
            }
            ata.try_inverse().map(|m| m * atb)
        };
        let first = fit(&|_, _| true)?;
        // An occluder or a neighbour reaching into the annulus is no ground: pixels off the
        // plane by more than 4 noise sigmas (and 2 % of the scale) are left out of a second fit.
        let limit = (4.0 * noise).max(0.02);
        let off = |p: &Vector3<f64>, d: Vector2<f64>, v: f64| {
            (v - (p[0] + p[1] * d.x + p[2] * d.y)).abs() > limit
        };
        let plane = if annulus.iter().any(|&(d, v)| off(&first, d, v)) {
            fit(&|d, v| !off(&first, d, v))?
        } else {
            first
        };
        let ink = core / ncore as f64;
        let (mut sw, mut sx, mut sy) = (0.0, 0.0, 0.0);
        let (mut sxx, mut sxy, mut syy) = (0.0, 0.0, 0.0);
        let mut lever = Vector2::<f64>::zeros();
        for y in y0..=y1 {
            for x in x0..=x1 {
                let d = Vector2::new(x as f64 - centre.x, y as f64 - centre.y);
                if metric(d, 3.0) > 1.0 {
                    continue;
                }
                let v = img.get(x as usize, y as usize)? as f64;
                let ground = plane[0] + plane[1] * d.x + plane[2] * d.y;
                let depth = sign * (ground - ink);
                if depth <= 0.0 {
                    return None;
                }
                let wt = sign * (ground - v) / depth;
                sw += wt;
                sx += wt * d.x;
                sy += wt * d.y;
                sxx += wt * d.x * d.x;
                sxy += wt * d.x * d.y;
                syy += wt * d.y * d.y;
                lever += Vector2::new(d.x * d.x, d.y * d.y) / (depth * depth);
            }
        }
        if sw <= 1.0 {
            return None;
        }
        let shift = Vector2::new(sx / sw, sy / sw);
        let new_centre = centre + shift;
        let cov = Matrix2::new(
            sxx / sw - shift.x * shift.x,
            sxy / sw - shift.x * shift.y,
            sxy / sw - shift.x * shift.y,
            syy / sw - shift.y * shift.y,
        );
        let var = noise * noise * 0.5 * (lever.x + lever.y) / (sw * sw);
        let contrast = sign * (plane[0] - ink);
        result = Some((new_centre, cov, sw, var.max(0.0).sqrt(), contrast));
        centre = new_centre;
        if shift.norm() < 1e-3 {
            break;
        }
    }
    let (centre, cov, area, sigma, _contrast) = result?;
    if !(centre.x.is_finite() && centre.y.is_finite()) || (centre - c.mean).norm() > 2.0 {
        return None;
    }
    let ellipse = ellipse_of(centre, &cov);
    if !(ellipse.semi_major.is_finite() && ellipse.semi_minor > 0.5) {
        return None;
    }
    let dot = Dot { centre, sigma, ellipse, ink: c.ink, area };
    Some(Blob { dot, diameter: 2.0 * (area / std::f64::consts::PI).sqrt() })
}

/// Keys' cubic convolution weights (a = -0.5) for the four taps around fraction `t` in
/// `[0, 1)`: R. Keys, "Cubic convolution interpolation for digital image processing", IEEE
/// TASSP 29(6), 1981.
fn keys_weights(t: f64) -> [f64; 4] {
    // The kernel's four pieces at distances 1 + t, t, 1 - t and 2 - t, expanded in t.
    let (t2, t3) = (t * t, t * t * t);
    [
        0.5 * (-t3 + 2.0 * t2 - t),
        0.5 * (3.0 * t3 - 5.0 * t2 + 2.0),
        0.5 * (-3.0 * t3 + 4.0 * t2 + t),
        0.5 * (t3 - t2),
    ]
}

/// Grey level at a subpixel point by cubic convolution, border replicated. Bilinear
/// interpolation of a blurred edge moves its mid-level crossing with the subpixel phase by a
/// few hundredths of a pixel; the cubic kernel is exact for quadratics.
fn sample_cubic(img: &GreyImage, x: f64, y: f64) -> f64 {
    if !(x.is_finite() && y.is_finite()) {
        return 0.0;
    }
    let (x0, y0) = (x.floor(), y.floor());
    let (wx, wy) = (keys_weights(x - x0), keys_weights(y - y0));
    let (xi, yi) = (x0.clamp(-4.0, 1e9) as isize, y0.clamp(-4.0, 1e9) as isize);
    let (w, h) = (img.width() as isize, img.height() as isize);
    let mut s = 0.0;
    if xi >= 1 && yi >= 1 && xi + 2 < w && yi + 2 < h {
        // Inside: four rows of four pixels, no clamping.
        let data = img.data();
        for (j, &b) in wy.iter().enumerate() {
            let at = ((yi + j as isize - 1) * w + xi - 1) as usize;
            let r = &data[at..at + 4];
            let row = wx[0] * r[0] as f64
                + wx[1] * r[1] as f64
                + wx[2] * r[2] as f64
                + wx[3] * r[3] as f64;
            s += b * row;
        }
        return s;
    }
    for (j, &b) in wy.iter().enumerate() {
        let mut row = 0.0;
        for (i, &a) in wx.iter().enumerate() {
            row += a * img.at_clamped(xi + i as isize - 1, yi + j as isize - 1) as f64;
        }
        s += b * row;
    }
    s
}

/// Mid-level crossing along a profile, for square sides: `(offset, ink level, ground level)`,
/// the offset along `n` from `p`. The mid level is `level` when given (the mean over a whole
/// side: the two end samples of one profile carry the full image noise), else midway in light
/// between the profile's two ends (see [`Encoding`]).
fn profile_crossing(
    img: &GreyImage,
    enc: Encoding,
    p: Point2<f64>,
    n: Vector2<f64>,
    reach: f64,
    level: Option<f64>,
) -> Option<(f64, f64, f64)> {
    // The profile is read every 0.25 px from -reach (inside, ink) to +reach (outside,
    // ground): first every 1 px to find where it crosses the level, then the three quarter
    // points inside that pixel. (More than one crossing means this is no clean edge.)
    let steps = (reach / 0.25).round() as i32;
    let at = |k: i32| {
        let t = k as f64 * 0.25;
        sample_cubic(img, p.x + t * n.x, p.y + t * n.y)
    };
    let lo = at(-steps);
    let hi = at(steps);
    if hi - lo < 0.02 {
        return None;
    }
    let mid = level.unwrap_or_else(|| enc.between(lo, hi, 0.5));
    let mut bracket = None;
    let mut prev = (-steps, lo);
    let mut k = -steps;
    while k < steps {
        let next = (k + 4).min(steps);
        let v = if next == steps { hi } else { at(next) };
        if (prev.1 - mid) * (v - mid) <= 0.0 && v != prev.1 {
            if bracket.is_some() {
                return None;
            }
            bracket = Some((prev, (next, v)));
        }
        prev = (next, v);
        k = next;
    }
    let ((k0, v0), (k1, v1)) = bracket?;
    let mut found = None;
    let mut last = (k0, v0);
    for k in k0 + 1..=k1 {
        let v = if k == k1 { v1 } else { at(k) };
        if (last.1 - mid) * (v - mid) <= 0.0 && v != last.1 {
            if found.is_some() {
                return None;
            }
            let f = (mid - last.1) / (v - last.1);
            found = Some((last.0 as f64 + f) * 0.25);
        }
        last = (k, v);
    }
    found.map(|o| (o, lo, hi))
}

fn median(v: &mut [f64]) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    let mid = v.len() / 2;
    Some(*v.select_nth_unstable_by(mid, f64::total_cmp).1)
}

/// A line fitted by total least squares, with the variances of its position across itself at
/// the centroid (`s^2 / n`) and of its angle (`s^2 / sum t^2`, `t` along the line), `s^2` the
/// residual variance `sum r^2 / (n - 2)`.
#[derive(Clone, Copy, Debug)]
struct FittedLine {
    point: Point2<f64>,
    dir: Vector2<f64>,
    var_offset: f64,
    var_angle: f64,
}

impl FittedLine {
    /// Variance of the line's position across itself at `p` (a point on the line).
    fn var_at(&self, p: Point2<f64>) -> f64 {
        let t = self.dir.dot(&(p - self.point));
        self.var_offset + t * t * self.var_angle
    }
}

/// Total least squares line through points: (point on line, unit direction).
fn fit_line(pts: &[Point2<f64>]) -> Option<FittedLine> {
    if pts.len() < 3 {
        return None;
    }
    let n = pts.len() as f64;
    let m = pts.iter().fold(Vector2::zeros(), |a, p| a + p.coords) / n;
    let mut c = Matrix2::zeros();
    for p in pts {
        let d = p.coords - m;
        c += d * d.transpose();
    }
    let e = SymmetricEigen::new(c);
    let i = if e.eigenvalues[0] >= e.eigenvalues[1] { 0 } else { 1 };
    let v = e.eigenvectors.column(i);
    let dir = Vector2::new(v[0], v[1]);
    let normal = Vector2::new(-dir.y, dir.x);
    let (mut rr, mut tt) = (0.0, 0.0);
    for p in pts {
        let d = p.coords - m;
        rr += normal.dot(&d).powi(2);
        tt += dir.dot(&d).powi(2);
    }
    let s2 = rr / (n - 2.0);
    Some(FittedLine {
        point: Point2::from(m),
        dir,
        var_offset: s2 / n,
        var_angle: if tt > 0.0 { s2 / tt } else { f64::INFINITY },
    })
}

/// The intersection of two lines and its covariance: moving line `i` across itself by `e_i`
/// moves the intersection by `N^-1 e` (`N` the rows of unit normals), so the covariance is
/// `N^-1 diag(var_a, var_b) N^-T` with each line's variance at the intersection.
fn intersect(a: &FittedLine, b: &FittedLine) -> Option<(Point2<f64>, Matrix2<f64>)> {
    let m = Matrix2::new(a.dir.x, -b.dir.x, a.dir.y, -b.dir.y);
    let t = m.try_inverse()? * (b.point - a.point);
    let p = a.point + a.dir * t.x;
    if !(p.x.is_finite() && p.y.is_finite()) {
        return None;
    }
    let normals = Matrix2::new(-a.dir.y, a.dir.x, -b.dir.y, b.dir.x);
    let ni = normals.try_inverse()?;
    let cov = ni * Matrix2::new(a.var_at(p), 0.0, 0.0, b.var_at(p)) * ni.transpose();
    Some((p, cov))
}

/// Corners of a square-like dark component.
fn measure_square(
    img: &GreyImage,
    enc: Encoding,
    noise: f64,
    c: &Component,
    runs: impl Iterator<Item = Run>,
    inv: &Matrix2<f64>,
) -> Option<SquareOutline> {
    // Coarse corners: the farthest pixels in whitened space, one per quadrant of angle around
    // the farthest one. Angles in image space are not 90 degrees apart under perspective;
    // sectors are taken in whitened space, where an affine square is a square.
    let l = nalgebra::Cholesky::new(*inv)?.l();
    let mut pts: Vec<(f64, f64, Point2<f64>)> = Vec::new();
    for run in runs {
        let y = run.y as usize;
        for x in run.x0 as usize..=run.x1 as usize {
            let d = Vector2::new(x as f64 - c.mean.x, y as f64 - c.mean.y);
            let u = l.transpose() * d;
            pts.push((u.norm_squared(), u.y.atan2(u.x), Point2::new(x as f64, y as f64)));
        }
    }
    let a0 = pts.iter().max_by(|a, b| a.0.total_cmp(&b.0))?.1;
    let mut coarse = [Point2::origin(); 4];
    for (k, slot) in coarse.iter_mut().enumerate() {
        let target = a0 + k as f64 * std::f64::consts::FRAC_PI_2;
        let best = pts
            .iter()
            .filter(|p| {
                let da = (p.1 - target + std::f64::consts::PI).rem_euclid(std::f64::consts::TAU)
                    - std::f64::consts::PI;
                da.abs() < 0.7
            })
            .max_by(|a, b| a.0.total_cmp(&b.0))?;
        *slot = best.2;
    }
    // Sides k: coarse[k] -> coarse[k+1]; profiles along the outward normal.
    let mut lines = Vec::with_capacity(4);
    // Per side: mid level, outward normal and profile reach; edge widths of all sides.
    let mut sides = Vec::with_capacity(4);
    let mut widths = Vec::new();
    for k in 0..4 {
        let (p, q) = (coarse[k], coarse[(k + 1) % 4]);
        let len = (q - p).norm();
        if len < 4.0 {
            return None;
        }
        let t = (q - p) / len;
        let mut n = Vector2::new(-t.y, t.x);
        let mid = Point2::from((p.coords + q.coords) * 0.5);
        if n.dot(&(mid - c.mean)) < 0.0 {
            n = -n;
        }
        let reach = (0.2 * len).clamp(2.0, 6.0);
        let count = (2.0 * len).floor().max(3.0) as usize;
        let mut edge = Vec::with_capacity(count);
        let (mut ink, mut ground) = (Vec::with_capacity(count), Vec::with_capacity(count));
        for i in 0..count {
            let s = 0.1 * len + 0.8 * len * (i as f64 + 0.5) / count as f64;
            let base = p + t * s;
            if let Some((off, lo, hi)) = profile_crossing(img, enc, base, n, reach, None) {
                edge.push(base + n * off);
                ink.push(lo);
                ground.push(hi);
            }
        }
        // A second pass along the fitted line removes the coarse line's pixel-level error, at
        // the side's mean mid level.
        let (lo, hi) = (median(&mut ink)?, median(&mut ground)?);
        let level = enc.between(lo, hi, 0.5);
        let first = fit_line(&edge)?;
        let (lp, ld) = (first.point, first.dir);
        let mut n2 = Vector2::new(-ld.y, ld.x);
        if n2.dot(&n) < 0.0 {
            n2 = -n2;
        }
        let mut edge2 = Vec::with_capacity(count);
        for e in &edge {
            let base = lp + ld * ld.dot(&(e - lp));
            if let Some((off, _, _)) = profile_crossing(img, enc, base, n2, reach, Some(level)) {
                edge2.push(base + n2 * off);
            }
        }
        // Crossings closer than about 2 px share pixels through the interpolation kernel, so
        // the points are not independent: the fit's variances count one point per 2 px.
        let mut line = fit_line(&edge2)?;
        let shared = (2.0 / (0.8 * len / count as f64)).max(1.0);
        line.var_offset *= shared;
        line.var_angle *= shared;
        // Edge width: the 25 % to 75 % rise of a Gaussian-blurred step is 1.349 sigma.
        let step = (edge2.len() / 8).max(1);
        for e in edge2.iter().step_by(step) {
            let at =
                |f: f64| profile_crossing(img, enc, *e, n2, reach, Some(enc.between(lo, hi, f)));
            if let (Some((a, _, _)), Some((b, _, _))) = (at(0.25), at(0.75)) {
                widths.push((b - a).abs() / 1.349);
            }
        }
        sides.push((n2, reach));
        lines.push(line);
    }
    let corners_of = |lines: &[FittedLine]| -> Option<([Point2<f64>; 4], f64)> {
        let mut corners = [Point2::origin(); 4];
        let mut var = 0.0f64;
        // Per-axis variance of a corner, averaged over the four.
        for k in 0..4 {
            let (p, cov) = intersect(&lines[(k + 3) % 4], &lines[k])?;
            corners[k] = p;
            if (corners[k] - coarse[k]).norm() > 4.0 {
                return None;
            }
            var += 0.125 * cov.trace();
        }
        Some((corners, var))
    };
    let (mut corners, mut var) = corners_of(&lines)?;
    // Under a strong blur two things bias the first lines. A blurred corner's mid-level outline
    // is round for about 2.5 sigma along each side (there it is off the straight side by 0.02
    // sigma), and the coarse corners that set the first sampling interval do not sit
    // symmetrically on the round, so the lines tilt. And the ends of profiles centred on the
    // coarse line, a pixel or two off the edge, are not yet on the ink and ground plateaus, so
    // the mid level is off by up to 3 % of the contrast, which moves the crossing by 0.2 px at
    // sigma 2.5. The final fit samples each side between the fitted corners, 2.5 blur sigmas
    // (0.1 of the side at least) from each end, at a mid level from the ink and ground 3 sigmas
    // + 1 px either side of the fitted line (at most 0.3 of the square's extent across the
    // side: the gap to the next square and the mark inside are farther), their lower and upper
    // quartiles, since a mark or
    // a neighbour lightens or darkens a part of them.
    if let Some(blur) = median(&mut widths) {
        let refit: Option<Vec<FittedLine>> = (0..4)
            .map(|k| {
                let (a, b) = (corners[k], corners[(k + 1) % 4]);
                let len = (b - a).norm();
                let margin = (2.5 * blur).max(0.1 * len);
                let (n2, reach) = sides[k];
                let t = (b - a) / len;
                let count = (2.0 * (len - 2.0 * margin)).floor() as usize;
                if count < 6 {
                    return None;
                }
                let bases: Vec<Point2<f64>> = (0..count)
                    .map(|i| {
                        a + t * (margin + (len - 2.0 * margin) * (i as f64 + 0.5) / count as f64)
                    })
                    .collect();
                // The square's extent across this side: the mean of the two adjacent sides.
                let across = 0.5
                    * ((corners[k] - corners[(k + 3) % 4]).norm()
                        + (corners[(k + 2) % 4] - corners[(k + 1) % 4]).norm());
                let d = (3.0 * blur + 1.0).max(reach).min(0.3 * across);
                let mut ink: Vec<f64> = bases
                    .iter()
                    .map(|p| sample_cubic(img, p.x - d * n2.x, p.y - d * n2.y))
                    .collect();
                let mut ground: Vec<f64> = bases
                    .iter()
                    .map(|p| sample_cubic(img, p.x + d * n2.x, p.y + d * n2.y))
                    .collect();
                let quartile = |v: &mut Vec<f64>, q: f64| -> f64 {
                    v.sort_by(f64::total_cmp);
                    v[((v.len() - 1) as f64 * q).round() as usize]
                };
                // Noise moves the quartiles by 0.6745 sigma, outward on both sides; that
                // cancels in a mean of stored levels but not midway in light, so it is taken
                // off first.
                let q = 0.6745 * noise;
                let level =
                    enc.between(quartile(&mut ink, 0.25) + q, quartile(&mut ground, 0.75) - q, 0.5);
                let pts: Vec<Point2<f64>> = bases
                    .iter()
                    .filter_map(|&base| {
                        profile_crossing(img, enc, base, n2, reach, Some(level))
                            .map(|(o, _, _)| base + n2 * o)
                    })
                    .collect();
                let mut line = fit_line(&pts)?;
                let shared = (2.0 / ((len - 2.0 * margin) / count as f64)).max(1.0);
                line.var_offset *= shared;
                line.var_angle *= shared;
                Some(line)
            })
            .collect();
        if let Some((c, v)) = refit.as_deref().and_then(corners_of) {
            (corners, var) = (c, v);
        }
    }
    // Clockwise in the image (y down: increasing atan2 angle), starting nearest the top-left.
    let centre = corners.iter().fold(Vector2::zeros(), |a, p| a + p.coords) / 4.0;
    corners.sort_by(|a, b| {
        (a.y - centre.y).atan2(a.x - centre.x).total_cmp(&(b.y - centre.y).atan2(b.x - centre.x))
    });
    let start = (0..4)
        .min_by(|&i, &j| (corners[i].x + corners[i].y).total_cmp(&(corners[j].x + corners[j].y)))?;
    corners.rotate_left(start);
    let sigma = var.sqrt();
    Some(SquareOutline { corners, sigma: if sigma.is_finite() { sigma } else { f64::MAX } })
}

/// The number of dark and light 8-connected regions of the threshold, of any size.
pub(crate) fn count_regions(img: &GreyImage, opts: &DetectorOptions) -> usize {
    let (runs, row_start) = threshold_runs(img, opts.threshold_radius, opts.min_contrast / 4.0);
    label_runs(&runs, &row_start).1
}

/// Round blobs (both inks) and square outlines; `noise` is the image noise (normalised grey).
pub(crate) fn detect_blobs(
    img: &GreyImage,
    opts: &DetectorOptions,
    want_squares: bool,
    dark_dots: bool,
    noise: f64,
) -> (Vec<Blob>, Vec<SquareOutline>) {
    let (w, h) = (img.width(), img.height());
    if w < 8 || h < 8 {
        return (Vec::new(), Vec::new());
    }
    let (runs, comps) = components(img, opts);
    let mut blobs = Vec::new();
    let mut squares = Vec::new();
    for c in &comps.list {
        // The shape test sees the filled outline: a mark inside a square leaves a hole that
        // widens the second moments and would make a tilted square pass for round.
        let (filled, spans) = row_hull(c, comps.runs_of(c, &runs));
        let Some((r, inv)) = max_whitened_radius(&filled, &spans) else { continue };
        let square_like = want_squares && c.ink == Ink::Dark && r < 3.0 && filled.area >= 16.0;
        // A blur of a tenth of the side or more rounds a square's corners to a whitened radius
        // of 2.05 to 2.2 (a disc's is 2, a sharp square's sqrt(6) = 2.45). When no dot grid is
        // wanted such a dark blob is tried as a square first: its outline still varies with
        // angle (nearest side point at 1.2 times less than the farthest corner or more;
        // pixelised discs 1.1 to 1.25), and what fails the square fit is measured as a dot.
        let rounded = square_like
            && !dark_dots
            && (2.0..2.2).contains(&r)
            && r >= 1.2 * min_whitened_radius(&filled, &spans, &inv);
        if rounded {
            match measure_square(img, opts.encoding, noise, &filled, spans.into_iter(), &inv) {
                Some(s) => squares.push(s),
                None => blobs.extend(measure_dot(img, c, noise)),
            }
        } else if r < 2.2 {
            blobs.extend(measure_dot(img, c, noise));
        } else if square_like {
            squares.extend(measure_square(
                img,
                opts.encoding,
                noise,
                &filled,
                spans.into_iter(),
                &inv,
            ));
        }
    }
    (blobs, squares)
}

/// Points bucketed on a uniform grid, for neighbour queries in time linear in the count.
struct Grid {
    cell: f64,
    buckets: std::collections::HashMap<(i64, i64), Vec<usize>>,
}

impl Grid {
    fn new(points: impl Iterator<Item = Point2<f64>>, cell: f64) -> Self {
        let mut buckets: std::collections::HashMap<(i64, i64), Vec<usize>> = Default::default();
        for (i, p) in points.enumerate() {
            buckets
                .entry(((p.x / cell).floor() as i64, (p.y / cell).floor() as i64))
                .or_default()
                .push(i);
        }
        Grid { cell, buckets }
    }

    /// Indices of the points within `r` of `p` (candidates: the caller checks distances).
    fn near(&self, p: Point2<f64>, r: f64) -> Vec<usize> {
        let k = (r / self.cell).ceil() as i64;
        let (cx, cy) = ((p.x / self.cell).floor() as i64, (p.y / self.cell).floor() as i64);
        let mut out = Vec::new();
        for dy in -k..=k {
            for dx in -k..=k {
                if let Some(v) = self.buckets.get(&(cx + dx, cy + dy)) {
                    out.extend_from_slice(v);
                }
            }
        }
        out.sort_unstable();
        out
    }
}

/// Splits round blobs into dots and marks (see [`crate::detect`]).
pub(crate) fn classify(
    blobs: Vec<Blob>,
    squares: &[SquareOutline],
    corners: &[Point2<f64>],
) -> (Vec<Dot>, Vec<Mark>) {
    let mut dots = Vec::new();
    let mut marks = Vec::new();
    let blob_grid = Grid::new(blobs.iter().map(|b| b.dot.centre), 32.0);
    let corner_grid = Grid::new(corners.iter().copied(), 32.0);
    let square_grid = Grid::new(
        squares.iter().map(|s| {
            Point2::from(s.corners.iter().fold(Vector2::zeros(), |a, p| a + p.coords) / 4.0)
        }),
        64.0,
    );
    for (i, b) in blobs.iter().enumerate() {
        let c = b.dot.centre;
        let mark = |b: &Blob| Mark { centre: b.dot.centre, diameter: b.diameter, ink: b.dot.ink };
        // Inside a square: the square grid's mark.
        let reach = squares.iter().next().map_or(0.0, |_| 4.0 * b.diameter + 64.0);
        let in_square =
            square_grid.near(c, reach).into_iter().any(|j| inside_quad(&squares[j].corners, c));
        // A checker mark sits at a cell centre, 0.707 cell from four corners.
        let r = 2.5 * b.diameter;
        let near_corner = corner_grid.near(c, r).into_iter().any(|j| (corners[j] - c).norm() < r);
        // A dot grid's mark is a small dot among dots 1.8 times larger or more: the four
        // nearest of its ink within 8 diameters.
        let mut near: Vec<(f64, f64)> = blob_grid
            .near(c, 8.0 * b.diameter)
            .into_iter()
            .filter(|&j| j != i && blobs[j].dot.ink == b.dot.ink)
            .map(|j| ((blobs[j].dot.centre - c).norm(), blobs[j].diameter))
            .filter(|n| n.0 < 8.0 * b.diameter)
            .collect();
        near.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.total_cmp(&b.1)));
        near.truncate(4);
        let small = near.len() >= 2 && {
            let mut d: Vec<f64> = near.iter().map(|n| n.1).collect();
            d.sort_by(f64::total_cmp);
            d[d.len() / 2] > 1.8 * b.diameter && near[0].0 < 4.0 * d[d.len() / 2]
        };
        if in_square || near_corner || small {
            marks.push(mark(b));
        } else {
            dots.push(b.dot);
        }
    }
    (dots, marks)
}

fn inside_quad(q: &[Point2<f64>; 4], p: Point2<f64>) -> bool {
    let mut sign = 0.0;
    for k in 0..4 {
        let (a, b) = (q[k], q[(k + 1) % 4]);
        let cr = (b.x - a.x) * (p.y - a.y) - (b.y - a.y) * (p.x - a.x);
        if sign == 0.0 {
            sign = cr.signum();
        } else if cr.signum() != sign {
            return false;
        }
    }
    true
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::DetectorOptions;
    use facetcal_model::PatternKind;

    /// Abramowitz and Stegun, Handbook of Mathematical Functions, formula 7.1.26
    /// (absolute error at most 1.5e-7).
    fn erf(x: f64) -> f64 {
        let t = 1.0 / (1.0 + 0.327_591_1 * x.abs());
        let poly =
            ((((1.061_405_429 * t - 1.453_152_027) * t + 1.421_413_741) * t - 0.284_496_736) * t
                + 0.254_829_592)
                * t;
        let y = 1.0 - poly * (-x * x).exp();
        if x >= 0.0 { y } else { -y }
    }

    /// The expanded weights against the kernel as R. Keys gives it ("Cubic convolution
    /// interpolation for digital image processing", IEEE TASSP 29(6), 1981, eq. 15 with
    /// a = -0.5): `1.5|s|^3 - 2.5|s|^2 + 1` for `|s| <= 1`, `-0.5|s|^3 + 2.5|s|^2 - 4|s| + 2`
    /// for `1 < |s| < 2`; they also sum to 1.
    #[test]
    fn keys_weights_are_the_papers_kernel() {
        let kernel = |s: f64| {
            let s = s.abs();
            if s <= 1.0 {
                1.5 * s.powi(3) - 2.5 * s * s + 1.0
            } else if s < 2.0 {
                -0.5 * s.powi(3) + 2.5 * s * s - 4.0 * s + 2.0
            } else {
                0.0
            }
        };
        for i in 0..=100 {
            let t = i as f64 / 100.0 * 0.999;
            let w = keys_weights(t);
            let k = [kernel(t + 1.0), kernel(t), kernel(1.0 - t), kernel(2.0 - t)];
            for (a, b) in w.iter().zip(k) {
                assert!((a - b).abs() < 1e-14, "t {t}: {w:?} vs {k:?}");
            }
            assert!((w.iter().sum::<f64>() - 1.0).abs() < 1e-14);
        }
    }

    /// A 3 x 3 grid of dark squares (side `side` px, gaps 0.625 of the side as on the bundled
    /// square grid) blurred by a Gaussian of `sigma` px and integrated over unit pixels
    /// (variance 1/12 added): a box blurred by a Gaussian is a product of error-function
    /// differences (common practice), so every level is exact to the formula's 1.5e-7.
    /// Returns the image and the centre square's top-left corner.
    fn blurred_squares(side: f64, sigma: f64) -> (GreyImage, Point2<f64>) {
        let (w, h) = (260usize, 260usize);
        let s = (sigma * sigma + 1.0 / 12.0).sqrt() * std::f64::consts::SQRT_2;
        let origin = Point2::new(110.3, 115.7);
        let pitch = 1.625 * side;
        let mut img = GreyImage::new(w, h);
        for y in 0..h {
            for x in 0..w {
                let mut v = 0.9;
                for i in -1..=1 {
                    for j in -1..=1 {
                        let x0 = origin.x + i as f64 * pitch;
                        let y0 = origin.y + j as f64 * pitch;
                        let fx = 0.5 * (erf((x as f64 - x0) / s) - erf((x as f64 - x0 - side) / s));
                        let fy = 0.5 * (erf((y as f64 - y0) / s) - erf((y as f64 - y0 - side) / s));
                        v -= 0.8 * fx * fy;
                    }
                }
                img.data_mut()[y * w + x] = v as f32;
            }
        }
        (img, origin)
    }

    /// The corners of blurred squares: within 0.025 px at sigma 1 (measured 0.020: the whole
    /// square shifted by (0.014, -0.014)) and within 0.01 and 0.025 px at sigma 2.5 px for
    /// sides of 30 and 24 px (measured 0.006 and 0.017), where the blur rounds the corners
    /// over a third of the side (before the final fit between the fitted corners at a mid
    /// level taken off the plateaus, sigma 2.5 gave 0.18 px).
    #[test]
    fn blurred_square_corners_are_exact() {
        for (side, sigma, tol) in [(30.0, 1.0, 0.025), (30.0, 2.5, 0.01), (24.0, 2.5, 0.025)] {
            let (img, origin) = blurred_squares(side, sigma);
            let opts = DetectorOptions::for_kind(PatternKind::SquareGrid);
            let (_, squares) = detect_blobs(&img, &opts, true, false, 0.0);
            assert_eq!(squares.len(), 9, "side {side} sigma {sigma}");
            let centre = squares
                .iter()
                .find(|q| (q.corners[0] - origin).norm() < 3.0)
                .expect("the centre square");
            let truth = [(0.0, 0.0), (side, 0.0), (side, side), (0.0, side)];
            for (c, (dx, dy)) in centre.corners.iter().zip(truth) {
                let e = (c - Point2::new(origin.x + dx, origin.y + dy)).norm();
                assert!(e < tol, "side {side} sigma {sigma}: corner {c:?} off by {e}");
            }
        }
    }
}
