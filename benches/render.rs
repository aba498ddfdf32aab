//! Renderer speed (criterion; run with `cargo bench --bench render`).
//!
//! - `standard/1280x960/<model>`: one noiseless view of the standard scene (checkerboard, cells
//!   of 20 px or more, PSF sigma 1 px, 4 x 4 sub-squares per pixel) on one rayon thread, for a
//!   pinhole and a Brown-Conrady camera. The target is about a second per view.
//! - `standard/1280x960/pinhole-2-threads`: the same on two threads.

use criterion::{Criterion, criterion_group, criterion_main};
use facetcal_model::{Camera, Distortion, Pose, Target};
use facetcal_render::{Scene, render_view_noiseless};
use nalgebra::Vector3;

fn scene(distortion: Distortion) -> Scene {
    let text =
        std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/targets/checkerboard.json"))
            .expect("the bundled checkerboard");
    let target = Target::from_json(&text).expect("a valid target");
    let mut camera = Camera::pinhole(1280, 960, 1400.0, 1400.0, 639.5, 479.5);
    camera.distortion = distortion;
    // 700 mm away, tilted by 30 degrees: the target fills most of the image.
    let pose = Pose::from_axis_angle(
        Vector3::new(0.0, 30f64.to_radians(), 0.05),
        Vector3::new(-130.0, -110.0, 700.0),
    );
    Scene::builder(target, camera)
        .pose(pose)
        .psf_sigma_px(1.0)
        .noise_sigma(2.0)
        .build()
        .expect("a valid scene")
}

fn bench(c: &mut Criterion) {
    let mut g = c.benchmark_group("standard/1280x960");
    g.sample_size(10);
    let brown = Distortion::BrownConrady { k1: -0.2, k2: 0.05, p1: 0.0, p2: 0.0, k3: 0.0 };
    for (name, d) in [("pinhole", Distortion::None), ("brown-conrady", brown)] {
        let s = scene(d);
        let one = rayon::ThreadPoolBuilder::new().num_threads(1).build().expect("a pool");
        g.bench_function(name, |b| {
            b.iter(|| one.install(|| render_view_noiseless(&s, 0).expect("renders")))
        });
    }
    let s = scene(Distortion::None);
    let two = rayon::ThreadPoolBuilder::new().num_threads(2).build().expect("a pool");
    g.bench_function("pinhole-2-threads", |b| {
        b.iter(|| two.install(|| render_view_noiseless(&s, 0).expect("renders")))
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
