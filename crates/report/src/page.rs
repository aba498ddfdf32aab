//! The parts every facetcal HTML page shares: the page head with its content security policy,
//! the plot element, the frame of a plot area, round legend and tick steps, the figure grid and
//! the script that lets a headless browser prove each plot was drawn. The calibration report,
//! the regression page and the fleet page are built from these, so they look and behave alike.
//!
//! Every function appends to a caller's `String`; titles and labels are escaped here.

use std::fmt::Write;

use facetcal_sheet::escape_xml as esc;

/// Style rules the report and the regression page share: body, headings, the figure grid and
/// right-aligned number tables.
pub const BASE_CSS: &str = "\
body { font-family: sans-serif; margin: 24px; color: #222; max-width: 1280px; }
h1 { font-size: 22px; margin-bottom: 4px; }
.grid { display: flex; flex-wrap: wrap; gap: 16px; }
figure { margin: 0; border: 1px solid #ddd; padding: 8px; }
figcaption { font-weight: bold; margin-bottom: 4px; }
table { border-collapse: collapse; margin: 8px 0; }
td, th { border: 1px solid #ccc; padding: 3px 8px; text-align: right; }
td:first-child, th:first-child { text-align: left; }
";

/// Whether a page carries inline script; the content security policy allows it only then.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Script {
    /// No script at all: the policy forbids every script.
    None,
    /// Inline script (such as [`drawn_size_script`]) is allowed; nothing is ever fetched.
    Inline,
}

/// Writes the page's opening up to and including its `<h1>` with the (escaped) title; the style
/// sheet is the concatenation of `css`. The content security policy fetches nothing: styles
/// inline, images only as data URLs.
pub fn page_head(o: &mut String, title: &str, css: &[&str], script: Script) {
    let script_src = match script {
        Script::None => "",
        Script::Inline => " script-src 'unsafe-inline';",
    };
    let t = esc(title);
    let css = css.concat();
    let _ = write!(
        o,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\n\
<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; style-src 'unsafe-inline';{script_src} img-src data:\">\n\
<title>{t}</title>\n<style>\n{css}</style></head><body>\n<h1>{t}</h1>\n"
    );
}

/// Opens an `<svg class="plot">` of `w` x `h` units whose accessible name is `label`.
pub fn svg_open(o: &mut String, label: &str, w: f64, h: f64) {
    let _ = writeln!(
        o,
        r##"<svg class="plot" role="img" aria-label="{}" viewBox="0 0 {w:.1} {h:.1}" width="{w:.0}" height="{h:.0}">"##,
        esc(label)
    );
}

/// The light plot area with its dark outline.
pub fn plot_area(o: &mut String, x: f64, y: f64, w: f64, h: f64) {
    let _ = writeln!(
        o,
        r##"<rect x="{x:.1}" y="{y:.1}" width="{w:.1}" height="{h:.1}" fill="#fafafa" stroke="#444" stroke-width="1"/>"##
    );
}

/// The round number nearest `x` on the 1, 2, 5 series (1, 2 or 5 times a power of ten, or
/// the next power), for legends and tick steps. `x` must be positive.
pub fn round_125(x: f64) -> f64 {
    let base = 10f64.powf(x.log10().floor());
    let m = x / base;
    let n = if m < 1.5 {
        1.0
    } else if m < 3.5 {
        2.0
    } else if m < 7.5 {
        5.0
    } else {
        10.0
    };
    n * base
}

/// Writes the figures (stable id, caption, SVG) in a wrapping grid.
pub fn figure_grid(o: &mut String, figures: &[(&str, &str, String)]) {
    o.push_str("<div class=\"grid\">\n");
    for (id, caption, svg) in figures {
        let _ =
            writeln!(o, "<figure id=\"{id}\"><figcaption>{caption}</figcaption>\n{svg}</figure>");
    }
    o.push_str("</div>\n");
}

/// After layout, each `svg.plot` records its drawn size and the number of elements matching
/// `counted` (a CSS selector) inside it as `data-drawn="WxH:N"`, and what a reader needs of it
/// as `data-check="A:L:S:O"`: A axis labels that name a unit, L legend entries, S data series
/// (its `data-series`), O text elements drawn outside the plot's box. The body gets the page's
/// scroll width as `data-width`, the number of text blocks wider than their box as
/// `data-overflow`, and `data-ready="yes"`, so a headless browser's DOM dump proves that every
/// plot rendered and can be read (see [`crate::plot`] for the markup).
pub fn drawn_size_script(o: &mut String, counted: &str) {
    let _ = writeln!(
        o,
        "<script>window.addEventListener('load', function () {{ \
document.querySelectorAll('svg.plot').forEach(function (s) {{ var b = s.getBoundingClientRect(); \
s.setAttribute('data-drawn', Math.round(b.width) + 'x' + Math.round(b.height) + ':' + s.querySelectorAll('{counted}').length); \
var out = 0; s.querySelectorAll('text').forEach(function (t) {{ var r = t.getBoundingClientRect(); \
if (r.width > 0 && (r.left < b.left - 1 || r.right > b.right + 1 || r.top < b.top - 1 || r.bottom > b.bottom + 1)) {{ out++; }} }}); \
var axes = 0; s.querySelectorAll('text.axis-label').forEach(function (t) {{ if (t.getAttribute('data-unit')) {{ axes++; }} }}); \
s.setAttribute('data-check', axes + ':' + s.querySelectorAll('.legend-entry').length + ':' + (s.getAttribute('data-series') || '0') + ':' + out); }}); \
var over = 0; document.querySelectorAll('td, th, li, p, figcaption, h1, h2').forEach(function (e) {{ if (e.scrollWidth > e.clientWidth + 1) {{ over++; }} }}); \
document.body.setAttribute('data-width', document.documentElement.scrollWidth); \
document.body.setAttribute('data-overflow', over); \
document.body.setAttribute('data-ready', 'yes'); }});</script>"
    );
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_numbers_follow_the_1_2_5_series() {
        for (x, r) in [(0.23, 0.2), (0.8, 1.0), (4.0, 5.0), (31.0, 20.0), (0.009, 0.01)] {
            assert!((round_125(x) - r).abs() < 1e-12 * r, "{x}");
        }
    }

    #[test]
    fn policy_allows_script_only_when_asked() {
        let mut a = String::new();
        page_head(&mut a, "t <1>", &[], Script::None);
        assert!(!a.contains("script-src") && a.contains("<h1>t &lt;1&gt;</h1>"));
        let mut b = String::new();
        page_head(&mut b, "t", &[BASE_CSS], Script::Inline);
        assert!(b.contains("script-src 'unsafe-inline';"));
    }
}
