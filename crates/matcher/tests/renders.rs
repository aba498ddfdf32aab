//! Identification of detections in rendered images (facetcal-render, exact truth, seeded) of
//! every bundled target under each imaging condition of the detector issue: PSF sigma 2.5 px,
//! noise sigma 8 grey levels, a 3:1 illumination gradient, 50 % vignetting, gamma 0.5 and 2.2,
//! radial distortion that bows a straight line across the image by 5 % of its width, a partial
//! occluder, a textured and cluttered background. 640 x 480 views keep the renders quick.
//!
//! An identity is right when the renderer's truth pixel of that feature lies within 1.5 px of
//! the identified image point; anything else counts as wrong, and the count of wrong ones must
//! be zero. The identified fraction is over the true features that the detector found (a
//! detection within 1.5 px of the truth pixel), so that detector misses do not count against
//! the matcher.

use std::collections::BTreeMap;

use facetcal_detector::{Detections, DetectorOptions, GreyImage, MarkProbe, detect, mark_samples};
use facetcal_matcher::synthetic::random_view;
use facetcal_matcher::{MatchOptions, identify, identify_with};
use facetcal_model::{Camera, Distortion, FeatureId, SeededRng, Target};
use facetcal_render::{
    Background, GreyImage as RenderImage, Occluder, Optics, Photometry, Scene, render_view,
};
use nalgebra::{Point2, Point3};

const TARGETS: [&str; 5] = ["checkerboard", "dot-grid", "square-grid", "corner", "fold"];
const W: u32 = 640;
const H: u32 = 480;

fn target(name: &str) -> Target {
    let path = format!("{}/../../targets/{name}.json", env!("CARGO_MANIFEST_DIR"));
    Target::load(std::path::Path::new(&path)).unwrap()
}

struct Case {
    name: &'static str,
    optics: Optics,
    photometry: Photometry,
    background: Background,
    occluder: bool,
    k1: f64,
}

fn base() -> Case {
    Case {
        name: "",
        optics: Optics { psf_sigma_px: 1.0, defocus_radius_px: 0.0 },
        photometry: Photometry { noise_sigma: 2.0, ..Photometry::default() },
        background: Background::default(),
        occluder: false,
        k1: 0.0,
    }
}

fn camera(k1: f64) -> Camera {
    let mut cam = Camera::pinhole(W, H, 560.0, 560.0, 319.5, 239.5);
    if k1 != 0.0 {
        cam.distortion = Distortion::BrownConrady { k1, k2: 0.0, p1: 0.0, p2: 0.0, k3: 0.0 };
    }
    cam
}

/// The bow of the image of a straight horizontal line whose middle lands 2 px below the top
/// border, as a fraction of the image width: the largest distance of its visible part from
/// the chord through the two ends of that part (the sagitta; a line bowed by distortion is the
/// common-practice measure of how strong it is).
fn bow(cam: &Camera) -> f64 {
    let at = |yn: f64, xn: f64| cam.project(&Point3::new(xn, yn, 1.0)).ok();
    // The undistorted height whose image at x = 0 is at y = 2 (bisection).
    let (mut lo, mut hi) = (-3.0f64, 0.0f64);
    for _ in 0..100 {
        let mid = 0.5 * (lo + hi);
        match at(mid, 0.0) {
            Some(p) if p.y > 2.0 => hi = mid,
            _ => lo = mid,
        }
    }
    let inside = |p: &Point2<f64>| p.x >= -0.5 && p.x <= W as f64 - 0.5 && p.y >= -0.5;
    let pts: Vec<Point2<f64>> =
        (-4000..=4000).filter_map(|i| at(hi, i as f64 * 1e-3)).filter(inside).collect();
    let (a, b) = (pts[0], pts[pts.len() - 1]);
    let d = (b - a).normalize();
    let sag = pts.iter().map(|p| ((p - a).x * d.y - (p - a).y * d.x).abs()).fold(0.0, f64::max);
    sag / W as f64
}

fn cases() -> Vec<Case> {
    vec![
        Case {
            name: "psf 2.5",
            optics: Optics { psf_sigma_px: 2.5, defocus_radius_px: 0.0 },
            ..base()
        },
        Case {
            name: "noise 8",
            photometry: Photometry { noise_sigma: 8.0, ..Photometry::default() },
            ..base()
        },
        Case {
            name: "gradient 3:1",
            photometry: Photometry {
                noise_sigma: 2.0,
                illumination_ratio: 3.0,
                illumination_angle_deg: 30.0,
                ..Photometry::default()
            },
            ..base()
        },
        Case {
            name: "vignetting 50%",
            photometry: Photometry { noise_sigma: 2.0, vignetting: 0.5, ..Photometry::default() },
            ..base()
        },
        Case {
            name: "gamma 0.5",
            photometry: Photometry { noise_sigma: 2.0, gamma: 0.5, ..Photometry::default() },
            ..base()
        },
        Case {
            name: "gamma 2.2",
            photometry: Photometry { noise_sigma: 2.0, gamma: 2.2, ..Photometry::default() },
            ..base()
        },
        // k1 = -0.26 at f = 560 px: the bow test below checks that this is the 5 %.
        Case { name: "distortion", k1: -0.26, ..base() },
        Case { name: "occluder", occluder: true, ..base() },
        Case {
            name: "texture and clutter",
            background: Background {
                texture_amplitude: 0.3,
                texture_scale_px: 20.0,
                clutter: 40,
                clutter_size_px: [6.0, 60.0],
                ..Background::default()
            },
            ..base()
        },
    ]
}

fn to_detector(img: &RenderImage) -> GreyImage {
    match img {
        RenderImage::Eight(g) => GreyImage::from_luma8(g),
        RenderImage::Sixteen(g) => GreyImage::from_luma16(g),
    }
}

fn detected_points(det: &Detections) -> Vec<Point2<f64>> {
    let mut pts: Vec<Point2<f64>> = det.checker_corners.iter().map(|c| c.position).collect();
    pts.extend(det.dots.iter().map(|d| d.centre));
    pts.extend(det.squares.iter().flat_map(|s| s.corners));
    pts
}

#[derive(Default)]
struct Tally {
    correct: usize,
    wrong: usize,
    detected: usize,
    /// The same with the face code read by probing the image (`identify_with`).
    probed_correct: usize,
    probed_wrong: usize,
}

/// Renders, detects and identifies view `k` of target `name` under `case`.
fn run(name: &str, case: &Case, k: u64) -> Tally {
    let t = target(name);
    let cam = camera(case.k1);
    let mut rng = SeededRng::stream(91, k);
    let pose = random_view(&t, &cam, &mut rng, 30.0, 0.85, 0.03);
    let occluders = if case.occluder {
        vec![Occluder::Disc { centre: [330.0, 250.0], radius: 45.0, reflectance: 0.3 }]
    } else {
        Vec::new()
    };
    let scene = Scene::builder(t.clone(), cam)
        .pose(pose)
        .optics(case.optics)
        .photometry(case.photometry)
        .background(case.background)
        .occluders(occluders)
        .seed(100 + k)
        .build()
        .unwrap();
    let view = render_view(&scene, 0).unwrap();
    let grey = to_detector(&view.image);
    let det =
        detect(&grey, &DetectorOptions { kinds: t.pattern_kinds(), ..DetectorOptions::default() })
            .unwrap();
    let truth: BTreeMap<FeatureId, Point2<f64>> =
        view.truth.visible.iter().map(|f| (f.id, f.pixel)).collect();
    let id = identify(&det, &t, &MatchOptions::default()).unwrap();
    let mut tally = Tally::default();
    for p in id.points() {
        match truth.get(&p.id) {
            Some(tp) if (tp - Point2::new(p.image[0], p.image[1])).norm() < 1.5 => {
                tally.correct += 1
            }
            _ => tally.wrong += 1,
        }
    }
    let probe = |p: &[MarkProbe]| mark_samples(&grey, p);
    let probed = identify_with(&det, &t, &MatchOptions::default(), &probe).unwrap();
    for p in probed.points() {
        match truth.get(&p.id) {
            Some(tp) if (tp - Point2::new(p.image[0], p.image[1])).norm() < 1.5 => {
                tally.probed_correct += 1
            }
            _ => tally.probed_wrong += 1,
        }
    }
    let found = detected_points(&det);
    tally.detected = truth.values().filter(|t| found.iter().any(|p| (p - *t).norm() < 1.5)).count();
    eprintln!(
        "{name:<13} {:<20} {:4} correct {:2} wrong; probed {:4} correct {:2} wrong; {:4} detected {:4} visible; refused (probed) {:?}",
        case.name,
        tally.correct,
        tally.wrong,
        tally.probed_correct,
        tally.probed_wrong,
        tally.detected,
        truth.len(),
        probed.rejected
    );
    tally
}

#[test]
fn the_distortion_case_bows_a_line_by_five_percent_of_the_width() {
    let b = bow(&camera(-0.26));
    assert!((0.045..0.055).contains(&b), "bow {b}");
    assert!(bow(&camera(0.0)) < 1e-9);
}

#[test]
fn rendered_views_across_the_robustness_range_are_identified_without_a_wrong_identity() {
    let (mut correct, mut wrong, mut detected) = (0, 0, 0);
    let (mut pcorrect, mut pwrong) = (0, 0);
    let mut by_target: BTreeMap<&str, (usize, usize, usize)> = BTreeMap::new();
    for name in TARGETS {
        for (k, case) in cases().iter().enumerate() {
            let t = run(name, case, k as u64);
            correct += t.correct;
            wrong += t.wrong;
            detected += t.detected;
            pcorrect += t.probed_correct;
            pwrong += t.probed_wrong;
            let e = by_target.entry(name).or_default();
            e.0 += t.correct;
            e.1 += t.probed_correct;
            e.2 += t.detected;
        }
    }
    let frac = correct as f64 / detected as f64;
    let pfrac = pcorrect as f64 / detected as f64;
    eprintln!("renders: {correct} correct, {wrong} wrong, {detected} detected, {frac:.4}");
    eprintln!("renders, probed marks: {pcorrect} correct, {pwrong} wrong, {pfrac:.4}");
    for (name, (c, pc, d)) in &by_target {
        eprintln!("  {name}: {c} of {d}, probed {pc} of {d}");
    }
    assert_eq!(wrong, 0);
    assert_eq!(pwrong, 0);
    // The issue asks for 99 % of the detected true features. The detector's marks alone do
    // not reach it (measured 2026-12-02: 2172 of 6047, 0.359): at this scale (marks of 6 to
    // 10 px) and on steep faces the detector misses marks and reports others that are not
    // there. With the marks probed on the image (`identify_with`, what `facetcal` uses):
    // 6297 of 6331 (0.9946), 0 wrong. The 34 left: a 14-node piece of the box corner at PSF
    // 2.5 on which no mark can be read (refused as ambiguous, rightly; 32 features) and 2 dots
    // cut by the occluder.
    assert!(frac >= 0.33, "identified {correct} of {detected} detected true features");
    assert!(pfrac >= 0.99, "probed: identified {pcorrect} of {detected} detected true features");
}
