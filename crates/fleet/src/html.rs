//! `fleet.html`: one self-contained page (no script, no network): the counts, a table of the
//! cameras sorted by verdict (failed first) then id, and an inline SVG histogram of each
//! compared parameter across the calibrated cameras. Every id and sentence is escaped.

use std::fmt::Write;

use facetcal_report::page::{Script, page_head, svg_open};
use facetcal_sheet::escape_xml;

use crate::verdict::num;
use crate::{CameraStatus, FleetFile, ParameterStats};

/// Bars of each histogram.
const BINS: usize = 12;

fn histogram(stats: &ParameterStats, values: &[f64]) -> String {
    let (w, h, pad) = (320.0, 150.0, 24.0);
    let (lo, hi) = (stats.min, stats.max);
    let width = if hi > lo { hi - lo } else { 1.0 };
    let mut bins = [0usize; BINS];
    for v in values {
        let b = (((v - lo) / width) * BINS as f64).floor();
        bins[(b.max(0.0) as usize).min(BINS - 1)] += 1;
    }
    let top = bins.iter().copied().max().unwrap_or(1).max(1) as f64;
    let bar_w = (w - 2.0 * pad) / BINS as f64;
    let mut s = String::new();
    s.push_str("<figure>");
    svg_open(&mut s, &format!("histogram of {}", stats.name), w, h);
    for (i, &n) in bins.iter().enumerate() {
        let bh = (h - 2.0 * pad) * n as f64 / top;
        let _ = write!(
            s,
            r##"<rect x="{:.1}" y="{:.1}" width="{:.1}" height="{:.1}" fill="#5a7fa8"><title>{n}</title></rect>"##,
            pad + i as f64 * bar_w + 1.0,
            h - pad - bh,
            (bar_w - 2.0).max(1.0),
            bh
        );
    }
    let mx = pad + (stats.median - lo) / width * (w - 2.0 * pad);
    let _ = write!(
        s,
        r##"<line x1="{mx:.1}" y1="{:.1}" x2="{mx:.1}" y2="{:.1}" stroke="#b03a2e" stroke-width="1.5"/>"##,
        pad * 0.5,
        h - pad
    );
    let _ = write!(
        s,
        r#"<text x="{pad}" y="{:.1}" font-size="11">{}</text><text x="{:.1}" y="{:.1}" font-size="11" text-anchor="end">{}</text></svg>"#,
        h - 6.0,
        escape_xml(&num(lo)),
        w - pad,
        h - 6.0,
        escape_xml(&num(hi))
    );
    let _ = write!(
        s,
        "<figcaption>{}: median {}, spread {}, {} cameras, {} outliers</figcaption></figure>",
        escape_xml(&stats.name),
        escape_xml(&num(stats.median)),
        escape_xml(&num(stats.spread)),
        stats.count,
        stats.outliers.len()
    );
    s
}

/// The fleet page's style rules: compact tables, failed rows shaded, histograms side by side.
const FLEET_CSS: &str = "body{font-family:sans-serif;margin:1.5em;color:#222}table{border-collapse:collapse}\
td,th{border:1px solid #bbb;padding:2px 6px;text-align:left;vertical-align:top}\
td.n{text-align:right;font-variant-numeric:tabular-nums}tr.bad td{background:#fbe9e7}\
figure{display:inline-block;margin:0 1em 1em 0}figcaption{font-size:0.85em}\n";

/// The page for a fleet file, titled `title`.
pub fn fleet_html(title: &str, fleet: &FleetFile) -> String {
    let mut s = String::new();
    page_head(&mut s, title, &[FLEET_CSS], Script::None);
    let c = &fleet.counts;
    let _ = write!(
        s,
        "<p>{} cameras: {} passed, {} failed a check, {} not calibrated. Target file {} (SHA-256 {}).</p>",
        c.cameras,
        c.passed,
        c.failed,
        c.not_calibrated,
        escape_xml(&fleet.header.target_file.path),
        escape_xml(&fleet.header.target_file.sha256)
    );
    s.push_str(
        "<p><strong>Caution:</strong> validate every calibration yourself before using it where \
an error can hurt someone. Outliers are flagged against the fleet's own spread (more than 3.5 \
robust deviations from the median); they are a hint for a person, not a verdict.</p>",
    );
    s.push_str("<h2>Parameters across the fleet</h2><div>");
    for st in &fleet.statistics {
        let values: Vec<f64> = fleet
            .cameras
            .iter()
            .filter_map(|c| c.values.as_ref()?.get(&st.name))
            .filter(|v| v.is_finite())
            .collect();
        s.push_str(&histogram(st, &values));
    }
    s.push_str(
        "</div><h2>Cameras</h2><table><thead><tr><th>camera</th><th>verdict</th>\
<th>fx</th><th>fy</th><th>cx</th><th>cy</th><th>k1</th><th>RMS px</th><th>points</th>\
<th>coverage</th><th>images</th><th>outliers</th><th>reasons</th></tr></thead><tbody>",
    );
    let mut rows: Vec<_> = fleet.cameras.iter().collect();
    rows.sort_by(|a, b| (a.status, &a.id).cmp(&(b.status, &b.id)));
    for cam in rows {
        let class = if cam.status == CameraStatus::Passed { "" } else { " class=\"bad\"" };
        let id = match &cam.result {
            Some(r) => {
                let report = r.strip_suffix("calibration.json").map(|p| format!("{p}report.html"));
                format!(
                    "<a href=\"{}\">{}</a>",
                    escape_xml(&report.unwrap_or_else(|| r.clone())),
                    escape_xml(&cam.id)
                )
            }
            None => escape_xml(&cam.id),
        };
        let _ = write!(s, "<tr{class}><td>{id}</td><td>{}</td>", cam.status.name());
        match &cam.values {
            Some(v) => {
                for x in [v.fx, v.fy, v.cx, v.cy, v.k1, v.rms_px] {
                    let _ = write!(s, "<td class=\"n\">{}</td>", escape_xml(&num(x)));
                }
                let _ = write!(
                    s,
                    "<td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{} / {}</td>",
                    v.points,
                    escape_xml(&num(v.coverage)),
                    v.images_used,
                    v.images
                );
            }
            None => s.push_str(&"<td></td>".repeat(9)),
        }
        let _ = write!(
            s,
            "<td>{}</td><td>{}</td></tr>",
            escape_xml(&cam.outliers.join(" ")),
            cam.reasons.iter().map(|r| escape_xml(r)).collect::<Vec<_>>().join("<br>")
        );
    }
    s.push_str("</tbody></table></body></html>\n");
    s
}
