//! `facetcal fleet` end to end: a small fleet of rendered cameras (facetcal-render, exact
//! truth; one shot each of the three-face corner target) plus bad camera folders, calibrated by
//! the binary; then the same fleet in three shards run as separate processes and merged, which
//! must give the single run's fleet file.
//!
//! Outside references: the rendered cameras' exact intrinsics (each passing camera's fx, cx
//! within the calibrate test's tolerances of its truth), SHA-256 as FIPS 180-4 defines it (via
//! the image reader's hash, not the fleet crate's) for the shard of each id, RFC 4180 for the
//! CSV, the XML escapes of the XML 1.0 specification for the HTML.

use std::path::Path;
use std::process::Command;

use facetcal_model::{Camera, Distortion, Intrinsics, Target};
use facetcal_render::{PoseGenerator, Scene, render_all_par};
use serde_json::Value;

use crate::util::{Run, bundled_target, facetcal, scratch};

/// fx of each rendered camera; `cam-e` is far off the spec's nominal 900 and the fleet's median.
const CAMERAS: [(&str, f64); 5] =
    [("cam-a", 899.0), ("cam-b", 900.0), ("cam-c", 901.0), ("cam-d", 902.0), ("cam-e", 960.0)];
/// Folders that cannot calibrate: corrupt images, no images, a name that needs quoting in CSV.
const BAD: [&str; 3] = ["<cam&1>", "cam-empty", "odd,\"name\""];

fn lens(f: f64, k: usize) -> Camera {
    Camera {
        width: 1024,
        height: 768,
        intrinsics: Intrinsics {
            fx: f,
            fy: f * 1.001,
            cx: 511.5 + 1.5 * k as f64,
            cy: 383.5 - 1.0 * k as f64,
            skew: 0.0,
        },
        distortion: Distortion::BrownConrady { k1: -0.10, k2: 0.03, p1: 0.0, p2: 0.0, k3: 0.0 },
    }
}

fn render_fleet(root: &Path) {
    let target = Target::load(&bundled_target("corner")).unwrap();
    for (k, (id, f)) in CAMERAS.iter().enumerate() {
        let mut poses = PoseGenerator::new(1, 300 + k as u64, [450.0, 520.0]);
        poses.tilt_deg = [0.0, 15.0];
        poses.coverage = 0.6;
        let scene = Scene::builder(target.clone(), lens(*f, k))
            .random_poses(poses)
            .psf_sigma_px(0.9)
            .noise_sigma(2.0)
            .seed(7 + k as u64)
            .build()
            .unwrap();
        let dir = root.join(id);
        std::fs::create_dir_all(&dir).unwrap();
        for (v, view) in render_all_par(&scene).unwrap().into_iter().enumerate() {
            std::fs::write(dir.join(format!("shot-{v}.png")), view.image.to_png().unwrap())
                .unwrap();
        }
    }
    std::fs::create_dir_all(root.join(BAD[0])).unwrap();
    std::fs::write(root.join(BAD[0]).join("shot-0.png"), b"\x89PNG\r\n\x1a\nnot really").unwrap();
    std::fs::create_dir_all(root.join(BAD[1])).unwrap();
    std::fs::create_dir_all(root.join(BAD[2])).unwrap();
    std::fs::create_dir_all(root.join(".trash")).unwrap();
    std::fs::write(root.join("notes.txt"), "not a camera").unwrap();
}

fn spec(dir: &Path) -> std::path::PathBuf {
    let path = dir.join("spec.json");
    std::fs::write(
        &path,
        r#"{"format": "facetcal-fleet-spec", "version": 1,
            "nominal": {"fx": {"value": 900.0, "tolerance": 20.0}, "cx": {"value": 514.0, "tolerance": 10.0}},
            "max_rms_px": 0.5, "min_points": 100}"#,
    )
    .unwrap();
    path
}

fn json(path: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

/// RFC 4180 (section 2): fields split at commas, a quoted field may hold commas, line breaks
/// and doubled quotes; records end in CRLF.
fn parse_csv(text: &str) -> Vec<Vec<String>> {
    let mut rows = vec![];
    let (mut row, mut field, mut quoted, mut chars) =
        (vec![], String::new(), false, text.chars().peekable());
    while let Some(c) = chars.next() {
        match (quoted, c) {
            (true, '"') if chars.peek() == Some(&'"') => {
                chars.next();
                field.push('"');
            }
            (true, '"') => quoted = false,
            (true, c) => field.push(c),
            (false, '"') if field.is_empty() => quoted = true,
            (false, ',') => row.push(std::mem::take(&mut field)),
            (false, '\r') if chars.peek() == Some(&'\n') => {
                chars.next();
                row.push(std::mem::take(&mut field));
                rows.push(std::mem::take(&mut row));
            }
            (false, c) => field.push(c),
        }
    }
    assert!(field.is_empty() && row.is_empty(), "the last record ends in CRLF");
    rows
}

fn camera<'a>(fleet: &'a Value, id: &str) -> &'a Value {
    fleet["cameras"].as_array().unwrap().iter().find(|c| c["id"] == id).unwrap()
}

fn fleet_run(dir: &Path, args: &[&str]) -> Run {
    let run = facetcal(dir, args);
    println!("facetcal {}\n{}{}", args.join(" "), run.stdout, run.stderr);
    run
}

#[test]
fn fleet_judges_every_camera_and_merged_shards_equal_the_single_run() {
    let tmp = scratch();
    let dir = tmp.path();
    render_fleet(&dir.join("root"));
    let spec = spec(dir);
    let target = bundled_target("corner");
    let target = target.to_str().unwrap();
    let spec_arg = spec.to_str().unwrap();
    let base = ["fleet", "root", "--target", target, "--spec", spec_arg];

    let single = fleet_run(dir, &[&base[..], &["--out", "single"]].concat());
    assert_eq!(single.code, 2, "some cameras fail: partial");
    assert!(single.stderr.contains(".trash") && single.stderr.contains("notes.txt"));
    let fleet = json(&dir.join("single/fleet.json"));
    assert_eq!(fleet["format"], "facetcal-fleet");
    assert_eq!(fleet["counts"]["cameras"], 8);
    let ids: Vec<&str> =
        fleet["cameras"].as_array().unwrap().iter().map(|c| c["id"].as_str().unwrap()).collect();
    let mut sorted = ids.clone();
    sorted.sort();
    assert_eq!(ids, sorted, "cameras sorted by id");

    for (k, (id, f)) in CAMERAS.iter().enumerate() {
        let c = camera(&fleet, id);
        let truth = lens(*f, k).intrinsics;
        let fx = c["values"]["fx"].as_f64().unwrap();
        let cx = c["values"]["cx"].as_f64().unwrap();
        assert!((fx - truth.fx).abs() / truth.fx < 1e-3, "{id}: fx {fx} vs {}", truth.fx);
        assert!((cx - truth.cx).abs() < 1.0, "{id}: cx {cx} vs {}", truth.cx);
        assert!(dir.join("single").join(id).join("calibration.json").is_file());
        assert!(dir.join("single").join(id).join("report.html").is_file());
        if *id == "cam-e" {
            assert_eq!(c["status"], "failed", "{c}");
            let reasons = c["reasons"].to_string();
            assert!(reasons.contains("spec fx"), "{reasons}");
            assert!(c["outliers"].as_array().unwrap().contains(&Value::from("fx")), "{c}");
        } else {
            assert_eq!(c["status"], "passed", "{c}");
            assert_eq!(c["outliers"].as_array().unwrap().len(), 0, "{c}");
        }
    }
    for id in BAD {
        let c = camera(&fleet, id);
        assert_eq!(c["status"], "not-calibrated", "{c}");
        assert!(!c["reasons"][0].as_str().unwrap().is_empty());
    }
    assert!(camera(&fleet, "cam-empty")["reasons"][0].as_str().unwrap().contains("no image files"));
    // The median of the five calibrated fx is the middle one of the rendered 899..902, 960.
    let fx_stats =
        fleet["statistics"].as_array().unwrap().iter().find(|s| s["name"] == "fx").unwrap();
    assert_eq!(fx_stats["count"], 5);
    assert!((fx_stats["median"].as_f64().unwrap() - 901.0).abs() < 1.0, "{fx_stats}");

    // CSV: a header and one record per camera; ids with a comma or quote survive quoting.
    let rows = parse_csv(&std::fs::read_to_string(dir.join("single/fleet.csv")).unwrap());
    assert_eq!(rows[0][0], "id");
    assert_eq!(rows.len(), 9);
    assert!(rows.iter().all(|r| r.len() == rows[0].len()));
    let csv_ids: Vec<&str> = rows[1..].iter().map(|r| r[0].as_str()).collect();
    assert_eq!(csv_ids, ids);
    // HTML: the id with markup is escaped, never raw; failed cameras come first.
    let html = std::fs::read_to_string(dir.join("single/fleet.html")).unwrap();
    assert!(html.contains("&lt;cam&amp;1&gt;") && !html.contains("<cam&1>"));
    assert!(html.find(">cam-e<").unwrap() < html.find(">cam-a<").unwrap(), "failed first");
    assert_eq!(html.matches("<svg").count(), 6, "histograms of fx, fy, cx, cy, k1, RMS");

    // No overwrite without --force, checked before any work.
    let again = fleet_run(dir, &[&base[..], &["--out", "single"]].concat());
    assert_eq!(again.code, 73);

    // Three shards as separate processes at once.
    let children: Vec<_> = (0..3)
        .map(|k| {
            let out = format!("shard{k}");
            let shard = format!("{k}/3");
            Command::new(env!("CARGO_BIN_EXE_facetcal"))
                .args([&base[..], &["--out", &out, "--shard", &shard]].concat())
                .current_dir(dir)
                .output()
        })
        .collect();
    let mut shard_ids: Vec<String> = vec![];
    for (k, c) in children.into_iter().enumerate() {
        let o = c.unwrap();
        assert!([0, 2, 65].contains(&o.status.code().unwrap()), "{o:?}");
        let f = json(&dir.join(format!("shard{k}/fleet.json")));
        assert_eq!(f["shard"], format!("{k}/3"));
        for c in f["cameras"].as_array().unwrap() {
            let id = c["id"].as_str().unwrap();
            let hex = facetcal_imageio::sha256_hex(id.as_bytes());
            assert_eq!(u64::from_str_radix(&hex[..16], 16).unwrap() % 3, k as u64, "{id}");
            shard_ids.push(id.into());
        }
    }
    shard_ids.sort();
    assert_eq!(shard_ids, ids, "the shards partition the fleet");

    let merged =
        fleet_run(dir, &["fleet", "merge", "shard0", "shard1", "shard2", "--out", "merged"]);
    assert_eq!(merged.code, 2);
    assert_eq!(json(&dir.join("merged/fleet.json")), fleet, "merge equals the single run");
    for name in ["fleet.csv", "fleet.html", "cam-a/calibration.json", "cam-e/report.html"] {
        assert_eq!(
            std::fs::read(dir.join("merged").join(name)).unwrap(),
            std::fs::read(dir.join("single").join(name)).unwrap(),
            "{name}"
        );
    }
    let twice =
        fleet_run(dir, &["fleet", "merge", "shard0", "shard0", "shard1", "shard2", "--out", "m2"]);
    assert_eq!(twice.code, 65);
    assert!(twice.stderr.contains("given twice"), "{}", twice.stderr);
    let missing = fleet_run(dir, &["fleet", "merge", "shard0", "shard2", "--out", "m3"]);
    assert_eq!(missing.code, 65);
    assert!(missing.stderr.contains("missing shard 1/3"), "{}", missing.stderr);
}

#[test]
fn fleet_input_errors_have_their_exit_codes() {
    let tmp = scratch();
    let dir = tmp.path();
    let target = bundled_target("corner");
    let target = target.to_str().unwrap();
    let r = fleet_run(dir, &["fleet", "nowhere", "--target", target, "--out", "o"]);
    assert_eq!(r.code, 66, "missing ROOT");
    std::fs::create_dir_all(dir.join("root/cam")).unwrap();
    let r = fleet_run(dir, &["fleet", "root", "--target", "none.json", "--out", "o"]);
    assert_eq!(r.code, 66, "missing target");
    std::fs::write(
        dir.join("bad.json"),
        r#"{"format": "facetcal-fleet-spec", "version": 1, "max_rms_px": -1}"#,
    )
    .unwrap();
    let r =
        fleet_run(dir, &["fleet", "root", "--target", target, "--out", "o", "--spec", "bad.json"]);
    assert_eq!(r.code, 65);
    assert!(r.stderr.contains("max_rms_px"), "the error names the field: {}", r.stderr);
    let r = fleet_run(dir, &["fleet", "root", "--target", target, "--out", "o", "--shard", "3/3"]);
    assert_eq!(r.code, 64, "K must be below N");
    // The only camera has no images: nothing usable.
    let r = fleet_run(dir, &["fleet", "root", "--target", target, "--out", "o"]);
    assert_eq!(r.code, 65);
    assert_eq!(json(&dir.join("o/fleet.json"))["counts"]["not_calibrated"], 1);
}
