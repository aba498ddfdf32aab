//! The verdict of one camera of a fleet: the calibration's own verdict (every failed check is a
//! reason) plus the spec's checks. A camera without a calibration fails with the reason why.

use facetcal_model::files::{CalibrationFile, ViewStatus};
use serde::{Deserialize, Serialize};

use crate::FleetSpec;

/// What became of one camera.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CameraStatus {
    /// No calibration could be made (no images, no usable image, unreadable folder).
    NotCalibrated,
    /// Calibrated, but a check of its verdict or of the spec failed.
    Failed,
    /// Calibrated and every check passed.
    Passed,
}

impl CameraStatus {
    /// The name written in files.
    pub fn name(self) -> &'static str {
        match self {
            CameraStatus::NotCalibrated => "not-calibrated",
            CameraStatus::Failed => "failed",
            CameraStatus::Passed => "passed",
        }
    }
}

/// The values of a calibrated camera that the fleet compares.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CameraValues {
    /// Focal length in x, pixels.
    pub fx: f64,
    /// Focal length in y, pixels.
    pub fy: f64,
    /// Principal point x, pixels.
    pub cx: f64,
    /// Principal point y, pixels.
    pub cy: f64,
    /// First radial coefficient (0 for the pinhole model).
    pub k1: f64,
    /// RMS reprojection error of the inliers, pixels.
    pub rms_px: f64,
    /// Inlier points over all images (the verdict's `points` check).
    pub points: usize,
    /// Share of the 12 x 9 image cells holding a point (the verdict's `coverage` check).
    pub coverage: f64,
    /// Images the solver used.
    pub images_used: usize,
    /// Images listed.
    pub images: usize,
}

impl CameraValues {
    /// The value of a compared parameter by name (`fx`, `fy`, `cx`, `cy`, `k1`, `rms_px`).
    pub fn get(&self, name: &str) -> Option<f64> {
        Some(match name {
            "fx" => self.fx,
            "fy" => self.fy,
            "cx" => self.cx,
            "cy" => self.cy,
            "k1" => self.k1,
            "rms_px" => self.rms_px,
            _ => return None,
        })
    }
}

/// One camera's line in the fleet summary.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CameraEntry {
    /// The camera id (its folder name).
    pub id: String,
    /// The verdict.
    pub status: CameraStatus,
    /// Why it did not pass, one sentence each; empty when it passed.
    pub reasons: Vec<String>,
    /// The compared values, when calibrated.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub values: Option<CameraValues>,
    /// The parameters beyond [`crate::OUTLIER_DEVIATIONS`] robust deviations from the fleet's
    /// median (a flag for a person, not a failure).
    #[serde(default)]
    pub outliers: Vec<String>,
    /// The camera's result file relative to the fleet output folder, when calibrated.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub result: Option<String>,
}

fn check_value(file: &CalibrationFile, name: &str) -> Option<f64> {
    file.verdict.as_ref()?.checks.iter().find(|c| c.name == name).map(|c| c.value)
}

/// The entry of camera `id`: from its calibration, or the reason there is none. `result` is
/// the calibration file's path relative to the fleet output. Outliers are filled in later,
/// against the whole fleet ([`crate::FleetFile::assemble`]).
pub fn camera_entry(
    id: &str,
    calibration: Result<&CalibrationFile, &str>,
    spec: Option<&FleetSpec>,
    result: &str,
) -> CameraEntry {
    let file = match calibration {
        Ok(f) => f,
        Err(reason) => {
            return CameraEntry {
                id: id.into(),
                status: CameraStatus::NotCalibrated,
                reasons: vec![reason.into()],
                values: None,
                outliers: vec![],
                result: None,
            };
        }
    };
    let i = file.camera.intrinsics;
    let values = CameraValues {
        fx: i.fx,
        fy: i.fy,
        cx: i.cx,
        cy: i.cy,
        k1: file.camera.distortion.coefficients().first().copied().unwrap_or(0.0),
        rms_px: file.rms_px,
        points: check_value(file, "points").unwrap_or(0.0).max(0.0) as usize,
        coverage: check_value(file, "coverage").unwrap_or(0.0),
        images_used: file.views.iter().filter(|v| v.status == ViewStatus::Used).count(),
        images: file.views.len(),
    };
    let mut reasons = Vec::new();
    match &file.verdict {
        None => reasons.push("calibration: no verdict in the result file".to_string()),
        Some(v) => {
            for c in v.checks.iter().filter(|c| !c.passed) {
                reasons.push(format!(
                    "calibration check {}: {} is {} {} ({})",
                    c.name,
                    num(c.value),
                    if c.bound == "at-most" { "above" } else { "below" },
                    num(c.limit),
                    c.message
                ));
            }
        }
    }
    if let Some(spec) = spec {
        for (name, t) in spec.nominal.named() {
            let v = values.get(name).unwrap_or(f64::NAN);
            let off = (v - t.value).abs();
            if off.is_nan() || off > t.tolerance {
                reasons.push(format!(
                    "spec {name}: {} is off the nominal {} by more than {}",
                    num(v),
                    num(t.value),
                    num(t.tolerance)
                ));
            }
        }
        if let Some(max) = spec.max_rms_px
            && (values.rms_px.is_nan() || values.rms_px > max)
        {
            reasons.push(format!(
                "spec max_rms_px: RMS {} px is above {} px",
                num(values.rms_px),
                num(max)
            ));
        }
        if let Some(min) = spec.min_points
            && values.points < min
        {
            reasons.push(format!("spec min_points: {} points, fewer than {min}", values.points));
        }
        if let Some(min) = spec.min_coverage
            && (values.coverage.is_nan() || values.coverage < min)
        {
            reasons.push(format!(
                "spec min_coverage: coverage {} is below {}",
                num(values.coverage),
                num(min)
            ));
        }
    }
    CameraEntry {
        id: id.into(),
        status: if reasons.is_empty() { CameraStatus::Passed } else { CameraStatus::Failed },
        reasons,
        values: Some(values),
        outliers: vec![],
        result: Some(result.into()),
    }
}

/// Six significant digits: enough to see a tolerance miss, short enough to read.
pub(crate) fn num(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let digits = (5 - v.abs().log10().floor() as i32).clamp(0, 12) as usize;
    let s = format!("{v:.digits$}");
    if s.contains('.') { s.trim_end_matches('0').trim_end_matches('.').to_string() } else { s }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_keep_six_significant_digits() {
        assert_eq!(num(901.23456), "901.235");
        assert_eq!(num(-0.1000), "-0.1");
        assert_eq!(num(0.000123456789), "0.000123457");
        assert_eq!(num(250.0), "250");
    }

    #[test]
    fn a_camera_without_calibration_fails_with_its_reason() {
        let e = camera_entry("cam-1", Err("no image files"), None, "cam-1/calibration.json");
        assert_eq!(e.status, CameraStatus::NotCalibrated);
        assert_eq!(e.reasons, vec!["no image files".to_string()]);
        assert!(e.values.is_none() && e.result.is_none());
    }
}
