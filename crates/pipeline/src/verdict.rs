//! The quality verdict of a calibration: a fixed list of checks, each a measured value held to
//! a threshold, all recorded in the result file so a reader sees what "passed" meant.
//!
//! The default thresholds are common practice for a camera used for measurement, not a
//! standard: a sub-pixel RMS reprojection error, focal lengths known to half a percent, points
//! across the whole image. Set them to what your application needs.

use facetcal_model::Target;
use facetcal_model::files::{CalibrationFile, Verdict, VerdictCheck, ViewPoints, ViewStatus};
use facetcal_solver::Calibration;

/// Thresholds of the verdict.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct QualityGate {
    /// Largest RMS reprojection error of the inliers, pixels (default 1.0).
    pub max_rms_px: f64,
    /// Fewest images used by the solver; `None` means 1 for a target with points off one plane
    /// (one view fixes every intrinsic) and 3 for a flat target (Zhang's method needs three).
    pub min_used_images: Option<usize>,
    /// Fewest inlier points over all images (default 50).
    pub min_points: usize,
    /// Smallest share of the 12 x 9 cells of the image holding at least one point (default 0.25).
    pub min_coverage: f64,
    /// Largest standard deviation of fx and fy relative to their values (default 0.005).
    pub max_focal_rel_std: f64,
    /// Largest standard deviation of cx and cy, pixels (default 5).
    pub max_principal_point_std_px: f64,
}

impl Default for QualityGate {
    fn default() -> Self {
        QualityGate {
            max_rms_px: 1.0,
            min_used_images: None,
            min_points: 50,
            min_coverage: 0.25,
            max_focal_rel_std: 0.005,
            max_principal_point_std_px: 5.0,
        }
    }
}

fn at_most(name: &str, value: f64, limit: f64, what: &str) -> VerdictCheck {
    VerdictCheck {
        name: name.into(),
        value,
        limit,
        bound: "at-most".into(),
        passed: value <= limit,
        message: what.into(),
    }
}

fn at_least(name: &str, value: f64, limit: f64, what: &str) -> VerdictCheck {
    VerdictCheck {
        name: name.into(),
        value,
        limit,
        bound: "at-least".into(),
        passed: value >= limit,
        message: what.into(),
    }
}

/// Judges a result. `observations` are the points of `file.views`, in order.
pub fn judge(
    file: &CalibrationFile,
    observations: &[ViewPoints],
    target: &Target,
    cal: &Calibration,
    gate: &QualityGate,
) -> Verdict {
    let used = file.views.iter().filter(|v| v.status == ViewStatus::Used).count();
    let min_used = gate.min_used_images.unwrap_or(if target.is_planar() { 3 } else { 1 });
    let inliers: usize = cal.inlier.iter().map(|v| v.iter().filter(|&&b| b).count()).sum();
    let used_obs: Vec<ViewPoints> = observations
        .iter()
        .zip(&file.views)
        .filter(|(_, v)| v.status == ViewStatus::Used)
        .map(|(o, _)| o.clone())
        .collect();
    let (_, coverage) = facetcal_report::coverage(file.camera.width, file.camera.height, &used_obs);
    let std_of = |name: &str| {
        file.parameters
            .iter()
            .find(|p| p.name == name)
            .and_then(|p| p.std_dev.map(|s| (p.value, s)))
    };
    // A fixed parameter has no deviation: it does not count against the gate.
    let focal = ["fx", "fy"]
        .iter()
        .filter_map(|n| std_of(n))
        .map(|(v, s)| s / v.abs().max(f64::MIN_POSITIVE))
        .fold(0.0, f64::max);
    let pp = ["cx", "cy"].iter().filter_map(|n| std_of(n)).map(|(_, s)| s).fold(0.0, f64::max);
    let rms = if file.rms_px.is_finite() { file.rms_px } else { f64::INFINITY };
    let checks = vec![
        at_least(
            "converged",
            if file.summary.usable { 1.0 } else { 0.0 },
            1.0,
            "the refinement converged to a usable result",
        ),
        at_most("rms", rms, gate.max_rms_px, "RMS reprojection error of the inliers, px"),
        at_least("used-images", used as f64, min_used as f64, "images the solver used"),
        at_least("points", inliers as f64, gate.min_points as f64, "inlier points, all images"),
        at_least(
            "coverage",
            coverage,
            gate.min_coverage,
            "share of the 12 x 9 image cells holding a point",
        ),
        at_most(
            "focal-std",
            focal,
            gate.max_focal_rel_std,
            "largest standard deviation of fx, fy over the value",
        ),
        at_most(
            "principal-point-std",
            pp,
            gate.max_principal_point_std_px,
            "largest standard deviation of cx, cy, px",
        ),
    ];
    Verdict { passed: checks.iter().all(|c| c.passed), checks }
}
