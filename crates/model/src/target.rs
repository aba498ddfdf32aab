//! Calibration targets: the versioned target file, its validation, and the checked [`Target`]
//! that every other crate takes.
//!
//! A target is rigid and made of planar faces. Each face has its own frame: origin at the
//! top-left corner of the face's printed area (margin included), x along the pattern's columns,
//! y along its rows (down the printed sheet), z into the face, away from a viewer in front of it.
//! A face's pose maps that frame into the target frame. All lengths are in the file's unit.
//!
//! Patterns and their features (feature coordinates in the face frame, `m` = margin):
//! - checkerboard, `rows x columns` cells of size `cell`, cell (0, 0) dark: the inner corners
//!   `(row, col)`, `row < rows - 1`, `col < columns - 1`, at `(m + (col + 1) cell, m + (row + 1) cell)`.
//! - dot grid, `rows x columns` dots of diameter `diameter` at spacing `pitch`: dot `(row, col)`
//!   at `(m + (col + 0.5 + s) pitch, m + (row + 0.5) pitch)` where `s = 0.5` on odd rows of a
//!   staggered layout and 0 otherwise.
//! - square grid, `rows x columns` dark squares of side `side` at spacing `pitch`: the four corners
//!   (0 top-left, 1 top-right, 2 bottom-right, 3 bottom-left, in the face frame) of each square.
//!
//! Face codes: each face lists marked cells. A mark is a disc of the opposite ink at the centre
//! of a cell: a checker cell, a dark square, or the gap between dots (see [`Face::mark_centre`]).
//! Loading proves that each face's marks are unchanged by no symmetry of its grid and differ from
//! every other face's marks under every symmetry, so a view of the marks tells face and
//! orientation.

use std::collections::BTreeSet;
use std::fmt;
use std::path::Path;

use nalgebra::{Matrix3, Point2, Point3, Vector3};
use serde::{Deserialize, Serialize};

use crate::error::ModelError;
use crate::geometry::Pose;

/// The `format` value of a target file.
pub const TARGET_FORMAT: &str = "facetcal-target";
/// The target file version this program reads and writes.
pub const TARGET_VERSION: u32 = 1;
/// The most cells (or dots, or squares) one face may have: bounds the memory any target file can
/// make the program use.
pub const MAX_GRID_CELLS: u64 = 1_000_000;
/// Mark diameter as a fraction of the cell (checker), side (squares) or dot diameter (dots).
pub const MARK_FRACTION: f64 = 0.4;

/// A unit of length.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Unit {
    /// Millimetres.
    Mm,
    /// Metres.
    M,
    /// Inches.
    In,
}

impl Unit {
    /// Millimetres per unit.
    pub fn mm(self) -> f64 {
        match self {
            Unit::Mm => 1.0,
            Unit::M => 1000.0,
            Unit::In => 25.4,
        }
    }

    /// The name used in files.
    pub fn name(self) -> &'static str {
        match self {
            Unit::Mm => "mm",
            Unit::M => "m",
            Unit::In => "in",
        }
    }
}

/// The target file as written: parse with [`TargetSpec::from_json`], then check with
/// [`Target::new`].
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TargetSpec {
    /// Always [`TARGET_FORMAT`].
    pub format: String,
    /// Always [`TARGET_VERSION`].
    pub version: u32,
    /// A name for people.
    pub name: String,
    /// Unit of every length in the file.
    pub unit: Unit,
    /// The faces.
    pub faces: Vec<FaceSpec>,
}

/// One face as written.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FaceSpec {
    /// Identity of the face, unique in the target.
    pub id: u32,
    /// Where the face sits in the target frame.
    pub pose: FacePoseSpec,
    /// The printed pattern.
    pub pattern: PatternSpec,
    /// Blank border around the pattern on every side.
    #[serde(default)]
    pub margin: f64,
    /// Marked cells `[row, col]` of the face code.
    #[serde(default)]
    pub marks: Vec<[u32; 2]>,
}

/// A face pose as written: either axis-angle and translation, or an origin and two axes.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(untagged, deny_unknown_fields)]
pub enum FacePoseSpec {
    /// Axis-angle rotation (radians) and translation of the face frame in the target frame.
    AxisAngle {
        /// Axis-angle vector, radians.
        rotation: [f64; 3],
        /// Translation.
        translation: [f64; 3],
    },
    /// The face frame's origin and its x and y axes (unit, orthogonal) in the target frame.
    Axes {
        /// Origin of the face frame.
        origin: [f64; 3],
        /// Direction of the face's x axis (columns).
        x_axis: [f64; 3],
        /// Direction of the face's y axis (rows).
        y_axis: [f64; 3],
    },
}

/// Whether dots sit on a square lattice or with odd rows shifted by half a pitch.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum DotLayout {
    /// Square lattice.
    #[default]
    Square,
    /// Odd rows shifted right by half a pitch.
    Staggered,
}

/// Which ink the features are printed in.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Polarity {
    /// Dark features on a light ground.
    #[default]
    DarkOnLight,
    /// Light features on a dark ground.
    LightOnDark,
}

/// A pattern as written (and as checked: the fields are proven sane by [`Target::new`]).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case", deny_unknown_fields)]
pub enum PatternSpec {
    /// Alternating cells; the inner corners are the features.
    Checkerboard {
        /// Cell rows.
        rows: u32,
        /// Cell columns.
        columns: u32,
        /// Cell side.
        cell: f64,
    },
    /// Circular dots; their centres are the features.
    DotGrid {
        /// Dot rows.
        rows: u32,
        /// Dot columns.
        columns: u32,
        /// Centre spacing.
        pitch: f64,
        /// Dot diameter.
        diameter: f64,
        /// Lattice layout.
        #[serde(default)]
        layout: DotLayout,
        /// Ink of the dots.
        #[serde(default)]
        polarity: Polarity,
    },
    /// Isolated dark squares; their four corners are the features.
    SquareGrid {
        /// Square rows.
        rows: u32,
        /// Square columns.
        columns: u32,
        /// Square side.
        side: f64,
        /// Centre spacing.
        pitch: f64,
    },
}

/// Pattern kinds, for the detector (which knows kinds, not targets).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum PatternKind {
    /// [`PatternSpec::Checkerboard`].
    Checkerboard,
    /// [`PatternSpec::DotGrid`].
    DotGrid,
    /// [`PatternSpec::SquareGrid`].
    SquareGrid,
}

impl PatternSpec {
    /// The pattern's kind.
    pub fn kind(&self) -> PatternKind {
        match self {
            PatternSpec::Checkerboard { .. } => PatternKind::Checkerboard,
            PatternSpec::DotGrid { .. } => PatternKind::DotGrid,
            PatternSpec::SquareGrid { .. } => PatternKind::SquareGrid,
        }
    }

    /// Rows and columns of the grid that marks are placed in.
    pub fn mark_grid(&self) -> (u32, u32) {
        match *self {
            PatternSpec::Checkerboard { rows, columns, .. } => (rows, columns),
            PatternSpec::SquareGrid { rows, columns, .. } => (rows, columns),
            PatternSpec::DotGrid { rows, columns, layout: DotLayout::Square, .. } => {
                (rows.saturating_sub(1), columns.saturating_sub(1))
            }
            PatternSpec::DotGrid { rows, columns, layout: DotLayout::Staggered, .. } => {
                (rows, columns.saturating_sub(1))
            }
        }
    }

    /// Width and height of the pattern (without margin).
    pub fn extent(&self) -> (f64, f64) {
        match *self {
            PatternSpec::Checkerboard { rows, columns, cell } => {
                (columns as f64 * cell, rows as f64 * cell)
            }
            PatternSpec::DotGrid { rows, columns, pitch, layout, .. } => {
                let extra = if layout == DotLayout::Staggered && rows > 1 { 0.5 } else { 0.0 };
                ((columns as f64 + extra) * pitch, rows as f64 * pitch)
            }
            PatternSpec::SquareGrid { rows, columns, pitch, .. } => {
                (columns as f64 * pitch, rows as f64 * pitch)
            }
        }
    }

    /// The typical distance between neighbouring features.
    pub fn feature_spacing(&self) -> f64 {
        match *self {
            PatternSpec::Checkerboard { cell, .. } => cell,
            PatternSpec::DotGrid { pitch, .. } => pitch,
            PatternSpec::SquareGrid { side, pitch, .. } => side.min(pitch - side),
        }
    }
}

/// The stable identity of a feature: face, grid row and column, and the corner of a square
/// (0 for checker corners and dots).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub struct FeatureId {
    /// Face id.
    pub face: u32,
    /// Row in the face's feature grid.
    pub row: u32,
    /// Column in the face's feature grid.
    pub col: u32,
    /// Corner of a square (0 top-left, 1 top-right, 2 bottom-right, 3 bottom-left); 0 otherwise.
    #[serde(default)]
    pub corner: u8,
}

impl fmt::Display for FeatureId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "f{}r{}c{}", self.face, self.row, self.col)?;
        if self.corner != 0 {
            write!(f, "k{}", self.corner)?;
        }
        Ok(())
    }
}

/// Ink of a painted shape.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Ink {
    /// Black (reflectance 0).
    Dark,
    /// White (reflectance 1).
    Light,
}

impl Ink {
    /// The other ink.
    pub fn inverse(self) -> Ink {
        match self {
            Ink::Dark => Ink::Light,
            Ink::Light => Ink::Dark,
        }
    }
}

/// A painted primitive in face coordinates.
#[derive(Clone, Debug, PartialEq)]
pub enum Shape {
    /// An axis-aligned rectangle `[x0, x1] x [y0, y1]`.
    Rect {
        /// Left edge.
        x0: f64,
        /// Top edge.
        y0: f64,
        /// Right edge.
        x1: f64,
        /// Bottom edge.
        y1: f64,
    },
    /// A disc.
    Disc {
        /// Centre.
        centre: Point2<f64>,
        /// Radius.
        radius: f64,
    },
}

/// A checked face.
#[derive(Clone, Debug, PartialEq)]
pub struct Face {
    id: u32,
    pose: Pose,
    pattern: PatternSpec,
    margin: f64,
    marks: BTreeSet<(u32, u32)>,
}

impl Face {
    /// The face id.
    pub fn id(&self) -> u32 {
        self.id
    }

    /// Face frame to target frame.
    pub fn pose(&self) -> &Pose {
        &self.pose
    }

    /// The pattern.
    pub fn pattern(&self) -> &PatternSpec {
        &self.pattern
    }

    /// The blank border.
    pub fn margin(&self) -> f64 {
        self.margin
    }

    /// The marked cells of the face code, sorted.
    pub fn marks(&self) -> &BTreeSet<(u32, u32)> {
        &self.marks
    }

    /// Width and height of the face, margin included.
    pub fn size(&self) -> (f64, f64) {
        let (w, h) = self.pattern.extent();
        (w + 2.0 * self.margin, h + 2.0 * self.margin)
    }

    /// Rows and columns of the feature grid (for squares, of the squares; each has 4 corners).
    pub fn feature_grid(&self) -> (u32, u32) {
        match self.pattern {
            PatternSpec::Checkerboard { rows, columns, .. } => (rows - 1, columns - 1),
            PatternSpec::DotGrid { rows, columns, .. } => (rows, columns),
            PatternSpec::SquareGrid { rows, columns, .. } => (rows, columns),
        }
    }

    /// Number of features on the face.
    pub fn feature_count(&self) -> usize {
        let (r, c) = self.feature_grid();
        let per = if self.pattern.kind() == PatternKind::SquareGrid { 4 } else { 1 };
        r as usize * c as usize * per
    }

    /// The face-frame position of a feature, or `None` if the indices are outside the grid.
    pub fn feature_local(&self, row: u32, col: u32, corner: u8) -> Option<Point2<f64>> {
        let (r, c) = self.feature_grid();
        if row >= r || col >= c {
            return None;
        }
        let m = self.margin;
        let (row, col) = (row as f64, col as f64);
        match self.pattern {
            PatternSpec::Checkerboard { cell, .. } => {
                (corner == 0).then(|| Point2::new(m + (col + 1.0) * cell, m + (row + 1.0) * cell))
            }
            PatternSpec::DotGrid { pitch, layout, .. } => {
                let s =
                    if layout == DotLayout::Staggered && row as u32 % 2 == 1 { 0.5 } else { 0.0 };
                (corner == 0)
                    .then(|| Point2::new(m + (col + 0.5 + s) * pitch, m + (row + 0.5) * pitch))
            }
            PatternSpec::SquareGrid { side, pitch, .. } => {
                let x0 = m + col * pitch + 0.5 * (pitch - side);
                let y0 = m + row * pitch + 0.5 * (pitch - side);
                match corner {
                    0 => Some(Point2::new(x0, y0)),
                    1 => Some(Point2::new(x0 + side, y0)),
                    2 => Some(Point2::new(x0 + side, y0 + side)),
                    3 => Some(Point2::new(x0, y0 + side)),
                    _ => None,
                }
            }
        }
    }

    /// Every feature of the face with its face-frame position, in row-major order.
    pub fn features_local(&self) -> Vec<(FeatureId, Point2<f64>)> {
        let (rows, cols) = self.feature_grid();
        let corners: u8 = if self.pattern.kind() == PatternKind::SquareGrid { 4 } else { 1 };
        let mut out = Vec::with_capacity(self.feature_count());
        for row in 0..rows {
            for col in 0..cols {
                for corner in 0..corners {
                    if let Some(p) = self.feature_local(row, col, corner) {
                        out.push((FeatureId { face: self.id, row, col, corner }, p));
                    }
                }
            }
        }
        out
    }

    /// A face-frame point in the target frame.
    pub fn to_target(&self, p: &Point2<f64>) -> Point3<f64> {
        self.pose.transform(&Point3::new(p.x, p.y, 0.0))
    }

    /// The face's unit normal in the target frame (the face frame's z axis).
    pub fn normal(&self) -> Vector3<f64> {
        self.pose.rotation * Vector3::z()
    }

    /// Centre of mark cell `(row, col)` in the face frame.
    pub fn mark_centre(&self, row: u32, col: u32) -> Point2<f64> {
        let m = self.margin;
        let (r, c) = (row as f64, col as f64);
        match self.pattern {
            PatternSpec::Checkerboard { cell, .. } => {
                Point2::new(m + (c + 0.5) * cell, m + (r + 0.5) * cell)
            }
            PatternSpec::SquareGrid { pitch, .. } => {
                Point2::new(m + (c + 0.5) * pitch, m + (r + 0.5) * pitch)
            }
            PatternSpec::DotGrid { pitch, layout: DotLayout::Square, .. } => {
                Point2::new(m + (c + 1.0) * pitch, m + (r + 1.0) * pitch)
            }
            PatternSpec::DotGrid { pitch, layout: DotLayout::Staggered, .. } => {
                let s = if row % 2 == 1 { 0.5 } else { 0.0 };
                Point2::new(m + (c + 1.0 + s) * pitch, m + (r + 0.5) * pitch)
            }
        }
    }

    /// Diameter of a mark disc.
    pub fn mark_diameter(&self) -> f64 {
        MARK_FRACTION
            * match self.pattern {
                PatternSpec::Checkerboard { cell, .. } => cell,
                PatternSpec::SquareGrid { side, .. } => side,
                PatternSpec::DotGrid { diameter, .. } => diameter,
            }
    }

    /// The ink of the face's ground.
    pub fn ground(&self) -> Ink {
        match self.pattern {
            PatternSpec::DotGrid { polarity: Polarity::LightOnDark, .. } => Ink::Dark,
            _ => Ink::Light,
        }
    }

    /// The ink of the mark in cell `(row, col)`: always the opposite of what surrounds it.
    pub fn mark_ink(&self, row: u32, col: u32) -> Ink {
        match self.pattern {
            PatternSpec::Checkerboard { .. } => {
                if (row + col) % 2 == 0 {
                    Ink::Light
                } else {
                    Ink::Dark
                }
            }
            PatternSpec::SquareGrid { .. } => Ink::Light,
            PatternSpec::DotGrid { .. } => self.ground().inverse(),
        }
    }

    /// What is printed on the face, in painting order over a ground of [`Self::ground`]:
    /// the pattern's shapes, then the marks. Shared by the renderer and the printable sheets so
    /// that both draw exactly the same thing.
    pub fn shapes(&self) -> Vec<(Shape, Ink)> {
        let m = self.margin;
        let mut out = Vec::new();
        match self.pattern {
            PatternSpec::Checkerboard { rows, columns, cell } => {
                for r in 0..rows {
                    for c in 0..columns {
                        if (r + c) % 2 == 0 {
                            let x0 = m + c as f64 * cell;
                            let y0 = m + r as f64 * cell;
                            out.push((
                                Shape::Rect { x0, y0, x1: x0 + cell, y1: y0 + cell },
                                Ink::Dark,
                            ));
                        }
                    }
                }
            }
            PatternSpec::DotGrid { rows, columns, diameter, .. } => {
                let ink = self.ground().inverse();
                for r in 0..rows {
                    for c in 0..columns {
                        if let Some(centre) = self.feature_local(r, c, 0) {
                            out.push((Shape::Disc { centre, radius: 0.5 * diameter }, ink));
                        }
                    }
                }
            }
            PatternSpec::SquareGrid { rows, columns, side, .. } => {
                for r in 0..rows {
                    for c in 0..columns {
                        if let Some(p) = self.feature_local(r, c, 0) {
                            out.push((
                                Shape::Rect { x0: p.x, y0: p.y, x1: p.x + side, y1: p.y + side },
                                Ink::Dark,
                            ));
                        }
                    }
                }
            }
        }
        let radius = 0.5 * self.mark_diameter();
        for &(r, c) in &self.marks {
            out.push((Shape::Disc { centre: self.mark_centre(r, c), radius }, self.mark_ink(r, c)));
        }
        out
    }
}

/// A checked target: every invariant of the file format holds.
#[derive(Clone, Debug, PartialEq)]
pub struct Target {
    name: String,
    unit: Unit,
    faces: Vec<Face>,
    spec: TargetSpec,
}

impl TargetSpec {
    /// Parses a target file's text. Shape errors name the JSON path of the field.
    pub fn from_json(text: &str) -> Result<TargetSpec, ModelError> {
        crate::files::parse_with_path(text)
    }

    /// The file's text, pretty-printed.
    // A derived struct of strings, numbers and sequences always serialises.
    #[allow(clippy::expect_used)]
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("a target spec always serialises")
    }
}

fn positive(path: String, v: f64) -> Result<f64, ModelError> {
    if !v.is_finite() || v <= 0.0 {
        Err(ModelError::field(path, format!("must be a positive length, got {v}")))
    } else {
        Ok(v)
    }
}

fn finite3(path: String, v: [f64; 3]) -> Result<Vector3<f64>, ModelError> {
    if v.iter().all(|x| x.is_finite()) {
        Ok(Vector3::from(v))
    } else {
        Err(ModelError::field(path, format!("must be finite, got {v:?}")))
    }
}

/// Symmetry `k` of a `rows x cols` grid of cells applied to cell `(r, c)`: 0 identity,
/// 1 rotation by 180 degrees, 2 and 3 mirrors, 4 and 5 transposes, 6 and 7 rotations by 90
/// degrees. The last four exist only for square grids.
pub fn apply_symmetry(k: usize, rows: u32, cols: u32, (r, c): (u32, u32)) -> (u32, u32) {
    let (rr, cc) = (rows - 1 - r, cols - 1 - c);
    match k {
        0 => (r, c),
        1 => (rr, cc),
        2 => (rr, c),
        3 => (r, cc),
        4 => (c, r),
        5 => (cc, rr),
        6 => (c, rr),
        _ => (cc, r),
    }
}

impl Target {
    /// Reads and checks a target file.
    pub fn load(path: &Path) -> Result<Target, ModelError> {
        Target::from_json(&facetcal_inputs::read_json_text(path)?)
    }

    /// Parses and checks a target file's text.
    pub fn from_json(text: &str) -> Result<Target, ModelError> {
        Target::new(TargetSpec::from_json(text)?)
    }

    /// Checks a parsed target file. Every failure names the field and the reason.
    pub fn new(spec: TargetSpec) -> Result<Target, ModelError> {
        if spec.format != TARGET_FORMAT {
            return Err(ModelError::field(
                "format",
                format!("must be \"{TARGET_FORMAT}\", got \"{}\"", spec.format),
            ));
        }
        if spec.version != TARGET_VERSION {
            return Err(ModelError::field(
                "version",
                format!("this program reads version {TARGET_VERSION}, got {}", spec.version),
            ));
        }
        if spec.faces.is_empty() {
            return Err(ModelError::field("faces", "a target needs at least one face"));
        }
        let mut faces: Vec<Face> = Vec::with_capacity(spec.faces.len());
        for (i, f) in spec.faces.iter().enumerate() {
            let at = |field: &str| format!("faces[{i}].{field}");
            if let Some(j) = faces.iter().position(|g| g.id == f.id) {
                return Err(ModelError::field(
                    at("id"),
                    format!("duplicate face id {} (also faces[{j}])", f.id),
                ));
            }
            let pose = check_pose(&f.pose, &at("pose"))?;
            check_pattern(&f.pattern, &at("pattern"))?;
            if !f.margin.is_finite() || f.margin < 0.0 {
                return Err(ModelError::field(
                    at("margin"),
                    format!("must be zero or positive, got {}", f.margin),
                ));
            }
            let (mr, mc) = f.pattern.mark_grid();
            let mut marks = BTreeSet::new();
            for (k, &[r, c]) in f.marks.iter().enumerate() {
                if r >= mr || c >= mc {
                    return Err(ModelError::field(
                        format!("faces[{i}].marks[{k}]"),
                        format!("cell [{r}, {c}] is outside the {mr} x {mc} grid of mark cells"),
                    ));
                }
                if !marks.insert((r, c)) {
                    return Err(ModelError::field(
                        format!("faces[{i}].marks[{k}]"),
                        format!("cell [{r}, {c}] is marked twice"),
                    ));
                }
            }
            faces.push(Face { id: f.id, pose, pattern: f.pattern, margin: f.margin, marks });
        }
        check_codes(&faces)?;
        check_intersections(&faces)?;
        Ok(Target { name: spec.name.clone(), unit: spec.unit, faces, spec })
    }

    /// The target's name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// The unit of every length.
    pub fn unit(&self) -> Unit {
        self.unit
    }

    /// The faces, in file order.
    pub fn faces(&self) -> &[Face] {
        &self.faces
    }

    /// The face with an id.
    pub fn face(&self, id: u32) -> Option<&Face> {
        self.faces.iter().find(|f| f.id == id)
    }

    /// The file this target was checked from.
    pub fn spec(&self) -> &TargetSpec {
        &self.spec
    }

    /// The pattern kinds the target uses, sorted.
    pub fn pattern_kinds(&self) -> Vec<PatternKind> {
        let set: BTreeSet<PatternKind> = self.faces.iter().map(|f| f.pattern.kind()).collect();
        set.into_iter().collect()
    }

    /// Total number of features.
    pub fn feature_count(&self) -> usize {
        self.faces.iter().map(Face::feature_count).sum()
    }

    /// Every feature with its target-frame point, face by face in file order.
    pub fn features(&self) -> Vec<(FeatureId, Point3<f64>)> {
        self.faces
            .iter()
            .flat_map(|f| f.features_local().into_iter().map(move |(id, p)| (id, f.to_target(&p))))
            .collect()
    }

    /// The target-frame point of a feature, or `None` if no such feature exists.
    pub fn feature_point(&self, id: FeatureId) -> Option<Point3<f64>> {
        let f = self.face(id.face)?;
        f.feature_local(id.row, id.col, id.corner).map(|p| f.to_target(&p))
    }

    /// Whether all faces lie in one plane.
    pub fn is_planar(&self) -> bool {
        let f0 = &self.faces[0];
        let n = f0.normal();
        let o = f0.pose.translation;
        self.faces.iter().all(|f| {
            f.normal().cross(&n).norm() < 1e-9
                && (f.pose.translation - o).dot(&n).abs() < 1e-9 * (1.0 + o.norm())
        })
    }

    /// Axis-aligned bounding box of the faces in the target frame (min, max corners).
    pub fn bounds(&self) -> (Point3<f64>, Point3<f64>) {
        let mut lo = Point3::new(f64::INFINITY, f64::INFINITY, f64::INFINITY);
        let mut hi = Point3::new(f64::NEG_INFINITY, f64::NEG_INFINITY, f64::NEG_INFINITY);
        for f in &self.faces {
            for p in face_corners(f) {
                lo = lo.inf(&p);
                hi = hi.sup(&p);
            }
        }
        (lo, hi)
    }
}

fn check_pose(p: &FacePoseSpec, path: &str) -> Result<Pose, ModelError> {
    match *p {
        FacePoseSpec::AxisAngle { rotation, translation } => Ok(Pose::from_axis_angle(
            finite3(format!("{path}.rotation"), rotation)?,
            finite3(format!("{path}.translation"), translation)?,
        )),
        FacePoseSpec::Axes { origin, x_axis, y_axis } => {
            let o = finite3(format!("{path}.origin"), origin)?;
            let x = finite3(format!("{path}.x_axis"), x_axis)?;
            let y = finite3(format!("{path}.y_axis"), y_axis)?;
            for (name, v) in [("x_axis", &x), ("y_axis", &y)] {
                if (v.norm() - 1.0).abs() > 1e-6 {
                    return Err(ModelError::field(
                        format!("{path}.{name}"),
                        format!("axes must be orthonormal: length is {:.9}, not 1", v.norm()),
                    ));
                }
            }
            if x.dot(&y).abs() > 1e-6 {
                return Err(ModelError::field(
                    format!("{path}.y_axis"),
                    format!("axes must be orthonormal: x_axis . y_axis = {:.9}", x.dot(&y)),
                ));
            }
            // Re-orthonormalise the tolerated rounding so the rotation is exact.
            let xn = x.normalize();
            let yn = (y - xn * xn.dot(&y)).normalize();
            let zn = xn.cross(&yn);
            let r = Matrix3::from_columns(&[xn, yn, zn]);
            Ok(Pose::from_matrix(&r, o))
        }
    }
}

fn check_pattern(p: &PatternSpec, path: &str) -> Result<(), ModelError> {
    let count = |name: &str, v: u32, min: u32| {
        if v < min {
            Err(ModelError::field(
                format!("{path}.{name}"),
                format!("must be at least {min}, got {v}"),
            ))
        } else if v > 10_000 {
            Err(ModelError::field(
                format!("{path}.{name}"),
                format!("must be at most 10000, got {v}"),
            ))
        } else {
            Ok(())
        }
    };
    let (rows, columns) = match *p {
        PatternSpec::Checkerboard { rows, columns, .. }
        | PatternSpec::DotGrid { rows, columns, .. }
        | PatternSpec::SquareGrid { rows, columns, .. } => (rows as u64, columns as u64),
    };
    if rows * columns > MAX_GRID_CELLS {
        return Err(ModelError::field(
            format!("{path}.rows"),
            format!("{rows} x {columns} exceeds the limit of {MAX_GRID_CELLS} cells per face"),
        ));
    }
    match *p {
        PatternSpec::Checkerboard { rows, columns, cell } => {
            count("rows", rows, 2)?;
            count("columns", columns, 2)?;
            positive(format!("{path}.cell"), cell)?;
        }
        PatternSpec::DotGrid { rows, columns, pitch, diameter, .. } => {
            count("rows", rows, 2)?;
            count("columns", columns, 2)?;
            positive(format!("{path}.pitch"), pitch)?;
            positive(format!("{path}.diameter"), diameter)?;
            if diameter > 0.8 * pitch {
                return Err(ModelError::field(
                    format!("{path}.diameter"),
                    format!(
                        "must be at most 0.8 x pitch so dots and marks stay apart, got {diameter} for pitch {pitch}"
                    ),
                ));
            }
        }
        PatternSpec::SquareGrid { rows, columns, side, pitch } => {
            count("rows", rows, 1)?;
            count("columns", columns, 1)?;
            positive(format!("{path}.side"), side)?;
            positive(format!("{path}.pitch"), pitch)?;
            if side > 0.8 * pitch {
                return Err(ModelError::field(
                    format!("{path}.side"),
                    format!(
                        "must be at most 0.8 x pitch so the squares stay apart, got {side} for pitch {pitch}"
                    ),
                ));
            }
        }
    }
    Ok(())
}

/// Proves the face codes decide face and orientation: no face's marks are invariant under a
/// non-identity symmetry of its grid, and no two faces with the same pattern have marks that
/// one symmetry maps onto each other.
fn check_codes(faces: &[Face]) -> Result<(), ModelError> {
    let transformed = |f: &Face, k: usize| -> Option<BTreeSet<(u32, u32)>> {
        let (rows, cols) = f.pattern.mark_grid();
        if k >= 4 && rows != cols {
            return None;
        }
        Some(f.marks.iter().map(|&rc| apply_symmetry(k, rows, cols, rc)).collect())
    };
    for (i, f) in faces.iter().enumerate() {
        if f.marks.is_empty() {
            continue;
        }
        for k in 1..8 {
            if transformed(f, k).as_ref() == Some(&f.marks) {
                return Err(ModelError::field(
                    format!("faces[{i}].marks"),
                    "the face code looks the same after a rotation or mirroring of the face, \
                     so it cannot tell the face's orientation",
                ));
            }
        }
        for (j, g) in faces.iter().enumerate().take(i) {
            if g.pattern != f.pattern || g.marks.is_empty() {
                continue;
            }
            for k in 0..8 {
                if transformed(f, k).as_ref() == Some(&g.marks) {
                    return Err(ModelError::field(
                        format!("faces[{i}].marks"),
                        format!(
                            "the face code can be confused with the code of faces[{j}] (id {})",
                            g.id
                        ),
                    ));
                }
            }
        }
    }
    Ok(())
}

fn face_corners(f: &Face) -> [Point3<f64>; 4] {
    let (w, h) = f.size();
    [
        f.to_target(&Point2::new(0.0, 0.0)),
        f.to_target(&Point2::new(w, 0.0)),
        f.to_target(&Point2::new(w, h)),
        f.to_target(&Point2::new(0.0, h)),
    ]
}

/// Faces may touch along edges (a folded or box-corner target) but must not cross or overlap.
fn check_intersections(faces: &[Face]) -> Result<(), ModelError> {
    for i in 0..faces.len() {
        for j in 0..i {
            if let Some(reason) = faces_cross(&faces[i], &faces[j]) {
                return Err(ModelError::field(
                    format!("faces[{i}].pose"),
                    format!("face {} intersects face {} ({reason})", faces[i].id, faces[j].id),
                ));
            }
        }
    }
    Ok(())
}

/// Distance of a face-frame point inside the face rectangle from its border (negative outside).
fn inset(f: &Face, p: &Point2<f64>) -> f64 {
    let (w, h) = f.size();
    p.x.min(w - p.x).min(p.y).min(h - p.y)
}

fn to_local(f: &Face, p: &Point3<f64>) -> Point3<f64> {
    f.pose.inverse().transform(p)
}

fn faces_cross(a: &Face, b: &Face) -> Option<String> {
    let scale = {
        let (wa, ha) = a.size();
        let (wb, hb) = b.size();
        wa.max(ha).max(wb).max(hb)
    };
    let eps = 1e-6 * scale;
    let na = a.normal();
    let nb = b.normal();
    let ob = b.pose.translation;
    if na.cross(&nb).norm() < 1e-9 {
        // Parallel planes: they overlap only when coplanar and their rectangles share area.
        if (a.pose.translation - ob).dot(&nb).abs() > eps {
            return None;
        }
        // Coplanar: sample b's rectangle on a fine grid and test interior points inside a.
        let (wb, hb) = b.size();
        let n = 64;
        for iy in 0..=n {
            for ix in 0..=n {
                let q = Point2::new(wb * ix as f64 / n as f64, hb * iy as f64 / n as f64);
                if inset(b, &q) <= eps {
                    continue;
                }
                let la = to_local(a, &b.to_target(&q));
                if inset(a, &Point2::new(la.x, la.y)) > eps {
                    return Some("the faces overlap in one plane".into());
                }
            }
        }
        return None;
    }
    // Segment of a's rectangle on b's plane, and of b's rectangle on a's plane; they lie on the
    // same line. Faces cross when the two segments share a point interior to both rectangles.
    let seg_a = clip_to_plane(a, b)?;
    let seg_b = clip_to_plane(b, a)?;
    let dir = na.cross(&nb).normalize();
    let t = |p: &Point3<f64>| p.coords.dot(&dir);
    let (a0, a1) = minmax(t(&seg_a.0), t(&seg_a.1));
    let (b0, b1) = minmax(t(&seg_b.0), t(&seg_b.1));
    let lo = a0.max(b0);
    let hi = a1.min(b1);
    if hi - lo <= eps {
        return None;
    }
    // Test a few points of the shared stretch against both interiors.
    let base = seg_a.0 - dir * t(&seg_a.0);
    for k in 1..16 {
        let s = lo + (hi - lo) * k as f64 / 16.0;
        let p = base + dir * s;
        let pa = to_local(a, &p);
        let pb = to_local(b, &p);
        if inset(a, &Point2::new(pa.x, pa.y)) > eps && inset(b, &Point2::new(pb.x, pb.y)) > eps {
            return Some("they cross along a line".into());
        }
    }
    None
}

fn minmax(a: f64, b: f64) -> (f64, f64) {
    if a <= b { (a, b) } else { (b, a) }
}

/// The part of face `a`'s rectangle that lies on the plane of face `b`, as a segment.
fn clip_to_plane(a: &Face, b: &Face) -> Option<(Point3<f64>, Point3<f64>)> {
    let nb = b.normal();
    let ob = b.pose.translation;
    let c = face_corners(a);
    let d: Vec<f64> = c.iter().map(|p| (p.coords - ob).dot(&nb)).collect();
    let scale = a.size().0.max(a.size().1);
    let eps = 1e-9 * scale;
    let mut pts: Vec<Point3<f64>> = Vec::new();
    for k in 0..4 {
        let (p, q) = (c[k], c[(k + 1) % 4]);
        let (dp, dq) = (d[k], d[(k + 1) % 4]);
        if dp.abs() <= eps {
            pts.push(p);
        }
        if (dp > eps && dq < -eps) || (dp < -eps && dq > eps) {
            let s = dp / (dp - dq);
            pts.push(p + (q - p) * s);
        }
    }
    if pts.len() < 2 {
        return None;
    }
    // The extreme pair along the line.
    let mut best = (pts[0], pts[1]);
    let mut best_d = -1.0;
    for i in 0..pts.len() {
        for j in 0..i {
            let dd = (pts[i] - pts[j]).norm();
            if dd > best_d {
                best_d = dd;
                best = (pts[i], pts[j]);
            }
        }
    }
    Some(best)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn checker_face(id: u32, pose: &str, marks: &str) -> String {
        format!(
            r#"{{"id": {id}, "pose": {pose}, "pattern": {{"kind": "checkerboard", "rows": 6, "columns": 6, "cell": 10}}, "margin": 5, "marks": {marks}}}"#
        )
    }

    fn corner_target() -> String {
        // Three faces of a box corner, each 70 x 70 with the margin.
        let f1 = checker_face(
            1,
            r#"{"origin": [0,0,0], "x_axis": [1,0,0], "y_axis": [0,1,0]}"#,
            "[[0,1],[2,3],[4,4]]",
        );
        let f2 = checker_face(
            2,
            r#"{"origin": [0,0,0], "x_axis": [0,1,0], "y_axis": [0,0,1]}"#,
            "[[1,0],[3,4],[5,2]]",
        );
        let f3 = checker_face(
            3,
            r#"{"origin": [0,0,0], "x_axis": [0,0,1], "y_axis": [1,0,0]}"#,
            "[[0,4],[1,1],[3,3],[5,5]]",
        );
        format!(
            r#"{{"format": "facetcal-target", "version": 1, "name": "t", "unit": "mm", "faces": [{f1}, {f2}, {f3}]}}"#
        )
    }

    #[test]
    fn a_box_corner_is_accepted() {
        let t = Target::from_json(&corner_target()).unwrap();
        assert_eq!(t.faces().len(), 3);
        assert_eq!(t.feature_count(), 3 * 25);
        assert!(!t.is_planar());
        // Inner corner (0, 0) of face 2 sits at y = 5 + 10, z = 15 on the plane x = 0.
        let p = t.feature_point(FeatureId { face: 2, row: 0, col: 0, corner: 0 }).unwrap();
        assert!((p - Point3::new(0.0, 15.0, 15.0)).norm() < 1e-12);
    }

    fn error_of(text: &str) -> String {
        Target::from_json(text).unwrap_err().to_string()
    }

    #[test]
    fn bad_files_name_the_field() {
        let good = corner_target();
        let cases = [
            (good.replace("\"rows\": 6", "\"rows\": 0"), "faces[0].pattern.rows"),
            (good.replace("\"cell\": 10", "\"cell\": -1"), "faces[0].pattern.cell"),
            (good.replace("\"version\": 1", "\"version\": 7"), "version"),
            (good.replace("\"unit\": \"mm\"", "\"unit\": \"furlong\""), "unit"),
            (good.replace("\"id\": 2", "\"id\": 1"), "faces[1].id"),
            (good.replace("[[0,1],[2,3],[4,4]]", "[[0,1],[9,3]]"), "faces[0].marks[1]"),
            (good.replace("\"x_axis\": [1,0,0]", "\"x_axis\": [1,0.2,0]"), "faces[0].pose.x_axis"),
        ];
        for (text, field) in cases {
            let e = error_of(&text);
            assert!(e.starts_with(field), "expected an error at {field}, got: {e}");
        }
    }

    #[test]
    fn crossing_and_overlapping_faces_are_rejected() {
        // Face 2 moved so that it cuts through the middle of face 1.
        let good = corner_target();
        let bad = good.replacen(
            r#""origin": [0,0,0], "x_axis": [0,1,0]"#,
            r#""origin": [30,0,-20], "x_axis": [0,1,0]"#,
            1,
        );
        assert!(error_of(&bad).contains("intersects"), "{}", error_of(&bad));
        let f1 = checker_face(1, r#"{"rotation": [0,0,0], "translation": [0,0,0]}"#, "[]");
        let f2 = checker_face(2, r#"{"rotation": [0,0,0], "translation": [20,10,0]}"#, "[]");
        let text = format!(
            r#"{{"format": "facetcal-target", "version": 1, "name": "t", "unit": "mm", "faces": [{f1}, {f2}]}}"#
        );
        assert!(error_of(&text).contains("overlap"));
    }

    #[test]
    fn symmetric_or_confusable_codes_are_rejected() {
        let good = corner_target();
        // [[0,0],[5,5]] is invariant under the 180 degree rotation of a 6 x 6 grid.
        let sym = good.replace("[[0,1],[2,3],[4,4]]", "[[0,0],[5,5]]");
        assert!(error_of(&sym).contains("orientation"));
        // Face 2's code rotated by 180 degrees is face 1's code.
        let conf = good.replace("[[1,0],[3,4],[5,2]]", "[[5,4],[3,2],[1,1]]");
        assert!(error_of(&conf).contains("confused"), "{}", error_of(&conf));
    }

    #[test]
    fn square_corners_and_dots_sit_where_documented() {
        let text = r#"{"format": "facetcal-target", "version": 1, "name": "s", "unit": "in", "faces": [
            {"id": 4, "pose": {"rotation": [0,0,0], "translation": [0,0,0]},
             "pattern": {"kind": "square-grid", "rows": 2, "columns": 3, "side": 0.5, "pitch": 1.0}},
            {"id": 5, "pose": {"rotation": [0,0,0], "translation": [10,0,0]},
             "pattern": {"kind": "dot-grid", "rows": 3, "columns": 3, "pitch": 2.0, "diameter": 1.0, "layout": "staggered"}}]}"#;
        let t = Target::from_json(text).unwrap();
        let sq = t.face(4).unwrap();
        assert_eq!(sq.feature_count(), 24);
        assert_eq!(sq.feature_local(1, 2, 2), Some(Point2::new(2.75, 1.75)));
        let dots = t.face(5).unwrap();
        assert_eq!(dots.feature_local(1, 0, 0), Some(Point2::new(2.0, 3.0)));
        assert_eq!(dots.size(), (7.0, 6.0));
        assert!(t.is_planar());
    }
}
