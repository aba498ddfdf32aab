//! The vocabulary of facetcal: camera models, calibration targets, feature identities, poses
//! and the file types the other crates share.
//!
//! # Conventions (used by every crate and file)
//! - Pixels: pixel centres at integer coordinates; the top-left pixel's centre is (0, 0), x to
//!   the right, y down. An image of width `w` spans `[-0.5, w - 0.5]` in x.
//! - Camera frame: x right, y down, z forward (along the optical axis).
//! - Poses map the target frame to the camera frame: `X_cam = R X_target + t`.
//! - Rotations are unit quaternions in memory and axis-angle vectors (radians) in files.
//! - Lengths are in the unit the target file declares (`mm`, `m` or `in`), translations too.
//! - Every file carries a `format` name and a `version`; readers refuse versions they do not know.
//!
//! # Main types
//! - [`Camera`]: image size, [`Intrinsics`] and a [`Distortion`] model, with
//!   [`Camera::project`], [`Camera::unproject`] and analytic Jacobians
//!   ([`Camera::project_posed`]).
//! - [`TargetSpec`] (the file as written) and [`Target`] (checked: every invariant holds);
//!   [`FeatureId`] names each feature.
//! - [`Pose`]: a rigid transformation.
//! - [`SeededRng`]: the project's reproducible random stream.
//!
//! ```
//! use facetcal_model::{Camera, Pose};
//! use nalgebra::{Point3, Vector3};
//! let cam = Camera::pinhole(640, 480, 500.0, 500.0, 319.5, 239.5);
//! let pose = Pose::from_axis_angle(Vector3::zeros(), Vector3::new(0.0, 0.0, 2.0));
//! let px = cam.project(&pose.transform(&Point3::new(0.1, 0.0, 0.0))).unwrap();
//! assert!((px.x - 344.5).abs() < 1e-12);
//! ```
//!
//! This crate reads target files but never touches images.
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

pub mod camera;
pub mod error;
pub mod files;
pub mod geometry;
pub mod rng;
pub mod target;
#[doc(hidden)]
pub mod testing;

pub use camera::{
    Camera, Distortion, DistortionKind, Intrinsics, MAX_CAMERA_PARAMS, PoseProjection, Projection,
};
pub use error::ModelError;
pub use geometry::{Pose, PoseFile, cross_matrix};
pub use rng::SeededRng;
pub use target::{
    DotLayout, Face, FacePoseSpec, FaceSpec, FeatureId, Ink, PatternKind, PatternSpec, Polarity,
    Shape, Target, TargetSpec, Unit,
};

/// Where tests find the reference data: see [`testing::reference_dir`].
pub use testing::reference_dir;
