//! The detector's image: one grey channel of `f32` normalised to `[0, 1]`, which holds 8- and
//! 16-bit input exactly (an `f32` has a 24-bit significand), with conversions from the `image`
//! crate's types.

use image::{DynamicImage, ImageBuffer, Luma};

use crate::error::DetectError;

/// Rec. 709 luma weights of linear R, G, B (ITU-R BT.709-6, item 3.2), used to turn colour
/// images into grey.
pub const LUMA_WEIGHTS: [f32; 3] = [0.2126, 0.7152, 0.0722];

/// A grey image, row-major, `f32` values normalised so that the input's full scale is 1.
#[derive(Clone, Debug, PartialEq)]
pub struct GreyImage {
    width: usize,
    height: usize,
    data: Vec<f32>,
}

impl Default for GreyImage {
    fn default() -> Self {
        GreyImage::new(0, 0)
    }
}

impl GreyImage {
    /// A black image.
    pub fn new(width: usize, height: usize) -> Self {
        GreyImage { width, height, data: vec![0.0; width * height] }
    }

    /// Wraps a row-major buffer; every value must be finite.
    pub fn from_vec(width: usize, height: usize, data: Vec<f32>) -> Result<Self, DetectError> {
        let need = width.saturating_mul(height);
        if data.len() != need {
            return Err(DetectError::BufferSize { width, height, got: data.len(), need });
        }
        if let Some(i) = data.iter().position(|v| !v.is_finite()) {
            return Err(DetectError::NonFinitePixel { x: i % width.max(1), y: i / width.max(1) });
        }
        Ok(GreyImage { width, height, data })
    }

    /// An 8-bit grey image, `v / 255`.
    pub fn from_luma8(img: &ImageBuffer<Luma<u8>, Vec<u8>>) -> Self {
        let (w, h) = (img.width() as usize, img.height() as usize);
        GreyImage {
            width: w,
            height: h,
            data: img.as_raw().iter().map(|&v| v as f32 / 255.0).collect(),
        }
    }

    /// A 16-bit grey image, `v / 65535` (exact in `f32`).
    pub fn from_luma16(img: &ImageBuffer<Luma<u16>, Vec<u16>>) -> Self {
        let (w, h) = (img.width() as usize, img.height() as usize);
        GreyImage {
            width: w,
            height: h,
            data: img.as_raw().iter().map(|&v| v as f32 / 65535.0).collect(),
        }
    }

    /// Any decoded image: grey images keep their values exactly; colour images become
    /// `0.2126 R + 0.7152 G + 0.0722 B` ([`LUMA_WEIGHTS`]) on the stored values; alpha is
    /// ignored. Non-finite floating-point values become 0.
    pub fn from_dynamic(img: &DynamicImage) -> Self {
        match img {
            DynamicImage::ImageLuma8(g) => Self::from_luma8(g),
            DynamicImage::ImageLuma16(g) => Self::from_luma16(g),
            DynamicImage::ImageLumaA8(_) => Self::from_luma8(&img.to_luma8()),
            DynamicImage::ImageLumaA16(_) => Self::from_luma16(&img.to_luma16()),
            _ => {
                let rgb = img.to_rgb32f();
                let (w, h) = (rgb.width() as usize, rgb.height() as usize);
                let [wr, wg, wb] = LUMA_WEIGHTS;
                let data = rgb
                    .pixels()
                    .map(|p| {
                        let v = wr * p.0[0] + wg * p.0[1] + wb * p.0[2];
                        if v.is_finite() { v } else { 0.0 }
                    })
                    .collect();
                GreyImage { width: w, height: h, data }
            }
        }
    }

    /// Width, pixels.
    pub fn width(&self) -> usize {
        self.width
    }

    /// Height, pixels.
    pub fn height(&self) -> usize {
        self.height
    }

    /// The row-major values.
    pub fn data(&self) -> &[f32] {
        &self.data
    }

    /// The row-major values, mutable.
    pub fn data_mut(&mut self) -> &mut [f32] {
        &mut self.data
    }

    /// The value at a pixel, or `None` outside the image.
    pub fn get(&self, x: usize, y: usize) -> Option<f32> {
        if x < self.width && y < self.height { Some(self.data[y * self.width + x]) } else { None }
    }

    /// The value at the nearest pixel inside the image (replicated border). 0 for an empty
    /// image.
    pub fn at_clamped(&self, x: isize, y: isize) -> f32 {
        if self.width == 0 || self.height == 0 {
            return 0.0;
        }
        let xc = x.clamp(0, self.width as isize - 1) as usize;
        let yc = y.clamp(0, self.height as isize - 1) as usize;
        self.data[yc * self.width + xc]
    }

    /// Bilinear interpolation at a subpixel position (pixel centres at integers), border
    /// replicated.
    pub fn sample(&self, x: f64, y: f64) -> f64 {
        bilinear(x, y, |xi, yi| self.at_clamped(xi, yi))
    }
}

/// Bilinear interpolation at a subpixel position (pixel centres at integers) of the pixels that
/// `at` gives, which must replicate the border; 0 at a non-finite position. The corner is clamped
/// before the cast so that a huge coordinate cannot overflow. Shared by every sampler of grey
/// values so that they agree to the bit.
#[inline]
pub(crate) fn bilinear(x: f64, y: f64, at: impl Fn(isize, isize) -> f32) -> f64 {
    if !(x.is_finite() && y.is_finite()) {
        return 0.0;
    }
    let x0 = x.floor();
    let y0 = y.floor();
    let (fx, fy) = (x - x0, y - y0);
    let (xi, yi) = (x0.clamp(-2.0, 1e9) as isize, y0.clamp(-2.0, 1e9) as isize);
    let a = at(xi, yi) as f64;
    let b = at(xi + 1, yi) as f64;
    let c = at(xi, yi + 1) as f64;
    let d = at(xi + 1, yi + 1) as f64;
    (a * (1.0 - fx) + b * fx) * (1.0 - fy) + (c * (1.0 - fx) + d * fx) * fy
}
