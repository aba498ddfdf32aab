//! The shape of the library code: no function longer than about 120 lines except the ones
//! listed in the contributor guide, and that list stays true (each entry is still long).

use std::path::{Path, PathBuf};

use crate::util::root;

/// Longest function, lines from its `fn` line to its closing brace (STYLE.md: "a screen or two").
const MAX_LINES: usize = 120;

/// Functions known to be longer, each named in DEVELOPERS.md ("Long functions"): (file, name).
const EXCEPTIONS: &[(&str, &str)] = &[
    ("crates/solver/src/solve.rs", "calibrate"),
    ("crates/matcher/src/lib.rs", "identify_kind"),
    ("crates/matcher/src/synthetic.rs", "synthesize"),
    ("crates/detector/src/blobs.rs", "measure_square"),
    ("crates/render/src/raster.rs", "optical_image"),
    ("crates/regress/src/html.rs", "result_html"),
    ("crates/watch/src/lib.rs", "run"),
    ("crates/matcher/src/place.rs", "place"),
];

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    let mut entries: Vec<PathBuf> =
        std::fs::read_dir(dir).unwrap().map(|e| e.unwrap().path()).collect();
    entries.sort();
    for p in entries {
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|e| e == "rs") {
            out.push(p);
        }
    }
}

/// The name after `fn ` when `line` opens a function item.
fn fn_name(line: &str) -> Option<&str> {
    let mut rest = line.trim_start();
    for prefix in ["pub(crate) ", "pub(super) ", "pub ", "const ", "unsafe "] {
        rest = rest.strip_prefix(prefix).unwrap_or(rest);
    }
    let rest = rest.strip_prefix("fn ")?;
    let end = rest.find(|c: char| !(c.is_ascii_alphanumeric() || c == '_'))?;
    Some(&rest[..end])
}

/// (name, lines) of every function in `text` before its `#[cfg(test)]` module, measured from
/// the `fn` line to the first line that is the same indentation followed by `}`. rustfmt lays
/// out every item so, which is what makes a line count without a parser exact.
fn function_lengths(text: &str) -> Vec<(String, usize)> {
    let lines: Vec<&str> = text.lines().take_while(|l| !l.starts_with("#[cfg(test)]")).collect();
    let mut out = Vec::new();
    let mut i = 0;
    while i < lines.len() {
        let Some(name) = fn_name(lines[i]) else {
            i += 1;
            continue;
        };
        if lines[i].trim_end().ends_with(';') {
            i += 1;
            continue;
        }
        let indent = &lines[i][..lines[i].len() - lines[i].trim_start().len()];
        let close = format!("{indent}}}");
        match (i..lines.len()).find(|&j| lines[j] == close) {
            Some(j) => {
                out.push((name.to_string(), j - i + 1));
                i = j + 1;
            }
            None => i += 1,
        }
    }
    out
}

#[test]
fn line_counter_measures_a_function_from_fn_to_its_brace() {
    let text = "/// doc\npub fn a(x: u32) -> u32 {\n    x + 1\n}\n\nimpl T {\n    fn b(&self) {\n        let c = || {\n        };\n    }\n}\n#[cfg(test)]\nfn t() {\n}\n";
    assert_eq!(function_lengths(text), [("a".to_string(), 3), ("b".to_string(), 4)]);
}

#[test]
fn no_library_function_is_longer_than_the_limit_but_the_listed_ones() {
    let root = root();
    let mut files = Vec::new();
    rust_files(&root.join("crates"), &mut files);
    let mut long = Vec::new();
    for f in files.iter().filter(|f| !f.components().any(|c| c.as_os_str() == "tests")) {
        let rel = f.strip_prefix(&root).unwrap().to_string_lossy().replace('\\', "/");
        for (name, n) in function_lengths(&std::fs::read_to_string(f).unwrap()) {
            if n > MAX_LINES {
                long.push((rel.clone(), name, n));
            }
        }
    }
    let unlisted: Vec<_> = long
        .iter()
        .filter(|(f, name, _)| !EXCEPTIONS.contains(&(f.as_str(), name.as_str())))
        .collect();
    assert!(unlisted.is_empty(), "over {MAX_LINES} lines: {unlisted:?}; split them");
    let guide = std::fs::read_to_string(root.join("DEVELOPERS.md")).unwrap();
    for &(file, name) in EXCEPTIONS {
        assert!(
            long.iter().any(|(f, n, _)| f == file && n == name),
            "{file} {name} is no longer over {MAX_LINES} lines: take it off EXCEPTIONS and the guide"
        );
        assert!(guide.contains(&format!("`{name}`")), "the guide names long function {name}");
    }
}
