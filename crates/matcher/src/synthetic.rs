//! Synthetic detections with exact truth, for the matcher's tests and benchmarks: a target's
//! features projected through a [`Camera`] and a [`Pose`], with noise, dropped features,
//! occluders, clutter and the face-code marks, in shuffled order.
//!
//! Checker corners carry the projected directions of the two grid lines through them, dots the
//! ellipse that the camera's local Jacobian makes of their circle, squares their four corners
//! clockwise from the one nearest the image's top-left corner, as the detector reports them.
//! Clutter never lies within 0.35 feature spacings of a true feature: a detection there would
//! be the feature itself.

use facetcal_detector::{CheckerCorner, Detections, Dot, Ellipse, Mark, SquareOutline};
use facetcal_model::{
    Camera, Face, FeatureId, Ink, PatternKind, PatternSpec, Pose, SeededRng, Target,
};
use nalgebra::{Matrix2, Point2, Point3, Vector2, Vector3};

use crate::{DetectionKind, Identification};

/// What happens to the ideal projections.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Scene {
    /// Standard deviation of the position noise, pixels. Default 0.1.
    pub noise_px: f64,
    /// Probability that a feature is not detected. Default 0.
    pub drop: f64,
    /// Probability that a mark is not detected. Default 0.
    pub mark_drop: f64,
    /// Clutter detections added to each list the target uses. Default 0.
    pub clutter: usize,
    /// Clutter marks. Default 0.
    pub clutter_marks: usize,
    /// Occluding discs placed at random in the image. Default 0.
    pub occluders: usize,
    /// Radius of each occluder as a fraction of the image's shorter side. Default 0.15.
    pub occluder_radius: f64,
}

impl Default for Scene {
    fn default() -> Self {
        Scene {
            noise_px: 0.1,
            drop: 0.0,
            mark_drop: 0.0,
            clutter: 0,
            clutter_marks: 0,
            occluders: 0,
            occluder_radius: 0.15,
        }
    }
}

/// Detections and the truth of each.
#[derive(Clone, Debug, Default)]
pub struct Synthetic {
    /// The detections.
    pub detections: Detections,
    /// Truth of each checker corner (`None` for clutter).
    pub corners: Vec<Option<FeatureId>>,
    /// Truth of each dot.
    pub dots: Vec<Option<FeatureId>>,
    /// Truth of each square's four detected corners.
    pub squares: Vec<Option<[FeatureId; 4]>>,
}

/// Correct, wrong and total identities of an identification against the truth.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Score {
    /// Identities equal to the truth.
    pub correct: usize,
    /// Identities that differ from the truth, including clutter given an identity.
    pub wrong: usize,
    /// True features among the detections.
    pub truth: usize,
}

impl std::ops::Add for Score {
    type Output = Score;
    fn add(self, o: Score) -> Score {
        Score {
            correct: self.correct + o.correct,
            wrong: self.wrong + o.wrong,
            truth: self.truth + o.truth,
        }
    }
}

impl Synthetic {
    /// True features among the detections (four per true square).
    pub fn true_count(&self) -> usize {
        self.corners.iter().flatten().count()
            + self.dots.iter().flatten().count()
            + 4 * self.squares.iter().flatten().count()
    }

    /// Scores an identification of these detections.
    pub fn score(&self, id: &Identification) -> Score {
        let mut s = Score { truth: self.true_count(), ..Score::default() };
        for c in id.points() {
            let truth = match c.detection.kind {
                DetectionKind::CheckerCorner => {
                    self.corners.get(c.detection.index).copied().flatten()
                }
                DetectionKind::Dot => self.dots.get(c.detection.index).copied().flatten(),
                DetectionKind::Square => {
                    let sq = self.detections.squares.get(c.detection.index);
                    let t = self.squares.get(c.detection.index).copied().flatten();
                    match (sq, t) {
                        (Some(sq), Some(t)) => (0..4)
                            .find(|&m| {
                                sq.corners[m].x == c.image[0] && sq.corners[m].y == c.image[1]
                            })
                            .map(|m| t[m]),
                        _ => None,
                    }
                }
            };
            if truth == Some(c.id) {
                s.correct += 1;
            } else {
                s.wrong += 1;
            }
        }
        s
    }
}

fn project(camera: &Camera, pose: &Pose, x: &Point3<f64>) -> Option<Point2<f64>> {
    let xc = pose.transform(x);
    if xc.z <= 0.0 {
        return None;
    }
    camera.project(&xc).ok().filter(|p| p.x.is_finite() && p.y.is_finite())
}

/// Image Jacobian of the face-frame point `p` along the face's x and y axes.
fn face_jacobian(
    camera: &Camera,
    pose: &Pose,
    face: &Face,
    p: &Point2<f64>,
    step: f64,
) -> Option<Matrix2<f64>> {
    let at =
        |dx: f64, dy: f64| project(camera, pose, &face.to_target(&Point2::new(p.x + dx, p.y + dy)));
    let jx = (at(step, 0.0)? - at(-step, 0.0)?) / (2.0 * step);
    let jy = (at(0.0, step)? - at(0.0, -step)?) / (2.0 * step);
    Some(Matrix2::from_columns(&[jx, jy]))
}

fn front_facing(pose: &Pose, face: &Face) -> bool {
    let n = pose.rotation * face.normal();
    let o = pose.transform(&face.to_target(&Point2::new(0.0, 0.0)));
    n.dot(&o.coords) > 0.0
}

fn shuffle<T>(v: &mut [T], rng: &mut SeededRng) {
    for i in (1..v.len()).rev() {
        let j = rng.below(i as u64 + 1) as usize;
        v.swap(i, j);
    }
}

/// The edge lines of checker corner `(row, col)` in the detector's parity order: the cell
/// towards face `+x +y` is dark when `row + col` is even (cell `(row + 1, col + 1)`), and the
/// face map keeps the handedness, so the dark sector then runs from the image of `+x` to that
/// of `+y`; otherwise from `+y` to `-x`.
fn checker_edges(j: &Matrix2<f64>, row_plus_col: u32) -> [Vector2<f64>; 2] {
    let (x, y) = (angle_dir(j.column(0).into()), angle_dir(j.column(1).into()));
    if row_plus_col % 2 == 0 { [x, y] } else { [y, x] }
}

fn angle_dir(v: Vector2<f64>) -> Vector2<f64> {
    let v = v.normalize();
    // Angles in [0, pi).
    if v.y < 0.0 || (v.y == 0.0 && v.x < 0.0) { -v } else { v }
}

fn ellipse_of(m: Matrix2<f64>, centre: Point2<f64>) -> Ellipse {
    let svd = m.svd(true, false);
    let u = svd.u.unwrap_or_else(Matrix2::identity);
    let (a, b) = (svd.singular_values[0], svd.singular_values[1]);
    let (major, minor, col) = if a >= b { (a, b, 0) } else { (b, a, 1) };
    let mut angle = u[(1, col)].atan2(u[(0, col)]);
    if angle > std::f64::consts::FRAC_PI_2 {
        angle -= std::f64::consts::PI;
    } else if angle <= -std::f64::consts::FRAC_PI_2 {
        angle += std::f64::consts::PI;
    }
    Ellipse { centre, semi_major: major, semi_minor: minor, angle }
}

/// Detections of `target` seen by `camera` from `pose`, disturbed as `scene` says, with seed
/// `seed`.
pub fn synthesize(
    target: &Target,
    camera: &Camera,
    pose: &Pose,
    scene: &Scene,
    seed: u64,
) -> Synthetic {
    let mut rng = SeededRng::new(seed);
    let (w, h) = (camera.width as f64, camera.height as f64);
    let short = w.min(h);
    let occluders: Vec<(Point2<f64>, f64)> = (0..scene.occluders)
        .map(|_| (Point2::new(rng.range(0.0, w), rng.range(0.0, h)), scene.occluder_radius * short))
        .collect();
    let hidden = |p: &Point2<f64>| occluders.iter().any(|(c, r)| (p - c).norm() < *r);
    let visible = |p: &Point2<f64>| camera.contains(p, -1.0) && !hidden(p);
    let mut out = Synthetic {
        detections: Detections {
            width: camera.width,
            height: camera.height,
            ..Detections::default()
        },
        ..Synthetic::default()
    };
    let mut ideal: Vec<Point2<f64>> = Vec::new();
    let mut spacing_px: Vec<f64> = Vec::new();
    let noisy = |p: Point2<f64>, rng: &mut SeededRng| {
        Point2::new(p.x + scene.noise_px * rng.normal(), p.y + scene.noise_px * rng.normal())
    };
    for face in target.faces() {
        if !front_facing(pose, face) {
            continue;
        }
        let step = 0.01 * face.pattern().feature_spacing();
        match face.pattern() {
            PatternSpec::SquareGrid { .. } => {
                let (rows, cols) = face.feature_grid();
                for row in 0..rows {
                    for col in 0..cols {
                        let mut pts = [Point2::origin(); 4];
                        let mut ok = true;
                        for k in 0..4u8 {
                            match face
                                .feature_local(row, col, k)
                                .and_then(|l| project(camera, pose, &face.to_target(&l)))
                            {
                                Some(p) => pts[k as usize] = p,
                                None => ok = false,
                            }
                        }
                        if !ok {
                            continue;
                        }
                        ideal.extend_from_slice(&pts);
                        spacing_px.push((pts[1] - pts[0]).norm());
                        if !pts.iter().all(visible) || rng.uniform() < scene.drop {
                            continue;
                        }
                        let start = (0..4)
                            .min_by(|&a, &b| {
                                (pts[a].x + pts[a].y).total_cmp(&(pts[b].x + pts[b].y))
                            })
                            .unwrap_or(0);
                        let mut corners = [Point2::origin(); 4];
                        let mut truth = [FeatureId { face: face.id(), row, col, corner: 0 }; 4];
                        for m in 0..4 {
                            let k = (start + m) % 4;
                            corners[m] = noisy(pts[k], &mut rng);
                            truth[m].corner = k as u8;
                        }
                        out.detections
                            .squares
                            .push(SquareOutline { corners, sigma: scene.noise_px });
                        out.squares.push(Some(truth));
                    }
                }
            }
            _ => {
                for (id, local) in face.features_local() {
                    let Some(p) = project(camera, pose, &face.to_target(&local)) else { continue };
                    let Some(j) = face_jacobian(camera, pose, face, &local, step) else { continue };
                    ideal.push(p);
                    let sp = face.pattern().feature_spacing();
                    spacing_px.push(
                        (j * Vector2::new(sp, 0.0)).norm().min((j * Vector2::new(0.0, sp)).norm()),
                    );
                    if !visible(&p) || rng.uniform() < scene.drop {
                        continue;
                    }
                    let q = noisy(p, &mut rng);
                    match face.pattern() {
                        PatternSpec::Checkerboard { .. } => {
                            out.detections.checker_corners.push(CheckerCorner {
                                position: q,
                                sigma: scene.noise_px,
                                strength: 1.0,
                                edges: checker_edges(&j, id.row + id.col),
                            });
                            out.corners.push(Some(id));
                        }
                        PatternSpec::DotGrid { diameter, .. } => {
                            let e = ellipse_of(j * (0.5 * diameter), q);
                            out.detections.dots.push(Dot {
                                centre: q,
                                sigma: scene.noise_px,
                                ellipse: e,
                                ink: face.ground().inverse(),
                                area: std::f64::consts::PI * e.semi_major * e.semi_minor,
                            });
                            out.dots.push(Some(id));
                        }
                        PatternSpec::SquareGrid { .. } => {}
                    }
                }
            }
        }
        for &(r, c) in face.marks() {
            let local = face.mark_centre(r, c);
            let Some(p) = project(camera, pose, &face.to_target(&local)) else { continue };
            if !visible(&p) || rng.uniform() < scene.mark_drop {
                continue;
            }
            let d = face_jacobian(camera, pose, face, &local, step)
                .map(|j| face.mark_diameter() * j.determinant().abs().sqrt())
                .unwrap_or(1.0);
            out.detections.marks.push(Mark {
                centre: noisy(p, &mut rng),
                diameter: d,
                ink: face.mark_ink(r, c),
            });
        }
    }
    // Clutter, away from every true feature.
    spacing_px.sort_by(f64::total_cmp);
    let spacing = spacing_px.get(spacing_px.len() / 2).copied().unwrap_or(20.0);
    let clear = 0.35 * spacing;
    let far = |p: &Point2<f64>| ideal.iter().all(|q| (p - q).norm() >= clear);
    let kinds = target.pattern_kinds();
    let mut tries = 0;
    let mut added = 0;
    while added < scene.clutter * kinds.len() && tries < 100 * (scene.clutter + 1) {
        tries += 1;
        let p = Point2::new(rng.range(0.0, w - 1.0), rng.range(0.0, h - 1.0));
        if !far(&p) {
            continue;
        }
        let kind = kinds[added % kinds.len()];
        added += 1;
        let a = rng.range(0.0, std::f64::consts::PI);
        let b = a + rng.range(0.3, 2.8);
        match kind {
            PatternKind::Checkerboard => {
                out.detections.checker_corners.push(CheckerCorner {
                    position: p,
                    sigma: scene.noise_px,
                    strength: 0.5,
                    edges: [
                        angle_dir(Vector2::new(a.cos(), a.sin())),
                        angle_dir(Vector2::new(b.cos(), b.sin())),
                    ],
                });
                out.corners.push(None);
            }
            PatternKind::DotGrid => {
                let r = rng.range(0.1, 0.4) * spacing;
                out.detections.dots.push(Dot {
                    centre: p,
                    sigma: scene.noise_px,
                    ellipse: Ellipse {
                        centre: p,
                        semi_major: r,
                        semi_minor: r * rng.range(0.4, 1.0),
                        angle: a - 1.5,
                    },
                    ink: Ink::Dark,
                    area: 3.0 * r * r,
                });
                out.dots.push(None);
            }
            PatternKind::SquareGrid => {
                let s = rng.range(0.3, 0.7) * spacing;
                let (c, si) = (a.cos() * s, a.sin() * s);
                let mut corners = [
                    p,
                    p + Vector2::new(c, si),
                    p + Vector2::new(c - si, si + c),
                    p + Vector2::new(-si, c),
                ];
                let start = (0..4)
                    .min_by(|&x, &y| {
                        (corners[x].x + corners[x].y).total_cmp(&(corners[y].x + corners[y].y))
                    })
                    .unwrap_or(0);
                corners.rotate_left(start);
                out.detections.squares.push(SquareOutline { corners, sigma: scene.noise_px });
                out.squares.push(None);
            }
        }
    }
    for _ in 0..scene.clutter_marks {
        let p = Point2::new(rng.range(0.0, w - 1.0), rng.range(0.0, h - 1.0));
        let ink = if rng.uniform() < 0.5 { Ink::Dark } else { Ink::Light };
        out.detections.marks.push(Mark { centre: p, diameter: 0.3 * spacing, ink });
    }
    // Detectors report in their own order: shuffle, keeping the truth aligned.
    let d = &mut out.detections;
    let mut pc: Vec<_> = d.checker_corners.drain(..).zip(out.corners.drain(..)).collect();
    shuffle(&mut pc, &mut rng);
    (d.checker_corners, out.corners) = pc.into_iter().unzip();
    let mut pd: Vec<_> = d.dots.drain(..).zip(out.dots.drain(..)).collect();
    shuffle(&mut pd, &mut rng);
    (d.dots, out.dots) = pd.into_iter().unzip();
    let mut ps: Vec<_> = d.squares.drain(..).zip(out.squares.drain(..)).collect();
    shuffle(&mut ps, &mut rng);
    (d.squares, out.squares) = ps.into_iter().unzip();
    shuffle(&mut d.marks, &mut rng);
    out
}

/// A random view of the target from its front side: the viewing direction within `tilt_deg`
/// of the mean front direction of the faces, a random roll, the target's bounding sphere
/// spanning `fill` x the image's shorter side, and its centre shifted by up to `shift` x the
/// image size from the image centre.
pub fn random_view(
    target: &Target,
    camera: &Camera,
    rng: &mut SeededRng,
    tilt_deg: f64,
    fill: f64,
    shift: f64,
) -> Pose {
    let (lo, hi) = target.bounds();
    let centre = Point3::from((lo.coords + hi.coords) * 0.5);
    let radius = 0.5 * (hi - lo).norm();
    let mut front = Vector3::zeros();
    for f in target.faces() {
        front -= f.normal();
    }
    let front = if front.norm() > 1e-9 { front.normalize() } else { -target.faces()[0].normal() };
    // A random direction within the tilt cone around `front`.
    let any = if front.x.abs() < 0.9 { Vector3::x() } else { Vector3::y() };
    let u = front.cross(&any).normalize();
    let v = front.cross(&u);
    let phi = rng.range(0.0, std::f64::consts::TAU);
    let tilt = tilt_deg.to_radians() * rng.uniform().sqrt();
    let dir = (front * tilt.cos() + (u * phi.cos() + v * phi.sin()) * tilt.sin()).normalize();
    let f = camera.intrinsics.fx.min(camera.intrinsics.fy);
    let short = camera.width.min(camera.height) as f64;
    let dist = radius * f / (0.5 * fill * short);
    let eye = centre + dir * dist;
    // Camera axes in the target frame: z towards the centre, x and y with a random roll.
    let z = -dir;
    let a = if z.x.abs() < 0.9 { Vector3::x() } else { Vector3::y() };
    let x0 = z.cross(&a).normalize();
    let y0 = z.cross(&x0);
    let roll = rng.range(0.0, std::f64::consts::TAU);
    let x = x0 * roll.cos() + y0 * roll.sin();
    let y = z.cross(&x);
    let r_cw = nalgebra::Matrix3::from_columns(&[x, y, z]);
    let r = r_cw.transpose();
    // Shift the target in the image: move the camera sideways.
    let sx = rng.range(-shift, shift) * camera.width as f64 / f * dist;
    let sy = rng.range(-shift, shift) * camera.height as f64 / f * dist;
    let eye = eye - x * sx - y * sy;
    Pose::from_matrix(&r, -(r * eye.coords))
}
