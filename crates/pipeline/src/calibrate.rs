//! From a folder of image files to a calibration result: listing, per-image observation
//! (read, decode, detect, identify) in parallel, the solve, the perspective correction of dot
//! centres, the quality verdict, and the result file with every input's hash.
//!
//! One image is decoded, detected and dropped at a time per worker; only its identified features
//! are kept, so memory does not grow with the image count beyond a few kilobytes per image. An
//! image that cannot be used gets a reason and the batch goes on.

use std::path::{Path, PathBuf};

use facetcal_detector::{
    DetectorOptions, GreyImage, MarkProbe, circle_centre_offset, detect, mark_samples,
};
use facetcal_imageio::LoadOptions;
use facetcal_matcher::{Correspondence, DetectionKind, MatchOptions, identify_with};
use facetcal_model::files::{
    CalibrationFile, InputRecord, PointPair, ViewPoints, ViewResult, ViewStatus,
};
use facetcal_model::target::{FeatureId, PatternSpec};
use facetcal_model::{Camera, DistortionKind, Pose, PoseFile, Target};
use facetcal_solver::{Calibration, Observation, Options, ViewObservations};
use nalgebra::{Point2, Point3};
use rayon::prelude::*;

use crate::error::PipelineError;
use crate::verdict::{QualityGate, judge};

/// Everything that steers a calibration run. `Default` is what `facetcal calibrate` uses
/// without options.
#[derive(Clone, Debug)]
pub struct Settings {
    /// The distortion model to estimate (default Brown-Conrady).
    pub model: DistortionKind,
    /// The solver's options: free parameters, target self-survey, loss, outlier test.
    pub solver: Options,
    /// Decoding limits and EXIF orientation policy.
    pub load: LoadOptions,
    /// Detector options; the pattern kinds are taken from the target.
    pub detector: DetectorOptions,
    /// Matcher options.
    pub matcher: MatchOptions,
    /// Thresholds of the quality verdict.
    pub gate: QualityGate,
    /// Correct dot centres for perspective bias once the camera is known (default `true`).
    pub correct_dot_centres: bool,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            model: DistortionKind::BrownConrady,
            solver: Options::default(),
            load: LoadOptions::default(),
            detector: DetectorOptions::default(),
            matcher: MatchOptions::default(),
            gate: QualityGate::default(),
            correct_dot_centres: true,
        }
    }
}

/// The features identified in one image.
#[derive(Clone, Debug, PartialEq)]
pub struct ImageFeatures {
    /// Image width and height, pixels.
    pub size: (u32, u32),
    /// The identified features.
    pub points: Vec<Correspondence>,
    /// Feature detections before identification.
    pub detected: usize,
    /// Detections that were not identified.
    pub left_out: usize,
}

/// Why an image took no part in the calibration.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ImageFailure {
    /// Where it failed: `read` (missing, unreadable, not decodable, truncated, too large,
    /// rotated by EXIF), `detect`, `identify` (no target feature identified), `image-size`
    /// (differs from the batch's size).
    pub stage: &'static str,
    /// A sentence for a person, naming the file.
    pub message: String,
}

/// One input image and what became of it.
#[derive(Clone, Debug, PartialEq)]
pub struct ImageRecord {
    /// The path as listed.
    pub path: PathBuf,
    /// The file name, the view's name in the result.
    pub name: String,
    /// SHA-256 of the file's bytes, when it could be read.
    pub sha256: Option<String>,
    /// The features, or why there are none.
    pub outcome: Result<ImageFeatures, ImageFailure>,
}

/// A file of the input folder that is not read: its name has no image extension.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct SkippedFile {
    /// The file.
    pub path: PathBuf,
    /// Why it is not read.
    pub reason: String,
}

/// The image files of a folder, sorted by name, and the other files with the reason they are
/// not read. Dotfiles and subfolders are ignored.
pub fn list_images(dir: &Path) -> Result<(Vec<PathBuf>, Vec<SkippedFile>), PipelineError> {
    let io = |source| PipelineError::Folder { path: dir.to_path_buf(), source };
    let mut images = Vec::new();
    let mut skipped = Vec::new();
    for entry in std::fs::read_dir(dir).map_err(io)? {
        let path = entry.map_err(io)?.path();
        let name = path.file_name().and_then(|n| n.to_str()).unwrap_or("");
        if name.starts_with('.') || path.is_dir() {
            continue;
        }
        // A FIFO or device is never opened: reading one could block or never end.
        let special = match std::fs::metadata(&path) {
            Ok(meta) => facetcal_inputs::special_kind(&meta),
            Err(e) => {
                skipped.push(SkippedFile { path, reason: format!("cannot read: {e}") });
                continue;
            }
        };
        if let Some(kind) = special {
            skipped.push(SkippedFile { path, reason: format!("is {kind}, not a regular file") });
        } else if facetcal_imageio::is_image_name(&path) {
            images.push(path);
        } else {
            skipped.push(SkippedFile {
                path,
                reason: "not an image file name (png, jpg, jpeg, tif, tiff, bmp, gif)".into(),
            });
        }
    }
    images.sort();
    skipped.sort_by(|a, b| a.path.cmp(&b.path));
    Ok((images, skipped))
}

fn file_name(path: &Path) -> String {
    path.file_name().map_or_else(|| path.display().to_string(), |n| n.to_string_lossy().into())
}

/// Reads, detects and identifies one image. The decoded pixels are dropped before returning.
pub fn observe_image(path: &Path, target: &Target, settings: &Settings) -> ImageRecord {
    let name = file_name(path);
    let loaded = match facetcal_imageio::load(path, &settings.load) {
        Ok(l) => l,
        Err(e) => {
            let failure = ImageFailure { stage: "read", message: e.to_string() };
            return ImageRecord { path: path.into(), name, sha256: None, outcome: Err(failure) };
        }
    };
    let sha256 = Some(loaded.sha256.clone());
    let grey = GreyImage::from_dynamic(&loaded.image);
    drop(loaded);
    let opts = DetectorOptions { kinds: target.pattern_kinds(), ..settings.detector.clone() };
    let fail = |stage, message: String| ImageRecord {
        path: path.into(),
        name: name.clone(),
        sha256: sha256.clone(),
        outcome: Err(ImageFailure { stage, message }),
    };
    let found = match detect(&grey, &opts) {
        Ok(f) => f,
        Err(e) => return fail("detect", format!("{}: {e}", path.display())),
    };
    // The face codes are read on the image itself where a lattice is found.
    let probe = |p: &[MarkProbe]| mark_samples(&grey, p);
    let id = match identify_with(&found, target, &settings.matcher, &probe) {
        Ok(i) => i,
        Err(e) => return fail("identify", format!("{}: {e}", path.display())),
    };
    drop(grey);
    let detected = found.checker_corners.len() + found.dots.len() + 4 * found.squares.len();
    if id.point_count() == 0 {
        let refused: Vec<String> = id.rejected.iter().map(|r| r.to_string()).collect();
        let detail = if refused.is_empty() {
            String::new()
        } else {
            format!("; refused: {}", refused.join("; "))
        };
        return fail(
            "identify",
            format!(
                "{}: no feature of the target identified ({detected} detections){detail}",
                path.display()
            ),
        );
    }
    let features = ImageFeatures {
        size: (found.width, found.height),
        points: id.points().copied().collect(),
        detected,
        left_out: id.left_out.len(),
    };
    ImageRecord { path: path.into(), name, sha256, outcome: Ok(features) }
}

/// [`observe_image`] for every path, in parallel; records come back in input order.
/// `progress` is called once per finished image, from the worker threads.
pub fn observe_images_par(
    paths: &[PathBuf],
    target: &Target,
    settings: &Settings,
    progress: &(dyn Fn(&ImageRecord) + Sync),
) -> Vec<ImageRecord> {
    paths
        .par_iter()
        .map(|p| {
            let r = observe_image(p, target, settings);
            progress(&r);
            r
        })
        .collect()
}

/// A finished calibration run.
#[derive(Clone, Debug)]
pub struct CalibrationRun {
    /// The result file's contents (checked for finite numbers when written).
    pub file: CalibrationFile,
    /// The observations of each view of `file.views` (empty for failed images), as used: dot
    /// centres after perspective correction.
    pub observations: Vec<ViewPoints>,
    /// The solver's result.
    pub calibration: Calibration,
}

/// Image sizes must agree: intrinsics belong to one sensor mode. The most common size wins
/// (the first seen among equals).
fn batch_size(records: &[ImageRecord]) -> Option<(u32, u32)> {
    let mut counts: Vec<((u32, u32), usize)> = Vec::new();
    for r in records {
        if let Ok(f) = &r.outcome {
            match counts.iter_mut().find(|(s, _)| *s == f.size) {
                Some((_, n)) => *n += 1,
                None => counts.push((f.size, 1)),
            }
        }
    }
    let best = counts.iter().map(|(_, n)| *n).max()?;
    counts.iter().find(|(_, n)| *n == best).map(|(s, _)| *s)
}

/// The dot radius and local centre of each dot feature, when the target's face has dots.
fn dot_circle(target: &Target, id: FeatureId) -> Option<(Point2<f64>, f64, &Pose)> {
    let face = target.face(id.face)?;
    match face.pattern() {
        PatternSpec::DotGrid { diameter, .. } => {
            let c = face.feature_local(id.row, id.col, id.corner)?;
            Some((c, diameter / 2.0, face.pose()))
        }
        _ => None,
    }
}

/// The image of a dot's centre from the measured centre of its image: the measured centre
/// plus `H c - e` (see `facetcal_detector::circle_centre_offset`), with `H` the homography that
/// best fits the camera's mapping of the dot's neighbourhood on its face (so lens distortion
/// enters to first order across the dot).
fn corrected_dot(
    camera: &Camera,
    pose: &Pose,
    target: &Target,
    c: &Correspondence,
) -> Option<[f64; 2]> {
    let (centre, radius, face_pose) = dot_circle(target, c.id)?;
    let to_camera = pose.compose(face_pose);
    let mut pairs = Vec::with_capacity(9);
    for dy in [-1.0, 0.0, 1.0] {
        for dx in [-1.0, 0.0, 1.0] {
            let q = Point2::new(centre.x + dx * radius, centre.y + dy * radius);
            let x = to_camera.transform(&Point3::new(q.x, q.y, 0.0));
            pairs.push((q, camera.project(&x).ok()?));
        }
    }
    let h = facetcal_solver::linear::homography(0, &pairs).ok()?;
    let d = circle_centre_offset(&h, centre, radius).ok()?;
    let out = [c.image[0] + d.x, c.image[1] + d.y];
    out.iter().all(|v| v.is_finite()).then_some(out)
}

fn solver_views(
    used: &[(usize, Vec<Correspondence>)],
    records: &[ImageRecord],
) -> Vec<ViewObservations> {
    used.iter()
        .map(|(i, pts)| ViewObservations {
            name: records[*i].name.clone(),
            points: pts
                .iter()
                .map(|c| Observation {
                    id: Some(c.id),
                    target: Point3::from(c.target),
                    image: Point2::from(c.image),
                })
                .collect(),
        })
        .collect()
}

/// Solves for the camera from the observed images and builds the result file: views in input
/// order (failed images with their reasons), hashes, the program name, the verdict.
pub fn calibrate_records(
    records: &[ImageRecord],
    target: &Target,
    target_file: InputRecord,
    program: &str,
    settings: &Settings,
) -> Result<CalibrationRun, PipelineError> {
    let size = batch_size(records);
    let mut failures: Vec<Option<ImageFailure>> = Vec::with_capacity(records.len());
    let mut used: Vec<(usize, Vec<Correspondence>)> = Vec::new();
    for (i, r) in records.iter().enumerate() {
        match &r.outcome {
            Err(f) => failures.push(Some(f.clone())),
            Ok(f) if Some(f.size) != size => failures.push(Some(ImageFailure {
                stage: "image-size",
                message: format!(
                    "{}: {} x {} px differs from the batch's {} x {} px",
                    r.path.display(),
                    f.size.0,
                    f.size.1,
                    size.map_or(0, |s| s.0),
                    size.map_or(0, |s| s.1)
                ),
            })),
            Ok(f) => {
                failures.push(None);
                used.push((i, f.points.clone()));
            }
        }
    }
    let Some(size) = size.filter(|_| !used.is_empty()) else {
        return Err(PipelineError::NoUsableImage {
            images: records.len(),
            reasons: failures.iter().flatten().map(|f| f.message.clone()).collect(),
        });
    };
    let views = solver_views(&used, records);
    let mut cal = facetcal_solver::calibrate(&views, size, settings.model, None, &settings.solver)?;
    let has_dots = used.iter().flat_map(|(_, p)| p).any(|c| c.detection.kind == DetectionKind::Dot);
    if settings.correct_dot_centres && has_dots {
        // The correction depends on the pose and camera only weakly: two passes converge.
        for _ in 0..2 {
            for (v, (i, pts)) in used.iter_mut().enumerate() {
                let (Some(pose), Ok(measured)) = (cal.poses[v], &records[*i].outcome) else {
                    continue;
                };
                for (c, m) in pts.iter_mut().zip(&measured.points) {
                    if c.detection.kind == DetectionKind::Dot {
                        let raw = Correspondence { image: m.image, ..*c };
                        if let Some(p) = corrected_dot(&cal.camera, &pose, target, &raw) {
                            c.image = p;
                        }
                    }
                }
            }
            let views = solver_views(&used, records);
            cal = facetcal_solver::calibrate(
                &views,
                size,
                settings.model,
                Some(&cal.camera),
                &settings.solver,
            )?;
        }
    }
    let file = build_file(records, &failures, &used, &cal, target, target_file, program, settings);
    let observations = file_observations(records, &failures, &used);
    Ok(CalibrationRun { file, observations, calibration: cal })
}

#[allow(clippy::too_many_arguments)]
fn build_file(
    records: &[ImageRecord],
    failures: &[Option<ImageFailure>],
    used: &[(usize, Vec<Correspondence>)],
    cal: &Calibration,
    target: &Target,
    target_file: InputRecord,
    program: &str,
    settings: &Settings,
) -> CalibrationFile {
    let mut file = cal.to_file(target.unit());
    let mut solved = std::mem::take(&mut file.views).into_iter();
    // Record index -> view index in the file, for the rejected points.
    let mut view_of_used = Vec::with_capacity(used.len());
    let mut used_iter = used.iter().peekable();
    for (i, r) in records.iter().enumerate() {
        if let Some(f) = &failures[i] {
            file.views.push(ViewResult {
                name: r.name.clone(),
                status: ViewStatus::Failed,
                reason: Some(format!("{}: {}", f.stage, f.message)),
                pose: None,
                pose_std_dev: None,
                rms_px: None,
                residuals: vec![],
                ids: vec![],
                observed: vec![],
            });
            continue;
        }
        let Some((_, pts)) = used_iter.next() else { break };
        let Some(mut view) = solved.next() else { break };
        view.ids = pts.iter().map(|c| c.id).collect();
        view.observed = pts.iter().map(|c| c.image).collect();
        view_of_used.push(file.views.len());
        file.views.push(view);
    }
    for p in &mut file.rejected {
        if let Some(&v) = view_of_used.get(p.view) {
            p.view = v;
        }
    }
    for f in &mut file.faces {
        if let Some(face) = target.face(f.face) {
            let correction = Pose::from(f.correction);
            f.pose = Some(PoseFile::from(correction.compose(face.pose())));
        }
    }
    file.program = Some(program.to_string());
    file.target_file = Some(target_file);
    file.inputs = records
        .iter()
        .filter_map(|r| {
            r.sha256
                .as_ref()
                .map(|h| InputRecord { path: r.path.display().to_string(), sha256: h.clone() })
        })
        .collect();
    let observations = file_observations(records, failures, used);
    file.verdict = Some(judge(&file, &observations, target, cal, &settings.gate));
    file
}

fn file_observations(
    records: &[ImageRecord],
    failures: &[Option<ImageFailure>],
    used: &[(usize, Vec<Correspondence>)],
) -> Vec<ViewPoints> {
    let mut used_iter = used.iter();
    records
        .iter()
        .zip(failures)
        .map(|(r, f)| {
            let points = match f {
                Some(_) => vec![],
                None => used_iter.next().map_or_else(Vec::new, |(_, pts)| {
                    pts.iter()
                        .map(|c| PointPair { id: Some(c.id), target: c.target, image: c.image })
                        .collect()
                }),
            };
            ViewPoints { name: r.name.clone(), points }
        })
        .collect()
}

/// How well a calibrated camera explains a new image of the target: the target's pose from the
/// identified features with the camera held fixed, and the reprojection errors at that pose.
#[derive(Clone, Debug, PartialEq)]
pub struct ImageCheck {
    /// Target-to-camera pose.
    pub pose: Pose,
    /// Identified features: observed pixel and its reprojection at `pose`.
    pub points: Vec<(FeatureId, Point2<f64>, Point2<f64>)>,
    /// Every target feature in front of the camera and inside the image, projected at `pose`
    /// (for drawing what the calibration predicts).
    pub predicted: Vec<Point2<f64>>,
    /// RMS reprojection error (point distances), pixels.
    pub rms_px: f64,
    /// Largest reprojection error, pixels.
    pub max_px: f64,
}

/// Checks a calibrated camera against one image: detect, identify, estimate the pose with the
/// camera fixed, and measure the reprojection errors. A camera that fits its calibration
/// images but not a new one is the first sign of a bad calibration.
pub fn check_image(
    path: &Path,
    camera: &Camera,
    target: &Target,
    settings: &Settings,
) -> Result<ImageCheck, ImageFailure> {
    let record = observe_image(path, target, settings);
    let features = record.outcome?;
    if features.size != (camera.width, camera.height) {
        return Err(ImageFailure {
            stage: "image-size",
            message: format!(
                "{}: {} x {} px, the calibration is for {} x {} px",
                path.display(),
                features.size.0,
                features.size.1,
                camera.width,
                camera.height
            ),
        });
    }
    let obs: Vec<Observation> = features
        .points
        .iter()
        .map(|c| Observation {
            id: Some(c.id),
            target: Point3::from(c.target),
            image: Point2::from(c.image),
        })
        .collect();
    let pose = facetcal_solver::estimate_pose(camera, &obs, &settings.solver)
        .map_err(|e| ImageFailure { stage: "pose", message: format!("{}: {e}", path.display()) })?;
    let mut points = Vec::with_capacity(obs.len());
    let (mut sum2, mut max) = (0.0, 0.0f64);
    for o in &obs {
        let (Some(id), Ok(p)) = (o.id, camera.project(&pose.transform(&o.target))) else {
            continue;
        };
        let d = (o.image - p).norm();
        sum2 += d * d;
        max = max.max(d);
        points.push((id, o.image, p));
    }
    if points.is_empty() {
        return Err(ImageFailure {
            stage: "pose",
            message: format!(
                "{}: no identified point projects at the estimated pose",
                path.display()
            ),
        });
    }
    let inside = |p: &Point2<f64>| {
        p.x >= -0.5
            && p.y >= -0.5
            && p.x <= camera.width as f64 - 0.5
            && p.y <= camera.height as f64 - 0.5
    };
    let predicted = target
        .features()
        .iter()
        .filter_map(|(_, x)| camera.project(&pose.transform(x)).ok())
        .filter(inside)
        .collect();
    let rms_px = (sum2 / points.len() as f64).sqrt();
    Ok(ImageCheck { pose, points, predicted, rms_px, max_px: max })
}
