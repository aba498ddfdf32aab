//! Fleet batch calibration: many cameras of one product calibrated against one target and
//! judged against one spec.
//!
//! This crate owns the spec file ([`FleetSpec`], format `facetcal-fleet-spec`), the verdict of
//! each camera with its reasons ([`camera_entry`]), the fleet statistics (median and a robust
//! spread per parameter, outliers flagged against the fleet's own spread), the fleet summary
//! file ([`FleetFile`], format `facetcal-fleet`) and its CSV and HTML forms, the deterministic
//! choice of a shard's cameras ([`Shard`]) and the merge of shard outputs ([`merge`]).
//!
//! It never reads images or calibrates: it works on finished calibration files
//! ([`facetcal_model::files::CalibrationFile`]), and it never reads or writes files itself.
//!
//! ```
//! use facetcal_fleet::Shard;
//! let shard: Shard = "1/3".parse().unwrap();
//! // The same id lands in the same shard on every machine, whatever the listing order.
//! assert_eq!(shard.contains("cam-007"), Shard::of("cam-007", 3) == 1);
//! ```
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

pub mod error;
pub mod file;
pub mod html;
pub mod shard;
pub mod spec;
pub mod stats;
pub mod verdict;

pub use error::FleetError;
pub use file::{Counts, FLEET_FORMAT, FLEET_VERSION, FleetFile, FleetHeader, csv_field, merge};
pub use html::fleet_html;
pub use shard::Shard;
pub use spec::{FleetSpec, Nominal, SPEC_FORMAT, SPEC_VERSION, Tolerance};
pub use stats::{OUTLIER_DEVIATIONS, ParameterStats, robust_stats};
pub use verdict::{CameraEntry, CameraStatus, CameraValues, camera_entry};
