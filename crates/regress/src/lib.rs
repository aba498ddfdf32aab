//! The detector accuracy regression suite on synthetic renders.
//!
//! A suite ([`Suite`], file `"format": "facetcal-regress-suite"`) lists scenarios: a scene
//! file of the renderer, its seed and number of views, and detector settings. For each, the
//! views are rendered (or taken from the [`Cache`], keyed by a hash of the scene and the
//! program version), detected and identified, and compared with the truth ([`run_suite`]):
//! recall, wrong identifications, RMS error, bias, 95th percentile and largest error, the
//! ratio to the Cramer-Rao bound ([`crb`]) and time per image ([`Metrics`]). A baseline
//! ([`BaselineFile`]) holds accepted figures and tolerances; [`compare`] says what got worse.
//! The result is a JSON file ([`ResultFile`]) and a self-contained HTML page
//! ([`result_html`]) with plots of the error against blur, noise, tilt, distortion and
//! illumination.
//!
//! The crate owns the suite, baseline and result formats and the render cache folder; it never
//! changes how anything is detected, identified or rendered.
//!
//! ```
//! use facetcal_regress::{Metrics, compare_view};
//! use facetcal_model::{FeatureId, Pose};
//! use facetcal_render::{FeatureTruth, ViewTruth};
//! use nalgebra::{Point2, Point3};
//! let id = FeatureId { face: 1, row: 0, col: 0, corner: 0 };
//! let truth = ViewTruth {
//!     index: 0,
//!     image: "view-0000.png".into(),
//!     pose: Pose::identity(),
//!     visible: vec![FeatureTruth { id, point: Point3::origin(), pixel: Point2::new(50.0, 40.0), border_px: 40.0 }],
//!     hidden: vec![],
//! };
//! let found = [(id, Point2::new(50.03, 40.04))];
//! let m = Metrics::of(&[compare_view(&found, &truth, 3.0, 2.0)], &[], &[]);
//! assert_eq!(m.recall, 1.0);
//! assert!((m.rms_px.unwrap() - 0.05).abs() < 1e-12);
//! ```
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

pub mod baseline;
pub mod cache;
pub mod crb;
pub mod error;
pub mod html;
pub mod metrics;
pub mod result;
pub mod run;
pub mod suite;

pub use baseline::{
    BASELINE_FORMAT, BASELINE_VERSION, BaselineFile, Check, Comparison, Tolerance, Tolerances,
    compare,
};
pub use cache::{Cache, PROGRAM_VERSION};
pub use error::RegressError;
pub use html::result_html;
pub use metrics::{Metrics, ViewComparison, compare_view};
pub use result::{RESULT_FORMAT, RESULT_VERSION, ResultFile};
pub use run::{Conditions, RunOptions, ScenarioResult, ViewRecord, run_scenario, run_suite};
pub use suite::{
    Axis, DetectorOverrides, OVERRIDE_NAMES, SUITE_FORMAT, SUITE_VERSION, Scenario, ScenarioSpec,
    Suite, SuiteSpec,
};
