//! Placing a face candidate on the target: which face, which orientation, which offset, decided
//! by the face codes alone, with a rule that makes a wrong identity require two detection
//! errors in one candidate.
//!
//! A placement maps candidate lattice coordinates `(i, j)` to face grid coordinates
//! `(col, row) = R_k (i, j) + (ox, oy)`, with `R_k` the rotation by `k` quarter turns. Mirrors
//! are never enumerated: candidate lattices are right-handed in the image, and a front-facing
//! printed face keeps its handedness, so a mirrored placement is physically impossible.
//!
//! Every placement is scored by its conflicts with what was seen:
//! - a candidate node that the placement sends outside the face grid;
//! - a mark seen at a candidate cell that the placement sends outside the face's mark grid, to
//!   an unmarked cell, or (checkerboards) to a cell whose colour contradicts the mark's ink;
//! - a face mark whose cell the placement sends to a *visible* candidate cell where no mark was
//!   seen. A cell is visible when every one of its bounding features that exists on the face
//!   (at least two) is a node of the candidate and its centre lies inside the image.
//!
//! **Decision rule.** Let `P` be the placement with the fewest conflicts `c`, over every face of
//! the candidate's pattern kind. Accept `P` if and only if `c <= tolerated_conflicts` (default
//! 1), no other placement has `c` conflicts, `P` explains at least `min_marks` seen marks
//! (default 1), and every other placement has at least `c + conflict_margin` conflicts (default
//! margin 2). If the detections of a candidate hold `e` errors (missed or invented marks, stray
//! nodes), the true placement has at most `e` conflicts, and a wrong `P` is accepted only if
//! `c + 2 <= e`: a single error can cost an identification but never produce a wrong one. A target of one face without a code is the exception: a candidate that covers the
//! whole grid is accepted in the rotation whose column axis points most nearly along image +x
//! (a consistent choice among the grid's symmetric labelings, never a mirrored one).

use std::collections::{BTreeMap, BTreeSet};

use facetcal_model::{DotLayout, Face, Ink, PatternSpec};
use nalgebra::{Point2, Vector2};

use crate::lattice::{Cell, Cells, Grid as Lattice};
use crate::output::Rejection;

/// A mark seen in a candidate: its cell in candidate coordinates (for checkers and dot grids
/// the cell whose centre is `(a + 0.5, b + 0.5)`, for squares the node `(a, b)`) and its ink.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub(crate) struct SeenMark {
    pub cell: Cell,
    pub light: bool,
}

/// A chosen placement.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Placement {
    /// Index of the face in the target's face list.
    pub face: usize,
    /// Quarter turns `k` of `R_k`.
    pub turns: u8,
    /// Offset added after the rotation.
    pub offset: (i32, i32),
    /// Seen marks the placement explains.
    pub matched: usize,
    /// Its conflicts (at most the tolerated number).
    pub conflicts: usize,
    /// Conflicts of the best other placement (`None` when there is no other).
    pub runner_up: Option<usize>,
}

/// `R_k (i, j)`.
pub(crate) fn rotate(k: u8, (i, j): (i32, i32)) -> (i32, i32) {
    match k % 4 {
        0 => (i, j),
        1 => (-j, i),
        2 => (-i, -j),
        _ => (j, -i),
    }
}

/// `R_k^-1 (x, y)`.
pub(crate) fn unrotate(k: u8, p: (i32, i32)) -> (i32, i32) {
    rotate((4 - k % 4) % 4, p)
}

/// What the placement search needs to know about a candidate.
pub(crate) struct CandidateView<'a> {
    /// The candidate's cells.
    pub cells: &'a Lattice,
    /// Number of cells.
    pub len: usize,
    /// Marks seen in it.
    pub marks: &'a BTreeSet<SeenMark>,
    /// Mark cells whose image was probed but read neither as marked nor as unmarked: a face
    /// mark there is no conflict.
    pub unsure: &'a BTreeSet<Cell>,
    /// Whether the centre of a mark cell (candidate coordinates, as in [`SeenMark::cell`]) lies
    /// inside the image.
    pub in_image: &'a dyn Fn(Cell) -> bool,
    /// Mean image directions of the candidate's lattice axes.
    pub axes: [Vector2<f64>; 2],
}

/// Mark-grid geometry of a face pattern in doubled coordinates, so that half-integer cell
/// centres are integers: feature `(col, row)` is at `(2 col, 2 row)`.
struct Grid {
    cols: i32,
    rows: i32,
    mark_cols: i32,
    mark_rows: i32,
    /// Doubled feature coordinates of mark cell (0, 0)'s centre.
    mark_origin: (i32, i32),
    /// Mark cells sit on nodes (squares) rather than between them.
    on_nodes: bool,
    checker: bool,
}

fn grid_of(face: &Face) -> Option<Grid> {
    let (rows, cols) = face.feature_grid();
    let (mr, mc) = face.pattern().mark_grid();
    let (rows, cols, mark_rows, mark_cols) = (rows as i32, cols as i32, mr as i32, mc as i32);
    match face.pattern() {
        // Cell (r, c) centre at corner coordinates (c - 0.5, r - 0.5).
        PatternSpec::Checkerboard { .. } => Some(Grid {
            cols,
            rows,
            mark_cols,
            mark_rows,
            mark_origin: (-1, -1),
            on_nodes: false,
            checker: true,
        }),
        // Gap (r, c) centre at dot coordinates (c + 0.5, r + 0.5).
        PatternSpec::DotGrid { layout: DotLayout::Square, .. } => Some(Grid {
            cols,
            rows,
            mark_cols,
            mark_rows,
            mark_origin: (1, 1),
            on_nodes: false,
            checker: false,
        }),
        PatternSpec::DotGrid { layout: DotLayout::Staggered, .. } => None,
        PatternSpec::SquareGrid { .. } => Some(Grid {
            cols,
            rows,
            mark_cols,
            mark_rows,
            mark_origin: (0, 0),
            on_nodes: true,
            checker: false,
        }),
    }
}

impl Grid {
    /// Doubled candidate coordinates of a seen mark cell.
    fn seen_doubled(&self, c: Cell) -> (i32, i32) {
        if self.on_nodes { (2 * c.0, 2 * c.1) } else { (2 * c.0 + 1, 2 * c.1 + 1) }
    }

    /// Mark cell (col, row) from doubled face coordinates, if it is a cell centre.
    fn mark_cell(&self, d: (i32, i32)) -> Option<(i32, i32)> {
        let (x, y) = (d.0 - self.mark_origin.0, d.1 - self.mark_origin.1);
        if x % 2 != 0 || y % 2 != 0 {
            return None;
        }
        Some((x / 2, y / 2))
    }

    /// The features bounding mark cell (col, row) that exist on the face, in face coordinates.
    fn bounding(&self, (c, r): (i32, i32)) -> Vec<(i32, i32)> {
        if self.on_nodes {
            return vec![(c, r)];
        }
        let x0 = (self.mark_origin.0 - 1) / 2 + c;
        let y0 = (self.mark_origin.1 - 1) / 2 + r;
        [(x0, y0), (x0 + 1, y0), (x0, y0 + 1), (x0 + 1, y0 + 1)]
            .into_iter()
            .filter(|&(x, y)| x >= 0 && y >= 0 && x < self.cols && y < self.rows)
            .collect()
    }
}

/// The conflicts and matched marks of one placement.
fn score(
    face: &Face,
    g: &Grid,
    k: u8,
    off: (i32, i32),
    view: &CandidateView<'_>,
    visible_cache: &mut BTreeMap<Cell, bool>,
) -> (usize, usize) {
    let marks = face.marks();
    let mut conflicts = 0;
    let mut matched = 0;
    let mut seen_face_cells = BTreeSet::new();
    for m in view.marks {
        let d = rotate(k, g.seen_doubled(m.cell));
        let fc = g.mark_cell((d.0 + 2 * off.0, d.1 + 2 * off.1));
        match fc {
            Some((c, r)) if c >= 0 && r >= 0 && c < g.mark_cols && r < g.mark_rows => {
                let (cu, ru) = (c as u32, r as u32);
                let ink_ok = !g.checker || ((face.mark_ink(ru, cu) == Ink::Light) == m.light);
                if marks.contains(&(ru, cu)) && ink_ok {
                    matched += 1;
                    seen_face_cells.insert((ru, cu));
                } else {
                    conflicts += 1;
                }
            }
            _ => conflicts += 1,
        }
    }
    for &(r, c) in marks {
        if seen_face_cells.contains(&(r, c)) {
            continue;
        }
        let bounding = g.bounding((c as i32, r as i32));
        if bounding.len() < 2 && !g.on_nodes {
            continue;
        }
        let all_seen = bounding
            .iter()
            .all(|&(x, y)| view.cells.at(unrotate(k, (x - off.0, y - off.1))).is_some());
        if !all_seen {
            continue;
        }
        // The mark cell in candidate coordinates.
        let dd = (
            2 * c as i32 + g.mark_origin.0 - 2 * off.0,
            2 * r as i32 + g.mark_origin.1 - 2 * off.1,
        );
        let cd = unrotate(k, dd);
        let cell = if g.on_nodes { (cd.0 / 2, cd.1 / 2) } else { ((cd.0 - 1) / 2, (cd.1 - 1) / 2) };
        let visible = *visible_cache.entry(cell).or_insert_with(|| (view.in_image)(cell));
        if visible && !view.unsure.contains(&cell) && !view.marks.iter().any(|m| m.cell == cell) {
            conflicts += 1;
        }
    }
    (conflicts, matched)
}

/// Finds the one placement of a candidate that the decision rule accepts, or the reason there
/// is none. `faces` are the target's faces as `(index in the target, face)`, all of the
/// candidate's pattern kind.
pub(crate) fn place(
    faces: &[(usize, &Face)],
    view: &CandidateView<'_>,
    single_codeless: bool,
    rule: &Rule,
) -> Result<Placement, Rejection> {
    let (min_marks, margin, tolerated) = (rule.min_marks, rule.margin, rule.tolerated);
    // Placements with this many conflicts can neither be accepted nor block another.
    let hopeless = tolerated + margin;
    let reach = hopeless as i32 - 1;
    let (mut imin, mut imax, mut jmin, mut jmax) = (i32::MAX, i32::MIN, i32::MAX, i32::MIN);
    for ((i, j), _) in view.cells.occupied() {
        imin = imin.min(i);
        imax = imax.max(i);
        jmin = jmin.min(j);
        jmax = jmax.max(j);
    }
    let mut scored: Vec<Scored> = Vec::new();
    let mut cache = BTreeMap::new();
    for &(fi, face) in faces {
        let Some(g) = grid_of(face) else { continue };
        for k in 0..4u8 {
            // The rotated bounding box.
            let corners =
                [(imin, jmin), (imax, jmin), (imin, jmax), (imax, jmax)].map(|p| rotate(k, p));
            let xlo = corners.iter().map(|p| p.0).min().unwrap_or(0);
            let xhi = corners.iter().map(|p| p.0).max().unwrap_or(0);
            let ylo = corners.iter().map(|p| p.1).min().unwrap_or(0);
            let yhi = corners.iter().map(|p| p.1).max().unwrap_or(0);
            let (w, h) = (xhi - xlo + 1, yhi - ylo + 1);
            // One stray node (clutter, or a feature of a neighbouring face) may stretch the
            // lattice by one row or column beyond the face: such placements are enumerated too,
            // each node outside the grid counting as a conflict, so that the stray node makes
            // the true placement a near miss instead of removing it from the comparison.
            if w > g.cols + reach || h > g.rows + reach {
                continue;
            }
            let full = w == g.cols && h == g.rows;
            let rotated: Vec<(i32, i32)> =
                view.cells.occupied().map(|(c, _)| rotate(k, c)).collect();
            for oy in (-ylo - reach)..=(g.rows - 1 - yhi + reach) {
                for ox in (-xlo - reach)..=(g.cols - 1 - xhi + reach) {
                    let outside = rotated
                        .iter()
                        .filter(|&&(x, y)| {
                            let (x, y) = (x + ox, y + oy);
                            x < 0 || y < 0 || x >= g.cols || y >= g.rows
                        })
                        .count();
                    if outside >= hopeless {
                        continue;
                    }
                    let (conflicts, matched) = score(face, &g, k, (ox, oy), view, &mut cache);
                    let conflicts = conflicts + outside;
                    scored.push(Scored {
                        conflicts,
                        matched,
                        face: fi,
                        turns: k,
                        offset: (ox, oy),
                        full: full && outside == 0,
                    });
                }
            }
        }
    }
    let nodes = view.len;
    if scored.is_empty() {
        return Err(Rejection::NoFit { nodes, best_conflicts: None });
    }
    // Stable sort: ties keep the enumeration order, so the result never depends on anything else.
    scored.sort_by(|a, b| a.conflicts.cmp(&b.conflicts).then(b.matched.cmp(&a.matched)));
    let zero: Vec<&Scored> = scored.iter().filter(|s| s.conflicts == 0).collect();
    if single_codeless && !zero.is_empty() && zero.iter().all(|s| s.full) {
        // The image direction of the face's column axis under turn k is the candidate direction
        // R_k^-1 (1, 0); pick the one most nearly along image +x (the first on a tie).
        let mut best: Option<(f64, &Scored)> = None;
        for s in &zero {
            let d = unrotate(s.turns, (1, 0));
            let v = view.axes[0] * d.0 as f64 + view.axes[1] * d.1 as f64;
            let n = v.norm();
            let cos = if n > 0.0 { v.x / n } else { -2.0 };
            if best.is_none_or(|b| cos > b.0) {
                best = Some((cos, s));
            }
        }
        if let Some((_, s)) = best {
            return Ok(Placement {
                face: s.face,
                turns: s.turns,
                offset: s.offset,
                matched: 0,
                conflicts: 0,
                runner_up: None,
            });
        }
    }
    let best = &scored[0];
    if best.conflicts > tolerated {
        return Err(Rejection::NoFit { nodes, best_conflicts: Some(best.conflicts) });
    }
    let ties = scored.iter().filter(|s| s.conflicts == best.conflicts).count();
    if ties > 1 {
        return Err(Rejection::Ambiguous { nodes, placements: ties });
    }
    let runner_up = scored.get(1).map(|s| s.conflicts);
    if best.matched < min_marks {
        return Err(Rejection::TooFewMarks { nodes, seen: best.matched, need: min_marks });
    }
    if let Some(r) = runner_up {
        if r < best.conflicts + margin {
            return Err(Rejection::TooClose {
                nodes,
                runner_up_conflicts: r,
                need: best.conflicts + margin,
            });
        }
    }
    Ok(Placement {
        face: best.face,
        turns: best.turns,
        offset: best.offset,
        matched: best.matched,
        conflicts: best.conflicts,
        runner_up,
    })
}

/// The decision rule's numbers (see the module documentation).
#[derive(Clone, Copy, Debug)]
pub(crate) struct Rule {
    /// Seen marks the accepted placement must explain.
    pub min_marks: usize,
    /// Conflicts the accepted placement may have.
    pub tolerated: usize,
    /// How many more conflicts every other placement must have.
    pub margin: usize,
}

/// One enumerated placement and its score.
struct Scored {
    conflicts: usize,
    matched: usize,
    face: usize,
    turns: u8,
    offset: (i32, i32),
    /// The candidate spans the whole face grid.
    full: bool,
}

/// Image point of a candidate cell centre for the visibility test, from a fitted map.
pub(crate) fn inside(p: Option<Point2<f64>>, width: u32, height: u32, inset: f64) -> bool {
    p.is_some_and(|p| {
        p.x >= -0.5 + inset
            && p.y >= -0.5 + inset
            && p.x <= width as f64 - 0.5 - inset
            && p.y <= height as f64 - 0.5 - inset
    })
}
