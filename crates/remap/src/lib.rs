//! Applying a calibration to whole images: undistortion by bilinear remapping, and drawing
//! projected target points over an image to check a calibration by eye.
//!
//! Undistortion: every pixel `q` of the output (a pinhole camera, by default with the input
//! camera's intrinsics) looks up the input at `p = project(K_out^-1 q)`, the pixel where the
//! input camera saw the same ray, and samples it bilinearly (pixel centres at integer
//! coordinates). Pixels whose ray the input camera did not see get the fill value. The map is
//! computed once and applied to any number of images of the same camera, rows in parallel.
//!
//! Images keep their pixel type and bit depth. This crate never reads or writes files.
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

use facetcal_model::{Camera, Intrinsics};
use image::{DynamicImage, ImageBuffer, Pixel, Rgb, RgbImage};
use nalgebra::{Point2, Point3, Vector2};
use rayon::prelude::*;
use thiserror::Error;

/// Why a remap could not be made.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum RemapError {
    /// The image does not have the calibrated camera's size.
    #[error("image is {got_w} x {got_h} px but the calibration is for {want_w} x {want_h} px")]
    SizeMismatch {
        /// Image width.
        got_w: u32,
        /// Image height.
        got_h: u32,
        /// Calibrated width.
        want_w: u32,
        /// Calibrated height.
        want_h: u32,
    },
    /// A pixel type this crate does not handle.
    #[error("unsupported pixel type {0}")]
    PixelType(String),
}

/// For each output pixel, where to sample the input (NaN where nothing was seen).
#[derive(Clone, Debug)]
pub struct UndistortMap {
    width: u32,
    height: u32,
    source: Vec<[f32; 2]>,
}

impl UndistortMap {
    /// The map from `camera`'s images to a distortion-free camera with intrinsics `output`
    /// (use `camera.intrinsics` to keep the scale) and the same image size.
    pub fn new(camera: &Camera, output: &Intrinsics) -> UndistortMap {
        let (w, h) = (camera.width, camera.height);
        let mut source = vec![[f32::NAN; 2]; w as usize * h as usize];
        source.par_chunks_mut(w as usize).enumerate().for_each(|(y, row)| {
            for (x, s) in row.iter_mut().enumerate() {
                let n = output.to_normalised(&Point2::new(x as f64, y as f64));
                let ray = Point3::new(n.x, n.y, 1.0);
                if let Ok(p) = camera.project(&ray)
                    && camera.contains(&p, 0.0)
                {
                    *s = [p.x as f32, p.y as f32];
                }
            }
        });
        UndistortMap { width: w, height: h, source }
    }

    /// Where output pixel `(x, y)` samples the input, if anywhere.
    pub fn source(&self, x: u32, y: u32) -> Option<Vector2<f64>> {
        let s = self.source.get((y * self.width + x) as usize)?;
        s[0].is_finite().then(|| Vector2::new(s[0] as f64, s[1] as f64))
    }

    /// Remaps an image, keeping its pixel type.
    pub fn apply(&self, image: &DynamicImage) -> Result<DynamicImage, RemapError> {
        if (image.width(), image.height()) != (self.width, self.height) {
            return Err(RemapError::SizeMismatch {
                got_w: image.width(),
                got_h: image.height(),
                want_w: self.width,
                want_h: self.height,
            });
        }
        Ok(match image {
            DynamicImage::ImageLuma8(i) => DynamicImage::ImageLuma8(self.apply_buffer(i)),
            DynamicImage::ImageLuma16(i) => DynamicImage::ImageLuma16(self.apply_buffer(i)),
            DynamicImage::ImageLumaA8(i) => DynamicImage::ImageLumaA8(self.apply_buffer(i)),
            DynamicImage::ImageLumaA16(i) => DynamicImage::ImageLumaA16(self.apply_buffer(i)),
            DynamicImage::ImageRgb8(i) => DynamicImage::ImageRgb8(self.apply_buffer(i)),
            DynamicImage::ImageRgb16(i) => DynamicImage::ImageRgb16(self.apply_buffer(i)),
            DynamicImage::ImageRgba8(i) => DynamicImage::ImageRgba8(self.apply_buffer(i)),
            DynamicImage::ImageRgba16(i) => DynamicImage::ImageRgba16(self.apply_buffer(i)),
            other => return Err(RemapError::PixelType(format!("{:?}", other.color()))),
        })
    }

    fn apply_buffer<P>(
        &self,
        input: &ImageBuffer<P, Vec<P::Subpixel>>,
    ) -> ImageBuffer<P, Vec<P::Subpixel>>
    where
        P: Pixel + Send + Sync,
        P::Subpixel: Send + Sync + Into<f64> + FromRounded,
    {
        let (w, h) = (self.width as usize, self.height as usize);
        let c = P::CHANNEL_COUNT as usize;
        let src = input.as_raw();
        let mut out = vec![P::Subpixel::from_rounded(0.0); w * h * c];
        out.par_chunks_mut(w * c).enumerate().for_each(|(y, row)| {
            for x in 0..w {
                let [u, v] = self.source[y * w + x];
                if !u.is_finite() {
                    continue;
                }
                let (u, v) = (u as f64, v as f64);
                // Bilinear weights with pixel centres at integers; clamp at the border so the
                // half-pixel rim of the image samples its edge pixels.
                let x0 = u.floor().clamp(0.0, (w - 1) as f64);
                let y0 = v.floor().clamp(0.0, (h - 1) as f64);
                let fx = (u - x0).clamp(0.0, 1.0);
                let fy = (v - y0).clamp(0.0, 1.0);
                let (x0, y0) = (x0 as usize, y0 as usize);
                let x1 = (x0 + 1).min(w - 1);
                let y1 = (y0 + 1).min(h - 1);
                for k in 0..c {
                    let at = |xx: usize, yy: usize| src[(yy * w + xx) * c + k].into();
                    let top = at(x0, y0) * (1.0 - fx) + at(x1, y0) * fx;
                    let bottom = at(x0, y1) * (1.0 - fx) + at(x1, y1) * fx;
                    row[x * c + k] = P::Subpixel::from_rounded(top * (1.0 - fy) + bottom * fy);
                }
            }
        });
        // `out` was allocated with the map's width x height x channels.
        #[allow(clippy::expect_used)]
        ImageBuffer::from_raw(self.width, self.height, out).expect("buffer has the map's size")
    }
}

/// Conversion of a sample value back to a channel type, rounding to nearest.
pub trait FromRounded {
    /// The nearest representable value, saturating.
    fn from_rounded(v: f64) -> Self;
}

impl FromRounded for u8 {
    fn from_rounded(v: f64) -> Self {
        v.round().clamp(0.0, 255.0) as u8
    }
}

impl FromRounded for u16 {
    fn from_rounded(v: f64) -> Self {
        v.round().clamp(0.0, 65535.0) as u16
    }
}

/// Draws marks over an image (converted to 8-bit colour): a cross at each point with its
/// colour, for a quick look at detections or projected target points.
pub fn draw_crosses(
    image: &DynamicImage,
    points: &[(Point2<f64>, [u8; 3])],
    size: i32,
) -> RgbImage {
    let mut out = image.to_rgb8();
    for (p, colour) in points {
        if !(p.x.is_finite() && p.y.is_finite()) {
            continue;
        }
        let (x, y) = (p.x as f32, p.y as f32);
        let s = size as f32;
        let c = Rgb(*colour);
        imageproc::drawing::draw_line_segment_mut(&mut out, (x - s, y), (x + s, y), c);
        imageproc::drawing::draw_line_segment_mut(&mut out, (x, y - s), (x, y + s), c);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use facetcal_model::Distortion;

    fn brown() -> Camera {
        Camera {
            width: 320,
            height: 240,
            intrinsics: Intrinsics { fx: 300.0, fy: 300.0, cx: 160.2, cy: 119.7, skew: 0.0 },
            distortion: Distortion::BrownConrady {
                k1: -0.3,
                k2: 0.1,
                p1: 0.0005,
                p2: -0.0003,
                k3: 0.0,
            },
        }
    }

    /// A Gaussian blob drawn where the distorted camera sees a 3-D point lands, after
    /// undistortion, where a pinhole camera with the same intrinsics sees that point.
    #[test]
    fn undistortion_moves_points_to_their_pinhole_position() {
        let cam = brown();
        let pinhole = Camera { distortion: Distortion::None, ..cam };
        let map = UndistortMap::new(&cam, &cam.intrinsics);
        for point in [
            Point3::new(0.3, -0.2, 1.0),
            Point3::new(-0.35, 0.25, 1.0),
            Point3::new(0.05, 0.02, 1.0),
        ] {
            let pd = cam.project(&point).unwrap();
            let pu = pinhole.project(&point).unwrap();
            let sigma = 2.0;
            let img = ImageBuffer::from_fn(320, 240, |x, y| {
                let d2 = (x as f64 - pd.x).powi(2) + (y as f64 - pd.y).powi(2);
                image::Luma([(60000.0 * (-d2 / (2.0 * sigma * sigma)).exp()).round() as u16])
            });
            let out = map.apply(&DynamicImage::ImageLuma16(img)).unwrap();
            let out = out.as_luma16().unwrap();
            let (mut sw, mut sx, mut sy) = (0.0, 0.0, 0.0);
            for (x, y, p) in out.enumerate_pixels() {
                let v = p[0] as f64;
                if (x as f64 - pu.x).abs() < 12.0 && (y as f64 - pu.y).abs() < 12.0 {
                    sw += v;
                    sx += v * x as f64;
                    sy += v * y as f64;
                }
            }
            let c = Point2::new(sx / sw, sy / sw);
            // The local magnification of the distortion skews the blob slightly: 0.05 px bound.
            assert!((c - pu).norm() < 0.05, "{point}: blob at {c}, pinhole {pu}");
            if point.x.abs() > 0.2 {
                assert!((pd - pu).norm() > 3.0, "the distortion moved the point visibly");
            }
        }
    }

    /// Without distortion and with the same intrinsics the remap is the identity, exactly.
    #[test]
    fn remap_without_distortion_is_the_identity() {
        let cam = Camera::pinhole(64, 48, 50.0, 50.0, 31.5, 23.5);
        let map = UndistortMap::new(&cam, &cam.intrinsics);
        let img =
            ImageBuffer::from_fn(64, 48, |x, y| image::Rgb([(x * 4) as u8, (y * 5) as u8, 7u8]));
        let img = DynamicImage::ImageRgb8(img);
        assert_eq!(map.apply(&img).unwrap(), img);
    }

    #[test]
    fn size_mismatch_is_an_error() {
        let cam = Camera::pinhole(64, 48, 50.0, 50.0, 31.5, 23.5);
        let map = UndistortMap::new(&cam, &cam.intrinsics);
        let img = DynamicImage::ImageLuma8(ImageBuffer::new(10, 10));
        assert!(matches!(map.apply(&img), Err(RemapError::SizeMismatch { .. })));
    }
}
