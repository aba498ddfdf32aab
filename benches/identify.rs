//! Matcher speed (criterion; run with `cargo bench --bench identify`).
//!
//! - `identify/checker-1008`: one image's 1008 checker corners (a 29 x 37 cell board seen at a
//!   slant, every corner detected, with its face-code marks) identified against the target.
//!   The issue's budget is 2 ms for 1000 detections; the figure is in DEVELOPERS.md.
//! - `identify/checker-1008-clutter`: the same with 10 % missing corners and 100 clutter
//!   detections, which costs failed predictions and extra seeds.
//! - `identify/dots-1014`: a 26 x 39 dot grid (dots carry ellipses, growth checks sizes).
//!
//! Instruction counts, which do not drift with the machine as times do: with
//! `FACETCAL_IDENTIFY_CALLS=N` (and optionally `FACETCAL_IDENTIFY_SCENE=NAME`) the bench skips
//! criterion and calls `identify` N times per scene, so that under
//! `valgrind --tool=cachegrind --cache-sim=no` the count with N = 20 less the count with N = 0,
//! over 20, is the cost of one call (DEVELOPERS.md quotes it).

use criterion::{Criterion, criterion_group, criterion_main};
use facetcal_matcher::synthetic::{Scene, synthesize};
use facetcal_matcher::{MatchOptions, identify};
use facetcal_model::{Camera, Pose, Target};
use nalgebra::Vector3;

fn board(pattern: &str, marks: &str) -> Target {
    Target::from_json(&format!(
        r#"{{"format": "facetcal-target", "version": 1, "name": "bench", "unit": "mm",
            "faces": [{{"id": 1, "pose": {{"rotation": [0,0,0], "translation": [0,0,0]}},
            "pattern": {pattern}, "margin": 10, "marks": {marks}}}]}}"#
    ))
    .expect("the bench target is valid")
}

fn bench(c: &mut Criterion) {
    let camera = Camera::pinhole(2560, 1920, 2000.0, 2000.0, 1279.5, 959.5);
    let marks = "[[2,3],[5,20],[11,7],[17,30],[24,12],[26,33],[8,25]]";
    let checker =
        board(r#"{"kind": "checkerboard", "rows": 29, "columns": 37, "cell": 10}"#, marks);
    let dots = board(
        r#"{"kind": "dot-grid", "rows": 26, "columns": 39, "pitch": 10, "diameter": 5}"#,
        "[[2,3],[5,20],[11,7],[17,30],[24,12],[20,33],[8,25]]",
    );
    let opts = MatchOptions::default();
    let calls: Option<usize> =
        std::env::var("FACETCAL_IDENTIFY_CALLS").ok().and_then(|v| v.parse().ok());
    let only = std::env::var("FACETCAL_IDENTIFY_SCENE").ok();
    let mut group = c.benchmark_group("identify");
    for (name, target, scene) in [
        ("checker-1008", &checker, Scene::default()),
        ("checker-1008-clutter", &checker, Scene { drop: 0.1, clutter: 100, ..Scene::default() }),
        ("dots-1014", &dots, Scene::default()),
    ] {
        if only.as_deref().is_some_and(|o| o != name) {
            continue;
        }
        let (lo, hi) = target.bounds();
        let centre = (lo.coords + hi.coords) * 0.5;
        let rot = nalgebra::UnitQuaternion::from_scaled_axis(Vector3::new(0.3, -0.2, 0.1));
        let pose =
            Pose { rotation: rot, translation: Vector3::new(0.0, 0.0, 520.0) - rot * centre };
        let synth = synthesize(target, &camera, &pose, &scene, 1);
        let id = identify(&synth.detections, target, &opts).expect("valid options");
        let n = synth.detections.checker_corners.len() + synth.detections.dots.len();
        println!(
            "{name}: {n} detections, {} of {} true features identified",
            id.point_count(),
            synth.true_count()
        );
        if let Some(calls) = calls {
            for _ in 0..calls {
                std::hint::black_box(identify(
                    std::hint::black_box(&synth.detections),
                    target,
                    &opts,
                ))
                .ok();
            }
            continue;
        }
        group.bench_function(name, |b| {
            b.iter(|| identify(std::hint::black_box(&synth.detections), target, &opts))
        });
    }
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
