//! Identifies one image's detections against a target model: which face, row, column (and
//! square corner) each detected feature is, or why it was left out.
//!
//! The matcher owns the lattice topology of the detections ([`lattice`](crate) growth from a
//! seed with local homography fits), the placement of each face candidate on the target by its
//! face code (see the decision rule in the `place` module's documentation, repeated in
//! DEVELOPERS.md), the per-face residual test of every final identity, and the output types
//! ([`Identification`], [`DetectionsFile`]).
//!
//! A wrong identity is far worse than a missing one: a candidate is identified only when exactly
//! one placement agrees with every seen mark and every other placement disagrees with at least
//! two, and never in a mirrored orientation.
//!
//! ```
//! use facetcal_matcher::{MatchOptions, identify};
//! use facetcal_matcher::synthetic::{Scene, synthesize};
//! use facetcal_model::{Camera, Pose, Target};
//! use nalgebra::Vector3;
//! let target = Target::from_json(include_str!("../../../targets/checkerboard.json")).unwrap();
//! let camera = Camera::pinhole(1280, 960, 1100.0, 1100.0, 639.5, 479.5);
//! let pose = Pose::from_axis_angle(Vector3::new(0.2, -0.1, 0.05), Vector3::new(-120.0, -90.0, 700.0));
//! let synth = synthesize(&target, &camera, &pose, &Scene::default(), 1);
//! let id = identify(&synth.detections, &target, &MatchOptions::default()).unwrap();
//! assert_eq!(id.point_count(), synth.true_count());
//! ```
//!
//! The matcher never reads files; it sees pixels only through the prober passed to
//! [`identify_with`].
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

mod error;
mod fit;
mod lattice;
mod output;
mod place;
pub mod synthetic;
mod window;

use std::collections::{BTreeMap, BTreeSet};

use facetcal_detector::{Detections, MarkProbe, MarkSample};
use facetcal_model::{DotLayout, Face, FeatureId, Ink, PatternKind, PatternSpec, Target};
use nalgebra::{Matrix2, Point2, Vector2};

pub use error::MatchError;
pub use fit::{PlaneMap, fit_affine, fit_homography};
pub use output::{
    Correspondence, DETECTIONS_FORMAT, DETECTIONS_VERSION, DetectionKind, DetectionRef,
    DetectionsFile, FaceIdentification, FileFace, FileLeftOut, FilePoint, Identification, LeftOut,
    LeftOutReason, Rejection,
};

use lattice::{
    Builder, Cell, Cells, Component, Dense, Grid, Node, line_direction, local_map, prune,
    value_outliers,
};
use place::{CandidateView, Placement, SeenMark, inside, place, rotate, unrotate};

/// Largest relative departure of a dot's area from the window fit of its neighbours' areas.
/// The area varies smoothly with the view and the fit is quadratic: no intact dot of the
/// regression suite's dot scenarios or of the rendered views departs this far, while the dot
/// that an occluder cut to 0.76 of its neighbours' area (1.39 px off) does.
const DOT_AREA_TOLERANCE: f64 = 0.12;

/// How the matcher decides. Every tolerance is relative to the local feature spacing in the
/// image, so the defaults hold at any image scale.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MatchOptions {
    /// Growth gate: the nearest detection is accepted only within `gate` x the local spacing of
    /// the prediction. Default 0.3.
    pub gate: f64,
    /// Residual test: a node whose distance from the prediction of its neighbours' local fit
    /// exceeds `residual` x the local spacing is removed. Default 0.15.
    pub residual: f64,
    /// Smallest face candidate, in lattice nodes. Default 9.
    pub min_nodes: usize,
    /// Seen marks the accepted placement must explain. Default 1.
    pub min_marks: usize,
    /// Conflicts the accepted placement may have (a spurious or missed mark, a stray node).
    /// Default 1.
    pub tolerated_conflicts: usize,
    /// How many more conflicts than the accepted placement every other placement must have.
    /// Default 2, so that one detection error cannot produce a wrong identity.
    pub conflict_margin: usize,
    /// A mark belongs to a cell when it lies within this many lattice units of the cell centre
    /// along each axis. Default 0.2.
    pub mark_tolerance: f64,
}

impl Default for MatchOptions {
    fn default() -> Self {
        MatchOptions {
            gate: 0.3,
            residual: 0.15,
            min_nodes: 9,
            min_marks: 1,
            tolerated_conflicts: 1,
            conflict_margin: 2,
            mark_tolerance: 0.2,
        }
    }
}

impl MatchOptions {
    /// Checks every field, naming the first bad one.
    pub fn validate(&self) -> Result<(), MatchError> {
        let bad = |field: &'static str, value: f64, need: &'static str| {
            Err(MatchError::InvalidOption { field, value, need })
        };
        if !(self.gate > 0.0 && self.gate <= 0.5) {
            return bad("gate", self.gate, "in (0, 0.5]");
        }
        if !(self.residual > 0.0 && self.residual <= self.gate) {
            return bad("residual", self.residual, "in (0, gate]");
        }
        if self.min_nodes < 4 {
            return bad("min_nodes", self.min_nodes as f64, "at least 4");
        }
        if self.conflict_margin < 1 {
            return bad("conflict_margin", self.conflict_margin as f64, "at least 1");
        }
        if !(self.mark_tolerance > 0.0 && self.mark_tolerance < 0.5) {
            return bad("mark_tolerance", self.mark_tolerance, "in (0, 0.5)");
        }
        Ok(())
    }
}

fn finite(p: &Point2<f64>) -> bool {
    p.x.is_finite() && p.y.is_finite()
}

/// The intersection of the diagonals of a quadrilateral: the image of the centre of a square
/// under any homography, unlike the mean of the corners.
fn diagonal_centre(c: &[Point2<f64>; 4]) -> Option<Point2<f64>> {
    let (p, r) = (c[0], c[2] - c[0]);
    let (q, s) = (c[1], c[3] - c[1]);
    let den = r.x * s.y - r.y * s.x;
    if den.abs() < 1e-12 {
        return None;
    }
    let t = ((q - p).x * s.y - (q - p).y * s.x) / den;
    let x = p + r * t;
    finite(&x).then_some(x)
}

/// The inverse of the affine part that a dot's circle suffered: maps the ellipse to a circle.
fn rectifier(e: &facetcal_detector::Ellipse) -> Matrix2<f64> {
    if !(e.semi_major.is_finite() && e.semi_minor.is_finite() && e.angle.is_finite())
        || e.semi_minor <= 0.0
        || e.semi_major < e.semi_minor
    {
        return Matrix2::identity();
    }
    let (s, c) = e.angle.sin_cos();
    let rot = Matrix2::new(c, -s, s, c);
    let scale = Matrix2::new(1.0, 0.0, 0.0, e.semi_major / e.semi_minor);
    scale * rot.transpose()
}

/// The nodes of one pattern kind with the detection each came from.
struct KindNodes {
    nodes: Vec<Node>,
    refs: Vec<DetectionRef>,
}

fn nodes_of(det: &Detections, kind: PatternKind, left_out: &mut Vec<LeftOut>) -> KindNodes {
    let mut nodes = Vec::new();
    let mut refs = Vec::new();
    let mut push = |r: DetectionRef, n: Option<Node>, left_out: &mut Vec<LeftOut>| match n {
        Some(n) => {
            nodes.push(n);
            refs.push(r);
        }
        None => left_out.push(LeftOut { detection: r, reason: LeftOutReason::NotFinite }),
    };
    match kind {
        PatternKind::Checkerboard => {
            for (index, c) in det.checker_corners.iter().enumerate() {
                let ok = finite(&c.position)
                    && c.edges.iter().all(|e| e.x.is_finite() && e.y.is_finite() && e.norm() > 0.0);
                let n = ok.then(|| Node {
                    pos: c.position,
                    axes: Some(c.edges),
                    rectify: Matrix2::identity(),
                    size: None,
                    parity: Some(c.edges.map(|e| line_direction(&e))),
                });
                push(DetectionRef { kind: DetectionKind::CheckerCorner, index }, n, left_out);
            }
        }
        PatternKind::DotGrid => {
            for (index, d) in det.dots.iter().enumerate() {
                let n = finite(&d.centre).then(|| Node {
                    pos: d.centre,
                    axes: None,
                    rectify: rectifier(&d.ellipse),
                    size: Some([d.ellipse.semi_major, d.ellipse.semi_minor])
                        .filter(|s| s.iter().all(|v| v.is_finite() && *v > 0.0)),
                    parity: None,
                });
                push(DetectionRef { kind: DetectionKind::Dot, index }, n, left_out);
            }
        }
        PatternKind::SquareGrid => {
            for (index, s) in det.squares.iter().enumerate() {
                let c = &s.corners;
                let n = if c.iter().all(finite) {
                    diagonal_centre(c).map(|pos| {
                        let a1 = (c[1] - c[0]) + (c[2] - c[3]);
                        let a2 = (c[3] - c[0]) + (c[2] - c[1]);
                        Node {
                            pos,
                            axes: Some([a1, a2]),
                            rectify: Matrix2::identity(),
                            size: Some([0.5 * a1.norm(), 0.5 * a2.norm()]),
                            parity: None,
                        }
                    })
                } else {
                    None
                };
                push(DetectionRef { kind: DetectionKind::Square, index }, n, left_out);
            }
        }
    }
    KindNodes { nodes, refs }
}

/// Seen marks per component: each mark is mapped into the lattice of the (at most two)
/// components owning its nearest nodes, and kept where it lands on a cell centre and its
/// equivalent diameter is between 0.35 and 2 times that of a printed mark there (`sizes`: the
/// mark diameters of the kind's faces in lattice units; the image of a disc of diameter `d`
/// has equivalent diameter `d sqrt(|det J|)` for the local map's Jacobian `J`). The size test
/// refuses what a detector may take for a mark but is none, such as a whole light cell
/// around a dark mark.
fn seen_marks(
    det: &Detections,
    inks: &[Ink],
    on_nodes: bool,
    comps: &[Component],
    owner: &[Option<(usize, Cell)>],
    builder: &Builder<'_>,
    nodes: &[Node],
    tol: f64,
    sizes: &[f64],
) -> Vec<BTreeSet<SeenMark>> {
    let mut out = vec![BTreeSet::new(); comps.len()];
    for m in &det.marks {
        if !finite(&m.centre) || !inks.contains(&m.ink) {
            continue;
        }
        let mut tried = BTreeSet::new();
        for (_, k) in builder.index().nearest(&m.centre, 6) {
            let Some((ci, cell)) = owner[k] else { continue };
            if !tried.insert(ci) || tried.len() > 2 {
                continue;
            }
            let Some(map) = local_map(&comps[ci].cells, nodes, cell, 2) else { continue };
            // The local map leaves out `cell` itself; that only matters for its accuracy.
            let Some(inv) = map.inverse() else { continue };
            let Some(uv) = inv.apply(&m.centre) else { continue };
            let at = |du: f64, dv: f64| map.apply(&Point2::new(uv.x + du, uv.y + dv));
            let (Some(a0), Some(a1), Some(b0), Some(b1)) =
                (at(-0.5, 0.0), at(0.5, 0.0), at(0.0, -0.5), at(0.0, 0.5))
            else {
                continue;
            };
            let (ju, jv) = (a1 - a0, b1 - b0);
            let scale = (ju.x * jv.y - ju.y * jv.x).abs().sqrt();
            let sized = sizes.iter().any(|&d| {
                let r = m.diameter / (d * scale);
                r.is_finite() && (0.35..=2.0).contains(&r)
            });
            if !sized {
                continue;
            }
            let seen = if on_nodes {
                let (a, b) = (uv.x.round(), uv.y.round());
                ((uv.x - a).abs() < tol && (uv.y - b).abs() < tol).then_some((a as i32, b as i32))
            } else {
                let (a, b) = (uv.x.floor(), uv.y.floor());
                ((uv.x - a - 0.5).abs() < tol && (uv.y - b - 0.5).abs() < tol)
                    .then_some((a as i32, b as i32))
            };
            if let Some(c) = seen {
                let near_component = if on_nodes {
                    comps[ci].cells.at(c).is_some()
                } else {
                    [(0, 0), (1, 0), (0, 1), (1, 1)]
                        .iter()
                        .any(|d| comps[ci].cells.at((c.0 + d.0, c.1 + d.1)).is_some())
                };
                if near_component {
                    out[ci].insert(SeenMark { cell: c, light: m.ink == Ink::Light });
                }
            }
        }
    }
    out
}

/// How a probed mark cell reads.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Probed {
    Mark { light: bool },
    Empty,
    Unsure,
}

/// Lowest normalised mark score that reads as marked. A printed mark scores 1 on a sharp
/// image; under a blur of the mark's own radius the blurred mark also darkens its ring and it
/// scores 0.2 to 0.3. An empty cell scores 0 (negative where its ring catches the neighbours'
/// ink), spread by the image noise: below this floor a blurred mark and noise cannot be told
/// apart.
const MARKED_FLOOR: f64 = 0.15;
/// A cell reads as marked above `NOISE_FACTOR` times the spread of its candidate's scores (most
/// cells of a candidate are empty, so their robust spread is the score noise), and as empty
/// below half that threshold; between the two it is unsure.
const NOISE_FACTOR: f64 = 6.0;
/// Largest spread (highest minus lowest) of a cell's reference ink levels, as a fraction of its
/// contrast, for the cell to be read. Across a cell a 3:1 illumination gradient changes the
/// levels by a few percent of the contrast; an occluder edge by half of it or more.
const LEVEL_SPREAD: f64 = 0.25;
/// Smallest contrast between a cell's ground and the mark ink (full scale 1) worth reading.
const MIN_CONTRAST: f64 = 0.04;

/// The marked and empty thresholds of one candidate from the scores of all its cells: marked
/// at `max(MARKED_FLOOR, NOISE_FACTOR * s)`, empty below half of that, where `s` is 1.4826 x
/// the median absolute deviation of the scores (the common-practice robust estimate of a
/// normal spread).
fn mark_thresholds(scores: &[f64]) -> (f64, f64) {
    let median = |v: &mut Vec<f64>| -> f64 {
        v.sort_by(f64::total_cmp);
        let n = v.len();
        if n == 0 {
            0.0
        } else if n % 2 == 1 {
            v[n / 2]
        } else {
            0.5 * (v[n / 2 - 1] + v[n / 2])
        }
    };
    let mut v: Vec<f64> = scores.iter().copied().filter(|s| s.is_finite()).collect();
    let m = median(&mut v);
    let mut dev: Vec<f64> = v.iter().map(|s| (s - m).abs()).collect();
    let spread = 1.4826 * median(&mut dev);
    let marked = (NOISE_FACTOR * spread).max(MARKED_FLOOR);
    (marked, 0.5 * marked)
}

/// Reads every mark cell of one candidate lattice on the image. A cell's score is
/// `(inner - ring) / (ink - ring)`: its inner disc against its own ground, over the contrast of
/// the ground against the mark ink measured beside the cell (checkers: the grounds of the axis
/// neighbour cells, of the opposite colour; dot grids: the four dots around the gap; square
/// grids: the four gaps diagonal to the square). `radius` is the printed mark radius in lattice
/// units; the probe ellipses follow the local homography, so tilted faces are read as well.
fn probe_marks(
    cells: &Grid,
    nodes: &[Node],
    kind: PatternKind,
    radius: f64,
    probe: MarkProber<'_>,
) -> BTreeMap<Cell, Probed> {
    let on_nodes = kind == PatternKind::SquareGrid;
    let mut targets: BTreeSet<Cell> = BTreeSet::new();
    if on_nodes {
        targets.extend(cells.occupied().map(|(c, _)| c));
    } else {
        for ((i, j), _) in cells.occupied() {
            for c in [(i - 1, j - 1), (i, j - 1), (i - 1, j), (i, j)] {
                let corners = [(0, 0), (1, 0), (0, 1), (1, 1)]
                    .iter()
                    .filter(|d| cells.at((c.0 + d.0, c.1 + d.1)).is_some())
                    .count();
                if corners >= 2 {
                    targets.insert(c);
                }
            }
        }
    }
    let centre_of = |c: Cell| {
        if on_nodes {
            Point2::new(c.0 as f64, c.1 as f64)
        } else {
            Point2::new(c.0 as f64 + 0.5, c.1 as f64 + 0.5)
        }
    };
    // Reference places of a cell, in lattice coordinates.
    let refs_of = |c: Cell| -> [Point2<f64>; 4] {
        let p = centre_of(c);
        let d: [(f64, f64); 4] = match kind {
            PatternKind::Checkerboard => [(-1.0, 0.0), (1.0, 0.0), (0.0, -1.0), (0.0, 1.0)],
            _ => [(-0.5, -0.5), (0.5, -0.5), (-0.5, 0.5), (0.5, 0.5)],
        };
        d.map(|(x, y)| Point2::new(p.x + x, p.y + y))
    };
    let probe_at = |c: Cell, uv: Point2<f64>| -> Option<MarkProbe> {
        let map = local_map(cells, nodes, c, 2)?;
        let centre = map.apply(&uv)?;
        let du = map.apply(&Point2::new(uv.x + 0.5, uv.y))?
            - map.apply(&Point2::new(uv.x - 0.5, uv.y))?;
        let dv = map.apply(&Point2::new(uv.x, uv.y + 0.5))?
            - map.apply(&Point2::new(uv.x, uv.y - 0.5))?;
        let jacobian = Matrix2::from_columns(&[du * radius, dv * radius]);
        (finite(&centre) && jacobian.iter().all(|v| v.is_finite()))
            .then_some(MarkProbe { centre, jacobian })
    };
    let mut requests: Vec<MarkProbe> = Vec::new();
    // Per target: index of its own probe and of its reference probes in `requests`.
    let mut plan: Vec<(Cell, usize, Vec<usize>)> = Vec::new();
    for &c in &targets {
        let Some(own) = probe_at(c, centre_of(c)) else { continue };
        requests.push(own);
        let own_at = requests.len() - 1;
        let mut refs = Vec::new();
        for uv in refs_of(c) {
            if let Some(p) = probe_at(c, uv) {
                requests.push(p);
                refs.push(requests.len() - 1);
            }
        }
        plan.push((c, own_at, refs));
    }
    let samples = probe(&requests);
    let get = |k: usize| samples.get(k).copied().flatten();
    // Per target: its score and mark ink, or `None` where it cannot be read.
    let mut read: Vec<(Cell, Option<(f64, bool)>)> = Vec::with_capacity(plan.len());
    for (c, own_at, refs) in plan {
        let Some(own) = get(own_at) else { continue };
        let levels: Vec<f64> = refs
            .iter()
            .filter_map(|&k| get(k))
            .map(|s| if kind == PatternKind::Checkerboard { s.ring } else { s.inner })
            .filter(|v| v.is_finite())
            .collect();
        if levels.len() < 2 || !(own.inner.is_finite() && own.ring.is_finite()) {
            read.push((c, None));
            continue;
        }
        let ink = levels.iter().sum::<f64>() / levels.len() as f64;
        let contrast = ink - own.ring;
        let score = (own.inner - own.ring) / contrast;
        // Reference places that disagree are not all the pattern's ink: an occluder, a shadow
        // edge or glare crosses the cell, and its reading would be that edge's.
        let (lo, hi) = levels
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| (lo.min(v), hi.max(v)));
        let readable = contrast.abs() >= MIN_CONTRAST
            && score.is_finite()
            && hi - lo <= LEVEL_SPREAD * contrast.abs();
        read.push((c, readable.then_some((score, contrast > 0.0))));
    }
    let scores: Vec<f64> = read.iter().filter_map(|(_, r)| r.map(|(s, _)| s)).collect();
    let (marked, empty) = mark_thresholds(&scores);
    read.into_iter()
        .map(|(c, r)| {
            let probed = match r {
                Some((score, light)) if score >= marked => Probed::Mark { light },
                Some((score, _)) if score < empty => Probed::Empty,
                _ => Probed::Unsure,
            };
            (c, probed)
        })
        .collect()
}

/// Mean image vectors of a component's two lattice axes.
fn mean_axes(cells: &Grid, nodes: &[Node]) -> [Vector2<f64>; 2] {
    let mut out = [Vector2::zeros(); 2];
    for (a, d) in [(0, (1, 0)), (1, (0, 1))] {
        let mut n = 0.0;
        for ((i, j), k) in cells.occupied() {
            if let Some(l) = cells.at((i + d.0, j + d.1)) {
                out[a] += nodes[l].pos - nodes[k].pos;
                n += 1.0;
            }
        }
        if n > 0.0 {
            out[a] /= n;
        }
    }
    out
}

/// Largest corner deviation a square's detected outline may have from the outline its
/// neighbours predict, once a common shift and scale are taken out, as a fraction of the
/// predicted side (or 4 times the square's own corner sigma, if larger). Detected outlines grow
/// or shrink together with the encoding and the lighting (5 % of the side at 50 % vignetting),
/// which the scale absorbs; rendered squares then deviate by under 2 % of the side, and
/// synthetic ones under strong fisheye distortion by up to 6 % beyond their noise. A square
/// cut by an occluder along a line parallel to a side is still a clean quadrilateral, but 10 %
/// or more out of shape: its corners are not the printed ones.
const SHAPE_TOL: f64 = 0.06;

/// How far `detected` departs in shape from `predicted` (corners in the same order): the
/// largest corner residual after the least-squares shift and scale, and the predicted mean
/// side.
fn shape_deviation(detected: &[Point2<f64>; 4], predicted: &[Point2<f64>]) -> Option<(f64, f64)> {
    let centre =
        |v: &mut dyn Iterator<Item = Vector2<f64>>| v.fold(Vector2::zeros(), |a, p| a + p) / 4.0;
    let cd = centre(&mut detected.iter().map(|p| p.coords));
    let cp = centre(&mut predicted.iter().map(|p| p.coords));
    let (mut num, mut den) = (0.0, 0.0);
    for (d, p) in detected.iter().zip(predicted) {
        num += (d.coords - cd).dot(&(p.coords - cp));
        den += (p.coords - cp).norm_squared();
    }
    if den.is_nan() || den <= 0.0 {
        return None;
    }
    let scale = num / den;
    let dev = detected
        .iter()
        .zip(predicted)
        .map(|(d, p)| ((d.coords - cd) - scale * (p.coords - cp)).norm())
        .fold(0.0, f64::max);
    let side = (0..4).map(|q| (predicted[(q + 1) % 4] - predicted[q]).norm()).sum::<f64>() / 4.0;
    (dev.is_finite() && side > 0.0).then_some((dev, side))
}

/// For a square node, the index of the detected corner that is face corner 0 (the detected
/// corners are clockwise in the image, as the face corners are on a front-facing face). The
/// node's lattice neighbours predict the corners, and each detected corner must lie within `tol`
/// lattice spacings of its predicted place (`half` is half the side in lattice units), which
/// refuses a square of the wrong size or angle sitting where a missing square would be, and the
/// outline must have the predicted shape within [`SHAPE_TOL`], which refuses a square cut by an
/// occluder.
#[allow(clippy::too_many_arguments)]
fn square_start(
    det: &Detections,
    index: usize,
    cells: &Grid,
    nodes: &[Node],
    cell: Cell,
    turns: u8,
    half: f64,
    tol: f64,
) -> Option<usize> {
    let sq = det.squares.get(index)?;
    cells.at(cell)?;
    let dirs = [(-1, -1), (1, -1), (1, 1), (-1, 1)].map(|d| unrotate(turns, d));
    if let Some(m) = local_map(cells, nodes, cell, 2) {
        let p = Point2::new(cell.0 as f64, cell.1 as f64);
        let c = m.apply(&p)?;
        let spacing = (m.apply(&Point2::new(p.x + 1.0, p.y))? - c)
            .norm()
            .min((m.apply(&Point2::new(p.x, p.y + 1.0))? - c).norm());
        let predicted: Vec<Point2<f64>> = dirs
            .iter()
            .map(|d| m.apply(&Point2::new(p.x + half * d.0 as f64, p.y + half * d.1 as f64)))
            .collect::<Option<Vec<_>>>()?;
        let start = (0..4).min_by(|&a, &b| {
            (sq.corners[a] - predicted[0]).norm().total_cmp(&(sq.corners[b] - predicted[0]).norm())
        })?;
        let ok =
            (0..4).all(|q| (sq.corners[(start + q) % 4] - predicted[q]).norm() <= tol * spacing);
        let detected: [Point2<f64>; 4] = std::array::from_fn(|q| sq.corners[(start + q) % 4]);
        let shaped = shape_deviation(&detected, &predicted)
            .is_some_and(|(dev, side)| dev <= (SHAPE_TOL * side).max(4.0 * sq.sigma));
        return (ok && shaped).then_some(start);
    }
    // Without neighbours to predict the corners the order is a guess: leave it out.
    None
}

/// Identifies the detections of one image against a target.
///
/// Errors only for invalid options or a target this matcher cannot identify (staggered dot
/// grids); an image where nothing can be identified is a result with empty `faces` and the
/// reasons in `rejected` and `left_out`.
pub fn identify(
    det: &Detections,
    target: &Target,
    opts: &MatchOptions,
) -> Result<Identification, MatchError> {
    identify_inner(det, target, opts, None)
}

/// What [`identify_with`] asks of the image: the levels at each probed place, `None` where it
/// cannot be read. `facetcal_detector::mark_samples` on the detected image is the intended one.
pub type MarkProber<'a> = &'a dyn Fn(&[MarkProbe]) -> Vec<Option<MarkSample>>;

/// [`identify`], with the face code read at every mark cell of a candidate lattice by probing
/// the image there (see `probe_marks`) instead of only from the detector's marks: a mark too
/// small or too tilted for the detector's threshold is still read, and a blob that is no mark
/// no longer counts where the probe reads the cell.
pub fn identify_with(
    det: &Detections,
    target: &Target,
    opts: &MatchOptions,
    probe: MarkProber<'_>,
) -> Result<Identification, MatchError> {
    identify_inner(det, target, opts, Some(probe))
}

fn identify_inner(
    det: &Detections,
    target: &Target,
    opts: &MatchOptions,
    probe: Option<MarkProber<'_>>,
) -> Result<Identification, MatchError> {
    opts.validate()?;
    for f in target.faces() {
        if let PatternSpec::DotGrid { layout: DotLayout::Staggered, .. } = f.pattern() {
            return Err(MatchError::UnsupportedPattern {
                face: f.id(),
                reason: "staggered dot grids are not identified yet",
            });
        }
    }
    let mut result = Identification { marks_detected: det.marks.len(), ..Default::default() };
    let kinds = target.pattern_kinds();
    let lists = [
        (PatternKind::Checkerboard, DetectionKind::CheckerCorner, det.checker_corners.len()),
        (PatternKind::DotGrid, DetectionKind::Dot, det.dots.len()),
        (PatternKind::SquareGrid, DetectionKind::Square, det.squares.len()),
    ];
    let single_codeless = target.faces().len() == 1 && target.faces()[0].marks().is_empty();
    let mut by_face: BTreeMap<u32, FaceIdentification> = BTreeMap::new();
    for (kind, dkind, n) in lists {
        if !kinds.contains(&kind) {
            for index in 0..n {
                result.left_out.push(LeftOut {
                    detection: DetectionRef { kind: dkind, index },
                    reason: LeftOutReason::KindNotInTarget,
                });
            }
            continue;
        }
        identify_kind(det, target, opts, kind, single_codeless, probe, &mut result, &mut by_face);
    }
    result.faces = by_face.into_values().collect();
    for f in &mut result.faces {
        f.points.sort_by_key(|a| a.id);
    }
    result.left_out.sort_by_key(|a| a.detection);
    Ok(result)
}

#[allow(clippy::too_many_arguments)]
fn identify_kind(
    det: &Detections,
    target: &Target,
    opts: &MatchOptions,
    kind: PatternKind,
    single_codeless: bool,
    probe: Option<MarkProber<'_>>,
    result: &mut Identification,
    by_face: &mut BTreeMap<u32, FaceIdentification>,
) {
    let KindNodes { nodes, refs } = nodes_of(det, kind, &mut result.left_out);
    let faces: Vec<(usize, &Face)> =
        target.faces().iter().enumerate().filter(|(_, f)| f.pattern().kind() == kind).collect();
    let mut builder = Builder::new(&nodes, opts);
    let mut comps = builder.build();
    // Largest first, then by smallest node index: a deterministic order.
    comps.sort_by_key(|c| (std::cmp::Reverse(c.len), c.cells.occupied().map(|(_, k)| k).min()));
    let mut owner: Vec<Option<(usize, Cell)>> = vec![None; nodes.len()];
    for (ci, c) in comps.iter().enumerate() {
        for (cell, k) in c.cells.occupied() {
            owner[k] = Some((ci, cell));
        }
    }
    let inks: Vec<Ink> = match kind {
        PatternKind::Checkerboard => vec![Ink::Dark, Ink::Light],
        PatternKind::DotGrid => faces.iter().map(|(_, f)| f.ground().inverse()).collect(),
        PatternKind::SquareGrid => vec![Ink::Light],
    };
    let on_nodes = kind == PatternKind::SquareGrid;
    // One lattice step: the cell, the dot pitch, the square pitch.
    let step = |p: &PatternSpec| match *p {
        PatternSpec::Checkerboard { cell, .. } => cell,
        PatternSpec::DotGrid { pitch, .. } | PatternSpec::SquareGrid { pitch, .. } => pitch,
    };
    let sizes: Vec<f64> =
        faces.iter().map(|(_, f)| f.mark_diameter() / step(f.pattern())).collect();
    let mut marks = seen_marks(
        det,
        &inks,
        on_nodes,
        &comps,
        &owner,
        &builder,
        &nodes,
        opts.mark_tolerance,
        &sizes,
    );
    let mut unsure = vec![BTreeSet::new(); comps.len()];
    // Probing needs one printed mark size for the kind's faces.
    let same_size =
        sizes.iter().all(|&d| sizes.first().is_some_and(|&e| (d - e).abs() <= 0.05 * e));
    if let (Some(probe), Some(&size), true) = (probe, sizes.first(), same_size) {
        for (ci, comp) in comps.iter().enumerate() {
            let read = probe_marks(&comp.cells, &nodes, kind, 0.5 * size, probe);
            marks[ci].retain(|m| !read.contains_key(&m.cell));
            for (cell, r) in read {
                match r {
                    Probed::Mark { light } => {
                        marks[ci].insert(SeenMark { cell, light });
                    }
                    Probed::Unsure => {
                        unsure[ci].insert(cell);
                    }
                    Probed::Empty => {}
                }
            }
        }
    }
    let mut starts: BTreeMap<usize, usize> = BTreeMap::new();
    let rule = place::Rule {
        min_marks: opts.min_marks,
        tolerated: opts.tolerated_conflicts,
        margin: opts.conflict_margin,
    };
    // Face grid cells (col, row) taken by an earlier candidate, per face.
    let mut claimed: BTreeMap<usize, Dense<bool>> = BTreeMap::new();
    // Identified nodes per face grid cell, for the per-face residual test.
    let mut face_cells: BTreeMap<usize, Grid> = BTreeMap::new();
    // Per face, the residuals of its one candidate when the candidate's own residual test
    // settled on exactly the cells the face keeps: the per-face test would refit the same
    // neighbourhoods, only in rotated coordinates, and find what the candidate's found.
    let mut settled: BTreeMap<usize, Option<Dense<f64>>> = BTreeMap::new();
    let mut turns_of: BTreeMap<usize, (u8, usize, usize)> = BTreeMap::new();
    for (ci, comp) in comps.iter().enumerate() {
        let (w, h) = (det.width, det.height);
        let in_image = |c: Cell| {
            let centre = if on_nodes {
                Point2::new(c.0 as f64, c.1 as f64)
            } else {
                Point2::new(c.0 as f64 + 0.5, c.1 as f64 + 0.5)
            };
            let near = if on_nodes { c } else { (c.0, c.1) };
            let Some(m) = local_map(&comp.cells, &nodes, near, 2) else { return false };
            let p = m.apply(&centre);
            let s = p.and_then(|p| {
                m.apply(&Point2::new(centre.x + 1.0, centre.y)).map(|q| (q - p).norm())
            });
            inside(p, w, h, 0.25 * s.unwrap_or(f64::INFINITY))
        };
        let view = CandidateView {
            cells: &comp.cells,
            len: comp.len,
            marks: &marks[ci],
            unsure: &unsure[ci],
            in_image: &in_image,
            axes: mean_axes(&comp.cells, &nodes),
        };
        let placed: Result<Placement, Rejection> = place(&faces, &view, single_codeless, &rule);
        let reject = |r: Rejection, result: &mut Identification| {
            for (_, k) in comp.cells.occupied() {
                result.left_out.push(LeftOut {
                    detection: refs[k],
                    reason: LeftOutReason::Candidate { rejection: r.clone() },
                });
            }
            result.rejected.push(r);
        };
        let p = match placed {
            Ok(p) => p,
            Err(r) => {
                reject(r, result);
                continue;
            }
        };
        let face = &target.faces()[p.face];
        let (rows, cols) = face.feature_grid();
        let mut ids: Vec<(Cell, usize, (i32, i32))> = Vec::with_capacity(comp.len);
        for (c, k) in comp.cells.occupied() {
            let r = rotate(p.turns, c);
            let (col, row) = (r.0 + p.offset.0, r.1 + p.offset.1);
            if col < 0 || row < 0 || col >= cols as i32 || row >= rows as i32 {
                // A tolerated conflict: a stray node beyond the face.
                result
                    .left_out
                    .push(LeftOut { detection: refs[k], reason: LeftOutReason::OutsideFace });
            } else {
                ids.push((c, k, (col, row)));
            }
        }
        let span = ((0, 0), (cols as i32 - 1, rows as i32 - 1));
        let taken = claimed.entry(p.face).or_insert_with(|| Dense::spanning(span.0, span.1, false));
        if ids.iter().any(|&(_, _, cell)| taken.get(cell)) {
            reject(Rejection::Overlap { nodes: comp.len, face: face.id() }, result);
            continue;
        }
        let whole = ids.len() == comp.len;
        match settled.entry(p.face) {
            std::collections::btree_map::Entry::Vacant(e) => {
                e.insert(comp.residual.as_ref().filter(|_| whole).map(|r| {
                    let mut by_cell = Dense::spanning(span.0, span.1, f64::INFINITY);
                    for &(c, _, cell) in &ids {
                        by_cell.set(cell, r.get(c));
                    }
                    by_cell
                }));
            }
            std::collections::btree_map::Entry::Occupied(mut e) => {
                e.insert(None);
            }
        }
        let fc = face_cells.entry(p.face).or_insert_with(|| Grid::spanning(span.0, span.1, None));
        for &(_, k, cell) in &ids {
            taken.set(cell, true);
            fc.set(cell, Some(k));
        }
        let t = turns_of.entry(p.face).or_insert((p.turns, 0, 0));
        t.1 += p.matched;
        t.2 += 1;
        // Square corners: remember each node's start corner now, while its candidate's lattice
        // is at hand.
        if on_nodes {
            for &(c, k, cell) in &ids {
                let half = match face.pattern() {
                    PatternSpec::SquareGrid { side, pitch, .. } => 0.5 * side / pitch,
                    _ => 0.5,
                };
                match square_start(
                    det,
                    refs[k].index,
                    &comp.cells,
                    &nodes,
                    c,
                    p.turns,
                    half,
                    opts.residual,
                ) {
                    Some(s) => {
                        starts.insert(k, s);
                    }
                    None => {
                        fc.set(cell, None);
                        settled.insert(p.face, None);
                        result.left_out.push(LeftOut {
                            detection: refs[k],
                            reason: LeftOutReason::CornerOrder,
                        });
                    }
                }
            }
        }
    }
    // Per-face test of every final identity, then the output.
    for (fi, mut grid) in face_cells {
        let face = &target.faces()[fi];
        let residuals = match settled.remove(&fi).flatten() {
            Some(r) => r,
            None => {
                let pruned = prune(&mut grid, &nodes, opts.residual);
                for &(_, k) in &pruned.removed {
                    result
                        .left_out
                        .push(LeftOut { detection: refs[k], reason: LeftOutReason::FitResidual });
                }
                pruned.residual
            }
        };
        // A dot cut by an occluder keeps nearly its shape but not its area, and its centre
        // moves with the cut: one whose area departs from its neighbours' fit is left out.
        let area = |k: usize| {
            (refs[k].kind == DetectionKind::Dot)
                .then(|| det.dots.get(refs[k].index).map(|d| d.area))
                .flatten()
        };
        for (c, k) in value_outliers(&grid, &area, DOT_AREA_TOLERANCE) {
            grid.set(c, None);
            result
                .left_out
                .push(LeftOut { detection: refs[k], reason: LeftOutReason::SizeResidual });
        }
        // In (row, col) order, the order of the output's feature ids.
        let mut cells: Vec<(Cell, usize)> = grid.occupied().collect();
        cells.sort_unstable_by_key(|&((col, row), _)| (row, col));
        let src: Vec<Point2<f64>> =
            cells.iter().map(|(c, _)| Point2::new(c.0 as f64, c.1 as f64)).collect();
        let dst: Vec<Point2<f64>> = cells.iter().map(|&(_, k)| nodes[k].pos).collect();
        let (turns, matched, count) = turns_of.get(&fi).copied().unwrap_or((0, 0, 0));
        if let Some(h) = fit_homography(&src, &dst) {
            let n = src.len() as f64;
            let mid = Point2::new(
                src.iter().map(|p| p.x).sum::<f64>() / n,
                src.iter().map(|p| p.y).sum::<f64>() / n,
            );
            if h.orientation_at(&mid) <= 0.0 {
                let r = Rejection::Mirrored { nodes: cells.len(), face: face.id() };
                for &(_, k) in &cells {
                    result.left_out.push(LeftOut {
                        detection: refs[k],
                        reason: LeftOutReason::Candidate { rejection: r.clone() },
                    });
                }
                result.rejected.push(r);
                continue;
            }
        }
        let entry = by_face.entry(face.id()).or_insert_with(|| FaceIdentification {
            face: face.id(),
            quarter_turns: turns,
            marks_matched: matched,
            candidates: count,
            points: Vec::new(),
        });
        for &((col, row), k) in &cells {
            // The residual test's own figure for the nodes it kept.
            let residual = Some(residuals.get((col, row))).filter(|r| r.is_finite());
            let (row, col) = (row as u32, col as u32);
            let corners: Vec<(u8, Point2<f64>)> = if on_nodes {
                let Some(&s) = starts.get(&k) else { continue };
                let Some(sq) = det.squares.get(refs[k].index) else { continue };
                (0..4u8).map(|q| (q, sq.corners[(s + q as usize) % 4])).collect()
            } else {
                vec![(0, nodes[k].pos)]
            };
            for (corner, px) in corners {
                let Some(local) = face.feature_local(row, col, corner) else { continue };
                let t = face.to_target(&local);
                entry.points.push(Correspondence {
                    id: FeatureId { face: face.id(), row, col, corner },
                    target: [t.x, t.y, t.z],
                    image: [px.x, px.y],
                    residual,
                    detection: refs[k],
                });
            }
        }
    }
    for (k, &r) in refs.iter().enumerate() {
        if owner[k].is_none() {
            result.left_out.push(LeftOut { detection: r, reason: LeftOutReason::NoLattice });
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Thresholds from the median absolute deviation (scaled by 1.4826, the common-practice
    /// factor that makes it a normal distribution's standard deviation), worked by hand.
    #[test]
    fn mark_thresholds_follow_the_score_noise_above_a_floor() {
        // Median 0.05; deviations 0.15 0.1 0.05 0 0.05 0.75 0.85, median 0.1.
        let (marked, empty) = mark_thresholds(&[-0.1, -0.05, 0.0, 0.05, 0.1, 0.8, 0.9]);
        assert!((marked - 6.0 * 0.14826).abs() < 1e-12, "{marked}");
        assert!((empty - 3.0 * 0.14826).abs() < 1e-12, "{empty}");
        // Median 0; deviations 0 0 0 0.01 0.01 0.9, median 0.005: 6 x 0.0074 is below the floor.
        let (marked, empty) = mark_thresholds(&[0.0, 0.0, 0.0, 0.01, -0.01, 0.9]);
        assert_eq!((marked, empty), (MARKED_FLOOR, 0.5 * MARKED_FLOOR));
        assert_eq!(mark_thresholds(&[f64::NAN]), (MARKED_FLOOR, 0.5 * MARKED_FLOOR));
    }

    /// A square cut along a line parallel to a side (a 24 px square seen 19 px deep) is out of
    /// shape; the same square grown by 1 px on every side (an outline bias) is not.
    #[test]
    fn shape_deviation_takes_out_scale_but_not_a_cut() {
        let sq = |x0: f64, y0: f64, x1: f64, y1: f64| {
            [Point2::new(x0, y0), Point2::new(x1, y0), Point2::new(x1, y1), Point2::new(x0, y1)]
        };
        let predicted = sq(0.0, 0.0, 24.0, 24.0);
        let (dev, side) = shape_deviation(&sq(-1.0, -1.0, 25.0, 25.0), &predicted).unwrap();
        assert!(dev < 1e-12 && (side - 24.0).abs() < 1e-12, "{dev} {side}");
        let (dev, side) = shape_deviation(&sq(0.0, 0.0, 24.0, 19.0), &predicted).unwrap();
        assert!(dev > SHAPE_TOL * side, "{dev} {side}");
        assert!(shape_deviation(&[Point2::origin(); 4], &[Point2::origin(); 4]).is_none());
    }
}
