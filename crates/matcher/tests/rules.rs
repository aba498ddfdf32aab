//! The decision rule's promises: ambiguous views are refused with a reason, mirrored views are
//! never identified, a codeless symmetric face gets one consistent labeling, and the result does
//! not depend on the order of the detections.

use facetcal_detector::Detections;
use facetcal_matcher::synthetic::{Scene, Synthetic, random_view, synthesize};
use facetcal_matcher::{
    DetectionsFile, LeftOutReason, MatchError, MatchOptions, Rejection, identify,
};
use facetcal_model::{Camera, FeatureId, Pose, SeededRng, Target};
use nalgebra::{Point2, Vector2, Vector3};

fn bundled(name: &str) -> Target {
    let path = format!("{}/../../targets/{name}.json", env!("CARGO_MANIFEST_DIR"));
    Target::load(std::path::Path::new(&path)).unwrap()
}

fn camera() -> Camera {
    Camera::pinhole(1280, 960, 1100.0, 1100.0, 639.5, 479.5)
}

fn checker_target(faces: &str) -> Target {
    Target::from_json(&format!(
        r#"{{"format": "facetcal-target", "version": 1, "name": "t", "unit": "mm", "faces": [{faces}]}}"#
    ))
    .unwrap()
}

fn face(id: u32, x: f64, rows: u32, cols: u32, marks: &str) -> String {
    format!(
        r#"{{"id": {id}, "pose": {{"rotation": [0,0,0], "translation": [{x},0,0]}},
            "pattern": {{"kind": "checkerboard", "rows": {rows}, "columns": {cols}, "cell": 20}},
            "margin": 10, "marks": {marks}}}"#
    )
}

fn is_refusal(r: &Rejection) -> bool {
    matches!(
        r,
        Rejection::Ambiguous { .. } | Rejection::TooFewMarks { .. } | Rejection::TooClose { .. }
    )
}

#[test]
fn two_identical_codeless_faces_are_refused_as_ambiguous() {
    let t =
        checker_target(&format!("{}, {}", face(1, 0.0, 6, 8, "[]"), face(2, 200.0, 6, 8, "[]")));
    let pose =
        Pose::from_axis_angle(Vector3::new(0.1, 0.05, 0.0), Vector3::new(-190.0, -60.0, 700.0));
    let s = synthesize(&t, &camera(), &pose, &Scene::default(), 3);
    assert!(s.true_count() > 60);
    let id = identify(&s.detections, &t, &MatchOptions::default()).unwrap();
    assert_eq!(id.point_count(), 0);
    assert_eq!(id.rejected.len(), 2, "{:?}", id.rejected);
    assert!(
        id.rejected.iter().all(|r| matches!(r, Rejection::Ambiguous { .. })),
        "{:?}",
        id.rejected
    );
    // Every true detection carries the reason.
    assert!(id.left_out.iter().all(|l| matches!(l.reason, LeftOutReason::Candidate { .. })));
}

#[test]
fn a_codeless_single_face_seen_in_part_is_refused() {
    let t = checker_target(&face(1, 0.0, 7, 9, "[]"));
    // Close enough that the image border cuts the board.
    let pose =
        Pose::from_axis_angle(Vector3::new(0.0, 0.0, 0.0), Vector3::new(-60.0, -50.0, 180.0));
    let s = synthesize(&t, &camera(), &pose, &Scene::default(), 4);
    assert!(s.true_count() >= 9 && s.true_count() < 48, "{}", s.true_count());
    let id = identify(&s.detections, &t, &MatchOptions::default()).unwrap();
    assert_eq!(id.point_count(), 0);
    assert!(!id.rejected.is_empty() && id.rejected.iter().all(is_refusal), "{:?}", id.rejected);
}

/// Keeps only the detections inside a window of the image.
fn crop(s: &Synthetic, lo: Point2<f64>, hi: Point2<f64>) -> Synthetic {
    let inside = |p: &Point2<f64>| p.x >= lo.x && p.y >= lo.y && p.x <= hi.x && p.y <= hi.y;
    let mut out = s.clone();
    let keep: Vec<bool> =
        s.detections.checker_corners.iter().map(|c| inside(&c.position)).collect();
    let mut k = keep.iter();
    out.detections.checker_corners.retain(|_| *k.next().unwrap());
    let mut k = keep.iter();
    out.corners.retain(|_| *k.next().unwrap());
    out.detections.marks.retain(|m| inside(&m.centre));
    out
}

#[test]
fn small_patches_without_a_decisive_code_are_refused_never_mislabelled() {
    // Windows of every size slid over a frontal view: each is identified correctly or refused
    // with a reason; the small ones cannot be decisive.
    let t = bundled("checkerboard");
    let pose =
        Pose::from_axis_angle(Vector3::new(0.0, 0.0, 0.0), Vector3::new(-140.0, -110.0, 560.0));
    let s = synthesize(&t, &camera(), &pose, &Scene::default(), 5);
    let (mut refused, mut identified, mut tiny_refused) = (0, 0, 0);
    for size in [90.0, 130.0, 170.0, 250.0, 400.0] {
        let mut y = 0.0;
        while y + size <= 960.0 {
            let mut x = 0.0;
            while x + size <= 1280.0 {
                let c = crop(&s, Point2::new(x, y), Point2::new(x + size, y + size));
                let id = identify(&c.detections, &t, &MatchOptions::default()).unwrap();
                let sc = c.score(&id);
                assert_eq!(sc.wrong, 0, "window {x} {y} {size}");
                if id.point_count() > 0 {
                    identified += 1;
                } else if !id.rejected.is_empty() {
                    assert!(id.rejected.iter().all(|r| !r.to_string().is_empty()));
                    refused += 1;
                    if size <= 130.0 {
                        tiny_refused += 1;
                    }
                }
                x += size / 3.0;
            }
            y += size / 3.0;
        }
    }
    eprintln!("windows: {identified} identified, {refused} refused ({tiny_refused} small)");
    assert!(refused > 10 && identified > 10 && tiny_refused > 5);
}

/// The detections of the mirror image `x -> w - 1 - x`.
fn mirrored(d: &Detections) -> Detections {
    let w = d.width as f64 - 1.0;
    let flip = |p: Point2<f64>| Point2::new(w - p.x, p.y);
    let flip_dir = |v: Vector2<f64>| {
        let u = Vector2::new(-v.x, v.y);
        if u.y < 0.0 || (u.y == 0.0 && u.x < 0.0) { -u } else { u }
    };
    let mut m = d.clone();
    for c in &mut m.checker_corners {
        c.position = flip(c.position);
        c.edges = [flip_dir(c.edges[1]), flip_dir(c.edges[0])];
    }
    for dot in &mut m.dots {
        dot.centre = flip(dot.centre);
        dot.ellipse.centre = flip(dot.ellipse.centre);
        dot.ellipse.angle = -dot.ellipse.angle;
    }
    for s in &mut m.squares {
        // Flipped corners run anticlockwise; reverse, then start again nearest the top-left.
        let mut c: Vec<Point2<f64>> = s.corners.iter().rev().map(|&p| flip(p)).collect();
        let start =
            (0..4).min_by(|&a, &b| (c[a].x + c[a].y).total_cmp(&(c[b].x + c[b].y))).unwrap();
        c.rotate_left(start);
        s.corners = [c[0], c[1], c[2], c[3]];
    }
    for mk in &mut m.marks {
        mk.centre = flip(mk.centre);
    }
    m
}

#[test]
fn mirrored_views_are_never_identified() {
    let cam = camera();
    for name in ["checkerboard", "dot-grid", "square-grid", "corner", "fold"] {
        let t = bundled(name);
        for k in 0..20 {
            let mut rng = SeededRng::stream(21, k);
            let pose = random_view(&t, &cam, &mut rng, 35.0, 0.7, 0.05);
            let s = synthesize(&t, &cam, &pose, &Scene::default(), k);
            let straight = identify(&s.detections, &t, &MatchOptions::default()).unwrap();
            assert!(straight.point_count() as f64 >= 0.95 * s.true_count() as f64, "{name} {k}");
            let m = mirrored(&s.detections);
            let id = identify(&m, &t, &MatchOptions::default()).unwrap();
            assert_eq!(id.point_count(), 0, "{name} view {k}: a mirrored view was identified");
            assert!(!id.rejected.is_empty());
        }
    }
}

#[test]
fn a_codeless_symmetric_face_gets_one_consistent_labeling() {
    // A 7 x 9 cell board without a code: its inner-corner grid (6 x 8) has a 180 degree
    // symmetry, so two labelings are possible. The matcher must pick the one whose column axis
    // points along image +x, whatever the roll, and never a mirrored one.
    let t = checker_target(&face(1, 0.0, 7, 9, "[]"));
    let cam = camera();
    for k in 0..24 {
        let roll = -3.0 + 6.0 * k as f64 / 23.0; // radians, almost a full turn both ways
        let r = nalgebra::UnitQuaternion::from_scaled_axis(Vector3::new(0.0, 0.0, roll))
            * nalgebra::UnitQuaternion::from_scaled_axis(Vector3::new(0.25, -0.2, 0.0));
        let centre = Vector3::new(100.0, 80.0, 0.0);
        let pose = Pose { rotation: r, translation: Vector3::new(0.0, 0.0, 600.0) - r * centre };
        let s = synthesize(&t, &cam, &pose, &Scene::default(), k as u64);
        let id = identify(&s.detections, &t, &MatchOptions::default()).unwrap();
        assert_eq!(id.point_count(), s.true_count(), "roll {roll}: {:?}", id.rejected);
        let (mut same, mut turned) = (0, 0);
        for c in id.points() {
            let truth: FeatureId = s.corners[c.detection.index].unwrap();
            if truth == c.id {
                same += 1;
            } else if truth.row == 5 - c.id.row && truth.col == 7 - c.id.col {
                turned += 1;
            }
        }
        assert!(
            same == id.point_count() || turned == id.point_count(),
            "roll {roll}: mixed or mirrored"
        );
        // The chosen labeling's column axis points along image +x.
        let at = |row: u32, col: u32| {
            id.points().find(|c| c.id.row == row && c.id.col == col).map(|c| c.image).unwrap()
        };
        let (a, b) = (at(3, 2), at(3, 5));
        let cos = (b[0] - a[0]) / ((b[0] - a[0]).hypot(b[1] - a[1]));
        assert!(cos >= -1e-9, "roll {roll}: column axis points left ({cos})");
    }
}

#[test]
fn results_do_not_depend_on_detection_order() {
    let t = bundled("corner");
    let cam = camera();
    let mut rng = SeededRng::new(31);
    let pose = random_view(&t, &cam, &mut rng, 30.0, 0.8, 0.05);
    let scene = Scene { clutter: 30, drop: 0.05, clutter_marks: 2, ..Scene::default() };
    let a = synthesize(&t, &cam, &pose, &scene, 1);
    let id_a = identify(&a.detections, &t, &MatchOptions::default()).unwrap();
    let pairs = |id: &facetcal_matcher::Identification| {
        let mut v: Vec<(FeatureId, [u64; 2])> =
            id.points().map(|c| (c.id, [c.image[0].to_bits(), c.image[1].to_bits()])).collect();
        v.sort();
        v
    };
    // Reverse every list: same detections, other order.
    let mut d = a.detections.clone();
    d.checker_corners.reverse();
    d.marks.reverse();
    let id_b = identify(&d, &t, &MatchOptions::default()).unwrap();
    assert!(id_a.point_count() > 100);
    assert_eq!(pairs(&id_a), pairs(&id_b));
    // And twice the same input gives the same bytes.
    let again = identify(&a.detections, &t, &MatchOptions::default()).unwrap();
    assert_eq!(serde_json::to_string(&id_a).unwrap(), serde_json::to_string(&again).unwrap());
}

#[test]
fn non_finite_detections_are_left_out_and_nothing_is_nan() {
    let t = bundled("checkerboard");
    let pose =
        Pose::from_axis_angle(Vector3::new(0.1, 0.1, 0.0), Vector3::new(-140.0, -110.0, 700.0));
    let mut s = synthesize(&t, &camera(), &pose, &Scene::default(), 9);
    s.detections.checker_corners[0].position.x = f64::NAN;
    s.detections.checker_corners[1].edges[0].y = f64::INFINITY;
    s.detections.marks[0].centre.y = f64::NAN;
    let id = identify(&s.detections, &t, &MatchOptions::default()).unwrap();
    let nf = id.left_out.iter().filter(|l| l.reason == LeftOutReason::NotFinite).count();
    assert_eq!(nf, 2);
    assert!(id.point_count() >= s.true_count() - 3);
    let file = DetectionsFile::new("x.png", [1280, 960], &t, &id);
    let text = serde_json::to_string(&file).unwrap();
    assert!(!text.contains("NaN") && !text.contains("null"), "{text}");
    assert!(text.contains("\"format\":\"facetcal-detections\"") && text.contains("\"version\":1"));
    let back: DetectionsFile = serde_json::from_str(&text).unwrap();
    assert_eq!(back.left_out, file.left_out);
    let flat = |f: &DetectionsFile| -> Vec<_> {
        f.faces.iter().flat_map(|g| g.points.iter().map(|p| (p.id, p.x, p.y))).collect()
    };
    for (a, b) in flat(&back).iter().zip(flat(&file).iter()) {
        // serde_json's default float parsing may differ in the last bit.
        assert!(a.0 == b.0 && (a.1 - b.1).abs() < 1e-9 && (a.2 - b.2).abs() < 1e-9);
    }
    let view = id.view_points("x.png");
    assert_eq!(view.points.len(), id.point_count());
}

#[test]
fn options_are_checked_field_by_field() {
    assert!(MatchOptions::default().validate().is_ok());
    let cases: [(MatchOptions, &str); 5] = [
        (MatchOptions { gate: 0.0, ..Default::default() }, "gate"),
        (MatchOptions { gate: 0.7, ..Default::default() }, "gate"),
        (MatchOptions { residual: 0.4, ..Default::default() }, "residual"),
        (MatchOptions { min_nodes: 2, ..Default::default() }, "min_nodes"),
        (MatchOptions { mark_tolerance: f64::NAN, ..Default::default() }, "mark_tolerance"),
    ];
    for (o, field) in cases {
        match o.validate() {
            Err(MatchError::InvalidOption { field: f, .. }) => assert_eq!(f, field),
            other => panic!("{field}: {other:?}"),
        }
    }
}
