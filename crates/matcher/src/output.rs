//! What the matcher returns: identified correspondences grouped by face, the face candidates it
//! refused with their reasons, and the reason every other detection was left out. All types
//! serialise with serde; [`DetectionsFile`] is the versioned file `facetcal detect` writes.

use std::collections::BTreeMap;

use facetcal_model::FeatureId;
use facetcal_model::files::{PointPair, ViewPoints};
use serde::{Deserialize, Serialize};

/// The `format` of the file `facetcal detect` writes.
pub const DETECTIONS_FORMAT: &str = "facetcal-detections";
/// The version of that format this build writes.
pub const DETECTIONS_VERSION: u32 = 1;

/// Which list of [`facetcal_detector::Detections`] a detection comes from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum DetectionKind {
    /// `checker_corners`.
    CheckerCorner,
    /// `dots`.
    Dot,
    /// `squares` (one detection gives four features).
    Square,
}

/// A detection: its list and its index in that list.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub struct DetectionRef {
    /// The list.
    pub kind: DetectionKind,
    /// Index in the list.
    pub index: usize,
}

/// One identified feature.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Correspondence {
    /// The feature's identity.
    pub id: FeatureId,
    /// The feature in the target frame, in the target's unit.
    pub target: [f64; 3],
    /// The detected image point, pixels.
    pub image: [f64; 2],
    /// Distance of the image point from the prediction of its identified neighbours (the
    /// least-squares quadratic of its whole 5 x 5 neighbourhood, or a local homography where
    /// part of it is missing), in units of the local feature spacing; `None` when the
    /// neighbours are too few to predict it.
    pub residual: Option<f64>,
    /// The detection it came from.
    pub detection: DetectionRef,
}

/// The identified features of one face.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FaceIdentification {
    /// Face id.
    pub face: u32,
    /// Quarter turns of the face grid relative to the first candidate's lattice axes in the
    /// image (informative only).
    pub quarter_turns: u8,
    /// Face-code marks that the placement explained, over all candidates of the face.
    pub marks_matched: usize,
    /// How many face candidates were placed on this face (an occluder can split one).
    pub candidates: usize,
    /// The identified features, sorted by identity.
    pub points: Vec<Correspondence>,
}

/// Why a face candidate was not identified. `nodes` is the candidate's size in lattice nodes.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "reason", rename_all = "kebab-case")]
#[non_exhaustive]
pub enum Rejection {
    /// No placement on any face agrees with the seen marks (`best_conflicts` is the fewest
    /// conflicts of any placement, `None` when the lattice fits inside no face).
    NoFit {
        /// Lattice nodes of the candidate.
        nodes: usize,
        /// Fewest conflicts of any placement.
        best_conflicts: Option<usize>,
    },
    /// Several placements agree with everything seen: the view is ambiguous.
    Ambiguous {
        /// Lattice nodes of the candidate.
        nodes: usize,
        /// Placements without conflict.
        placements: usize,
    },
    /// One placement agrees, but another differs from it by fewer than the required margin.
    TooClose {
        /// Lattice nodes of the candidate.
        nodes: usize,
        /// Conflicts of the runner-up.
        runner_up_conflicts: usize,
        /// The required margin.
        need: usize,
    },
    /// One placement agrees but explains too few seen marks.
    TooFewMarks {
        /// Lattice nodes of the candidate.
        nodes: usize,
        /// Marks explained.
        seen: usize,
        /// Marks required.
        need: usize,
    },
    /// The placement claims features that another candidate already identified.
    Overlap {
        /// Lattice nodes of the candidate.
        nodes: usize,
        /// The face both claim.
        face: u32,
    },
    /// The face's fitted map reverses handedness: a mirrored view, impossible for a printed face
    /// seen from the front.
    Mirrored {
        /// Lattice nodes of the candidate.
        nodes: usize,
        /// The face.
        face: u32,
    },
}

impl Rejection {
    /// A short name of the reason, as used in the counts of [`Identification::left_out_counts`].
    pub fn name(&self) -> &'static str {
        match self {
            Rejection::NoFit { .. } => "no-fit",
            Rejection::Ambiguous { .. } => "ambiguous",
            Rejection::TooClose { .. } => "too-close",
            Rejection::TooFewMarks { .. } => "too-few-marks",
            Rejection::Overlap { .. } => "overlap",
            Rejection::Mirrored { .. } => "mirrored",
        }
    }
}

impl std::fmt::Display for Rejection {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Rejection::NoFit { nodes, best_conflicts: None } => {
                write!(f, "{nodes} nodes: the lattice fits inside no face")
            }
            Rejection::NoFit { nodes, best_conflicts: Some(c) } => write!(
                f,
                "{nodes} nodes: every placement contradicts the seen marks (fewest conflicts {c})"
            ),
            Rejection::Ambiguous { nodes, placements } => {
                write!(f, "{nodes} nodes: {placements} placements agree with the seen marks")
            }
            Rejection::TooClose { nodes, runner_up_conflicts, need } => write!(
                f,
                "{nodes} nodes: the runner-up placement has {runner_up_conflicts} conflicts, {need} needed"
            ),
            Rejection::TooFewMarks { nodes, seen, need } => {
                write!(f, "{nodes} nodes: {seen} marks explained, {need} needed")
            }
            Rejection::Overlap { nodes, face } => {
                write!(f, "{nodes} nodes: face {face} features already identified")
            }
            Rejection::Mirrored { nodes, face } => {
                write!(f, "{nodes} nodes: face {face} would be seen mirrored")
            }
        }
    }
}

/// Why a detection is not among the identified features.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "reason", rename_all = "kebab-case")]
#[non_exhaustive]
pub enum LeftOutReason {
    /// A coordinate is NaN or infinite.
    NotFinite,
    /// The target has no face of this detection's pattern kind.
    KindNotInTarget,
    /// Not part of any lattice of at least `min_nodes` nodes (clutter, or too small a patch).
    NoLattice,
    /// Its position disagrees with the fit of its lattice neighbours.
    FitResidual,
    /// Its size (a dot's area) disagrees with the fit of its lattice neighbours' sizes: a dot
    /// cut by an occluder.
    SizeResidual,
    /// Its candidate was placed, but it falls beyond the face (a stray node, counted as one of
    /// the tolerated conflicts).
    OutsideFace,
    /// A square whose corners could not be matched to the face's corner order.
    CornerOrder,
    /// Its face candidate was refused.
    Candidate {
        /// Why.
        rejection: Rejection,
    },
}

impl LeftOutReason {
    /// A short name, for counts.
    pub fn name(&self) -> &'static str {
        match self {
            LeftOutReason::NotFinite => "not-finite",
            LeftOutReason::KindNotInTarget => "kind-not-in-target",
            LeftOutReason::NoLattice => "no-lattice",
            LeftOutReason::FitResidual => "fit-residual",
            LeftOutReason::SizeResidual => "size-residual",
            LeftOutReason::OutsideFace => "outside-face",
            LeftOutReason::CornerOrder => "corner-order",
            LeftOutReason::Candidate { rejection } => rejection.name(),
        }
    }
}

/// A detection that was left out, and why.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct LeftOut {
    /// The detection.
    pub detection: DetectionRef,
    /// Why.
    pub reason: LeftOutReason,
}

/// The identification of one image's detections against a target.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct Identification {
    /// Identified faces, sorted by face id.
    pub faces: Vec<FaceIdentification>,
    /// Face candidates that were refused.
    pub rejected: Vec<Rejection>,
    /// Feature detections (corners, dots, squares) that were not identified, in detection order.
    pub left_out: Vec<LeftOut>,
    /// Face-code marks detected.
    pub marks_detected: usize,
}

impl Identification {
    /// Every identified feature, face by face.
    pub fn points(&self) -> impl Iterator<Item = &Correspondence> {
        self.faces.iter().flat_map(|f| f.points.iter())
    }

    /// Number of identified features.
    pub fn point_count(&self) -> usize {
        self.faces.iter().map(|f| f.points.len()).sum()
    }

    /// Left-out detections counted by reason name.
    pub fn left_out_counts(&self) -> BTreeMap<&'static str, usize> {
        let mut m = BTreeMap::new();
        for l in &self.left_out {
            *m.entry(l.reason.name()).or_insert(0) += 1;
        }
        m
    }

    /// The plain per-view list the solver reads: `(identity, target point, image point)`.
    pub fn view_points(&self, name: impl Into<String>) -> ViewPoints {
        ViewPoints {
            name: name.into(),
            points: self
                .points()
                .map(|c| PointPair { id: Some(c.id), target: c.target, image: c.image })
                .collect(),
        }
    }
}

/// One identified feature as `facetcal detect` writes it.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FilePoint {
    /// The identity.
    pub id: FeatureId,
    /// Target-frame point.
    pub target: [f64; 3],
    /// Image x, pixels.
    pub x: f64,
    /// Image y, pixels.
    pub y: f64,
}

/// One face's points in the file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FileFace {
    /// Face id.
    pub face: u32,
    /// Points.
    pub points: Vec<FilePoint>,
}

/// The left-out detections in the file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FileLeftOut {
    /// Total count.
    pub count: usize,
    /// Count per reason name.
    pub by_reason: BTreeMap<String, usize>,
    /// Refused face candidates, as sentences.
    pub rejected_candidates: Vec<String>,
}

/// The file `facetcal detect` writes per image (format `facetcal-detections`, version 1).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DetectionsFile {
    /// Always [`DETECTIONS_FORMAT`].
    pub format: String,
    /// Always [`DETECTIONS_VERSION`].
    pub version: u32,
    /// The image's name.
    pub image: String,
    /// Image width and height, pixels.
    pub image_size: [u32; 2],
    /// The target's name.
    pub target: String,
    /// The unit of the target points.
    pub unit: String,
    /// Identified features by face.
    pub faces: Vec<FileFace>,
    /// Everything left out.
    pub left_out: FileLeftOut,
}

impl DetectionsFile {
    /// The file for one image.
    pub fn new(
        image: impl Into<String>,
        image_size: [u32; 2],
        target: &facetcal_model::Target,
        id: &Identification,
    ) -> DetectionsFile {
        DetectionsFile {
            format: DETECTIONS_FORMAT.into(),
            version: DETECTIONS_VERSION,
            image: image.into(),
            image_size,
            target: target.name().into(),
            unit: target.unit().name().into(),
            faces: id
                .faces
                .iter()
                .map(|f| FileFace {
                    face: f.face,
                    points: f
                        .points
                        .iter()
                        .map(|c| FilePoint {
                            id: c.id,
                            target: c.target,
                            x: c.image[0],
                            y: c.image[1],
                        })
                        .collect(),
                })
                .collect(),
            left_out: FileLeftOut {
                count: id.left_out.len(),
                by_reason: id
                    .left_out_counts()
                    .into_iter()
                    .map(|(k, v)| (k.to_string(), v))
                    .collect(),
                rejected_candidates: id.rejected.iter().map(|r| r.to_string()).collect(),
            },
        }
    }
}
