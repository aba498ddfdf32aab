//! The suite file (`"format": "facetcal-regress-suite"`, version 1): scenarios, each a scene
//! file of the renderer with its seed, view count and detector settings, checked once into a
//! [`Suite`].

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

use facetcal_detector::encoding::EncodingParseError;
use facetcal_detector::{DetectError, DetectorOptions, Encoding};
use facetcal_render::{PosesSpec, Scene, SceneSpec};
use serde::{Deserialize, Serialize};

use crate::error::{RegressError, parse_json};

/// The `format` value of a suite file.
pub const SUITE_FORMAT: &str = "facetcal-regress-suite";
/// The suite file version this program reads.
pub const SUITE_VERSION: u32 = 1;

/// A robustness axis a scenario exercises (the detector's accuracy requirements).
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Axis {
    /// The standard scene: PSF sigma 1 px, noise sigma 2, contrast 200.
    Standard,
    /// Optical blur (PSF sigma, defocus).
    Blur,
    /// Sensor noise.
    Noise,
    /// An illumination gradient across the image.
    Illumination,
    /// Vignetting.
    Vignetting,
    /// Gamma of the encoding.
    Gamma,
    /// Lens distortion.
    Distortion,
    /// Strong tilt of the target.
    Tilt,
    /// Partial occlusion.
    Occlusion,
    /// Background clutter and texture.
    Clutter,
}

impl Axis {
    /// Every axis, in declaration order.
    pub const ALL: [Axis; 10] = [
        Axis::Standard,
        Axis::Blur,
        Axis::Noise,
        Axis::Illumination,
        Axis::Vignetting,
        Axis::Gamma,
        Axis::Distortion,
        Axis::Tilt,
        Axis::Occlusion,
        Axis::Clutter,
    ];

    /// The name used in files.
    pub fn name(self) -> &'static str {
        match self {
            Axis::Standard => "standard",
            Axis::Blur => "blur",
            Axis::Noise => "noise",
            Axis::Illumination => "illumination",
            Axis::Vignetting => "vignetting",
            Axis::Gamma => "gamma",
            Axis::Distortion => "distortion",
            Axis::Tilt => "tilt",
            Axis::Occlusion => "occlusion",
            Axis::Clutter => "clutter",
        }
    }
}

/// Detector settings that a suite, a scenario or the command line replaces; every field is
/// optional and means the [`DetectorOptions`] field of the same name.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DetectorOverrides {
    /// [`DetectorOptions::min_contrast`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min_contrast: Option<f64>,
    /// [`DetectorOptions::checker_smoothing`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub checker_smoothing: Option<f64>,
    /// [`DetectorOptions::ring_radius`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ring_radius: Option<f64>,
    /// [`DetectorOptions::refine_sigma`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub refine_sigma: Option<f64>,
    /// [`DetectorOptions::max_asymmetry`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_asymmetry: Option<f64>,
    /// [`DetectorOptions::min_saddle_balance`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min_saddle_balance: Option<f64>,
    /// [`DetectorOptions::noise_factor`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub noise_factor: Option<f64>,
    /// [`DetectorOptions::threshold_radius`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threshold_radius: Option<usize>,
    /// [`DetectorOptions::min_blob_area`].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min_blob_area: Option<f64>,
    /// [`DetectorOptions::encoding`], as text (`"srgb"`, `"gamma=0.5"`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub encoding: Option<Encoding>,
}

/// The names [`DetectorOverrides::set`] accepts.
pub const OVERRIDE_NAMES: [&str; 10] = [
    "min_contrast",
    "checker_smoothing",
    "ring_radius",
    "refine_sigma",
    "max_asymmetry",
    "min_saddle_balance",
    "noise_factor",
    "threshold_radius",
    "min_blob_area",
    "encoding",
];

impl DetectorOverrides {
    /// Whether nothing is replaced.
    pub fn is_empty(&self) -> bool {
        *self == DetectorOverrides::default()
    }

    /// Replaces one setting from text, as given on a command line (`refine_sigma`, `0.8`).
    /// The value's range is checked when the options are built.
    pub fn set(&mut self, name: &str, value: &str) -> Result<(), RegressError> {
        let num = || {
            value.trim().parse::<f64>().ok().filter(|v| v.is_finite()).ok_or_else(|| {
                RegressError::field(name, format!("expected a finite number, got \"{value}\""))
            })
        };
        match name {
            "min_contrast" => self.min_contrast = Some(num()?),
            "checker_smoothing" => self.checker_smoothing = Some(num()?),
            "ring_radius" => self.ring_radius = Some(num()?),
            "refine_sigma" => self.refine_sigma = Some(num()?),
            "max_asymmetry" => self.max_asymmetry = Some(num()?),
            "min_saddle_balance" => self.min_saddle_balance = Some(num()?),
            "noise_factor" => self.noise_factor = Some(num()?),
            "min_blob_area" => self.min_blob_area = Some(num()?),
            "encoding" => {
                self.encoding =
                    Some(value.parse().map_err(|e: EncodingParseError| {
                        RegressError::field(name, e.to_string())
                    })?)
            }
            "threshold_radius" => {
                self.threshold_radius = Some(value.trim().parse::<usize>().map_err(|_| {
                    RegressError::field(name, format!("expected a whole number, got \"{value}\""))
                })?)
            }
            _ => {
                return Err(RegressError::field(
                    name,
                    format!("not a detector setting; one of {}", OVERRIDE_NAMES.join(", ")),
                ));
            }
        }
        Ok(())
    }

    /// These overrides with `later`'s set fields replacing them.
    pub fn then(&self, later: &DetectorOverrides) -> DetectorOverrides {
        DetectorOverrides {
            min_contrast: later.min_contrast.or(self.min_contrast),
            checker_smoothing: later.checker_smoothing.or(self.checker_smoothing),
            ring_radius: later.ring_radius.or(self.ring_radius),
            refine_sigma: later.refine_sigma.or(self.refine_sigma),
            max_asymmetry: later.max_asymmetry.or(self.max_asymmetry),
            min_saddle_balance: later.min_saddle_balance.or(self.min_saddle_balance),
            noise_factor: later.noise_factor.or(self.noise_factor),
            threshold_radius: later.threshold_radius.or(self.threshold_radius),
            min_blob_area: later.min_blob_area.or(self.min_blob_area),
            encoding: later.encoding.or(self.encoding),
        }
    }

    /// `base` with these settings replaced, checked; the error names the bad setting.
    pub fn apply(&self, base: &DetectorOptions) -> Result<DetectorOptions, DetectError> {
        let mut o = base.clone();
        macro_rules! take {
            ($($f:ident),*) => { $( if let Some(v) = self.$f { o.$f = v; } )* };
        }
        take!(
            min_contrast,
            checker_smoothing,
            ring_radius,
            refine_sigma,
            max_asymmetry,
            min_saddle_balance,
            noise_factor,
            threshold_radius,
            min_blob_area,
            encoding
        );
        o.validate()?;
        Ok(o)
    }
}

fn default_border() -> f64 {
    3.0
}

fn default_gate() -> f64 {
    2.0
}

fn yes() -> bool {
    true
}

/// The suite file as written.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SuiteSpec {
    /// Always [`SUITE_FORMAT`].
    pub format: String,
    /// Always [`SUITE_VERSION`].
    pub version: u32,
    /// A name for people; the baseline records it.
    #[serde(default)]
    pub name: String,
    /// Detector settings for every scenario (a scenario's own replace them).
    #[serde(default)]
    pub detector: DetectorOverrides,
    /// Features whose truth pixel lies within this many pixels of the image border are left
    /// out of recall and errors. Default 3 (the detector's recall requirement).
    #[serde(default = "default_border")]
    pub border_px: f64,
    /// An identified feature farther than this from its true pixel counts as a wrong
    /// identification. Default 2 px (a tenth of the smallest cell the suite uses).
    #[serde(default = "default_gate")]
    pub wrong_gate_px: f64,
    /// The scenarios, run in this order.
    pub scenarios: Vec<ScenarioSpec>,
}

/// One scenario as written.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ScenarioSpec {
    /// Unique name; baselines are keyed by it.
    pub name: String,
    /// The scene file, relative to the suite file's folder.
    pub scene: PathBuf,
    /// Number of views: replaces a random generator's `count`, or keeps the first views of
    /// a pose list. Default: the scene's own.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub views: Option<u32>,
    /// Replaces the scene's noise and clutter seed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub seed: Option<u64>,
    /// Part of the quick subset that CI runs on every change. Default false.
    #[serde(default)]
    pub quick: bool,
    /// The robustness axes the scenario exercises.
    #[serde(default)]
    pub axes: Vec<Axis>,
    /// Detector settings for this scenario.
    #[serde(default)]
    pub detector: DetectorOverrides,
    /// Compute the Cramer-Rao bound (four more noiseless renders per view). Default true.
    #[serde(default = "yes")]
    pub crb: bool,
    /// Radius, pixels, of the window the bound uses around every feature. Default: 6 px
    /// (3 times the detector's default `refine_sigma`) for checker and square corners, the
    /// dot's image radius plus 2 px for dots.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub crb_window_px: Option<f64>,
}

/// A checked scenario: its scene loaded with the seed and view count applied.
#[derive(Clone, Debug)]
pub struct Scenario {
    /// Unique name.
    pub name: String,
    /// The scene file.
    pub scene_path: PathBuf,
    /// The scene as used (seed and view count applied), for the cache key.
    pub scene_spec: SceneSpec,
    /// The checked scene.
    pub scene: Scene,
    /// In the quick subset.
    pub quick: bool,
    /// Robustness axes.
    pub axes: Vec<Axis>,
    /// Suite and scenario detector settings combined.
    pub detector: DetectorOverrides,
    /// Compute the Cramer-Rao bound.
    pub crb: bool,
    /// Fixed bound window, or the default by pattern kind.
    pub crb_window_px: Option<f64>,
}

/// A checked suite.
#[derive(Clone, Debug)]
pub struct Suite {
    /// The suite's name.
    pub name: String,
    /// Border margin of recall and errors, pixels.
    pub border_px: f64,
    /// Distance beyond which an identification is wrong, pixels.
    pub wrong_gate_px: f64,
    /// The scenarios, in file order.
    pub scenarios: Vec<Scenario>,
}

/// Checks `format` and `version` first, so that a file of another kind gets that message.
pub(crate) fn check_header(text: &str, format: &str, version: u32) -> Result<(), RegressError> {
    let v: serde_json::Value =
        serde_json::from_str(text).map_err(|e| RegressError::Parse(e.to_string()))?;
    match v.get("format").and_then(|f| f.as_str()) {
        Some(f) if f == format => {}
        Some(f) => {
            return Err(RegressError::field(
                "format",
                format!("must be \"{format}\", got \"{f}\""),
            ));
        }
        None => {
            return Err(RegressError::field("format", format!("missing; must be \"{format}\"")));
        }
    }
    match v.get("version").and_then(|f| f.as_u64()) {
        Some(n) if n == version as u64 => Ok(()),
        Some(n) => Err(RegressError::field(
            "version",
            format!("this program reads version {version}, got {n}"),
        )),
        None => Err(RegressError::field("version", "missing or not a whole number")),
    }
}

impl Suite {
    /// Reads and checks a suite file and every scene it names (relative to its folder).
    pub fn load(path: &Path) -> Result<Suite, RegressError> {
        let text = facetcal_inputs::read_json_text(path)?;
        Suite::from_json(&text, path.parent().unwrap_or(Path::new(".")))
    }

    /// Checks a suite file's text; scene paths are resolved against `base_dir`.
    pub fn from_json(text: &str, base_dir: &Path) -> Result<Suite, RegressError> {
        check_header(text, SUITE_FORMAT, SUITE_VERSION)?;
        let spec: SuiteSpec = parse_json(text)?;
        Suite::from_spec(spec, base_dir)
    }

    /// Checks a parsed suite.
    pub fn from_spec(spec: SuiteSpec, base_dir: &Path) -> Result<Suite, RegressError> {
        if !(spec.border_px.is_finite() && (0.0..=100.0).contains(&spec.border_px)) {
            return Err(RegressError::field(
                "border_px",
                format!("must be in [0, 100], got {}", spec.border_px),
            ));
        }
        if !(spec.wrong_gate_px.is_finite() && spec.wrong_gate_px > 0.0) {
            return Err(RegressError::field(
                "wrong_gate_px",
                format!("must be positive, got {}", spec.wrong_gate_px),
            ));
        }
        if spec.scenarios.is_empty() {
            return Err(RegressError::field("scenarios", "a suite needs at least one scenario"));
        }
        let defaults = DetectorOptions::default();
        spec.detector.apply(&defaults).map_err(|e| detector_error("detector", e))?;
        let mut names = BTreeSet::new();
        let mut scenarios = Vec::with_capacity(spec.scenarios.len());
        for (i, s) in spec.scenarios.into_iter().enumerate() {
            let at = |field: &str| format!("scenarios[{i}].{field}");
            if s.name.trim().is_empty() || s.name.chars().any(char::is_control) {
                return Err(RegressError::field(at("name"), "must be non-empty, printable text"));
            }
            if !names.insert(s.name.clone()) {
                return Err(RegressError::field(
                    at("name"),
                    format!("\"{}\" is used by an earlier scenario", s.name),
                ));
            }
            let detector = spec.detector.then(&s.detector);
            detector
                .apply(&defaults)
                .map_err(|e| detector_error(&format!("scenarios[{i}].detector"), e))?;
            if let Some(r) = s.crb_window_px {
                if !(r.is_finite() && (1.0..=100.0).contains(&r)) {
                    return Err(RegressError::field(
                        at("crb_window_px"),
                        format!("must be in [1, 100] px, got {r}"),
                    ));
                }
            }
            let scene_path = base_dir.join(&s.scene);
            let scene_err = |source| RegressError::Scene {
                scenario: s.name.clone(),
                path: scene_path.clone(),
                source,
            };
            let scene_text = facetcal_inputs::read_json_text(&scene_path)?;
            let mut scene_spec = SceneSpec::from_json(&scene_text).map_err(scene_err)?;
            if let Some(seed) = s.seed {
                scene_spec.seed = seed;
            }
            if let Some(n) = s.views {
                if n == 0 {
                    return Err(RegressError::field(at("views"), "must be at least 1"));
                }
                match &mut scene_spec.poses {
                    PosesSpec::Random(g) => g.count = n,
                    PosesSpec::List(p) if p.len() >= n as usize => p.truncate(n as usize),
                    PosesSpec::List(p) => {
                        return Err(RegressError::field(
                            at("views"),
                            format!("the scene lists only {} poses, asked for {n}", p.len()),
                        ));
                    }
                }
            }
            let scene_dir = scene_path.parent().unwrap_or(Path::new("."));
            let scene = Scene::from_spec(scene_spec.clone(), scene_dir).map_err(scene_err)?;
            scenarios.push(Scenario {
                name: s.name,
                scene_path,
                scene_spec,
                scene,
                quick: s.quick,
                axes: s.axes,
                detector,
                crb: s.crb,
                crb_window_px: s.crb_window_px,
            });
        }
        Ok(Suite {
            name: spec.name,
            border_px: spec.border_px,
            wrong_gate_px: spec.wrong_gate_px,
            scenarios,
        })
    }

    /// The axes no scenario exercises.
    pub fn missing_axes(&self) -> Vec<Axis> {
        let seen: BTreeSet<Axis> = self.scenarios.iter().flat_map(|s| s.axes.clone()).collect();
        Axis::ALL.into_iter().filter(|a| !seen.contains(a)).collect()
    }
}

fn detector_error(prefix: &str, e: DetectError) -> RegressError {
    match e {
        DetectError::InvalidOption { field, value, reason } => {
            RegressError::field(format!("{prefix}.{field}"), format!("{reason}, got {value}"))
        }
        other => RegressError::field(prefix, other.to_string()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn overrides_parse_combine_and_are_checked() {
        let mut a = DetectorOverrides::default();
        assert!(a.is_empty());
        a.set("refine_sigma", "1.5").unwrap();
        a.set("threshold_radius", "30").unwrap();
        assert!(matches!(a.set("refine_sigma", "fast"), Err(RegressError::Field { .. })));
        assert!(a.set("threshold_radius", "2.5").is_err());
        let e = a.set("colour", "1").unwrap_err().to_string();
        assert!(e.starts_with("colour:") && e.contains("refine_sigma"), "{e}");
        let mut b = DetectorOverrides::default();
        b.set("refine_sigma", "3").unwrap();
        let c = a.then(&b);
        assert_eq!((c.refine_sigma, c.threshold_radius), (Some(3.0), Some(30)));
        let o = c.apply(&DetectorOptions::default()).unwrap();
        assert_eq!((o.refine_sigma, o.threshold_radius), (3.0, 30));
        let mut bad = DetectorOverrides::default();
        bad.set("refine_sigma", "0.1").unwrap();
        let e = detector_error("detector", bad.apply(&DetectorOptions::default()).unwrap_err());
        assert!(e.to_string().starts_with("detector.refine_sigma:"), "{e}");
    }

    #[test]
    fn headers_are_checked_before_the_shape() {
        let e = check_header(r#"{"format": "x", "version": 1}"#, SUITE_FORMAT, 1).unwrap_err();
        assert!(e.to_string().starts_with("format:"), "{e}");
        let e =
            check_header(r#"{"format": "facetcal-regress-suite", "version": 2}"#, SUITE_FORMAT, 1)
                .unwrap_err();
        assert!(e.to_string().starts_with("version:"), "{e}");
        assert!(matches!(check_header("[", SUITE_FORMAT, 1), Err(RegressError::Parse(_))));
    }
}
