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
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

mod blobs;
pub mod checker;
pub mod encoding;
pub mod error;
pub mod features;
pub mod filter;
pub mod image;
pub mod options;
pub mod perspective;
pub mod probe;

use facetcal_model::PatternKind;

pub use encoding::Encoding;
pub use error::DetectError;
pub use features::{CheckerCorner, Detections, Dot, Ellipse, Mark, SquareOutline};
pub use image::GreyImage;
pub use options::DetectorOptions;
pub use perspective::{circle_centre_offset, correct_dot_centre};
pub use probe::{MarkProbe, MarkSample, mark_samples};

/// The number of regions of the blob stage's threshold: 8-connected components of the pixels
/// darker than their local mean (square of radius `threshold_radius`) by `min_contrast / 4`,
/// and of those lighter by as much. Public so that `benches/detect.rs` can time the detector's
/// own thresholding and labelling against `imageproc`'s integral image and
/// `connected_components`.
pub fn count_regions(img: &GreyImage, opts: &DetectorOptions) -> usize {
    blobs::count_regions(img, opts)
}

/// Detects the features of every pattern kind the options list.
pub fn detect(img: &GreyImage, opts: &DetectorOptions) -> Result<Detections, DetectError> {
    opts.validate()?;
    let (w, h) = (img.width(), img.height());
    if (w as u64).saturating_mul(h as u64) > opts.max_pixels {
        return Err(DetectError::TooLarge { width: w, height: h, limit: opts.max_pixels });
    }
    let mut out = Detections { width: w as u32, height: h as u32, ..Default::default() };
    let noise = filter::estimate_noise(img);
    if opts.wants(PatternKind::Checkerboard) {
        out.checker_corners = checker::detect_with_noise(img, opts, &mut Default::default(), noise);
    }
    // Blobs: dots, squares and every kind's marks. A round blob is a mark when it lies inside
    // a square, within 2.5 diameters of a checker corner (a cell-centre disc), or among
    // neighbours of its ink at least 1.8 times its diameter (a dot grid's gap mark).
    let want_squares = opts.wants(PatternKind::SquareGrid);
    // Without a dot grid, a dark blob that is round but not quite is a blurred square first.
    let dark_dots = opts.wants(PatternKind::DotGrid);
    let (blobs, squares) = blobs::detect_blobs(img, opts, want_squares, dark_dots, noise);
    let corners: Vec<_> = out.checker_corners.iter().map(|c| c.position).collect();
    let (dots, marks) = blobs::classify(blobs, &squares, &corners);
    if opts.wants(PatternKind::DotGrid) {
        out.dots = dots;
    }
    out.squares = squares;
    out.marks = marks;
    Ok(out)
}
