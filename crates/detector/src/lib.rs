//! Candidate features in one grayscale image: checker corners (X-junctions), corners of isolated
//! squares, dot centres with their fitted ellipses, and the marks of face codes.
//!
//! The detector knows pattern kinds, never a specific target, and never identifies: that is the
//! matcher's job.
#![deny(missing_docs)]

pub mod features;

pub use features::{CheckerCorner, Detections, Dot, Ellipse, Mark, SquareOutline};
