//! The versioned file types the crates share: the correspondence file that `facetcal solve`
//! reads ([`CorrespondenceFile`], format `facetcal-correspondences`) and the calibration result
//! that `facetcal solve` and `facetcal calibrate` write ([`CalibrationFile`], format
//! `facetcal-calibration`).
//!
//! Both carry `format` and `version`; readers refuse other names and versions. Writers refuse
//! to write a non-finite number ([`CalibrationFile::to_json`]): JSON has no NaN, and
//! `serde_json` would silently write `null`.
//!
//! Lengths (target points, translations) are in the file's `unit`; pixels follow the crate's
//! pixel convention (top-left pixel centre at (0, 0)).

use serde::{Deserialize, Serialize};

use crate::camera::{Camera, DistortionKind};
use crate::error::ModelError;
use crate::geometry::PoseFile;
use crate::target::{FeatureId, Unit};

/// The `format` of a correspondence file.
pub const CORRESPONDENCE_FORMAT: &str = "facetcal-correspondences";
/// The `format` of a calibration result file.
pub const CALIBRATION_FORMAT: &str = "facetcal-calibration";
/// The version of both formats this build reads and writes.
pub const FILES_VERSION: u32 = 1;

/// Which camera parameters a calibration estimates (the others keep their starting values).
///
/// In files every field is optional; the defaults are the values below.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct FreeParameters {
    /// Estimate the skew (default `false`: skew stays at its starting value, normally 0).
    pub skew: bool,
    /// Estimate fx and fy independently (default `true`); when `false`, `fy / fx` keeps its
    /// starting ratio (1 without a starting camera).
    pub aspect_ratio: bool,
    /// Estimate cx, cy (default `true`); when `false` they stay at their starting values (the
    /// image centre without a starting camera).
    pub principal_point: bool,
    /// Estimate Brown-Conrady k3 (default `false`).
    pub k3: bool,
    /// Estimate the Brown-Conrady tangential terms p1, p2 (default `false`).
    pub tangential: bool,
}

impl Default for FreeParameters {
    fn default() -> Self {
        FreeParameters {
            skew: false,
            aspect_ratio: true,
            principal_point: true,
            k3: false,
            tangential: false,
        }
    }
}

/// One observed target point.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PointPair {
    /// The feature's identity, when known (needed for the target self-survey, which groups
    /// points by face).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub id: Option<FeatureId>,
    /// The point in the target frame, in the file's unit.
    pub target: [f64; 3],
    /// The observed pixel.
    pub image: [f64; 2],
}

/// The observations of one image.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ViewPoints {
    /// A name for the view (usually the image file name).
    pub name: String,
    /// The observed points.
    pub points: Vec<PointPair>,
}

/// The correspondence file `facetcal solve` reads.
///
/// ```json
/// { "format": "facetcal-correspondences", "version": 1, "unit": "in",
///   "image_size": [640, 480], "model": "brown-conrady",
///   "free": { "skew": true },
///   "views": [ { "name": "a.png", "points": [ { "target": [0, 0, 0], "image": [10.5, 20.25] } ] } ] }
/// ```
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CorrespondenceFile {
    /// Always [`CORRESPONDENCE_FORMAT`].
    pub format: String,
    /// Always [`FILES_VERSION`].
    pub version: u32,
    /// The unit of the target points.
    pub unit: Unit,
    /// Image width and height, pixels.
    pub image_size: [u32; 2],
    /// The distortion model to estimate.
    pub model: DistortionKind,
    /// Which parameters are free (every field optional).
    #[serde(default)]
    pub free: FreeParameters,
    /// A starting camera; without one the solver initialises in closed form.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub initial: Option<Camera>,
    /// Also estimate the poses of faces 2..n relative to the first face (default `false`).
    #[serde(default)]
    pub survey_faces: bool,
    /// The views.
    pub views: Vec<ViewPoints>,
}

/// Parses JSON, naming the path of a bad field (`faces[2].pattern.rows`) in the error.
pub fn parse_with_path<T: serde::de::DeserializeOwned>(text: &str) -> Result<T, ModelError> {
    let de = &mut serde_json::Deserializer::from_str(text);
    serde_path_to_error::deserialize(de).map_err(|e| {
        let path = e.path().to_string();
        let inner = e.into_inner();
        if path == "." || path == "?" || path.is_empty() {
            ModelError::Parse(inner.to_string())
        } else {
            ModelError::field(path, inner.to_string())
        }
    })
}

/// Checks a camera read from a file, naming the field (`at` is its JSON path): an image size
/// within [`facetcal_inputs::MAX_PIXELS`] (the pixel limit of images, since the camera's image
/// size sizes the buffers made from it), positive finite focal lengths, finite skew and
/// distortion, and a principal point no further than one image size outside the image.
pub fn check_file_camera(c: &Camera, at: &str) -> Result<(), ModelError> {
    check_image_size([c.width, c.height], at)?;
    let i = &c.intrinsics;
    for (name, v) in [("fx", i.fx), ("fy", i.fy)] {
        if !(v.is_finite() && v > 0.0) {
            return Err(ModelError::field(
                format!("{at}.intrinsics.{name}"),
                format!("must be a positive finite focal length, got {v}"),
            ));
        }
    }
    let (w, h) = (c.width as f64, c.height as f64);
    for (name, v, size) in [("cx", i.cx, w), ("cy", i.cy, h)] {
        if !(v.is_finite() && v >= -size && v <= 2.0 * size) {
            return Err(ModelError::field(
                format!("{at}.intrinsics.{name}"),
                format!("the principal point must lie within one image size of the image, got {v}"),
            ));
        }
    }
    if !i.skew.is_finite() {
        return Err(ModelError::field(format!("{at}.intrinsics.skew"), "must be finite"));
    }
    let d = &c.distortion;
    for (name, v) in d.names().iter().zip(d.coefficients()) {
        if !v.is_finite() {
            return Err(ModelError::field(
                format!("{at}.distortion.{name}"),
                format!("must be finite, got {v}"),
            ));
        }
    }
    c.validate().map_err(|e| ModelError::field(at, e.to_string()))
}

/// Checks an image size `[width, height]` read from a file: both positive, and at most
/// [`facetcal_inputs::MAX_PIXELS`] pixels in all.
pub fn check_image_size(size: [u32; 2], at: &str) -> Result<(), ModelError> {
    let [w, h] = size;
    if w == 0 || h == 0 {
        return Err(ModelError::field(
            at,
            format!("width and height must be positive, got {w} x {h}"),
        ));
    }
    let limit = facetcal_inputs::MAX_PIXELS;
    if w as u64 * h as u64 > limit {
        return Err(ModelError::field(
            at,
            format!("{w} x {h} pixels is over the limit of {limit} pixels (the limit of images)"),
        ));
    }
    Ok(())
}

/// Checks `format` and `version` before the rest of the file is interpreted, so that a file
/// of another kind or version gets that message rather than a shape error.
fn check_header(text: &str, format: &str) -> Result<(), ModelError> {
    #[derive(Deserialize)]
    struct Header {
        format: Option<String>,
        version: Option<u32>,
    }
    let h: Header = serde_json::from_str(text).map_err(|e| ModelError::Parse(e.to_string()))?;
    match h.format.as_deref() {
        Some(f) if f == format => {}
        Some(f) => return Err(ModelError::field("format", format!("expected {format}, got {f}"))),
        None => return Err(ModelError::field("format", "missing")),
    }
    match h.version {
        Some(FILES_VERSION) => Ok(()),
        Some(v) => Err(ModelError::field(
            "version",
            format!("this build reads version {FILES_VERSION}, got {v}"),
        )),
        None => Err(ModelError::field("version", "missing")),
    }
}

impl CorrespondenceFile {
    /// A file for these views, with the current format and version.
    pub fn new(
        unit: Unit,
        image_size: [u32; 2],
        model: DistortionKind,
        views: Vec<ViewPoints>,
    ) -> Self {
        CorrespondenceFile {
            format: CORRESPONDENCE_FORMAT.into(),
            version: FILES_VERSION,
            unit,
            image_size,
            model,
            free: FreeParameters::default(),
            initial: None,
            survey_faces: false,
            views,
        }
    }

    /// Parses and checks a correspondence file: header, shape, finite numbers, a positive image
    /// size. Errors name the JSON path of the field.
    pub fn from_json(text: &str) -> Result<Self, ModelError> {
        check_header(text, CORRESPONDENCE_FORMAT)?;
        let f: CorrespondenceFile = parse_with_path(text)?;
        check_image_size(f.image_size, "image_size")?;
        if f.views.is_empty() {
            return Err(ModelError::field("views", "no views"));
        }
        for (v, view) in f.views.iter().enumerate() {
            for (k, p) in view.points.iter().enumerate() {
                if !p.target.iter().all(|x| x.is_finite()) {
                    return Err(ModelError::field(
                        format!("views[{v}].points[{k}].target"),
                        "must be finite",
                    ));
                }
                if !p.image.iter().all(|x| x.is_finite()) {
                    return Err(ModelError::field(
                        format!("views[{v}].points[{k}].image"),
                        "must be finite",
                    ));
                }
            }
        }
        if let Some(c) = &f.initial {
            check_file_camera(c, "initial")?;
            if c.distortion.kind() != f.model {
                return Err(ModelError::field(
                    "initial.distortion",
                    format!(
                        "model {} differs from model {}",
                        c.distortion.kind().name(),
                        f.model.name()
                    ),
                ));
            }
        }
        Ok(f)
    }

    /// The file's text, pretty-printed (every number in it is finite once parsed).
    pub fn to_json(&self) -> Result<String, ModelError> {
        to_checked_json(self)
    }
}

/// Whether a parameter was estimated.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ParameterStatus {
    /// Estimated from the data; `std_dev` is given.
    Estimated,
    /// Held at its starting value.
    Fixed,
    /// Tied to another parameter (fy when the aspect ratio is fixed); `std_dev` is given.
    Tied,
}

/// One camera parameter with its uncertainty.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ParameterEstimate {
    /// The parameter's name (`fx`, `fy`, `cx`, `cy`, `skew`, `k1`...).
    pub name: String,
    /// Its value.
    pub value: f64,
    /// Its standard deviation (covariance scaled by the residual variance); absent if fixed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub std_dev: Option<f64>,
    /// Estimated, fixed or tied.
    pub status: ParameterStatus,
}

/// A correlation matrix with the names of its rows and columns.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Correlation {
    /// Names of the estimated parameters, in row order.
    pub names: Vec<String>,
    /// Row-major square matrix, ones on the diagonal.
    pub matrix: Vec<Vec<f64>>,
}

/// How a view took part in the calibration.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ViewStatus {
    /// Its pose was estimated and its points used.
    Used,
    /// Left out by the solver: too few points remained after rejection, or its pose could not
    /// be initialised.
    Dropped,
    /// Never reached the solver: the file could not be read or decoded, or the target was not
    /// found in it (written by `facetcal calibrate`).
    Failed,
}

/// The result for one view.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ViewResult {
    /// The view's name.
    pub name: String,
    /// Used or dropped.
    pub status: ViewStatus,
    /// Why the view was dropped.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    /// Target frame to camera frame (absent when dropped).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pose: Option<PoseFile>,
    /// Standard deviations of the pose increment `[omega (rad), t (unit)]`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pose_std_dev: Option<[f64; 6]>,
    /// RMS reprojection error of the view's inliers, pixels.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rms_px: Option<f64>,
    /// Reprojection residual `observed - projected` of every input point, in input order
    /// (absent when dropped). Rejected points are included and listed in
    /// [`CalibrationFile::rejected`].
    #[serde(default)]
    pub residuals: Vec<[f64; 2]>,
    /// The identity of each point, in the order of `residuals` (written by `facetcal
    /// calibrate`; empty when the input had no identities).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub ids: Vec<FeatureId>,
    /// The observed pixel of each point, in the order of `residuals` (written by `facetcal
    /// calibrate`).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub observed: Vec<[f64; 2]>,
}

/// A point left out by the outlier test.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RejectedPoint {
    /// Index of the view.
    pub view: usize,
    /// Index of the point within the view's input.
    pub index: usize,
    /// The feature, when known.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub id: Option<FeatureId>,
    /// Residual `observed - projected` when it was rejected, pixels.
    pub residual: [f64; 2],
    /// Its length, pixels.
    pub residual_px: f64,
}

/// The estimated pose of a face relative to the first face (target self-survey).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FaceResult {
    /// The face id.
    pub face: u32,
    /// The correction `X' = R X + t` applied to the face's nominal target-frame points.
    pub correction: PoseFile,
    /// Standard deviations of `[omega (rad), t (unit)]`.
    pub std_dev: [f64; 6],
    /// The face's pose (face frame to target frame) after correction, when the nominal pose
    /// is known (the calibrate command fills it; `solve` knows only target points).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pose: Option<PoseFile>,
}

/// What the solver did.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SolverRecord {
    /// Levenberg-Marquardt iterations, all rounds of outlier rejection together.
    pub iterations: usize,
    /// Cost `1/2 sum rho(|r|^2)` at the start, pixels squared.
    pub initial_cost: f64,
    /// Cost at the end.
    pub final_cost: f64,
    /// Which stopping test fired (kebab-case name).
    pub termination: String,
    /// Whether the result is usable (converged, enough data).
    pub usable: bool,
    /// One-line account.
    pub message: String,
}

/// A warning about what the data do not constrain.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct WarningRecord {
    /// A short kebab-case kind (`weak-parameter`, `strong-correlation`...).
    pub kind: String,
    /// The parameters concerned.
    pub parameters: Vec<String>,
    /// A sentence for a person.
    pub message: String,
}

/// A hash of one input file (written by `facetcal calibrate`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct InputRecord {
    /// The path as given.
    pub path: String,
    /// SHA-256 of the file's bytes, lower-case hex.
    pub sha256: String,
}

/// One test of the quality verdict.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct VerdictCheck {
    /// A short kebab-case name (`rms`, `coverage`, `used-images`...).
    pub name: String,
    /// The measured value.
    pub value: f64,
    /// The threshold it was held to.
    pub limit: f64,
    /// `at-most` or `at-least`.
    pub bound: String,
    /// Whether the value is within the limit.
    pub passed: bool,
    /// A sentence for a person.
    pub message: String,
}

/// The quality verdict of a calibration (written by `facetcal calibrate`): every check with
/// the threshold used.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Verdict {
    /// Whether every check passed.
    pub passed: bool,
    /// The checks, in a fixed order.
    pub checks: Vec<VerdictCheck>,
}

/// The calibration result file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CalibrationFile {
    /// Always [`CALIBRATION_FORMAT`].
    pub format: String,
    /// Always [`FILES_VERSION`].
    pub version: u32,
    /// The program that wrote the file (`facetcal 0.1.0`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub program: Option<String>,
    /// The unit of translations.
    pub unit: Unit,
    /// The calibrated camera: image size, intrinsics, distortion model and coefficients.
    pub camera: Camera,
    /// Every camera parameter with status and standard deviation, in parameter-vector order.
    pub parameters: Vec<ParameterEstimate>,
    /// Correlations of the estimated parameters.
    pub correlation: Correlation,
    /// RMS reprojection error of all inliers, pixels.
    pub rms_px: f64,
    /// Per view, in input order.
    pub views: Vec<ViewResult>,
    /// Points rejected as outliers, with their residuals.
    pub rejected: Vec<RejectedPoint>,
    /// Face corrections of the target self-survey (empty when not requested).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub faces: Vec<FaceResult>,
    /// The solver's summary.
    pub summary: SolverRecord,
    /// What the data do not constrain.
    pub warnings: Vec<WarningRecord>,
    /// The target file and its hash (written by `facetcal calibrate`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub target_file: Option<InputRecord>,
    /// Hashes of the input images, in the order of `views` (written by `facetcal calibrate`).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub inputs: Vec<InputRecord>,
    /// The quality verdict with its thresholds (written by `facetcal calibrate`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub verdict: Option<Verdict>,
}

impl CalibrationFile {
    /// Reads and checks a calibration file: a regular file of at most
    /// [`facetcal_inputs::MAX_JSON_BYTES`], then [`CalibrationFile::from_json`].
    pub fn load(path: &std::path::Path) -> Result<Self, ModelError> {
        CalibrationFile::from_json(&facetcal_inputs::read_json_text(path)?)
    }

    /// Parses a calibration file, refusing other formats and versions, and checks its camera
    /// ([`check_file_camera`]) before anything is sized from it.
    pub fn from_json(text: &str) -> Result<Self, ModelError> {
        check_header(text, CALIBRATION_FORMAT)?;
        let f: CalibrationFile = parse_with_path(text)?;
        check_file_camera(&f.camera, "camera")?;
        Ok(f)
    }

    /// The file's text, pretty-printed. Fails, naming the field, if any number is not finite.
    pub fn to_json(&self) -> Result<String, ModelError> {
        to_checked_json(self)
    }
}

/// Serialises and refuses any `null` in the output: every optional field of these files is
/// skipped when absent, so a `null` can only be a non-finite number.
fn to_checked_json<T: Serialize>(v: &T) -> Result<String, ModelError> {
    let value = serde_json::to_value(v).map_err(|e| ModelError::Parse(e.to_string()))?;
    if let Some(path) = find_null(&value, String::new()) {
        return Err(ModelError::field(path, "is not a finite number"));
    }
    serde_json::to_string_pretty(&value).map_err(|e| ModelError::Parse(e.to_string()))
}

/// The JSON path of the first `null` in a serialised value (`views[3].rms_px`), if any. The
/// files of this crate skip absent optional fields, so in them a `null` can only be a number
/// that was not finite.
pub fn first_null_path(v: &serde_json::Value) -> Option<String> {
    find_null(v, String::new())
}

fn find_null(v: &serde_json::Value, path: String) -> Option<String> {
    match v {
        serde_json::Value::Null => Some(if path.is_empty() { ".".into() } else { path }),
        serde_json::Value::Array(a) => {
            a.iter().enumerate().find_map(|(i, x)| find_null(x, format!("{path}[{i}]")))
        }
        serde_json::Value::Object(o) => o.iter().find_map(|(k, x)| {
            let p = if path.is_empty() { k.clone() } else { format!("{path}.{k}") };
            find_null(x, p)
        }),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> CorrespondenceFile {
        CorrespondenceFile::new(
            Unit::Mm,
            [640, 480],
            DistortionKind::BrownConrady,
            vec![ViewPoints {
                name: "a".into(),
                points: vec![PointPair { id: None, target: [0.0, 1.0, 0.0], image: [3.0, 4.0] }],
            }],
        )
    }

    #[test]
    fn correspondence_file_round_trips_and_defaults_apply() {
        let f = sample();
        let text = f.to_json().unwrap();
        assert_eq!(CorrespondenceFile::from_json(&text).unwrap(), f);
        let minimal = r#"{"format":"facetcal-correspondences","version":1,"unit":"in",
            "image_size":[640,480],"model":"none","free":{"skew":true},
            "views":[{"name":"v","points":[{"target":[0,0,0],"image":[1,2]}]}]}"#;
        let g = CorrespondenceFile::from_json(minimal).unwrap();
        assert!(g.free.skew && g.free.aspect_ratio && g.free.principal_point && !g.free.k3);
    }

    #[test]
    fn readers_refuse_other_versions_and_formats_naming_the_field() {
        let text = sample().to_json().unwrap().replace("\"version\": 1", "\"version\": 7");
        let e = CorrespondenceFile::from_json(&text).unwrap_err().to_string();
        assert!(e.starts_with("version:"), "{e}");
        let text = sample().to_json().unwrap().replace("facetcal-correspondences", "other");
        let e = CorrespondenceFile::from_json(&text).unwrap_err().to_string();
        assert!(e.starts_with("format:"), "{e}");
        let text = sample().to_json().unwrap().replace("\"image_size\"", "\"image_sz\"");
        assert!(CorrespondenceFile::from_json(&text).is_err());
    }

    #[test]
    fn non_finite_numbers_are_never_written() {
        let mut f = sample();
        f.views[0].points[0].image[1] = f64::NAN;
        let e = f.to_json().unwrap_err().to_string();
        assert!(e.contains("views[0].points[0].image[1]"), "{e}");
    }
}
