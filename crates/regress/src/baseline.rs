//! The baseline file (`"format": "facetcal-regress-baseline"`, version 1): the figures of an
//! accepted run with the tolerances a later run is held to, and the comparison.
//!
//! Runs are deterministic given the seeds, so the tolerances are not about run-to-run noise:
//! they let small, deliberate accuracy changes elsewhere (a faster renderer, a retuned matcher)
//! pass, while a real loss fails. A metric gets worse beyond its tolerance when, for error
//! figures, `now > base + relative |base| + absolute`, and for recall
//! `now < base - relative |base| - absolute`.

use std::collections::BTreeMap;
use std::fmt::Write;

use serde::{Deserialize, Serialize};

use crate::error::{RegressError, parse_json};
use crate::metrics::Metrics;
use crate::run::ScenarioResult;
use crate::suite::check_header;

/// The `format` value of a baseline file.
pub const BASELINE_FORMAT: &str = "facetcal-regress-baseline";
/// The baseline file version this program reads and writes.
pub const BASELINE_VERSION: u32 = 1;

/// How much a metric may get worse: `relative |base| + absolute`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Tolerance {
    /// Fraction of the baseline value.
    pub relative: f64,
    /// In the metric's unit.
    pub absolute: f64,
}

impl Tolerance {
    const fn new(relative: f64, absolute: f64) -> Tolerance {
        Tolerance { relative, absolute }
    }

    fn allowance(&self, base: f64) -> f64 {
        self.relative * base.abs() + self.absolute
    }
}

/// The tolerance of every compared metric. Time per image is never compared (speed is
/// measured by the benchmarks, not by this suite).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Tolerances {
    /// Recall may drop by 0.005 (half a percent: one feature in 200).
    pub recall: Tolerance,
    /// Wrong identifications may not increase.
    pub wrong: Tolerance,
    /// RMS error may grow by 20 % + 0.002 px.
    pub rms_px: Tolerance,
    /// Each axis's absolute bias may grow by 0.003 px (its sampling spread over a few hundred
    /// features is about RMS / sqrt(n), near 0.001 px).
    pub bias_px: Tolerance,
    /// 95th percentile may grow by 20 % + 0.003 px.
    pub p95_px: Tolerance,
    /// Largest error (one feature, so the most volatile) may grow by 50 % + 0.01 px.
    pub max_px: Tolerance,
    /// The ratio to the Cramer-Rao bound may grow by 20 % + 0.05.
    pub crb_ratio: Tolerance,
}

impl Default for Tolerances {
    fn default() -> Self {
        Tolerances {
            recall: Tolerance::new(0.0, 0.005),
            wrong: Tolerance::new(0.0, 0.0),
            rms_px: Tolerance::new(0.2, 0.002),
            bias_px: Tolerance::new(0.0, 0.003),
            p95_px: Tolerance::new(0.2, 0.003),
            max_px: Tolerance::new(0.5, 0.01),
            crb_ratio: Tolerance::new(0.2, 0.05),
        }
    }
}

impl Tolerances {
    fn check(&self) -> Result<(), RegressError> {
        let all = [
            ("recall", self.recall),
            ("wrong", self.wrong),
            ("rms_px", self.rms_px),
            ("bias_px", self.bias_px),
            ("p95_px", self.p95_px),
            ("max_px", self.max_px),
            ("crb_ratio", self.crb_ratio),
        ];
        for (name, t) in all {
            for (part, v) in [("relative", t.relative), ("absolute", t.absolute)] {
                if !(v.is_finite() && v >= 0.0) {
                    return Err(RegressError::field(
                        format!("tolerances.{name}.{part}"),
                        format!("must be a non-negative number, got {v}"),
                    ));
                }
            }
        }
        Ok(())
    }
}

/// A baseline file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BaselineFile {
    /// Always [`BASELINE_FORMAT`].
    pub format: String,
    /// Always [`BASELINE_VERSION`].
    pub version: u32,
    /// The suite's name.
    pub suite: String,
    /// The program that recorded it.
    pub program: String,
    /// The tolerances later runs are held to.
    pub tolerances: Tolerances,
    /// Figures per scenario name.
    pub scenarios: BTreeMap<String, Metrics>,
}

impl BaselineFile {
    /// A baseline of a run with the default tolerances.
    pub fn new(suite: &str, results: &[ScenarioResult]) -> BaselineFile {
        BaselineFile {
            format: BASELINE_FORMAT.into(),
            version: BASELINE_VERSION,
            suite: suite.into(),
            program: format!("facetcal {}", crate::cache::PROGRAM_VERSION),
            tolerances: Tolerances::default(),
            scenarios: results.iter().map(|r| (r.name.clone(), r.metrics.clone())).collect(),
        }
    }

    /// Parses and checks a baseline file's text; errors name the field.
    pub fn from_json(text: &str) -> Result<BaselineFile, RegressError> {
        check_header(text, BASELINE_FORMAT, BASELINE_VERSION)?;
        let b: BaselineFile = parse_json(text)?;
        b.tolerances.check()?;
        Ok(b)
    }

    /// Pretty JSON with a final newline.
    pub fn to_json(&self) -> String {
        let mut s = serde_json::to_string_pretty(self).unwrap_or_default();
        s.push('\n');
        s
    }
}

/// One compared figure.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Check {
    /// The scenario.
    pub scenario: String,
    /// The metric's name (as in the result file).
    pub metric: String,
    /// Baseline value (`None`: the baseline had none).
    pub baseline: Option<f64>,
    /// This run's value.
    pub now: Option<f64>,
    /// The worst value allowed.
    pub limit: Option<f64>,
    /// Within tolerance.
    pub ok: bool,
}

/// A run compared with a baseline.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Comparison {
    /// Every compared figure.
    pub checks: Vec<Check>,
    /// Scenarios of the run that the baseline does not have (a failure: record a baseline).
    pub not_in_baseline: Vec<String>,
}

impl Comparison {
    /// The figures that got worse beyond their tolerance.
    pub fn failures(&self) -> impl Iterator<Item = &Check> {
        self.checks.iter().filter(|c| !c.ok)
    }

    /// Whether the run passes.
    pub fn passed(&self) -> bool {
        self.failures().next().is_none() && self.not_in_baseline.is_empty()
    }

    /// A plain-text table of the failures (or every check with `all`), for a terminal.
    pub fn table(&self, all: bool) -> String {
        let rows: Vec<&Check> = self.checks.iter().filter(|c| all || !c.ok).collect();
        let mut o = String::new();
        let w = rows.iter().map(|c| c.scenario.len()).max().unwrap_or(8).max(8);
        let _ = writeln!(
            o,
            "{:<w$}  {:<11}  {:>10}  {:>10}  {:>10}  verdict",
            "scenario", "metric", "baseline", "now", "limit"
        );
        let f = |v: Option<f64>| v.map_or("none".to_string(), |v| format!("{v:.4}"));
        for c in rows {
            let _ = writeln!(
                o,
                "{:<w$}  {:<11}  {:>10}  {:>10}  {:>10}  {}",
                c.scenario,
                c.metric,
                f(c.baseline),
                f(c.now),
                f(c.limit),
                if c.ok { "ok" } else { "WORSE" }
            );
        }
        for n in &self.not_in_baseline {
            let _ = writeln!(o, "{n:<w$}  (no baseline: record one with --write-baseline)");
        }
        o
    }
}

/// Compares a run with a baseline, scenario by scenario (scenarios of the baseline that the run
/// did not select are not compared).
pub fn compare(baseline: &BaselineFile, results: &[ScenarioResult]) -> Comparison {
    let t = &baseline.tolerances;
    let mut out = Comparison::default();
    for r in results {
        let Some(b) = baseline.scenarios.get(&r.name) else {
            out.not_in_baseline.push(r.name.clone());
            continue;
        };
        let m = &r.metrics;
        let mut push = |metric: &str,
                        base: Option<f64>,
                        now: Option<f64>,
                        tol: Tolerance,
                        lower_is_worse: bool| {
            let limit = base
                .map(|b| if lower_is_worse { b - tol.allowance(b) } else { b + tol.allowance(b) });
            let ok = match (limit, now) {
                (None, _) => true,
                (Some(_), None) => false,
                (Some(l), Some(n)) => {
                    if lower_is_worse {
                        n >= l - 1e-12
                    } else {
                        n <= l + 1e-12
                    }
                }
            };
            out.checks.push(Check {
                scenario: r.name.clone(),
                metric: metric.into(),
                baseline: base,
                now,
                limit,
                ok,
            });
        };
        push("recall", Some(b.recall), Some(m.recall), t.recall, true);
        push("wrong", Some(b.wrong as f64), Some(m.wrong as f64), t.wrong, false);
        push("rms_px", b.rms_px, m.rms_px, t.rms_px, false);
        push(
            "bias_x_px",
            b.bias_px.map(|v| v[0].abs()),
            m.bias_px.map(|v| v[0].abs()),
            t.bias_px,
            false,
        );
        push(
            "bias_y_px",
            b.bias_px.map(|v| v[1].abs()),
            m.bias_px.map(|v| v[1].abs()),
            t.bias_px,
            false,
        );
        push("p95_px", b.p95_px, m.p95_px, t.p95_px, false);
        push("max_px", b.max_px, m.max_px, t.max_px, false);
        push("crb_ratio", b.crb_ratio, m.crb_ratio, t.crb_ratio, false);
    }
    out
}
