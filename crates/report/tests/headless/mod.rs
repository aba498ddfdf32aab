//! Loading a page in headless Chromium and reading what its load handler recorded: the
//! `data-drawn="WxH:N"` of every plot (see `facetcal_report::page::drawn_size_script`). Shared by
//! the report's browser test and the regression page's test (included there by `#[path]`), so
//! it uses nothing but the standard library.

use std::path::{Path, PathBuf};
use std::process::Command;

fn chromium() -> Option<PathBuf> {
    ["/usr/bin/chromium", "/usr/bin/chromium-browser"]
        .iter()
        .map(PathBuf::from)
        .find(|p| p.exists())
}

/// The plots' drawn width, height and counted elements in document order, after the page's
/// load handler ran; `None` when no Chromium is installed. `profile` is a scratch folder.
pub fn rendered_plots(page: &Path, profile: &Path) -> Option<Vec<(u32, u32, u32)>> {
    let browser = chromium()?;
    let out = Command::new(browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--virtual-time-budget=3000",
        ])
        .arg(format!("--user-data-dir={}", profile.display()))
        .arg("--dump-dom")
        .arg(format!("file://{}", page.display()))
        .output()
        .unwrap();
    let dom = String::from_utf8_lossy(&out.stdout);
    assert!(
        dom.contains("data-ready=\"yes\""),
        "page did not finish loading: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let mut plots = Vec::new();
    for (i, _) in dom.match_indices("data-drawn=\"") {
        let d = &dom[i + 12..];
        let d = &d[..d.find('"').unwrap()];
        let (size, count) = d.split_once(':').unwrap();
        let (w, h) = size.split_once('x').unwrap();
        plots.push((w.parse().unwrap(), h.parse().unwrap(), count.parse().unwrap()));
    }
    Some(plots)
}

/// Without Chromium a browser check is skipped outside CI and fails in CI, where `.ci/run`
/// installs it.
pub fn no_chromium(what: &str) {
    if std::env::var_os("CI").is_some_and(|v| !v.is_empty() && v != "false") {
        panic!("chromium is not installed: .ci/run must install it");
    }
    eprintln!("SKIPPED: chromium not found, so {what} was not rendered in a browser");
}
