//! The calibration pipeline that the commands share: from image files to a calibration, in
//! parallel, with a reason for every image left out; and the built-in demonstration.
//!
//! This crate wires the detector, matcher and solver crates; it owns no algorithm of its own.
#![deny(missing_docs)]

pub mod demo;
