//! Loading a page in headless Chromium and reading what its load handler recorded (see
//! `facetcal_report::page::drawn_size_script`): every plot's `data-drawn="WxH:N"` and
//! `data-check="A:L:S:O"`, and the page's width and overflowing text blocks; and taking a
//! screenshot. Shared by the report's browser test and the end-to-end tests (included there by
//! `#[path]`), so it uses nothing but the standard library.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

/// The window the pages are laid out in: the width a reader's laptop gives them.
pub const WINDOW_W: u32 = 1400;

fn chromium() -> Option<PathBuf> {
    ["/usr/bin/chromium", "/usr/bin/chromium-browser"]
        .iter()
        .map(PathBuf::from)
        .find(|p| p.exists())
}

fn browser(profile: &Path, height: u32) -> Option<Command> {
    let mut c = Command::new(chromium()?);
    c.args([
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--hide-scrollbars",
        "--virtual-time-budget=3000",
    ])
    .arg(format!("--window-size={WINDOW_W},{height}"))
    .arg(format!("--user-data-dir={}", profile.display()));
    Some(c)
}

/// What the load handler recorded of one plot.
#[derive(Clone, Debug)]
pub struct PlotFacts {
    /// Its accessible name (`aria-label`).
    pub label: String,
    pub width: u32,
    pub height: u32,
    /// Elements matching the page's counted selector.
    pub count: u32,
    /// Axis labels that name a unit.
    pub axes_with_units: u32,
    pub legend_entries: u32,
    pub series: u32,
    /// Text elements drawn outside the plot's box.
    pub text_outside: u32,
}

/// What the load handler recorded of the page.
#[derive(Clone, Debug)]
pub struct PageFacts {
    pub plots: Vec<PlotFacts>,
    /// The page's scroll width in a window of [`WINDOW_W`].
    pub width: u32,
    /// Text blocks (cells, paragraphs, list items, captions) wider than their box.
    pub overflowing: u32,
}

fn attr<'a>(tag: &'a str, name: &str) -> Option<&'a str> {
    let key = format!(" {name}=\"");
    let i = tag.find(&key)? + key.len();
    let rest = &tag[i..];
    Some(&rest[..rest.find('"')?])
}

/// Loads `page` and reads the facts its load handler recorded; `None` when no Chromium is
/// installed. `profile` is a scratch folder.
pub fn page_facts(page: &Path, profile: &Path) -> Option<PageFacts> {
    let out = browser(profile, 1000)?
        .arg("--dump-dom")
        .arg(format!("file://{}", page.display()))
        .output()
        .unwrap();
    let dom = String::from_utf8_lossy(&out.stdout);
    let body = dom.find("<body").map(|i| &dom[i..dom[i..].find('>').unwrap() + i]);
    let body = body.unwrap_or("");
    assert!(
        attr(body, "data-ready") == Some("yes"),
        "page did not finish loading: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let mut plots = Vec::new();
    for (i, _) in dom.match_indices("<svg class=\"plot\"") {
        let tag = &dom[i..i + dom[i..].find('>').unwrap()];
        let drawn = attr(tag, "data-drawn").expect("every plot records data-drawn");
        let (size, count) = drawn.split_once(':').unwrap();
        let (w, h) = size.split_once('x').unwrap();
        let check: Vec<u32> = attr(tag, "data-check")
            .expect("every plot records data-check")
            .split(':')
            .map(|v| v.parse().unwrap())
            .collect();
        plots.push(PlotFacts {
            label: attr(tag, "aria-label").unwrap_or("").to_string(),
            width: w.parse().unwrap(),
            height: h.parse().unwrap(),
            count: count.parse().unwrap(),
            axes_with_units: check[0],
            legend_entries: check[1],
            series: check[2],
            text_outside: check[3],
        });
    }
    Some(PageFacts {
        plots,
        width: attr(body, "data-width").unwrap().parse().unwrap(),
        overflowing: attr(body, "data-overflow").unwrap().parse().unwrap(),
    })
}

/// The plots' drawn width, height and counted elements in document order.
pub fn rendered_plots(page: &Path, profile: &Path) -> Option<Vec<(u32, u32, u32)>> {
    let facts = page_facts(page, profile)?;
    Some(facts.plots.iter().map(|p| (p.width, p.height, p.count)).collect())
}

/// Every plot names both axes' units, has a legend when it draws more than one series and
/// keeps its text inside its box; the page fits the window and no text block overflows.
pub fn assert_readable(facts: &PageFacts, what: &str) {
    for p in &facts.plots {
        assert!(p.axes_with_units >= 2, "{what}: plot '{}' lacks axis units: {p:?}", p.label);
        assert!(
            p.series <= 1 || p.legend_entries >= p.series.min(2),
            "{what}: plot '{}' draws {} series without a legend",
            p.label,
            p.series
        );
        assert_eq!(p.text_outside, 0, "{what}: plot '{}' has text outside its box", p.label);
    }
    assert!(facts.width <= WINDOW_W, "{what}: page is {} px wide", facts.width);
    assert_eq!(facts.overflowing, 0, "{what}: text blocks overflow their box");
}

/// Takes a full-page screenshot of `page` into `png` (height `height` px) and returns the
/// image's width and height from its header; `None` without Chromium.
pub fn screenshot(page: &Path, profile: &Path, png: &Path, height: u32) -> Option<(u32, u32)> {
    let out = browser(profile, height)?
        .arg(format!("--screenshot={}", png.display()))
        .arg(format!("file://{}", page.display()))
        .output()
        .unwrap();
    let bytes = std::fs::read(png).unwrap_or_else(|_| {
        panic!("no screenshot written: {}", String::from_utf8_lossy(&out.stderr))
    });
    assert_eq!(&bytes[1..4], b"PNG", "screenshot is a PNG");
    let be = |i: usize| u32::from_be_bytes([bytes[i], bytes[i + 1], bytes[i + 2], bytes[i + 3]]);
    Some((be(16), be(20)))
}

/// Where screenshots are kept for a person to look at after a test run.
pub fn screenshot_dir() -> PathBuf {
    let d = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("screenshots");
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Without Chromium a browser check is skipped outside CI and fails in CI, where `.ci/run`
/// installs it.
pub fn no_chromium(what: &str) {
    if std::env::var_os("CI").is_some_and(|v| !v.is_empty() && v != "false") {
        panic!("chromium is not installed: .ci/run must install it");
    }
    eprintln!("SKIPPED: chromium not found, so {what} was not rendered in a browser");
}
