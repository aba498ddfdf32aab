//! The spec file (format `facetcal-fleet-spec`, version 1): what every camera of a product must
//! meet. Every field but `format` and `version` is optional; an absent check is not made.
//!
//! ```json
//! {
//!   "format": "facetcal-fleet-spec",
//!   "version": 1,
//!   "nominal": {
//!     "fx": { "value": 900.0, "tolerance": 9.0 },
//!     "cx": { "value": 511.5, "tolerance": 8.0 },
//!     "k1": { "value": -0.1, "tolerance": 0.05 }
//!   },
//!   "max_rms_px": 0.5,
//!   "min_points": 200,
//!   "min_coverage": 0.3
//! }
//! ```

use facetcal_model::ModelError;
use facetcal_model::files::parse_with_path;
use serde::{Deserialize, Serialize};

use crate::FleetError;

/// The spec file's `format`.
pub const SPEC_FORMAT: &str = "facetcal-fleet-spec";
/// The spec file version this crate reads and writes.
pub const SPEC_VERSION: u32 = 1;

/// A nominal value and the largest distance from it that passes: `|value - nominal| <= tolerance`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Tolerance {
    /// The nominal value (pixels for fx, fy, cx, cy; none for k1).
    pub value: f64,
    /// The tolerance, same unit, not negative.
    pub tolerance: f64,
}

/// Nominal intrinsics with tolerances; an absent parameter is not checked.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Nominal {
    /// Focal length in x, pixels.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fx: Option<Tolerance>,
    /// Focal length in y, pixels.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fy: Option<Tolerance>,
    /// Principal point x, pixels.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cx: Option<Tolerance>,
    /// Principal point y, pixels.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cy: Option<Tolerance>,
    /// First radial coefficient of the distortion model.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub k1: Option<Tolerance>,
}

impl Nominal {
    /// The checked parameters with their names, in the order fx, fy, cx, cy, k1.
    pub fn named(&self) -> Vec<(&'static str, Tolerance)> {
        [("fx", self.fx), ("fy", self.fy), ("cx", self.cx), ("cy", self.cy), ("k1", self.k1)]
            .into_iter()
            .filter_map(|(n, t)| t.map(|t| (n, t)))
            .collect()
    }
}

/// A parsed and checked spec file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FleetSpec {
    /// Always [`SPEC_FORMAT`].
    pub format: String,
    /// Always [`SPEC_VERSION`].
    pub version: u32,
    /// Nominal intrinsics with tolerances.
    #[serde(default)]
    pub nominal: Nominal,
    /// Largest RMS reprojection error, pixels.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_rms_px: Option<f64>,
    /// Fewest inlier points over all of a camera's images.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min_points: Option<usize>,
    /// Smallest share of the 12 x 9 image cells holding a point (0 to 1).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min_coverage: Option<f64>,
}

impl Default for FleetSpec {
    fn default() -> Self {
        FleetSpec {
            format: SPEC_FORMAT.into(),
            version: SPEC_VERSION,
            nominal: Nominal::default(),
            max_rms_px: None,
            min_points: None,
            min_coverage: None,
        }
    }
}

#[derive(Deserialize)]
struct Header {
    format: Option<String>,
    version: Option<u32>,
}

/// Checks `format` and `version` first, so that another kind of file gets that message.
pub(crate) fn check_header(text: &str, format: &str, version: u32) -> Result<(), ModelError> {
    let h: Header = serde_json::from_str(text).map_err(|e| ModelError::Parse(e.to_string()))?;
    match h.format.as_deref() {
        Some(f) if f == format => {}
        Some(f) => return Err(ModelError::field("format", format!("expected {format}, got {f}"))),
        None => return Err(ModelError::field("format", "missing")),
    }
    match h.version {
        Some(v) if v == version => Ok(()),
        Some(v) => Err(ModelError::field("version", format!("version {v} is not known"))),
        None => Err(ModelError::field("version", "missing")),
    }
}

impl FleetSpec {
    /// Parses and checks a spec file; an error names the bad field.
    pub fn from_json(text: &str) -> Result<FleetSpec, FleetError> {
        check_header(text, SPEC_FORMAT, SPEC_VERSION)?;
        let spec: FleetSpec = parse_with_path(text)?;
        spec.validate()?;
        Ok(spec)
    }

    /// Checks the ranges: finite values, tolerances not negative, RMS positive, coverage in
    /// `[0, 1]`.
    pub fn validate(&self) -> Result<(), FleetError> {
        for (name, t) in self.nominal.named() {
            if !t.value.is_finite() {
                return Err(
                    ModelError::field(format!("nominal.{name}.value"), "must be finite").into()
                );
            }
            if !(t.tolerance.is_finite() && t.tolerance >= 0.0) {
                return Err(ModelError::field(
                    format!("nominal.{name}.tolerance"),
                    "must be finite and not negative",
                )
                .into());
            }
        }
        if let Some(r) = self.max_rms_px
            && !(r.is_finite() && r > 0.0)
        {
            return Err(ModelError::field("max_rms_px", "must be positive").into());
        }
        if let Some(c) = self.min_coverage
            && !(0.0..=1.0).contains(&c)
        {
            return Err(ModelError::field("min_coverage", "must be between 0 and 1").into());
        }
        Ok(())
    }

    /// The file's text, pretty-printed.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).unwrap_or_default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_the_documented_example() {
        let text = r#"{"format": "facetcal-fleet-spec", "version": 1,
            "nominal": {"fx": {"value": 900.0, "tolerance": 9.0}, "k1": {"value": -0.1, "tolerance": 0.05}},
            "max_rms_px": 0.5, "min_points": 200, "min_coverage": 0.3}"#;
        let s = FleetSpec::from_json(text).unwrap();
        assert_eq!(s.nominal.fx, Some(Tolerance { value: 900.0, tolerance: 9.0 }));
        assert_eq!(s.nominal.named().len(), 2);
        assert_eq!(s.min_points, Some(200));
        assert_eq!(FleetSpec::from_json(&s.to_json()).unwrap(), s);
    }

    #[test]
    fn errors_name_the_field() {
        let cases = [
            (
                r#"{"format": "facetcal-fleet-spec", "version": 1, "nominal": {"fx": {"value": 9, "tolerance": "x"}}}"#,
                "nominal.fx.tolerance",
            ),
            (
                r#"{"format": "facetcal-fleet-spec", "version": 1, "nominal": {"fz": {"value": 9, "tolerance": 1}}}"#,
                "nominal",
            ),
            (
                r#"{"format": "facetcal-fleet-spec", "version": 1, "nominal": {"cy": {"value": 9, "tolerance": -1}}}"#,
                "nominal.cy.tolerance",
            ),
            (
                r#"{"format": "facetcal-fleet-spec", "version": 1, "min_coverage": 2}"#,
                "min_coverage",
            ),
            (r#"{"format": "facetcal-fleet-spec", "version": 1, "max_rms_px": 0}"#, "max_rms_px"),
            (r#"{"format": "facetcal-fleet-spec", "version": 2}"#, "version"),
            (r#"{"format": "facetcal-target", "version": 1}"#, "format"),
        ];
        for (text, field) in cases {
            let e = FleetSpec::from_json(text).unwrap_err().to_string();
            assert!(e.starts_with(field), "{text}: {e}");
        }
    }
}
