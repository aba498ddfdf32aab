//! The calibration report: one self-contained HTML page (no network access, no external files)
//! that a person reads at a glance, with SVG plots drawn from a calibration result and the
//! observations it was computed from.
//!
//! Plots, each an `<svg class="plot">` inside a `<figure>` with a stable id:
//! - `plot-residuals`: reprojection residual vectors across the image, scaled so the largest
//!   ones are visible, with a legend arrow;
//! - `plot-coverage`: how well the detected points cover the image, cell by cell, and the cells
//!   that need more shots;
//! - `plot-view-errors`: RMS reprojection error per image, with dropped images and their reasons;
//! - `plot-distortion`: the lens distortion field, the displacement from the pinhole image.
//!
//! Then a table of every parameter with its standard deviation and status, the warnings, the
//! quality verdict and the cautions. Every string that comes from input (file names, view names,
//! messages) is escaped.
//!
//! The [`page`] module holds the parts every facetcal HTML page shares (head and security
//! policy, plot element, figure grid), used by the regression and fleet pages too.
//!
//! This crate only builds text; it never reads or writes files.
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

pub mod page;

use std::fmt::Write;

use facetcal_model::files::{CalibrationFile, ParameterStatus, Verdict, ViewPoints, ViewStatus};
use facetcal_sheet::escape_xml as esc;
use nalgebra::Point2;
use page::{Script, figure_grid, page_head, plot_area, round_125, svg_open};

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

/// A plot area mapping image pixels into an SVG of fixed width.
struct Frame {
    width: f64,
    height: f64,
    scale: f64,
}

impl Frame {
    const W: f64 = 560.0;
    const PAD: f64 = 24.0;

    fn new(image_w: u32, image_h: u32) -> Frame {
        let scale = Frame::W / image_w.max(1) as f64;
        Frame { width: image_w as f64, height: image_h as f64, scale }
    }

    fn x(&self, u: f64) -> f64 {
        Frame::PAD + (u + 0.5) * self.scale
    }

    fn y(&self, v: f64) -> f64 {
        Frame::PAD + (v + 0.5) * self.scale
    }

    fn open(&self, o: &mut String, label: &str) {
        let w = Frame::W + 2.0 * Frame::PAD;
        let h = self.height * self.scale + 2.0 * Frame::PAD + 18.0;
        svg_open(o, label, w, h);
        plot_area(o, Frame::PAD, Frame::PAD, self.width * self.scale, self.height * self.scale);
    }

    fn caption(&self, o: &mut String, text: &str) {
        let _ = writeln!(
            o,
            r##"<text x="{:.1}" y="{:.1}" font-size="12" fill="#222">{}</text>"##,
            Frame::PAD,
            self.height * self.scale + 2.0 * Frame::PAD + 10.0,
            esc(text)
        );
    }
}

fn arrow(o: &mut String, x0: f64, y0: f64, x1: f64, y1: f64, colour: &str) {
    let _ = writeln!(
        o,
        r##"<line x1="{x0:.2}" y1="{y0:.2}" x2="{x1:.2}" y2="{y1:.2}" stroke="{colour}" stroke-width="1.2" marker-end="url(#head)"/>"##
    );
}

const MARKER: &str = r##"<defs><marker id="head" viewBox="0 0 6 6" refX="5" refY="3" markerWidth="5" markerHeight="5" orient="auto"><path d="M0,0 L6,3 L0,6 z" fill="context-stroke"/></marker></defs>"##;

fn residual_plot(cal: &CalibrationFile, obs: &[ViewPoints]) -> String {
    let f = Frame::new(cal.camera.width, cal.camera.height);
    let mut o = String::new();
    f.open(&mut o, "reprojection residuals across the image");
    o.push_str(MARKER);
    let mut mags: Vec<f64> = Vec::new();
    for (v, res) in obs.iter().zip(&cal.views) {
        if res.status != ViewStatus::Used {
            continue;
        }
        mags.extend(res.residuals.iter().map(|r| r[0].hypot(r[1])));
        let _ = v;
    }
    mags.sort_by(f64::total_cmp);
    let p95 = mags.get(mags.len().saturating_sub(1) * 95 / 100).copied().unwrap_or(0.0);
    // The 95th percentile residual is drawn 18 plot units long.
    let gain = if p95 > 0.0 { 18.0 / p95 } else { 1.0 };
    for (v, res) in obs.iter().zip(&cal.views) {
        if res.status != ViewStatus::Used {
            continue;
        }
        for (p, r) in v.points.iter().zip(&res.residuals) {
            let (x, y) = (f.x(p.image[0]), f.y(p.image[1]));
            arrow(&mut o, x, y, x + r[0] * gain, y + r[1] * gain, "#c0392b");
        }
    }
    let legend_px = round_125(p95.max(1e-3));
    f.caption(&mut o, &format!("arrow of {legend_px} px drawn {:.0} units long", legend_px * gain));
    let y = f.height * f.scale + 2.0 * Frame::PAD + 4.0;
    arrow(&mut o, 360.0, y, 360.0 + legend_px * gain, y, "#c0392b");
    o.push_str("</svg>\n");
    o
}

fn coverage_plot(cal: &CalibrationFile, obs: &[ViewPoints]) -> (String, f64) {
    let f = Frame::new(cal.camera.width, cal.camera.height);
    let (counts, share) = coverage(cal.camera.width, cal.camera.height, obs);
    let (gx, gy) = COVERAGE_GRID;
    let max = counts.iter().flatten().copied().max().unwrap_or(0).max(1);
    let mut o = String::new();
    f.open(&mut o, "coverage of the image by detected points");
    let cw = f.width * f.scale / gx as f64;
    let ch = f.height * f.scale / gy as f64;
    for (r, row) in counts.iter().enumerate() {
        for (c, &n) in row.iter().enumerate() {
            let x = Frame::PAD + c as f64 * cw;
            let y = Frame::PAD + r as f64 * ch;
            if n == 0 {
                let _ = writeln!(
                    o,
                    r##"<rect class="empty-cell" x="{x:.1}" y="{y:.1}" width="{cw:.1}" height="{ch:.1}" fill="#fdecea" stroke="#c0392b" stroke-dasharray="3 2"/>"##
                );
            } else {
                let a = 0.15 + 0.85 * (n as f64 / max as f64);
                let _ = writeln!(
                    o,
                    r##"<rect x="{x:.1}" y="{y:.1}" width="{cw:.1}" height="{ch:.1}" fill="#1f77b4" fill-opacity="{a:.3}" stroke="#fff"/>"##
                );
            }
        }
    }
    for v in obs {
        for p in &v.points {
            let _ = writeln!(
                o,
                r##"<circle cx="{:.1}" cy="{:.1}" r="0.8" fill="#111"/>"##,
                f.x(p.image[0]),
                f.y(p.image[1])
            );
        }
    }
    f.caption(
        &mut o,
        &format!(
            "{:.0} % of the {gx} x {gy} cells hold points; dashed red cells need shots with the target there",
            share * 100.0
        ),
    );
    o.push_str("</svg>\n");
    (o, share)
}

fn view_error_plot(cal: &CalibrationFile) -> String {
    let n = cal.views.len().max(1);
    let row = 18.0;
    let label_w = 200.0;
    let bar_w = 320.0;
    let h = n as f64 * row + 40.0;
    let max = cal.views.iter().filter_map(|v| v.rms_px).fold(cal.rms_px, f64::max).max(1e-6);
    let mut o = String::new();
    svg_open(&mut o, "RMS reprojection error per image", label_w + bar_w + 80.0, h);
    for (i, v) in cal.views.iter().enumerate() {
        let y = 10.0 + i as f64 * row;
        let _ = writeln!(
            o,
            r##"<text x="{:.0}" y="{:.1}" font-size="11" text-anchor="end">{}</text>"##,
            label_w - 6.0,
            y + 12.0,
            esc(&v.name)
        );
        match (v.status, v.rms_px) {
            (ViewStatus::Used, Some(rms)) => {
                let w = bar_w * rms / max;
                let _ = writeln!(
                    o,
                    r##"<rect class="bar" x="{label_w:.0}" y="{:.1}" width="{w:.1}" height="{:.1}" fill="#2e86c1"/><text x="{:.1}" y="{:.1}" font-size="11">{rms:.3} px</text>"##,
                    y + 2.0,
                    row - 5.0,
                    label_w + w + 4.0,
                    y + 12.0
                );
            }
            _ => {
                let status = if v.status == ViewStatus::Failed { "failed" } else { "dropped" };
                let reason = v.reason.as_deref().unwrap_or("no reason given");
                let _ = writeln!(
                    o,
                    r##"<text x="{label_w:.0}" y="{:.1}" font-size="11" fill="#7f8c8d">{status}: {}</text>"##,
                    y + 12.0,
                    esc(reason)
                );
            }
        }
    }
    let x = label_w + bar_w * cal.rms_px / max;
    let _ = writeln!(
        o,
        r##"<line x1="{x:.1}" y1="4" x2="{x:.1}" y2="{:.1}" stroke="#c0392b" stroke-dasharray="4 3"/><text x="{x:.1}" y="{:.1}" font-size="11" fill="#c0392b">overall {:.3} px</text>"##,
        h - 24.0,
        h - 10.0,
        cal.rms_px
    );
    o.push_str("</svg>\n");
    o
}

fn distortion_plot(cal: &CalibrationFile) -> String {
    let cam = &cal.camera;
    let f = Frame::new(cam.width, cam.height);
    let mut o = String::new();
    f.open(&mut o, "lens distortion field");
    o.push_str(MARKER);
    let (nx, ny) = (16, 12);
    let mut field = Vec::new();
    for j in 0..=ny {
        for i in 0..=nx {
            let p = Point2::new(
                -0.5 + cam.width as f64 * i as f64 / nx as f64,
                -0.5 + cam.height as f64 * j as f64 / ny as f64,
            );
            if let Ok(q) = cam.undistort_pixel(&p) {
                let d = p - q;
                if d.x.is_finite() && d.y.is_finite() {
                    field.push((p, d));
                }
            }
        }
    }
    let max = field.iter().map(|(_, d)| d.norm()).fold(0.0, f64::max);
    let gain = if max > 0.0 { 0.9 * (f.width * f.scale / nx as f64) / max } else { 0.0 };
    for (p, d) in &field {
        let (x, y) = (f.x(p.x), f.y(p.y));
        if gain > 0.0 {
            arrow(&mut o, x - d.x * gain, y - d.y * gain, x, y, "#8e44ad");
        }
        let _ = writeln!(o, r##"<circle cx="{x:.1}" cy="{y:.1}" r="1.2" fill="#8e44ad"/>"##);
    }
    f.caption(
        &mut o,
        &format!(
            "{} model; arrows run from the pinhole position to the observed one; largest shift {max:.1} px",
            cam.distortion.kind().name()
        ),
    );
    o.push_str("</svg>\n");
    o
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
";

/// The report page.
pub fn calibration_html(title: &str, cal: &CalibrationFile, observations: &[ViewPoints]) -> String {
    let (coverage_svg, share) = coverage_plot(cal, observations);
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
    figure_grid(
        &mut o,
        &[
            ("plot-residuals", "Residuals across the image", residual_plot(cal, observations)),
            ("plot-coverage", "Coverage and where more shots are needed", coverage_svg),
            ("plot-view-errors", "Error per image", view_error_plot(cal)),
            ("plot-distortion", "Distortion field", distortion_plot(cal)),
        ],
    );
    page::drawn_size_script(&mut o, "*");
    o.push_str("</body></html>\n");
    o
}
