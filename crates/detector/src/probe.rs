//! Direct probing of face-code mark places: mean levels of an inner disc and of the ring
//! around it, at places a caller already knows (the matcher, from a candidate lattice), so that
//! marks too small or too tilted for the global threshold are still read.

use nalgebra::{Matrix2, Point2, Vector2};

use crate::image::GreyImage;

/// One place to probe: the image of a disc of unit radius around `centre` is the ellipse
/// `centre + jacobian * u` for `|u| <= 1`. Callers pass the local map's Jacobian scaled to the
/// printed mark radius, so the unit disc is the mark.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MarkProbe {
    /// Image position of the probed centre (pixel centres at integers).
    pub centre: Point2<f64>,
    /// Image vectors of one mark radius along the two face axes.
    pub jacobian: Matrix2<f64>,
}

/// Mean levels around one probed place.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MarkSample {
    /// Mean over the disc of radius 0.6 (inside a mark even after a blur of a third of its
    /// radius).
    pub inner: f64,
    /// Mean over the ring from radius 1.5 to 2.0 (outside a mark, inside its cell).
    pub ring: f64,
}

/// Radii and angle counts of the polar sample grids: (radius, samples on its circle).
const INNER: [(f64, usize); 3] = [(0.0, 1), (0.3, 6), (0.6, 12)];
const RING: [(f64, usize); 3] = [(1.5, 16), (1.75, 16), (2.0, 16)];

/// Samples every probe by bilinear interpolation; `None` where a sample point falls outside
/// the image, the probe is not finite, or the ellipse is degenerate (under half a pixel).
pub fn mark_samples(image: &GreyImage, probes: &[MarkProbe]) -> Vec<Option<MarkSample>> {
    probes.iter().map(|p| sample_one(image, p)).collect()
}

fn sample_one(image: &GreyImage, p: &MarkProbe) -> Option<MarkSample> {
    let j = &p.jacobian;
    if !(p.centre.x.is_finite() && p.centre.y.is_finite() && j.iter().all(|v| v.is_finite())) {
        return None;
    }
    // Smaller semi-axis of the mark's image: below half a pixel nothing can be read.
    if j.determinant().abs() / j.column(0).norm().max(j.column(1).norm()).max(1e-12) < 0.5 {
        return None;
    }
    let (w, h) = (image.width() as f64, image.height() as f64);
    let mean = |grid: &[(f64, usize)]| -> Option<f64> {
        let (mut sum, mut n) = (0.0, 0usize);
        for &(r, count) in grid {
            for a in 0..count {
                let t = std::f64::consts::TAU * a as f64 / count as f64;
                let q = p.centre + j * Vector2::new(r * t.cos(), r * t.sin());
                if q.x < 0.0 || q.y < 0.0 || q.x > w - 1.0 || q.y > h - 1.0 {
                    return None;
                }
                sum += image.sample(q.x, q.y);
                n += 1;
            }
        }
        Some(sum / n as f64)
    };
    Some(MarkSample { inner: mean(&INNER)?, ring: mean(&RING)? })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A disc of radius 4 px, level 0.9 on 0.1, sampled exactly: the inner mean is the disc's
    /// level and the ring's the ground's to f32 precision (exact by construction: every sample
    /// point's four pixels lie on one side of the edge).
    #[test]
    fn a_drawn_disc_reads_its_own_and_its_grounds_level() {
        let (w, hgt) = (40usize, 40usize);
        let mut img = GreyImage::new(w, hgt);
        for y in 0..hgt {
            for x in 0..w {
                let d = ((x as f64 - 20.0).powi(2) + (y as f64 - 20.0).powi(2)).sqrt();
                img.data_mut()[y * w + x] = if d <= 4.0 { 0.9 } else { 0.1 };
            }
        }
        let probe =
            MarkProbe { centre: Point2::new(20.0, 20.0), jacobian: Matrix2::identity() * 4.0 };
        let s = mark_samples(&img, &[probe])[0].unwrap();
        assert!((s.inner - 0.9).abs() < 1e-6, "{s:?}");
        assert!((s.ring - 0.1).abs() < 1e-6, "{s:?}");
        let off = MarkProbe { centre: Point2::new(2.0, 20.0), ..probe };
        assert!(mark_samples(&img, &[off])[0].is_none());
        let thin = MarkProbe { jacobian: Matrix2::new(4.0, 0.0, 0.0, 0.2), ..probe };
        assert!(mark_samples(&img, &[thin])[0].is_none());
    }
}
