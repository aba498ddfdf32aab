//! Camera calibration from correspondences between target points and pixels: closed-form
//! initialisation, Levenberg-Marquardt refinement with distortion, outlier rejection and the
//! uncertainty of every estimate.
//!
//! The solver owns the numerics between matched points and a calibrated camera; it never sees
//! pixels of an image (the detector and matcher do) and never reads files (the binary does).
//!
//! # Roles
//! - The problem: [`ViewObservations`] (per view, target points and pixels), an image size, a
//!   distortion model and optionally a starting [`Camera`].
//! - The cost: reprojection residuals `observed - projected` under a robust [`Loss`], with the
//!   model crate's analytic Jacobians ([`Camera::project_posed`]).
//! - The options: [`Options`] (free parameters, loss, rejection, stopping tests).
//! - The summary: [`Summary`] (costs, iterations, [`Termination`], RMS per view).
//!
//! # Method
//! 1. Start ([`linear`]): a multi-face view gives `P` by the normalised DLT and `K, R, t` by RQ;
//!    planar views give homographies and Zhang's closed-form `K`; the poses follow from `K`.
//! 2. Refine (module `refine`): Levenberg-Marquardt with the pose blocks eliminated by the Schur
//!    complement, normal equations accumulated per view in parallel and summed in view order.
//! 3. Reject points with `|r| > max(6 sigma, 1 px)` and refine again.
//! 4. Uncertainty: `Cov = sigma^2 S^-1`, `S` the reduced (Schur) matrix at the solution,
//!    `sigma^2 = sum |r|^2 / (m - n)` (m residuals, n parameters).
//!
//! ```
//! use facetcal_model::{Camera, DistortionKind, Pose};
//! use facetcal_solver::{calibrate, Observation, Options, ViewObservations};
//! use nalgebra::{Point3, Vector3};
//! let truth = Camera::pinhole(640, 480, 600.0, 600.0, 320.0, 240.0);
//! let views: Vec<ViewObservations> = [(0.3, 0.1), (-0.2, 0.35), (0.25, -0.3)]
//!     .iter()
//!     .enumerate()
//!     .map(|(v, &(a, b))| {
//!         let pose = Pose::from_axis_angle(Vector3::new(a, b, 0.1), Vector3::new(-0.2, -0.15, 1.0));
//!         let points = (0..48)
//!             .map(|i| {
//!                 let x = Point3::new((i % 8) as f64 * 0.05, (i / 8) as f64 * 0.05, 0.0);
//!                 let image = truth.project(&pose.transform(&x)).unwrap();
//!                 Observation { id: None, target: x, image }
//!             })
//!             .collect();
//!         ViewObservations { name: format!("v{v}"), points }
//!     })
//!     .collect();
//! let cal = calibrate(&views, (640, 480), DistortionKind::None, None, &Options::default()).unwrap();
//! assert!((cal.camera.intrinsics.fx - 600.0).abs() < 1e-6);
//! ```
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

pub mod error;
pub mod linear;
pub mod options;
pub(crate) mod refine;
mod solve;
pub mod summary;
mod uncertainty;

pub use error::SolverError;
pub use options::{Loss, Options};
pub use solve::{
    Calibration, FaceCorrection, Observation, ViewObservations, Warning, calibrate, estimate_pose,
    initial_camera,
};
pub use summary::{IterationRecord, Summary, Termination};

#[doc(no_inline)]
pub use facetcal_model::Camera;
