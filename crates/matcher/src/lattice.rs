//! The lattice topology of one pattern kind's detections: seeds, outward growth with local fits,
//! and the leave-one-out residual test that removes nodes which do not belong.
//!
//! A node is one lattice point: a checker corner, a dot, or the centre of a square. A face
//! candidate is a map from integer lattice coordinates `(i, j)` to nodes, grown from a seed
//! whose two axes come from the detections themselves (the edge directions of a checker corner,
//! the sides of a square, or for dots the neighbour vectors after undoing the dot's ellipse,
//! which a circle's image fixes up to a rotation). Lattice coordinates are always right-handed
//! in the image (`e1 x e2 > 0` with y down), so that only proper rotations can map them onto a
//! front-facing face.
//!
//! Growth predicts each next node from a local fit of the nodes within two lattice steps
//! (the window's quadratic where its cells determine it, see `window`; else a homography where
//! the neighbourhood spans three rows and three columns, an affine map otherwise), accepts the
//! nearest detection inside a gate proportional to the local spacing, and repeats outward, so
//! that strong lens distortion, which is smooth but far from projective over a whole face, does
//! not stop it.

use std::collections::BTreeMap;
use std::num::NonZero;

use kiddo::{ImmutableKdTree, SquaredEuclidean};

use nalgebra::{Matrix2, Point2, Vector2};

use crate::MatchOptions;
use crate::fit::{PlaneMap, fit_affine, fit_homography};
use crate::window;

/// Integer lattice coordinates of a face candidate.
pub(crate) type Cell = (i32, i32);

/// One lattice point.
#[derive(Clone, Debug)]
pub(crate) struct Node {
    /// Image position.
    pub pos: Point2<f64>,
    /// Two lattice directions known from the detection itself (checker edges, square sides).
    pub axes: Option<[Vector2<f64>; 2]>,
    /// A map that undoes the local affine distortion (from a dot's ellipse), or identity.
    pub rectify: Matrix2<f64>,
    /// Two sizes that vary slowly across a face: a dot's semi-axes, a square's mean sides.
    pub size: Option<[f64; 2]>,
    /// For checker corners, the directions of `axes` as angles modulo pi, whose order carries
    /// the checker parity: the sector from `axes[0]` to `axes[1]` by increasing angle is dark.
    /// Lattice neighbours along an axis then list the same two lines in swapped order, diagonal
    /// neighbours in the same order. `None` for nodes without parity.
    pub parity: Option<[f64; 2]>,
}

/// The direction of a line as an angle in [0, pi).
pub(crate) fn line_direction(v: &Vector2<f64>) -> f64 {
    v.y.atan2(v.x).rem_euclid(std::f64::consts::PI)
}

/// Angle between two lines given by their directions modulo pi, in [0, pi/2].
fn line_angle(a: f64, b: f64) -> f64 {
    let d = (a - b).abs();
    d.min(std::f64::consts::PI - d)
}

/// Whether two checker corners have opposite parity (their edge lines in swapped order), or
/// `None` when either carries no parity.
pub(crate) fn parity_flipped(a: &Node, b: &Node) -> Option<bool> {
    let ([a0, a1], [b0, b1]) = (a.parity?, b.parity?);
    let same = line_angle(a0, b0) + line_angle(a1, b1);
    let swapped = line_angle(a0, b1) + line_angle(a1, b0);
    Some(swapped < same)
}

/// A grown face candidate.
#[derive(Clone, Debug)]
pub(crate) struct Component {
    /// Node index of each lattice cell.
    pub cells: Grid,
    /// Number of cells.
    pub len: usize,
    /// The residual test's figure for every cell, when the test settled on these cells.
    pub residual: Option<Dense<f64>>,
}

/// Read access to a lattice's cells, so that the hot fits can run on a dense [`Grid`] while
/// callers holding a `BTreeMap` keep theirs.
pub(crate) trait Cells {
    /// The node at `c`, if any.
    fn at(&self, c: Cell) -> Option<usize>;

    /// Calls `f(di, dj, node)` for every cell within Chebyshev distance `radius` of `at` but
    /// `at` itself, in increasing `(di, dj)` order.
    fn around<F: FnMut(i32, i32, usize)>(&self, at: Cell, radius: i32, mut f: F) {
        for di in -radius..=radius {
            for dj in -radius..=radius {
                if (di, dj) != (0, 0) {
                    if let Some(k) = self.at((at.0 + di, at.1 + dj)) {
                        f(di, dj, k);
                    }
                }
            }
        }
    }
}

impl Cells for BTreeMap<Cell, usize> {
    fn at(&self, c: Cell) -> Option<usize> {
        self.get(&c).copied()
    }
}

/// A dense array over a rectangle of lattice cells that widens as cells are set: a lookup is
/// an index computation instead of a tree search, which dominated growth and verification.
#[derive(Clone, Debug)]
pub(crate) struct Dense<T> {
    lo: Cell,
    w: i32,
    h: i32,
    fill: T,
    v: Vec<T>,
}

impl<T: Copy> Dense<T> {
    pub fn new(fill: T) -> Dense<T> {
        Dense { lo: (0, 0), w: 0, h: 0, fill, v: Vec::new() }
    }

    fn index(&self, c: Cell) -> Option<usize> {
        let (i, j) = (c.0.checked_sub(self.lo.0)?, c.1.checked_sub(self.lo.1)?);
        (i >= 0 && j >= 0 && i < self.w && j < self.h).then(|| (i * self.h + j) as usize)
    }

    pub fn get(&self, c: Cell) -> T {
        self.index(c).map_or(self.fill, |k| self.v[k])
    }

    pub fn set(&mut self, c: Cell, t: T) {
        if self.index(c).is_none() {
            self.widen(c);
        }
        if let Some(k) = self.index(c) {
            self.v[k] = t;
        }
    }

    /// A rectangle from `lo` to `hi` (inclusive) already allocated, for a lattice whose extent
    /// is known.
    pub fn spanning(lo: Cell, hi: Cell, fill: T) -> Dense<T> {
        let (w, h) = ((hi.0 - lo.0 + 1).max(0), (hi.1 - lo.1 + 1).max(0));
        Dense { lo, w, h, fill, v: vec![fill; (w * h) as usize] }
    }

    /// Widens the rectangle to hold `c`, with a margin of half its size (at least 8) so that
    /// growth reallocates a logarithmic number of times.
    fn widen(&mut self, c: Cell) {
        let margin = 8.max(self.w.max(self.h) / 2);
        let (lo, hi) = if self.v.is_empty() {
            ((c.0 - margin, c.1 - margin), (c.0 + margin, c.1 + margin))
        } else {
            let hi = (self.lo.0 + self.w - 1, self.lo.1 + self.h - 1);
            let lo0 = if c.0 < self.lo.0 { c.0 - margin } else { self.lo.0 };
            let lo1 = if c.1 < self.lo.1 { c.1 - margin } else { self.lo.1 };
            let hi0 = if c.0 > hi.0 { c.0 + margin } else { hi.0 };
            let hi1 = if c.1 > hi.1 { c.1 + margin } else { hi.1 };
            ((lo0, lo1), (hi0, hi1))
        };
        let mut next = Dense::spanning(lo, hi, self.fill);
        // Each old column `i` is one contiguous run in the new array.
        let (h, dj) = (self.h as usize, (self.lo.1 - lo.1) as usize);
        for i in 0..self.w as usize {
            let at = (i + (self.lo.0 - lo.0) as usize) * next.h as usize + dj;
            next.v[at..at + h].copy_from_slice(&self.v[i * h..(i + 1) * h]);
        }
        *self = next;
    }
}

/// The cells of a lattice as a dense array of node indices.
pub(crate) type Grid = Dense<Option<usize>>;

impl Grid {
    #[cfg(test)]
    pub fn from_map(cells: &BTreeMap<Cell, usize>) -> Grid {
        let mut g = Grid::new(None);
        for (&c, &k) in cells {
            g.set(c, Some(k));
        }
        g
    }

    /// Occupied cells in increasing `(i, j)` order, the order of a `BTreeMap<Cell, _>`.
    pub fn occupied(&self) -> impl Iterator<Item = (Cell, usize)> + '_ {
        let h = self.h.max(1);
        self.v.iter().enumerate().filter_map(move |(k, v)| {
            let k = k as i32;
            v.map(|n| ((self.lo.0 + k / h, self.lo.1 + k % h), n))
        })
    }

    #[cfg(test)]
    pub fn to_map(&self) -> BTreeMap<Cell, usize> {
        self.occupied().collect()
    }
}

impl Cells for Grid {
    fn at(&self, c: Cell) -> Option<usize> {
        self.get(c)
    }

    // Walks the array rows directly; the fits' neighbour gathering is the hottest lookup.
    fn around<F: FnMut(i32, i32, usize)>(&self, at: Cell, radius: i32, mut f: F) {
        let (w, h, r) = (self.w as i64, self.h as i64, radius as i64);
        let (i0, j0) = (at.0 as i64 - self.lo.0 as i64, at.1 as i64 - self.lo.1 as i64);
        let (dj_lo, dj_hi) = ((-r).max(-j0), r.min(h - 1 - j0));
        for di in (-r).max(-i0)..=r.min(w - 1 - i0) {
            let row = (i0 + di) * h + j0;
            for dj in dj_lo..=dj_hi {
                if (di, dj) != (0, 0) {
                    if let Some(&Some(k)) = self.v.get((row + dj) as usize) {
                        f(di as i32, dj as i32, k);
                    }
                }
            }
        }
    }
}

/// The k-d tree (kiddo) over node positions for exact nearest-neighbour queries, with ties
/// broken by index so results never depend on the tree's internal order: the tree proposes,
/// then every node at the deciding distance is collected and the list is ordered by
/// (distance, index), with distances computed here so that they are the same whatever path the
/// tree took.
pub(crate) struct NodeIndex {
    pos: Vec<Point2<f64>>,
    tree: Option<ImmutableKdTree<f64, 2>>,
}

impl NodeIndex {
    pub fn new(pos: &[Point2<f64>]) -> NodeIndex {
        let pts: Vec<[f64; 2]> = pos.iter().map(|p| [p.x, p.y]).collect();
        let tree = (!pts.is_empty()).then(|| ImmutableKdTree::new_from_slice(&pts));
        NodeIndex { pos: pos.to_vec(), tree }
    }

    /// Up to `n` nearest nodes as `(distance, index)`, nearest first.
    pub fn nearest(&self, p: &Point2<f64>, n: usize) -> Vec<(f64, usize)> {
        self.nearest_within(p, n, f64::INFINITY)
    }

    /// Every node no farther than `limit`, as `(distance, index)`, nearest first (ties by
    /// index): for a small limit, cheaper than a nearest-`n` search.
    pub fn within(&self, p: &Point2<f64>, limit: f64) -> Vec<(f64, usize)> {
        let Some(tree) = &self.tree else { return Vec::new() };
        if !(p.x.is_finite() && p.y.is_finite() && limit.is_finite() && limit >= 0.0) {
            return Vec::new();
        }
        let found =
            tree.within_unsorted_exclusive::<SquaredEuclidean>(&[p.x, p.y], limit * limit, true);
        self.ranked(found.into_iter().map(|nn| nn.item as usize), p, limit)
    }

    /// The found nodes no farther than `limit` by distances computed here, as `(distance,
    /// index)` ordered by (distance, index): the same whatever path the tree took.
    fn ranked(
        &self,
        found: impl Iterator<Item = usize>,
        p: &Point2<f64>,
        limit: f64,
    ) -> Vec<(f64, usize)> {
        let mut out: Vec<(f64, usize)> = found
            .map(|i| {
                let (dx, dy) = (self.pos[i].x - p.x, self.pos[i].y - p.y);
                ((dx * dx + dy * dy).sqrt(), i)
            })
            .filter(|e| e.0 <= limit)
            .collect();
        out.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        out
    }

    /// Up to `n` nearest nodes no farther than `limit`, as `(distance, index)`, nearest first
    /// (ties by index).
    pub fn nearest_within(&self, p: &Point2<f64>, n: usize, limit: f64) -> Vec<(f64, usize)> {
        let (Some(tree), Some(k)) = (&self.tree, NonZero::new(n.min(self.pos.len()))) else {
            return Vec::new();
        };
        if !(p.x.is_finite() && p.y.is_finite()) || limit.is_nan() || limit < 0.0 {
            return Vec::new();
        }
        let q = [p.x, p.y];
        // One more than asked: when it lies strictly farther than the n-th, the n nearest are
        // decided; a tie at the boundary takes every node at that distance.
        let more = NonZero::new((k.get() + 1).min(self.pos.len())).unwrap_or(k);
        let nn = tree.nearest_n_within_exclusive::<SquaredEuclidean>(
            &q,
            limit * limit,
            more,
            true,
            true,
        );
        let decided = nn.len() <= k.get() || nn[k.get() - 1].distance < nn[k.get()].distance;
        let found: Vec<usize> = if decided {
            nn.into_iter().map(|nn| nn.item as usize).collect()
        } else {
            let radius2 = nn[k.get() - 1].distance;
            tree.within_unsorted_exclusive::<SquaredEuclidean>(&q, radius2, true)
                .into_iter()
                .map(|nn| nn.item as usize)
                .collect()
        };
        let mut out = self.ranked(found.into_iter(), p, limit);
        out.truncate(n);
        out
    }
}

/// Fits the local map lattice -> image from the cells of `cells` within Chebyshev distance
/// `radius` of `at`, leaving out `at` itself.
pub(crate) fn local_map<C: Cells + ?Sized>(
    cells: &C,
    nodes: &[Node],
    at: Cell,
    radius: i32,
) -> Option<PlaneMap> {
    if radius <= 2 {
        local_map_in::<C, 24>(cells, nodes, at, radius)
    } else {
        local_map_in::<C, 48>(cells, nodes, at, 3)
    }
}

/// [`local_map`] with buffers for `N` neighbours: fixed buffers keep it allocation-free, and
/// sized to the radius they cost little to set up.
fn local_map_in<C: Cells + ?Sized, const N: usize>(
    cells: &C,
    nodes: &[Node],
    at: Cell,
    radius: i32,
) -> Option<PlaneMap> {
    let mut src = [Point2::origin(); N];
    let mut dst = [Point2::origin(); N];
    let mut n = 0;
    // Bit masks count the distinct rows and columns.
    let (mut is, mut js) = (0u32, 0u32);
    cells.around(at, radius, |di, dj, k| {
        src[n] = Point2::new((at.0 + di) as f64, (at.1 + dj) as f64);
        dst[n] = nodes[k].pos;
        n += 1;
        is |= 1 << (di + 3);
        js |= 1 << (dj + 3);
    });
    let (src, dst) = (&src[..n], &dst[..n]);
    if n >= 7 && is.count_ones() >= 3 && js.count_ones() >= 3 {
        if let Some(h) = fit_homography(src, dst) {
            return Some(h);
        }
    }
    fit_affine(src, dst)
}

/// A prediction of cell `at`: the image point, the images of the two lattice steps there
/// (`None` when only a line of nodes predicts it), and the local spacing (the shorter step).
struct Prediction {
    point: Point2<f64>,
    steps: Option<[Vector2<f64>; 2]>,
    spacing: f64,
}

/// The prediction of cell `at` from its neighbours, by the first of the module's fits that
/// their layout determines.
fn predict<C: Cells + ?Sized>(cells: &C, nodes: &[Node], at: Cell) -> Option<Prediction> {
    if let Some(p) = window_prediction(cells, nodes, at) {
        return Some(p);
    }
    let map = local_map(cells, nodes, at, 2).or_else(|| local_map(cells, nodes, at, 3));
    if let Some(m) = map {
        let p = Point2::new(at.0 as f64, at.1 as f64);
        let c = m.apply(&p)?;
        let a = m.apply(&Point2::new(p.x + 1.0, p.y))? - c;
        let b = m.apply(&Point2::new(p.x, p.y + 1.0))? - c;
        let spacing = a.norm().min(b.norm());
        return (spacing.is_finite() && spacing > 0.0).then_some(Prediction {
            point: c,
            steps: Some([a, b]),
            spacing,
        });
    }
    // A single line of nodes: extrapolate along it.
    for d in [(1, 0), (-1, 0), (0, 1), (0, -1)] {
        let p1 = cells.at((at.0 - d.0, at.1 - d.1));
        let p2 = cells.at((at.0 - 2 * d.0, at.1 - 2 * d.1));
        if let (Some(a), Some(b)) = (p1, p2) {
            let step = nodes[a].pos - nodes[b].pos;
            return Some(Prediction {
                point: nodes[a].pos + step,
                steps: None,
                spacing: step.norm(),
            });
        }
    }
    None
}

/// Whether a detection's own shape agrees with the lattice where it would sit: its edge or side
/// directions within 25 degrees of the local lattice steps (the detector's edge angles on steep faces are off by more than 15), its sizes within a factor 1.5 of
/// its neighbours'. Clutter that happens to fall inside the gate rarely passes both.
fn agrees(cells: &Grid, nodes: &[Node], at: Cell, k: usize, pred: &Prediction) -> bool {
    let n = &nodes[k];
    if let (Some([h1, h2]), Some([e1, e2])) = (n.axes, pred.steps) {
        let c = 25f64.to_radians().cos();
        let along =
            |e: &Vector2<f64>, h: &Vector2<f64>| (e.dot(h) / (e.norm() * h.norm())).abs() > c;
        if !((along(&e1, &h1) && along(&e2, &h2)) || (along(&e1, &h2) && along(&e2, &h1))) {
            return false;
        }
    }
    // Checker parity alternates along both axes: a node whose parity disagrees with a
    // neighbour's sits on the wrong lattice (a diagonal taken for an axis grows a sheared
    // lattice that fits the homography as well as the true one).
    if n.parity.is_some() {
        for di in -1..=1i32 {
            for dj in -1..=1i32 {
                if (di, dj) == (0, 0) {
                    continue;
                }
                let Some(o) = cells.at((at.0 + di, at.1 + dj)) else { continue };
                let axis = (di + dj).abs() == 1;
                if parity_flipped(n, &nodes[o]).is_some_and(|f| f != axis) {
                    return false;
                }
            }
        }
    }
    if let Some(sz) = n.size {
        let (mut sum, mut count) = ([0.0, 0.0], 0.0);
        for di in -1..=1 {
            for dj in -1..=1 {
                if let Some(s) = cells.at((at.0 + di, at.1 + dj)).and_then(|o| nodes[o].size) {
                    sum[0] += s[0];
                    sum[1] += s[1];
                    count += 1.0;
                }
            }
        }
        if count > 0.0 {
            for a in 0..2 {
                let r = sz[a] * count / sum[a];
                if !(r > 1.0 / 1.5 && r < 1.5) {
                    return false;
                }
            }
        }
    }
    true
}

/// Number of cells of `cells` among the 8 neighbours of `at`.
fn support(cells: &Grid, at: Cell) -> usize {
    let mut n = 0;
    for di in -1..=1 {
        for dj in -1..=1 {
            if (di, dj) != (0, 0) && cells.at((at.0 + di, at.1 + dj)).is_some() {
                n += 1;
            }
        }
    }
    n
}

fn cross(a: &Vector2<f64>, b: &Vector2<f64>) -> f64 {
    a.x * b.y - a.y * b.x
}

/// Builds the face candidates of one pattern kind.
pub(crate) struct Builder<'a> {
    nodes: &'a [Node],
    index: NodeIndex,
    owner: Vec<Option<usize>>,
    opts: &'a MatchOptions,
}

impl<'a> Builder<'a> {
    pub fn new(nodes: &'a [Node], opts: &'a MatchOptions) -> Builder<'a> {
        let pos: Vec<Point2<f64>> = nodes.iter().map(|n| n.pos).collect();
        Builder { nodes, index: NodeIndex::new(&pos), owner: vec![None; nodes.len()], opts }
    }

    /// The nodes' neighbour index.
    pub fn index(&self) -> &NodeIndex {
        &self.index
    }

    /// The two neighbours of node `s` along its lattice axes and a regularity score (how many of
    /// the two axes also have a neighbour on the opposite side).
    fn seed_axes(&self, s: usize) -> Option<(usize, usize, usize)> {
        let node = &self.nodes[s];
        let near: Vec<(usize, Vector2<f64>)> = self
            .index
            .nearest(&node.pos, 9)
            .into_iter()
            .filter(|&(d, k)| k != s && d > 0.0)
            .map(|(_, k)| (k, self.nodes[k].pos - node.pos))
            .collect();
        let pick = |dir: &Vector2<f64>, min_cos: f64, exclude: Option<usize>| {
            near.iter()
                .filter(|(k, v)| {
                    Some(*k) != exclude
                        && (v.dot(dir) / (v.norm() * dir.norm())).abs() > min_cos
                        && parity_flipped(node, &self.nodes[*k]) != Some(false)
                })
                .map(|&(k, v)| (k, v))
                .next()
        };
        let (a, b) = match node.axes {
            Some([h1, h2]) => {
                let cos20 = 20f64.to_radians().cos();
                let a = pick(&h1, cos20, None)?;
                let b = pick(&h2, cos20, Some(a.0))?;
                (a, b)
            }
            None => {
                let w = node.rectify;
                let r1 = near.first().copied()?;
                let w1 = w * r1.1;
                let b = near[1..].iter().copied().find(|(_, v)| {
                    let wv = w * v;
                    let ratio = wv.norm() / w1.norm();
                    (wv.dot(&w1) / (wv.norm() * w1.norm())).abs() < 0.35
                        && (0.7..1.45).contains(&ratio)
                })?;
                (r1, b)
            }
        };
        let ratio = a.1.norm() / b.1.norm();
        if !(0.25..4.0).contains(&ratio) {
            return None;
        }
        let opposite =
            |v: &Vector2<f64>| near.iter().any(|(_, u)| (u + v).norm() < 0.25 * v.norm());
        let score = opposite(&a.1) as usize + opposite(&b.1) as usize;
        Some((a.0, b.0, score))
    }

    /// Grows every face candidate: seeds in order of regularity (then index), each grown as far
    /// as it goes; candidates smaller than `min_nodes` give their nodes back.
    ///
    /// A seed's axes depend on the geometry alone, so they are found only when its turn comes
    /// and its node is still free: once a face has grown, its other nodes are never asked.
    /// Passes by decreasing score, each in index order, are the order of a sort by
    /// (score descending, index).
    pub fn build(&mut self) -> Vec<Component> {
        let mut axes: Vec<Option<Option<(usize, usize, usize)>>> = vec![None; self.nodes.len()];
        let mut out: Vec<Component> = Vec::new();
        for level in (0..=2).rev() {
            for (s, known) in axes.iter_mut().enumerate() {
                if self.owner[s].is_some() {
                    continue;
                }
                let Some((a, b, score)) = *known.get_or_insert_with(|| self.seed_axes(s)) else {
                    continue;
                };
                if score != level || self.owner[a].is_some() || self.owner[b].is_some() {
                    continue;
                }
                if let Some(c) = self.grow_seed(out.len(), s, a, b) {
                    out.push(c);
                }
            }
        }
        out
    }

    /// Grows and verifies one candidate from seed `s` with axis neighbours `a` and `b`, or gives
    /// its nodes back when fewer than `min_nodes` remain.
    fn grow_seed(&mut self, id: usize, s: usize, a: usize, b: usize) -> Option<Component> {
        let (va, vb) =
            (self.nodes[a].pos - self.nodes[s].pos, self.nodes[b].pos - self.nodes[s].pos);
        let (ea, eb) = if cross(&va, &vb) > 0.0 { (a, b) } else { (b, a) };
        let mut grid = Grid::new(None);
        for (c, k) in [((0, 0), s), ((1, 0), ea), ((0, 1), eb)] {
            grid.set(c, Some(k));
            self.owner[k] = Some(id);
        }
        self.grow(id, &mut grid);
        let pruned = prune(&mut grid, self.nodes, self.opts.residual);
        for &(_, k) in &pruned.removed {
            self.owner[k] = None;
        }
        if pruned.kept < self.opts.min_nodes {
            for (_, k) in grid.occupied() {
                self.owner[k] = None;
            }
            return None;
        }
        let residual = pruned.settled.then_some(pruned.residual);
        Some(Component { cells: grid, len: pruned.kept, residual })
    }

    fn grow(&mut self, id: usize, cells: &mut Grid) {
        // Rounds over the frontier: the cells next to those accepted in the previous round,
        // strongest support first. A cell that failed is tried again only once its support has
        // grown.
        let mut failed: Dense<Option<usize>> = Dense::new(None);
        let mut queued: Dense<bool> = Dense::new(false);
        let mut pending: Vec<Cell> = Vec::new();
        let push = |q: Cell, pending: &mut Vec<Cell>, queued: &mut Dense<bool>| {
            if !queued.get(q) {
                queued.set(q, true);
                pending.push(q);
            }
        };
        let around = |c: Cell, cells: &Grid, pending: &mut Vec<Cell>, queued: &mut Dense<bool>| {
            for d in [(1, 0), (-1, 0), (0, 1), (0, -1)] {
                let q = (c.0 + d.0, c.1 + d.1);
                if cells.at(q).is_none() {
                    push(q, pending, queued);
                }
            }
        };
        let start: Vec<Cell> = cells.occupied().map(|(c, _)| c).collect();
        for c in start {
            around(c, cells, &mut pending, &mut queued);
        }
        let mut todo: Vec<(usize, Cell)> = Vec::new();
        while !pending.is_empty() {
            todo.clear();
            for q in pending.drain(..) {
                queued.set(q, false);
                if cells.at(q).is_some() {
                    continue;
                }
                let sup = support(cells, q);
                if failed.get(q).is_none_or(|f| sup > f) {
                    todo.push((sup, q));
                }
            }
            // Cells are distinct, so this order is total: the same whatever order they were
            // queued in.
            todo.sort_unstable_by(|x, y| y.0.cmp(&x.0).then(x.1.cmp(&y.1)));
            for &(_, q) in &todo {
                if cells.at(q).is_some() {
                    continue;
                }
                let sup = support(cells, q);
                match self.accept(cells, q) {
                    Some(k) => {
                        cells.set(q, Some(k));
                        self.owner[k] = Some(id);
                        failed.set(q, None);
                        around(q, cells, &mut pending, &mut queued);
                        // Failed cells next to a new node have more support now.
                        for di in -1..=1 {
                            for dj in -1..=1 {
                                let r = (q.0 + di, q.1 + dj);
                                if failed.get(r).is_some() {
                                    push(r, &mut pending, &mut queued);
                                }
                            }
                        }
                    }
                    None => {
                        failed.set(q, Some(sup));
                    }
                }
            }
        }
    }

    /// The free detection nearest to the prediction of `q`, if it lies inside the gate.
    fn accept(&self, cells: &Grid, q: Cell) -> Option<usize> {
        let pred = predict(cells, self.nodes, q)?;
        let gate = self.opts.gate * pred.spacing;
        // Only detections inside the gate matter, which bounds the search.
        let near = self.index.within(&pred.point, gate);
        let &(d, k) = near.first()?;
        if self.owner[k].is_some() {
            return None;
        }
        // Two detections inside the gate at similar distances: do not guess.
        if near.get(1).is_some_and(|&(d2, _)| d2 < 2.0 * d) {
            return None;
        }
        agrees(cells, self.nodes, q, k, &pred).then_some(k)
    }
}

/// What [`prune`] removed, and the residual of every node it kept.
pub(crate) struct Pruned {
    /// The removed cells and their nodes, in the order removed.
    pub removed: Vec<(Cell, usize)>,
    /// Nodes kept.
    pub kept: usize,
    /// [`loo_residual`] of each kept cell against the kept cells.
    pub residual: Dense<f64>,
    /// Whether the last round found nothing to remove, so that pruning the kept cells again
    /// would keep them all with these residuals.
    pub settled: bool,
}

/// Leave-one-out residual test: a node whose position disagrees with the fit of its
/// neighbours by more than `tol` x the local spacing is removed, worst first within each
/// 5 x 5 neighbourhood, for at most 8 rounds.
///
/// A residual depends only on the cells within Chebyshev distance 3 (the widest local fit, and
/// the two steps of a line), so after a round only those around the removed cells are refit;
/// the outcome is that of refitting every node every round.
pub(crate) fn prune(cells: &mut Grid, nodes: &[Node], tol: f64) -> Pruned {
    let mut residual: Dense<f64> = Dense::new(f64::INFINITY);
    let mut stale: Vec<Cell> = Vec::new();
    let mut kept = 0;
    for (c, k) in cells.occupied() {
        residual.set(c, loo_residual(cells, nodes, c, k));
        kept += 1;
    }
    let mut removed = Vec::new();
    let mut settled = false;
    for _ in 0..8 {
        let worst: Vec<Cell> = cells
            .occupied()
            .filter_map(|(c, _)| {
                let r = residual.get(c);
                let top = r > tol
                    && (-2..=2).all(|di| {
                        (-2..=2).all(|dj| {
                            let o = (c.0 + di, c.1 + dj);
                            cells.at(o).is_none() || residual.get(o) <= r
                        })
                    });
                top.then_some(c)
            })
            .collect();
        if worst.is_empty() {
            settled = true;
            break;
        }
        stale.clear();
        for &c in &worst {
            if let Some(k) = cells.at(c) {
                cells.set(c, None);
                removed.push((c, k));
                kept -= 1;
            }
            for di in -3..=3 {
                for dj in -3..=3 {
                    stale.push((c.0 + di, c.1 + dj));
                }
            }
        }
        stale.sort_unstable();
        stale.dedup();
        for &c in &stale {
            if let Some(k) = cells.at(c) {
                residual.set(c, loo_residual(cells, nodes, c, k));
            }
        }
    }
    Pruned { removed, kept, residual, settled }
}

/// The residual of node `k` at `c` against the fit of its neighbours (the window's quadratic
/// where it determines the centre, else the local map), in units of the local spacing;
/// `f64::INFINITY` when the neighbours cannot predict it.
pub(crate) fn loo_residual<C: Cells + ?Sized>(cells: &C, nodes: &[Node], c: Cell, k: usize) -> f64 {
    match predict(cells, nodes, c) {
        Some(p) => (p.point - nodes[k].pos).norm() / p.spacing,
        None => f64::INFINITY,
    }
}

/// Cells whose `value` (a dot's area) departs from the window quadratic of their neighbours'
/// values by more than `tol` (relative), each the worst of its 5 x 5 window: a dot cut by an
/// occluder keeps its shape nearly but loses area, and its centre moves.
pub(crate) fn value_outliers(
    cells: &Grid,
    value: &dyn Fn(usize) -> Option<f64>,
    tol: f64,
) -> Vec<(Cell, usize)> {
    let mut dev: Dense<f64> = Dense::new(0.0);
    for (c, k) in cells.occupied() {
        let Some(v) = value(k) else { continue };
        let (mask, pts) = gather(cells, c, |o| value(o).map(|u| Point2::new(u, 0.0)));
        if let Some(f) = window::fit(mask, &pts) {
            if f.point.x > 0.0 {
                dev.set(c, (v / f.point.x - 1.0).abs());
            }
        }
    }
    cells
        .occupied()
        .filter(|&(c, _)| {
            let d = dev.get(c);
            d > tol && (-2..=2).all(|di| (-2..=2).all(|dj| dev.get((c.0 + di, c.1 + dj)) <= d))
        })
        .collect()
}

/// The window around `at`: the mask of its cells for which `value` gives a point, and the
/// points by slot. Always inlined: on the predictions' hot path a call cost 1 % of the clutter
/// scene's instructions.
#[inline(always)]
fn gather<C: Cells + ?Sized>(
    cells: &C,
    at: Cell,
    value: impl Fn(usize) -> Option<Point2<f64>>,
) -> (window::Mask, [Point2<f64>; 24]) {
    let mut pts = [Point2::origin(); 24];
    let mut mask: window::Mask = 0;
    cells.around(at, 2, |di, dj, k| {
        if let Some(p) = value(k) {
            let s = window::slot(di, dj);
            pts[s] = p;
            mask |= 1 << s;
        }
    });
    (mask, pts)
}

/// The leave-one-out prediction of cell `at` by the quadratic fit of the present cells of its
/// 5 x 5 window, and the local spacing from the fit's derivatives.
fn window_prediction<C: Cells + ?Sized>(cells: &C, nodes: &[Node], at: Cell) -> Option<Prediction> {
    let (mask, pts) = gather(cells, at, |k| Some(nodes[k].pos));
    let f = window::fit(mask, &pts)?;
    let spacing = f.d_i.norm().min(f.d_j.norm());
    (spacing.is_finite() && spacing > 0.0).then_some(Prediction {
        point: f.point,
        steps: Some([f.d_i, f.d_j]),
        spacing,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Exhaustive search, the definition of the `n` nearest neighbours (common practice as the
    /// reference for any spatial index): every node by distance, then index.
    fn exhaustive(pos: &[Point2<f64>], p: &Point2<f64>, n: usize, limit: f64) -> Vec<(f64, usize)> {
        let mut all: Vec<(f64, usize)> = pos
            .iter()
            .enumerate()
            .map(|(k, q)| {
                let (dx, dy) = (q.x - p.x, q.y - p.y);
                ((dx * dx + dy * dy).sqrt(), k)
            })
            .filter(|e| e.0 <= limit)
            .collect();
        all.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        all.truncate(n);
        all
    }

    #[test]
    fn node_index_finds_what_exhaustive_search_finds() {
        // A slanted, unevenly filled point set with duplicates, then a collinear one.
        let mut seed = 12345u64;
        let mut next = || {
            seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        let mut pos: Vec<Point2<f64>> = (0..400)
            .map(|_| {
                let (a, b) = (next() * 300.0, next() * 40.0);
                Point2::new(a + 0.8 * b, 0.3 * a + b)
            })
            .collect();
        pos.extend_from_within(..20);
        let line: Vec<Point2<f64>> = (0..50).map(|i| Point2::new(3.0 * i as f64, 7.0)).collect();
        for set in [&pos, &line] {
            let index = NodeIndex::new(set);
            let mut queries: Vec<Point2<f64>> = set.iter().step_by(7).copied().collect();
            queries.extend([
                Point2::new(-1e6, 5.0),
                Point2::new(1e9, -1e9),
                Point2::new(150.0, 60.0),
            ]);
            for q in &queries {
                for n in [1, 2, 6, 9] {
                    for limit in [f64::INFINITY, 4.0, 0.0] {
                        assert_eq!(
                            index.nearest_within(q, n, limit),
                            exhaustive(set, q, n, limit),
                            "query {q}, n {n}, limit {limit}"
                        );
                    }
                }
                for limit in [4.0, 9.5, 0.0] {
                    assert_eq!(
                        index.within(q, limit),
                        exhaustive(set, q, set.len(), limit),
                        "query {q}, limit {limit}"
                    );
                }
            }
        }
        assert!(NodeIndex::new(&[]).nearest(&Point2::origin(), 3).is_empty());
        assert!(NodeIndex::new(&[]).within(&Point2::origin(), 3.0).is_empty());
    }

    /// Dot areas growing smoothly across a face (a view's foreshortening, here up to 60 % over
    /// the patch and quadratic) are all kept; one dot with 20 % of its area cut is the only one
    /// left out, and one cut by 8 % stays (within the 12 % the matcher uses).
    #[test]
    fn value_outliers_find_the_cut_dot_only() {
        let mut grid = Grid::new(None);
        let mut area = Vec::new();
        for i in 0..12 {
            for j in 0..10 {
                grid.set((i, j), Some(area.len()));
                let (x, y) = (i as f64 / 11.0, j as f64 / 9.0);
                area.push(80.0 * (1.0 + 0.4 * x + 0.2 * y + 0.1 * x * x - 0.05 * x * y));
            }
        }
        let cut = grid.at((5, 4)).unwrap();
        let slight = grid.at((9, 7)).unwrap();
        area[cut] *= 0.8;
        area[slight] *= 0.92;
        let value = |k: usize| Some(area[k]);
        assert_eq!(value_outliers(&grid, &value, 0.12), vec![((5, 4), cut)]);
        // Without the cut, nothing.
        area[cut] /= 0.8;
        let value = |k: usize| Some(area[k]);
        assert!(value_outliers(&grid, &value, 0.12).is_empty());
    }

    #[test]
    fn dense_arrays_keep_every_cell_as_they_widen() {
        // Cells set far apart in every direction force widening on each side; the array must
        // read back exactly what an ordered map holds, and iterate in the same order.
        let mut seed = 99u64;
        let mut next = |m: i32| {
            seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            ((seed >> 33) % (2 * m as u64 + 1)) as i32 - m
        };
        let mut grid = Grid::new(None);
        let mut want = BTreeMap::new();
        for k in 0..600 {
            let c = (
                next(40) + if k % 3 == 0 { 90 } else { 0 },
                next(25) - if k % 5 == 0 { 70 } else { 0 },
            );
            grid.set(c, Some(k));
            want.insert(c, k);
        }
        assert_eq!(grid.to_map(), want);
        assert!(grid.occupied().map(|(c, _)| c).eq(want.keys().copied()));
        for i in -60..140 {
            for j in -110..40 {
                assert_eq!(grid.at((i, j)), want.get(&(i, j)).copied(), "at {i} {j}");
            }
        }
        let mut sized: Dense<f64> = Dense::spanning((2, 3), (4, 5), 0.5);
        sized.set((4, 5), 1.0);
        sized.set((-3, 9), 2.0);
        assert_eq!((sized.get((4, 5)), sized.get((-3, 9)), sized.get((2, 3))), (1.0, 2.0, 0.5));
    }

    #[test]
    fn pruning_refits_as_if_every_node_were_refit_every_round() {
        // A 12 x 10 lattice under a projective map with a few displaced nodes, some of them
        // neighbours, so that removals change the residuals of nodes around them.
        let map = |i: f64, j: f64| {
            let w = 1.0 + 0.01 * i - 0.006 * j;
            Point2::new((40.0 + 21.0 * i + 3.0 * j) / w, (30.0 - 2.0 * i + 19.0 * j) / w)
        };
        let mut nodes = Vec::new();
        let mut cells = BTreeMap::new();
        for i in 0..12 {
            for j in 0..10 {
                let mut pos = map(i as f64, j as f64);
                if [(3, 3), (4, 3), (8, 6), (0, 9), (11, 0)].contains(&(i, j)) {
                    pos += Vector2::new(4.0 + i as f64, -3.0);
                }
                cells.insert((i, j), nodes.len());
                nodes.push(Node {
                    pos,
                    axes: None,
                    rectify: Matrix2::identity(),
                    size: None,
                    parity: None,
                });
            }
        }
        // The rule applied literally: every residual recomputed every round.
        let tol = 0.15;
        let mut want = cells.clone();
        let mut want_removed = Vec::new();
        for _ in 0..8 {
            let res: BTreeMap<Cell, f64> =
                want.iter().map(|(&c, &k)| (c, loo_residual(&want, &nodes, c, k))).collect();
            let worst: Vec<Cell> = res
                .iter()
                .filter(|&(&c, &r)| {
                    r > tol
                        && (-2..=2).all(|di| {
                            (-2..=2)
                                .all(|dj| res.get(&(c.0 + di, c.1 + dj)).is_none_or(|&o| o <= r))
                        })
                })
                .map(|(&c, _)| c)
                .collect();
            if worst.is_empty() {
                break;
            }
            for c in worst {
                want_removed.push((c, want[&c]));
                want.remove(&c);
            }
        }
        assert!(want_removed.len() >= 5, "the displaced nodes are removed: {want_removed:?}");
        let mut grid = Grid::from_map(&cells);
        let got = prune(&mut grid, &nodes, tol);
        assert_eq!(got.removed, want_removed);
        assert_eq!(grid.to_map(), want);
        assert_eq!(got.kept, want.len());
        for (&c, &k) in &want {
            assert_eq!(got.residual.get(c), loo_residual(&want, &nodes, c, k), "at {c:?}");
        }
    }
}
