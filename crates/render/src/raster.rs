//! The optical image: exact sub-square coverage of the painted faces, the point spread function
//! and pixel integration. Output is reflectance (0 black ink .. 1 white ink) per pixel, before
//! any photometry.
//!
//! Method, for `s` sub-squares per pixel side:
//! 1. Each sub-square's four corners are unprojected to rays (the private `rays` module: each
//!    corner once, shared by its four sub-squares; under distortion interpolated from a coarse
//!    lattice of exact rays within 1e-5 px, exact where that cannot be shown) and the rays
//!    intersected with every face plane. Perspective maps the sub-square's straight edges
//!    to straight lines on the plane; lens distortion bends them, but across `1/s` pixel the
//!    bending is of order `kappa (1/s)^2 / 8` pixels (`kappa` the image curvature of a line,
//!    below 1e-3 / px for a line bowed by 5 % of the image width), far below 1e-4 px.
//! 2. The sub-square sees the face whose plane its centre ray hits first inside the face
//!    outline, or the background. On a front-facing face its value is the exact area
//!    integral `(ground A(Q ∩ F) + sum_i sign_i A(Q ∩ S_i)) / A(Q)` over the mapped
//!    quadrilateral `Q`, the face rectangle `F` and the painted shapes `S_i` (each painted on
//!    the opposite ink, so its contribution is `+1` for white ink, `-1` for black), plus
//!    `(1 - A(Q ∩ F) / A(Q))` times the background. A face seen from behind shows a plain
//!    back. Image-space occluders are then composited with their exact coverage. Most
//!    sub-squares need no area at all: a tile of 4 x 4 sub-squares (then each sub-square of a
//!    tile that fails) whose corner hits have a bounding box inside one face and, for every
//!    painted shape, either inside it or clear of it, takes that region's value directly. It
//!    is the value the area integral gives there, exactly: the integral is then a sum of
//!    whole multiples of the quadrilateral's area divided by that area.
//! 3. The coverage grid is convolved with a sampled Gaussian of unit sum (separable) and box-
//!    averaged `s x s` down to pixels in the same pass: one symmetric 1-D kernel
//!    `c = box_s * g / s` applied with stride `s`, rows then columns (split by phase of the
//!    stride so that each tap is one contiguous multiply-add over a row). A defocus pillbox follows
//!    on the pixel grid with weights equal to the disc's exact area in each pixel.
//!
//! Every step is a symmetric kernel of unit sum centred on the pixel centre applied to exact
//! area integrals, so first moments (a straight edge's position, a shape's centroid) are
//! preserved. The approximations left are the sampling of the Gaussian and the use of plane
//! area instead of image area within one sub-square (the plane-to-image Jacobian changes by
//! about `3 (1/s) tan(tilt) / f` across it: below 1e-3 relative), both far below 1e-3 px in the
//! positions they imply.

use std::ops::ControlFlow;

use facetcal_model::{Camera, Face, Ink, Pose, SeededRng, Shape};
use nalgebra::Vector3;
use rayon::prelude::*;

use crate::area::{Xy, polygon_rect_area, quad_rect_area, signed_area, square_disc_area};
use crate::image::FloatImage;
use crate::rays::{CornerRays, RayCaster};
use crate::scene::{Background, Occluder, Scene};

/// Sub-rows computed together (one ray cache per chunk; a multiple of [`TILE`]).
const CHUNK_ROWS: usize = 16;
/// Side of the tiles of sub-squares classified at once.
const TILE: usize = 4;
/// Gaussian kernel half-width in sigmas: the tail beyond 4 sigma holds 6e-5 of the mass.
const GAUSS_SIGMAS: f64 = 4.0;

/// A shape as painted: its kind, the sign of its contribution and its bounding box.
#[derive(Clone, Debug)]
struct Painted {
    shape: Shape,
    sign: f64,
    bbox: [f64; 4],
}

/// A face as seen from one view: plane equation and frame in camera coordinates, and its
/// painted shapes indexed by a uniform grid.
#[derive(Clone, Debug)]
pub(crate) struct FaceView {
    pub(crate) id: u32,
    /// Whether the camera sees the painted side.
    pub(crate) front: bool,
    /// Face normal in the camera frame (the face frame's z).
    n: Vector3<f64>,
    /// `n . O`, `O` the face origin in the camera frame.
    k: f64,
    /// Face x and y axes in the camera frame.
    ax: Vector3<f64>,
    ay: Vector3<f64>,
    /// `(ax . O, ay . O)`.
    b: [f64; 2],
    w: f64,
    h: f64,
    ground: f64,
    shapes: Vec<Painted>,
    /// Bucket grid: size, counts, and per bucket the shape indices.
    bucket: f64,
    nbx: usize,
    nby: usize,
    buckets: Vec<Vec<u32>>,
    /// Per shape, the first bucket (x, y) it overlaps.
    first_bucket: Vec<(usize, usize)>,
}

fn ink_value(i: Ink) -> f64 {
    match i {
        Ink::Dark => 0.0,
        Ink::Light => 1.0,
    }
}

impl FaceView {
    pub(crate) fn new(face: &Face, view: &Pose) -> FaceView {
        let fc = view.compose(face.pose());
        let r = fc.matrix();
        let o = fc.translation;
        let ax = r.column(0).into_owned();
        let ay = r.column(1).into_owned();
        let n = r.column(2).into_owned();
        let (w, h) = face.size();
        let shapes: Vec<Painted> = face
            .shapes()
            .into_iter()
            .map(|(shape, ink)| {
                let bbox = match shape {
                    Shape::Rect { x0, y0, x1, y1 } => [x0, y0, x1, y1],
                    Shape::Disc { centre, radius } => {
                        [centre.x - radius, centre.y - radius, centre.x + radius, centre.y + radius]
                    }
                };
                // Each shape is painted on the opposite ink (the model's invariant), so it adds
                // value(ink) - value(ink.inverse()).
                let sign = ink_value(ink) - ink_value(ink.inverse());
                Painted { shape, sign, bbox }
            })
            .collect();
        let bucket = face.pattern().feature_spacing().max(w.max(h) / 2048.0);
        let nbx = ((w / bucket).ceil() as usize).clamp(1, 4096);
        let nby = ((h / bucket).ceil() as usize).clamp(1, 4096);
        let mut buckets = vec![Vec::new(); nbx * nby];
        let mut first_bucket = Vec::with_capacity(shapes.len());
        let cell = |v: f64, n: usize| ((v / bucket).floor().max(0.0) as usize).min(n - 1);
        for (i, s) in shapes.iter().enumerate() {
            let (bx0, by0) = (cell(s.bbox[0], nbx), cell(s.bbox[1], nby));
            let (bx1, by1) = (cell(s.bbox[2], nbx), cell(s.bbox[3], nby));
            for by in by0..=by1 {
                for bx in bx0..=bx1 {
                    buckets[by * nbx + bx].push(i as u32);
                }
            }
            first_bucket.push((bx0, by0));
        }
        FaceView {
            id: face.id(),
            front: n.dot(&o) > 0.0,
            n,
            k: n.dot(&o),
            ax,
            ay,
            b: [ax.dot(&o), ay.dot(&o)],
            w,
            h,
            ground: ink_value(face.ground()),
            shapes,
            bucket,
            nbx,
            nby,
            buckets,
            first_bucket,
        }
    }

    /// Ray parameter and face coordinates where the ray `d` (camera frame, from the centre)
    /// meets the face plane; `None` when it does not meet it ahead of the camera.
    #[inline]
    pub(crate) fn hit(&self, d: &Vector3<f64>) -> Option<(f64, Xy)> {
        let den = self.n.dot(d);
        let lambda = self.k / den;
        if !(lambda > 0.0 && lambda.is_finite()) {
            return None;
        }
        Some((lambda, [lambda * self.ax.dot(d) - self.b[0], lambda * self.ay.dot(d) - self.b[1]]))
    }

    /// Whether a face point lies inside the face rectangle, with a tolerance.
    #[inline]
    pub(crate) fn inside(&self, q: Xy, tol: f64) -> bool {
        q[0] >= -tol && q[1] >= -tol && q[0] <= self.w + tol && q[1] <= self.h + tol
    }

    /// Calls `f` on every painted shape whose bounding box overlaps the box `bb`, each once
    /// (in the first bucket of the query it shares), in bucket order, until `f` breaks.
    #[inline]
    fn overlapping<B>(
        &self,
        bb: &[f64; 4],
        mut f: impl FnMut(&Painted) -> ControlFlow<B>,
    ) -> ControlFlow<B> {
        let cell = |v: f64, n: usize| ((v / self.bucket).floor().max(0.0) as usize).min(n - 1);
        let (bx0, by0) = (cell(bb[0], self.nbx), cell(bb[1], self.nby));
        let (bx1, by1) = (cell(bb[2], self.nbx), cell(bb[3], self.nby));
        for by in by0..=by1 {
            for bx in bx0..=bx1 {
                for &si in &self.buckets[by * self.nbx + bx] {
                    let si = si as usize;
                    let (fx, fy) = self.first_bucket[si];
                    if fx.max(bx0) != bx || fy.max(by0) != by {
                        continue;
                    }
                    let s = &self.shapes[si];
                    if s.bbox[0] >= bb[2]
                        || s.bbox[2] <= bb[0]
                        || s.bbox[1] >= bb[3]
                        || s.bbox[3] <= bb[1]
                    {
                        continue;
                    }
                    f(s)?;
                }
            }
        }
        ControlFlow::Continue(())
    }

    /// Fraction of the quadrilateral on the face, and its reflectance integral over the
    /// quadrilateral's area (step 2 of the module doc).
    fn quad_value(&self, q: &[Xy; 4]) -> (f64, f64) {
        let area = signed_area(q).abs();
        if area.is_nan() || area <= 0.0 {
            return (0.0, 0.0);
        }
        let mut bb = [f64::INFINITY, f64::INFINITY, f64::NEG_INFINITY, f64::NEG_INFINITY];
        for p in q {
            bb[0] = bb[0].min(p[0]);
            bb[1] = bb[1].min(p[1]);
            bb[2] = bb[2].max(p[0]);
            bb[3] = bb[3].max(p[1]);
        }
        let on_face = if bb[0] >= 0.0 && bb[1] >= 0.0 && bb[2] <= self.w && bb[3] <= self.h {
            area
        } else if bb[2] <= 0.0 || bb[3] <= 0.0 || bb[0] >= self.w || bb[1] >= self.h {
            return (0.0, 0.0);
        } else {
            quad_rect_area(q, 0.0, 0.0, self.w, self.h)
        };
        let mut ink = self.ground * on_face;
        let _ = self.overlapping(&bb, |s| {
            let a = match s.shape {
                Shape::Rect { x0, y0, x1, y1 } => {
                    if bb[0] >= x0 && bb[2] <= x1 && bb[1] >= y0 && bb[3] <= y1 {
                        area
                    } else {
                        quad_rect_area(q, x0, y0, x1, y1)
                    }
                }
                Shape::Disc { centre, radius } => {
                    let r2 = radius * radius;
                    let all_in = q.iter().all(|p| {
                        let dx = p[0] - centre.x;
                        let dy = p[1] - centre.y;
                        dx * dx + dy * dy <= r2
                    });
                    if all_in {
                        area
                    } else {
                        crate::area::polygon_disc_area(q, [centre.x, centre.y], radius)
                    }
                }
            };
            ink += s.sign * a;
            ControlFlow::<()>::Continue(())
        });
        (on_face / area, ink / area)
    }

    /// The reflectance of a face region with bounding box `bb` if it is uniform there: every
    /// painted shape either contains the box or is clear of it. The tests are those of
    /// [`Self::quad_value`], so the value is what the area integral of any quadrilateral in
    /// the box gives.
    fn uniform_value(&self, bb: &[f64; 4]) -> Option<f64> {
        let mut v = self.ground;
        let mixed = self.overlapping(bb, |s| {
            let inside = match s.shape {
                Shape::Rect { x0, y0, x1, y1 } => {
                    bb[0] >= x0 && bb[2] <= x1 && bb[1] >= y0 && bb[3] <= y1
                }
                Shape::Disc { centre, radius } => {
                    let r2 = radius * radius;
                    let dx = (centre.x - bb[0]).abs().max((centre.x - bb[2]).abs());
                    let dy = (centre.y - bb[1]).abs().max((centre.y - bb[3]).abs());
                    if dx * dx + dy * dy <= r2 {
                        true
                    } else {
                        // Nearest point of the box to the centre.
                        let nx = centre.x.clamp(bb[0], bb[2]) - centre.x;
                        let ny = centre.y.clamp(bb[1], bb[3]) - centre.y;
                        if nx * nx + ny * ny > r2 {
                            return ControlFlow::Continue(());
                        }
                        false
                    }
                }
            };
            if !inside {
                return ControlFlow::Break(());
            }
            v += s.sign;
            ControlFlow::Continue(())
        });
        if mixed.is_break() {
            return None;
        }
        Some(v)
    }

    /// The painted reflectance at one face point (for degenerate sub-squares).
    fn point_value(&self, p: Xy) -> f64 {
        let mut v = self.ground;
        for s in &self.shapes {
            let inside = match s.shape {
                Shape::Rect { x0, y0, x1, y1 } => {
                    p[0] >= x0 && p[0] <= x1 && p[1] >= y0 && p[1] <= y1
                }
                Shape::Disc { centre, radius } => {
                    (p[0] - centre.x).hypot(p[1] - centre.y) <= radius
                }
            };
            if inside {
                v += s.sign;
            }
        }
        v
    }
}

/// Procedural background for one view: texture plus clutter shapes in pinhole-plane pixels.
pub(crate) struct BackgroundView {
    level: f64,
    amplitude: f64,
    scale: f64,
    seed: u64,
    clutter: Vec<Clutter>,
    grid: ClutterGrid,
}

struct Clutter {
    centre: Xy,
    /// Half sizes along the rotated axes; a disc when `disc`.
    half: Xy,
    cos: f64,
    sin: f64,
    disc: bool,
    reflectance: f64,
}

impl Clutter {
    fn contains(&self, p: Xy) -> bool {
        let dx = p[0] - self.centre[0];
        let dy = p[1] - self.centre[1];
        if self.disc {
            dx * dx + dy * dy <= self.half[0] * self.half[0]
        } else {
            let u = self.cos * dx + self.sin * dy;
            let v = -self.sin * dx + self.cos * dy;
            u.abs() <= self.half[0] && v.abs() <= self.half[1]
        }
    }
}

/// Buckets of clutter shapes over the image, 64 px on a side.
struct ClutterGrid {
    x0: f64,
    y0: f64,
    size: f64,
    nx: usize,
    ny: usize,
    cells: Vec<Vec<u32>>,
}

/// Tag mixed into the scene seed for clutter streams, so clutter and noise never share draws.
const CLUTTER_STREAM: u64 = 0xC1u64 << 56;

impl BackgroundView {
    pub(crate) fn new(b: &Background, camera: &Camera, seed: u64, view: usize) -> Self {
        let mut rng = SeededRng::stream(seed ^ CLUTTER_STREAM, view as u64);
        let (w, h) = (camera.width as f64, camera.height as f64);
        let mut clutter = Vec::with_capacity(b.clutter as usize);
        for _ in 0..b.clutter {
            let size = rng.range(b.clutter_size_px[0], b.clutter_size_px[1]);
            let aspect = rng.range(0.3, 1.0);
            let angle = rng.range(0.0, std::f64::consts::PI);
            let disc = rng.uniform() < 0.4;
            clutter.push(Clutter {
                centre: [rng.range(-0.1 * w, 1.1 * w), rng.range(-0.1 * h, 1.1 * h)],
                half: [0.5 * size, 0.5 * size * aspect],
                cos: angle.cos(),
                sin: angle.sin(),
                disc,
                reflectance: rng.uniform(),
            });
        }
        let size = 64.0;
        let (x0, y0) = (-0.2 * w - 200.0, -0.2 * h - 200.0);
        let nx = ((1.4 * w + 400.0) / size).ceil() as usize;
        let ny = ((1.4 * h + 400.0) / size).ceil() as usize;
        let mut cells = vec![Vec::new(); nx * ny];
        for (i, c) in clutter.iter().enumerate() {
            let r = c.half[0].max(c.half[1]);
            let ix0 = (((c.centre[0] - r - x0) / size).floor().max(0.0) as usize).min(nx - 1);
            let ix1 = (((c.centre[0] + r - x0) / size).floor().max(0.0) as usize).min(nx - 1);
            let iy0 = (((c.centre[1] - r - y0) / size).floor().max(0.0) as usize).min(ny - 1);
            let iy1 = (((c.centre[1] + r - y0) / size).floor().max(0.0) as usize).min(ny - 1);
            for iy in iy0..=iy1 {
                for ix in ix0..=ix1 {
                    cells[iy * nx + ix].push(i as u32);
                }
            }
        }
        BackgroundView {
            level: b.reflectance,
            amplitude: b.texture_amplitude,
            scale: b.texture_scale_px,
            seed,
            clutter,
            grid: ClutterGrid { x0, y0, size, nx, ny, cells },
        }
    }

    /// The reflectance everywhere when the background is plain (no texture, no clutter).
    fn plain(&self) -> Option<f64> {
        (self.amplitude == 0.0 && self.clutter.is_empty()).then_some(self.level)
    }

    /// Reflectance seen along a ray, from its pinhole-plane position `p` (pixels).
    fn value(&self, p: Xy) -> f64 {
        let g = &self.grid;
        let fx = (p[0] - g.x0) / g.size;
        let fy = (p[1] - g.y0) / g.size;
        if fx >= 0.0 && fy >= 0.0 && (fx as usize) < g.nx && (fy as usize) < g.ny {
            // The last painted shape is on top.
            for &i in g.cells[fy as usize * g.nx + fx as usize].iter().rev() {
                let c = &self.clutter[i as usize];
                if c.contains(p) {
                    return c.reflectance;
                }
            }
        }
        if self.amplitude == 0.0 {
            return self.level;
        }
        let (x, y) = (p[0] / self.scale, p[1] / self.scale);
        let n =
            0.65 * value_noise(x, y, self.seed) + 0.35 * value_noise(2.0 * x, 2.0 * y, !self.seed);
        (self.level + self.amplitude * n).clamp(0.0, 1.0)
    }
}

/// Lattice value noise in [-1, 1] with smoothstep interpolation (common practice).
fn value_noise(x: f64, y: f64, seed: u64) -> f64 {
    let x = x.clamp(-1e9, 1e9);
    let y = y.clamp(-1e9, 1e9);
    let (ix, iy) = (x.floor(), y.floor());
    let (tx, ty) = (x - ix, y - iy);
    let (sx, sy) = (tx * tx * (3.0 - 2.0 * tx), ty * ty * (3.0 - 2.0 * ty));
    let (ix, iy) = (ix as i64, iy as i64);
    let v = |a: i64, b: i64| lattice(a, b, seed);
    let top = v(ix, iy) * (1.0 - sx) + v(ix + 1, iy) * sx;
    let bottom = v(ix, iy + 1) * (1.0 - sx) + v(ix + 1, iy + 1) * sx;
    top * (1.0 - sy) + bottom * sy
}

fn lattice(a: i64, b: i64, seed: u64) -> f64 {
    let h = (a as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15)
        ^ (b as u64).wrapping_mul(0xC2B2_AE3D_27D4_EB4F)
        ^ seed;
    let mut r = SeededRng::new(h);
    2.0 * r.uniform() - 1.0
}

/// What a region of sub-squares shows.
#[derive(Clone, Copy, Debug)]
enum Class {
    /// One value for every sub-square.
    Value(f64),
    /// The background, sampled per sub-square.
    Background,
    /// Sub-squares must be taken one by one.
    Mixed,
}

/// The corner hits of a region on one face plane: how many corners, how many hit the plane
/// ahead, and the bounding box of the hits.
#[derive(Clone, Copy, Debug)]
struct FaceBox {
    corners: usize,
    hit: usize,
    bb: [f64; 4],
}

impl FaceBox {
    const EMPTY: FaceBox = FaceBox {
        corners: 0,
        hit: 0,
        bb: [f64::INFINITY, f64::INFINITY, f64::NEG_INFINITY, f64::NEG_INFINITY],
    };

    #[inline]
    fn add(&mut self, q: &Option<Xy>) {
        self.corners += 1;
        if let Some(q) = q {
            self.hit += 1;
            self.bb[0] = self.bb[0].min(q[0]);
            self.bb[1] = self.bb[1].min(q[1]);
            self.bb[2] = self.bb[2].max(q[0]);
            self.bb[3] = self.bb[3].max(q[1]);
        }
    }
}

/// Everything fixed for one view's raster.
struct ViewRaster<'a> {
    camera: &'a Camera,
    caster: RayCaster,
    faces: Vec<FaceView>,
    background: BackgroundView,
    occluders: &'a [Occluder],
    back: f64,
    /// Image centre `((w - 1) / 2, (h - 1) / 2)`, pixels.
    centre: Xy,
    s: usize,
    /// Sub-square padding for the Gaussian, and pixel padding for the pillbox.
    pad_sub: usize,
    pad_px: usize,
}

impl ViewRaster<'_> {
    /// x (or y) of sub-square corner `i`, pixels.
    #[inline]
    fn corner(&self, i: usize) -> f64 {
        -0.5 - self.pad_px as f64 + (i as f64 - self.pad_sub as f64) / self.s as f64
    }

    /// One sub-square's reflectance from its corner rays (camera frame) and per-face hits.
    fn sub_value(&self, rays: [Option<&Vector3<f64>>; 4], hits: &[[Option<Xy>; 4]]) -> f64 {
        let [Some(r0), Some(r1), Some(r2), Some(r3)] = rays else {
            // Outside the lens model's domain: no light reaches these pixels.
            return 0.0;
        };
        let c = r0 + r1 + r2 + r3;
        let mut best: Option<(f64, usize, Xy)> = None;
        for (fi, f) in self.faces.iter().enumerate() {
            if let Some((lambda, q)) = f.hit(&c) {
                if f.inside(q, 0.0) && best.is_none_or(|b| lambda < b.0) {
                    best = Some((lambda, fi, q));
                }
            }
        }
        let bg = || self.background_at(&c);
        let Some((_, fi, centre)) = best else {
            return bg();
        };
        let f = &self.faces[fi];
        let h = &hits[fi];
        let quad = match (h[0], h[1], h[2], h[3]) {
            (Some(a), Some(b), Some(c), Some(d)) => [a, b, c, d],
            // The plane's horizon crosses the sub-square: sample its centre.
            _ => {
                return if f.front { f.point_value(centre) } else { self.back };
            }
        };
        if f.front {
            let (on, ink) = f.quad_value(&quad);
            ink + (1.0 - on) * bg()
        } else {
            let area = signed_area(&quad).abs();
            let on =
                if area > 0.0 { quad_rect_area(&quad, 0.0, 0.0, f.w, f.h) / area } else { 1.0 };
            on * self.back + (1.0 - on) * bg()
        }
    }

    /// The background along the ray `c` (any positive scale).
    #[inline]
    fn background_at(&self, c: &Vector3<f64>) -> f64 {
        // Pinhole-plane position of the ray about the image centre: a function of the ray
        // alone, so the background moves with the principal point like the target does.
        let p = if c.z > 1e-9 * c.norm() {
            let i = &self.camera.intrinsics;
            [
                i.fx * c.x / c.z + i.skew * c.y / c.z + self.centre[0],
                i.fy * c.y / c.z + self.centre[1],
            ]
        } else {
            [f64::MAX, f64::MAX]
        };
        self.background.value(p)
    }

    /// What every sub-square of a region whose rays all exist shows, from the bounding boxes
    /// of the region's corner hits on each face: one value, the background, or a mix that
    /// needs the sub-squares one by one. The region's sub-square centres hit each plane inside
    /// the convex hull of its corner hits (a positive combination of rays that all meet the
    /// plane ahead), hence inside the box, so the face [`Self::sub_value`] picks is known.
    fn classify(&self, boxes: &[FaceBox]) -> Class {
        let mut seen: Option<usize> = None;
        for (fi, (f, b)) in self.faces.iter().zip(boxes).enumerate() {
            if b.hit == 0 {
                continue;
            }
            if b.hit != b.corners {
                return Class::Mixed;
            }
            let bb = &b.bb;
            if bb[2] < 0.0 || bb[0] > f.w || bb[3] < 0.0 || bb[1] > f.h {
                continue;
            }
            if seen.is_none() && bb[0] >= 0.0 && bb[1] >= 0.0 && bb[2] <= f.w && bb[3] <= f.h {
                seen = Some(fi);
                continue;
            }
            return Class::Mixed;
        }
        let Some(fi) = seen else {
            return self.background.plain().map_or(Class::Background, Class::Value);
        };
        let f = &self.faces[fi];
        if !f.front {
            return Class::Value(self.back);
        }
        f.uniform_value(&boxes[fi].bb).map_or(Class::Mixed, Class::Value)
    }

    /// Whether any occluder's bounds meet the image rectangle `[x0, x1] x [y0, y1]`.
    fn occluders_meet(&self, x0: f64, y0: f64, x1: f64, y1: f64) -> bool {
        self.occluders.iter().any(|o| {
            let b = o.bounds();
            !(b[0] >= x1 || b[2] <= x0 || b[1] >= y1 || b[3] <= y0)
        })
    }

    /// Composites the occluders over a sub-square `[x0, x0 + e] x [y0, y0 + e]`.
    fn occlude(&self, v: f64, x0: f64, y0: f64, e: f64) -> f64 {
        let mut v = v;
        for o in self.occluders {
            let b = o.bounds();
            if b[0] >= x0 + e || b[2] <= x0 || b[1] >= y0 + e || b[3] <= y0 {
                continue;
            }
            let a = match o {
                Occluder::Disc { centre, radius, .. } => {
                    square_disc_area(x0, y0, e, *centre, *radius)
                }
                Occluder::Polygon { points, .. } => {
                    polygon_rect_area(points, x0, y0, x0 + e, y0 + e)
                }
            };
            let frac = (a / (e * e)).clamp(0.0, 1.0);
            v = frac * o.reflectance() + (1.0 - frac) * v;
        }
        v
    }
}

/// 1-D Gaussian sampled at sub-square spacing `1/s`, unit sum, half-width `pad` taps.
fn gaussian_taps(sigma_px: f64, s: usize) -> Vec<f64> {
    let sigma = sigma_px * s as f64;
    if sigma < 1e-3 {
        return vec![1.0];
    }
    let pad = (GAUSS_SIGMAS * sigma).ceil() as usize;
    let mut g: Vec<f64> = (0..=2 * pad)
        .map(|k| {
            let x = k as f64 - pad as f64;
            (-0.5 * x * x / (sigma * sigma)).exp()
        })
        .collect();
    let sum: f64 = g.iter().sum();
    g.iter_mut().for_each(|v| *v /= sum);
    g
}

/// `c = box_s * g / s`: Gaussian and pixel box in one symmetric kernel of `s + 2 pad` taps.
fn combined_taps(g: &[f64], s: usize) -> Vec<f64> {
    let len = g.len() + s - 1;
    let mut c = vec![0.0; len];
    for (k, ck) in c.iter_mut().enumerate() {
        for m in 0..s {
            if k >= m && k - m < g.len() {
                *ck += g[k - m];
            }
        }
        *ck /= s as f64;
    }
    c
}

/// A kernel applied with stride `s`, split by phase: `out[x] = sum_k c[k] v[s x + k]` becomes
/// `sum_j sum_m c[s j + m] p_m[x + j]` with the phase rows `p_m[i] = v[s i + m]`, so each
/// tap is one multiply-add along contiguous memory (vectorised), in a fixed order.
struct StrideKernel {
    s: usize,
    /// Taps per phase (`c` padded with zeros to a multiple of `s`).
    nj: usize,
    taps: Vec<f64>,
}

impl StrideKernel {
    fn new(c: &[f64], s: usize) -> StrideKernel {
        let nj = c.len().div_ceil(s);
        let mut taps = c.to_vec();
        taps.resize(nj * s, 0.0);
        StrideKernel { s, nj, taps }
    }

    /// Length of an input row for `n` outputs: the padding beyond the data meets only zero
    /// taps.
    fn row_len(&self, n: usize) -> usize {
        (n + self.nj - 1) * self.s
    }

    fn apply(&self, v: &[f64], phases: &mut [f64], out: &mut [f64]) {
        let (s, n) = (self.s, out.len());
        let np = n + self.nj - 1;
        for m in 0..s {
            let p = &mut phases[m * np..(m + 1) * np];
            for (i, pi) in p.iter_mut().enumerate() {
                *pi = v[i * s + m];
            }
        }
        out.fill(0.0);
        for j in 0..self.nj {
            for m in 0..s {
                let w = self.taps[j * s + m];
                let p = &phases[m * np + j..m * np + j + n];
                for (o, pv) in out.iter_mut().zip(p) {
                    *o += w * pv;
                }
            }
        }
    }
}

/// Pillbox of radius `r` pixels on the pixel grid: exact disc area per pixel, unit sum.
fn pillbox_taps(r: f64) -> (usize, Vec<f64>) {
    if r <= 0.0 {
        return (0, vec![1.0]);
    }
    let pad = (r + 0.5).ceil() as usize;
    let n = 2 * pad + 1;
    let mut w = vec![0.0; n * n];
    for dy in 0..n {
        for dx in 0..n {
            let x0 = dx as f64 - pad as f64 - 0.5;
            let y0 = dy as f64 - pad as f64 - 0.5;
            w[dy * n + dx] = square_disc_area(x0, y0, 1.0, [0.0, 0.0], r);
        }
    }
    let sum: f64 = w.iter().sum();
    w.iter_mut().for_each(|v| *v /= sum);
    (pad, w)
}

/// The optical image of one view: blurred reflectance per pixel, `0..1`.
pub(crate) fn optical_image(scene: &Scene, index: usize, pose: &Pose) -> FloatImage {
    let camera = &scene.camera;
    let s = scene.supersampling as usize;
    let g = gaussian_taps(scene.optics.psf_sigma_px, s);
    let pad_sub = (g.len() - 1) / 2;
    let c = combined_taps(&g, s);
    let (pad_px, pill) = pillbox_taps(scene.optics.defocus_radius_px);
    let raster = ViewRaster {
        camera,
        caster: RayCaster::new(camera),
        faces: scene.target.faces().iter().map(|f| FaceView::new(f, pose)).collect(),
        background: BackgroundView::new(&scene.background, camera, scene.seed, index),
        occluders: &scene.occluders,
        back: scene.photometry.back_reflectance,
        centre: [(camera.width as f64 - 1.0) * 0.5, (camera.height as f64 - 1.0) * 0.5],
        s,
        pad_sub,
        pad_px,
    };
    let (w, h) = (camera.width as usize, camera.height as usize);
    let (ew, eh) = (w + 2 * pad_px, h + 2 * pad_px);
    let (sw, sh) = (ew * s + 2 * pad_sub, eh * s + 2 * pad_sub);
    let nf = raster.faces.len();
    let e = 1.0 / s as f64;

    // Pass 1: coverage of each sub-row, blurred and box-averaged along x (`mid`, sh x ew).
    let corners = CornerRays::new(
        &raster.caster,
        (0..=sw).map(|i| raster.corner(i)).collect(),
        (0..=sh).map(|j| raster.corner(j)).collect(),
    );
    let kernel = StrideKernel::new(&c, s);
    let ncx = sw + 1;
    let mut mid = vec![0.0f64; sh * ew];
    mid.par_chunks_mut(CHUNK_ROWS * ew).enumerate().for_each(|(chunk, out)| {
        let j0 = chunk * CHUNK_ROWS;
        let rows = out.len() / ew;
        let nc = (rows + 1) * ncx;
        // Corner rays and per-face hits for corner rows j0 ..= j0 + rows.
        let mut rays = Vec::with_capacity(nc);
        corners.rows_into(j0, rows + 1, &mut rays);
        let mut hits: Vec<Option<Xy>> = Vec::with_capacity(nf * nc);
        for f in &raster.faces {
            hits.extend(rays.iter().map(|r| r.and_then(|d| f.hit(&d)).map(|(_, q)| q)));
        }
        let hits_of = |fi: usize| &hits[fi * nc..(fi + 1) * nc];
        let cw = kernel.row_len(ew);
        let mut cov = vec![0.0f64; rows * cw];
        let mut boxes = vec![FaceBox::EMPTY; nf];
        let mut quad_hits = vec![[None; 4]; nf];
        // One sub-square's value, from its own corners when its tile was mixed.
        let mut single = |jr: usize, i: usize, boxes: &mut [FaceBox]| -> f64 {
            let a = jr * ncx + i;
            let idx = [a, a + 1, a + ncx + 1, a + ncx];
            let r = idx.map(|k| rays[k].as_ref());
            if let [Some(r0), Some(r1), Some(r2), Some(r3)] = r {
                for (fi, b) in boxes.iter_mut().enumerate() {
                    let h = hits_of(fi);
                    *b = FaceBox::EMPTY;
                    idx.iter().for_each(|&k| b.add(&h[k]));
                }
                match raster.classify(boxes) {
                    Class::Value(v) => return v,
                    Class::Background => return raster.background_at(&(r0 + r1 + r2 + r3)),
                    Class::Mixed => {}
                }
            }
            for (fi, qh) in quad_hits.iter_mut().enumerate() {
                let h = hits_of(fi);
                *qh = idx.map(|k| h[k]);
            }
            raster.sub_value(r, &quad_hits)
        };
        for tr in (0..rows).step_by(TILE) {
            let tr1 = (tr + TILE).min(rows);
            for tc in (0..sw).step_by(TILE) {
                let tc1 = (tc + TILE).min(sw);
                let rays_ok = (tr..=tr1)
                    .all(|jr| rays[jr * ncx + tc..=jr * ncx + tc1].iter().all(|r| r.is_some()));
                let class = if rays_ok {
                    for (fi, b) in boxes.iter_mut().enumerate() {
                        let h = hits_of(fi);
                        *b = FaceBox::EMPTY;
                        for jr in tr..=tr1 {
                            h[jr * ncx + tc..=jr * ncx + tc1].iter().for_each(|q| b.add(q));
                        }
                    }
                    raster.classify(&boxes)
                } else {
                    Class::Mixed
                };
                for jr in tr..tr1 {
                    let row = &mut cov[jr * cw..jr * cw + sw];
                    for (i, cv) in row.iter_mut().enumerate().take(tc1).skip(tc) {
                        *cv = match class {
                            Class::Value(v) => v,
                            Class::Background => {
                                let a = jr * ncx + i;
                                let sum = [a, a + 1, a + ncx + 1, a + ncx]
                                    .iter()
                                    .fold(Vector3::zeros(), |acc, &k| {
                                        acc + rays[k].unwrap_or_else(Vector3::zeros)
                                    });
                                raster.background_at(&sum)
                            }
                            Class::Mixed => single(jr, i, &mut boxes),
                        };
                    }
                }
                let (x0, x1) = (raster.corner(tc), raster.corner(tc1));
                let (y0, y1) = (raster.corner(j0 + tr), raster.corner(j0 + tr1));
                if raster.occluders_meet(x0, y0, x1, y1) {
                    for jr in tr..tr1 {
                        let y = raster.corner(j0 + jr);
                        for i in tc..tc1 {
                            let v = &mut cov[jr * cw + i];
                            *v = raster.occlude(*v, raster.corner(i), y, e);
                        }
                    }
                }
            }
        }
        let mut phases = vec![0.0f64; cw];
        for (jr, row) in out.chunks_mut(ew).enumerate() {
            kernel.apply(&cov[jr * cw..(jr + 1) * cw], &mut phases, row);
        }
    });

    // Pass 2: along y, giving the extended pixel image (eh x ew).
    let mut ext = vec![0.0f64; eh * ew];
    ext.par_chunks_mut(ew).enumerate().for_each(|(y, row)| {
        // Row by row of `mid`, so that memory is read in order.
        let base = y * s;
        for (k, ck) in c.iter().enumerate() {
            let src = &mid[(base + k) * ew..(base + k + 1) * ew];
            for (o, v) in row.iter_mut().zip(src) {
                *o += ck * v;
            }
        }
    });

    // Pass 3: defocus on the pixel grid, cropping the padding.
    let n = 2 * pad_px + 1;
    let mut data = vec![0.0f64; w * h];
    data.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        for (x, o) in row.iter_mut().enumerate() {
            let mut acc = 0.0;
            for dy in 0..n {
                let src = &ext[(y + dy) * ew + x..(y + dy) * ew + x + n];
                acc += pill[dy * n..(dy + 1) * n].iter().zip(src).map(|(a, b)| a * b).sum::<f64>();
            }
            *o = acc.clamp(0.0, 1.0);
        }
    });
    FloatImage { width: w, height: h, data }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn kernels_are_symmetric_with_unit_sum() {
        for (sigma, s) in [(0.0, 4), (0.5, 4), (1.0, 4), (2.5, 3), (1.3, 1)] {
            let c = combined_taps(&gaussian_taps(sigma, s), s);
            let sum: f64 = c.iter().sum();
            assert!((sum - 1.0).abs() < 1e-14, "sum {sum}");
            for k in 0..c.len() {
                assert!((c[k] - c[c.len() - 1 - k]).abs() < 1e-16);
            }
        }
        let (pad, p) = pillbox_taps(2.3);
        let n = 2 * pad + 1;
        assert!((p.iter().sum::<f64>() - 1.0).abs() < 1e-14);
        for dy in 0..n {
            for dx in 0..n {
                assert!((p[dy * n + dx] - p[(n - 1 - dy) * n + (n - 1 - dx)]).abs() < 1e-16);
                assert!((p[dy * n + dx] - p[dx * n + dy]).abs() < 1e-16);
            }
        }
    }
}
