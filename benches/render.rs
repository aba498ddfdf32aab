//! Renderer speed (criterion; run with `cargo bench --bench render -- --noplot`).
//!
//! - `standard/1280x960/<model>`: one noiseless view of the standard scene (checkerboard, cells
//!   of 20 px or more, PSF sigma 1 px, 4 x 4 sub-squares per pixel) on one rayon thread, for a
//!   pinhole and a Brown-Conrady camera, wall-clock time. The target is 0.3 s per view.
//! - `standard/1280x960/pinhole-2-threads`, `.../brown-conrady-2-threads`: the same on two
//!   threads.
//! - `standard-cpu/1280x960/<model>`: the one-thread cases again, timed by the CPU time of
//!   the whole process (the sum of `/proc/self/task/*/schedstat`, Linux) instead of the
//!   wall clock, so that figures taken on a shared machine do not count the time spent
//!   waiting for a core.

use std::time::Duration;

use criterion::measurement::{Measurement, ValueFormatter};
use criterion::{Criterion, Throughput, criterion_group, criterion_main};
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

/// CPU time of every thread of this process, nanoseconds (first field of each thread's
/// `schedstat`: time spent on a CPU).
fn process_cpu_ns() -> u64 {
    let mut total = 0;
    for t in std::fs::read_dir("/proc/self/task").expect("/proc/self/task (Linux)").flatten() {
        if let Ok(s) = std::fs::read_to_string(t.path().join("schedstat")) {
            total += s.split_whitespace().next().and_then(|v| v.parse::<u64>().ok()).unwrap_or(0);
        }
    }
    total
}

/// Criterion measurement by process CPU time.
struct ProcessCpu;

struct NanosFormatter;

impl ValueFormatter for NanosFormatter {
    fn scale_values(&self, typical: f64, values: &mut [f64]) -> &'static str {
        let (div, unit) = if typical >= 1e9 {
            (1e9, "s")
        } else if typical >= 1e6 {
            (1e6, "ms")
        } else if typical >= 1e3 {
            (1e3, "us")
        } else {
            (1.0, "ns")
        };
        values.iter_mut().for_each(|v| *v /= div);
        unit
    }

    fn scale_throughputs(&self, _: f64, _: &Throughput, values: &mut [f64]) -> &'static str {
        let _ = values;
        "elements/cpu-ns"
    }

    fn scale_for_machines(&self, _: &mut [f64]) -> &'static str {
        "ns"
    }
}

impl Measurement for ProcessCpu {
    type Intermediate = u64;
    type Value = u64;

    fn start(&self) -> u64 {
        process_cpu_ns()
    }

    fn end(&self, start: u64) -> u64 {
        process_cpu_ns().saturating_sub(start)
    }

    fn add(&self, a: &u64, b: &u64) -> u64 {
        a + b
    }

    fn zero(&self) -> u64 {
        0
    }

    fn to_f64(&self, v: &u64) -> f64 {
        *v as f64
    }

    fn formatter(&self) -> &dyn ValueFormatter {
        &NanosFormatter
    }
}

fn brown() -> Distortion {
    Distortion::BrownConrady { k1: -0.2, k2: 0.05, p1: 0.0, p2: 0.0, k3: 0.0 }
}

fn bench(c: &mut Criterion) {
    let mut g = c.benchmark_group("standard/1280x960");
    g.sample_size(10);
    let one = rayon::ThreadPoolBuilder::new().num_threads(1).build().expect("a pool");
    let two = rayon::ThreadPoolBuilder::new().num_threads(2).build().expect("a pool");
    for (name, d) in [("pinhole", Distortion::None), ("brown-conrady", brown())] {
        let s = scene(d);
        g.bench_function(name, |b| {
            b.iter(|| one.install(|| render_view_noiseless(&s, 0).expect("renders")))
        });
        g.bench_function(format!("{name}-2-threads"), |b| {
            b.iter(|| two.install(|| render_view_noiseless(&s, 0).expect("renders")))
        });
    }
    g.finish();
}

fn bench_cpu(c: &mut Criterion<ProcessCpu>) {
    let mut g = c.benchmark_group("standard-cpu/1280x960");
    g.sample_size(10).warm_up_time(Duration::from_millis(500));
    let one = rayon::ThreadPoolBuilder::new().num_threads(1).build().expect("a pool");
    for (name, d) in [("pinhole", Distortion::None), ("brown-conrady", brown())] {
        let s = scene(d);
        g.bench_function(name, |b| {
            b.iter(|| one.install(|| render_view_noiseless(&s, 0).expect("renders")))
        });
    }
    g.finish();
}

criterion_group!(benches, bench);
criterion_group! {
    name = cpu;
    config = Criterion::default().with_measurement(ProcessCpu);
    targets = bench_cpu
}
criterion_main!(benches, cpu);
