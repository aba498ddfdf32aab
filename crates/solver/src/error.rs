//! The solver crate's error type: degenerate or unusable input, each variant carrying the
//! offending values. Not converging is not an error (see [`crate::Termination`]).

use thiserror::Error;

/// Everything the solver refuses to solve.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum SolverError {
    /// Fewer points than the method needs.
    #[error("{method} needs at least {need} points, got {got}")]
    TooFewPoints {
        /// The method (`DLT`, `homography`, `pose`...).
        method: &'static str,
        /// Points given.
        got: usize,
        /// Points needed.
        need: usize,
    },
    /// Fewer usable views than the free parameters need.
    #[error("{reason}: {got} view(s) given, {need} needed")]
    TooFewViews {
        /// Views given.
        got: usize,
        /// Views needed.
        need: usize,
        /// Why that many are needed.
        reason: String,
    },
    /// The 3-D points of a DLT lie (nearly) in one plane: the 3x4 projection is not
    /// determined. `flatness` is sqrt(smallest / largest eigenvalue) of the point scatter.
    #[error(
        "view {view}: the target points are coplanar (flatness {flatness:.2e}); \
         DLT needs points off one plane, use the planar method"
    )]
    CoplanarPoints {
        /// The view.
        view: usize,
        /// sqrt(lambda_min / lambda_max) of the point scatter.
        flatness: f64,
    },
    /// The points lie (nearly) on one line. `thinness` is sqrt(lambda_2 / lambda_1).
    #[error("view {view}: the points lie on a line (thinness {thinness:.2e})")]
    PointsOnLine {
        /// The view.
        view: usize,
        /// sqrt(second / largest eigenvalue) of the point scatter.
        thinness: f64,
    },
    /// The planar views do not determine the intrinsics (views nearly parallel to each other,
    /// or related by rotations about the optical axis only). `conditioning` is the ratio of the
    /// second-smallest to the largest singular value of Zhang's constraint matrix.
    #[error(
        "the views do not determine the intrinsics (conditioning {conditioning:.2e} below \
         {limit:.0e}): tilt the target differently between views"
    )]
    ParallelViews {
        /// The measured conditioning.
        conditioning: f64,
        /// The threshold.
        limit: f64,
    },
    /// A closed-form solution is not physical (for example a non-positive-definite image of
    /// the absolute conic, or points behind the camera).
    #[error("no physical solution: {0}")]
    NoPhysicalSolution(String),
    /// A value of the options is unusable.
    #[error("options.{field}: {reason}")]
    InvalidOption {
        /// The field.
        field: &'static str,
        /// What is wrong.
        reason: String,
    },
    /// An input value is unusable (not finite, a view without points...).
    #[error("{0}")]
    InvalidInput(String),
    /// A camera model error.
    #[error(transparent)]
    Model(#[from] facetcal_model::ModelError),
}
