//! Identified features compared with the truth of a render: which are right, wrong or
//! missing, and the statistics of the position errors.

use std::collections::BTreeMap;

use facetcal_matcher::Identification;
use facetcal_model::FeatureId;
use facetcal_render::ViewTruth;
use nalgebra::{Point2, Vector2};
use serde::{Deserialize, Serialize};

/// One view compared with its truth.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct ViewComparison {
    /// Visible features farther than the border margin from the image border.
    pub eligible: usize,
    /// Errors `found - truth` of the eligible features identified correctly, with their ids.
    pub errors: Vec<(FeatureId, Vector2<f64>)>,
    /// Identifications of features not visible, beyond the gate from their truth, or repeated.
    pub wrong: usize,
}

/// Compares one view's identified points (`(id, position)`, dot centres already corrected)
/// with its truth. An identification farther than `gate_px` from its feature's true pixel is
/// wrong; features within `border_px` of the image border count neither for recall nor for
/// errors.
pub fn compare_view(
    points: &[(FeatureId, Point2<f64>)],
    truth: &ViewTruth,
    border_px: f64,
    gate_px: f64,
) -> ViewComparison {
    let visible: BTreeMap<FeatureId, (Point2<f64>, f64)> =
        truth.visible.iter().map(|f| (f.id, (f.pixel, f.border_px))).collect();
    let mut out = ViewComparison {
        eligible: truth.visible.iter().filter(|f| f.border_px > border_px).count(),
        ..Default::default()
    };
    let mut seen = std::collections::BTreeSet::new();
    for &(id, p) in points {
        if !seen.insert(id) {
            out.wrong += 1;
            continue;
        }
        match visible.get(&id) {
            Some(&(t, border)) => {
                let d = p - t;
                // A NaN distance counts as wrong too.
                if d.norm().is_nan() || d.norm() > gate_px {
                    out.wrong += 1;
                } else if border > border_px {
                    out.errors.push((id, d));
                }
            }
            None => out.wrong += 1,
        }
    }
    out
}

/// The identified points of an identification.
pub fn identified_points(id: &Identification) -> Vec<(FeatureId, Point2<f64>)> {
    id.points().map(|c| (c.id, Point2::new(c.image[0], c.image[1]))).collect()
}

/// Accuracy figures of a set of views. Error figures are `None` when no feature was found;
/// nothing here is ever NaN.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Metrics {
    /// Views.
    pub views: usize,
    /// Eligible true features (visible, beyond the border margin).
    pub eligible: usize,
    /// Of those, identified correctly.
    pub found: usize,
    /// `found / eligible` (1 when nothing is eligible).
    pub recall: f64,
    /// Wrong identifications.
    pub wrong: usize,
    /// RMS of the Euclidean error, pixels.
    pub rms_px: Option<f64>,
    /// Mean error per axis, pixels.
    pub bias_px: Option<[f64; 2]>,
    /// 95th percentile of the Euclidean error (nearest rank), pixels.
    pub p95_px: Option<f64>,
    /// Largest Euclidean error, pixels.
    pub max_px: Option<f64>,
    /// RMS of the Cramer-Rao bounds of the found features, pixels.
    pub crb_px: Option<f64>,
    /// `rms_px / crb_px`.
    pub crb_ratio: Option<f64>,
    /// Mean wall time of detection and identification per image, milliseconds. Reported,
    /// never compared: speed is measured by the benchmarks.
    pub ms_per_image: f64,
}

fn finite(v: f64) -> Option<f64> {
    v.is_finite().then_some(v)
}

impl Metrics {
    /// The figures of `views` compared views; `bounds` are the Cramer-Rao bounds of found
    /// features (those that have one), `ms` the per-image times.
    pub fn of(comparisons: &[ViewComparison], bounds: &[f64], ms: &[f64]) -> Metrics {
        let eligible: usize = comparisons.iter().map(|c| c.eligible).sum();
        let wrong: usize = comparisons.iter().map(|c| c.wrong).sum();
        let errs: Vec<Vector2<f64>> =
            comparisons.iter().flat_map(|c| c.errors.iter().map(|e| e.1)).collect();
        let found = errs.len();
        let mut m = Metrics {
            views: comparisons.len(),
            eligible,
            found,
            recall: if eligible == 0 { 1.0 } else { found as f64 / eligible as f64 },
            wrong,
            ms_per_image: if ms.is_empty() {
                0.0
            } else {
                ms.iter().sum::<f64>() / ms.len() as f64
            },
            ..Default::default()
        };
        if found > 0 {
            let n = found as f64;
            let mut norms: Vec<f64> = errs.iter().map(|e| e.norm()).collect();
            norms.sort_by(f64::total_cmp);
            m.rms_px = finite((errs.iter().map(|e| e.norm_squared()).sum::<f64>() / n).sqrt());
            let mean = errs.iter().sum::<Vector2<f64>>() / n;
            m.bias_px = (mean.x.is_finite() && mean.y.is_finite()).then_some([mean.x, mean.y]);
            let rank = ((0.95 * n).ceil() as usize).clamp(1, found);
            m.p95_px = finite(norms[rank - 1]);
            m.max_px = finite(norms[found - 1]);
        }
        if !bounds.is_empty() {
            let crb = (bounds.iter().map(|b| b * b).sum::<f64>() / bounds.len() as f64).sqrt();
            m.crb_px = finite(crb).filter(|&c| c > 0.0);
            m.crb_ratio = match (m.rms_px, m.crb_px) {
                (Some(r), Some(c)) => finite(r / c),
                _ => None,
            };
        }
        m
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use facetcal_model::Pose;
    use facetcal_render::FeatureTruth;
    use nalgebra::Point3;

    fn id(col: u32) -> FeatureId {
        FeatureId { face: 1, row: 0, col, corner: 0 }
    }

    fn truth() -> ViewTruth {
        let f = |col: u32, x: f64, border: f64| FeatureTruth {
            id: id(col),
            point: Point3::origin(),
            pixel: Point2::new(x, 10.0),
            border_px: border,
        };
        ViewTruth {
            index: 0,
            image: "view-0000.png".into(),
            pose: Pose::identity(),
            visible: vec![f(0, 10.0, 10.0), f(1, 30.0, 10.0), f(2, 50.0, 10.0), f(3, 1.0, 1.0)],
            hidden: vec![],
        }
    }

    #[test]
    fn right_wrong_and_border_features_are_told_apart() {
        let pts = vec![
            (id(0), Point2::new(10.1, 10.0)),
            (id(1), Point2::new(33.0, 10.0)), // beyond the gate: wrong
            (id(3), Point2::new(1.0, 10.0)),  // near the border: neither
            (id(7), Point2::new(70.0, 10.0)), // not visible: wrong
            (id(0), Point2::new(10.0, 10.0)), // repeated: wrong
        ];
        let c = compare_view(&pts, &truth(), 3.0, 2.0);
        assert_eq!(c.eligible, 3);
        assert_eq!(c.wrong, 3);
        assert_eq!(c.errors.len(), 1);
        assert!((c.errors[0].1.x - 0.1).abs() < 1e-12);
    }

    /// Figures of a hand-computed sample: errors 3-4-5 and 0.
    #[test]
    fn statistics_of_a_small_sample() {
        let c = ViewComparison {
            eligible: 4,
            errors: vec![(id(0), Vector2::new(0.3, 0.4)), (id(1), Vector2::new(-0.3, 0.0))],
            wrong: 0,
        };
        let m = Metrics::of(&[c], &[0.1, 0.2], &[5.0]);
        assert_eq!(m.found, 2);
        assert_eq!(m.recall, 0.5);
        // sqrt((0.25 + 0.09) / 2)
        assert!((m.rms_px.unwrap() - 0.17f64.sqrt()).abs() < 1e-12);
        assert!((m.bias_px.unwrap()[0] - 0.0).abs() < 1e-12);
        assert!((m.bias_px.unwrap()[1] - 0.2).abs() < 1e-12);
        assert!((m.max_px.unwrap() - 0.5).abs() < 1e-12);
        assert!((m.p95_px.unwrap() - 0.5).abs() < 1e-12);
        assert!((m.crb_px.unwrap() - 0.025f64.sqrt()).abs() < 1e-12);
        let empty = Metrics::of(&[ViewComparison { eligible: 3, ..Default::default() }], &[], &[]);
        assert_eq!((empty.recall, empty.rms_px, empty.crb_ratio), (0.0, None, None));
    }
}
