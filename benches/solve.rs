//! Solver benchmarks: Zhang's published problem (5 views, 1280 points, read from the
//! reference folder) and a synthetic 50 views of 200 points, single-threaded. The figures go
//! into DEVELOPERS.md ("Solver").
//!
//! Each problem is timed twice: `solve/...` in wall-clock time and `solve-cpu/...` in the CPU
//! time of the process (Linux only; skipped elsewhere). On a shared, loaded machine the wall
//! time mostly measures the neighbours; the CPU time does not.

use std::time::Duration;

use criterion::measurement::{Measurement, ValueFormatter, WallTime};
use criterion::{Criterion, criterion_group, criterion_main};
use facetcal_model::files::FreeParameters;
use facetcal_model::{Camera, Distortion, DistortionKind, Intrinsics, Pose, SeededRng};
use facetcal_solver::{Loss, Observation, Options, ViewObservations, calibrate};
use nalgebra::{Point2, Point3, Vector3};

fn zhang_views() -> Option<Vec<ViewObservations>> {
    let dir = facetcal_model::reference_dir("zhang1998")?;
    let parse = |name: &str| -> Option<Vec<f64>> {
        std::fs::read_to_string(dir.join(name))
            .ok()?
            .split_whitespace()
            .map(|t| t.parse::<f64>().ok())
            .collect()
    };
    let m = parse("Model.txt")?;
    (1..=5)
        .map(|i| {
            let d = parse(&format!("data{i}.txt"))?;
            let points = (0..256)
                .map(|k| Observation {
                    id: None,
                    target: Point3::new(m[2 * k], m[2 * k + 1], 0.0),
                    image: Point2::new(d[2 * k], d[2 * k + 1]),
                })
                .collect();
            Some(ViewObservations { name: format!("data{i}"), points })
        })
        .collect()
}

/// 50 views of a 10 x 20 grid of points (200 per view), 0.2 px noise, seeded.
fn synthetic_views() -> Vec<ViewObservations> {
    let cam = Camera {
        width: 1920,
        height: 1080,
        intrinsics: Intrinsics { fx: 1400.0, fy: 1398.0, cx: 961.0, cy: 538.0, skew: 0.0 },
        distortion: Distortion::BrownConrady { k1: -0.1, k2: 0.03, p1: 0.0, p2: 0.0, k3: 0.0 },
    };
    let mut rng = SeededRng::new(50);
    (0..50)
        .map(|v| {
            let aa = Vector3::new(rng.range(-0.5, 0.5), rng.range(-0.5, 0.5), rng.range(-0.3, 0.3));
            let pose =
                Pose::from_axis_angle(aa, Vector3::new(-95.0, -45.0, 420.0 + rng.range(0.0, 80.0)));
            let points = (0..200)
                .filter_map(|k| {
                    let x = Point3::new((k % 20) as f64 * 10.0, (k / 20) as f64 * 10.0, 0.0);
                    let px = cam.project(&pose.transform(&x)).ok()?;
                    let image = Point2::new(px.x + 0.2 * rng.normal(), px.y + 0.2 * rng.normal());
                    Some(Observation { id: None, target: x, image })
                })
                .collect();
            ViewObservations { name: format!("v{v}"), points }
        })
        .collect()
}

/// CPU time of the whole process: the sum over its threads of `sum_exec_runtime`, the first
/// field of `/proc/self/task/<tid>/schedstat`, in nanoseconds (Linux, see the kernel's
/// `Documentation/scheduler/sched-stats.rst`).
fn process_cpu() -> Option<Duration> {
    let mut ns: u64 = 0;
    for task in std::fs::read_dir("/proc/self/task").ok()? {
        let stat = std::fs::read_to_string(task.ok()?.path().join("schedstat")).ok()?;
        ns += stat.split_whitespace().next()?.parse::<u64>().ok()?;
    }
    Some(Duration::from_nanos(ns))
}

/// Criterion measurement in process CPU time. The bench runs the solver on a one-thread pool
/// while the calling thread waits, so this is the solver's own time.
struct ProcessCpu;

impl Measurement for ProcessCpu {
    type Intermediate = Duration;
    type Value = Duration;
    fn start(&self) -> Duration {
        process_cpu().unwrap_or_default()
    }
    fn end(&self, start: Duration) -> Duration {
        process_cpu().unwrap_or_default().saturating_sub(start)
    }
    fn add(&self, a: &Duration, b: &Duration) -> Duration {
        *a + *b
    }
    fn zero(&self) -> Duration {
        Duration::ZERO
    }
    fn to_f64(&self, v: &Duration) -> f64 {
        v.as_nanos() as f64
    }
    fn formatter(&self) -> &dyn ValueFormatter {
        // Nanoseconds, like wall time: reuse its formatter.
        static WALL: WallTime = WallTime;
        WALL.formatter()
    }
}

fn bench_with<M: Measurement + 'static>(c: &mut Criterion<M>, group: &str) {
    let single = rayon::ThreadPoolBuilder::new().num_threads(1).build().unwrap();
    if let Some(views) = zhang_views() {
        let o = Options {
            free: FreeParameters { skew: true, ..FreeParameters::default() },
            loss: Loss::Squared,
            reject_sigmas: 0.0,
            ..Options::default()
        };
        c.bench_function(&format!("{group}/zhang_5x256"), |b| {
            b.iter(|| {
                single.install(|| {
                    calibrate(&views, (640, 480), DistortionKind::BrownConrady, None, &o).unwrap()
                })
            })
        });
    }
    let views = synthetic_views();
    let o = Options::default();
    c.bench_function(&format!("{group}/synthetic_50x200_single_thread"), |b| {
        b.iter(|| {
            single.install(|| {
                calibrate(&views, (1920, 1080), DistortionKind::BrownConrady, None, &o).unwrap()
            })
        })
    });
}

fn bench(c: &mut Criterion) {
    bench_with(c, "solve");
}

fn bench_cpu(c: &mut Criterion<ProcessCpu>) {
    if process_cpu().is_some() {
        bench_with(c, "solve-cpu");
    }
}

criterion_group!(benches, bench);
criterion_group! {
    name = cpu;
    config = Criterion::default().with_measurement(ProcessCpu);
    targets = bench_cpu
}
criterion_main!(benches, cpu);
