//! The calibration pipeline that the commands share: from image files to a calibration, in
//! parallel, with a reason for every image left out; and the built-in demonstration.
//!
//! This crate wires the image reader, detector, matcher and solver crates; it owns no
//! algorithm of its own beyond the order of the steps and the quality verdict.
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

pub mod calibrate;
pub mod demo;
pub mod error;
pub mod verdict;

pub use calibrate::{
    CalibrationRun, ImageCheck, ImageFailure, ImageFeatures, ImageRecord, Settings, SkippedFile,
    calibrate_records, check_image, list_images, observe_image, observe_images_par,
};
pub use error::PipelineError;
pub use verdict::{QualityGate, judge};
