//! Scenes: the versioned scene file ([`SceneSpec`]), its checked form ([`Scene`]) and the
//! builder tests use to make scenes in code ([`SceneBuilder`]).
//!
//! A scene names a target, a camera, the view poses (a list, or a seeded generator) and the
//! imaging effects. Every setting has a documented default so that a minimal scene file names
//! only the target, the camera and the poses.
//!
//! Units: pixel quantities end in `_px`; grey levels (`dark`, `light`, noise) are on the 8-bit
//! scale 0..255 whatever the output depth (16-bit output multiplies by 257 = 65535 / 255);
//! reflectances are 0 (black) ..1 (white).

use std::path::{Path, PathBuf};
use std::sync::Arc;

use facetcal_model::{Camera, Pose, Target};
use serde::{Deserialize, Serialize};

use crate::error::RenderError;
use crate::poses::{PoseGenerator, generate_poses};

/// The `format` value of a scene file.
pub const SCENE_FORMAT: &str = "facetcal-scene";
/// The scene file version this program reads and writes.
pub const SCENE_VERSION: u32 = 1;
/// Default number of sub-squares per pixel side.
pub const DEFAULT_SUPERSAMPLING: u32 = 4;

/// The scene file as written. Check it with [`Scene::from_spec`] or load a file with
/// [`Scene::load`].
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SceneSpec {
    /// Always [`SCENE_FORMAT`].
    pub format: String,
    /// Always [`SCENE_VERSION`].
    pub version: u32,
    /// A name for people.
    #[serde(default)]
    pub name: String,
    /// The target file, relative to the scene file's folder.
    pub target: PathBuf,
    /// The camera that takes the images.
    pub camera: Camera,
    /// The view poses.
    pub poses: PosesSpec,
    /// Blur.
    #[serde(default)]
    pub optics: Optics,
    /// Grey levels, illumination and noise.
    #[serde(default)]
    pub photometry: Photometry,
    /// What rays that miss the target see.
    #[serde(default)]
    pub background: Background,
    /// Image-space objects in front of the target, painted in order.
    #[serde(default)]
    pub occluders: Vec<Occluder>,
    /// Bits per pixel of the PNG images: 8 or 16. Default 8.
    #[serde(default = "default_bits")]
    pub bits: u32,
    /// Seed of the noise and the background clutter. Default 0.
    #[serde(default)]
    pub seed: u64,
    /// Sub-squares per pixel side. Default [`DEFAULT_SUPERSAMPLING`] (4); 1..=16.
    #[serde(default = "default_supersampling")]
    pub supersampling: u32,
}

fn default_bits() -> u32 {
    8
}

fn default_supersampling() -> u32 {
    DEFAULT_SUPERSAMPLING
}

/// Where the view poses come from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub enum PosesSpec {
    /// An explicit list: target frame to camera frame, axis-angle and translation.
    List(Vec<Pose>),
    /// A seeded random generator that keeps the target in view.
    Random(PoseGenerator),
}

/// Blur applied before pixel sampling: a Gaussian and a defocus pillbox.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Optics {
    /// Standard deviation of the Gaussian point spread function, pixels. Default 0.7; 0..=20.
    pub psf_sigma_px: f64,
    /// Radius of the defocus pillbox (uniform disc), pixels. Default 0 (in focus); 0..=20.
    pub defocus_radius_px: f64,
}

impl Default for Optics {
    fn default() -> Self {
        Optics { psf_sigma_px: 0.7, defocus_radius_px: 0.0 }
    }
}

/// How reflectance becomes grey levels.
///
/// Per pixel, with `v` the blurred reflectance (0 black ink .. 1 white ink):
/// `lin = g_illum g_vign (dark + (light - dark) v)`, `enc = 255 (lin / 255)^(1 / gamma)`
/// (clamped to 0..255 first), then noise of variance `noise_sigma^2 + noise_gain enc` and
/// quantisation. See [`crate::photometry`].
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Photometry {
    /// Grey level of black ink under full illumination, 8-bit scale. Default 28.
    pub dark: f64,
    /// Grey level of white ink under full illumination, 8-bit scale. Default 228.
    pub light: f64,
    /// Encoding gamma: `enc = 255 (lin / 255)^(1 / gamma)`. Default 1 (linear); 0.1..=10.
    pub gamma: f64,
    /// Standard deviation of the additive Gaussian noise, grey levels. Default 0.
    pub noise_sigma: f64,
    /// Signal-dependent noise: variance added per grey level of signal. Default 0.
    pub noise_gain: f64,
    /// Vignetting: relative loss at the image corners, `g = 1 - vignetting (rho / rho_max)^2`
    /// with `rho` the distance from the image centre. Default 0; 0..1.
    pub vignetting: f64,
    /// Brightest-to-darkest ratio of a linear illumination gradient across the image.
    /// Default 1 (uniform); at least 1.
    pub illumination_ratio: f64,
    /// Direction in which the illumination grows, degrees from the image x axis (towards y).
    /// Default 0.
    pub illumination_angle_deg: f64,
    /// Reflectance of the back of a face seen from behind. Default 0.6.
    pub back_reflectance: f64,
}

impl Default for Photometry {
    fn default() -> Self {
        Photometry {
            dark: 28.0,
            light: 228.0,
            gamma: 1.0,
            noise_sigma: 0.0,
            noise_gain: 0.0,
            vignetting: 0.0,
            illumination_ratio: 1.0,
            illumination_angle_deg: 0.0,
            back_reflectance: 0.6,
        }
    }
}

/// What a ray that hits no face sees: a far wall fixed to the camera, described at the ray's
/// pinhole-plane position about the image centre (`fx x/z + (w - 1)/2`, `fy y/z + (h - 1)/2`,
/// pixels): a function of the ray alone, so it moves with the principal point like the target.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Background {
    /// Mean reflectance. Default 0.5.
    pub reflectance: f64,
    /// Amplitude of a smooth value-noise texture, reflectance units. Default 0.
    pub texture_amplitude: f64,
    /// Feature size of the texture, pixels. Default 40.
    pub texture_scale_px: f64,
    /// Number of random clutter shapes (discs and rectangles of random reflectance) per view.
    /// Default 0.
    pub clutter: u32,
    /// Size range of the clutter shapes (diameter or side), pixels. Default [8, 120].
    pub clutter_size_px: [f64; 2],
}

impl Default for Background {
    fn default() -> Self {
        Background {
            reflectance: 0.5,
            texture_amplitude: 0.0,
            texture_scale_px: 40.0,
            clutter: 0,
            clutter_size_px: [8.0, 120.0],
        }
    }
}

/// An object between the camera and the target, in image coordinates (pixels), with a
/// uniform reflectance. It is integrated exactly over each sub-square and blurred with the
/// rest of the image; features whose truth pixel lies inside it are reported hidden.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "shape", rename_all = "kebab-case", deny_unknown_fields)]
pub enum Occluder {
    /// A disc.
    Disc {
        /// Centre, pixels.
        centre: [f64; 2],
        /// Radius, pixels.
        radius: f64,
        /// Reflectance 0..1.
        reflectance: f64,
    },
    /// A simple polygon (convex or not), vertices in order.
    Polygon {
        /// Vertices, pixels.
        points: Vec<[f64; 2]>,
        /// Reflectance 0..1.
        reflectance: f64,
    },
}

impl Occluder {
    /// Whether an image point lies inside the occluder.
    pub fn contains(&self, p: [f64; 2]) -> bool {
        match self {
            Occluder::Disc { centre, radius, .. } => {
                (p[0] - centre[0]).hypot(p[1] - centre[1]) <= *radius
            }
            Occluder::Polygon { points, .. } => {
                // Even-odd ray crossing test (common practice).
                let mut inside = false;
                let n = points.len();
                for i in 0..n {
                    let a = points[i];
                    let b = points[(i + n - 1) % n];
                    if (a[1] > p[1]) != (b[1] > p[1]) {
                        let x = a[0] + (p[1] - a[1]) * (b[0] - a[0]) / (b[1] - a[1]);
                        if p[0] < x {
                            inside = !inside;
                        }
                    }
                }
                inside
            }
        }
    }

    /// The reflectance.
    pub fn reflectance(&self) -> f64 {
        match self {
            Occluder::Disc { reflectance, .. } | Occluder::Polygon { reflectance, .. } => {
                *reflectance
            }
        }
    }

    /// Bounding box `[x0, y0, x1, y1]`, pixels.
    pub fn bounds(&self) -> [f64; 4] {
        match self {
            Occluder::Disc { centre, radius, .. } => {
                [centre[0] - radius, centre[1] - radius, centre[0] + radius, centre[1] + radius]
            }
            Occluder::Polygon { points, .. } => {
                let mut b = [f64::INFINITY, f64::INFINITY, f64::NEG_INFINITY, f64::NEG_INFINITY];
                for p in points {
                    b[0] = b[0].min(p[0]);
                    b[1] = b[1].min(p[1]);
                    b[2] = b[2].max(p[0]);
                    b[3] = b[3].max(p[1]);
                }
                b
            }
        }
    }
}

/// Bits per output pixel.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub enum BitDepth {
    /// 8-bit grey, 0..255.
    Eight,
    /// 16-bit grey, 0..65535: the 8-bit grey-level scale times 257.
    Sixteen,
}

impl BitDepth {
    /// Largest code value.
    pub fn max_code(self) -> f64 {
        match self {
            BitDepth::Eight => 255.0,
            BitDepth::Sixteen => 65535.0,
        }
    }

    /// Codes per 8-bit grey level: 1 or 257.
    pub fn scale(self) -> f64 {
        match self {
            BitDepth::Eight => 1.0,
            BitDepth::Sixteen => 257.0,
        }
    }
}

/// A checked scene: every setting is in range and the poses are resolved.
#[derive(Clone, Debug)]
pub struct Scene {
    pub(crate) name: String,
    pub(crate) target: Arc<Target>,
    pub(crate) target_path: Option<PathBuf>,
    pub(crate) camera: Camera,
    pub(crate) poses: Vec<Pose>,
    pub(crate) optics: Optics,
    pub(crate) photometry: Photometry,
    pub(crate) background: Background,
    pub(crate) occluders: Vec<Occluder>,
    pub(crate) bits: BitDepth,
    pub(crate) seed: u64,
    pub(crate) supersampling: u32,
}

impl SceneSpec {
    /// Parses a scene file's text. Shape errors name the JSON path of the field.
    pub fn from_json(text: &str) -> Result<SceneSpec, RenderError> {
        crate::error::parse_json(text)
    }
}

impl Scene {
    /// Reads and checks a scene file; the target path is resolved against the file's folder.
    pub fn load(path: &Path) -> Result<Scene, RenderError> {
        let text = facetcal_inputs::read_json_text(path)?;
        let spec = SceneSpec::from_json(&text)?;
        Scene::from_spec(spec, path.parent().unwrap_or(Path::new(".")))
    }

    /// Checks a parsed scene file, loading its target relative to `base_dir`.
    pub fn from_spec(spec: SceneSpec, base_dir: &Path) -> Result<Scene, RenderError> {
        if spec.format != SCENE_FORMAT {
            return Err(RenderError::field(
                "format",
                format!("must be \"{SCENE_FORMAT}\", got \"{}\"", spec.format),
            ));
        }
        if spec.version != SCENE_VERSION {
            return Err(RenderError::field(
                "version",
                format!("this program reads version {SCENE_VERSION}, got {}", spec.version),
            ));
        }
        let target_path = base_dir.join(&spec.target);
        let target = Target::load(&target_path)
            .map_err(|source| RenderError::Target { path: target_path.clone(), source })?;
        let bits = match spec.bits {
            8 => BitDepth::Eight,
            16 => BitDepth::Sixteen,
            b => return Err(RenderError::field("bits", format!("must be 8 or 16, got {b}"))),
        };
        let mut b = Scene::builder(target, spec.camera)
            .name(spec.name)
            .optics(spec.optics)
            .photometry(spec.photometry)
            .background(spec.background)
            .occluders(spec.occluders)
            .bits(bits)
            .seed(spec.seed)
            .supersampling(spec.supersampling);
        b = match spec.poses {
            PosesSpec::List(p) => b.poses(p),
            PosesSpec::Random(g) => b.random_poses(g),
        };
        let mut scene = b.build()?;
        scene.target_path = Some(target_path);
        Ok(scene)
    }

    /// A builder for scenes made in code: every setting at its default, no poses yet.
    pub fn builder(target: Target, camera: Camera) -> SceneBuilder {
        SceneBuilder {
            name: String::new(),
            target: Arc::new(target),
            camera,
            poses: PosesSpec::List(Vec::new()),
            optics: Optics::default(),
            photometry: Photometry::default(),
            background: Background::default(),
            occluders: Vec::new(),
            bits: BitDepth::Eight,
            seed: 0,
            supersampling: DEFAULT_SUPERSAMPLING,
        }
    }

    /// The scene's name.
    pub fn name(&self) -> &str {
        &self.name
    }
    /// The target.
    pub fn target(&self) -> &Target {
        &self.target
    }
    /// The target file, when the scene was loaded from a file.
    pub fn target_path(&self) -> Option<&Path> {
        self.target_path.as_deref()
    }
    /// The camera.
    pub fn camera(&self) -> &Camera {
        &self.camera
    }
    /// The view poses (target frame to camera frame), resolved.
    pub fn poses(&self) -> &[Pose] {
        &self.poses
    }
    /// Number of views.
    pub fn view_count(&self) -> usize {
        self.poses.len()
    }
    /// Blur settings.
    pub fn optics(&self) -> &Optics {
        &self.optics
    }
    /// Photometric settings.
    pub fn photometry(&self) -> &Photometry {
        &self.photometry
    }
    /// Background settings.
    pub fn background(&self) -> &Background {
        &self.background
    }
    /// The occluders.
    pub fn occluders(&self) -> &[Occluder] {
        &self.occluders
    }
    /// Output depth.
    pub fn bits(&self) -> BitDepth {
        self.bits
    }
    /// Seed of noise and clutter.
    pub fn seed(&self) -> u64 {
        self.seed
    }
    /// Sub-squares per pixel side.
    pub fn supersampling(&self) -> u32 {
        self.supersampling
    }

    /// The noise variance, in squared 8-bit grey levels, of a pixel whose noiseless value is
    /// `level` (8-bit scale): `noise_sigma^2 + noise_gain level`. For Cramer-Rao bounds.
    pub fn noise_variance(&self, level: f64) -> f64 {
        let p = &self.photometry;
        p.noise_sigma * p.noise_sigma + p.noise_gain * level.max(0.0)
    }

    /// The same scene with other poses (checked like the builder's).
    pub fn with_poses(&self, poses: Vec<Pose>) -> Result<Scene, RenderError> {
        check_pose_list(&poses)?;
        let mut s = self.clone();
        s.poses = poses;
        Ok(s)
    }
}

/// Builds a [`Scene`] in code; [`SceneBuilder::build`] checks it exactly like a file, with
/// the same field paths in errors.
#[derive(Clone, Debug)]
pub struct SceneBuilder {
    name: String,
    target: Arc<Target>,
    camera: Camera,
    poses: PosesSpec,
    optics: Optics,
    photometry: Photometry,
    background: Background,
    occluders: Vec<Occluder>,
    bits: BitDepth,
    seed: u64,
    supersampling: u32,
}

impl SceneBuilder {
    /// Sets the name.
    pub fn name(mut self, name: impl Into<String>) -> Self {
        self.name = name.into();
        self
    }
    /// Sets an explicit list of poses.
    pub fn poses(mut self, poses: Vec<Pose>) -> Self {
        self.poses = PosesSpec::List(poses);
        self
    }
    /// Sets a single pose.
    pub fn pose(self, pose: Pose) -> Self {
        self.poses(vec![pose])
    }
    /// Draws the poses from a seeded generator at build time.
    pub fn random_poses(mut self, generator: PoseGenerator) -> Self {
        self.poses = PosesSpec::Random(generator);
        self
    }
    /// Sets the blur.
    pub fn optics(mut self, optics: Optics) -> Self {
        self.optics = optics;
        self
    }
    /// Sets the Gaussian PSF's sigma, pixels.
    pub fn psf_sigma_px(mut self, sigma: f64) -> Self {
        self.optics.psf_sigma_px = sigma;
        self
    }
    /// Sets the photometry.
    pub fn photometry(mut self, photometry: Photometry) -> Self {
        self.photometry = photometry;
        self
    }
    /// Sets the additive noise sigma, grey levels.
    pub fn noise_sigma(mut self, sigma: f64) -> Self {
        self.photometry.noise_sigma = sigma;
        self
    }
    /// Sets the background.
    pub fn background(mut self, background: Background) -> Self {
        self.background = background;
        self
    }
    /// Sets the occluders.
    pub fn occluders(mut self, occluders: Vec<Occluder>) -> Self {
        self.occluders = occluders;
        self
    }
    /// Sets the output depth.
    pub fn bits(mut self, bits: BitDepth) -> Self {
        self.bits = bits;
        self
    }
    /// Sets the seed of noise and clutter.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }
    /// Sets the sub-squares per pixel side.
    pub fn supersampling(mut self, s: u32) -> Self {
        self.supersampling = s;
        self
    }

    /// Checks every setting and resolves the poses.
    pub fn build(self) -> Result<Scene, RenderError> {
        self.camera.validate().map_err(|e| RenderError::field("camera", e.to_string()))?;
        if self.camera.width > 20_000 || self.camera.height > 20_000 {
            return Err(RenderError::field(
                "camera",
                format!(
                    "images of at most 20000 x 20000 pixels, got {} x {}",
                    self.camera.width, self.camera.height
                ),
            ));
        }
        check_optics(&self.optics)?;
        check_photometry(&self.photometry)?;
        check_background(&self.background)?;
        check_occluders(&self.occluders)?;
        if !(1..=16).contains(&self.supersampling) {
            return Err(RenderError::field(
                "supersampling",
                format!("must be 1..=16, got {}", self.supersampling),
            ));
        }
        let poses = match &self.poses {
            PosesSpec::List(p) => {
                check_pose_list(p)?;
                p.clone()
            }
            PosesSpec::Random(g) => generate_poses(g, &self.target, &self.camera)?,
        };
        Ok(Scene {
            name: self.name,
            target: self.target,
            target_path: None,
            camera: self.camera,
            poses,
            optics: self.optics,
            photometry: self.photometry,
            background: self.background,
            occluders: self.occluders,
            bits: self.bits,
            seed: self.seed,
            supersampling: self.supersampling,
        })
    }
}

/// A number in `[lo, hi]`, or an error naming the field.
pub(crate) fn in_range(path: &str, v: f64, lo: f64, hi: f64) -> Result<(), RenderError> {
    if v.is_finite() && v >= lo && v <= hi {
        Ok(())
    } else {
        Err(RenderError::field(path, format!("must be in [{lo}, {hi}], got {v}")))
    }
}

fn check_pose_list(p: &[Pose]) -> Result<(), RenderError> {
    if p.is_empty() {
        return Err(RenderError::field("poses", "a scene needs at least one view"));
    }
    for (i, pose) in p.iter().enumerate() {
        let ok = pose.translation.iter().all(|x| x.is_finite())
            && pose.rotation.coords.iter().all(|x| x.is_finite());
        if !ok {
            return Err(RenderError::field(format!("poses.list[{i}]"), "must be finite"));
        }
    }
    Ok(())
}

fn check_optics(o: &Optics) -> Result<(), RenderError> {
    in_range("optics.psf_sigma_px", o.psf_sigma_px, 0.0, 20.0)?;
    in_range("optics.defocus_radius_px", o.defocus_radius_px, 0.0, 20.0)
}

fn check_photometry(p: &Photometry) -> Result<(), RenderError> {
    in_range("photometry.dark", p.dark, 0.0, 255.0)?;
    in_range("photometry.light", p.light, 0.0, 255.0)?;
    in_range("photometry.gamma", p.gamma, 0.1, 10.0)?;
    in_range("photometry.noise_sigma", p.noise_sigma, 0.0, 255.0)?;
    in_range("photometry.noise_gain", p.noise_gain, 0.0, 255.0)?;
    in_range("photometry.vignetting", p.vignetting, 0.0, 0.99)?;
    in_range("photometry.illumination_ratio", p.illumination_ratio, 1.0, 1000.0)?;
    in_range("photometry.illumination_angle_deg", p.illumination_angle_deg, -3600.0, 3600.0)?;
    in_range("photometry.back_reflectance", p.back_reflectance, 0.0, 1.0)
}

fn check_background(b: &Background) -> Result<(), RenderError> {
    in_range("background.reflectance", b.reflectance, 0.0, 1.0)?;
    in_range("background.texture_amplitude", b.texture_amplitude, 0.0, 1.0)?;
    in_range("background.texture_scale_px", b.texture_scale_px, 0.5, 1e6)?;
    if b.clutter > 10_000 {
        return Err(RenderError::field(
            "background.clutter",
            format!("must be at most 10000, got {}", b.clutter),
        ));
    }
    in_range("background.clutter_size_px[0]", b.clutter_size_px[0], 0.5, 1e5)?;
    in_range("background.clutter_size_px[1]", b.clutter_size_px[1], b.clutter_size_px[0], 1e5)
}

fn check_occluders(o: &[Occluder]) -> Result<(), RenderError> {
    for (i, occ) in o.iter().enumerate() {
        let at = |f: &str| format!("occluders[{i}].{f}");
        in_range(&at("reflectance"), occ.reflectance(), 0.0, 1.0)?;
        match occ {
            Occluder::Disc { centre, radius, .. } => {
                in_range(&at("centre[0]"), centre[0], -1e7, 1e7)?;
                in_range(&at("centre[1]"), centre[1], -1e7, 1e7)?;
                in_range(&at("radius"), *radius, 0.0, 1e7)?;
            }
            Occluder::Polygon { points, .. } => {
                if points.len() < 3 {
                    return Err(RenderError::field(
                        at("points"),
                        format!("a polygon needs at least 3 points, got {}", points.len()),
                    ));
                }
                for (k, p) in points.iter().enumerate() {
                    in_range(&at(&format!("points[{k}][0]")), p[0], -1e7, 1e7)?;
                    in_range(&at(&format!("points[{k}][1]")), p[1], -1e7, 1e7)?;
                }
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn target() -> Target {
        let text = std::fs::read_to_string(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../../targets/checkerboard.json"
        ))
        .unwrap();
        Target::from_json(&text).unwrap()
    }

    fn camera() -> Camera {
        Camera::pinhole(64, 48, 50.0, 50.0, 31.5, 23.5)
    }

    #[test]
    fn the_defaults_are_valid() {
        let s = Scene::builder(target(), camera()).pose(Pose::identity()).build().unwrap();
        assert_eq!(s.supersampling(), DEFAULT_SUPERSAMPLING);
        assert_eq!(s.bits(), BitDepth::Eight);
        assert_eq!(s.view_count(), 1);
    }

    #[test]
    fn bad_settings_name_the_field() {
        let b = || Scene::builder(target(), camera()).pose(Pose::identity());
        let cases: Vec<(SceneBuilder, &str)> = vec![
            (b().psf_sigma_px(f64::NAN), "optics.psf_sigma_px"),
            (b().noise_sigma(-1.0), "photometry.noise_sigma"),
            (b().supersampling(0), "supersampling"),
            (b().poses(vec![]), "poses"),
            (
                b().photometry(Photometry { gamma: 0.0, ..Photometry::default() }),
                "photometry.gamma",
            ),
            (
                b().occluders(vec![
                    Occluder::Disc { centre: [1.0, 1.0], radius: 2.0, reflectance: 0.1 },
                    Occluder::Polygon { points: vec![[0.0, 0.0], [1.0, 1.0]], reflectance: 0.5 },
                ]),
                "occluders[1].points",
            ),
        ];
        for (builder, path) in cases {
            let e = builder.build().unwrap_err().to_string();
            assert!(e.starts_with(path), "expected {path}, got {e}");
        }
    }

    #[test]
    fn polygon_occluders_contain_what_is_inside() {
        // An L-shaped (non-convex) polygon.
        let o = Occluder::Polygon {
            points: vec![[0.0, 0.0], [2.0, 0.0], [2.0, 1.0], [1.0, 1.0], [1.0, 2.0], [0.0, 2.0]],
            reflectance: 0.0,
        };
        assert!(o.contains([0.5, 1.5]) && o.contains([1.5, 0.5]));
        assert!(!o.contains([1.5, 1.5]) && !o.contains([-0.1, 0.5]));
    }
}
