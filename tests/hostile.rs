//! Hostile inputs through the binary: calibration files that would size huge buffers or make
//! no sense, JSON inputs that never end or are not text, and FIFOs, devices and folders where a
//! file is expected. Each is refused with its reason and exit code (README, "Exit codes"), and
//! nothing blocks: every run here is killed and failed after 60 s.

use std::path::Path;

use serde_json::{Value, json};

use crate::undistort::{calibration, camera};
use crate::util::{bundled_target, facetcal_within, mkfifo, scratch};

const LIMIT_S: u64 = 60;

fn good_calibration() -> Value {
    serde_json::from_str(&calibration(camera()).to_json().unwrap()).unwrap()
}

fn undistort(dir: &Path, calibration: &str) -> crate::util::Run {
    let args = ["undistort", "x.png", "--calibration", calibration, "--out", "o"];
    facetcal_within(dir, &args, LIMIT_S)
}

/// (what is changed, JSON pointer, new value, what the message must name)
fn bad_calibrations() -> Vec<(&'static str, Value, &'static str)> {
    vec![
        ("/camera/width", json!(1_000_000), "1000000 x 240 pixels is over the limit"),
        ("/camera/height", json!(1_000_000), "320 x 1000000 pixels is over the limit"),
        ("/camera/width", json!(0), "must be positive"),
        ("/camera/intrinsics/fx", json!(-900.0), "camera.intrinsics.fx"),
        ("/camera/intrinsics/fy", json!(0.0), "camera.intrinsics.fy"),
        ("/camera/intrinsics/cx", json!(1e9), "camera.intrinsics.cx"),
        ("/camera/intrinsics/cy", json!(-1e9), "camera.intrinsics.cy"),
    ]
}

/// The abort of the issue (a 100000 x 100000 calibration made undistort allocate 80 GB) and a
/// negative focal length (once accepted and an image written): every bad field is named, the
/// exit code is 65 and no output is made.
#[test]
fn bad_calibration_files_are_refused_before_anything_is_allocated() {
    let root = scratch();
    let dir = root.path();
    std::fs::write(dir.join("x.png"), b"never read").unwrap();
    for (pointer, value, says) in bad_calibrations() {
        let mut cal = good_calibration();
        *cal.pointer_mut(pointer).unwrap() = value.clone();
        std::fs::write(dir.join("cal.json"), cal.to_string()).unwrap();
        let run = undistort(dir, "cal.json");
        assert_eq!(run.code, 65, "{pointer} = {value}: {}", run.stderr);
        assert!(
            run.stderr.contains("cal.json") && run.stderr.contains(says),
            "{pointer}: {}",
            run.stderr
        );
        assert!(!dir.join("o/x.png").exists(), "{pointer}: an image was written");
    }
    // The case: both sides 100000 (80 GB of remap table).
    let mut cal = good_calibration();
    cal["camera"]["width"] = json!(100000);
    cal["camera"]["height"] = json!(100000);
    std::fs::write(dir.join("cal.json"), cal.to_string()).unwrap();
    let run = undistort(dir, "cal.json");
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(
        run.stderr.contains("100000 x 100000 pixels is over the limit of 100000000"),
        "{}",
        run.stderr
    );
    // A number beyond f64 in a distortion coefficient is named by its path.
    let text = good_calibration().to_string().replace("\"k1\":-0.3", "\"k1\":1e999");
    assert!(text.contains("1e999"));
    std::fs::write(dir.join("cal.json"), text).unwrap();
    let run = undistort(dir, "cal.json");
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(run.stderr.contains("camera.distortion"), "{}", run.stderr);
}

/// A JSON input over the documented cap of 128 MiB is refused by its size before it is read (a
/// sparse file: the test writes no data), and `/dev/zero` is refused as a device, not read
/// until the kernel kills the process.
#[test]
fn oversize_and_endless_json_inputs_are_refused() {
    let root = scratch();
    let dir = root.path();
    let big = std::fs::File::create(dir.join("big.json")).unwrap();
    big.set_len((128 << 20) + 1).unwrap();
    drop(big);
    let run = undistort(dir, "big.json");
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(
        run.stderr.contains("big.json: larger than the limit of 134217728 bytes"),
        "{}",
        run.stderr
    );
    let target = dir.join("big.json");
    let run = facetcal_within(dir, &["target", "check", target.to_str().unwrap()], LIMIT_S);
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(run.stderr.contains("larger than the limit"), "{}", run.stderr);

    let run = undistort(dir, "/dev/zero");
    assert_eq!(run.code, 66, "{}", run.stderr);
    assert!(
        run.stderr.contains("/dev/zero: is a character device, not a regular file"),
        "{}",
        run.stderr
    );
}

/// A byte-order mark and bytes that are not UTF-8 get messages that say so (exit 65).
#[test]
fn json_inputs_that_are_not_plain_utf8_are_named() {
    let root = scratch();
    let dir = root.path();
    let good = std::fs::read(bundled_target("corner")).unwrap();
    let mut bom = b"\xEF\xBB\xBF".to_vec();
    bom.extend_from_slice(&good);
    std::fs::write(dir.join("bom.json"), bom).unwrap();
    let mut latin = good.clone();
    latin.splice(1..1, b"\"caf\xE9\": 1,".iter().copied());
    std::fs::write(dir.join("latin.json"), latin).unwrap();
    for (file, says) in [("bom.json", "byte-order mark"), ("latin.json", "not UTF-8")] {
        for cmd in
            [&["target", "check", file][..], &["detect", "x.png", "--target", file, "--out", "o"]]
        {
            let run = facetcal_within(dir, cmd, LIMIT_S);
            assert_eq!(run.code, 65, "{cmd:?}: {}", run.stderr);
            assert!(run.stderr.contains(file) && run.stderr.contains(says), "{}", run.stderr);
        }
    }
}

/// A FIFO, a folder or a device where a JSON file is expected: every command refuses it at
/// once with its kind (exit 66); none opens it for a blocking read.
#[cfg(unix)]
#[test]
fn special_files_as_json_inputs_never_block() {
    let root = scratch();
    let dir = root.path();
    mkfifo(&dir.join("fifo.json"));
    std::fs::create_dir(dir.join("folder.json")).unwrap();
    std::fs::write(dir.join("x.png"), b"never read").unwrap();
    let target = bundled_target("corner");
    let t = target.to_str().unwrap();
    for (special, kind) in
        [("fifo.json", "a FIFO"), ("folder.json", "a folder"), ("/dev/null", "a character device")]
    {
        let commands: Vec<Vec<&str>> = vec![
            vec!["target", "check", special],
            vec!["detect", "x.png", "--target", special, "--out", "o"],
            vec!["calibrate", ".", "--target", special, "--out", "o"],
            vec!["verify", "x.png", "--calibration", special, "--target", t],
            vec!["undistort", "x.png", "--calibration", special, "--out", "o"],
            vec!["solve", special],
            vec!["render", special, "--out", "o"],
            vec!["regress", special, "--out", "o"],
            vec!["fleet", ".", "--spec", special, "--target", t, "--out", "o"],
        ];
        for cmd in commands {
            let run = facetcal_within(dir, &cmd, LIMIT_S);
            assert_eq!(run.code, 66, "{cmd:?}: {}", run.stderr);
            let says = format!("{special}: is {kind}, not a regular file");
            assert!(run.stderr.contains(&says), "{cmd:?}: {}", run.stderr);
        }
    }
}

/// A FIFO named like an image among the shots (`mkfifo shots/p.png` once hung `calibrate`) is
/// skipped with its reason; given to `detect` it is a skipped input, never opened.
#[cfg(unix)]
#[test]
fn a_fifo_among_the_images_is_skipped_with_its_reason() {
    let root = scratch();
    let dir = root.path();
    let shots = dir.join("shots");
    std::fs::create_dir(&shots).unwrap();
    std::fs::write(shots.join("corner-00.png"), crate::util::corner_shot()).unwrap();
    mkfifo(&shots.join("p.png"));
    let target = bundled_target("corner");
    let t = target.to_str().unwrap();
    let run = facetcal_within(dir, &["calibrate", "shots", "--target", t, "--out", "cal"], LIMIT_S);
    assert!(dir.join("cal/calibration.json").is_file(), "{}", run.stderr);
    let line = run.stderr.lines().find(|l| l.contains("p.png")).unwrap_or("");
    assert!(line.contains("is a FIFO, not a regular file"), "{}", run.stderr);

    let run = facetcal_within(
        dir,
        &["detect", "shots/p.png", "shots/corner-00.png", "--target", t, "--out", "d"],
        LIMIT_S,
    );
    assert_eq!(run.code, 2, "{}", run.stderr);
    assert!(run.stderr.contains("p.png: is a FIFO, not a regular file"), "{}", run.stderr);
}
