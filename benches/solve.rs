//! Solver benchmarks: Zhang's published problem (5 views, 1280 points, read from the
//! reference folder) and a synthetic 50 views of 200 points, single-threaded. The figures go
//! into DEVELOPERS.md ("Solver").

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

fn bench(c: &mut Criterion) {
    let single = rayon::ThreadPoolBuilder::new().num_threads(1).build().unwrap();
    if let Some(views) = zhang_views() {
        let o = Options {
            free: FreeParameters { skew: true, ..FreeParameters::default() },
            loss: Loss::Squared,
            reject_sigmas: 0.0,
            ..Options::default()
        };
        c.bench_function("solve/zhang_5x256", |b| {
            b.iter(|| {
                single.install(|| {
                    calibrate(&views, (640, 480), DistortionKind::BrownConrady, None, &o).unwrap()
                })
            })
        });
    }
    let views = synthetic_views();
    let o = Options::default();
    c.bench_function("solve/synthetic_50x200_single_thread", |b| {
        b.iter(|| {
            single.install(|| {
                calibrate(&views, (1920, 1080), DistortionKind::BrownConrady, None, &o).unwrap()
            })
        })
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
