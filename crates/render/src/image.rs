//! Image types of the renderer: a float image (optical or noiseless) and the quantised grey
//! image written as PNG.

use image::{GrayImage, ImageBuffer, Luma};

/// A row-major image of `f64` values, pixel `(x, y)` at `data[y * width + x]`.
#[derive(Clone, Debug, PartialEq)]
pub struct FloatImage {
    /// Width, pixels.
    pub width: usize,
    /// Height, pixels.
    pub height: usize,
    /// Values, row-major.
    pub data: Vec<f64>,
}

impl FloatImage {
    /// The value at pixel `(x, y)`.
    ///
    /// # Panics
    /// If the pixel is outside the image (a programmer error).
    pub fn get(&self, x: usize, y: usize) -> f64 {
        self.data[y * self.width + x]
    }

    /// One row.
    pub fn row(&self, y: usize) -> &[f64] {
        &self.data[y * self.width..(y + 1) * self.width]
    }
}

/// A 16-bit grey image.
pub type Gray16Image = ImageBuffer<Luma<u16>, Vec<u16>>;

/// A quantised grey image: 8 bits (codes = 8-bit grey levels) or 16 bits (codes = grey levels
/// x 257).
#[derive(Clone, Debug, PartialEq)]
pub enum GreyImage {
    /// 8-bit.
    Eight(GrayImage),
    /// 16-bit.
    Sixteen(Gray16Image),
}

impl GreyImage {
    /// Width, pixels.
    pub fn width(&self) -> u32 {
        match self {
            GreyImage::Eight(i) => i.width(),
            GreyImage::Sixteen(i) => i.width(),
        }
    }

    /// Height, pixels.
    pub fn height(&self) -> u32 {
        match self {
            GreyImage::Eight(i) => i.height(),
            GreyImage::Sixteen(i) => i.height(),
        }
    }

    /// The value at a pixel on the 8-bit grey-level scale (16-bit codes divided by 257).
    ///
    /// # Panics
    /// If the pixel is outside the image (a programmer error).
    pub fn level(&self, x: u32, y: u32) -> f64 {
        match self {
            GreyImage::Eight(i) => i.get_pixel(x, y)[0] as f64,
            GreyImage::Sixteen(i) => i.get_pixel(x, y)[0] as f64 / 257.0,
        }
    }

    /// The image on the 8-bit grey-level scale as floats.
    pub fn to_levels(&self) -> FloatImage {
        let (w, h) = (self.width() as usize, self.height() as usize);
        let data = match self {
            GreyImage::Eight(i) => i.as_raw().iter().map(|&v| v as f64).collect(),
            GreyImage::Sixteen(i) => i.as_raw().iter().map(|&v| v as f64 / 257.0).collect(),
        };
        FloatImage { width: w, height: h, data }
    }

    /// PNG bytes (8- or 16-bit greyscale); the encoding is deterministic.
    pub fn to_png(&self) -> Result<Vec<u8>, image::ImageError> {
        let mut out = std::io::Cursor::new(Vec::new());
        match self {
            GreyImage::Eight(i) => i.write_to(&mut out, image::ImageFormat::Png)?,
            GreyImage::Sixteen(i) => i.write_to(&mut out, image::ImageFormat::Png)?,
        }
        Ok(out.into_inner())
    }
}
