//! The detector's options: which pattern kinds to look for and the tunables, with documented
//! defaults and a check.

use facetcal_model::PatternKind;

use crate::encoding::Encoding;
use crate::error::DetectError;

/// How to detect. Every field's doc gives its default.
#[derive(Clone, Debug, PartialEq)]
pub struct DetectorOptions {
    /// Pattern kinds to look for. Default: all three.
    pub kinds: Vec<PatternKind>,
    /// The smallest light-minus-dark difference of a feature, in normalised grey (full scale
    /// 1). Default 0.08.
    pub min_contrast: f64,
    /// Standard deviation, pixels, of the smoothing before the saddle response and of the image
    /// the checker corners are located on. Default 1.5.
    pub checker_smoothing: f64,
    /// Radius, pixels, of the outer sampling ring of the checker ring test (the inner one is
    /// 0.6 times it); should stay below a third of the smallest cell side. Default 5.
    pub ring_radius: f64,
    /// Standard deviation, pixels, of the Gaussian whose smoothed image's saddle point locates a
    /// checker corner; the derivative kernels reach `5 refine_sigma` from the corner (a 3-sigma cut
    /// moves with the subpixel phase). Default 2.
    pub refine_sigma: f64,
    /// Largest ring asymmetry `sum |v(t) - v(t + pi)| / sum |v(t) - mean|` of a checker corner.
    /// Default 0.2.
    pub max_asymmetry: f64,
    /// Smallest ratio of the two Hessian eigenvalue magnitudes at a checker corner
    /// (`tan^2(alpha / 2)` for edges meeting at `alpha`). Default 0.15 (`alpha` down to 42
    /// degrees).
    pub min_saddle_balance: f64,
    /// Saddle responses must exceed this many standard deviations of the response to the
    /// measured noise. Default 4.
    pub noise_factor: f64,
    /// At most this many saddle candidates are examined, the strongest first. Default 200000.
    pub max_candidates: usize,
    /// Radius, pixels, of the local mean that separates dark from light for dots, squares and
    /// marks. Default 40.
    pub threshold_radius: usize,
    /// Smallest area, pixels, of a dot, square or mark. Default 8.
    pub min_blob_area: f64,
    /// Largest area of a dot or square as a fraction of the image area. Default 0.05.
    pub max_blob_fraction: f64,
    /// Images with more pixels are refused. Default 2^27 (134 million).
    pub max_pixels: u64,
    /// How the image's grey levels encode light; square outlines are measured at levels taken
    /// in light (see [`Encoding`]). Default linear.
    pub encoding: Encoding,
}

impl Default for DetectorOptions {
    fn default() -> Self {
        DetectorOptions {
            kinds: vec![PatternKind::Checkerboard, PatternKind::DotGrid, PatternKind::SquareGrid],
            min_contrast: 0.08,
            checker_smoothing: 1.5,
            ring_radius: 5.0,
            refine_sigma: 2.0,
            max_asymmetry: 0.2,
            min_saddle_balance: 0.15,
            noise_factor: 4.0,
            max_candidates: 200_000,
            threshold_radius: 40,
            min_blob_area: 8.0,
            max_blob_fraction: 0.05,
            max_pixels: 1 << 27,
            encoding: Encoding::Linear,
        }
    }
}

impl DetectorOptions {
    /// Options that look for one pattern kind.
    pub fn for_kind(kind: PatternKind) -> Self {
        DetectorOptions { kinds: vec![kind], ..Default::default() }
    }

    /// Whether a kind is looked for.
    pub fn wants(&self, kind: PatternKind) -> bool {
        self.kinds.contains(&kind)
    }

    /// Checks every field; the error names the first bad one.
    pub fn validate(&self) -> Result<(), DetectError> {
        let bad = |field, value, reason| Err(DetectError::InvalidOption { field, value, reason });
        let in_range = |v: f64, lo: f64, hi: f64| v.is_finite() && v >= lo && v <= hi;
        if !in_range(self.min_contrast, 1e-4, 1.0) {
            return bad("min_contrast", self.min_contrast, "must lie in [1e-4, 1]");
        }
        if !in_range(self.checker_smoothing, 0.3, 10.0) {
            return bad("checker_smoothing", self.checker_smoothing, "must lie in [0.3, 10] px");
        }
        if !in_range(self.ring_radius, 2.0, 50.0) {
            return bad("ring_radius", self.ring_radius, "must lie in [2, 50] px");
        }
        if !in_range(self.refine_sigma, 0.8, 20.0) {
            return bad("refine_sigma", self.refine_sigma, "must lie in [0.8, 20] px");
        }
        if !in_range(self.max_asymmetry, 0.0, 2.0) {
            return bad("max_asymmetry", self.max_asymmetry, "must lie in [0, 2]");
        }
        if !in_range(self.min_saddle_balance, 0.0, 1.0) {
            return bad("min_saddle_balance", self.min_saddle_balance, "must lie in [0, 1]");
        }
        if !in_range(self.noise_factor, 0.0, 100.0) {
            return bad("noise_factor", self.noise_factor, "must lie in [0, 100]");
        }
        if self.max_candidates == 0 {
            return bad("max_candidates", 0.0, "must be positive");
        }
        if !(2..=10_000).contains(&self.threshold_radius) {
            return bad(
                "threshold_radius",
                self.threshold_radius as f64,
                "must lie in [2, 10000] px",
            );
        }
        if !in_range(self.min_blob_area, 1.0, 1e9) {
            return bad("min_blob_area", self.min_blob_area, "must lie in [1, 1e9] px");
        }
        if !in_range(self.max_blob_fraction, 1e-6, 1.0) {
            return bad("max_blob_fraction", self.max_blob_fraction, "must lie in (0, 1]");
        }
        self.encoding.validate()?;
        if self.max_pixels == 0 {
            return bad("max_pixels", 0.0, "must be positive");
        }
        Ok(())
    }
}
