//! The report renders in a real browser with every plot present, and escapes what it is given.

mod headless;

use facetcal_model::files::{
    CALIBRATION_FORMAT, CalibrationFile, Correlation, FILES_VERSION, ParameterEstimate,
    ParameterStatus, PointPair, SolverRecord, ViewPoints, ViewResult, ViewStatus,
};
use facetcal_model::{Camera, Distortion, Intrinsics, PoseFile, Unit};

fn sample() -> (CalibrationFile, Vec<ViewPoints>) {
    let camera = Camera {
        width: 640,
        height: 480,
        intrinsics: Intrinsics { fx: 800.0, fy: 800.0, cx: 320.0, cy: 240.0, skew: 0.0 },
        distortion: Distortion::BrownConrady { k1: -0.2, k2: 0.1, p1: 0.0, p2: 0.0, k3: 0.0 },
    };
    let mut obs = Vec::new();
    let mut views = Vec::new();
    for k in 0..3 {
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
            .map(|i| [0.1 * ((i % 5) as f64 - 2.0), 0.05 * ((i % 3) as f64 - 1.0)])
            .collect();
        obs.push(ViewPoints { name: name.clone(), points });
        views.push(ViewResult {
            name,
            status: if k == 2 { ViewStatus::Dropped } else { ViewStatus::Used },
            reason: (k == 2).then(|| "too few points".to_string()),
            pose: Some(PoseFile { rotation: [0.0, 0.0, 0.0], translation: [0.0, 0.0, 500.0] }),
            pose_std_dev: None,
            rms_px: (k != 2).then_some(0.12 + 0.05 * k as f64),
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
    for id in ["plot-residuals", "plot-coverage", "plot-view-errors", "plot-distortion"] {
        assert!(html.contains(&format!("<figure id=\"{id}\">")), "{id}");
    }
    assert!(html.contains(facetcal_report::CAUTION));
    // Nothing is fetched from anywhere.
    assert!(!html.contains("http://") && !html.contains("https://"));
}

/// Loads the report in headless Chromium and reads the DOM after the page's load handler ran:
/// every plot must have been laid out with a non-zero size and its drawn elements.
#[test]
fn report_renders_in_headless_chromium() {
    let (cal, obs) = sample();
    let html = facetcal_report::calibration_html("report test", &cal, &obs);
    let dir = tempfile::tempdir().unwrap();
    let page = dir.path().join("report.html");
    std::fs::write(&page, html).unwrap();
    let Some(plots) = headless::rendered_plots(&page, &dir.path().join("profile")) else {
        headless::no_chromium("the report");
        return;
    };
    assert_eq!(plots.len(), 4, "four plots");
    for (w, h, count) in plots {
        assert!(w > 100 && h > 50 && count > 5, "plot drawn as {w} x {h} with {count} elements");
    }
}
