//! `facetcal regress SUITE.json`: the detector accuracy regression suite. Writes
//! `result.json` (format `facetcal-regress-result`) and `regress.html` to `--out`; with
//! `--baseline` exits with the bad-data code (65) when a figure got worse beyond its
//! tolerance, after printing a table of those figures.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context;
use clap::Args;
use facetcal_regress::{
    BaselineFile, Cache, DetectorOverrides, RegressError, ResultFile, RunOptions, Suite, compare,
    result_html, run_suite,
};

use crate::{exit, output};

#[derive(Args, Debug)]
pub struct RegressArgs {
    /// The suite file (format facetcal-regress-suite).
    suite: PathBuf,
    /// Compare with this baseline; figures worse than its tolerances fail the run (exit 65).
    #[arg(long)]
    baseline: Option<PathBuf>,
    /// Record this run as a new baseline file.
    #[arg(long)]
    write_baseline: Option<PathBuf>,
    /// Output folder: result.json and regress.html.
    #[arg(long, default_value = "regress-out")]
    out: PathBuf,
    /// Render cache folder. Default: OUT/cache.
    #[arg(long)]
    cache: Option<PathBuf>,
    /// Only the scenarios marked quick (the subset CI runs).
    #[arg(long)]
    quick: bool,
    /// Only this scenario (repeatable).
    #[arg(long = "only", value_name = "NAME")]
    only: Vec<String>,
    /// Replace a detector setting for every scenario, NAME=VALUE (repeatable), for example
    /// refine_sigma=0.8.
    #[arg(long = "detector", value_name = "NAME=VALUE")]
    detector: Vec<String>,
    /// Replace outputs that already exist.
    #[arg(long)]
    force: bool,
}

/// Bad suites, baselines and settings are bad data; unreadable files are missing input.
fn fail(what: String, e: RegressError) -> anyhow::Error {
    let code = match &e {
        RegressError::Io { action: "cannot read", source, .. }
            if matches!(
                source.kind(),
                std::io::ErrorKind::NotFound | std::io::ErrorKind::PermissionDenied
            ) =>
        {
            exit::NO_INPUT
        }
        RegressError::Input(i) => exit::input_code(i),
        RegressError::Io { .. } | RegressError::CacheConflict { .. } => exit::CANT_CREATE,
        _ => exit::DATA,
    };
    exit::coded(code, format!("{what}: {}", exit::chain(&anyhow::Error::new(e))))
}

pub fn run(args: RegressArgs) -> anyhow::Result<ExitCode> {
    let mut detector = DetectorOverrides::default();
    for item in &args.detector {
        let (name, value) = item.split_once('=').ok_or_else(|| {
            exit::coded(exit::USAGE, format!("--detector {item}: expected NAME=VALUE"))
        })?;
        detector
            .set(name.trim(), value)
            .map_err(|e| exit::coded(exit::USAGE, format!("--detector {e}")))?;
    }
    let suite = Suite::load(&args.suite)
        .map_err(|e| fail(format!("suite file {}", args.suite.display()), e))?;
    let baseline = match &args.baseline {
        Some(p) => {
            let text = facetcal_inputs::read_json_text(p)
                .with_context(|| format!("baseline file {}", p.display()))?;
            Some(
                BaselineFile::from_json(&text)
                    .map_err(|e| fail(format!("baseline file {}", p.display()), e))?,
            )
        }
        None => None,
    };
    let opts = RunOptions { quick: args.quick, only: args.only.clone(), detector };
    let result_path = args.out.join("result.json");
    let html_path = args.out.join("regress.html");
    for p in [&result_path, &html_path].into_iter().chain(args.write_baseline.as_ref()) {
        if !args.force && p.exists() {
            return Err(exit::coded(
                exit::CANT_CREATE,
                format!("{} already exists (use --force to replace it)", p.display()),
            ));
        }
    }
    output::create_dir(&args.out)?;
    let cache_dir = args.cache.clone().unwrap_or_else(|| args.out.join("cache"));
    let cache = Cache::open(&cache_dir).map_err(|e| fail("render cache".into(), e))?;
    let results = run_suite(&suite, &opts, &cache, |r| {
        let m = &r.metrics;
        eprintln!(
            "{}: {} views, recall {:.4}, wrong {}, RMS {}",
            r.name,
            m.views,
            m.recall,
            m.wrong,
            m.rms_px.map_or("-".into(), |v| format!("{v:.4} px"))
        );
    })
    .map_err(|e| fail(format!("suite {}", args.suite.display()), e))?;
    let comparison = baseline.as_ref().map(|b| compare(b, &results));
    let file = ResultFile::new(&suite.name, args.quick, opts.detector.clone(), results, comparison);
    output::write_new(&result_path, file.to_json().as_bytes(), args.force)?;
    output::write_new(&html_path, result_html(&file).as_bytes(), args.force)?;
    if let Some(p) = &args.write_baseline {
        let b = BaselineFile::new(&suite.name, &file.scenarios);
        output::write_new(p, b.to_json().as_bytes(), args.force)?;
        println!("baseline of {} scenarios -> {}", b.scenarios.len(), p.display());
    }
    print!("{}", file.summary());
    println!("-> {} and {}", result_path.display(), html_path.display());
    match &file.comparison {
        Some(c) if !c.passed() => {
            println!(
                "REGRESSION: {} figures worse than the baseline's tolerance",
                c.failures().count() + c.not_in_baseline.len()
            );
            print!("{}", c.table(false));
            Ok(ExitCode::from(exit::DATA))
        }
        Some(c) => {
            println!("all {} compared figures within the baseline's tolerance", c.checks.len());
            Ok(ExitCode::from(exit::OK))
        }
        None => Ok(ExitCode::from(exit::OK)),
    }
}
