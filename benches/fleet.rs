//! Fleet benchmark: the fleet stage (per camera the solve, the verdict and the result file, then
//! the fleet statistics) of 100 cameras x 10 images on rayon pools of 1 and 2 threads, from
//! precomputed observations: the checkerboard's corners projected through each camera with
//! 0.1 px noise (rendering 1000 images would measure the renderer). Parallel efficiency is
//! `t1 / (2 t2)`. Before criterion runs, one pass per pool prints wall time, the process's CPU
//! time and the load average, since the machine is shared. The figures go into DEVELOPERS.md
//! ("Fleet").

use std::path::PathBuf;
use std::time::Instant;

use criterion::{Criterion, criterion_group, criterion_main};
use facetcal_fleet::{FleetFile, FleetHeader, camera_entry};
use facetcal_matcher::synthetic::random_view;
use facetcal_matcher::{Correspondence, DetectionKind, DetectionRef};
use facetcal_model::files::InputRecord;
use facetcal_model::{Camera, Distortion, Intrinsics, SeededRng, Target};
use facetcal_pipeline::{ImageFeatures, ImageRecord, Settings, calibrate_records};
use nalgebra::Point2;
use rayon::prelude::*;

const CAMERAS: usize = 100;
const IMAGES: usize = 10;

fn target() -> Target {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("targets/checkerboard.json");
    Target::load(&path).expect("the bundled checkerboard")
}

/// Camera `k` of the fleet: a product's nominal lens with a small seeded spread.
fn camera(rng: &mut SeededRng) -> Camera {
    let f = 1000.0 + 5.0 * rng.normal();
    Camera {
        width: 1280,
        height: 960,
        intrinsics: Intrinsics {
            fx: f,
            fy: f * (1.0 + 0.001 * rng.normal()),
            cx: 639.5 + 3.0 * rng.normal(),
            cy: 479.5 + 3.0 * rng.normal(),
            skew: 0.0,
        },
        distortion: Distortion::BrownConrady {
            k1: -0.1 + 0.01 * rng.normal(),
            k2: 0.03,
            p1: 0.0,
            p2: 0.0,
            k3: 0.0,
        },
    }
}

fn fleet_records(target: &Target) -> Vec<(String, Vec<ImageRecord>)> {
    let mut rng = SeededRng::new(2026);
    let features = target.features();
    (0..CAMERAS)
        .map(|k| {
            let cam = camera(&mut rng);
            let records = (0..IMAGES)
                .map(|v| {
                    let pose = random_view(target, &cam, &mut rng, 40.0, 0.7, 0.15);
                    let points: Vec<Correspondence> = features
                        .iter()
                        .enumerate()
                        .filter_map(|(i, (id, x))| {
                            let p = cam.project(&pose.transform(x)).ok()?;
                            let p = Point2::new(p.x + 0.1 * rng.normal(), p.y + 0.1 * rng.normal());
                            cam.contains(&p, 0.0).then_some(Correspondence {
                                id: *id,
                                target: [x.x, x.y, x.z],
                                image: [p.x, p.y],
                                residual: None,
                                detection: DetectionRef {
                                    kind: DetectionKind::CheckerCorner,
                                    index: i,
                                },
                            })
                        })
                        .collect();
                    ImageRecord {
                        path: PathBuf::from(format!("cam-{k:03}/shot-{v:02}.png")),
                        name: format!("shot-{v:02}.png"),
                        sha256: None,
                        outcome: Ok(ImageFeatures {
                            size: (cam.width, cam.height),
                            detected: points.len(),
                            left_out: 0,
                            points,
                        }),
                    }
                })
                .collect();
            (format!("cam-{k:03}"), records)
        })
        .collect()
}

fn fleet_stage(
    fleet: &[(String, Vec<ImageRecord>)],
    target: &Target,
    settings: &Settings,
) -> FleetFile {
    let record = InputRecord { path: "checkerboard.json".into(), sha256: "0".repeat(64) };
    let entries = fleet
        .par_iter()
        .map(|(id, records)| {
            let result = format!("{id}/calibration.json");
            match calibrate_records(records, target, record.clone(), "bench", settings) {
                Ok(run) => camera_entry(id, Ok(&run.file), None, &result),
                Err(e) => camera_entry(id, Err(&e.to_string()), None, &result),
            }
        })
        .collect();
    let header = FleetHeader {
        program: "bench".into(),
        target_file: record,
        settings_sha256: String::new(),
        spec: None,
        shard: None,
    };
    FleetFile::assemble(header, entries)
}

/// CPU time of this process (user + system), seconds, from /proc/self/stat (Linux; fields 14
/// and 15 in clock ticks of 1/100 s, the usual USER_HZ).
fn cpu_seconds() -> Option<f64> {
    let stat = std::fs::read_to_string("/proc/self/stat").ok()?;
    let rest = &stat[stat.rfind(')')? + 2..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    Some((f.get(11)?.parse::<f64>().ok()? + f.get(12)?.parse::<f64>().ok()?) / 100.0)
}

fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg").map(|s| s.trim().to_string()).unwrap_or_default()
}

fn bench(c: &mut Criterion) {
    let target = target();
    let fleet = fleet_records(&target);
    let settings = Settings::default();
    let pools: Vec<(usize, rayon::ThreadPool)> = [1, 2]
        .into_iter()
        .map(|n| (n, rayon::ThreadPoolBuilder::new().num_threads(n).build().expect("a pool")))
        .collect();
    let mut reference = None;
    for (n, pool) in &pools {
        let (cpu0, t0) = (cpu_seconds(), Instant::now());
        let out = pool.install(|| fleet_stage(&fleet, &target, &settings));
        let wall = t0.elapsed().as_secs_f64();
        let cpu = cpu_seconds().zip(cpu0).map(|(a, b)| a - b).unwrap_or(f64::NAN);
        println!(
            "fleet {CAMERAS} x {IMAGES}, {n} thread(s): one pass {wall:.2} s wall, {cpu:.2} s CPU, {} passed; load average {}",
            out.counts.passed,
            load_average()
        );
        // The fleet file must not depend on the thread count.
        match &reference {
            None => reference = Some(out),
            Some(r) => assert_eq!(r, &out, "the fleet file depends on the thread count"),
        }
    }
    let mut group = c.benchmark_group("fleet_100x10");
    group.sample_size(10);
    for (n, pool) in &pools {
        group.bench_function(format!("threads_{n}"), |b| {
            b.iter(|| pool.install(|| fleet_stage(&fleet, &target, &settings)))
        });
    }
    group.finish();
    println!("load average after: {}", load_average());
}

criterion_group!(benches, bench);
criterion_main!(benches);
