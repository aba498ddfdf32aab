//! The plotting vocabulary every facetcal page shares: tick choice, number formatting, the
//! series palette, and [`Plot`], an SVG chart with a title, two labelled axes with ticks and
//! units, and a legend. The report, the regression page and the fleet page draw through it, so
//! a reader meets the same axes, colours and legends on all three.
//!
//! Markup contract (read by the browser tests): the `<svg class="plot">` carries
//! `data-series="N"`, the number of data series drawn; each axis title is a
//! `<text class="axis-label" data-unit="U">` naming its unit; the title is `text.plot-title`;
//! a plot with more than one series has a `<g class="legend">` with one `g.legend-entry` each.
//!
//! ```
//! use facetcal_report::plot::{Axis, Plot, Size};
//! let mut p = Plot::new(
//!     "residual lengths",
//!     Axis::new(0.0, 1.0, "residual length", "px"),
//!     Axis::new(0.0, 10.0, "points", "count"),
//!     Size::WIDE,
//! );
//! p.circle(0.5, 5.0, 2.0, "#000");
//! let svg = p.finish(1);
//! assert!(svg.contains("data-unit=\"px\""));
//! ```

use std::fmt::Write;

use facetcal_sheet::escape_xml as esc;

/// Series colours: twelve hues that stay apart on screen and in grey-scale print, cycled by
/// series index.
pub const PALETTE: [&str; 12] = [
    "#1b5e9f", "#d1495b", "#2a9d55", "#8d4fb5", "#e08a12", "#17a2b8", "#6b4226", "#c2185b",
    "#5d7a1f", "#3949ab", "#b8860b", "#546e7a",
];

/// The colour of series `i`.
pub fn colour(i: usize) -> &'static str {
    PALETTE[i % PALETTE.len()]
}

/// A step of 1, 2 or 5 times a power of ten that cuts `[lo, hi]` into at most `max_ticks`
/// intervals (and at least one), and the ticks that step puts inside the range. Degenerate
/// or non-finite ranges give an empty list.
pub fn ticks(lo: f64, hi: f64, max_ticks: usize) -> (f64, Vec<f64>) {
    let span = hi - lo;
    if !(span.is_finite() && span > 0.0) {
        return (1.0, Vec::new());
    }
    let n = max_ticks.max(1) as f64;
    let mut step = 10f64.powf((span / n).log10().floor());
    for m in [1.0, 2.0, 5.0, 10.0] {
        if span / (m * step) <= n {
            step *= m;
            break;
        }
    }
    let first = (lo / step - 1e-9).ceil() as i64;
    let last = (hi / step + 1e-9).floor() as i64;
    // `+ 0.0` turns -0 into 0 so that no tick reads "-0".
    let list = (first..=last).map(|k| k as f64 * step + 0.0).collect();
    (step, list)
}

/// A tick value with as many decimals as its step needs.
pub fn tick_label(v: f64, step: f64) -> String {
    let decimals = if step >= 1.0 { 0 } else { (-(step.log10().floor())) as usize };
    let s = format!("{v:.decimals$}");
    if s.trim_start_matches('-').chars().all(|c| c == '0' || c == '.') {
        s.trim_start_matches('-').to_string()
    } else {
        s
    }
}

/// `x` with `digits` significant digits, never in exponent form between 1e-5 and 1e9
/// (`0.0820`, `1400.03`, `-0.1505`); zero is `0`.
pub fn sig(x: f64, digits: usize) -> String {
    if !x.is_finite() {
        return "-".into();
    }
    if x == 0.0 {
        return "0".into();
    }
    let mag = x.abs().log10().floor() as i32;
    if !(-5..9).contains(&mag) {
        return format!("{:.*e}", digits.saturating_sub(1), x);
    }
    let decimals = (digits as i32 - 1 - mag).max(0) as usize;
    format!("{x:.decimals$}")
}

/// One axis: its data range, its title and its unit (shown as "title (unit)").
#[derive(Clone, Debug)]
pub struct Axis {
    /// Data value at the axis' start (left, or bottom; top when drawn downwards).
    pub lo: f64,
    /// Data value at the axis' end.
    pub hi: f64,
    /// What the axis measures.
    pub title: String,
    /// The unit, also written to `data-unit`.
    pub unit: String,
    /// Draw values increasing downwards (image y).
    pub down: bool,
    /// Tick values; `None` chooses them with [`ticks`].
    pub ticks: Option<Vec<f64>>,
}

impl Axis {
    /// An axis over `[lo, hi]` with automatic ticks.
    pub fn new(lo: f64, hi: f64, title: &str, unit: &str) -> Axis {
        let (lo, hi) = if hi > lo { (lo, hi) } else { (lo - 0.5, lo + 0.5) };
        Axis { lo, hi, title: title.into(), unit: unit.into(), down: false, ticks: None }
    }

    /// An axis of categories (one row or column each) over `[lo, hi]`: its title is shown
    /// alone and its `data-unit` is `category`.
    pub fn category(lo: f64, hi: f64, title: &str) -> Axis {
        Axis { ticks: Some(Vec::new()), ..Axis::new(lo, hi, title, CATEGORY) }
    }

    /// The same axis drawn with values increasing downwards.
    pub fn downwards(mut self) -> Axis {
        self.down = true;
        self
    }

    /// The axis' ticks and their step.
    fn tick_list(&self, max: usize) -> (f64, Vec<f64>) {
        match &self.ticks {
            Some(t) => {
                let step = t.windows(2).map(|w| (w[1] - w[0]).abs()).fold(f64::INFINITY, f64::min);
                (if step.is_finite() { step } else { 1.0 }, t.clone())
            }
            None => ticks(self.lo, self.hi, max),
        }
    }
}

/// The size of a plot's data area in SVG units.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Size {
    /// Width of the data area.
    pub width: f64,
    /// Height of the data area.
    pub height: f64,
}

impl Size {
    /// The default chart area.
    pub const WIDE: Size = Size { width: 460.0, height: 260.0 };
    /// A square area for plots whose two axes share a unit.
    pub const SQUARE: Size = Size { width: 320.0, height: 320.0 };

    /// An area of `width` with the aspect ratio of `x_span` : `y_span`, so that one data unit
    /// is as long on both axes (images).
    pub fn equal_aspect(width: f64, x_span: f64, y_span: f64) -> Size {
        let h = if x_span > 0.0 { width * y_span / x_span } else { width };
        Size { width, height: h }
    }
}

/// One entry of a legend.
#[derive(Clone, Debug)]
pub struct LegendEntry {
    /// The swatch's colour.
    pub colour: String,
    /// How the swatch is drawn.
    pub mark: Mark,
    /// The entry's text.
    pub label: String,
}

/// The look of a legend swatch.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Mark {
    /// A filled dot (scatter series).
    Dot,
    /// A solid line (curves, arrows).
    Line,
    /// A dashed line (reference curves, limits).
    Dashed,
    /// A filled box (bars, bands).
    Box,
}

const LEFT: f64 = 64.0;
const RIGHT: f64 = 24.0;
const TOP: f64 = 30.0;
const BOTTOM: f64 = 46.0;
/// Average advance of an 11 px sans-serif character, for laying out legend rows.
const CHAR_W: f64 = 6.3;

/// An SVG chart under construction: the caller draws in data coordinates through
/// [`Plot::x`] and [`Plot::y`] (or the helpers), then [`Plot::finish`] adds the legend.
pub struct Plot {
    title: String,
    x: Axis,
    y: Axis,
    size: Size,
    left: f64,
    body: String,
    overlay: String,
    legend: Vec<LegendEntry>,
    below: Vec<String>,
}

impl Plot {
    /// A chart titled `title` with the given axes and data area.
    pub fn new(title: &str, x: Axis, y: Axis, size: Size) -> Plot {
        Plot {
            title: title.into(),
            x,
            y,
            size,
            left: LEFT,
            body: String::new(),
            overlay: String::new(),
            legend: Vec::new(),
            below: Vec::new(),
        }
    }

    /// Widens the left margin (for long category labels on the y axis).
    pub fn left_margin(mut self, left: f64) -> Plot {
        self.left = left;
        self
    }

    /// SVG x of data value `v`.
    pub fn x(&self, v: f64) -> f64 {
        self.left + (v - self.x.lo) / (self.x.hi - self.x.lo) * self.size.width
    }

    /// SVG y of data value `v`.
    pub fn y(&self, v: f64) -> f64 {
        let t = (v - self.y.lo) / (self.y.hi - self.y.lo);
        if self.y.down { TOP + t * self.size.height } else { TOP + (1.0 - t) * self.size.height }
    }

    /// SVG units per data unit along x.
    pub fn x_scale(&self) -> f64 {
        self.size.width / (self.x.hi - self.x.lo)
    }

    /// The data area: left, top, width, height in SVG units.
    pub fn area(&self) -> (f64, f64, f64, f64) {
        (self.left, TOP, self.size.width, self.size.height)
    }

    /// The data markup drawn so far, to append raw SVG to (in SVG units); it is clipped to
    /// the data area.
    pub fn svg(&mut self) -> &mut String {
        &mut self.body
    }

    /// Markup drawn over the whole chart, not clipped (scale bars, marks in the margins).
    pub fn overlay(&mut self) -> &mut String {
        &mut self.overlay
    }

    /// A dot at data (x, y) of radius `r` SVG units.
    pub fn circle(&mut self, x: f64, y: f64, r: f64, fill: &str) {
        let (cx, cy) = (self.x(x), self.y(y));
        let _ =
            writeln!(self.body, r##"<circle cx="{cx:.2}" cy="{cy:.2}" r="{r}" fill="{fill}"/>"##);
    }

    /// A polyline through data points.
    pub fn polyline(&mut self, points: &[(f64, f64)], stroke: &str, dashed: bool) {
        let pts: Vec<String> =
            points.iter().map(|&(x, y)| format!("{:.2},{:.2}", self.x(x), self.y(y))).collect();
        let dash = if dashed { r#" stroke-dasharray="5 3""# } else { "" };
        let _ = writeln!(
            self.body,
            r#"<polyline points="{}" fill="none" stroke="{stroke}" stroke-width="1.6"{dash}/>"#,
            pts.join(" ")
        );
    }

    /// A rectangle between data corners (x0, y0) and (x1, y1).
    pub fn rect(&mut self, x0: f64, y0: f64, x1: f64, y1: f64, fill: &str, extra: &str) {
        let (a, b) = (self.x(x0), self.x(x1));
        let (c, d) = (self.y(y0), self.y(y1));
        let _ = writeln!(
            self.body,
            r#"<rect x="{:.2}" y="{:.2}" width="{:.2}" height="{:.2}" fill="{fill}"{extra}/>"#,
            a.min(b),
            c.min(d),
            (b - a).abs(),
            (d - c).abs()
        );
    }

    /// Adds a legend entry.
    pub fn legend(&mut self, colour: &str, mark: Mark, label: &str) {
        self.legend.push(LegendEntry { colour: colour.into(), mark, label: label.into() });
    }

    /// Adds a line of small text under the legend (a note on scale or convention).
    pub fn note(&mut self, text: &str) {
        self.below.push(text.into());
    }

    /// Category labels along the y axis at data positions (instead of numeric ticks); long
    /// labels are cut with an ellipsis, the full text kept in a `<title>`.
    pub fn y_categories(&mut self, labels: &[(f64, String)]) {
        let max_chars = ((self.left - 10.0) / CHAR_W).floor().max(4.0) as usize;
        for (v, label) in labels {
            let shown = ellipsize(label, max_chars);
            let _ = writeln!(
                self.overlay,
                r##"<text x="{:.1}" y="{:.1}" font-size="11" text-anchor="end" fill="#222"><title>{}</title>{}</text>"##,
                self.left - 5.0,
                self.y(*v) + 4.0,
                esc(label),
                esc(&shown)
            );
        }
        self.y.ticks = Some(Vec::new());
    }

    fn frame(&self, o: &mut String) {
        let (l, t, w, h) = self.area();
        let _ = writeln!(
            o,
            r##"<rect x="{l:.1}" y="{t:.1}" width="{w:.1}" height="{h:.1}" fill="#fcfcfc" stroke="#444"/>"##
        );
        let (xs, xt) = self.x.tick_list((w / 70.0).floor().max(2.0) as usize);
        for v in xt.iter().filter(|v| (self.x.lo..=self.x.hi).contains(*v)) {
            let x = self.x(*v);
            let _ = writeln!(
                o,
                r##"<line class="grid" x1="{x:.1}" y1="{t:.1}" x2="{x:.1}" y2="{:.1}" stroke="#e4e4e4"/><line x1="{x:.1}" y1="{:.1}" x2="{x:.1}" y2="{:.1}" stroke="#444"/><text class="tick" x="{x:.1}" y="{:.1}" font-size="11" text-anchor="middle" fill="#222">{}</text>"##,
                t + h,
                t + h,
                t + h + 4.0,
                t + h + 15.0,
                tick_label(*v, xs)
            );
        }
        let (ys, yt) = self.y.tick_list((h / 40.0).floor().max(2.0) as usize);
        for v in yt.iter().filter(|v| (self.y.lo..=self.y.hi).contains(*v)) {
            let y = self.y(*v);
            let _ = writeln!(
                o,
                r##"<line class="grid" x1="{l:.1}" y1="{y:.1}" x2="{:.1}" y2="{y:.1}" stroke="#e4e4e4"/><line x1="{:.1}" y1="{y:.1}" x2="{l:.1}" y2="{y:.1}" stroke="#444"/><text class="tick" x="{:.1}" y="{:.1}" font-size="11" text-anchor="end" fill="#222">{}</text>"##,
                l + w,
                l - 4.0,
                l - 6.0,
                y + 4.0,
                tick_label(*v, ys)
            );
        }
        let _ = writeln!(
            o,
            r##"<text class="axis-label" data-axis="x" data-unit="{}" x="{:.1}" y="{:.1}" font-size="12" text-anchor="middle" fill="#222">{}</text>"##,
            esc(&self.x.unit),
            l + 0.5 * w,
            t + h + 34.0,
            esc(&axis_title(&self.x))
        );
        let (yx, yy) = (16.0, t + 0.5 * h);
        let _ = writeln!(
            o,
            r##"<text class="axis-label" data-axis="y" data-unit="{}" x="{yx:.1}" y="{yy:.1}" font-size="12" text-anchor="middle" fill="#222" transform="rotate(-90 {yx:.1} {yy:.1})">{}</text>"##,
            esc(&self.y.unit),
            esc(&axis_title(&self.y))
        );
    }

    /// Lays the legend out in rows under the x axis; returns the height used.
    fn legend_rows(&self, o: &mut String, top: f64, width: f64) -> f64 {
        if self.legend.is_empty() {
            return 0.0;
        }
        let mut x = self.left;
        let mut y = top + 12.0;
        let max_chars = ((width - self.left - 30.0) / CHAR_W).floor().max(8.0) as usize;
        o.push_str("<g class=\"legend\">\n");
        for e in &self.legend {
            let label = ellipsize(&e.label, max_chars);
            let w = 26.0 + label.chars().count() as f64 * CHAR_W + 14.0;
            if x > self.left && x + w > width - 4.0 {
                x = self.left;
                y += 16.0;
            }
            let c = &e.colour;
            let swatch = match e.mark {
                Mark::Dot => {
                    format!(r#"<circle cx="{:.1}" cy="{:.1}" r="4" fill="{c}"/>"#, x + 9.0, y - 4.0)
                }
                Mark::Line => format!(
                    r#"<line x1="{x:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="{c}" stroke-width="2"/>"#,
                    y - 4.0,
                    x + 18.0,
                    y - 4.0
                ),
                Mark::Dashed => format!(
                    r#"<line x1="{x:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="{c}" stroke-width="2" stroke-dasharray="5 3"/>"#,
                    y - 4.0,
                    x + 18.0,
                    y - 4.0
                ),
                Mark::Box => format!(
                    r#"<rect x="{x:.1}" y="{:.1}" width="18" height="9" fill="{c}"/>"#,
                    y - 9.0
                ),
            };
            let _ = writeln!(
                o,
                r##"<g class="legend-entry">{swatch}<text x="{:.1}" y="{y:.1}" font-size="11" fill="#222"><title>{}</title>{}</text></g>"##,
                x + 24.0,
                esc(&e.label),
                esc(&label)
            );
            x += w;
        }
        o.push_str("</g>\n");
        y - top + 6.0
    }

    /// The finished `<svg class="plot">`, recording `series` data series drawn.
    pub fn finish(self, series: usize) -> String {
        let width = self.left + self.size.width + RIGHT;
        let axis_bottom = TOP + self.size.height + BOTTOM;
        let mut tail = String::new();
        let mut h = axis_bottom + self.legend_rows(&mut tail, axis_bottom, width);
        let max_chars = ((width - 12.0) / (0.9 * CHAR_W)).floor() as usize;
        for line in &self.below {
            for piece in wrap(line, max_chars) {
                h += 14.0;
                let _ = writeln!(
                    tail,
                    r##"<text class="note" x="8" y="{:.1}" font-size="10.5" fill="#444">{}</text>"##,
                    h - 3.0,
                    esc(&piece)
                );
            }
        }
        h += 6.0;
        let mut o = String::new();
        let _ = writeln!(
            o,
            r##"<svg class="plot" role="img" aria-label="{}" data-series="{series}" viewBox="0 0 {width:.1} {h:.1}" width="{width:.0}" height="{h:.0}">"##,
            esc(&self.title)
        );
        let _ = writeln!(
            o,
            r##"<text class="plot-title" x="8" y="17" font-size="13" font-weight="bold" fill="#222">{}</text>"##,
            esc(&self.title)
        );
        self.frame(&mut o);
        // The clip path's id must be unique on the page: a hash of the title and the content.
        let id = format!("clip{:08x}", fnv1a(self.title.as_bytes()) ^ fnv1a(self.body.as_bytes()));
        let (l, t, w, hh) = self.area();
        let _ = writeln!(
            o,
            r#"<clipPath id="{id}"><rect x="{l:.1}" y="{t:.1}" width="{w:.1}" height="{hh:.1}"/></clipPath><g clip-path="url(#{id})">"#
        );
        o.push_str(&self.body);
        o.push_str("</g>\n");
        o.push_str(&self.overlay);
        o.push_str(&tail);
        o.push_str("</svg>\n");
        o
    }
}

/// The unit of a category axis.
const CATEGORY: &str = "category";

fn axis_title(a: &Axis) -> String {
    if a.unit.is_empty() || a.unit == CATEGORY {
        a.title.clone()
    } else {
        format!("{} ({})", a.title, a.unit)
    }
}

/// 32-bit FNV-1a hash, for ids that are the same on every run.
fn fnv1a(bytes: &[u8]) -> u32 {
    bytes.iter().fold(0x811c_9dc5u32, |h, &b| (h ^ b as u32).wrapping_mul(0x0100_0193))
}

/// A round factor as people write it: `2000`, `50`, `0.5`.
pub fn factor(x: f64) -> String {
    if x >= 1.0 { format!("{x:.0}") } else { sig(x, 1) }
}

/// `s` cut to `max` characters with a trailing ellipsis.
pub fn ellipsize(s: &str, max: usize) -> String {
    if s.chars().count() <= max {
        return s.to_string();
    }
    let mut out: String = s.chars().take(max.saturating_sub(1)).collect();
    out.push('…');
    out
}

/// `s` broken at spaces into lines of at most `max` characters (a longer word stays whole).
pub fn wrap(s: &str, max: usize) -> Vec<String> {
    let mut lines = Vec::new();
    let mut cur = String::new();
    for word in s.split_whitespace() {
        if !cur.is_empty() && cur.chars().count() + 1 + word.chars().count() > max {
            lines.push(std::mem::take(&mut cur));
        }
        if !cur.is_empty() {
            cur.push(' ');
        }
        cur.push_str(word);
    }
    if !cur.is_empty() {
        lines.push(cur);
    }
    lines
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_round_and_cover_the_range() {
        // Image x of a 1280 px wide camera: edges -0.5 .. 1279.5, steps of 200.
        let (step, t) = ticks(-0.5, 1279.5, 7);
        assert_eq!(step, 200.0);
        assert_eq!(t, vec![0.0, 200.0, 400.0, 600.0, 800.0, 1000.0, 1200.0]);
        // Small residuals: 0 .. 0.047 px in at most 5 intervals -> steps of 0.01.
        let (step, t) = ticks(0.0, 0.047, 5);
        assert!((step - 0.01).abs() < 1e-15);
        assert_eq!(t.len(), 5);
        // Symmetric range around zero contains 0 itself, not -0.
        let (_, t) = ticks(-0.3, 0.3, 6);
        assert!(t.iter().any(|v| *v == 0.0 && v.is_sign_positive()));
        assert_eq!(tick_label(t[0], 0.1), "-0.3");
        // Never more intervals than asked for, whatever the span.
        for (lo, hi, n) in [(0.0, 7.3, 3), (12.0, 13.0, 4), (-1e-4, 3e-4, 5), (0.0, 999.0, 10)] {
            let (step, t) = ticks(lo, hi, n);
            assert!((hi - lo) / step <= n as f64 + 1e-9, "{lo} {hi} {n}: step {step}");
            assert!(!t.is_empty() && t.iter().all(|v| *v >= lo - 1e-12 && *v <= hi + 1e-12));
        }
        assert!(ticks(1.0, 1.0, 5).1.is_empty());
        assert!(ticks(0.0, f64::NAN, 5).1.is_empty());
    }

    #[test]
    fn numbers_keep_their_significant_digits() {
        assert_eq!(sig(0.081964, 2), "0.082");
        assert_eq!(sig(1400.027196, 6), "1400.03");
        assert_eq!(sig(-0.150521, 4), "-0.1505");
        assert_eq!(sig(6.164e-5, 3), "0.0000616");
        assert_eq!(sig(0.0, 3), "0");
        assert_eq!(sig(3.2e-9, 2), "3.2e-9");
        assert_eq!(tick_label(-0.0, 0.5), "0.0");
        assert_eq!(tick_label(0.25, 0.05), "0.25");
    }

    #[test]
    fn text_is_wrapped_and_cut() {
        assert_eq!(wrap("one two three four", 9), vec!["one two", "three", "four"]);
        assert_eq!(ellipsize("view-0001.png", 6), "view-…");
    }

    #[test]
    fn a_plot_names_its_axes_units_and_series() {
        let mut p = Plot::new(
            "t",
            Axis::new(-0.5, 639.5, "x", "px"),
            Axis::new(-0.5, 479.5, "y, down", "px").downwards(),
            Size::equal_aspect(400.0, 640.0, 480.0),
        );
        assert!((p.y(-0.5) - 30.0).abs() < 1e-9 && p.y(479.5) > p.y(0.0));
        p.legend(colour(0), Mark::Dot, "view 1");
        p.legend(colour(1), Mark::Dot, "view 2");
        let svg = p.finish(2);
        assert_eq!(svg.matches("class=\"axis-label\"").count(), 2);
        assert!(svg.contains("data-series=\"2\"") && svg.matches("legend-entry").count() == 2);
        assert!(svg.contains(">x (px)<") && svg.contains(">200<"));
    }
}
