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
//! 4. Subpixel location: the point that minimises `sum_i w_i (g_i . (c - p_i))^2` over the
//!    pixels `p_i` of a disc (W. Foerstner and E. Guelch, "A fast operator for detection and
//!    precise location of distinct points, corners and centres of circular features", ISPRS
//!    Intercommission Conference, 1987): each gradient `g_i` of an edge through the junction is
//!    normal to the line from `p_i` to the junction. Closed form
//!    `c = (sum w g g^T)^-1 sum w g g^T p`, iterated with the window re-centred on `c`; at the
//!    fixed point the pull of gradient noise towards the window centre vanishes, and the point
//!    symmetry of the junction cancels the curvature of the blurred profiles near its centre.

use nalgebra::{Matrix2, Point2, Vector2};

use crate::features::CheckerCorner;
use crate::filter::{estimate_noise, gaussian_blur_into, gaussian_kernel};
use crate::image::GreyImage;
use crate::options::DetectorOptions;

const RING_SAMPLES: usize = 16;

/// Working buffers of the checker path, reusable across images of the same size.
#[derive(Default)]
pub struct CheckerWorkspace {
    smooth: GreyImage,
    response: Vec<f32>,
    scratch: Vec<f32>,
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
}

fn ring(img: &GreyImage, c: Point2<f64>, r: f64) -> Option<Ring> {
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
    // The sample in the middle of the first sector tells its ink.
    let mid = 0.5 * (crossings[0] + crossings[1]);
    let first_dark = img.sample(c.x + r * mid.cos(), c.y + r * mid.sin()) < mean;
    Some(Ring { amplitude, crossings, first_dark, asymmetry: asym / dev })
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

/// Window weight `(1 - r^2 / R^2)^3`: it and its first two derivatives vanish at the rim, so
/// that the weighted sum over the pixel lattice does not jump as the window centre moves by a
/// fraction of a pixel (a hard-edged window makes a phase-dependent error of several
/// hundredths of a pixel).
fn window(r2: f64, inv_r2: f64) -> f64 {
    let t = 1.0 - r2 * inv_r2;
    if t > 0.0 { t * t * t } else { 0.0 }
}

/// Foerstner location on a disc of radius `radius` around `start`, on gradients of `grad_img`.
/// Returns the position and its covariance (sandwich estimate from the residuals).
fn refine(
    grad_img: &GreyImage,
    start: Point2<f64>,
    radius: f64,
    max_shift: f64,
) -> Option<(Point2<f64>, Matrix2<f64>)> {
    let (w, h) = (grad_img.width() as isize, grad_img.height() as isize);
    let inv_r2 = 1.0 / (radius * radius);
    let mut c = start;
    let d = grad_img.data();
    let wu = grad_img.width();
    for _iter in 0..12 {
        let x0 = ((c.x - radius).floor() as isize).max(1);
        let x1 = ((c.x + radius).ceil() as isize).min(w - 2);
        let y0 = ((c.y - radius).floor() as isize).max(1);
        let y1 = ((c.y + radius).ceil() as isize).min(h - 2);
        if x1 <= x0 || y1 <= y0 {
            return None;
        }
        let mut n = Matrix2::zeros();
        let mut b = Vector2::zeros();
        for y in y0..=y1 {
            for x in x0..=x1 {
                let (px, py) = (x as f64, y as f64);
                let r2 = (px - c.x).powi(2) + (py - c.y).powi(2);
                if r2 > radius * radius {
                    continue;
                }
                let wt = window(r2, inv_r2);
                let i = y as usize * wu + x as usize;
                let gx = 0.5 * (d[i + 1] - d[i - 1]) as f64;
                let gy = 0.5 * (d[i + wu] - d[i - wu]) as f64;
                let (a, bb, cc) = (wt * gx * gx, wt * gx * gy, wt * gy * gy);
                n[(0, 0)] += a;
                n[(0, 1)] += bb;
                n[(1, 1)] += cc;
                b.x += a * px + bb * py;
                b.y += bb * px + cc * py;
            }
        }
        n[(1, 0)] = n[(0, 1)];
        let det: f64 = n[(0, 0)] * n[(1, 1)] - n[(0, 1)] * n[(0, 1)];
        let tr = n[(0, 0)] + n[(1, 1)];
        // Both edge directions must be present: the smaller eigenvalue at least 5 % of the sum.
        if det.is_nan() || det <= 0.05 * 0.95 * tr * tr {
            return None;
        }
        let ninv = n.try_inverse()?;
        let nv: Vector2<f64> = ninv * b;
        let next = Point2::new(nv.x, nv.y);
        if !(next.x.is_finite() && next.y.is_finite()) || (next - start).norm() > max_shift {
            return None;
        }
        let moved = (next - c).norm();
        c = next;
        if moved < 1e-4 {
            break;
        }
    }
    // Sandwich covariance: N^-1 (sum w^2 e^2 g g^T) N^-1 with residual e = g . (c - p).
    let x0 = ((c.x - radius).floor() as isize).max(1);
    let x1 = ((c.x + radius).ceil() as isize).min(w - 2);
    let y0 = ((c.y - radius).floor() as isize).max(1);
    let y1 = ((c.y + radius).ceil() as isize).min(h - 2);
    let mut n = Matrix2::zeros();
    let mut m = Matrix2::zeros();
    for y in y0..=y1 {
        for x in x0..=x1 {
            let (px, py) = (x as f64, y as f64);
            let r2 = (px - c.x).powi(2) + (py - c.y).powi(2);
            if r2 > radius * radius {
                continue;
            }
            let wt = window(r2, inv_r2);
            let i = y as usize * wu + x as usize;
            let g = Vector2::new(
                0.5 * (d[i + 1] - d[i - 1]) as f64,
                0.5 * (d[i + wu] - d[i - wu]) as f64,
            );
            let e = g.dot(&Vector2::new(c.x - px, c.y - py));
            let ggt = g * g.transpose();
            n += wt * ggt;
            m += wt * wt * e * e * ggt;
        }
    }
    let ninv = n.try_inverse()?;
    Some((c, ninv * m * ninv))
}

/// Detects checker X-junctions. `ws` holds reusable buffers.
pub fn detect_checker_corners_with(
    img: &GreyImage,
    opts: &DetectorOptions,
    ws: &mut CheckerWorkspace,
) -> Vec<CheckerCorner> {
    let (w, h) = (img.width(), img.height());
    if w < 5 || h < 5 {
        return Vec::new();
    }
    let sd = opts.checker_smoothing;
    gaussian_blur_into(img, sd, &mut ws.scratch, &mut ws.smooth);
    let s = ws.smooth.data();

    // Threshold. Contrast part: a right-angle junction of contrast C blurred to total standard
    // deviation st has sxy = C / (pi st^2) at its centre; we accept down to min_contrast with a
    // PSF up to 2.5 px and edges meeting at 45 degrees (a factor 1/2 in R).
    let st2 = sd * sd + 2.5 * 2.5;
    let r_contrast = 0.5 * (opts.min_contrast / (std::f64::consts::PI * st2)).powi(2);
    // Noise part: the standard deviations of sxy and sxx for white noise of deviation sn.
    let sn = estimate_noise(img);
    let k = gaussian_kernel(sd);
    let kr = k.len() / 2;
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
    let _ = kr;
    let e_d1: f64 = d1.iter().map(|v| v * v).sum();
    let e_d2: f64 = d2.iter().map(|v| v * v).sum();
    let e_g: f64 = k.iter().map(|&v| (v as f64) * (v as f64)).sum();
    let var_xy = sn * sn * e_d1 * e_d1;
    let var_xx = sn * sn * e_d2 * e_g;
    let r_noise = opts.noise_factor * opts.noise_factor * (var_xy + var_xx);
    let thr = r_contrast.max(r_noise) as f32;

    // Response, border pixels left at zero.
    ws.response.clear();
    ws.response.resize(w * h, 0.0);
    for y in 1..h - 1 {
        let (a, b, c) =
            (&s[(y - 1) * w..y * w], &s[y * w..(y + 1) * w], &s[(y + 1) * w..(y + 2) * w]);
        let out = &mut ws.response[y * w..(y + 1) * w];
        for x in 1..w - 1 {
            let sxx = b[x + 1] - 2.0 * b[x] + b[x - 1];
            let syy = c[x] - 2.0 * b[x] + a[x];
            let sxy = 0.25 * (c[x + 1] - c[x - 1] - a[x + 1] + a[x - 1]);
            out[x] = sxy * sxy - sxx * syy;
        }
    }

    // Non-maximum suppression on 3 x 3, ties broken towards the first in raster order.
    let resp = &ws.response;
    let mut cands: Vec<(usize, usize)> = Vec::new();
    for y in 1..h - 1 {
        let row = &resp[y * w..(y + 1) * w];
        for x in 1..w - 1 {
            let v = row[x];
            if v <= thr {
                continue;
            }
            let up = &resp[(y - 1) * w..y * w];
            let dn = &resp[(y + 1) * w..(y + 2) * w];
            if v > up[x - 1]
                && v > up[x]
                && v > up[x + 1]
                && v > row[x - 1]
                && v >= row[x + 1]
                && v >= dn[x - 1]
                && v >= dn[x]
                && v >= dn[x + 1]
            {
                cands.push((x, y));
            }
        }
    }
    if cands.len() > opts.max_candidates {
        // Keep the strongest, deterministically (ties by raster order).
        cands.sort_by(|a, b| resp[b.1 * w + b.0].total_cmp(&resp[a.1 * w + a.0]).then(a.cmp(b)));
        cands.truncate(opts.max_candidates);
        cands.sort_by_key(|&(x, y)| (y, x));
    }

    let smooth = &ws.smooth;
    let rr = opts.ring_radius;
    let mut out: Vec<CheckerCorner> = Vec::new();
    for &(x, y) in &cands {
        let p = Point2::new(x as f64, y as f64);
        // Near the border the rings shrink so that features 3 px inside are still found.
        let border = (x as f64).min(y as f64).min((w - 1 - x) as f64).min((h - 1 - y) as f64);
        let r_outer = rr.min(border - 0.5);
        if r_outer < 2.0 {
            continue;
        }
        let Some(pre) = ring(smooth, p, r_outer) else { continue };
        if pre.amplitude < 0.5 * opts.min_contrast {
            continue;
        }
        let Some((c, cov)) = refine(smooth, p, opts.refine_radius.min(border + 1.0), 1.5) else {
            continue;
        };
        let Some(r1) = ring(smooth, c, r_outer) else { continue };
        let Some(r2) = ring(smooth, c, 0.6 * r_outer) else { continue };
        if r1.asymmetry > opts.max_asymmetry || r2.asymmetry > opts.max_asymmetry {
            continue;
        }
        if r1.amplitude < 0.5 * opts.min_contrast {
            continue;
        }
        let sigma = (0.5 * (cov[(0, 0)] + cov[(1, 1)])).max(0.0).sqrt();
        out.push(CheckerCorner {
            position: c,
            sigma: if sigma.is_finite() { sigma } else { f64::MAX },
            strength: r1.amplitude,
            edges: edges_from_ring(&r1),
        });
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

/// Detects checker X-junctions with fresh buffers.
pub fn detect_checker_corners(img: &GreyImage, opts: &DetectorOptions) -> Vec<CheckerCorner> {
    detect_checker_corners_with(img, opts, &mut CheckerWorkspace::default())
}
