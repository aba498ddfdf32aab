//! The report's residual plots, all drawn from the same per-view residuals of the used images:
//! the vectors across the image (magnified, with a scale bar in px), the scatter of dx against
//! dy with 1, 2 and 3 sigma circles, the histogram of residual lengths against the Rayleigh
//! distribution, and the strip of each image's residual lengths with its RMS marked.
//!
//! The reference distribution is common practice: for independent Gaussian noise of standard
//! deviation sigma on each image axis, the residual length r = |(dx, dy)| follows the Rayleigh
//! distribution, density r / sigma^2 exp(-r^2 / (2 sigma^2)), with P(r < k sigma) =
//! 1 - exp(-k^2 / 2): 39.3 %, 86.5 % and 98.9 % for k = 1, 2, 3. sigma is estimated from the
//! residuals themselves, sigma^2 = sum(dx^2 + dy^2) / (2 N), so the plots show the *shape* of
//! the error (bias, outliers, patterns), not whether its size is acceptable.

use std::fmt::Write;

use facetcal_model::files::{CalibrationFile, ViewPoints, ViewStatus};
use facetcal_sheet::escape_xml as esc;

use crate::page::round_125;
use crate::plot::{Axis, Mark, Plot, Size, colour, factor, sig};

/// The used views' residuals, each with its position in the image.
pub struct Residuals {
    views: Vec<ViewResiduals>,
}

struct ViewResiduals {
    name: String,
    rms_px: f64,
    /// (image position, residual) per point, px.
    points: Vec<([f64; 2], [f64; 2])>,
}

impl Residuals {
    /// Gathers the residuals of every used view, with the image positions from `observations`
    /// (matched by view order, as the calibration file lists them).
    pub fn new(cal: &CalibrationFile, observations: &[ViewPoints]) -> Residuals {
        let views = cal
            .views
            .iter()
            .zip(observations)
            .filter(|(r, _)| r.status == ViewStatus::Used)
            .map(|(r, o)| ViewResiduals {
                name: r.name.clone(),
                rms_px: r.rms_px.unwrap_or(0.0),
                points: o
                    .points
                    .iter()
                    .zip(&r.residuals)
                    .filter(|(_, d)| d[0].is_finite() && d[1].is_finite())
                    .map(|(p, d)| (p.image, *d))
                    .collect(),
            })
            .collect();
        Residuals { views }
    }

    fn count(&self) -> usize {
        self.views.iter().map(|v| v.points.len()).sum()
    }

    /// Per-axis standard deviation sigma, px (see the module doc).
    pub fn sigma_px(&self) -> f64 {
        let n = self.count();
        if n == 0 {
            return 0.0;
        }
        let ss: f64 =
            self.views.iter().flat_map(|v| &v.points).map(|(_, d)| d[0] * d[0] + d[1] * d[1]).sum();
        (ss / (2.0 * n as f64)).sqrt()
    }

    fn lengths(&self) -> Vec<f64> {
        let mut l: Vec<f64> =
            self.views.iter().flat_map(|v| &v.points).map(|(_, d)| d[0].hypot(d[1])).collect();
        l.sort_by(f64::total_cmp);
        l
    }

    /// The residual length below which `q` of the points lie.
    fn quantile(&self, q: f64) -> f64 {
        let l = self.lengths();
        if l.is_empty() {
            return 0.0;
        }
        l[((l.len() - 1) as f64 * q).round() as usize]
    }

    /// Upper end of the residual-length axes: the 99.5 % point or 4 sigma, whichever is more.
    fn length_axis_max(&self) -> f64 {
        let top = self.quantile(0.995).max(4.0 * self.sigma_px());
        if top > 0.0 { top * 1.08 } else { 1.0 }
    }

    fn legend_views(&self, p: &mut Plot, mark: Mark) {
        for (i, v) in self.views.iter().enumerate() {
            p.legend(colour(i), mark, &v.name);
        }
    }
}

/// Rayleigh cumulative distribution of a residual length `r` for per-axis sigma `s`.
fn rayleigh_cdf(r: f64, s: f64) -> f64 {
    1.0 - (-r * r / (2.0 * s * s)).exp()
}

/// The residual length below which a share `q` of Rayleigh(s) lies.
fn rayleigh_quantile(q: f64, s: f64) -> f64 {
    s * (-2.0 * (1.0 - q).ln()).sqrt()
}

/// Image axes of a camera: pixel edges from -0.5 to size - 0.5, y down.
pub fn image_plot(title: &str, width: u32, height: u32) -> Plot {
    let (w, h) = (width.max(1) as f64, height.max(1) as f64);
    Plot::new(
        title,
        Axis::new(-0.5, w - 0.5, "image x, right", "px"),
        Axis::new(-0.5, h - 0.5, "image y, down", "px").downwards(),
        Size::equal_aspect(480.0, w, h),
    )
}

/// A selector above the plots that shows one view's residuals alone (every `g.view` element
/// with another `data-view` is hidden), for calibrations with more views than colours; empty
/// for a single view. Needs the page's inline script permission.
pub fn view_selector(res: &Residuals) -> String {
    if res.views.len() < 2 {
        return String::new();
    }
    let mut o = String::from(
        "<p><label>Residual plots show: <select id=\"view-select\"><option value=\"all\">all used views</option>",
    );
    for (i, v) in res.views.iter().enumerate() {
        let _ = write!(o, "<option value=\"{i}\">{}</option>", esc(&v.name));
    }
    o.push_str(
        "</select></label></p>\n<script>document.getElementById('view-select').addEventListener('change', function (e) { var v = e.target.value; document.querySelectorAll('g.view').forEach(function (g) { g.style.display = (v === 'all' || g.getAttribute('data-view') === v) ? '' : 'none'; }); });</script>\n",
    );
    o
}

/// The note every image-coordinate plot carries.
pub const IMAGE_CONVENTION: &str =
    "Image coordinates in px: (0, 0) is the centre of the top-left pixel, x to the right, y down.";

/// Residual vectors across the image, one colour per view, magnified by a round factor with a
/// scale bar.
pub fn vector_plot(cal: &CalibrationFile, res: &Residuals) -> String {
    let (w, h) = (cal.camera.width, cal.camera.height);
    let typical = res.quantile(0.95).max(1e-6);
    // The typical (95 %) residual is drawn about 1/30 of the image width long.
    let gain = round_125(w.max(1) as f64 / 30.0 / typical);
    let mut p = image_plot(&format!("Residual vectors, magnified x{}", factor(gain)), w, h);
    let scale = p.x_scale();
    for (i, v) in res.views.iter().enumerate() {
        let c = colour(i);
        let _ = writeln!(
            p.svg(),
            r##"<g class="view" data-view="{i}"><marker id="head{i}" viewBox="0 0 6 6" refX="5" refY="3" markerWidth="4" markerHeight="4" orient="auto"><path d="M0,0 L6,3 L0,6 z" fill="{c}"/></marker>"##
        );
        for (q, d) in &v.points {
            let (x0, y0) = (p.x(q[0]), p.y(q[1]));
            let (x1, y1) = (x0 + d[0] * gain * scale, y0 + d[1] * gain * scale);
            let _ = writeln!(
                p.svg(),
                r##"<line x1="{x0:.1}" y1="{y0:.1}" x2="{x1:.1}" y2="{y1:.1}" stroke="{c}" stroke-width="1" marker-end="url(#head{i})"/>"##
            );
        }
        p.svg().push_str("</g>\n");
    }
    // Scale bar in the top margin, right-aligned with the plot area.
    let bar_px = round_125(typical);
    let (l, _, aw, _) = p.area();
    let len = bar_px * gain * scale;
    let x1 = l + aw;
    let _ = writeln!(
        p.overlay(),
        r##"<g class="scale-bar" data-residual-px="{bar_px}" data-length="{len:.2}"><line x1="{:.1}" y1="22" x2="{x1:.1}" y2="22" stroke="#222" stroke-width="2"/><line x1="{:.1}" y1="18" x2="{:.1}" y2="26" stroke="#222"/><line x1="{x1:.1}" y1="18" x2="{x1:.1}" y2="26" stroke="#222"/><text x="{:.1}" y="26" font-size="11" text-anchor="end" fill="#222">{} px residual</text></g>"##,
        x1 - len,
        x1 - len,
        x1 - len,
        x1 - len - 6.0,
        sig(bar_px, 2)
    );
    res.legend_views(&mut p, Mark::Line);
    p.note(&format!(
        "Each arrow starts at a detected point and shows observed minus projected position, \
         magnified {} times: the bar above the plot is {} px of residual. {IMAGE_CONVENTION}",
        factor(gain),
        sig(bar_px, 2)
    ));
    p.finish(res.views.len())
}

/// dx against dy of every residual, with circles at 1, 2 and 3 sigma.
pub fn scatter_plot(res: &Residuals) -> String {
    let s = res.sigma_px();
    let lim = res.length_axis_max();
    let mut p = Plot::new(
        "Residual scatter, dx against dy",
        Axis::new(-lim, lim, "dx, observed minus projected", "px"),
        Axis::new(-lim, lim, "dy, down", "px").downwards(),
        Size::SQUARE,
    );
    let r_unit = p.x_scale();
    let (cx, cy) = (p.x(0.0), p.y(0.0));
    for (k, dash) in [(1.0, "none"), (2.0, "6 3"), (3.0, "2 3")] {
        let _ = writeln!(
            p.svg(),
            r##"<circle class="sigma" cx="{cx:.2}" cy="{cy:.2}" r="{:.2}" fill="none" stroke="#333" stroke-width="1.2" stroke-dasharray="{dash}"/>"##,
            k * s * r_unit
        );
    }
    let mut outside = 0;
    let mut inside = [0usize; 3];
    for (i, v) in res.views.iter().enumerate() {
        let _ = write!(p.svg(), r#"<g class="view" data-view="{i}" fill-opacity="0.6">"#);
        for (_, d) in &v.points {
            let r = d[0].hypot(d[1]);
            for (k, n) in inside.iter_mut().enumerate() {
                if r < (k + 1) as f64 * s {
                    *n += 1;
                }
            }
            if d[0].abs() > lim || d[1].abs() > lim {
                outside += 1;
                continue;
            }
            p.circle(d[0], d[1], 1.6, colour(i));
        }
        p.svg().push_str("</g>\n");
    }
    res.legend_views(&mut p, Mark::Dot);
    p.legend("#333", Mark::Line, &format!("1 sigma = {} px per axis", sig(s, 2)));
    p.legend("#333", Mark::Dashed, "2 and 3 sigma");
    let n = res.count().max(1) as f64;
    let share = |k: usize| format!("{:.0} %", 100.0 * inside[k] as f64 / n);
    p.note(&format!(
        "Inside 1, 2, 3 sigma: {}, {}, {} of {} points; isotropic Gaussian noise puts {:.0} %, \
         {:.0} %, {:.0} % there (Rayleigh distribution, common practice). A shifted or elongated \
         cloud means a bias or a direction the model does not fit.{}",
        share(0),
        share(1),
        share(2),
        res.count(),
        100.0 * rayleigh_cdf(1.0, 1.0),
        100.0 * rayleigh_cdf(2.0, 1.0),
        100.0 * rayleigh_cdf(3.0, 1.0),
        if outside > 0 { format!(" {outside} points lie beyond the axes.") } else { String::new() }
    ));
    p.finish(res.views.len().max(1))
}

/// Histogram of residual lengths with the Rayleigh density of the same sigma.
pub fn histogram_plot(res: &Residuals) -> String {
    let s = res.sigma_px();
    let top = res.length_axis_max();
    let bins = 24usize;
    let width = top / bins as f64;
    let mut counts = vec![0usize; bins];
    let mut beyond = 0;
    for r in res.lengths() {
        match ((r / width) as usize).min(bins) {
            b if b < bins => counts[b] += 1,
            _ => beyond += 1,
        }
    }
    let n = res.count() as f64;
    let expected_peak = if s > 0.0 { n * width / s * (-0.5f64).exp() } else { 0.0 };
    let y_max = counts.iter().copied().max().unwrap_or(0) as f64;
    let y_max = y_max.max(expected_peak).max(1.0) * 1.1;
    let mut p = Plot::new(
        "Residual lengths against the Rayleigh distribution",
        Axis::new(0.0, top, "residual length |(dx, dy)|", "px"),
        Axis::new(0.0, y_max, "points per bin", "count"),
        Size::WIDE,
    );
    for (b, &c) in counts.iter().enumerate() {
        let x0 = b as f64 * width;
        p.rect(x0 + 0.06 * width, 0.0, x0 + 0.94 * width, c as f64, "#6f93bd", "");
    }
    if s > 0.0 {
        let curve: Vec<(f64, f64)> = (0..=120)
            .map(|k| {
                let r = top * k as f64 / 120.0;
                (r, n * width * r / (s * s) * (-r * r / (2.0 * s * s)).exp())
            })
            .collect();
        p.polyline(&curve, "#c0392b", false);
    }
    p.legend(
        "#6f93bd",
        Mark::Box,
        &format!("observed, {} points, bins of {} px", res.count(), sig(width, 2)),
    );
    p.legend("#c0392b", Mark::Line, &format!("Rayleigh, sigma {} px per axis", sig(s, 2)));
    let median = res.quantile(0.5);
    p.note(&format!(
        "Median length {} px (Rayleigh: {} px), 95 % below {} px (Rayleigh: {} px).{} A long tail \
         beyond the curve points at outliers or a poorly fitting model.",
        sig(median, 2),
        sig(rayleigh_quantile(0.5, s), 2),
        sig(res.quantile(0.95), 2),
        sig(rayleigh_quantile(0.95, s), 2),
        if beyond > 0 { format!(" {beyond} points lie beyond the axis.") } else { String::new() }
    ));
    p.finish(2)
}

/// Each used image's residual lengths as a strip of dots with its RMS marked, worst image on
/// top, over the band where 90 % of the lengths fall for Gaussian noise of the overall sigma;
/// then every left-out image with its reason in full, as HTML text that wraps.
pub fn per_image_plot(cal: &CalibrationFile, res: &Residuals) -> String {
    let s = res.sigma_px();
    let top = res.length_axis_max();
    let mut order: Vec<usize> = (0..res.views.len()).collect();
    order.sort_by(|&a, &b| res.views[b].rms_px.total_cmp(&res.views[a].rms_px));
    let rows = order.len().max(1) as f64;
    let row_h = 16.0;
    let mut p = Plot::new(
        "Error per image: residual lengths and RMS",
        Axis::new(0.0, top, "residual length", "px"),
        Axis::category(-0.5, rows - 0.5, "image, worst on top").downwards(),
        Size { width: 400.0, height: (rows * row_h).max(140.0) },
    )
    .left_margin(150.0);
    let (lo, hi) = (rayleigh_quantile(0.05, s), rayleigh_quantile(0.95, s));
    p.rect(lo, -0.5, hi.min(top), rows - 0.5, "#dff0e3", "");
    let expected_rms = s * std::f64::consts::SQRT_2;
    p.polyline(&[(expected_rms, -0.5), (expected_rms, rows - 0.5)], "#2a9d55", false);
    let mut labels = Vec::new();
    for (row, &i) in order.iter().enumerate() {
        let v = &res.views[i];
        let y = row as f64;
        let _ = write!(p.svg(), r#"<g class="view" data-view="{i}" fill-opacity="0.55">"#);
        for (k, (_, d)) in v.points.iter().enumerate() {
            // A fixed spread within the row (golden-ratio sequence), so that equal lengths do
            // not hide each other and the page is the same on every run.
            let jitter = ((k as f64 * 0.618_034).fract() - 0.5) * 0.6;
            let r = d[0].hypot(d[1]).min(top);
            p.circle(r, y + jitter, 1.5, colour(i));
        }
        p.svg().push_str("</g>\n");
        let (x, yy) = (p.x(v.rms_px.min(top)), p.y(y));
        let _ = writeln!(
            p.svg(),
            r##"<path class="rms-mark" d="M{x:.1},{:.1} l5,7 l-5,7 l-5,-7 z" fill="#111"><title>{}: RMS {} px</title></path>"##,
            yy - 7.0,
            esc(&v.name),
            sig(v.rms_px, 3)
        );
        labels.push((y, format!("{} {}", v.name, sig(v.rms_px, 2))));
    }
    p.y_categories(&labels);
    p.legend(colour(0), Mark::Dot, "residual length of one point (view colour)");
    p.legend("#111", Mark::Box, "RMS of the image (diamond; px after the name)");
    p.legend("#dff0e3", Mark::Box, &format!("90 % band of Gaussian noise, sigma {} px", sig(s, 2)));
    p.legend("#2a9d55", Mark::Line, &format!("expected RMS {} px", sig(expected_rms, 2)));
    let svg = p.finish(res.views.len().max(1));
    let mut o = svg;
    let left_out: Vec<_> = cal.views.iter().filter(|v| v.status != ViewStatus::Used).collect();
    if !left_out.is_empty() {
        let _ = writeln!(
            o,
            "<p class=\"left-out-title\">{} left out:</p><ul class=\"left-out\">",
            if left_out.len() == 1 {
                "1 image".to_string()
            } else {
                format!("{} images", left_out.len())
            }
        );
        for v in left_out {
            let what = if v.status == ViewStatus::Failed {
                "failed before the solver"
            } else {
                "dropped by the solver"
            };
            let _ = writeln!(
                o,
                "<li><b>{}</b>, {what}: {}</li>",
                esc(&v.name),
                esc(v.reason.as_deref().unwrap_or("no reason recorded"))
            );
        }
        o.push_str("</ul>\n");
    }
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rayleigh_shares_are_the_textbook_ones() {
        // P(r < k sigma) = 1 - exp(-k^2/2): 39.3 %, 86.5 %, 98.9 % (common practice).
        for (k, p) in [(1.0, 0.3935), (2.0, 0.8647), (3.0, 0.9889)] {
            assert!((rayleigh_cdf(k, 1.0) - p).abs() < 1e-4);
        }
        // Median sigma sqrt(2 ln 2) = 1.1774 sigma.
        assert!((rayleigh_quantile(0.5, 2.0) - 2.0 * 1.177_41).abs() < 1e-4);
        assert!((rayleigh_cdf(rayleigh_quantile(0.95, 0.3), 0.3) - 0.95).abs() < 1e-12);
    }
}
