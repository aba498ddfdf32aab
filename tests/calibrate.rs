//! `facetcal calibrate` end to end: rendered image sets of every bundled target (facetcal-render,
//! exact truth) calibrated by the binary; the estimates must recover the rendered camera. Then
//! every error path with its exit code and message.
//!
//! Tolerances are the issue's: fx, fy within 0.1 %, cx, cy within 1 px, RMS near the rendered
//! noise (the detector's error on these renders is about 0.01 to 0.03 px, see DEVELOPERS.md).

use std::path::Path;

use facetcal_model::files::{CalibrationFile, ViewStatus};
use facetcal_model::{Camera, Target};

use crate::util::{bundled_target, corner_shot, facetcal, lens, render_pngs, scratch};

/// Renders `count` random views of a bundled target into `dir` as PNG files.
fn render_set(
    name: &str,
    camera: Camera,
    count: u32,
    distance: [f64; 2],
    tilt: [f64; 2],
    dir: &Path,
) {
    std::fs::create_dir_all(dir).unwrap();
    for (k, png) in render_pngs(name, camera, count, distance, tilt).into_iter().enumerate() {
        std::fs::write(dir.join(format!("{name}-{k:02}.png")), png).unwrap();
    }
}

fn read_result(dir: &Path) -> CalibrationFile {
    let text = std::fs::read_to_string(dir.join("calibration.json")).unwrap();
    CalibrationFile::from_json(&text).unwrap()
}

fn assert_recovers(name: &str, truth: &Camera, got: &CalibrationFile) {
    let (t, g) = (truth.intrinsics, got.camera.intrinsics);
    let rel = |a: f64, b: f64| (a - b).abs() / b;
    let line = format!(
        "{name}: fx {:.3} ({:.3}), fy {:.3} ({:.3}), cx {:.3} ({:.3}), cy {:.3} ({:.3}), rms {:.4} px, used {}/{}",
        g.fx,
        t.fx,
        g.fy,
        t.fy,
        g.cx,
        t.cx,
        g.cy,
        t.cy,
        got.rms_px,
        got.views.iter().filter(|v| v.status == ViewStatus::Used).count(),
        got.views.len()
    );
    println!("{line}");
    assert!(rel(g.fx, t.fx) < 1e-3 && rel(g.fy, t.fy) < 1e-3, "{line}");
    assert!((g.cx - t.cx).abs() < 1.0 && (g.cy - t.cy).abs() < 1.0, "{line}");
    assert!(got.rms_px < 0.08, "RMS far above the rendered noise: {line}");
    let (tk, gk) = (truth.distortion.coefficients(), got.camera.distortion.coefficients());
    assert!((tk[0] - gk[0]).abs() < 0.01, "{line}: k1 {} vs {}", gk[0], tk[0]);
    assert!(got.verdict.as_ref().is_some_and(|v| v.passed), "{line}: verdict {:?}", got.verdict);
}

/// Every bundled target, through the binary, recovers the rendered camera.
#[test]
fn calibrate_recovers_the_rendered_camera_for_every_bundled_target() {
    let root = scratch();
    // Flat targets: five views tilted 15 to 40 degrees; targets with faces off one plane: two
    // views (one would do; two make the distortion better constrained).
    // (target, camera, views, distance range, tilt range)
    type Case = (&'static str, Camera, u32, [f64; 2], [f64; 2]);
    let cases: [Case; 5] = [
        ("checkerboard", lens(640, 480, 620.0, -0.12, 0.04), 5, [420.0, 520.0], [15.0, 40.0]),
        ("dot-grid", lens(1024, 768, 900.0, -0.12, 0.04), 5, [500.0, 600.0], [15.0, 40.0]),
        ("square-grid", lens(1024, 768, 900.0, -0.12, 0.04), 5, [500.0, 600.0], [15.0, 40.0]),
        ("fold", lens(1024, 768, 900.0, -0.10, 0.03), 3, [450.0, 520.0], [0.0, 20.0]),
        ("corner", lens(1024, 768, 900.0, -0.10, 0.03), 2, [450.0, 520.0], [0.0, 15.0]),
    ];
    for (name, camera, count, distance, tilt) in cases {
        let images = root.path().join(name);
        render_set(name, camera, count, distance, tilt, &images);
        let out = root.path().join(format!("{name}-out"));
        let target = bundled_target(name);
        let run = calibrate_in(root.path(), &images, &target, &out, &[]);
        assert_eq!(run.code, 0, "{name}: {}\n{}", run.stdout, run.stderr);
        let got = read_result(&out);
        assert_recovers(name, &camera, &got);
        // Views the matcher refuses are left out with a reason (never misidentified); the
        // camera must still be recovered from the rest.
        for v in got.views.iter().filter(|v| v.status != ViewStatus::Used) {
            println!("  {name}: {} left out: {}", v.name, v.reason.as_deref().unwrap_or(""));
        }
        let used = got.views.iter().filter(|v| v.status == ViewStatus::Used).count();
        let need = if Target::load(&target).unwrap().is_planar() { 3 } else { 1 };
        assert!(used >= need, "{name}: {used} views used");
        assert_eq!(got.inputs.len(), count as usize);
        assert!(out.join("report.html").is_file());
    }
}

/// One rendered corner-target shot, reused by the error-path tests.
fn one_good_shot(dir: &Path) {
    std::fs::create_dir_all(dir).unwrap();
    std::fs::write(dir.join("corner-00.png"), corner_shot()).unwrap();
}

fn calibrate_in(
    root: &Path,
    images: &Path,
    target: &Path,
    out: &Path,
    extra: &[&str],
) -> crate::util::Run {
    let mut args = vec![
        "calibrate",
        images.to_str().unwrap(),
        "--target",
        target.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    facetcal(root, &args)
}

/// Every way a run can fail, with its exit code (README, "Exit codes") and a message naming the
/// file; and a bad image among good ones is left out with its reason while the run succeeds.
#[test]
fn calibrate_error_paths_exit_codes_and_messages() {
    let root = scratch();
    let r = root.path();
    let images = r.join("shots");
    one_good_shot(&images);
    let target = bundled_target("corner");

    // A corrupt image and a text file beside the good shot: both reported, the run succeeds.
    std::fs::write(images.join("broken.png"), b"\x89PNG\r\n\x1a\nnot really").unwrap();
    std::fs::write(images.join("notes.txt"), b"lot 17").unwrap();
    let out = r.join("out");
    let run = calibrate_in(r, &images, &target, &out, &["--json"]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    assert!(
        run.stderr.contains("broken.png") && run.stderr.contains("notes.txt"),
        "{}",
        run.stderr
    );
    let printed = CalibrationFile::from_json(&run.stdout).expect("--json prints the result file");
    let written = read_result(&out);
    assert_eq!(printed, written);
    let broken = written.views.iter().find(|v| v.name == "broken.png").unwrap();
    assert_eq!(broken.status, ViewStatus::Failed);
    assert!(broken.reason.as_deref().unwrap().starts_with("read:"), "{:?}", broken.reason);
    let target_hash = written.target_file.as_ref().unwrap();
    assert_eq!(target_hash.sha256.len(), 64);

    // Results are never overwritten without --force; with it they are.
    let before = std::fs::read(out.join("calibration.json")).unwrap();
    let run = calibrate_in(r, &images, &target, &out, &[]);
    assert_eq!(run.code, 73, "{}", run.stderr);
    assert!(
        run.stderr.contains("already exists") && run.stderr.contains("--force"),
        "{}",
        run.stderr
    );
    assert_eq!(std::fs::read(out.join("calibration.json")).unwrap(), before);
    let run = calibrate_in(r, &images, &target, &out, &["--force"]);
    assert_eq!(run.code, 0, "{}", run.stderr);

    // The quality gate: the files are written, the verdict names the failed check, exit 65.
    let strict = r.join("strict");
    let run = calibrate_in(r, &images, &target, &strict, &["--max-rms", "0.0001"]);
    assert_eq!(run.code, 65, "{}", run.stdout);
    assert!(run.stdout.contains("verdict: FAILED: rms"), "{}", run.stdout);
    let v = read_result(&strict).verdict.unwrap();
    assert!(
        !v.passed && v.checks.iter().any(|c| c.name == "rms" && !c.passed && c.limit == 0.0001)
    );

    // Missing inputs: exit 66, naming the path.
    let run = calibrate_in(r, &r.join("nowhere"), &target, &r.join("o1"), &[]);
    assert_eq!(run.code, 66, "{}", run.stderr);
    assert!(run.stderr.contains("nowhere"), "{}", run.stderr);
    let run = calibrate_in(r, &images, &r.join("no-target.json"), &r.join("o2"), &[]);
    assert_eq!(run.code, 66, "{}", run.stderr);
    assert!(run.stderr.contains("no-target.json"), "{}", run.stderr);

    // A malformed target: exit 65, naming the file and the field.
    let bad_target = r.join("bad-target.json");
    let text =
        std::fs::read_to_string(&target).unwrap().replacen("\"cell\": 25.0", "\"cell\": -25.0", 1);
    std::fs::write(&bad_target, text).unwrap();
    let run = calibrate_in(r, &images, &bad_target, &r.join("o3"), &[]);
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(
        run.stderr.contains("bad-target.json") && run.stderr.contains("cell"),
        "{}",
        run.stderr
    );

    // No image files, or none usable: exit 65 with the reasons.
    let empty = r.join("empty");
    std::fs::create_dir(&empty).unwrap();
    let run = calibrate_in(r, &empty, &target, &r.join("o4"), &[]);
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(run.stderr.contains("no image files"), "{}", run.stderr);
    let junk = r.join("junk");
    std::fs::create_dir(&junk).unwrap();
    std::fs::write(junk.join("a.jpg"), b"").unwrap();
    std::fs::write(junk.join("b.png"), [0u8; 64]).unwrap();
    let run = calibrate_in(r, &junk, &target, &r.join("o5"), &[]);
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(run.stderr.contains("no usable image among 2"), "{}", run.stderr);
    assert!(run.stderr.contains("a.jpg") && run.stderr.contains("b.png"), "{}", run.stderr);

    // Images of another target: identified nowhere, exit 65.
    let run = calibrate_in(r, &images, &bundled_target("dot-grid"), &r.join("o6"), &[]);
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(run.stderr.contains("no feature of the target identified"), "{}", run.stderr);

    // An output folder that cannot be created (a file is in the way): exit 73.
    let blocker = r.join("blocker");
    std::fs::write(&blocker, b"x").unwrap();
    let run = calibrate_in(r, &images, &target, &blocker.join("out"), &[]);
    assert_eq!(run.code, 73, "{}", run.stderr);

    // `verify`: the shot the camera was calibrated from fits it; a stricter limit fails it;
    // the overlay is written; an image that cannot be read is reported.
    let cal = out.join("calibration.json");
    let shot = images.join("corner-00.png");
    let overlays = r.join("overlays");
    let (cal_s, target_s) = (cal.to_str().unwrap(), target.to_str().unwrap());
    let run = facetcal(
        r,
        &[
            "verify",
            shot.to_str().unwrap(),
            "--calibration",
            cal_s,
            "--target",
            target_s,
            "--overlay",
            overlays.to_str().unwrap(),
        ],
    );
    assert_eq!(run.code, 0, "{}", run.stderr);
    assert!(run.stdout.contains("147 points") && run.stdout.contains("pass"), "{}", run.stdout);
    assert!(overlays.join("corner-00.verify.png").is_file());
    let shot_s = shot.to_str().unwrap();
    let args =
        ["verify", shot_s, "--calibration", cal_s, "--target", target_s, "--max-rms", "0.0001"];
    let run = facetcal(r, &args);
    assert_eq!(run.code, 65, "{}", run.stdout);
    assert!(run.stdout.contains("FAILED"), "{}", run.stdout);
    let broken = images.join("broken.png");
    let run = facetcal(
        r,
        &["verify", broken.to_str().unwrap(), "--calibration", cal_s, "--target", target_s],
    );
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(
        run.stderr.contains("broken.png") && run.stderr.contains("cannot verify"),
        "{}",
        run.stderr
    );

    // Bad options: exit 64.
    let run = calibrate_in(r, &images, &target, &r.join("o7"), &["--min-coverage", "2"]);
    assert_eq!(run.code, 64, "{}", run.stderr);
    let run = calibrate_in(r, &images, &target, &r.join("o8"), &["--model", "fisheye-ish"]);
    assert_eq!(run.code, 64, "{}", run.stderr);
}
