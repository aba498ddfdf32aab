//! Candidate features in one grayscale image: checker corners (X-junctions), corners of isolated
//! squares, dot centres with their fitted ellipses, and the marks of face codes.
//!
//! The detector knows pattern kinds, never a specific target, and never identifies: that is the
//! matcher's job.
//!
//! Main items: [`GreyImage`] (8- or 16-bit grey held exactly as normalised `f32`),
//! [`DetectorOptions`], [`detect`] returning [`Detections`].
//!
//! ```
//! use facetcal_detector::{detect, DetectorOptions, GreyImage};
//! let img = GreyImage::new(64, 48);
//! let found = detect(&img, &DetectorOptions::default()).unwrap();
//! assert!(found.checker_corners.is_empty());
//! ```
#![deny(missing_docs)]

pub mod checker;
pub mod error;
pub mod features;
pub mod filter;
pub mod image;
pub mod options;

use facetcal_model::PatternKind;

pub use error::DetectError;
pub use features::{CheckerCorner, Detections, Dot, Ellipse, Mark, SquareOutline};
pub use image::GreyImage;
pub use options::DetectorOptions;

/// Detects the features of every pattern kind the options list.
pub fn detect(img: &GreyImage, opts: &DetectorOptions) -> Result<Detections, DetectError> {
    opts.validate()?;
    let (w, h) = (img.width(), img.height());
    if (w as u64).saturating_mul(h as u64) > opts.max_pixels {
        return Err(DetectError::TooLarge { width: w, height: h, limit: opts.max_pixels });
    }
    let mut out = Detections { width: w as u32, height: h as u32, ..Default::default() };
    if opts.wants(PatternKind::Checkerboard) {
        out.checker_corners = checker::detect_checker_corners(img, opts);
    }
    Ok(out)
}
