//! The result page: one self-contained HTML file (no network, no external files) with the
//! comparison, a table of every scenario and inline SVG plots of the error against each
//! condition. Every string that comes from input (suite, scenario and target names) is escaped.
//!
//! Plots, each an `<svg class="plot">` in a `<figure>` with a stable id: `plot-blur` (RMS
//! error against PSF sigma), `plot-noise` (against noise sigma), `plot-tilt` (per view,
//! against the tilt), `plot-distortion` (against the bow of straight lines),
//! `plot-illumination` (against the illumination ratio).

use std::fmt::Write;

use facetcal_report::page::{self, Script, figure_grid, page_head, plot_area, round_125, svg_open};
use facetcal_sheet::escape_xml as esc;

use crate::result::ResultFile;

/// Series colours, cycled by target.
const COLOURS: [&str; 6] = ["#1f5fa8", "#c0392b", "#2e8b57", "#8e44ad", "#d68910", "#17a2b8"];

/// One plotted point: x, y, and the text shown on hover.
struct Dot {
    x: f64,
    y: f64,
    title: String,
}

/// A step of 1, 2 or 5 times a power of ten giving about five intervals over `span`.
fn tick_step(span: f64) -> f64 {
    round_125((span / 5.0).max(1e-12))
}

fn fmt_tick(v: f64, step: f64) -> String {
    let decimals = if step >= 1.0 { 0 } else { (-step.log10().floor()) as usize };
    format!("{v:.decimals$}")
}

/// A scatter plot of `series` (name, points) with labelled axes; y starts at 0.
fn scatter(label: &str, x_label: &str, y_label: &str, series: &[(String, Vec<Dot>)]) -> String {
    let (w, h) = (600.0, 330.0);
    let (left, right, top, bottom) = (62.0, 170.0, 16.0, 48.0);
    let (pw, ph) = (w - left - right, h - top - bottom);
    let all: Vec<&Dot> = series.iter().flat_map(|s| s.1.iter()).collect();
    let (mut x0, mut x1) =
        all.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), d| (a.min(d.x), b.max(d.x)));
    if !x0.is_finite() {
        (x0, x1) = (0.0, 1.0);
    }
    if x1 - x0 < 1e-9 {
        (x0, x1) = (x0 - 0.5, x1 + 0.5);
    }
    let pad = 0.05 * (x1 - x0);
    let (x0, x1) = (x0 - pad, x1 + pad);
    let y1 = all.iter().map(|d| d.y).fold(0.0, f64::max).max(1e-3) * 1.1;
    let sx = |x: f64| left + (x - x0) / (x1 - x0) * pw;
    let sy = |y: f64| top + ph - y / y1 * ph;
    let mut o = String::new();
    svg_open(&mut o, label, w, h);
    plot_area(&mut o, left, top, pw, ph);
    let xs = tick_step(x1 - x0);
    let mut t = (x0 / xs).ceil() * xs;
    while t <= x1 + 1e-12 {
        let x = sx(t);
        let _ = writeln!(
            o,
            r##"<line x1="{x:.1}" y1="{top}" x2="{x:.1}" y2="{:.1}" stroke="#ddd"/><text x="{x:.1}" y="{:.1}" font-size="11" text-anchor="middle" fill="#222">{}</text>"##,
            top + ph,
            top + ph + 14.0,
            fmt_tick(t, xs)
        );
        t += xs;
    }
    let ys = tick_step(y1);
    let mut t = 0.0;
    while t <= y1 + 1e-12 {
        let y = sy(t);
        let _ = writeln!(
            o,
            r##"<line x1="{left}" y1="{y:.1}" x2="{:.1}" y2="{y:.1}" stroke="#ddd"/><text x="{:.1}" y="{:.1}" font-size="11" text-anchor="end" fill="#222">{}</text>"##,
            left + pw,
            left - 4.0,
            y + 4.0,
            fmt_tick(t, ys)
        );
        t += ys;
    }
    let _ = writeln!(
        o,
        r##"<text x="{:.1}" y="{:.1}" font-size="12" text-anchor="middle" fill="#222">{}</text>"##,
        left + pw / 2.0,
        h - 12.0,
        esc(x_label)
    );
    let _ = writeln!(
        o,
        r##"<text x="14" y="{:.1}" font-size="12" text-anchor="middle" fill="#222" transform="rotate(-90 14 {:.1})">{}</text>"##,
        top + ph / 2.0,
        top + ph / 2.0,
        esc(y_label)
    );
    if all.is_empty() {
        let _ = writeln!(
            o,
            r##"<text x="{:.1}" y="{:.1}" font-size="13" text-anchor="middle" fill="#888">no data</text>"##,
            left + pw / 2.0,
            top + ph / 2.0
        );
    }
    for (k, (name, dots)) in series.iter().enumerate() {
        let c = COLOURS[k % COLOURS.len()];
        for d in dots {
            let _ = writeln!(
                o,
                r##"<circle cx="{:.1}" cy="{:.1}" r="4" fill="{c}" fill-opacity="0.8"><title>{}</title></circle>"##,
                sx(d.x),
                sy(d.y),
                esc(&d.title)
            );
        }
        let ly = top + 12.0 + 18.0 * k as f64;
        let _ = writeln!(
            o,
            r##"<circle cx="{:.1}" cy="{ly:.1}" r="4" fill="{c}"/><text x="{:.1}" y="{:.1}" font-size="11" fill="#222">{}</text>"##,
            left + pw + 14.0,
            left + pw + 24.0,
            ly + 4.0,
            esc(name)
        );
    }
    o.push_str("</svg>\n");
    o
}

/// Groups points by the scenario's target, in first-seen order.
fn by_target(
    r: &ResultFile,
    f: impl Fn(&crate::run::ScenarioResult) -> Vec<Dot>,
) -> Vec<(String, Vec<Dot>)> {
    let mut out: Vec<(String, Vec<Dot>)> = Vec::new();
    for s in &r.scenarios {
        let dots = f(s);
        let name = &s.conditions.target;
        match out.iter_mut().find(|(n, _)| n == name) {
            Some((_, v)) => v.extend(dots),
            None => out.push((name.clone(), dots)),
        }
    }
    out
}

fn condition_plot(
    r: &ResultFile,
    label: &str,
    x_label: &str,
    x: impl Fn(&crate::run::ScenarioResult) -> Option<f64>,
) -> String {
    let series = by_target(r, |s| match (x(s), s.metrics.rms_px) {
        (Some(x), Some(y)) => vec![Dot { x, y, title: format!("{}: {y:.4} px", s.name) }],
        _ => vec![],
    });
    scatter(label, x_label, "RMS error, px", &series)
}

/// The result page's own style rules, after the shared ones.
const RESULT_CSS: &str = "table { font-size: 13px; }
tr.worse td { background: #fdecea; color: #922; font-weight: bold; }
";

/// The page of a result.
pub fn result_html(r: &ResultFile) -> String {
    let mut o = String::new();
    let verdict = match &r.comparison {
        None => "no baseline given".to_string(),
        Some(c) if c.passed() => "within the baseline's tolerances".to_string(),
        Some(c) => format!(
            "WORSE than the baseline: {} figures beyond tolerance, {} scenarios without a baseline",
            c.failures().count(),
            c.not_in_baseline.len()
        ),
    };
    page_head(
        &mut o,
        &format!("Detector regression: {}", r.suite),
        &[page::BASE_CSS, RESULT_CSS],
        Script::Inline,
    );
    let _ = writeln!(
        o,
        "<p>{prog}, {n} scenarios{quick}: <b id=\"verdict\">{v}</b>.</p>",
        prog = esc(&r.program),
        n = r.scenarios.len(),
        quick = if r.quick { " (quick subset)" } else { "" },
        v = esc(&verdict),
    );
    if !r.detector.is_empty() {
        let text = serde_json::to_string(&r.detector).unwrap_or_default();
        let _ = writeln!(
            o,
            "<p>Detector settings replaced for this run: <code>{}</code></p>",
            esc(&text)
        );
    }
    if let Some(c) = &r.comparison {
        o.push_str("<h2>Comparison with the baseline</h2>\n<table id=\"comparison\"><tr><th>scenario</th><th>metric</th><th>baseline</th><th>now</th><th>limit</th><th>verdict</th></tr>\n");
        let f = |v: Option<f64>| v.map_or("none".to_string(), |v| format!("{v:.4}"));
        let mut rows: Vec<_> = c.checks.iter().collect();
        rows.sort_by_key(|c| c.ok);
        for k in rows {
            let _ = writeln!(
                o,
                "<tr class=\"{}\"><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                if k.ok { "ok" } else { "worse" },
                esc(&k.scenario),
                esc(&k.metric),
                f(k.baseline),
                f(k.now),
                f(k.limit),
                if k.ok { "ok" } else { "worse" }
            );
        }
        for n in &c.not_in_baseline {
            let _ = writeln!(
                o,
                "<tr class=\"worse\"><td>{}</td><td colspan=\"5\">no baseline</td></tr>",
                esc(n)
            );
        }
        o.push_str("</table>\n");
    }
    o.push_str("<h2>Scenarios</h2>\n<table id=\"scenarios\"><tr><th>scenario</th><th>target</th><th>axes</th><th>views</th><th>recall</th><th>wrong</th><th>RMS px</th><th>bias x, y px</th><th>95 % px</th><th>max px</th><th>CRB px</th><th>ratio to CRB</th><th>ms / image</th></tr>\n");
    let f = |v: Option<f64>, p: usize| v.map_or("-".to_string(), |v| format!("{v:.p$}"));
    for s in &r.scenarios {
        let m = &s.metrics;
        let axes: Vec<&str> = s.axes.iter().map(|a| a.name()).collect();
        let _ = writeln!(
            o,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{:.4} ({}/{})</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{:.1}</td></tr>",
            esc(&s.name),
            esc(&s.conditions.target),
            esc(&axes.join(", ")),
            m.views,
            m.recall,
            m.found,
            m.eligible,
            m.wrong,
            f(m.rms_px, 4),
            m.bias_px.map_or("-".into(), |b| format!("{:.4}, {:.4}", b[0], b[1])),
            f(m.p95_px, 4),
            f(m.max_px, 4),
            f(m.crb_px, 4),
            f(m.crb_ratio, 2),
            m.ms_per_image
        );
    }
    o.push_str("</table>\n<p>Time per image is wall time of detection and identification while views run in parallel; it is reported, never compared (speed is measured by the benchmarks).</p>\n<h2>Error against condition</h2>\n");
    let tilt = scatter(
        "RMS error per view against the tilt",
        "tilt of the first face, degrees",
        "RMS error, px",
        &by_target(r, |s| {
            s.views
                .iter()
                .filter_map(|v| {
                    v.rms_px.map(|y| Dot {
                        x: v.tilt_deg,
                        y,
                        title: format!("{} view {}: {y:.4} px", s.name, v.index),
                    })
                })
                .collect()
        }),
    );
    let figures = [
        (
            "plot-blur",
            "Blur",
            condition_plot(r, "RMS error against blur", "PSF sigma, px", |s| {
                Some(s.conditions.psf_sigma_px)
            }),
        ),
        (
            "plot-noise",
            "Noise",
            condition_plot(r, "RMS error against noise", "noise sigma, grey levels", |s| {
                Some(s.conditions.noise_sigma)
            }),
        ),
        ("plot-tilt", "Tilt (per view)", tilt),
        (
            "plot-distortion",
            "Distortion",
            condition_plot(
                r,
                "RMS error against distortion",
                "bow of straight lines, % of width",
                |s| s.conditions.distortion_bow_percent,
            ),
        ),
        (
            "plot-illumination",
            "Illumination",
            condition_plot(
                r,
                "RMS error against illumination",
                "illumination ratio across the image",
                |s| Some(s.conditions.illumination_ratio),
            ),
        ),
    ];
    figure_grid(&mut o, &figures);
    page::drawn_size_script(&mut o, "circle");
    o.push_str("</body></html>\n");
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tick_steps_are_round() {
        for (span, step) in [(1.0, 0.2), (45.0, 10.0), (0.03, 0.005), (3.0, 0.5)] {
            assert!((tick_step(span) - step).abs() < 1e-12 * step, "{span}");
        }
        assert_eq!(fmt_tick(0.005, 0.005), "0.005");
        assert_eq!(fmt_tick(20.0, 10.0), "20");
    }
}
