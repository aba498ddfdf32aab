//! `facetcal regress`: the bundled suite's quick subset (what CI runs on every change) passes
//! against the bundled baseline, a deliberately worse detector setting fails it with a table
//! naming the metric, the result page renders in a browser, and bad suite files are refused
//! with the bad field named.

use std::path::{Path, PathBuf};

use facetcal_model::PatternKind;
use facetcal_regress::{Axis, BaselineFile, ResultFile, Suite};

use crate::headless::{no_chromium, rendered_plots};
use crate::util::{facetcal, root, scratch};

fn suite_path() -> PathBuf {
    root().join("tests/regress/suite.json")
}

fn baseline_path() -> PathBuf {
    root().join("tests/regress/baseline.json")
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

#[test]
fn bundled_suite_covers_every_pattern_kind_and_axis_and_has_a_baseline() {
    let suite = Suite::load(&suite_path()).unwrap();
    // The robustness axes of the detector's requirements.
    assert_eq!(suite.missing_axes(), Vec::<Axis>::new());
    let mut kinds: Vec<PatternKind> =
        suite.scenarios.iter().flat_map(|s| s.scene.target().pattern_kinds()).collect();
    kinds.sort();
    kinds.dedup();
    assert_eq!(kinds, [PatternKind::Checkerboard, PatternKind::DotGrid, PatternKind::SquareGrid]);
    let faces: Vec<usize> =
        suite.scenarios.iter().map(|s| s.scene.target().faces().len()).collect();
    assert!(faces.contains(&2) && faces.contains(&3), "the fold and corner targets: {faces:?}");
    assert!(suite.scenarios.iter().any(|s| s.quick));
    let baseline =
        BaselineFile::from_json(&std::fs::read_to_string(baseline_path()).unwrap()).unwrap();
    for sc in &suite.scenarios {
        assert!(baseline.scenarios.contains_key(&sc.name), "{} has a baseline", sc.name);
        let cam = sc.scene.camera();
        assert_eq!((cam.width, cam.height), (640, 480), "{}", sc.name);
    }
    // Every scenario's blur and noise settings lie within the detector's requirements
    // (PSF up to 2.5 px, noise up to 8 grey levels).
    for sc in &suite.scenarios {
        assert!(sc.scene.optics().psf_sigma_px <= 2.5 && sc.scene.photometry().noise_sigma <= 8.0);
    }
}

/// The number that precedes `words` in `text` (`"39 rendered scenarios"` -> 39), for each place.
fn counts_before(text: &str, words: &str) -> Vec<usize> {
    text.match_indices(words)
        .filter_map(|(i, _)| text[..i].trim_end().rsplit(|c: char| !c.is_ascii_digit()).next())
        .filter_map(|n| n.parse().ok())
        .collect()
}

/// What the README and the contributor guide state about the suite (scenario count, quick
/// count, views per scenario) is what the suite file holds.
#[test]
fn documents_state_the_suites_true_figures() {
    let suite = Suite::load(&suite_path()).unwrap();
    let total = suite.scenarios.len();
    let quick = suite.scenarios.iter().filter(|s| s.quick).count();
    let readme = std::fs::read_to_string(root().join("README.md")).unwrap();
    assert_eq!(counts_before(&readme, " rendered scenarios"), [total], "README scenario count");
    assert_eq!(counts_before(&readme, " of them quick"), [quick], "README quick count");
    let guide = std::fs::read_to_string(root().join("DEVELOPERS.md")).unwrap();
    assert_eq!(counts_before(&guide, " scenarios of 2 views"), [total], "guide scenario count");
    assert_eq!(counts_before(&guide, " are quick"), [quick], "guide quick count");
    for sc in &suite.scenarios {
        assert_eq!(sc.scene.view_count(), 2, "{}: 2 views each", sc.name);
        if sc.quick {
            assert!(guide.contains(&sc.name), "the guide names quick scenario {}", sc.name);
        }
    }
}

fn cache_files(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

/// One test, three runs sharing a render cache (rendering is the slow part).
#[test]
fn quick_suite_passes_a_worse_detector_fails_and_the_page_renders() {
    let dir = scratch();
    let cache = dir.path().join("cache");
    let ok_out = dir.path().join("ok");
    let (suite_file, baseline_file) = (suite_path(), baseline_path());
    let common = ["--quick", "--baseline", s(&baseline_file), "--cache", s(&cache)];
    let mut args = vec!["regress", s(&suite_file)];
    args.extend(common);
    args.extend(["--out", s(&ok_out)]);
    let run = facetcal(dir.path(), &args);
    assert_eq!(run.code, 0, "{}\n{}", run.stdout, run.stderr);
    assert!(run.stdout.contains("within the baseline's tolerance"), "{}", run.stdout);
    let result =
        ResultFile::from_json(&std::fs::read_to_string(ok_out.join("result.json")).unwrap())
            .unwrap();
    let suite = Suite::load(&suite_path()).unwrap();
    let quick: Vec<&str> =
        suite.scenarios.iter().filter(|s| s.quick).map(|s| s.name.as_str()).collect();
    let ran: Vec<&str> = result.scenarios.iter().map(|s| s.name.as_str()).collect();
    assert_eq!(ran, quick);
    let comparison = result.comparison.as_ref().unwrap();
    assert!(comparison.passed() && comparison.checks.len() >= 8 * quick.len());
    // The detector's accuracy requirements on the standard scene (checker corners: RMS at
    // most 0.02 px, bias at most 0.005 px per axis, recall at least 99.5 %, ratio to the
    // Cramer-Rao bound below 2), here at 640 x 480 with the same cell sizes.
    let std = result.scenarios.iter().find(|s| s.name == "checker-standard").unwrap();
    let m = &std.metrics;
    assert!(m.eligible > 100, "{m:?}");
    assert!(m.recall >= 0.995 && m.wrong == 0, "{m:?}");
    assert!(m.rms_px.unwrap() <= 0.02, "{m:?}");
    let b = m.bias_px.unwrap();
    assert!(b[0].abs() <= 0.005 && b[1].abs() <= 0.005, "{m:?}");
    let ratio = m.crb_ratio.unwrap();
    assert!(ratio > 1.0 && ratio < 2.0, "an unbiased estimator cannot beat the bound: {m:?}");
    for sc in &result.scenarios {
        assert_eq!(sc.metrics.wrong, 0, "{}", sc.name);
    }
    let rendered = cache_files(&cache);
    assert!(rendered.iter().any(|n| n.ends_with(".png")));

    // A worse detector: the checker corners located on a much smaller window.
    let bad_out = dir.path().join("bad");
    let mut args = vec!["regress", s(&suite_file)];
    args.extend(common);
    args.extend(["--out", s(&bad_out), "--detector", "refine_sigma=0.8"]);
    let run = facetcal(dir.path(), &args);
    assert_eq!(run.code, 65, "{}\n{}", run.stdout, run.stderr);
    assert!(run.stdout.contains("REGRESSION"), "{}", run.stdout);
    let table: Vec<&str> =
        run.stdout.lines().skip_while(|l| !l.starts_with("REGRESSION")).collect();
    assert!(
        table.iter().any(|l| l.contains("checker-standard")
            && l.contains("rms_px")
            && l.ends_with("WORSE")),
        "{}",
        run.stdout
    );
    // The renders were reused, not redone.
    assert_eq!(cache_files(&cache), rendered);
    let bad = ResultFile::from_json(&std::fs::read_to_string(bad_out.join("result.json")).unwrap())
        .unwrap();
    assert_eq!(bad.detector.refine_sigma, Some(0.8));
    let html = std::fs::read_to_string(bad_out.join("regress.html")).unwrap();
    assert!(html.contains("<tr class=\"worse\"><td>checker-standard</td><td>rms_px</td>"));

    // The page renders with its five plots.
    let page = ok_out.join("regress.html");
    let html = std::fs::read_to_string(&page).unwrap();
    for id in ["plot-blur", "plot-noise", "plot-tilt", "plot-distortion", "plot-illumination"] {
        assert!(html.contains(&format!("<figure id=\"{id}\">")), "{id}");
    }
    assert!(!html.contains("http://") && !html.contains("https://"));
    match rendered_plots(&page, &dir.path().join("profile")) {
        Some(plots) => {
            assert_eq!(plots.len(), 5, "five plots");
            let views: usize = result.scenarios.iter().map(|s| s.metrics.views).sum();
            for (k, &(w, h, circles)) in plots.iter().enumerate() {
                assert!(w > 300 && h > 150, "plot {k} drawn {w} x {h}");
                // Data points plus a legend entry per target.
                assert!(circles as usize > quick.len(), "plot {k}: {circles} circles");
            }
            assert!(plots[2].2 as usize >= views, "one point per view in the tilt plot");
        }
        None => no_chromium("the page"),
    }
}

#[test]
fn bad_suite_files_are_refused_naming_the_field() {
    let dir = scratch();
    let scene = root().join("tests/regress/scenes/checker-standard.json");
    let scene = serde_json::to_string(s(&scene)).unwrap();
    let cases = [
        (
            format!(
                r#"{{"format": "facetcal-regress-suite", "version": 1, "scenarios": [{{"name": "a", "scene": {scene}, "views": 0}}]}}"#
            ),
            "scenarios[0].views",
        ),
        (
            format!(
                r#"{{"format": "facetcal-regress-suite", "version": 1, "scenarios": [{{"name": "a", "scene": {scene}}}, {{"name": "a", "scene": {scene}}}]}}"#
            ),
            "scenarios[1].name",
        ),
        (
            format!(
                r#"{{"format": "facetcal-regress-suite", "version": 1, "scenarios": [{{"name": "a", "scene": {scene}, "colour": 3}}]}}"#
            ),
            "scenarios[0].colour",
        ),
        (
            format!(
                r#"{{"format": "facetcal-regress-suite", "version": 1, "scenarios": [{{"name": "a", "scene": {scene}, "detector": {{"refine_sigma": 0.1}}}}]}}"#
            ),
            "scenarios[0].detector.refine_sigma",
        ),
        (
            format!(
                r#"{{"format": "facetcal-regress-suite", "version": 1, "scenarios": [{{"name": "a", "scene": {scene}, "axes": ["wind"]}}]}}"#
            ),
            "scenarios[0].axes[0]",
        ),
        (r#"{"format": "facetcal-scene", "version": 1}"#.to_string(), "format"),
        (
            r#"{"format": "facetcal-regress-suite", "version": 7, "scenarios": []}"#.to_string(),
            "version",
        ),
        (
            r#"{"format": "facetcal-regress-suite", "version": 1, "scenarios": []}"#.to_string(),
            "scenarios",
        ),
    ];
    for (k, (text, field)) in cases.iter().enumerate() {
        let path = dir.path().join(format!("suite-{k}.json"));
        std::fs::write(&path, text).unwrap();
        let run = facetcal(dir.path(), &["regress", s(&path), "--out", s(&dir.path().join("o"))]);
        assert_eq!(run.code, 65, "case {k}: {}", run.stderr);
        assert!(
            run.stderr.contains(&format!("{field}:")),
            "case {k}: want {field}: {}",
            run.stderr
        );
    }
    // A missing suite file is missing input; a bad --detector setting a usage error.
    let run = facetcal(dir.path(), &["regress", "nowhere.json"]);
    assert_eq!(run.code, 66, "{}", run.stderr);
    let run = facetcal(dir.path(), &["regress", s(&suite_path()), "--detector", "speed=9"]);
    assert_eq!(run.code, 64, "{}", run.stderr);
    assert!(run.stderr.contains("speed"), "{}", run.stderr);
}
