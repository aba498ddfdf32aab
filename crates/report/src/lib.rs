//! The calibration report: one self-contained HTML page (no network access, no external files)
//! that a person reads at a glance, with SVG plots drawn from a calibration result and the
//! observations it was computed from.
//!
//! Plots, each an `<svg class="plot">` (drawn with [`plot::Plot`]: title, axes with ticks and
//! units, legend) inside a `<figure>` with a stable id:
//! - `plot-residuals`: residual vectors across the image, one colour per view, magnified by a
//!   stated factor with a scale bar in px;
//! - `plot-scatter`: dx against dy with 1, 2 and 3 sigma circles;
//! - `plot-histogram`: residual lengths against the Rayleigh distribution of the same sigma;
//! - `plot-view-errors`: each image's residual lengths as a strip of dots with its RMS marked,
//!   worst first, over the band of the expected noise; left-out images with their full reasons;
//! - `plot-coverage`: how well the detected points cover the image, cell by cell, and the cells
//!   that need more shots;
//! - `plot-distortion`: the lens distortion field, the displacement from the pinhole image.
//!
//! Then a table of every parameter with its standard deviation and status, the warnings, the
//! quality verdict and the cautions. Every string that comes from input (file names, view names,
//! messages) is escaped.
//!
//! The [`page`] module holds the parts every facetcal HTML page shares (head and security
//! policy, figure grid) and [`plot`] the charts, used by the regression and fleet pages too;
//! [`residuals`] draws the residual plots.
//!
//! This crate only builds text; it never reads or writes files.
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

pub mod page;
pub mod plot;
pub mod residuals;

use std::fmt::Write;

use facetcal_model::files::{CalibrationFile, ParameterStatus, Verdict, ViewPoints, ViewStatus};
use facetcal_sheet::escape_xml as esc;
use nalgebra::Point2;
use page::{Script, figure_grid, page_head};

/// Columns and rows of the coverage grid.
pub const COVERAGE_GRID: (usize, usize) = (12, 9);

/// The cautions every report carries.
pub const CAUTION: &str = "A camera calibration is a measurement and can be wrong. Before this \
result is used in anything that can hurt someone (robots, vehicles, measurement that others rely \
on), validate it with your own independent procedure and follow the practice and regulations of \
your field, including review by a licensed professional where that is required. The figures \
below help judge the result; they do not replace that validation.";

/// Share of coverage cells that hold at least one point, and the cells without any
/// (column, row), for a camera of the given image size.
pub fn coverage(width: u32, height: u32, views: &[ViewPoints]) -> (Vec<Vec<usize>>, f64) {
    let (gx, gy) = COVERAGE_GRID;
    let mut counts = vec![vec![0usize; gx]; gy];
    for v in views {
        for p in &v.points {
            let fx = (p.image[0] + 0.5) / width as f64;
            let fy = (p.image[1] + 0.5) / height as f64;
            if (0.0..1.0).contains(&fx) && (0.0..1.0).contains(&fy) {
                counts[(fy * gy as f64) as usize][(fx * gx as f64) as usize] += 1;
            }
        }
    }
    let covered = counts.iter().flatten().filter(|&&c| c > 0).count();
    (counts, covered as f64 / (gx * gy) as f64)
}

fn coverage_plot(cal: &CalibrationFile, obs: &[ViewPoints]) -> (String, f64) {
    let (w, h) = (cal.camera.width, cal.camera.height);
    let (counts, share) = coverage(w, h, obs);
    let (gx, gy) = COVERAGE_GRID;
    let max = counts.iter().flatten().copied().max().unwrap_or(0).max(1);
    let mut p = residuals::image_plot("Coverage of the image by detected points", w, h);
    let cw = w as f64 / gx as f64;
    let ch = h as f64 / gy as f64;
    for (r, row) in counts.iter().enumerate() {
        for (c, &n) in row.iter().enumerate() {
            let (x0, y0) = (c as f64 * cw - 0.5, r as f64 * ch - 0.5);
            if n == 0 {
                p.rect(
                    x0,
                    y0,
                    x0 + cw,
                    y0 + ch,
                    "#fdecea",
                    r##" class="empty-cell" stroke="#c0392b" stroke-dasharray="3 2""##,
                );
            } else {
                let a = 0.15 + 0.85 * (n as f64 / max as f64);
                let extra = format!(r##" fill-opacity="{a:.3}" stroke="#fff""##);
                p.rect(x0, y0, x0 + cw, y0 + ch, "#1f77b4", &extra);
            }
        }
    }
    for v in obs {
        for q in &v.points {
            p.circle(q.image[0], q.image[1], 0.8, "#111");
        }
    }
    p.legend("#1f77b4", plot::Mark::Box, "cell with points (darker: more)");
    p.legend("#fdecea", plot::Mark::Box, "cell without points: take shots with the target there");
    p.note(&format!(
        "{:.0} % of the {gx} x {gy} cells hold points. {}",
        share * 100.0,
        residuals::IMAGE_CONVENTION
    ));
    (p.finish(2), share)
}

fn distortion_plot(cal: &CalibrationFile) -> String {
    let cam = &cal.camera;
    let mut p = residuals::image_plot("Lens distortion field", cam.width, cam.height);
    let (nx, ny) = (16, 12);
    let mut field = Vec::new();
    for j in 0..=ny {
        for i in 0..=nx {
            let q = Point2::new(
                -0.5 + cam.width as f64 * (i as f64 + 0.5) / (nx + 1) as f64,
                -0.5 + cam.height as f64 * (j as f64 + 0.5) / (ny + 1) as f64,
            );
            if let Ok(u) = cam.undistort_pixel(&q) {
                let d = q - u;
                if d.x.is_finite() && d.y.is_finite() {
                    field.push((q, d));
                }
            }
        }
    }
    let max = field.iter().map(|(_, d)| d.norm()).fold(0.0, f64::max);
    // The largest shift is drawn 0.9 grid cells long; the factor is a round number.
    let gain =
        if max > 0.0 { page::round_125(0.9 * cam.width as f64 / nx as f64 / max) } else { 1.0 };
    let s = p.x_scale();
    let _ = writeln!(
        p.svg(),
        r##"<marker id="dhead" viewBox="0 0 6 6" refX="5" refY="3" markerWidth="5" markerHeight="5" orient="auto"><path d="M0,0 L6,3 L0,6 z" fill="#8e44ad"/></marker>"##
    );
    for (q, d) in &field {
        let (x, y) = (p.x(q.x), p.y(q.y));
        if max > 0.0 {
            let _ = writeln!(
                p.svg(),
                r##"<line x1="{:.1}" y1="{:.1}" x2="{x:.1}" y2="{y:.1}" stroke="#8e44ad" stroke-width="1.1" marker-end="url(#dhead)"/>"##,
                x - d.x * gain * s,
                y - d.y * gain * s
            );
        }
        p.circle(q.x, q.y, 1.2, "#8e44ad");
    }
    p.note(&format!(
        "{} model. Arrows run from the pinhole (undistorted) position to the observed one, \
         magnified {} times; largest shift {} px. {}",
        cam.distortion.kind().name(),
        plot::factor(gain),
        plot::sig(max, 3),
        residuals::IMAGE_CONVENTION
    ));
    p.finish(1)
}

fn parameter_table(cal: &CalibrationFile) -> String {
    let mut o = String::from(
        "<table class=\"params\"><thead><tr><th>parameter</th><th>value</th><th>standard deviation</th><th>status</th></tr></thead><tbody>\n",
    );
    for p in &cal.parameters {
        let sd = p.std_dev.map(|s| format!("{s:.4e}")).unwrap_or_else(|| "-".into());
        let status = match p.status {
            ParameterStatus::Estimated => "estimated",
            ParameterStatus::Fixed => "fixed",
            ParameterStatus::Tied => "tied",
        };
        let _ = writeln!(
            o,
            "<tr><td>{}</td><td>{:.6}</td><td>{sd}</td><td>{status}</td></tr>",
            esc(&p.name),
            p.value
        );
    }
    o.push_str("</tbody></table>\n");
    o
}

fn verdict_table(v: &Verdict) -> String {
    let mut o = String::new();
    let _ = writeln!(
        o,
        "<h2>Verdict: <span class=\"{}\">{}</span></h2>\n<table class=\"verdict\"><thead><tr><th>check</th><th>value</th><th>limit</th><th>result</th><th>meaning</th></tr></thead><tbody>",
        if v.passed { "pass" } else { "fail" },
        if v.passed { "every check passed" } else { "FAILED" }
    );
    for c in &v.checks {
        let _ = writeln!(
            o,
            "<tr><td>{}</td><td>{}</td><td>{} {}</td><td class=\"{}\">{}</td><td>{}</td></tr>",
            esc(&c.name),
            short(c.value),
            if c.bound == "at-most" { "&le;" } else { "&ge;" },
            short(c.limit),
            if c.passed { "pass" } else { "fail" },
            if c.passed { "pass" } else { "fail" },
            esc(&c.message)
        );
    }
    o.push_str("</tbody></table>\n");
    o
}

/// A number with about four significant figures, without exponent for everyday magnitudes.
fn short(x: f64) -> String {
    if x.fract() == 0.0 && x.abs() < 1e9 {
        format!("{x:.0}")
    } else if (1e-3..1e5).contains(&x.abs()) {
        let digits = (3 - x.abs().log10().floor() as i32).clamp(0, 6) as usize;
        format!("{x:.digits$}")
    } else {
        format!("{x:.3e}")
    }
}

/// The report's own style rules, after the shared ones.
const REPORT_CSS: &str =
    ".caution { border-left: 4px solid #c0392b; background: #fdf2f0; padding: 8px 12px; }
table.verdict td:last-child { text-align: left; }
.warn { color: #a04000; }
.pass { color: #1e7b34; }
.fail { color: #b3261e; font-weight: bold; }
figure { max-width: 100%; }
ul.left-out { max-width: 560px; margin: 4px 0; padding-left: 18px; font-size: 13px; overflow-wrap: anywhere; }
p.left-out-title { margin: 6px 0 0 0; font-size: 13px; }
";

/// The report page.
pub fn calibration_html(title: &str, cal: &CalibrationFile, observations: &[ViewPoints]) -> String {
    let (coverage_svg, share) = coverage_plot(cal, observations);
    let res = residuals::Residuals::new(cal, observations);
    let used = cal.views.iter().filter(|v| v.status == ViewStatus::Used).count();
    let mut o = String::new();
    page_head(&mut o, title, &[page::BASE_CSS, REPORT_CSS], Script::Inline);
    let _ = writeln!(
        o,
        "<p>{model} model, image {w} x {h} px, {used} of {n} images used, RMS reprojection error <b>{rms:.3} px</b>, image coverage {cov:.0} %.</p>\n<p class=\"caution\">{caution}</p>",
        model = esc(cal.camera.distortion.kind().name()),
        w = cal.camera.width,
        h = cal.camera.height,
        n = cal.views.len(),
        rms = cal.rms_px,
        cov = share * 100.0,
        caution = esc(CAUTION),
    );
    if let Some(v) = &cal.verdict {
        o.push_str(&verdict_table(v));
    }
    o.push_str("<h2>Parameters</h2>\n");
    o.push_str(&parameter_table(cal));
    o.push_str("<h2>Warnings</h2>\n<ul>\n");
    if cal.warnings.is_empty() {
        o.push_str("<li>none</li>\n");
    }
    for w in &cal.warnings {
        let _ = writeln!(o, "<li class=\"warn\">{}</li>", esc(&w.message));
    }
    let _ = writeln!(
        o,
        "</ul>\n<p>Solver: {} iterations, cost {:.6e} to {:.6e}, stopped: {}.</p>",
        cal.summary.iterations,
        cal.summary.initial_cost,
        cal.summary.final_cost,
        esc(&cal.summary.termination)
    );
    o.push_str(&residuals::view_selector(&res));
    figure_grid(
        &mut o,
        &[
            ("plot-residuals", "Residuals across the image", residuals::vector_plot(cal, &res)),
            ("plot-scatter", "Residual scatter", residuals::scatter_plot(&res)),
            ("plot-histogram", "Residual lengths", residuals::histogram_plot(&res)),
            ("plot-view-errors", "Error per image", residuals::per_image_plot(cal, &res)),
            ("plot-coverage", "Coverage and where more shots are needed", coverage_svg),
            ("plot-distortion", "Distortion field", distortion_plot(cal)),
        ],
    );
    page::drawn_size_script(&mut o, "*");
    o.push_str("</body></html>\n");
    o
}
