//! Checkerboard X-junctions: a cheap saddle response on a smoothed image, non-maximum
//! suppression, a ring test that keeps only point-symmetric four-sector junctions, and a
//! gradient-based subpixel location.
//!
//! 1. Response. On the image smoothed with `sigma_d`, the Hessian `H` from central differences;
//!    `R = sxy^2 - sxx syy = -det H`, positive at saddle points (an X-junction is a saddle of the
//!    blurred image), negative at blobs such as the face-code marks, near zero along edges.
//! 2. Candidates: 3 x 3 local maxima of `R` above a threshold set by the smallest contrast
//!    accepted and by the measured image noise.
//! 3. Ring test (in the spirit of S. Bennett and J. Lasenby, "ChESS - Quick and robust detection
//!    of chess-board features", CVIU 118, 2014): 16 samples on circles around the candidate must
//!    change sign against their mean exactly four times (two dark, two light sectors) and be
//!    point-symmetric, `sum |v(t) - v(t + pi)| / sum |v(t) - mean| < max_asymmetry`, because
//!    a checker corner seen through any affine map satisfies `I(c + d) = I(c - d)`.
//!    The saddle must also be balanced: the eigenvalues of the smoothed Hessian at the
//!    junction, of opposite signs, have a magnitude ratio `tan^2(alpha / 2)` for edges meeting
//!    at angle `alpha`; the saddle between a face-code mark and a cell edge is far flatter
//!    along the strip than across it.
//! 4. Subpixel location: Newton steps to the saddle point of the image smoothed with
//!    `refine_sigma`, evaluated at subpixel points with sampled continuous Gaussian kernels
//!    (see the `refine` function).

use nalgebra::{Matrix2, Point2, Vector2};

use crate::features::CheckerCorner;
use crate::filter::{RowSmoother, estimate_noise, gaussian_kernel};
use crate::image::{GreyImage, bilinear};
use crate::options::DetectorOptions;

const RING_SAMPLES: usize = 16;
/// Largest difference of the mean levels of opposite ring sectors, over the amplitude.
const MAX_SECTOR_MISMATCH: f64 = 0.25;

/// Working buffers of the checker path, reusable across images. Every buffer holds a few rows,
/// never a whole image.
#[derive(Default)]
pub struct CheckerWorkspace {
    ring: Vec<f32>,
    rows: Vec<f32>,
    patch: Vec<f32>,
}

/// Half-size of the smoothed patch around a candidate: the rings (outer radius at most
/// `ring_radius`, around points up to 1.5 px from the candidate) and their bilinear neighbours.
fn patch_reach(ring_radius: f64) -> isize {
    (ring_radius + 1.5 + 2.0).ceil() as isize
}

/// The smoothed image seen through the ring of rows the scan keeps: rows within the patch
/// reach of the candidate being tested are present.
struct Patch<'a> {
    ring: &'a [f32],
    slots: usize,
    w: usize,
    h: usize,
}

impl Patch<'_> {
    /// The value at the nearest pixel inside the image, as [`GreyImage::at_clamped`].
    fn at_clamped(&self, x: isize, y: isize) -> f32 {
        let xc = x.clamp(0, self.w as isize - 1) as usize;
        let yc = y.clamp(0, self.h as isize - 1) as usize;
        self.ring[(yc & (self.slots - 1)) * self.w + xc]
    }

    /// Bilinear interpolation, as [`GreyImage::sample`].
    fn sample(&self, x: f64, y: f64) -> f64 {
        bilinear(x, y, |xi, yi| self.at_clamped(xi, yi))
    }
}

/// What the ring test learns about a junction.
#[derive(Clone, Copy, Debug)]
struct Ring {
    /// Light mean minus dark mean of the samples.
    amplitude: f64,
    /// The four sign changes, angles in `[0, 2 pi)`, increasing.
    crossings: [f64; 4],
    /// Whether the sector from `crossings[0]` to `crossings[1]` is dark.
    first_dark: bool,
    asymmetry: f64,
    /// Largest difference of opposite sector means over the amplitude.
    sector_mismatch: f64,
}

fn ring(img: &Patch, c: Point2<f64>, r: f64) -> Option<Ring> {
    let mut v = [0.0f64; RING_SAMPLES];
    let step = std::f64::consts::TAU / RING_SAMPLES as f64;
    for (k, s) in v.iter_mut().enumerate() {
        let t = k as f64 * step;
        *s = img.sample(c.x + r * t.cos(), c.y + r * t.sin());
    }
    let mean = v.iter().sum::<f64>() / RING_SAMPLES as f64;
    let mut crossings = [0.0; 4];
    let mut n = 0;
    for k in 0..RING_SAMPLES {
        let a = v[k] - mean;
        let b = v[(k + 1) % RING_SAMPLES] - mean;
        if (a > 0.0) != (b > 0.0) {
            if n == 4 {
                return None;
            }
            let f = if (a - b).abs() > 0.0 { a / (a - b) } else { 0.5 };
            crossings[n] = (k as f64 + f) * step;
            n += 1;
        }
    }
    if n != 4 {
        return None;
    }
    let (mut hi, mut nh, mut lo, mut nl) = (0.0, 0, 0.0, 0);
    let mut dev = 0.0;
    let mut asym = 0.0;
    for k in 0..RING_SAMPLES {
        dev += (v[k] - mean).abs();
        asym += (v[k] - v[(k + RING_SAMPLES / 2) % RING_SAMPLES]).abs();
        if v[k] > mean {
            hi += v[k];
            nh += 1;
        } else {
            lo += v[k];
            nl += 1;
        }
    }
    if nh == 0 || nl == 0 || dev <= 0.0 {
        return None;
    }
    let amplitude = hi / nh as f64 - lo / nl as f64;
    // Mean of each of the four sectors: opposite sectors of a checker corner have one ink.
    let mut sm = [0.0f64; 4];
    let mut sn = [0usize; 4];
    for (k, &val) in v.iter().enumerate() {
        let t = k as f64 * step;
        let sector = crossings.iter().filter(|&&c| c <= t).count() % 4;
        sm[sector] += val;
        sn[sector] += 1;
    }
    let mut means = [0.0; 4];
    for i in 0..4 {
        if sn[i] == 0 {
            return None;
        }
        means[i] = sm[i] / sn[i] as f64;
    }
    let sector_mismatch =
        (means[0] - means[2]).abs().max((means[1] - means[3]).abs()) / amplitude.max(1e-12);
    // The sample in the middle of the first sector tells its ink.
    let mid = 0.5 * (crossings[0] + crossings[1]);
    let first_dark = img.sample(c.x + r * mid.cos(), c.y + r * mid.sin()) < mean;
    Some(Ring { amplitude, crossings, first_dark, asymmetry: asym / dev, sector_mismatch })
}

/// The two edge directions from a ring, by the convention of [`CheckerCorner::edges`].
fn edges_from_ring(ring: &Ring) -> [Vector2<f64>; 2] {
    let pi = std::f64::consts::PI;
    // Opposite crossings belong to one edge line: average their directions modulo pi.
    let line = |a: f64, b: f64| {
        let (a2, b2) = (2.0 * a, 2.0 * b);
        let m = 0.5 * (a2.sin() + b2.sin()).atan2(a2.cos() + b2.cos());
        m.rem_euclid(pi)
    };
    let e0 = line(ring.crossings[0], ring.crossings[2]);
    let e1 = line(ring.crossings[1], ring.crossings[3]);
    // Sectors alternate; the sector swept from crossing 0 to crossing 1 (increasing angle) has
    // ink `first_dark`, and so has the one from crossing 2 to crossing 3. Of the two edge lines,
    // the dark sector lies between angle lo and hi (lo < hi < lo + pi) or between hi and lo + pi.
    let (lo, hi) = if e0 <= e1 { (e0, e1) } else { (e1, e0) };
    // Middle of the sector between the lines at lo and hi, and whether it is dark.
    let mid = 0.5 * (lo + hi);
    let in_first = |t: f64| {
        let t = t.rem_euclid(std::f64::consts::TAU);
        let (a, b) = (ring.crossings[0], ring.crossings[1]);
        let (c, d) = (ring.crossings[2], ring.crossings[3]);
        (t >= a && t < b) || (t >= c && t < d)
    };
    let dark_between = in_first(mid) == ring.first_dark;
    let dir = |t: f64| Vector2::new(t.cos(), t.sin());
    if dark_between { [dir(lo), dir(hi)] } else { [dir(hi), dir(lo)] }
}

/// The Gaussian-smoothed image and its first and second derivatives at a subpixel point,
/// `S(c) = sum_p I(p) G(c - p)` with the continuous Gaussian `G` of deviation `sigma` sampled at
/// the pixel offsets: for `sigma >= 1` the sampling changes the result by far less than the
/// noise (its spectrum at one cycle per pixel is `exp(-2 pi^2 sigma^2)`), so the smoothed image
/// is evaluated exactly at any point without interpolation. Separable: row sums first.
struct Local {
    gx: f64,
    gy: f64,
    hxx: f64,
    hxy: f64,
    hyy: f64,
    /// `sum_p (dG/dx)^2`, `sum (dG/dx)(dG/dy)`, `sum (dG/dy)^2`: the gradient's noise gain.
    kxx: f64,
    kxy: f64,
    kyy: f64,
}

fn local_derivatives(img: &GreyImage, c: Point2<f64>, sigma: f64) -> Option<Local> {
    let (w, h) = (img.width() as isize, img.height() as isize);
    // Support 5 sigma: a truncation at 3 sigma moves with the subpixel phase of `c` and costs
    // a few hundredths of a pixel; at 5 sigma the cut tail weighs 4e-6.
    let r = 5.0 * sigma;
    let x0 = ((c.x - r).ceil() as isize).max(0);
    let x1 = ((c.x + r).floor() as isize).min(w - 1);
    let y0 = ((c.y - r).ceil() as isize).max(0);
    let y1 = ((c.y + r).floor() as isize).min(h - 1);
    if x1 - x0 < 2 || y1 - y0 < 2 {
        return None;
    }
    let s2 = sigma * sigma;
    let norm = 1.0 / (std::f64::consts::TAU * s2);
    // 1-D factors at offsets t = c - p: g = exp(-t^2 / 2 s^2), g' = -t / s^2 g,
    // g'' = (t^2 / s^2 - 1) / s^2 g.
    let factors = |lo: isize, hi: isize, centre: f64| -> Vec<[f64; 3]> {
        (lo..=hi)
            .map(|p| {
                let t = centre - p as f64;
                let g = (-t * t / (2.0 * s2)).exp();
                [g, -t / s2 * g, (t * t / s2 - 1.0) / s2 * g]
            })
            .collect()
    };
    let fx = factors(x0, x1, c.x);
    let fy = factors(y0, y1, c.y);
    let d = img.data();
    let wu = img.width();
    let mut out =
        Local { gx: 0.0, gy: 0.0, hxx: 0.0, hxy: 0.0, hyy: 0.0, kxx: 0.0, kxy: 0.0, kyy: 0.0 };
    let (mut sx0, mut sx1) = (0.0, 0.0);
    for v in &fx {
        sx0 += v[0] * v[0];
        sx1 += v[1] * v[1];
    }
    let (mut sy0, mut sy1) = (0.0, 0.0);
    for v in &fy {
        sy0 += v[0] * v[0];
        sy1 += v[1] * v[1];
    }
    let mut cross_x = 0.0;
    let mut cross_y = 0.0;
    for v in &fx {
        cross_x += v[0] * v[1];
    }
    for v in &fy {
        cross_y += v[0] * v[1];
    }
    for (j, vy) in fy.iter().enumerate() {
        let row = &d[(y0 as usize + j) * wu + x0 as usize..=(y0 as usize + j) * wu + x1 as usize];
        let (mut r0, mut r1, mut r2) = (0.0, 0.0, 0.0);
        for (&px, vx) in row.iter().zip(&fx) {
            let p = px as f64;
            r0 += p * vx[0];
            r1 += p * vx[1];
            r2 += p * vx[2];
        }
        out.gx += r1 * vy[0];
        out.gy += r0 * vy[1];
        out.hxx += r2 * vy[0];
        out.hyy += r0 * vy[2];
        out.hxy += r1 * vy[1];
    }
    let n2 = norm * norm;
    out.gx *= norm;
    out.gy *= norm;
    out.hxx *= norm;
    out.hxy *= norm;
    out.hyy *= norm;
    out.kxx = n2 * sx1 * sy0;
    out.kyy = n2 * sx0 * sy1;
    out.kxy = n2 * cross_x * cross_y;
    Some(out)
}

/// Subpixel saddle point: Newton steps `c <- c - H^-1 grad S` on the Gaussian-smoothed image
/// evaluated at `c` itself (the Taylor-expansion location of D. Chen and G. Zhang, "A new
/// sub-pixel detector for X-corners in camera calibration targets", WSCG 2005; the smoothed
/// saddle of R. Lucchese and S. K. Mitra, "Using saddle points for subpixel feature detection
/// in camera calibration targets", APCCAS 2002). A junction seen through an affine map is
/// point-symmetric, `I(c + d) = I(c - d)`, so its smoothed gradient vanishes exactly at `c`
/// whatever the PSF. Returns the point and its covariance `sn^2 H^-1 K H^-1` (`K` the noise
/// gain of the gradient).
fn refine(
    img: &GreyImage,
    start: Point2<f64>,
    sigma: f64,
    max_shift: f64,
    noise: f64,
) -> Option<(Point2<f64>, Matrix2<f64>, f64)> {
    let mut c = start;
    let mut last = None;
    for _ in 0..10 {
        let l = local_derivatives(img, c, sigma)?;
        let hm = Matrix2::new(l.hxx, l.hxy, l.hxy, l.hyy);
        let det = l.hxx * l.hyy - l.hxy * l.hxy;
        if det.is_nan() || det >= 0.0 {
            return None;
        }
        let hi = hm.try_inverse()?;
        let step: Vector2<f64> = -(hi * Vector2::new(l.gx, l.gy));
        c += step;
        if !(c.x.is_finite() && c.y.is_finite()) || (c - start).norm() > max_shift {
            return None;
        }
        last = Some((hi, l));
        if step.norm() < 1e-5 {
            break;
        }
    }
    let (hi, l) = last?;
    let k = Matrix2::new(l.kxx, l.kxy, l.kxy, l.kyy);
    // Eigenvalues of H: opposite signs at a saddle; |small| / |large| = tan^2(alpha / 2) for
    // straight edges meeting at angle alpha.
    let m = 0.5 * (l.hxx + l.hyy);
    let q = (0.25 * (l.hxx - l.hyy).powi(2) + l.hxy * l.hxy).sqrt();
    let (e1, e2) = ((m + q).abs(), (m - q).abs());
    let balance = e1.min(e2) / e1.max(e2).max(1e-300);
    Some((c, noise * noise * hi * k * hi, balance))
}

/// Detects checker X-junctions. `ws` holds reusable buffers.
pub fn detect_checker_corners_with(
    img: &GreyImage,
    opts: &DetectorOptions,
    ws: &mut CheckerWorkspace,
) -> Vec<CheckerCorner> {
    detect_with_noise(img, opts, ws, estimate_noise(img))
}

/// The checker path with the image noise `sn` (normalised grey) already measured.
pub(crate) fn detect_with_noise(
    img: &GreyImage,
    opts: &DetectorOptions,
    ws: &mut CheckerWorkspace,
    sn: f64,
) -> Vec<CheckerCorner> {
    let (w, h) = (img.width(), img.height());
    if w < 5 || h < 5 {
        return Vec::new();
    }
    let sd = opts.checker_smoothing;

    // Threshold. Contrast part: a right-angle junction of contrast C blurred to total standard
    // deviation st has sxy = C / (pi st^2) at its centre; we accept down to min_contrast with a
    // PSF up to 2.5 px and edges meeting at 45 degrees (a factor 1/2 in R).
    let st2 = sd * sd + 2.5 * 2.5;
    let r_contrast = 0.5 * (opts.min_contrast / (std::f64::consts::PI * st2)).powi(2);
    // Noise part: the standard deviations of sxy and sxx for white noise of deviation sn.
    let k = gaussian_kernel(sd);
    let d1: Vec<f64> = (0..k.len())
        .map(|i| {
            let a = if i + 1 < k.len() { k[i + 1] } else { 0.0 } as f64;
            let b = if i >= 1 { k[i - 1] } else { 0.0 } as f64;
            0.5 * (a - b)
        })
        .collect();
    let d2: Vec<f64> = (0..k.len())
        .map(|i| {
            let a = if i + 1 < k.len() { k[i + 1] } else { 0.0 } as f64;
            let b = if i >= 1 { k[i - 1] } else { 0.0 } as f64;
            a + b - 2.0 * k[i] as f64
        })
        .collect();
    let e_d1: f64 = d1.iter().map(|v| v * v).sum();
    let e_d2: f64 = d2.iter().map(|v| v * v).sum();
    let e_g: f64 = k.iter().map(|&v| (v as f64) * (v as f64)).sum();
    let var_xy = sn * sn * e_d1 * e_d1;
    let var_xx = sn * sn * e_d2 * e_g;
    let r_noise = opts.noise_factor * opts.noise_factor * (var_xy + var_xx);
    let thr = r_contrast.max(r_noise) as f32;

    let rr = opts.ring_radius;
    let mut test = |smooth: &Patch, x: usize, y: usize| {
        let p = Point2::new(x as f64, y as f64);
        // Near the border the rings shrink so that features 3 px inside are still found.
        let border = (x as f64).min(y as f64).min((w - 1 - x) as f64).min((h - 1 - y) as f64);
        let r_outer = rr.min(border - 0.5);
        if r_outer < 2.0 {
            return None;
        }
        let pre = ring(smooth, p, r_outer)?;
        if pre.amplitude < 0.5 * opts.min_contrast {
            return None;
        }
        let (c, cov, balance) = refine(img, p, opts.refine_sigma, 1.5, sn)?;
        // A face-code mark next to a cell edge makes a saddle too (the dark strip between them),
        // but a strongly unbalanced one.
        if balance < opts.min_saddle_balance {
            return None;
        }
        let r1 = ring(smooth, c, r_outer)?;
        let r2 = ring(smooth, c, 0.6 * r_outer)?;
        if r1.asymmetry > opts.max_asymmetry || r2.asymmetry > opts.max_asymmetry {
            return None;
        }
        // Crossing edges of unrelated objects (overlapping clutter) make four sectors of four
        // different levels; a checker corner has two levels.
        if r1.sector_mismatch > MAX_SECTOR_MISMATCH || r2.sector_mismatch > MAX_SECTOR_MISMATCH {
            return None;
        }
        // The ring's light-minus-dark mean is about 0.8 of the contrast for a sharp corner.
        if r1.amplitude < 0.75 * opts.min_contrast {
            return None;
        }
        let sigma = (0.5 * (cov[(0, 0)] + cov[(1, 1)])).max(0.0).sqrt();
        Some(CheckerCorner {
            position: c,
            sigma: if sigma.is_finite() { sigma } else { f64::MAX },
            strength: r1.amplitude,
            edges: edges_from_ring(&r1),
        })
    };
    let mut cands = Vec::new();
    let mut out: Vec<CheckerCorner> = Vec::new();
    let done =
        scan(img, sd, thr, rr, ws, None, opts.max_candidates, &mut cands, &mut test, &mut out);
    if !done {
        // Too many candidates: keep the strongest, deterministically (ties by raster order),
        // and test them in a second scan.
        cands.sort_by(|a, b| b.2.total_cmp(&a.2).then((a.1, a.0).cmp(&(b.1, b.0))));
        cands.truncate(opts.max_candidates);
        cands.sort_by_key(|&(x, y, _)| (y, x));
        let chosen: Vec<(usize, usize)> = cands.iter().map(|&(x, y, _)| (x, y)).collect();
        out.clear();
        let mut unused = Vec::new();
        scan(img, sd, thr, rr, ws, Some(&chosen), usize::MAX, &mut unused, &mut test, &mut out);
    }
    // Two candidates that converged to one junction: keep the stronger.
    out.sort_by(|a, b| {
        b.strength
            .total_cmp(&a.strength)
            .then(a.position.y.total_cmp(&b.position.y))
            .then(a.position.x.total_cmp(&b.position.x))
    });
    let mut kept: Vec<CheckerCorner> = Vec::with_capacity(out.len());
    let min_d2 = (0.5 * rr).powi(2);
    for c in out {
        if kept.iter().all(|k| (k.position - c.position).norm_squared() > min_d2) {
            kept.push(c);
        }
    }
    kept.sort_by(|a, b| {
        a.position.y.total_cmp(&b.position.y).then(a.position.x.total_cmp(&b.position.x))
    });
    kept
}

/// One pass down the image. Smoothed rows go into a ring of at least `2 reach + 2` rows; each row's saddle
/// response (border pixels zero) into a ring of 3; the row between is suppressed to its 3 x 3
/// maxima above `thr` (ties broken towards the first in raster order), which are appended to
/// `cands` with their response. Each candidate is handed to `test` as soon as the smoothed rows
/// within its patch reach exist, in raster order. With `only`, the listed pixels (raster
/// order) are tested instead of the maxima. Returns false, having stopped testing, when the
/// maxima outnumber `limit`; `cands` then holds all of them.
#[allow(clippy::too_many_arguments)]
fn scan(
    img: &GreyImage,
    sigma: f64,
    thr: f32,
    ring_radius: f64,
    ws: &mut CheckerWorkspace,
    only: Option<&[(usize, usize)]>,
    limit: usize,
    cands: &mut Vec<(usize, usize, f32)>,
    test: &mut dyn FnMut(&Patch, usize, usize) -> Option<CheckerCorner>,
    found: &mut Vec<CheckerCorner>,
) -> bool {
    let (w, h) = (img.width(), img.height());
    let reach = patch_reach(ring_radius) as usize;
    // A power of two, so that a row's slot is a mask, not a division.
    let slots = (2 * reach + 2).next_power_of_two();
    let mut sm = RowSmoother::new(img, sigma, std::mem::take(&mut ws.ring));
    let mut srows = std::mem::take(&mut ws.rows);
    srows.clear();
    srows.resize(slots * w, 0.0);
    let mut rrows = std::mem::take(&mut ws.patch);
    rrows.clear();
    rrows.resize(3 * w, 0.0);
    let mut within = true;
    // Next candidate to test: an index into `cands` or into `only`.
    let mut next = 0usize;
    for yn in 0..h {
        let slot = yn % slots;
        sm.row_into(yn, &mut srows[slot * w..(slot + 1) * w]);
        if only.is_none() && yn >= 2 {
            let y = yn - 1;
            let row = |r: usize| &srows[(r % slots) * w..(r % slots + 1) * w];
            let (a, b, c) = (row(y - 1), row(y), row(y + 1));
            let out = &mut rrows[(y % 3) * w..(y % 3 + 1) * w];
            out[0] = 0.0;
            out[w - 1] = 0.0;
            for x in 1..w - 1 {
                let sxx = b[x + 1] - 2.0 * b[x] + b[x - 1];
                let syy = c[x] - 2.0 * b[x] + a[x];
                let sxy = 0.25 * (c[x + 1] - c[x - 1] - a[x + 1] + a[x - 1]);
                out[x] = sxy * sxy - sxx * syy;
            }
            if yn >= 3 {
                suppress(&rrows, w, yn - 2, thr, cands);
            }
            if yn + 1 == h {
                // The last row is border: zero response.
                rrows[((h - 1) % 3) * w..((h - 1) % 3 + 1) * w].iter_mut().for_each(|v| *v = 0.0);
                suppress(&rrows, w, h - 2, thr, cands);
            }
        }
        // Test the candidates whose patch rows now all exist.
        let ready = |yc: usize| yc + reach <= yn || yn + 1 == h;
        match only {
            None => {
                if cands.len() > limit {
                    within = false;
                }
                while within && next < cands.len() && ready(cands[next].1) {
                    let (x, y, _) = cands[next];
                    found.extend(test(&Patch { ring: &srows, slots, w, h }, x, y));
                    next += 1;
                }
            }
            Some(list) => {
                while next < list.len() && ready(list[next].1) {
                    let (x, y) = list[next];
                    found.extend(test(&Patch { ring: &srows, slots, w, h }, x, y));
                    next += 1;
                }
            }
        }
    }
    ws.ring = sm.into_storage();
    ws.rows = srows;
    ws.patch = rrows;
    within
}

/// The 3 x 3 maxima above `thr` of response row `yc`, from the ring of 3 response rows.
fn suppress(rrows: &[f32], w: usize, yc: usize, thr: f32, cands: &mut Vec<(usize, usize, f32)>) {
    let row_of = |r: usize| &rrows[(r % 3) * w..(r % 3 + 1) * w];
    let (up, row, dn) = (row_of(yc - 1), row_of(yc), row_of(yc + 1));
    // Most of a row lies below the threshold: skip blocks of 16 with one vectorised test.
    const B: usize = 16;
    let mut x = 1;
    while x < w - 1 {
        if x + B < w && row[x..x + B].iter().map(|&v| (v > thr) as u32).sum::<u32>() == 0 {
            x += B;
            continue;
        }
        let v = row[x];
        x += 1;
        if v <= thr {
            continue;
        }
        let x = x - 1;
        if v > up[x - 1]
            && v > up[x]
            && v > up[x + 1]
            && v > row[x - 1]
            && v >= row[x + 1]
            && v >= dn[x - 1]
            && v >= dn[x]
            && v >= dn[x + 1]
        {
            cands.push((x, yc, v));
        }
    }
}

/// Detects checker X-junctions with fresh buffers.
pub fn detect_checker_corners(img: &GreyImage, opts: &DetectorOptions) -> Vec<CheckerCorner> {
    detect_checker_corners_with(img, opts, &mut CheckerWorkspace::default())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// erf by Abramowitz and Stegun 7.1.26 (|error| < 1.5e-7), enough for test images.
    fn erf(x: f64) -> f64 {
        let t = 1.0 / (1.0 + 0.3275911 * x.abs());
        let y = 1.0
            - (((((1.061405429 * t - 1.453152027) * t) + 1.421413741) * t - 0.284496736) * t
                + 0.254829592)
                * t
                * (-x * x).exp();
        if x >= 0.0 { y } else { -y }
    }

    /// A junction with edges along two arbitrary directions, blurred edges `erf(d / s)`:
    /// `I = 0.5 + 0.4 erf(n1 . (p - c) / s) erf(n2 . (p - c) / s)`, point-symmetric about `c`.
    fn junction(w: usize, h: usize, c: Point2<f64>, a1: f64, a2: f64, s: f64) -> GreyImage {
        let n1 = Vector2::new(-a1.sin(), a1.cos());
        let n2 = Vector2::new(-a2.sin(), a2.cos());
        let mut data = Vec::with_capacity(w * h);
        for y in 0..h {
            for x in 0..w {
                let d = Vector2::new(x as f64 - c.x, y as f64 - c.y);
                data.push((0.5 + 0.4 * erf(n1.dot(&d) / s) * erf(n2.dot(&d) / s)) as f32);
            }
        }
        GreyImage::from_vec(w, h, data).unwrap()
    }

    #[test]
    fn saddle_of_a_point_symmetric_junction_is_exact() {
        for &(cx, cy, a1, a2) in
            &[(20.3, 19.8, 0.1, 1.7), (21.0, 20.0, 0.0, 1.2), (20.71, 20.42, 0.5, 1.4)]
        {
            let c = Point2::new(cx, cy);
            let img = junction(41, 41, c, a1, a2, 1.4);
            let (found, _, _) = refine(&img, Point2::new(20.0, 20.0), 2.0, 1.5, 0.01).unwrap();
            // f32 storage of the pixels limits the agreement to about 1e-5 px.
            assert!((found - c).norm() < 1e-4, "{found} vs {c}");
        }
    }
}
