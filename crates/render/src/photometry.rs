//! Photometry after the optics: illumination gradient, vignetting, contrast, gamma, noise and
//! quantisation.
//!
//! For pixel `(x, y)` with optical reflectance `v`:
//! - illumination `g_i = (1 + (r - 1) u) / r`, `u` in `[0, 1]` the pixel's position along the
//!   gradient direction across the image, so the brightest and darkest corners differ by `r`;
//! - vignetting `g_v = 1 - V (rho / rho_max)^2`, `rho` the distance from the image centre and
//!   `rho_max` that of a corner pixel;
//! - `lin = g_i g_v (dark + (light - dark) v)` (the gains scale the light reaching the sensor,
//!   so they dim black ink too);
//! - `enc = 255 (min(max(lin, 0), 255) / 255)^(1 / gamma)`: the noiseless value;
//! - `out = round(clamp(scale (enc + sqrt(noise_sigma^2 + noise_gain enc) n), 0, max))` with
//!   `n` standard normal from `SeededRng::stream(seed, view)` in row-major order, `scale` 1 or
//!   257 for 8- or 16-bit output.

use facetcal_model::SeededRng;
use image::{GrayImage, ImageBuffer};

use crate::image::{FloatImage, GreyImage};
use crate::scene::{BitDepth, Photometry};

/// The noiseless image: grey levels on the 8-bit scale (floats, before noise and
/// quantisation) from the optical reflectance image.
pub fn noiseless_levels(optical: &FloatImage, p: &Photometry) -> FloatImage {
    let (w, h) = (optical.width, optical.height);
    let (cx, cy) = ((w as f64 - 1.0) * 0.5, (h as f64 - 1.0) * 0.5);
    let rho_max2 = (cx * cx + cy * cy).max(1e-12);
    let angle = p.illumination_angle_deg.to_radians();
    let (dx, dy) = (angle.cos(), angle.sin());
    let half = (0.5 * (w as f64 - 1.0) * dx.abs() + 0.5 * (h as f64 - 1.0) * dy.abs()).max(1e-12);
    let r = p.illumination_ratio;
    let inv_gamma = 1.0 / p.gamma;
    let mut data = Vec::with_capacity(w * h);
    for y in 0..h {
        for x in 0..w {
            let (px, py) = (x as f64 - cx, y as f64 - cy);
            let u = (0.5 * ((px * dx + py * dy) / half + 1.0)).clamp(0.0, 1.0);
            let gi = (1.0 + (r - 1.0) * u) / r;
            let gv = 1.0 - p.vignetting * (px * px + py * py) / rho_max2;
            let v = optical.data[y * w + x];
            let lin = gi * gv * (p.dark + (p.light - p.dark) * v);
            let enc = if p.gamma == 1.0 {
                lin.clamp(0.0, 255.0)
            } else {
                255.0 * (lin.clamp(0.0, 255.0) / 255.0).powf(inv_gamma)
            };
            data.push(if enc.is_finite() { enc } else { 0.0 });
        }
    }
    FloatImage { width: w, height: h, data }
}

/// Adds the noise and quantises (see the module doc).
pub fn quantise(
    levels: &FloatImage,
    p: &Photometry,
    bits: BitDepth,
    seed: u64,
    view: usize,
) -> GreyImage {
    let mut rng = SeededRng::stream(seed, view as u64);
    let noisy = p.noise_sigma > 0.0 || p.noise_gain > 0.0;
    let scale = bits.scale();
    let max = bits.max_code();
    let codes = levels.data.iter().map(|&v| {
        let v = if noisy {
            let sd = (p.noise_sigma * p.noise_sigma + p.noise_gain * v.max(0.0)).sqrt();
            v + sd * rng.normal()
        } else {
            v
        };
        let c = (v * scale).round();
        if c.is_finite() { c.clamp(0.0, max) } else { 0.0 }
    });
    let (w, h) = (levels.width as u32, levels.height as u32);
    match bits {
        BitDepth::Eight => {
            let raw: Vec<u8> = codes.map(|c| c as u8).collect();
            GreyImage::Eight(GrayImage::from_raw(w, h, raw).unwrap_or_else(|| GrayImage::new(w, h)))
        }
        BitDepth::Sixteen => {
            let raw: Vec<u16> = codes.map(|c| c as u16).collect();
            GreyImage::Sixteen(
                ImageBuffer::from_raw(w, h, raw).unwrap_or_else(|| ImageBuffer::new(w, h)),
            )
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn flat(v: f64, w: usize, h: usize) -> FloatImage {
        FloatImage { width: w, height: h, data: vec![v; w * h] }
    }

    #[test]
    fn gradient_vignetting_and_gamma_follow_their_formulas() {
        let p = Photometry {
            dark: 0.0,
            light: 200.0,
            illumination_ratio: 3.0,
            ..Photometry::default()
        };
        let img = noiseless_levels(&flat(1.0, 101, 51), &p);
        // Gradient along +x: left column at 1/3 of the right column, ratio 3:1.
        assert!((img.get(100, 25) - 200.0).abs() < 1e-12);
        assert!((img.get(0, 25) - 200.0 / 3.0).abs() < 1e-12);
        let p = Photometry { dark: 0.0, light: 200.0, vignetting: 0.5, ..Photometry::default() };
        let img = noiseless_levels(&flat(1.0, 101, 51), &p);
        assert!((img.get(50, 25) - 200.0).abs() < 1e-12);
        assert!((img.get(0, 0) - 100.0).abs() < 1e-12, "{}", img.get(0, 0));
        // Gamma 2.2 encodes mid-grey 127.5 as 255 * 0.5^(1/2.2) = 186.4 (evaluated by hand).
        let p = Photometry { dark: 0.0, light: 255.0, gamma: 2.2, ..Photometry::default() };
        let img = noiseless_levels(&flat(0.5, 3, 3), &p);
        assert!((img.get(1, 1) - 255.0 * 0.5f64.powf(1.0 / 2.2)).abs() < 1e-12);
    }

    #[test]
    fn noise_has_the_requested_variance_and_is_reproducible() {
        let p = Photometry { noise_sigma: 4.0, noise_gain: 0.05, ..Photometry::default() };
        let img = flat(100.0, 300, 300);
        let a = quantise(&img, &p, BitDepth::Sixteen, 9, 3).to_levels();
        let b = quantise(&img, &p, BitDepth::Sixteen, 9, 3).to_levels();
        assert_eq!(a, b);
        let n = a.data.len() as f64;
        let mean = a.data.iter().sum::<f64>() / n;
        let var = a.data.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n;
        // Expected variance 16 + 0.05 * 100 = 21; the standard error of the sample variance is
        // 21 sqrt(2 / n) = 0.1.
        assert!((var - 21.0).abs() < 0.5, "variance {var}");
        assert!((mean - 100.0).abs() < 0.05, "mean {mean}");
        let c = quantise(&img, &p, BitDepth::Sixteen, 9, 4).to_levels();
        assert_ne!(a, c);
    }
}
