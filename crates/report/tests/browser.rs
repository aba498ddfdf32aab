//! The report renders in a real browser with every plot present, and escapes what it is given.

mod headless;

use facetcal_model::files::{
    CALIBRATION_FORMAT, CalibrationFile, Correlation, FILES_VERSION, ParameterEstimate,
    ParameterStatus, PointPair, SolverRecord, ViewPoints, ViewResult, ViewStatus,
};
use facetcal_model::{Camera, Distortion, Intrinsics, PoseFile, Unit};

fn sample() -> (CalibrationFile, Vec<ViewPoints>) {
    sample_of(3)
}

/// A calibration of `n` views, the third one dropped with a long reason.
fn sample_of(n: usize) -> (CalibrationFile, Vec<ViewPoints>) {
    let camera = Camera {
        width: 640,
        height: 480,
        intrinsics: Intrinsics { fx: 800.0, fy: 800.0, cx: 320.0, cy: 240.0, skew: 0.0 },
        distortion: Distortion::BrownConrady { k1: -0.2, k2: 0.1, p1: 0.0, p2: 0.0, k3: 0.0 },
    };
    let mut obs = Vec::new();
    let mut views = Vec::new();
    for k in 0..n {
        let name =
            if k == 1 { "<script>alert(1)</script>&.png".to_string() } else { format!("v{k}.png") };
        let points: Vec<PointPair> = (0..40)
            .map(|i| PointPair {
                id: None,
                target: [i as f64, 0.0, 0.0],
                image: [20.0 + 10.0 * i as f64 + 30.0 * k as f64, 40.0 + 8.0 * i as f64],
            })
            .collect();
        let residuals = (0..40)
            .map(|i| {
                let s = 1.0 + 0.1 * k as f64;
                [0.1 * s * ((i % 5) as f64 - 2.0), 0.05 * s * ((i % 3) as f64 - 1.0)]
            })
            .collect();
        obs.push(ViewPoints { name: name.clone(), points });
        views.push(ViewResult {
            name,
            status: if k == 2 { ViewStatus::Dropped } else { ViewStatus::Used },
            reason: (k == 2).then(|| {
                "too few points: 5 of the 40 identified features remained after outlier \
                 rejection, and a view needs at least 6 to fix its pose; a very long reason \
                 with a path /a/very/long/path/to/the/folder/of/shots/view-0002.png"
                    .to_string()
            }),
            pose: Some(PoseFile { rotation: [0.0, 0.0, 0.0], translation: [0.0, 0.0, 500.0] }),
            pose_std_dev: None,
            rms_px: (k != 2).then_some(0.12 + 0.01 * k as f64),
            residuals,
            ids: vec![],
            observed: vec![],
        });
    }
    let parameters = camera
        .param_names()
        .iter()
        .zip(camera.params())
        .map(|(n, v)| ParameterEstimate {
            name: n.to_string(),
            value: v,
            std_dev: Some(0.01),
            status: ParameterStatus::Estimated,
        })
        .collect();
    let cal = CalibrationFile {
        format: CALIBRATION_FORMAT.into(),
        version: FILES_VERSION,
        program: Some("facetcal test".into()),
        unit: Unit::Mm,
        camera,
        parameters,
        correlation: Correlation::default(),
        rms_px: 0.14,
        views,
        rejected: vec![],
        faces: vec![],
        summary: SolverRecord {
            iterations: 7,
            initial_cost: 10.0,
            final_cost: 0.5,
            termination: "step <b>small</b>".into(),
            usable: true,
            message: String::new(),
        },
        warnings: vec![],
        target_file: None,
        inputs: vec![],
        verdict: None,
    };
    (cal, obs)
}

#[test]
fn input_strings_are_escaped() {
    let (cal, obs) = sample();
    let html = facetcal_report::calibration_html("camera <7>", &cal, &obs);
    assert!(!html.contains("<script>alert"));
    assert!(html.contains("&lt;script&gt;alert(1)&lt;/script&gt;&amp;.png"));
    assert!(html.contains("camera &lt;7&gt;"));
    assert!(html.contains("step &lt;b&gt;small&lt;/b&gt;"));
    for id in PLOTS {
        assert!(html.contains(&format!("<figure id=\"{id}\">")), "{id}");
    }
    // The dropped view's reason is there in full, as wrapping text.
    assert!(html.contains("<li><b>v2.png</b>, dropped by the solver: too few points: 5 of"));
    assert!(html.contains(facetcal_report::CAUTION));
    // Nothing is fetched from anywhere.
    assert!(!html.contains("http://") && !html.contains("https://"));
}

const PLOTS: [&str; 6] = [
    "plot-residuals",
    "plot-scatter",
    "plot-histogram",
    "plot-view-errors",
    "plot-coverage",
    "plot-distortion",
];

/// Loads the report in headless Chromium and reads the DOM after the page's load handler ran:
/// every plot must have been laid out with a non-zero size and its drawn elements, name its
/// axes' units, carry a legend when it shows several series and keep its text inside; the page
/// fits a 1400 px window. A screenshot is kept under the test target folder for a person.
#[test]
fn report_renders_in_headless_chromium() {
    for (name, n) in [("report-3-views", 3), ("report-14-views", 14)] {
        let (cal, obs) = sample_of(n);
        let html = facetcal_report::calibration_html("report test", &cal, &obs);
        for id in PLOTS {
            assert!(html.contains(&format!("<figure id=\"{id}\">")), "{id}");
        }
        let dir = tempfile::tempdir().unwrap();
        let page = dir.path().join("report.html");
        std::fs::write(&page, html).unwrap();
        let Some(facts) = headless::page_facts(&page, &dir.path().join("profile")) else {
            headless::no_chromium("the report");
            return;
        };
        assert_eq!(facts.plots.len(), PLOTS.len(), "{name}: every plot present");
        for p in &facts.plots {
            assert!(p.width > 100 && p.height > 50 && p.count > 5, "{name}: {p:?}");
        }
        // One legend entry per used view in the residual vectors.
        assert_eq!(facts.plots[0].legend_entries as usize, n - 1, "{name}");
        headless::assert_readable(&facts, name);
        let png = headless::screenshot_dir().join(format!("{name}.png"));
        let shot = headless::screenshot(&page, &dir.path().join("profile"), &png, 3200);
        assert_eq!(shot, Some((headless::WINDOW_W, 3200)), "{name}");
    }
}
