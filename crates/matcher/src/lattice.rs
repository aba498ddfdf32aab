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
//! (a homography where the neighbourhood spans three rows and three columns, an affine map
//! otherwise), accepts the nearest detection inside a gate proportional to the local spacing,
//! and repeats outward, so that strong lens distortion, which is smooth but far from
//! projective over a whole face, does not stop it.

use std::collections::{BTreeMap, BTreeSet};
use std::num::NonZero;

use kiddo::{ImmutableKdTree, SquaredEuclidean};
use nalgebra::{Matrix2, Point2, Vector2};

use crate::MatchOptions;
use crate::fit::{PlaneMap, fit_affine, fit_homography};

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
    /// The order of `axes` carries the checker parity: the sector from `axes[0]` to `axes[1]`
    /// by increasing angle is dark. Lattice neighbours along an axis then list the same two
    /// lines in swapped order, diagonal neighbours in the same order.
    pub parity: bool,
}

/// Angle between two lines (directions taken modulo pi), in [0, pi/2].
fn line_angle(a: &Vector2<f64>, b: &Vector2<f64>) -> f64 {
    let c = (a.dot(b) / (a.norm() * b.norm())).abs().min(1.0);
    c.acos()
}

/// Whether two checker corners have opposite parity (their edge lines in swapped order), or
/// `None` when either carries no parity.
pub(crate) fn parity_flipped(a: &Node, b: &Node) -> Option<bool> {
    if !(a.parity && b.parity) {
        return None;
    }
    let ([a0, a1], [b0, b1]) = (a.axes?, b.axes?);
    let same = line_angle(&a0, &b0) + line_angle(&a1, &b1);
    let swapped = line_angle(&a0, &b1) + line_angle(&a1, &b0);
    Some(swapped < same)
}

/// A grown face candidate.
#[derive(Clone, Debug, Default)]
pub(crate) struct Component {
    /// Node index of each lattice cell.
    pub cells: BTreeMap<Cell, usize>,
}

/// The k-d tree over node positions, with ties broken by index so results never depend on the
/// tree's internal order.
pub(crate) struct NodeIndex {
    tree: Option<ImmutableKdTree<f64, 2>>,
    len: usize,
}

impl NodeIndex {
    pub fn new(pos: &[Point2<f64>]) -> NodeIndex {
        let pts: Vec<[f64; 2]> = pos.iter().map(|p| [p.x, p.y]).collect();
        let tree = (!pts.is_empty()).then(|| ImmutableKdTree::new_from_slice(&pts));
        NodeIndex { tree, len: pts.len() }
    }

    /// Up to `n` nearest nodes as `(distance, index)`, nearest first.
    pub fn nearest(&self, p: &Point2<f64>, n: usize) -> Vec<(f64, usize)> {
        let (Some(tree), Some(k)) = (&self.tree, NonZero::new(n.min(self.len))) else {
            return Vec::new();
        };
        let mut out: Vec<(f64, usize)> = tree
            .nearest_n::<SquaredEuclidean>(&[p.x, p.y], k)
            .into_iter()
            .map(|nn| (nn.distance.sqrt(), nn.item as usize))
            .collect();
        out.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        out
    }
}

/// Fits the local map lattice -> image from the cells of `cells` within Chebyshev distance
/// `radius` of `at`, leaving out `at` itself.
pub(crate) fn local_map(
    cells: &BTreeMap<Cell, usize>,
    nodes: &[Node],
    at: Cell,
    radius: i32,
) -> Option<PlaneMap> {
    // At most 48 neighbours (radius 3); fixed buffers keep this allocation-free, bit masks
    // count the distinct rows and columns.
    let mut src = [Point2::origin(); 48];
    let mut dst = [Point2::origin(); 48];
    let mut n = 0;
    let (mut is, mut js) = (0u32, 0u32);
    let radius = radius.min(3);
    for di in -radius..=radius {
        for dj in -radius..=radius {
            if di == 0 && dj == 0 {
                continue;
            }
            let c = (at.0 + di, at.1 + dj);
            if let Some(&k) = cells.get(&c) {
                src[n] = Point2::new(c.0 as f64, c.1 as f64);
                dst[n] = nodes[k].pos;
                n += 1;
                is |= 1 << (di + 3);
                js |= 1 << (dj + 3);
            }
        }
    }
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

fn predict(cells: &BTreeMap<Cell, usize>, nodes: &[Node], at: Cell) -> Option<Prediction> {
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
        let p1 = cells.get(&(at.0 - d.0, at.1 - d.1));
        let p2 = cells.get(&(at.0 - 2 * d.0, at.1 - 2 * d.1));
        if let (Some(&a), Some(&b)) = (p1, p2) {
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
fn agrees(
    cells: &BTreeMap<Cell, usize>,
    nodes: &[Node],
    at: Cell,
    k: usize,
    pred: &Prediction,
) -> bool {
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
    if n.parity {
        for di in -1..=1i32 {
            for dj in -1..=1i32 {
                if (di, dj) == (0, 0) {
                    continue;
                }
                let Some(&o) = cells.get(&(at.0 + di, at.1 + dj)) else { continue };
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
                if let Some(s) = cells.get(&(at.0 + di, at.1 + dj)).and_then(|&o| nodes[o].size) {
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
fn support(cells: &BTreeMap<Cell, usize>, at: Cell) -> usize {
    let mut n = 0;
    for di in -1..=1 {
        for dj in -1..=1 {
            if (di, dj) != (0, 0) && cells.contains_key(&(at.0 + di, at.1 + dj)) {
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

    /// The nodes' k-d tree.
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
    pub fn build(&mut self) -> Vec<Component> {
        let mut seeds: Vec<(usize, usize, usize, usize)> = (0..self.nodes.len())
            .filter_map(|s| self.seed_axes(s).map(|(a, b, score)| (s, a, b, score)))
            .collect();
        seeds.sort_by(|x, y| y.3.cmp(&x.3).then(x.0.cmp(&y.0)));
        let mut out: Vec<Component> = Vec::new();
        for (s, a, b, _) in seeds {
            if self.owner[s].is_some() || self.owner[a].is_some() || self.owner[b].is_some() {
                continue;
            }
            let id = out.len();
            let (va, vb) =
                (self.nodes[a].pos - self.nodes[s].pos, self.nodes[b].pos - self.nodes[s].pos);
            let (ea, eb) = if cross(&va, &vb) > 0.0 { (a, b) } else { (b, a) };
            let mut comp = Component::default();
            for (c, k) in [((0, 0), s), ((1, 0), ea), ((0, 1), eb)] {
                comp.cells.insert(c, k);
                self.owner[k] = Some(id);
            }
            self.grow(id, &mut comp);
            self.verify(&mut comp);
            if comp.cells.len() < self.opts.min_nodes {
                for &k in comp.cells.values() {
                    self.owner[k] = None;
                }
                continue;
            }
            out.push(comp);
        }
        out
    }

    fn grow(&mut self, id: usize, comp: &mut Component) {
        // Rounds over the frontier: the cells next to those accepted in the previous round,
        // strongest support first. A cell that failed is tried again only once its support has
        // grown.
        let mut failed: BTreeMap<Cell, usize> = BTreeMap::new();
        let mut pending: BTreeSet<Cell> = BTreeSet::new();
        let around = |c: Cell, cells: &BTreeMap<Cell, usize>, pending: &mut BTreeSet<Cell>| {
            for d in [(1, 0), (-1, 0), (0, 1), (0, -1)] {
                let q = (c.0 + d.0, c.1 + d.1);
                if !cells.contains_key(&q) {
                    pending.insert(q);
                }
            }
        };
        for &c in comp.cells.keys() {
            around(c, &comp.cells, &mut pending);
        }
        while !pending.is_empty() {
            let mut todo: Vec<(usize, Cell)> = std::mem::take(&mut pending)
                .into_iter()
                .filter(|q| !comp.cells.contains_key(q))
                .map(|q| (support(&comp.cells, q), q))
                .filter(|&(sup, q)| failed.get(&q).is_none_or(|&f| sup > f))
                .collect();
            todo.sort_by(|x, y| y.0.cmp(&x.0).then(x.1.cmp(&y.1)));
            for (_, q) in todo {
                if comp.cells.contains_key(&q) {
                    continue;
                }
                let sup = support(&comp.cells, q);
                match self.accept(&comp.cells, q) {
                    Some(k) => {
                        comp.cells.insert(q, k);
                        self.owner[k] = Some(id);
                        failed.remove(&q);
                        around(q, &comp.cells, &mut pending);
                        // Failed cells next to a new node have more support now.
                        for di in -1..=1 {
                            for dj in -1..=1 {
                                let r = (q.0 + di, q.1 + dj);
                                if failed.contains_key(&r) {
                                    pending.insert(r);
                                }
                            }
                        }
                    }
                    None => {
                        failed.insert(q, sup);
                    }
                }
            }
        }
    }

    /// The free detection nearest to the prediction of `q`, if it lies inside the gate.
    fn accept(&self, cells: &BTreeMap<Cell, usize>, q: Cell) -> Option<usize> {
        let pred = predict(cells, self.nodes, q)?;
        let gate = self.opts.gate * pred.spacing;
        let near = self.index.nearest(&pred.point, 2);
        let &(d, k) = near.first()?;
        if d > gate || self.owner[k].is_some() {
            return None;
        }
        // Two detections inside the gate at similar distances: do not guess.
        if let Some(&(d2, _)) = near.get(1) {
            if d2 <= gate && d2 < 2.0 * d {
                return None;
            }
        }
        agrees(cells, self.nodes, q, k, &pred).then_some(k)
    }

    /// Leave-one-out residual test: a node whose position disagrees with the fit of its
    /// neighbours by more than `residual` x the local spacing is removed, worst first within
    /// each neighbourhood, until every node passes.
    fn verify(&mut self, comp: &mut Component) {
        for _ in 0..8 {
            let res: BTreeMap<Cell, f64> = comp
                .cells
                .iter()
                .map(|(&c, &k)| (c, loo_residual(&comp.cells, self.nodes, c, k)))
                .collect();
            let tol = self.opts.residual;
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
                return;
            }
            for c in worst {
                if let Some(k) = comp.cells.remove(&c) {
                    self.owner[k] = None;
                }
            }
        }
    }
}

/// The residual of node `k` at `c` against the fit of its neighbours, in units of the local
/// spacing; `f64::INFINITY` when the neighbours cannot predict it.
pub(crate) fn loo_residual(
    cells: &BTreeMap<Cell, usize>,
    nodes: &[Node],
    c: Cell,
    k: usize,
) -> f64 {
    match predict(cells, nodes, c) {
        Some(p) => (p.point - nodes[k].pos).norm() / p.spacing,
        None => f64::INFINITY,
    }
}
