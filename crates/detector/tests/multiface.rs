//! Checker corners and marks on renders of the bundled multi-face targets (a fold and a box
//! corner), seen from their front direction: corners next to the fold between faces.

mod common;

use common::*;
use facetcal_detector::{DetectorOptions, detect};
use facetcal_model::{PatternKind, Pose, Target};
use facetcal_render::poses::front_direction;
use facetcal_render::{Scene, render_view};
use nalgebra::{Matrix3, Point2, Point3, Vector3};

/// A camera at `dist` from the centroid of the target's features along its front direction,
/// looking at the centroid, with a slight roll.
fn front_pose(target: &Target, dist: f64) -> Pose {
    let pts: Vec<Point3<f64>> = target
        .faces()
        .iter()
        .flat_map(|f| f.features_local().into_iter().map(move |(_, p)| f.to_target(&p)))
        .collect();
    let c = pts.iter().fold(Vector3::zeros(), |a, p| a + p.coords) / pts.len() as f64;
    let eye = c + front_direction(target) * dist;
    let z = (c - eye).normalize();
    let up = if z.x.abs() < 0.9 { Vector3::x() } else { Vector3::y() };
    let x = up.cross(&z).normalize();
    let y = z.cross(&x);
    let r = Matrix3::from_rows(&[x.transpose(), y.transpose(), z.transpose()]);
    let roll = Pose::from_axis_angle(Vector3::new(0.0, 0.0, 0.15), Vector3::zeros()).matrix();
    let r = roll * r;
    Pose::from_matrix(&r, -(r * eye))
}

#[test]
fn corners_next_to_folds() {
    for (name, dist) in [("fold.json", 900.0), ("corner.json", 900.0)] {
        let target = bundled(name);
        let marks: usize = target.faces().iter().map(|f| f.marks().len()).sum();
        let pose = front_pose(&target, dist);
        let scene = Scene::builder(target, standard_camera())
            .pose(pose)
            .psf_sigma_px(1.0)
            .noise_sigma(2.0)
            .seed(5)
            .build()
            .unwrap();
        let view = render_view(&scene, 0).unwrap();
        let det = detect(
            &to_detector(&view.image),
            &DetectorOptions::for_kind(PatternKind::Checkerboard),
        )
        .unwrap();
        let found: Vec<Point2<f64>> = det.checker_corners.iter().map(|c| c.position).collect();
        let truths: Vec<Point2<f64>> = view.truth.visible.iter().map(|t| t.pixel).collect();
        let mut e = Errors::default();
        for t in view.truth.visible.iter().filter(|t| t.border_px > 3.0) {
            e.total += 1;
            if let Some(f) = nearest(t.pixel, &found, 2.0) {
                e.add(f - t.pixel);
            }
        }
        let false_corners = found.iter().filter(|p| nearest(**p, &truths, 2.0).is_none()).count();
        println!(
            "{name}: truth {} found {} recall {:.4} rms {:.4} px false {} marks {}",
            e.total,
            found.len(),
            e.recall(),
            e.rms(),
            false_corners,
            det.marks.len()
        );
        assert!(e.total > 60, "{name}: faces in view");
        assert!(e.recall() >= 0.95, "{name}: recall {}", e.recall());
        assert!(e.rms() < 0.05, "{name}: rms {}", e.rms());
        assert_eq!(false_corners, 0, "{name}: false corners");
        // Every face faces the camera here, so every mark of the face codes is seen, once.
        assert_eq!(det.marks.len(), marks, "{name}: marks");
    }
}
