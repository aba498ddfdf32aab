//! Checker corners on renders of the bundled checkerboard (`facetcal-render`): accuracy, bias,
//! recall and the Cramer-Rao ratio on the standard scene of the detector issue (1280 x 960,
//! cells of at least 20 px, contrast 200 of 255, Gaussian PSF sigma 1 px, noise sigma 2 grey
//! levels, tilt up to 45 degrees).

mod common;

use common::*;
use facetcal_detector::{DetectorOptions, detect};
use facetcal_model::PatternKind;
use facetcal_render::{Scene, render_view};
use nalgebra::Point2;

/// (tilt, tilt axis, in-plane spin), degrees.
const POSES: [(f64, f64, f64); 5] = [
    (0.0, 0.0, 3.0),
    (20.0, 30.0, 10.0),
    (35.0, 100.0, -20.0),
    (45.0, 0.0, 7.0),
    (45.0, 90.0, 30.0),
];

#[test]
fn standard_scene_accuracy() {
    let target = bundled("checkerboard.json");
    let (fw, fh) = target.faces()[0].size();
    let centre = Point2::new(fw / 2.0, fh / 2.0);
    let poses = POSES
        .iter()
        .map(|&(t, a, s)| {
            tilted_pose(centre, 750.0, t.to_radians(), a.to_radians(), s.to_radians())
        })
        .collect();
    let scene = Scene::builder(target, standard_camera())
        .poses(poses)
        .psf_sigma_px(1.0)
        .noise_sigma(2.0)
        .seed(7)
        .build()
        .unwrap();
    let mut opts = DetectorOptions::for_kind(PatternKind::Checkerboard);
    if let Ok(v) = std::env::var("T_SMOOTH") {
        opts.checker_smoothing = v.parse().unwrap();
    }
    if let Ok(v) = std::env::var("T_RAD") {
        opts.refine_sigma = v.parse().unwrap();
    }
    let mut e = Errors::default();
    let mut inner = Errors::default();
    for i in 0..POSES.len() {
        let view = render_view(&scene, i).unwrap();
        let det = detect(&to_detector(&view.image), &opts).unwrap();
        let found: Vec<Point2<f64>> = det.checker_corners.iter().map(|c| c.position).collect();
        // The Cramer-Rao bound on the corners of a central window, rendered on its own to keep
        // the test fast.
        let crop = Crop { x0: 400, y0: 300, width: 480, height: 360 };
        let (levels, d) = translation_derivatives(&scene, i, crop);
        let mut matched = 0;
        for t in &view.truth.visible {
            e.total += 1;
            if let Some(f) = nearest(t.pixel, &found, 3.0) {
                e.add(f - t.pixel);
                matched += 1;
                let local = Point2::new(t.pixel.x - crop.x0 as f64, t.pixel.y - crop.y0 as f64);
                let r = 3.0 * opts.refine_sigma;
                if local.x > r + 1.0
                    && local.y > r + 1.0
                    && local.x < crop.width as f64 - r - 2.0
                    && local.y < crop.height as f64 - r - 2.0
                {
                    // Noise of the scene plus 8-bit quantisation (1/12 grey level^2).
                    let b = crb(&d, &levels, crop.width as usize, local, r, |l| {
                        scene.noise_variance(l) + 1.0 / 12.0
                    });
                    inner.add(f - t.pixel);
                    inner.crb2 += b * b;
                }
            }
        }
        println!(
            "view {i}: found {} matched {matched}/{} running rms {:.4} bias {:?}",
            found.len(),
            view.truth.visible.len(),
            e.rms(),
            e.bias()
        );
        for c in &det.checker_corners {
            let truths: Vec<Point2<f64>> = view.truth.visible.iter().map(|t| t.pixel).collect();
            if nearest(c.position, &truths, 3.0).is_none() {
                println!("false corner {c:?}");
            }
        }
        assert_eq!(found.len(), matched, "view {i}: every detection is a true corner");
    }
    let (bx, by) = e.bias();
    let ratio = inner.rms() / inner.crb_rms();
    println!(
        "checker CRB: {} corners of the central windows, rms {:.4} px, bound {:.4} px (pixels within 3 refine_sigma), ratio {ratio:.2}",
        inner.n,
        inner.rms(),
        inner.crb_rms()
    );
    println!(
        "checker standard scene: {}/{} recall {:.4} rms {:.4} px bias ({bx:.4}, {by:.4}) px crb {:.4} px ratio {:.2}",
        e.n,
        e.total,
        e.recall(),
        e.rms(),
        e.crb_rms(),
        e.rms() / e.crb_rms()
    );
    assert!(e.recall() >= 0.995);
    assert!(e.rms() <= 0.02, "rms {}", e.rms());
    assert!(bx.abs() <= 0.005 && by.abs() <= 0.005, "bias {bx} {by}");
    assert!(inner.n >= 50, "enough corners for the bound");
    assert!(ratio < 2.0, "crb ratio {ratio}");
}
