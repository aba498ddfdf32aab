//! Synthetic images of calibration targets with exact ground truth.
//!
//! This crate owns the scene file (`"format": "facetcal-scene"`, version 1), the renderer and
//! the truth file (`"format": "facetcal-truth"`, version 1). It never detects anything.
//!
//! # Main types
//! - [`SceneSpec`] (the file as written) and [`Scene`] (checked, poses resolved); scenes made
//!   in code start from [`Scene::builder`].
//! - [`render_view`] gives a [`RenderedView`]: a [`GreyImage`] (8-bit, or 16-bit with codes =
//!   8-bit grey levels x 257) and its [`ViewTruth`]. [`render_view_noiseless`] gives the float
//!   image before noise and quantisation (for Cramer-Rao bounds); [`render_all_par`] renders
//!   every view on rayon.
//! - [`TruthFile`]: the truth of every view with the camera and target, to and from JSON.
//!
//! # How a pixel is made
//! Each pixel is split into `s x s` sub-squares (default 4). A sub-square's value is the exact
//! area integral of the painted face over its preimage on the face plane; the coverage grid is
//! blurred by a symmetric kernel of unit sum (Gaussian PSF, defocus pillbox) and box-averaged
//! to pixels; photometry (illumination gradient, vignetting, contrast, gamma), noise and
//! quantisation follow. See [`raster`] and [`photometry`].
//!
//! ```
//! use facetcal_model::{Camera, Pose, Target};
//! use facetcal_render::{Scene, render_view};
//! use nalgebra::Vector3;
//! let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"),
//!     "/../../targets/checkerboard.json")).unwrap();
//! let target = Target::from_json(&text).unwrap();
//! let camera = Camera::pinhole(160, 120, 100.0, 100.0, 79.5, 59.5);
//! let pose = Pose::from_axis_angle(Vector3::zeros(), Vector3::new(-140.0, -110.0, 600.0));
//! let scene = Scene::builder(target, camera).pose(pose).noise_sigma(2.0).build().unwrap();
//! let view = render_view(&scene, 0).unwrap();
//! assert_eq!(view.image.width(), 160);
//! assert!(!view.truth.visible.is_empty());
//! ```
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

pub mod area;
pub mod error;
pub mod image;
pub mod photometry;
pub mod poses;
pub mod raster;
mod rays;
pub mod render;
pub mod scene;
pub mod truth;

pub use error::RenderError;
pub use image::{FloatImage, Gray16Image, GreyImage};
pub use poses::PoseGenerator;
pub use render::{
    NoiselessView, RenderedView, render_all_par, render_view, render_view_noiseless, view_truth_of,
};
pub use scene::{
    Background, BitDepth, Occluder, Optics, Photometry, PosesSpec, SCENE_FORMAT, SCENE_VERSION,
    Scene, SceneBuilder, SceneSpec,
};
pub use truth::{
    FeatureTruth, HiddenFeature, HiddenReason, TRUTH_FORMAT, TRUTH_VERSION, TruthFile, ViewTruth,
    image_name,
};
