//! Identification of synthetic detections: every bundled target, projected through pinhole,
//! strongly distorted and fisheye cameras, with noise, dropped features, clutter, occluders and
//! views cut by the image border. The truth is exact by construction (the model's projection),
//! so every identity is checked, and the count of wrong ones must be zero.

use facetcal_matcher::synthetic::{Scene, Score, random_view, synthesize};
use facetcal_matcher::{MatchOptions, identify};
use facetcal_model::{Camera, Distortion, SeededRng, Target};

fn target(name: &str) -> Target {
    let path = format!("{}/../../targets/{name}.json", env!("CARGO_MANIFEST_DIR"));
    Target::load(std::path::Path::new(&path)).unwrap()
}

const TARGETS: [&str; 5] = ["checkerboard", "dot-grid", "square-grid", "corner", "fold"];

fn cameras() -> Vec<(&'static str, Camera)> {
    let pin = Camera::pinhole(1280, 960, 1100.0, 1100.0, 639.5, 479.5);
    let mut barrel = Camera::pinhole(1280, 960, 900.0, 900.0, 645.0, 470.0);
    // Strong barrel distortion: at the image corner (r ~ 0.89) the radius shrinks by ~20 %.
    barrel.distortion =
        Distortion::BrownConrady { k1: -0.32, k2: 0.12, p1: 0.001, p2: -0.0005, k3: 0.0 };
    let mut fisheye = Camera::pinhole(1280, 960, 420.0, 420.0, 639.5, 479.5);
    fisheye.distortion = Distortion::KannalaBrandt { k1: -0.02, k2: 0.003, k3: 0.0, k4: 0.0 };
    vec![("pinhole", pin), ("barrel", barrel), ("fisheye", fisheye)]
}

struct Sweep {
    reasons: std::collections::BTreeMap<&'static str, usize>,
    score: Score,
    views: usize,
    identified_views: usize,
}

fn sweep(
    names: &[&str],
    scene: &Scene,
    fill: (f64, f64),
    tilt: f64,
    shift: f64,
    n: u64,
    seed: u64,
) -> Sweep {
    let mut out = Sweep {
        reasons: Default::default(),
        score: Score::default(),
        views: 0,
        identified_views: 0,
    };
    for name in names {
        let t = target(name);
        for (cname, cam) in cameras() {
            for k in 0..n {
                let mut rng = SeededRng::stream(seed, k);
                let f = rng.range(fill.0, fill.1);
                let pose = random_view(&t, &cam, &mut rng, tilt, f, shift);
                let s = synthesize(&t, &cam, &pose, scene, rng.next_u64());
                let id = identify(&s.detections, &t, &MatchOptions::default()).unwrap();
                let sc = s.score(&id);
                if sc.wrong > 0 {
                    eprintln!("WRONG {name} {cname} view {k}: {sc:?} rejected {:?}", id.rejected);
                }
                for (k, v) in id.left_out_counts() {
                    *out.reasons.entry(k).or_insert(0) += v;
                }
                out.views += 1;
                out.identified_views += (sc.correct > 0) as usize;
                out.score = out.score + sc;
            }
        }
    }
    out
}

#[test]
fn full_views_are_identified_without_a_wrong_identity() {
    let scene = Scene { noise_px: 0.15, ..Scene::default() };
    let r = sweep(&TARGETS, &scene, (0.5, 0.8), 40.0, 0.05, 20, 11);
    let frac = r.score.correct as f64 / r.score.truth as f64;
    eprintln!("full views: {} views, {:?}, identified {:.4}", r.views, r.score, frac);
    assert_eq!(r.score.wrong, 0);
    assert!(frac >= 0.99, "identified fraction {frac}");
}

#[test]
fn hard_views_never_give_a_wrong_identity() {
    // Dropped features, clutter in every list, missed and spurious marks, occluders, steep
    // tilts and targets larger than the image (cut by its border).
    let scene = Scene {
        noise_px: 0.3,
        drop: 0.08,
        mark_drop: 0.05,
        clutter: 40,
        clutter_marks: 4,
        occluders: 1,
        occluder_radius: 0.12,
    };
    let r = sweep(&TARGETS, &scene, (0.6, 2.2), 65.0, 0.25, 80, 12);
    let frac = r.score.correct as f64 / r.score.truth as f64;
    eprintln!(
        "hard views: {} views ({} with identities), {:?}, identified {:.4}",
        r.views, r.identified_views, r.score, frac
    );
    eprintln!("left out (all detections, clutter included): {:?}", r.reasons);
    assert_eq!(r.score.wrong, 0);
    // Measured 0.693 on 2026-12-01 (many of these views show too little of the target to be
    // unambiguous); a drop below 0.65 says the matcher lost recall.
    assert!(frac >= 0.65, "identified fraction {frac}");
}

/// A per-target report of the hard sweep (run with `--ignored --nocapture`).
#[test]
#[ignore]
fn report_hard_views_by_target() {
    let scene = Scene {
        noise_px: 0.3,
        drop: 0.08,
        mark_drop: 0.05,
        clutter: 40,
        clutter_marks: 4,
        occluders: 1,
        occluder_radius: 0.12,
    };
    for name in TARGETS {
        let r = sweep(&[name], &scene, (0.6, 2.2), 65.0, 0.25, 80, 12);
        let frac = r.score.correct as f64 / r.score.truth as f64;
        eprintln!("{name}: {:?} {frac:.3} {:?}", r.score, r.reasons);
    }
}
