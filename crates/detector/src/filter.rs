//! Separable filters on `f32` rows, written here because the checker path must run at a few
//! nanoseconds per pixel and stream through the image in rows (see `benches/detect.rs`, group
//! `blur`, for the comparison with `imageproc::filter::gaussian_blur_f32`), and the robust noise
//! estimate.

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
// Blocks are sliced B long by construction, so the conversions to `[f32; B]` cannot fail.
#[allow(clippy::expect_used)]
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
    // Interior: out[x] = sum_j k[j] src[x + j - r], in blocks of 16 columns summed in
    // registers over the taps in order, so that they vectorise.
    const B: usize = 16;
    let n_in = w - 2 * r;
    let full = n_in / B * B;
    // The kernel is symmetric: taps j and 2r - j share a product.
    for b0 in (0..full).step_by(B) {
        let c: &[f32; B] = src[b0 + r..b0 + r + B].try_into().expect("block of B");
        let mut acc = [0.0f32; B];
        for i in 0..B {
            acc[i] = kernel[r] * c[i];
        }
        for (j, &k) in kernel[..r].iter().enumerate() {
            let a: &[f32; B] = src[b0 + j..b0 + j + B].try_into().expect("block of B");
            let b: &[f32; B] =
                src[b0 + 2 * r - j..b0 + 2 * r - j + B].try_into().expect("block of B");
            for i in 0..B {
                acc[i] += k * (a[i] + b[i]);
            }
        }
        out[r + b0..r + b0 + B].copy_from_slice(&acc);
    }
    for i in full..n_in {
        let mut a = 0.0f32;
        for (j, &k) in kernel.iter().enumerate() {
            a += k * src[i + j];
        }
        out[r + i] = a;
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

/// Gaussian smoothing produced one row at a time. Each input row's horizontal pass is computed
/// once into a ring of `2r + 1` rows, so the working set is a few rows of the image whatever its
/// size (a whole-image scratch buffer falls out of the cache above about 1000 x 1000 pixels and
/// costs a page fault per 4 KiB on every call). The values are those of [`gaussian_blur`]:
/// border replicated, the same sums in the same order.
pub struct RowSmoother<'a> {
    src: &'a GreyImage,
    kernel: Vec<f32>,
    ring: Vec<f32>,
    slot_row: Vec<usize>,
}

impl<'a> RowSmoother<'a> {
    /// A smoother of `src` with deviation `sigma`; `ring` is storage to reuse (resized).
    pub fn new(src: &'a GreyImage, sigma: f64, mut ring: Vec<f32>) -> Self {
        let kernel = gaussian_kernel(sigma);
        ring.clear();
        ring.resize(kernel.len() * src.width(), 0.0);
        let slot_row = vec![usize::MAX; kernel.len()];
        RowSmoother { src, kernel, ring, slot_row }
    }

    /// The kernel in use.
    pub fn kernel(&self) -> &[f32] {
        &self.kernel
    }

    /// Writes smoothed row `y` (`y < height`) into `out` (`width` values). Rows are cheapest
    /// in increasing order: each input row is filtered horizontally once.
    // Blocks are sliced B long by construction, so the conversions to `[f32; B]` cannot fail.
    #[allow(clippy::expect_used)]
    pub fn row_into(&mut self, y: usize, out: &mut [f32]) {
        let (w, h) = (self.src.width(), self.src.height());
        let n = self.kernel.len();
        let r = n / 2;
        for j in 0..n {
            let yy = (y + j).saturating_sub(r).min(h - 1);
            let slot = yy % n;
            if self.slot_row[slot] != yy {
                let s = &self.src.data()[yy * w..(yy + 1) * w];
                convolve_row(s, &self.kernel, &mut self.ring[slot * w..(slot + 1) * w]);
                self.slot_row[slot] = yy;
            }
        }
        let o = &mut out[..w];
        // Blocks of 16 columns summed over the taps in registers, symmetric taps paired.
        const B: usize = 16;
        let rows: Vec<&[f32]> = (0..n)
            .map(|j| {
                let slot = (y + j).saturating_sub(r).min(h - 1) % n;
                &self.ring[slot * w..(slot + 1) * w]
            })
            .collect();
        let full = w / B * B;
        for x0 in (0..full).step_by(B) {
            let c: &[f32; B] = rows[r][x0..x0 + B].try_into().expect("block of B");
            let mut acc = [0.0f32; B];
            for i in 0..B {
                acc[i] = self.kernel[r] * c[i];
            }
            for (j, &k) in self.kernel[..r].iter().enumerate() {
                let a: &[f32; B] = rows[j][x0..x0 + B].try_into().expect("block of B");
                let b: &[f32; B] = rows[n - 1 - j][x0..x0 + B].try_into().expect("block of B");
                for i in 0..B {
                    acc[i] += k * (a[i] + b[i]);
                }
            }
            o[x0..x0 + B].copy_from_slice(&acc);
        }
        for x in full..w {
            let mut a = 0.0f32;
            for (row, &k) in rows.iter().zip(&self.kernel) {
                a += k * row[x];
            }
            o[x] = a;
        }
    }

    /// Gives the ring storage back for reuse.
    pub fn into_storage(self) -> Vec<f32> {
        self.ring
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
    let mut sm = RowSmoother::new(src, sigma, std::mem::take(scratch));
    let dst = out.data_mut();
    for y in 0..h {
        sm.row_into(y, &mut dst[y * w..(y + 1) * w]);
    }
    *scratch = sm.into_storage();
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
/// every fourth row and second column (a quarter of a million samples at 1920 x 1080 pin the
/// median to a fraction of a percent). For Gaussian noise the response has standard deviation
/// `6 sigma` and median absolute value `0.6745 * 6 sigma`.
///
/// The median is selected exactly in linear time: a non-negative `f32` orders like its bit
/// pattern, so a histogram of the upper 16 bits finds the bin holding the median and only that
/// bin's values are ordered.
pub fn estimate_noise(img: &GreyImage) -> f64 {
    let (w, h) = (img.width(), img.height());
    if w < 3 || h < 3 {
        return 0.0;
    }
    let d = img.data();
    let mut vals = Vec::with_capacity((w / 2) * (h / 4 + 1));
    let mut resp = vec![0.0f32; w];
    let mut hist = vec![0u32; 1 << 15];
    for y in (1..h - 1).step_by(4) {
        let (a, b, c) =
            (&d[(y - 1) * w..y * w], &d[y * w..(y + 1) * w], &d[(y + 1) * w..(y + 2) * w]);
        // Whole row first (it vectorises), then every second column.
        for x in 1..w - 1 {
            let s = a[x - 1] - 2.0 * a[x] + a[x + 1] - 2.0 * (b[x - 1] - 2.0 * b[x] + b[x + 1])
                + c[x - 1]
                - 2.0 * c[x]
                + c[x + 1];
            resp[x] = s.abs();
        }
        for x in (1..w - 1).step_by(2) {
            let v = resp[x];
            hist[(v.to_bits() >> 16) as usize & 0x7fff] += 1;
            vals.push(v);
        }
    }
    if vals.is_empty() {
        return 0.0;
    }
    let mid = vals.len() / 2;
    let (mut bin, mut below) = (0usize, 0usize);
    for (i, &c) in hist.iter().enumerate() {
        if below + c as usize > mid {
            bin = i;
            break;
        }
        below += c as usize;
    }
    let mut v: Vec<f32> =
        vals.into_iter().filter(|x| (x.to_bits() >> 16) as usize & 0x7fff == bin).collect();
    let (_, m, _) = v.select_nth_unstable_by(mid - below, f32::total_cmp);
    *m as f64 / (0.6745 * 6.0)
}
