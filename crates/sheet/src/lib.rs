//! Printable sheets: one true-scale SVG per face of a target, so a user can print, measure and
//! assemble the target.
//!
//! The SVG's user unit is the millimetre (`width="Wmm"` with a `viewBox` of `W` units), whatever
//! the target file's unit, so a printer at 100 % scale reproduces every length. Each sheet
//! carries the target's name, the face id, where the face goes on the target, and a scale bar
//! with 10 mm ticks to verify the print with a ruler. The shapes are exactly those the renderer
//! draws ([`facetcal_model::Face::shapes`]).
//!
//! ```
//! let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/../../targets/checkerboard.json")).unwrap();
//! let target = facetcal_model::Target::from_json(&text).unwrap();
//! let svg = facetcal_sheet::face_svg(&target, &target.faces()[0]);
//! assert!(svg.starts_with("<?xml"));
//! ```
//!
//! This crate only writes text; it never touches files or images.
#![deny(missing_docs)]
// Library code never unwraps: input-derived failures are typed errors, and the few
// invariants that cannot fail say so with an allowed `expect` beside the reason.
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

use std::fmt::Write;

use facetcal_model::{Face, Ink, Shape, Target};

/// Blank border around the face on the printed page, millimetres.
pub const PAGE_MARGIN_MM: f64 = 15.0;
/// Height of the strip below the face that holds the caption and the scale bar, millimetres.
pub const CAPTION_MM: f64 = 30.0;

/// Escapes text for XML content and attribute values.
pub fn escape_xml(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for ch in s.chars() {
        match ch {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c if (c as u32) < 0x20 && c != '\n' && c != '\t' => {}
            c => out.push(c),
        }
    }
    out
}

fn fill(ink: Ink) -> &'static str {
    match ink {
        Ink::Dark => "#000",
        Ink::Light => "#fff",
    }
}

/// Page size of a face's sheet, millimetres (width, height).
pub fn page_size_mm(target: &Target, face: &Face) -> (f64, f64) {
    let s = target.unit().mm();
    let (w, h) = face.size();
    let width = (w * s + 2.0 * PAGE_MARGIN_MM).max(120.0);
    (width, h * s + 2.0 * PAGE_MARGIN_MM + CAPTION_MM)
}

/// The true-scale SVG of one face.
pub fn face_svg(target: &Target, face: &Face) -> String {
    let s = target.unit().mm();
    let (w, h) = face.size();
    let (pw, ph) = page_size_mm(target, face);
    let ox = 0.5 * (pw - w * s);
    let oy = PAGE_MARGIN_MM;
    let mut o = String::new();
    let _ = writeln!(o, r#"<?xml version="1.0" encoding="UTF-8"?>"#);
    let _ = writeln!(
        o,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{pw:.3}mm" height="{ph:.3}mm" viewBox="0 0 {pw:.3} {ph:.3}">"#
    );
    let _ = writeln!(o, "<title>{} - face {}</title>", escape_xml(target.name()), face.id());
    let _ = writeln!(o, r##"<rect x="0" y="0" width="{pw:.3}" height="{ph:.3}" fill="#fff"/>"##);
    let _ = writeln!(o, r#"<g id="face" transform="translate({ox:.4} {oy:.4}) scale({s})">"#);
    let _ = writeln!(
        o,
        r##"<rect class="ground" x="0" y="0" width="{w}" height="{h}" fill="{}" stroke="#999" stroke-width="{}"/>"##,
        fill(face.ground()),
        0.1 / s
    );
    for (shape, ink) in face.shapes() {
        match shape {
            Shape::Rect { x0, y0, x1, y1 } => {
                let _ = writeln!(
                    o,
                    r#"<rect class="{}" x="{x0}" y="{y0}" width="{}" height="{}" fill="{}"/>"#,
                    ink_class(ink),
                    x1 - x0,
                    y1 - y0,
                    fill(ink)
                );
            }
            Shape::Disc { centre, radius } => {
                let _ = writeln!(
                    o,
                    r#"<circle class="{}" cx="{}" cy="{}" r="{radius}" fill="{}"/>"#,
                    ink_class(ink),
                    centre.x,
                    centre.y,
                    fill(ink)
                );
            }
        }
    }
    let _ = writeln!(o, "</g>");
    // Caption and scale bar.
    let cy = oy + h * s + 8.0;
    let pose = face.pose();
    let axes = pose.matrix();
    let t = pose.translation;
    let _ = writeln!(
        o,
        r#"<text x="{ox:.3}" y="{cy:.3}" font-family="sans-serif" font-size="3.5">{} | face {} | print at 100 % scale, no fitting to the page</text>"#,
        escape_xml(target.name()),
        face.id()
    );
    let _ = writeln!(
        o,
        r#"<text x="{ox:.3}" y="{:.3}" font-family="sans-serif" font-size="2.8">face origin ({:.2}, {:.2}, {:.2}) {u}, x axis ({:.3}, {:.3}, {:.3}), y axis ({:.3}, {:.3}, {:.3}) in the target frame</text>"#,
        cy + 4.5,
        t.x,
        t.y,
        t.z,
        axes[(0, 0)],
        axes[(1, 0)],
        axes[(2, 0)],
        axes[(0, 1)],
        axes[(1, 1)],
        axes[(2, 1)],
        u = target.unit().name()
    );
    let bar = if pw - 2.0 * PAGE_MARGIN_MM >= 100.0 { 100.0 } else { 50.0 };
    let by = cy + 11.0;
    let _ = writeln!(
        o,
        r##"<g id="scale-bar" data-length-mm="{bar}"><rect x="{ox:.3}" y="{by:.3}" width="{bar}" height="1.5" fill="#000"/>"##
    );
    for k in 0..=(bar as usize / 10) {
        let x = ox + 10.0 * k as f64;
        let _ = writeln!(
            o,
            r##"<rect x="{:.3}" y="{:.3}" width="0.3" height="3.5" fill="#000"/>"##,
            x - 0.15,
            by - 1.0
        );
    }
    let _ = writeln!(
        o,
        r#"<text x="{ox:.3}" y="{:.3}" font-family="sans-serif" font-size="2.8">{bar} mm: measure this bar after printing; the sheet is usable only if it measures {bar} mm</text></g>"#,
        by + 7.0
    );
    let _ = writeln!(o, "</svg>");
    o
}

fn ink_class(ink: Ink) -> &'static str {
    match ink {
        Ink::Dark => "dark",
        Ink::Light => "light",
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_are_escaped() {
        assert_eq!(escape_xml(r#"a<b>&"c'"#), "a&lt;b&gt;&amp;&quot;c&#39;");
    }
}
