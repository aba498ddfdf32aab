//! Random inputs against everything the command line reaches: the file parsers (targets,
//! scenes, correspondences, calibrations), the image reader, the detector, the matcher and the
//! whole calibration pipeline. Nothing may panic, and no result may hold a non-finite number.
//!
//! Two parts, both bounded so the test command runs them on every change:
//! - a seeded mutation run (byte flips, cuts, splices, number swaps) over the bundled files
//!   and random images, `FACETCAL_FUZZ_CASES` cases per kind (default 1500; raise it for a
//!   longer run);
//! - a replay of every input that ever failed, kept in `tests/random-regressions/` of the
//!   repository (`KIND-NAME` files: `target-`, `scene-`, `correspondences-`, `calibration-`,
//!   `image-`). A new failure prints the path of the input it wrote there; commit it with the fix.
//!
//! Proptest then feeds random images and random target files to the whole pipeline.

use std::panic::{AssertUnwindSafe, catch_unwind};
use std::path::{Path, PathBuf};

use facetcal_model::files::{CalibrationFile, CorrespondenceFile};
use facetcal_model::{SeededRng, Target};
use facetcal_pipeline::{Settings, calibrate_records, observe_image};
use proptest::prelude::*;

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

fn regressions() -> PathBuf {
    repo().join("tests/random-regressions")
}

fn cases() -> usize {
    std::env::var("FACETCAL_FUZZ_CASES").ok().and_then(|v| v.parse().ok()).unwrap_or(1500)
}

/// One mutation of `bytes`: flip, cut, splice a piece of itself, or replace a number.
fn mutate(bytes: &[u8], rng: &mut SeededRng) -> Vec<u8> {
    let mut b = bytes.to_vec();
    let rounds = 1 + rng.below(4);
    for _ in 0..rounds {
        if b.is_empty() {
            b.push(b'{');
        }
        let at = rng.below(b.len() as u64) as usize;
        match rng.below(6) {
            0 => b[at] ^= 1 << rng.below(8),
            1 => b.truncate(at),
            2 => {
                let from = rng.below(b.len() as u64) as usize;
                let len = (rng.below(64) as usize).min(b.len() - from);
                let piece = b[from..from + len].to_vec();
                b.splice(at..at, piece);
            }
            3 => {
                const NUMBERS: [&str; 10] = [
                    "0",
                    "-1",
                    "1e308",
                    "-1e308",
                    "1e-320",
                    "4294967296",
                    "0.5",
                    "-0",
                    "1e999",
                    "18446744073709551616",
                ];
                let n = NUMBERS[rng.below(NUMBERS.len() as u64) as usize];
                let end = b[at..]
                    .iter()
                    .position(|c| !c.is_ascii_digit() && *c != b'.')
                    .map_or(b.len(), |k| at + k);
                b.splice(at..end, n.bytes());
            }
            4 => {
                let end = (at + 1 + rng.below(16) as usize).min(b.len());
                b.drain(at..end);
            }
            _ => b.insert(at, b"{}[]\",:-0e\\"[rng.below(11) as usize]),
        }
    }
    b
}

/// Runs `f`, turning a panic into a failure that names the input, which is kept for replay.
fn no_panic(kind: &str, input: &[u8], f: impl FnOnce()) -> Result<(), String> {
    match catch_unwind(AssertUnwindSafe(f)) {
        Ok(()) => Ok(()),
        Err(_) => {
            let dir = regressions();
            let _ = std::fs::create_dir_all(&dir);
            let digest: u64 = input
                .iter()
                .fold(0xcbf29ce484222325, |h, &c| (h ^ c as u64).wrapping_mul(0x100000001b3));
            let path = dir.join(format!("{kind}-{digest:016x}"));
            let _ = std::fs::write(&path, input);
            Err(format!("{kind} input panicked; kept as {}", path.display()))
        }
    }
}

fn parse_all(kind: &str, bytes: &[u8]) {
    let Ok(text) = std::str::from_utf8(bytes) else { return };
    match kind {
        "target" => {
            let _ = Target::from_json(text);
        }
        "scene" => {
            let _ = facetcal_render::SceneSpec::from_json(text).and_then(|spec| {
                facetcal_render::Scene::from_spec(spec, &repo().join("tests/scenes"))
            });
        }
        "correspondences" => {
            if let Ok(f) = CorrespondenceFile::from_json(text) {
                // A file that parses must round-trip to finite JSON.
                assert!(f.to_json().is_ok());
            }
        }
        _ => {
            if let Ok(f) = CalibrationFile::from_json(text) {
                let _ = f.to_json();
            }
        }
    }
}

fn seed_files() -> Vec<(&'static str, PathBuf)> {
    let mut v = Vec::new();
    for t in ["checkerboard", "corner", "dot-grid", "fold", "square-grid"] {
        v.push(("target", repo().join(format!("targets/{t}.json"))));
    }
    for entry in std::fs::read_dir(repo().join("tests/scenes")).into_iter().flatten().flatten() {
        v.push(("scene", entry.path()));
    }
    v
}

fn sample_correspondences() -> Vec<u8> {
    br#"{"format":"facetcal-correspondences","version":1,"unit":"mm","image_size":[640,480],
"model":"brown-conrady","free":{"skew":true},"views":[{"name":"a.png","points":[
{"target":[0,0,0],"image":[10.5,20.25]},{"target":[20,0,0],"image":[40.5,21.0]},
{"target":[0,20,0],"image":[11.0,50.0]},{"target":[20,20,5],"image":[41.0,52.0]}]}]}"#
        .to_vec()
}

/// Bundled files, mutated: every parser returns, never panics.
#[test]
fn mutated_files_never_panic_a_parser() {
    let mut failures = Vec::new();
    let mut seeds: Vec<(&str, Vec<u8>)> = seed_files()
        .into_iter()
        .filter_map(|(k, p)| std::fs::read(p).ok().map(|b| (k, b)))
        .collect();
    seeds.push(("correspondences", sample_correspondences()));
    assert!(seeds.len() >= 6, "bundled targets and scenes are the seeds");
    let mut rng = SeededRng::new(20261202);
    let mut runs = 0;
    for (kind, bytes) in &seeds {
        for _ in 0..cases() {
            let input = mutate(bytes, &mut rng);
            if let Err(e) = no_panic(kind, &input, || parse_all(kind, &input)) {
                failures.push(e);
            }
            runs += 1;
        }
    }
    println!("{runs} mutated files parsed without a panic");
    assert!(failures.is_empty(), "{failures:#?}");
}

/// Random images (noise, flat, saturated, stripes, tiny, 16-bit) through the reader, the
/// detector and the matcher for every bundled target.
#[test]
fn random_images_never_panic_the_detector_or_matcher() {
    let targets: Vec<Target> = ["checkerboard", "corner", "dot-grid", "fold", "square-grid"]
        .iter()
        .map(|t| Target::load(&repo().join(format!("targets/{t}.json"))).unwrap())
        .collect();
    let dir = tempfile::tempdir().unwrap();
    let mut rng = SeededRng::new(7);
    let mut failures = Vec::new();
    let n = cases() / 10 + 5;
    for k in 0..n {
        let (w, h) = (1 + rng.below(200) as u32, 1 + rng.below(160) as u32);
        let style = k % 5;
        let img = image::GrayImage::from_fn(w, h, |x, y| {
            let v = match style {
                0 => rng.below(256) as u8,
                1 => 128,
                2 => 255,
                3 => {
                    if (x / 7 + y / 5) % 2 == 0 {
                        20
                    } else {
                        230
                    }
                }
                _ => ((x * 37 + y * 91) % 256) as u8,
            };
            image::Luma([v])
        });
        let path = dir.path().join(format!("r{k}.png"));
        img.save(&path).unwrap();
        let bytes = std::fs::read(&path).unwrap();
        let target = &targets[k % targets.len()];
        let settings = Settings::default();
        let r = no_panic("image", &bytes, || {
            let rec = observe_image(&path, target, &settings);
            if let Ok(f) = &rec.outcome {
                assert!(f.points.iter().all(|c| c.image.iter().all(|v| v.is_finite())));
            }
        });
        if let Err(e) = r {
            failures.push(e);
        }
    }
    println!("{n} random images detected and identified without a panic");
    assert!(failures.is_empty(), "{failures:#?}");
}

/// Every input that ever failed is replayed.
#[test]
fn kept_failures_are_replayed() {
    let Ok(entries) = std::fs::read_dir(regressions()) else {
        println!("no kept failures yet");
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let target = Target::load(&repo().join("targets/corner.json")).unwrap();
    let mut count = 0;
    for entry in entries.flatten() {
        let path = entry.path();
        let name = path.file_name().unwrap().to_string_lossy().into_owned();
        let bytes = std::fs::read(&path).unwrap();
        let kind = name.split('-').next().unwrap_or("");
        let r = catch_unwind(AssertUnwindSafe(|| match kind {
            "image" => {
                let p = dir.path().join("replay.png");
                std::fs::write(&p, &bytes).unwrap();
                let _ = observe_image(&p, &target, &Settings::default());
            }
            k => parse_all(k, &bytes),
        }));
        assert!(r.is_ok(), "kept failure {} panics again", path.display());
        count += 1;
    }
    println!("{count} kept failures replayed");
}

fn random_png(w: u32, h: u32, seed: u64, dir: &Path, k: usize) -> PathBuf {
    let mut rng = SeededRng::new(seed);
    let img = image::RgbImage::from_fn(w, h, |_, _| {
        let v = rng.below(256) as u8;
        image::Rgb([v, v / 2, 255 - v])
    });
    let path = dir.join(format!("p{k}.png"));
    img.save(&path).unwrap();
    path
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: 24,
        failure_persistence: Some(Box::new(proptest::test_runner::FileFailurePersistence::Direct(
            concat!(env!("CARGO_MANIFEST_DIR"), "/tests/random_inputs.proptest-regressions"),
        ))),
        ..ProptestConfig::default()
    })]

    /// Random images and randomly mutated target files through the whole pipeline: reading,
    /// detection, identification, the solve and the result file, in process. Every outcome is
    /// a value or a reasoned error; a result file, when there is one, has only finite numbers.
    #[test]
    fn the_whole_pipeline_takes_random_images_and_targets(
        sizes in proptest::collection::vec((1u32..120, 1u32..90), 1..4),
        seed in any::<u64>(),
        target_pick in 0usize..5,
        mutation_seed in any::<u64>(),
    ) {
        let names = ["checkerboard", "corner", "dot-grid", "fold", "square-grid"];
        let text = std::fs::read(repo().join(format!("targets/{}.json", names[target_pick]))).unwrap();
        let mut rng = SeededRng::new(mutation_seed);
        let mutated = if mutation_seed % 3 == 0 { text.clone() } else { mutate(&text, &mut rng) };
        let target = std::str::from_utf8(&mutated).ok().and_then(|t| Target::from_json(t).ok());
        let Some(target) = target else { return Ok(()) };
        let dir = tempfile::tempdir().unwrap();
        let paths: Vec<PathBuf> = sizes
            .iter()
            .enumerate()
            .map(|(k, &(w, h))| random_png(w, h, seed ^ k as u64, dir.path(), k))
            .collect();
        let settings = Settings::default();
        let outcome = catch_unwind(AssertUnwindSafe(|| {
            let records: Vec<_> = paths.iter().map(|p| observe_image(p, &target, &settings)).collect();
            let record = facetcal_model::files::InputRecord { path: "t".into(), sha256: "0".repeat(64) };
            if let Ok(run) = calibrate_records(&records, &target, record, "test", &settings) {
                // Either finite JSON, or a refusal naming the non-finite field.
                let _ = run.file.to_json();
            }
        }));
        prop_assert!(outcome.is_ok(), "the pipeline panicked");
    }
}
