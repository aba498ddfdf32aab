//! Fleet statistics: per parameter the median and a robust spread, the median absolute
//! deviation scaled to the standard deviation of a normal distribution,
//! `spread = 1.4826 median(|x - median(x)|)` (common practice; scipy's
//! `median_abs_deviation(x, scale="normal")` computes the same). A camera is an outlier in a
//! parameter when `|x - median| > OUTLIER_DEVIATIONS * spread`.
//!
//! Values are sorted before anything is computed, so the statistics do not depend on the order
//! of the cameras or on the thread count.

use serde::{Deserialize, Serialize};

/// `1 / Phi^-1(3/4)`, the factor that makes the MAD estimate a normal distribution's standard
/// deviation (value from memory; scipy documents it as about 1.4826).
pub const MAD_TO_SIGMA: f64 = 1.482_602_218_505_602;

/// Robust deviations beyond which a camera is flagged: 3.5, the cut Iglewicz and Hoaglin
/// recommend for the modified z-score `0.6745 (x - median) / MAD` ("How to Detect and Handle
/// Outliers", 1993; from memory), which is the same test as `|x - median| > 3.5 spread`.
pub const OUTLIER_DEVIATIONS: f64 = 3.5;

/// The parameters the fleet compares, in the order they are reported.
pub const PARAMETERS: [&str; 6] = ["fx", "fy", "cx", "cy", "k1", "rms_px"];

/// One parameter across the fleet.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ParameterStats {
    /// The parameter (`fx`, `fy`, `cx`, `cy`, `k1`, `rms_px`).
    pub name: String,
    /// Cameras with a value.
    pub count: usize,
    /// The median.
    pub median: f64,
    /// The robust spread, `1.4826 MAD`.
    pub spread: f64,
    /// Smallest value.
    pub min: f64,
    /// Largest value.
    pub max: f64,
    /// Ids of the cameras beyond [`OUTLIER_DEVIATIONS`] spreads from the median, sorted.
    pub outliers: Vec<String>,
}

fn median_sorted(v: &[f64]) -> f64 {
    let n = v.len();
    if n % 2 == 1 { v[n / 2] } else { 0.5 * (v[n / 2 - 1] + v[n / 2]) }
}

/// Median and robust spread (`1.4826 MAD`) of finite values; `None` for none. Non-finite
/// values are left out.
pub fn robust_stats(values: &[f64]) -> Option<(f64, f64)> {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let m = median_sorted(&v);
    let mut d: Vec<f64> = v.iter().map(|x| (x - m).abs()).collect();
    d.sort_by(f64::total_cmp);
    Some((m, MAD_TO_SIGMA * median_sorted(&d)))
}

/// Statistics of one parameter over `(id, value)` pairs. With a spread of zero (more than half
/// the cameras equal) nobody is flagged: the spread says nothing about the others.
pub fn parameter_stats(name: &str, values: &[(String, f64)]) -> Option<ParameterStats> {
    let xs: Vec<f64> = values.iter().map(|(_, x)| *x).collect();
    let (median, spread) = robust_stats(&xs)?;
    let finite = xs.iter().copied().filter(|x| x.is_finite());
    let min = finite.clone().fold(f64::INFINITY, f64::min);
    let max = finite.fold(f64::NEG_INFINITY, f64::max);
    let mut outliers: Vec<String> = values
        .iter()
        .filter(|(_, x)| spread > 0.0 && (x - median).abs() > OUTLIER_DEVIATIONS * spread)
        .map(|(id, _)| id.clone())
        .collect();
    outliers.sort();
    Some(ParameterStats {
        name: name.into(),
        count: values.iter().filter(|(_, x)| x.is_finite()).count(),
        median,
        spread,
        min,
        max,
        outliers,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Worked by hand from the definition: values 1, 2, 3, 4, 100 have median 3; the absolute
    /// deviations 2, 1, 0, 1, 97 have median 1; spread 1.4826.
    #[test]
    fn median_and_mad_of_a_small_sample() {
        let (m, s) = robust_stats(&[4.0, 100.0, 1.0, 3.0, 2.0]).unwrap();
        assert_eq!(m, 3.0);
        assert!((s - MAD_TO_SIGMA).abs() < 1e-15);
        // Even count: median of 1, 2, 3, 10 is 2.5; deviations 1.5, 0.5, 0.5, 7.5 -> 1.0.
        let (m, s) = robust_stats(&[10.0, 1.0, 3.0, 2.0]).unwrap();
        assert_eq!(m, 2.5);
        assert!((s - MAD_TO_SIGMA).abs() < 1e-15);
        assert!(robust_stats(&[f64::NAN]).is_none());
    }

    /// The scaled MAD of a large normal sample estimates its standard deviation (the point of
    /// the 1.4826 factor): sigma 2 within 3 %.
    #[test]
    fn spread_estimates_sigma_of_a_normal_sample() {
        let mut rng = facetcal_model::SeededRng::new(11);
        let xs: Vec<f64> = (0..20000).map(|_| 5.0 + 2.0 * rng.normal()).collect();
        let (m, s) = robust_stats(&xs).unwrap();
        assert!((m - 5.0).abs() < 0.05, "median {m}");
        assert!((s - 2.0).abs() < 0.06, "spread {s}");
    }

    #[test]
    fn outliers_are_flagged_and_order_does_not_matter() {
        let mut v: Vec<(String, f64)> = [900.0, 901.0, 899.0, 900.5, 899.5, 930.0]
            .iter()
            .enumerate()
            .map(|(i, x)| (format!("c{i}"), *x))
            .collect();
        let a = parameter_stats("fx", &v).unwrap();
        assert_eq!(a.outliers, vec!["c5".to_string()]);
        v.reverse();
        assert_eq!(parameter_stats("fx", &v).unwrap(), a);
        let same: Vec<(String, f64)> = (0..4).map(|i| (format!("c{i}"), 1.0)).collect();
        assert!(parameter_stats("fx", &same).unwrap().outliers.is_empty());
    }
}
