//! The solver against the open data of Z. Zhang, "A Flexible New Technique for Camera
//! Calibration", IEEE TPAMI 22(11), 2000 (read in place from the reference folder).

mod common;

use facetcal_model::DistortionKind;
use facetcal_model::files::FreeParameters;
use facetcal_solver::{Loss, Options, calibrate};

/// The paper's model and method: pinhole with skew, radial k1, k2, every parameter free,
/// plain least squares over all points (no robust loss, no rejection).
fn paper_options() -> Options {
    Options {
        free: FreeParameters { skew: true, ..FreeParameters::default() },
        loss: Loss::Squared,
        reject_sigmas: 0.0,
        ..Options::default()
    }
}

/// Published estimates (Zhang 2000, the calibration file published with the data; also in
/// the reference folder's README): fx 832.50, fy 832.53, skew 0.204494, cx 303.959,
/// cy 206.585, k1 -0.228601, k2 0.190353. Required: within 0.01 px and 1e-4.
#[test]
fn reproduces_zhangs_published_estimates() {
    let Some(dir) = facetcal_model::reference_dir("zhang1998") else { return };
    let views = common::zhang_views(&dir);
    let cal = calibrate(&views, (640, 480), DistortionKind::BrownConrady, None, &paper_options())
        .unwrap();
    let p = cal.camera.params();
    let published = [
        ("fx", 0, 832.50, 0.01),
        ("fy", 1, 832.53, 0.01),
        ("cx", 2, 303.959, 0.01),
        ("cy", 3, 206.585, 0.01),
        ("skew", 4, 0.204494, 0.01),
        ("k1", 5, -0.228601, 1e-4),
        ("k2", 6, 0.190353, 1e-4),
    ];
    for (name, i, want, tol) in published {
        assert!((p[i] - want).abs() <= tol, "{name}: got {} published {want}", p[i]);
    }
    assert!(cal.summary.is_usable());
    // The reference folder's numpy/scipy computation: RMS 0.2379 px over the 2560 residual
    // coordinates; our RMS is over point distances, sqrt(2) times that.
    let per_axis = cal.summary.rms_px / 2f64.sqrt();
    assert!((per_axis - 0.2379).abs() < 1e-4, "rms per axis {per_axis}");
    // And its standard deviations (same covariance definition): fx 1.41, fy 1.39, cx 0.71,
    // cy 0.66, skew 0.078, k1 0.0041, k2 0.025, to the two digits given.
    let sd: Vec<f64> = cal.parameters.iter().take(7).map(|p| p.std_dev.unwrap()).collect();
    for (got, want) in sd.iter().zip([1.41, 1.39, 0.71, 0.66, 0.078, 0.0041, 0.025]) {
        assert!((got - want).abs() <= 0.03 * want + 1e-9, "std dev {got} vs {want}");
    }
}

/// The same data with the default robust loss and outlier rejection: no point of the
/// published data is far enough out to be rejected, so the estimates are the published ones.
#[test]
fn default_options_keep_every_published_point() {
    let Some(dir) = facetcal_model::reference_dir("zhang1998") else { return };
    let views = common::zhang_views(&dir);
    let o = Options {
        free: FreeParameters { skew: true, ..FreeParameters::default() },
        ..Options::default()
    };
    let cal = calibrate(&views, (640, 480), DistortionKind::BrownConrady, None, &o).unwrap();
    assert!(cal.rejected.is_empty(), "{:?}", cal.rejected);
    assert!((cal.camera.intrinsics.fx - 832.50).abs() < 0.01);
}

/// With skew fixed at zero, the reference folder's numpy/scipy values: fx 832.207,
/// fy 832.243, cx 304.068, cy 206.372, k1 -0.228531, k2 0.191008.
#[test]
fn zero_skew_matches_the_reference_computation() {
    let Some(dir) = facetcal_model::reference_dir("zhang1998") else { return };
    let views = common::zhang_views(&dir);
    let o = Options { free: FreeParameters::default(), ..paper_options() };
    let cal = calibrate(&views, (640, 480), DistortionKind::BrownConrady, None, &o).unwrap();
    let p = cal.camera.params();
    for (i, want, tol) in [
        (0, 832.207, 1e-3),
        (1, 832.243, 1e-3),
        (2, 304.068, 1e-3),
        (3, 206.372, 1e-3),
        (5, -0.228531, 1e-6),
        (6, 0.191008, 1e-6),
    ] {
        assert!((p[i] - want).abs() <= tol, "param {i}: {} vs {want}", p[i]);
    }
    assert_eq!(p[4], 0.0);
}
