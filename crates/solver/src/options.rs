//! How to solve: the options of a calibration, with documented defaults and the exact
//! stopping tests, and the robust loss.

use facetcal_model::files::FreeParameters;
use serde::{Deserialize, Serialize};

use crate::error::SolverError;

/// The robust loss `rho(s)` of a point's squared residual length `s = |r|^2` (pixels squared).
/// The cost is `1/2 sum rho(s)`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Loss {
    /// `rho(s) = s`: plain least squares.
    Squared,
    /// Huber: `rho(s) = s` for `s <= c^2`, `2 c sqrt(s) - c^2` beyond (P. J. Huber, "Robust
    /// estimation of a location parameter", Ann. Math. Statist. 35(1), 1964).
    Huber {
        /// `c`, pixels.
        scale_px: f64,
    },
    /// Cauchy: `rho(s) = c^2 ln(1 + s / c^2)`.
    Cauchy {
        /// `c`, pixels.
        scale_px: f64,
    },
}

impl Loss {
    /// `(rho(s), rho'(s))`.
    pub fn evaluate(&self, s: f64) -> (f64, f64) {
        match *self {
            Loss::Squared => (s, 1.0),
            Loss::Huber { scale_px: c } => {
                let c2 = c * c;
                if s <= c2 {
                    (s, 1.0)
                } else {
                    let r = s.sqrt();
                    (2.0 * c * r - c2, c / r)
                }
            }
            Loss::Cauchy { scale_px: c } => {
                let c2 = c * c;
                (c2 * (s / c2).ln_1p(), 1.0 / (1.0 + s / c2))
            }
        }
    }
}

/// Options of [`crate::calibrate`] and [`crate::estimate_pose`].
///
/// The minimiser is Levenberg-Marquardt with the damped normal equations
/// `(A + lambda diag(A)) delta = g`, `A = J^T W J`, `g = J^T W r` (`W` the loss weights
/// `rho'(s)`), and Nielsen's damping update (H. B. Nielsen, "Damping parameter in Marquardt's
/// method", IMM-REP-1999-05, DTU). It stops at the first test that holds:
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Options {
    /// Which camera parameters are free (default [`FreeParameters::default`]: fx, fy, cx, cy,
    /// k1, k2 free; skew, k3, p1, p2 fixed).
    pub free: FreeParameters,
    /// Also estimate the poses of faces 2..n relative to the first face (default `false`).
    /// Faces are told apart by the points' feature ids; the face with the smallest id fixes
    /// the gauge.
    pub survey_faces: bool,
    /// The robust loss (default Huber with `c = 2` px).
    pub loss: Loss,
    /// Outlier test after convergence: a point is rejected when `|r| > max(reject_sigmas *
    /// sigma, reject_floor_px)`, `sigma = median(|r|) / 1.1774` (the median of the length of a
    /// 2-D normal residual with deviation sigma per axis is `sqrt(2 ln 2) sigma`). Default 6
    /// (a normal residual exceeds it with probability exp(-18), about 2e-8).
    /// `0` disables rejection.
    pub reject_sigmas: f64,
    /// See `reject_sigmas`; default 1 px.
    pub reject_floor_px: f64,
    /// Rounds of rejection and re-minimisation (default 3).
    pub max_rejection_rounds: usize,
    /// Fewest inliers a view keeps before it is dropped (default 6).
    pub min_points_per_view: usize,
    /// Stop after this many iterations in one minimisation (default 200).
    pub max_iterations: usize,
    /// Function test, after an accepted step: `cost - new_cost <= function_tolerance * cost`;
    /// after a rejected one: `|cost - new_cost| <= function_tolerance * cost` (the step
    /// changes the cost by rounding only; the state stays where it was). Default 1e-12.
    pub function_tolerance: f64,
    /// Step test: `|delta| <= parameter_tolerance * (|x| + parameter_tolerance)`, over all free
    /// parameters, poses as axis-angle and translation (default 1e-12).
    pub parameter_tolerance: f64,
    /// Gradient test, before each step: `max_i |g_i| / sqrt(A_ii) <= gradient_tolerance *
    /// sqrt(2 cost)`, the largest cosine between the residual vector and a Jacobian column
    /// (default 1e-10).
    pub gradient_tolerance: f64,
    /// Starting `lambda` (default 1e-3).
    pub initial_damping: f64,
    /// Give up with [`crate::Termination::NoProgress`] when `lambda` exceeds this (default 1e16).
    pub max_damping: f64,
    /// Warn when two estimated parameters correlate more than this in absolute value
    /// (default 0.95).
    pub correlation_warning: f64,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            free: FreeParameters::default(),
            survey_faces: false,
            loss: Loss::Huber { scale_px: 2.0 },
            reject_sigmas: 6.0,
            reject_floor_px: 1.0,
            max_rejection_rounds: 3,
            min_points_per_view: 6,
            max_iterations: 200,
            function_tolerance: 1e-12,
            parameter_tolerance: 1e-12,
            gradient_tolerance: 1e-10,
            initial_damping: 1e-3,
            max_damping: 1e16,
            correlation_warning: 0.95,
        }
    }
}

impl Options {
    /// Checks every field, naming the first bad one.
    pub fn validate(&self) -> Result<(), SolverError> {
        let bad = |field: &'static str, v: f64| SolverError::InvalidOption {
            field,
            reason: format!("must be finite and non-negative, got {v}"),
        };
        for (field, v) in [
            ("reject_sigmas", self.reject_sigmas),
            ("reject_floor_px", self.reject_floor_px),
            ("function_tolerance", self.function_tolerance),
            ("parameter_tolerance", self.parameter_tolerance),
            ("gradient_tolerance", self.gradient_tolerance),
        ] {
            if !(v.is_finite() && v >= 0.0) {
                return Err(bad(field, v));
            }
        }
        for (field, v) in
            [("initial_damping", self.initial_damping), ("max_damping", self.max_damping)]
        {
            if !(v.is_finite() && v > 0.0) {
                return Err(SolverError::InvalidOption {
                    field,
                    reason: format!("must be finite and positive, got {v}"),
                });
            }
        }
        if !(self.correlation_warning > 0.0 && self.correlation_warning <= 1.0) {
            return Err(SolverError::InvalidOption {
                field: "correlation_warning",
                reason: format!("must be in (0, 1], got {}", self.correlation_warning),
            });
        }
        if let Loss::Huber { scale_px } | Loss::Cauchy { scale_px } = self.loss {
            if !(scale_px.is_finite() && scale_px > 0.0) {
                return Err(SolverError::InvalidOption {
                    field: "loss.scale_px",
                    reason: format!("must be finite and positive, got {scale_px}"),
                });
            }
        }
        if self.max_iterations == 0 {
            return Err(SolverError::InvalidOption {
                field: "max_iterations",
                reason: "must be at least 1".into(),
            });
        }
        if self.min_points_per_view < 4 {
            return Err(SolverError::InvalidOption {
                field: "min_points_per_view",
                reason: format!("a pose needs at least 4 points, got {}", self.min_points_per_view),
            });
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_are_valid_and_bad_values_are_named() {
        Options::default().validate().unwrap();
        let o = Options { function_tolerance: f64::NAN, ..Options::default() };
        assert!(o.validate().unwrap_err().to_string().starts_with("options.function_tolerance"));
        let o = Options { loss: Loss::Cauchy { scale_px: 0.0 }, ..Options::default() };
        assert!(o.validate().unwrap_err().to_string().contains("loss.scale_px"));
    }

    /// Huber's and Cauchy's losses and their derivatives against central differences.
    #[test]
    fn loss_derivatives_match_differences() {
        for loss in [Loss::Huber { scale_px: 1.5 }, Loss::Cauchy { scale_px: 0.7 }] {
            for s in [0.1, 1.0, 2.0, 9.0] {
                let h = 1e-6;
                let num = (loss.evaluate(s + h).0 - loss.evaluate(s - h).0) / (2.0 * h);
                assert!((num - loss.evaluate(s).1).abs() < 1e-6, "{loss:?} at {s}");
            }
        }
        assert_eq!(Loss::Huber { scale_px: 2.0 }.evaluate(3.0), (3.0, 1.0));
    }
}
