//! `facetcal solve` end to end: correspondence files written to a scratch folder, the binary
//! run on them, the calibration result file read back.

use facetcal_model::files::{CalibrationFile, CorrespondenceFile, PointPair, ViewPoints};
use facetcal_model::{DistortionKind, Unit};

use crate::util::{facetcal, scratch};

/// Zhang's published data (Z. Zhang, "A Flexible New Technique for Camera Calibration",
/// IEEE TPAMI 22(11), 2000) as a correspondence file, read from the reference folder.
fn zhang_file() -> Option<CorrespondenceFile> {
    let dir = facetcal_model::reference_dir("zhang1998")?;
    let parse = |name: &str| -> Vec<f64> {
        std::fs::read_to_string(dir.join(name))
            .unwrap()
            .split_whitespace()
            .map(|t| t.parse().unwrap())
            .collect()
    };
    let m = parse("Model.txt");
    let views = (1..=5)
        .map(|i| {
            let d = parse(&format!("data{i}.txt"));
            ViewPoints {
                name: format!("data{i}"),
                points: (0..256)
                    .map(|k| PointPair {
                        id: None,
                        target: [m[2 * k], m[2 * k + 1], 0.0],
                        image: [d[2 * k], d[2 * k + 1]],
                    })
                    .collect(),
            }
        })
        .collect();
    let mut f = CorrespondenceFile::new(Unit::In, [640, 480], DistortionKind::BrownConrady, views);
    f.free.skew = true;
    Some(f)
}

/// The published estimates through the command (fx 832.50, fy 832.53, skew 0.2045,
/// cx 303.959, cy 206.585, k1 -0.228601, k2 0.190353; within 0.01 px and 1e-4), with the
/// paper's plain least squares.
#[test]
fn solve_reproduces_zhang_through_the_command() {
    let Some(file) = zhang_file() else { return };
    let dir = scratch();
    std::fs::write(dir.path().join("zhang.json"), file.to_json().unwrap()).unwrap();
    let run = facetcal(
        dir.path(),
        &["solve", "zhang.json", "--out", "cal.json", "--loss", "squared", "--keep-all"],
    );
    assert_eq!(run.code, 0, "{}", run.stderr);
    let text = std::fs::read_to_string(dir.path().join("cal.json")).unwrap();
    let cal = CalibrationFile::from_json(&text).unwrap();
    assert_eq!(cal.format, "facetcal-calibration");
    assert_eq!(cal.unit, Unit::In);
    let value = |n: &str| cal.parameters.iter().find(|p| p.name == n).unwrap().value;
    for (n, want, tol) in [
        ("fx", 832.50, 0.01),
        ("fy", 832.53, 0.01),
        ("skew", 0.204494, 0.01),
        ("cx", 303.959, 0.01),
        ("cy", 206.585, 0.01),
        ("k1", -0.228601, 1e-4),
        ("k2", 0.190353, 1e-4),
    ] {
        assert!((value(n) - want).abs() <= tol, "{n}: {} vs {want}", value(n));
    }
    assert_eq!(cal.views.len(), 5);
    assert!(cal.views.iter().all(|v| v.residuals.len() == 256 && v.pose.is_some()));
    assert_eq!(cal.correlation.names.len(), 7);
    assert!(cal.summary.usable);
    // Published view 1 translation (inches): t = [-3.84019, 3.65164, 12.791].
    let t = cal.views[0].pose.unwrap().translation;
    for (a, b) in t.iter().zip([-3.84019, 3.65164, 12.791]) {
        assert!((a - b).abs() < 2e-3, "{t:?}");
    }
    // The result is never silently replaced.
    let again = facetcal(dir.path(), &["solve", "zhang.json", "--out", "cal.json"]);
    assert_eq!(again.code, 73, "{}", again.stderr);
}

#[test]
fn solve_refuses_degenerate_input_with_a_reason() {
    let Some(mut file) = zhang_file() else { return };
    file.views.truncate(1);
    let dir = scratch();
    std::fs::write(dir.path().join("one.json"), file.to_json().unwrap()).unwrap();
    let run = facetcal(dir.path(), &["solve", "one.json"]);
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(run.stderr.contains("1 view(s) given"), "{}", run.stderr);
    let text = file.to_json().unwrap().replace("\"version\": 1", "\"version\": 2");
    std::fs::write(dir.path().join("v2.json"), text).unwrap();
    let run = facetcal(dir.path(), &["solve", "v2.json"]);
    assert_eq!(run.code, 65, "{}", run.stderr);
    assert!(run.stderr.contains("version"), "{}", run.stderr);
}
