//! Ground truth: per view, the pose and every feature's identity, target point and exact
//! projected pixel, split into visible and hidden features; and the versioned `truth.json`
//! file ("format": "facetcal-truth", version 1) that carries them with the camera and target.
//!
//! A feature is visible when all of these hold, tested in this order (the first that fails is
//! the [`HiddenReason`]): the camera model projects it; its face is seen from the front; its
//! pixel lies inside the image (`[-0.5, w - 0.5] x [-0.5, h - 0.5]`); no other face lies on
//! the ray in front of it; no occluder covers its pixel.

use facetcal_model::{Camera, FeatureId, Pose, TargetSpec};
use nalgebra::{Point2, Point3};
use serde::{Deserialize, Serialize};

use crate::error::RenderError;
use crate::raster::FaceView;
use crate::scene::Scene;

/// The `format` value of a truth file.
pub const TRUTH_FORMAT: &str = "facetcal-truth";
/// The truth file version this program reads and writes.
pub const TRUTH_VERSION: u32 = 1;

/// A visible feature.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FeatureTruth {
    /// Which feature.
    pub id: FeatureId,
    /// Its point in the target frame.
    pub point: Point3<f64>,
    /// Its exact projection, pixels.
    pub pixel: Point2<f64>,
    /// Distance from the pixel to the nearest image border (`-0.5` or `size - 0.5`), pixels.
    pub border_px: f64,
}

/// Why a feature is not visible. Written flattened into [`HiddenFeature`] as
/// `"reason": "occluded", "occluder": 0` (serde cannot refuse unknown fields of a flattened
/// enum, so these two types accept them).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "reason", rename_all = "kebab-case")]
pub enum HiddenReason {
    /// The camera model cannot project the point (behind the camera or beyond the lens
    /// model's valid domain).
    OutsideModel,
    /// The camera sees the back of the feature's face.
    BackFacing,
    /// The projection falls outside the image.
    OutsideImage,
    /// Another face is in front of it.
    HiddenByFace {
        /// The face in front.
        face: u32,
    },
    /// An occluder covers it.
    Occluded {
        /// Index of the occluder in the scene.
        occluder: usize,
    },
}

/// A feature that is not visible.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct HiddenFeature {
    /// Which feature.
    pub id: FeatureId,
    /// Its projection when the camera model has one.
    pub pixel: Option<Point2<f64>>,
    /// Why it is hidden.
    #[serde(flatten)]
    pub reason: HiddenReason,
}

/// Ground truth of one view.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ViewTruth {
    /// View index in the scene.
    pub index: usize,
    /// The image file name the command writes for this view ([`image_name`]).
    pub image: String,
    /// Target frame to camera frame.
    pub pose: Pose,
    /// Visible features, face by face in target order, then row-major.
    pub visible: Vec<FeatureTruth>,
    /// Hidden features, in the same order.
    pub hidden: Vec<HiddenFeature>,
}

/// The file name of view `index`'s image: `view-0000.png`, `view-0001.png`, ...
pub fn image_name(index: usize) -> String {
    format!("view-{index:04}.png")
}

/// The truth file: camera, target and every view.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TruthFile {
    /// Always [`TRUTH_FORMAT`].
    pub format: String,
    /// Always [`TRUTH_VERSION`].
    pub version: u32,
    /// The scene's name.
    pub scene: String,
    /// Bits per pixel of the images.
    pub bits: u32,
    /// The camera.
    pub camera: Camera,
    /// The target, inline, so the file stands alone.
    pub target: TargetSpec,
    /// One entry per view.
    pub views: Vec<ViewTruth>,
}

impl TruthFile {
    /// The truth file of a scene's views.
    pub fn new(scene: &Scene, views: Vec<ViewTruth>) -> TruthFile {
        TruthFile {
            format: TRUTH_FORMAT.into(),
            version: TRUTH_VERSION,
            scene: scene.name().to_string(),
            bits: match scene.bits() {
                crate::scene::BitDepth::Eight => 8,
                crate::scene::BitDepth::Sixteen => 16,
            },
            camera: *scene.camera(),
            target: scene.target().spec().clone(),
            views,
        }
    }

    /// Pretty-printed JSON. Every number is finite by construction (the renderer writes no
    /// NaN), so this cannot fail.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).unwrap_or_default()
    }

    /// Parses and checks a truth file. Errors name the JSON path of the bad field.
    pub fn from_json(text: &str) -> Result<TruthFile, RenderError> {
        let t: TruthFile = crate::error::parse_json(text)?;
        if t.format != TRUTH_FORMAT {
            return Err(RenderError::field(
                "format",
                format!("must be \"{TRUTH_FORMAT}\", got \"{}\"", t.format),
            ));
        }
        if t.version != TRUTH_VERSION {
            return Err(RenderError::field(
                "version",
                format!("this program reads version {TRUTH_VERSION}, got {}", t.version),
            ));
        }
        Ok(t)
    }
}

/// The truth of one view (see the module doc for the visibility rules).
pub(crate) fn view_truth(
    scene: &Scene,
    index: usize,
    pose: &Pose,
    faces: &[FaceView],
) -> ViewTruth {
    let camera = scene.camera();
    let (w, h) = (camera.width as f64, camera.height as f64);
    let mut visible = Vec::new();
    let mut hidden = Vec::new();
    for (face, fv) in scene.target().faces().iter().zip(faces) {
        for (id, local) in face.features_local() {
            let point = face.to_target(&local);
            let pc = pose.transform(&point);
            let hide = |pixel, reason| HiddenFeature { id, pixel, reason };
            let Ok(px) = camera.project(&pc) else {
                hidden.push(hide(None, HiddenReason::OutsideModel));
                continue;
            };
            if !fv.front {
                hidden.push(hide(Some(px), HiddenReason::BackFacing));
                continue;
            }
            if !camera.contains(&px, 0.0) {
                hidden.push(hide(Some(px), HiddenReason::OutsideImage));
                continue;
            }
            // The ray X(lambda) = lambda pc meets the feature at lambda = 1.
            let blocker = faces.iter().find(|g| {
                g.id != fv.id
                    && g.hit(&pc.coords)
                        .is_some_and(|(lambda, q)| lambda < 1.0 - 1e-9 && g.inside(q, -1e-9))
            });
            if let Some(g) = blocker {
                hidden.push(hide(Some(px), HiddenReason::HiddenByFace { face: g.id }));
                continue;
            }
            if let Some(k) = scene.occluders().iter().position(|o| o.contains([px.x, px.y])) {
                hidden.push(hide(Some(px), HiddenReason::Occluded { occluder: k }));
                continue;
            }
            let border_px = (px.x + 0.5).min(px.y + 0.5).min(w - 0.5 - px.x).min(h - 0.5 - px.y);
            visible.push(FeatureTruth { id, point, pixel: px, border_px });
        }
    }
    ViewTruth { index, image: image_name(index), pose: *pose, visible, hidden }
}

#[cfg(test)]
mod tests {
    use super::*;
    use facetcal_model::Target;

    #[test]
    fn truth_files_round_trip_and_refuse_other_versions() {
        let text = std::fs::read_to_string(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../../targets/corner.json"
        ))
        .unwrap();
        let target = Target::from_json(&text).unwrap();
        let camera = Camera::pinhole(320, 240, 300.0, 300.0, 159.5, 119.5);
        // Looking into the corner from the (1, 1, 1) side.
        let scene = Scene::builder(target, camera)
            .random_poses(crate::PoseGenerator::new(2, 3, [700.0, 800.0]))
            .build()
            .unwrap();
        let mut views: Vec<ViewTruth> =
            (0..2).map(|i| crate::view_truth_of(&scene, i).unwrap()).collect();
        assert!(views.iter().all(|v| !v.visible.is_empty()));
        // Every kind of hidden feature must survive the round trip too.
        let id = views[0].visible[0].id;
        views[0].hidden.push(HiddenFeature {
            id,
            pixel: None,
            reason: HiddenReason::HiddenByFace { face: 2 },
        });
        views[0].hidden.push(HiddenFeature {
            id,
            pixel: Some(Point2::new(1.0, 2.0)),
            reason: HiddenReason::Occluded { occluder: 1 },
        });
        views[0].hidden.push(HiddenFeature { id, pixel: None, reason: HiddenReason::BackFacing });
        let file = TruthFile::new(&scene, views);
        let back = TruthFile::from_json(&file.to_json()).unwrap();
        // serde_json's default float parsing may differ from the written value in the last
        // bit, and poses go through axis-angle: compare with tolerances.
        assert_eq!(back.views.len(), 2);
        for (a, b) in back.views.iter().zip(&file.views) {
            assert_eq!(a.visible.len(), b.visible.len());
            for (p, q) in a.visible.iter().zip(&b.visible) {
                assert_eq!(p.id, q.id);
                assert!((p.pixel - q.pixel).norm() < 1e-9 && (p.point - q.point).norm() < 1e-9);
            }
            assert_eq!(a.hidden.len(), b.hidden.len());
            for (p, q) in a.hidden.iter().zip(&b.hidden) {
                assert!(p.id == q.id && p.reason == q.reason);
                assert_eq!(p.pixel.is_some(), q.pixel.is_some());
            }
            assert_eq!(a.image, b.image);
            assert!(a.pose.angle_to(&b.pose) < 1e-12);
            assert!((a.pose.translation - b.pose.translation).norm() < 1e-12);
        }
        assert!(back.camera == file.camera && back.target == file.target);
        let bad = file.to_json().replacen("\"version\": 1", "\"version\": 2", 1);
        let e = TruthFile::from_json(&bad).unwrap_err().to_string();
        assert!(e.starts_with("version:"), "{e}");
        let bad = file.to_json().replacen("\"border_px\"", "\"border\"", 1);
        let e = TruthFile::from_json(&bad).unwrap_err().to_string();
        assert!(e.starts_with("views[0].visible[0]"), "{e}");
    }
}
