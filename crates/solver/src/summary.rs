//! What happened: the termination kind, per-iteration records and the summary of a
//! calibration, with a brief report.

use serde::{Deserialize, Serialize};

/// Which stopping test ended the last minimisation.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Termination {
    /// `cost - new_cost <= function_tolerance * cost` after an accepted step, or
    /// `|cost - new_cost| <= function_tolerance * cost` after a rejected one.
    FunctionTolerance,
    /// `|delta| <= parameter_tolerance * (|x| + parameter_tolerance)`.
    ParameterTolerance,
    /// `max_i |g_i| / sqrt(A_ii) <= gradient_tolerance * sqrt(2 cost)` (or a zero cost).
    GradientTolerance,
    /// `max_iterations` reached: not converged.
    MaxIterations,
    /// The damping exceeded `max_damping` without an accepted step: not converged.
    NoProgress,
    /// The starting point has points outside the camera model's domain.
    InvalidStart,
}

impl Termination {
    /// Whether a convergence test fired.
    pub fn converged(self) -> bool {
        matches!(
            self,
            Termination::FunctionTolerance
                | Termination::ParameterTolerance
                | Termination::GradientTolerance
        )
    }

    /// The kebab-case name used in files.
    pub fn name(self) -> &'static str {
        match self {
            Termination::FunctionTolerance => "function-tolerance",
            Termination::ParameterTolerance => "parameter-tolerance",
            Termination::GradientTolerance => "gradient-tolerance",
            Termination::MaxIterations => "max-iterations",
            Termination::NoProgress => "no-progress",
            Termination::InvalidStart => "invalid-start",
        }
    }
}

/// One Levenberg-Marquardt iteration.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct IterationRecord {
    /// Cost after the iteration (unchanged if the step was rejected).
    pub cost: f64,
    /// The damping the step was computed with.
    pub lambda: f64,
    /// Length of the step.
    pub step_norm: f64,
    /// Whether the step was taken.
    pub accepted: bool,
}

/// What the solver did.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    /// Iterations over all rounds of outlier rejection.
    pub iterations: usize,
    /// Rounds of minimisation (1 + rounds that rejected points).
    pub rounds: usize,
    /// Cost `1/2 sum rho(|r|^2)` (pixels squared) at the closed-form start, all points.
    pub initial_cost: f64,
    /// Cost at the end, inliers only.
    pub final_cost: f64,
    /// How the last minimisation stopped.
    pub termination: Termination,
    /// RMS reprojection error over all inliers, pixels.
    pub rms_px: f64,
    /// RMS per view (`None` for dropped views).
    pub view_rms_px: Vec<Option<f64>>,
    /// Inliers used in the end.
    pub inliers: usize,
    /// Points rejected.
    pub rejected: usize,
    /// Every iteration, all rounds.
    pub records: Vec<IterationRecord>,
}

impl Summary {
    /// Whether the result can be used: converged, with a finite cost.
    pub fn is_usable(&self) -> bool {
        self.termination.converged() && self.final_cost.is_finite()
    }

    /// A one-line report.
    pub fn brief_report(&self) -> String {
        format!(
            "{} after {} iterations ({} round(s)): cost {:.6e} -> {:.6e}, RMS {:.4} px over {} \
             points, {} rejected",
            self.termination.name(),
            self.iterations,
            self.rounds,
            self.initial_cost,
            self.final_cost,
            self.rms_px,
            self.inliers,
            self.rejected
        )
    }
}
