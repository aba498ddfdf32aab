//! Separable filters on `f32` rows, written here because the checker path must run at a few
//! nanoseconds per pixel (see `benches/detect.rs`, group `blur`, for the comparison with
//! `imageproc::filter::gaussian_blur_f32`), and the robust noise estimate.

use crate::image::GreyImage;

/// A sampled, normalised Gaussian kernel of radius `ceil(3 sigma)` (at least 1).
pub fn gaussian_kernel(sigma: f64) -> Vec<f32> {
    let sigma = sigma.max(1e-3);
    let r = (3.0 * sigma).ceil().max(1.0) as usize;
    let mut k: Vec<f64> = (0..=2 * r)
        .map(|i| (-((i as f64 - r as f64).powi(2)) / (2.0 * sigma * sigma)).exp())
        .collect();
    let s: f64 = k.iter().sum();
    k.iter_mut().for_each(|v| *v /= s);
    k.into_iter().map(|v| v as f32).collect()
}

/// Convolves one row with a symmetric odd-length kernel into `out`, border replicated.
fn convolve_row(src: &[f32], kernel: &[f32], out: &mut [f32]) {
    let w = src.len();
    let r = kernel.len() / 2;
    if w == 0 {
        return;
    }
    if w <= 2 * r {
        for (x, o) in out.iter_mut().enumerate() {
            let mut s = 0.0;
            for (j, &k) in kernel.iter().enumerate() {
                let xx = (x + j).saturating_sub(r).min(w - 1);
                s += k * src[xx];
            }
            *o = s;
        }
        return;
    }
    // Interior: out[x] = sum_j k[j] src[x + j - r], written as axpy passes so that they vectorise.
    let inner = &mut out[r..w - r];
    inner.iter_mut().for_each(|v| *v = 0.0);
    for (j, &k) in kernel.iter().enumerate() {
        let s = &src[j..j + w - 2 * r];
        for (o, &v) in inner.iter_mut().zip(s) {
            *o += k * v;
        }
    }
    for x in (0..r).chain(w - r..w) {
        let mut s = 0.0;
        for (j, &k) in kernel.iter().enumerate() {
            let xx = (x + j).saturating_sub(r).min(w - 1);
            s += k * src[xx];
        }
        out[x] = s;
    }
}

/// Gaussian blur with standard deviation `sigma` pixels, border replicated; `scratch` is
/// resized as needed and reused.
pub fn gaussian_blur_into(
    src: &GreyImage,
    sigma: f64,
    scratch: &mut Vec<f32>,
    out: &mut GreyImage,
) {
    let (w, h) = (src.width(), src.height());
    if out.width() != w || out.height() != h {
        *out = GreyImage::new(w, h);
    }
    if w == 0 || h == 0 {
        return;
    }
    let kernel = gaussian_kernel(sigma);
    let r = kernel.len() / 2;
    scratch.resize(w * h, 0.0);
    for (s, d) in src.data().chunks_exact(w).zip(scratch.chunks_exact_mut(w)) {
        convolve_row(s, &kernel, d);
    }
    let dst = out.data_mut();
    for y in 0..h {
        let o = &mut dst[y * w..(y + 1) * w];
        o.iter_mut().for_each(|v| *v = 0.0);
        for (j, &k) in kernel.iter().enumerate() {
            let yy = (y + j).saturating_sub(r).min(h - 1);
            let s = &scratch[yy * w..(yy + 1) * w];
            for (a, &b) in o.iter_mut().zip(s) {
                *a += k * b;
            }
        }
    }
}

/// Gaussian blur, allocating the result.
pub fn gaussian_blur(src: &GreyImage, sigma: f64) -> GreyImage {
    let mut out = GreyImage::new(src.width(), src.height());
    let mut scratch = Vec::new();
    gaussian_blur_into(src, sigma, &mut scratch, &mut out);
    out
}

/// Robust standard deviation of the image noise: the median absolute response to the mask
/// `[1 -2 1; -2 4 -2; 1 -2 1]` (J. Immerkaer, "Fast noise variance estimation", CVIU 64(2),
/// 1996, which uses the mean; the median keeps edges of the pattern from inflating it), on
/// every second row and column. For Gaussian noise the response has standard deviation
/// `6 sigma` and median absolute value `0.6745 * 6 sigma`.
pub fn estimate_noise(img: &GreyImage) -> f64 {
    let (w, h) = (img.width(), img.height());
    if w < 3 || h < 3 {
        return 0.0;
    }
    let d = img.data();
    let mut v = Vec::with_capacity((w / 2) * (h / 2));
    for y in (1..h - 1).step_by(2) {
        let (a, b, c) =
            (&d[(y - 1) * w..y * w], &d[y * w..(y + 1) * w], &d[(y + 1) * w..(y + 2) * w]);
        for x in (1..w - 1).step_by(2) {
            let s = a[x - 1] - 2.0 * a[x] + a[x + 1] - 2.0 * (b[x - 1] - 2.0 * b[x] + b[x + 1])
                + c[x - 1]
                - 2.0 * c[x]
                + c[x + 1];
            v.push(s.abs());
        }
    }
    if v.is_empty() {
        return 0.0;
    }
    let mid = v.len() / 2;
    let (_, m, _) = v.select_nth_unstable_by(mid, f32::total_cmp);
    *m as f64 / (0.6745 * 6.0)
}
