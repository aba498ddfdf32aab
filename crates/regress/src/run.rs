//! Running scenarios: render (or reuse cached renders), detect, identify, compare with the
//! truth, and gather the figures with the conditions they were measured under.

use std::time::Instant;

use facetcal_detector::{
    DetectorOptions, GreyImage as DetectorImage, MarkProbe, correct_dot_centre, detect,
    mark_samples,
};
use facetcal_matcher::{MatchOptions, identify_with};
use facetcal_model::{Camera, Face, FeatureId, PatternKind, PatternSpec, Pose};
use facetcal_render::photometry::quantise;
use facetcal_render::{GreyImage as RenderImage, ViewTruth, render_view_noiseless};
use nalgebra::{Matrix3, Point2, Point3, Vector2};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::cache::Cache;
use crate::crb;
use crate::error::RegressError;
use crate::metrics::{Metrics, ViewComparison, compare_view, identified_points};
use crate::suite::{Axis, DetectorOverrides, Scenario, Suite};

/// How to run a suite.
#[derive(Clone, Debug, Default)]
pub struct RunOptions {
    /// Only the scenarios marked `quick`.
    pub quick: bool,
    /// Only these scenarios (by name); empty means all.
    pub only: Vec<String>,
    /// Detector settings replacing the suite's and the scenarios' (for experiments and for
    /// proving that a worse detector fails the comparison).
    pub detector: DetectorOverrides,
}

/// The conditions a scenario was measured under, for the plots.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Conditions {
    /// The target's name.
    pub target: String,
    /// Pattern kinds of the target.
    pub patterns: Vec<PatternKind>,
    /// Image width and height, pixels.
    pub image_size: [u32; 2],
    /// Gaussian PSF sigma, pixels.
    pub psf_sigma_px: f64,
    /// Defocus pillbox radius, pixels.
    pub defocus_radius_px: f64,
    /// Noise sigma, 8-bit grey levels.
    pub noise_sigma: f64,
    /// Light-minus-dark contrast, 8-bit grey levels.
    pub contrast: f64,
    /// Illumination ratio across the image.
    pub illumination_ratio: f64,
    /// Vignetting (fraction of light lost at the corners).
    pub vignetting: f64,
    /// Encoding gamma.
    pub gamma: f64,
    /// How far the image of a straight line through the two top image corners bows at its
    /// middle, percent of the image width (0 for a pinhole camera).
    pub distortion_bow_percent: Option<f64>,
    /// Largest tilt of the first face over the views, degrees.
    pub tilt_deg_max: f64,
    /// Occluders.
    pub occluders: usize,
    /// Background clutter shapes.
    pub clutter: u32,
    /// Background texture amplitude.
    pub texture_amplitude: f64,
}

/// Figures of one view.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ViewRecord {
    /// View index.
    pub index: usize,
    /// Angle between the first face's normal and the optical axis, degrees.
    pub tilt_deg: f64,
    /// Eligible true features.
    pub eligible: usize,
    /// Identified correctly.
    pub found: usize,
    /// Wrong identifications.
    pub wrong: usize,
    /// RMS error, pixels.
    pub rms_px: Option<f64>,
    /// Detection and identification time, milliseconds.
    pub ms: f64,
}

/// The result of one scenario.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ScenarioResult {
    /// The scenario's name.
    pub name: String,
    /// In the quick subset.
    pub quick: bool,
    /// Robustness axes.
    pub axes: Vec<Axis>,
    /// Detector settings that differed from the defaults.
    pub detector: DetectorOverrides,
    /// Conditions.
    pub conditions: Conditions,
    /// The figures over all views.
    pub metrics: Metrics,
    /// The figures per view.
    pub views: Vec<ViewRecord>,
}

impl Suite {
    /// The scenarios a run selects, in suite order; an unknown name in `only` is an error.
    pub fn select(&self, opts: &RunOptions) -> Result<Vec<&Scenario>, RegressError> {
        for n in &opts.only {
            if !self.scenarios.iter().any(|s| &s.name == n) {
                return Err(RegressError::field("only", format!("no scenario named \"{n}\"")));
            }
        }
        Ok(self
            .scenarios
            .iter()
            .filter(|s| !opts.quick || s.quick)
            .filter(|s| opts.only.is_empty() || opts.only.contains(&s.name))
            .collect())
    }
}

/// Runs the selected scenarios one after the other, each scenario's views in parallel.
/// `progress` is called after each scenario.
pub fn run_suite(
    suite: &Suite,
    opts: &RunOptions,
    cache: &Cache,
    mut progress: impl FnMut(&ScenarioResult),
) -> Result<Vec<ScenarioResult>, RegressError> {
    let mut out = Vec::new();
    for s in suite.select(opts)? {
        let r = run_scenario(suite, s, cache, &opts.detector)?;
        progress(&r);
        out.push(r);
    }
    Ok(out)
}

/// A view's image (for the detector), truth and Cramer-Rao bounds (when asked for), from the
/// cache or rendered and cached.
struct ViewInputs {
    image: DetectorImage,
    truth: ViewTruth,
    bounds: Option<Vec<(FeatureId, Option<f64>)>>,
}

#[derive(Serialize, Deserialize)]
struct CachedBound {
    id: FeatureId,
    bound_px: Option<f64>,
}

fn to_detector(img: &RenderImage) -> DetectorImage {
    match img {
        RenderImage::Eight(g) => DetectorImage::from_luma8(g),
        RenderImage::Sixteen(g) => DetectorImage::from_luma16(g),
    }
}

fn view_inputs(s: &Scenario, cache: &Cache, index: usize) -> Result<ViewInputs, RegressError> {
    let key = Cache::key(s, index);
    let window_tag = match s.crb_window_px {
        Some(r) => format!("w{r}"),
        None => "auto".to_string(),
    };
    let (png_name, truth_name) = (format!("{key}.png"), format!("{key}.truth.json"));
    let crb_name = format!("{key}.crb-{window_tag}.json");
    let render_err =
        |source| RegressError::Render { scenario: s.name.clone(), view: index, source };
    let bad =
        |name: &str, reason: String| RegressError::Cache { path: cache.dir().join(name), reason };

    let mut image = None;
    let mut truth = None;
    if let (Some(png), Some(t)) = (cache.read(&png_name)?, cache.read(&truth_name)?) {
        let dynamic = image::load_from_memory(&png).map_err(|e| bad(&png_name, e.to_string()))?;
        let cam = s.scene.camera();
        if (dynamic.width(), dynamic.height()) != (cam.width, cam.height) {
            return Err(bad(&png_name, "image size differs from the scene's camera".into()));
        }
        image = Some(DetectorImage::from_dynamic(&dynamic));
        truth = Some(
            serde_json::from_slice::<ViewTruth>(&t).map_err(|e| bad(&truth_name, e.to_string()))?,
        );
    }
    let mut bounds = None;
    if s.crb {
        if let Some(b) = cache.read(&crb_name)? {
            let list: Vec<CachedBound> =
                serde_json::from_slice(&b).map_err(|e| bad(&crb_name, e.to_string()))?;
            bounds = Some(list.into_iter().map(|c| (c.id, c.bound_px)).collect());
        }
    }
    if image.is_some() && (bounds.is_some() || !s.crb) {
        let (image, truth) = (image.unwrap_or_else(|| DetectorImage::new(0, 0)), truth);
        return match truth {
            Some(truth) => Ok(ViewInputs { image, truth, bounds }),
            None => Err(bad(&truth_name, "missing".into())),
        };
    }
    let scene = &s.scene;
    let nv = render_view_noiseless(scene, index).map_err(render_err)?;
    if image.is_none() {
        let img = quantise(&nv.levels, scene.photometry(), scene.bits(), scene.seed(), index);
        let png = img.to_png().map_err(|e| {
            render_err(facetcal_render::RenderError::Encode { view: index, reason: e.to_string() })
        })?;
        cache.store(&png_name, &png)?;
        let text =
            serde_json::to_vec_pretty(&nv.truth).map_err(|e| bad(&truth_name, e.to_string()))?;
        cache.store(&truth_name, &text)?;
        image = Some(to_detector(&img));
        truth = Some(nv.truth.clone());
    }
    let truth = truth.unwrap_or_else(|| nv.truth.clone());
    if s.crb && bounds.is_none() {
        let windows: Vec<(Point2<f64>, f64)> = truth
            .visible
            .iter()
            .map(|f| (f.pixel, window_of(s, &truth.pose, f.id, f.pixel)))
            .collect();
        let b = crb::view_bounds(scene, index, &nv.levels, &windows).map_err(render_err)?;
        let list: Vec<CachedBound> = truth
            .visible
            .iter()
            .zip(&b)
            .map(|(f, &bound_px)| CachedBound { id: f.id, bound_px })
            .collect();
        let text = serde_json::to_vec(&list).map_err(|e| bad(&crb_name, e.to_string()))?;
        cache.store(&crb_name, &text)?;
        bounds = Some(list.into_iter().map(|c| (c.id, c.bound_px)).collect());
    }
    Ok(ViewInputs { image: image.unwrap_or_else(|| DetectorImage::new(0, 0)), truth, bounds })
}

/// The Cramer-Rao window of a feature: the scenario's fixed radius, or by pattern kind.
fn window_of(s: &Scenario, pose: &Pose, id: FeatureId, pixel: Point2<f64>) -> f64 {
    if let Some(r) = s.crb_window_px {
        return r;
    }
    // The detector locates checker corners on pixels within 3 refine_sigma (default 2 px).
    let corner_window = 3.0 * DetectorOptions::default().refine_sigma;
    let Some(face) = s.scene.target().face(id.face) else { return corner_window };
    match *face.pattern() {
        PatternSpec::DotGrid { diameter, .. } => {
            // The dot's image radius (largest over four directions) plus the 2 px edge ramp.
            let cam = s.scene.camera();
            let local = face.feature_local(id.row, id.col, 0).unwrap_or(Point2::origin());
            let r = diameter / 2.0;
            let to_cam = pose.compose(face.pose());
            let mut radius: f64 = 0.0;
            for (du, dv) in [(r, 0.0), (-r, 0.0), (0.0, r), (0.0, -r)] {
                let p = to_cam.transform(&Point3::new(local.x + du, local.y + dv, 0.0));
                if let Ok(q) = cam.project(&p) {
                    radius = radius.max((q - pixel).norm());
                }
            }
            if radius > 0.0 { radius + 2.0 } else { corner_window }
        }
        _ => corner_window,
    }
}

/// The plane-to-image homography `K [r1 r2 t]` of a face (pinhole part of the camera).
fn face_homography(cam: &Camera, pose: &Pose, face: &Face) -> Matrix3<f64> {
    let p = pose.compose(face.pose());
    let r = p.matrix();
    let m = Matrix3::from_columns(&[r.column(0).into(), r.column(1).into(), p.translation]);
    cam.intrinsics.matrix() * m
}

/// Dot centres moved from the centre of the dot's image to the image of the circle's centre,
/// with the true pose's homography (the correction the solver applies with its own estimate).
fn correct_dots(s: &Scenario, pose: &Pose, points: &mut [(FeatureId, Point2<f64>)]) {
    let cam = s.scene.camera();
    for (id, p) in points.iter_mut() {
        let Some(face) = s.scene.target().face(id.face) else { continue };
        let PatternSpec::DotGrid { diameter, .. } = *face.pattern() else { continue };
        let Some(local) = face.feature_local(id.row, id.col, 0) else { continue };
        let h = face_homography(cam, pose, face);
        if let Ok(c) = correct_dot_centre(*p, &h, local, diameter / 2.0) {
            *p = c;
        }
    }
}

fn tilt_deg(s: &Scenario, pose: &Pose) -> f64 {
    let Some(face) = s.scene.target().faces().first() else { return 0.0 };
    let n = pose.rotation * face.normal();
    n.z.abs().min(1.0).acos().to_degrees()
}

/// The bow of the image of the straight line through the rays of the two top image corners,
/// at its middle, as a percentage of the image width.
fn bow_percent(cam: &Camera) -> Option<f64> {
    let w = cam.width as f64;
    let (a, b) = (Point2::new(0.0, 0.0), Point2::new(w - 1.0, 0.0));
    let ra = cam.unproject(&a).ok()?;
    let rb = cam.unproject(&b).ok()?;
    if ra.z <= 0.0 || rb.z <= 0.0 {
        return None;
    }
    let mid = (ra / ra.z + rb / rb.z) / 2.0;
    let q = cam.project(&Point3::from(mid)).ok()?;
    let chord = b - a;
    let normal = Vector2::new(-chord.y, chord.x).normalize();
    let bow = 100.0 * (q - a).dot(&normal).abs() / w;
    bow.is_finite().then_some(bow)
}

fn conditions(s: &Scenario, views: &[ViewRecord]) -> Conditions {
    let scene = &s.scene;
    let (o, p, b) = (scene.optics(), scene.photometry(), scene.background());
    Conditions {
        target: scene.target().name().to_string(),
        patterns: scene.target().pattern_kinds(),
        image_size: [scene.camera().width, scene.camera().height],
        psf_sigma_px: o.psf_sigma_px,
        defocus_radius_px: o.defocus_radius_px,
        noise_sigma: p.noise_sigma,
        contrast: p.light - p.dark,
        illumination_ratio: p.illumination_ratio,
        vignetting: p.vignetting,
        gamma: p.gamma,
        distortion_bow_percent: bow_percent(scene.camera()),
        tilt_deg_max: views.iter().map(|v| v.tilt_deg).fold(0.0, f64::max),
        occluders: scene.occluders().len(),
        clutter: b.clutter,
        texture_amplitude: b.texture_amplitude,
    }
}

/// Runs one scenario; `extra` replaces its detector settings.
pub fn run_scenario(
    suite: &Suite,
    s: &Scenario,
    cache: &Cache,
    extra: &DetectorOverrides,
) -> Result<ScenarioResult, RegressError> {
    let overrides = s.detector.then(extra);
    let base = DetectorOptions { kinds: s.scene.target().pattern_kinds(), ..Default::default() };
    let opts = overrides
        .apply(&base)
        .map_err(|source| RegressError::Detect { scenario: s.name.clone(), source })?;
    let target = s.scene.target();
    type PerView = Result<(ViewComparison, Vec<f64>, ViewRecord), RegressError>;
    let per_view: Vec<PerView> = (0..s.scene.view_count())
        .into_par_iter()
        .map(|index| {
            let input = view_inputs(s, cache, index)?;
            let start = Instant::now();
            let found = detect(&input.image, &opts)
                .map_err(|source| RegressError::Detect { scenario: s.name.clone(), source })?;
            // Marks read on the image, as `facetcal detect` and `calibrate` read them.
            let probe = |p: &[MarkProbe]| mark_samples(&input.image, p);
            let id = identify_with(&found, target, &MatchOptions::default(), &probe)
                .map_err(|source| RegressError::Identify { scenario: s.name.clone(), source })?;
            let ms = start.elapsed().as_secs_f64() * 1e3;
            let mut points = identified_points(&id);
            correct_dots(s, &input.truth.pose, &mut points);
            let cmp = compare_view(&points, &input.truth, suite.border_px, suite.wrong_gate_px);
            let bounds: Vec<f64> = match &input.bounds {
                Some(list) => {
                    let map: std::collections::BTreeMap<FeatureId, Option<f64>> =
                        list.iter().copied().collect();
                    cmp.errors
                        .iter()
                        .filter_map(|(fid, _)| map.get(fid).copied().flatten())
                        .collect()
                }
                None => Vec::new(),
            };
            let m = Metrics::of(std::slice::from_ref(&cmp), &[], &[]);
            let record = ViewRecord {
                index,
                tilt_deg: tilt_deg(s, &input.truth.pose),
                eligible: cmp.eligible,
                found: cmp.errors.len(),
                wrong: cmp.wrong,
                rms_px: m.rms_px,
                ms,
            };
            Ok((cmp, bounds, record))
        })
        .collect();
    let mut comparisons = Vec::new();
    let mut bounds = Vec::new();
    let mut views = Vec::new();
    for r in per_view {
        let (c, b, v) = r?;
        comparisons.push(c);
        bounds.extend(b);
        views.push(v);
    }
    let ms: Vec<f64> = views.iter().map(|v| v.ms).collect();
    let mut metrics = Metrics::of(&comparisons, &bounds, &ms);
    if !s.crb {
        metrics.crb_px = None;
        metrics.crb_ratio = None;
    }
    Ok(ScenarioResult {
        name: s.name.clone(),
        quick: s.quick,
        axes: s.axes.clone(),
        detector: overrides,
        conditions: conditions(s, &views),
        metrics,
        views,
    })
}
