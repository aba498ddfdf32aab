//! The result file (`"format": "facetcal-regress-result"`, version 1): every scenario's
//! figures, conditions and per-view figures, and the comparison with a baseline when one was
//! given.

use serde::{Deserialize, Serialize};

use crate::baseline::Comparison;
use crate::error::{RegressError, parse_json};
use crate::run::ScenarioResult;
use crate::suite::{DetectorOverrides, check_header};

/// The `format` value of a result file.
pub const RESULT_FORMAT: &str = "facetcal-regress-result";
/// The result file version this program writes.
pub const RESULT_VERSION: u32 = 1;

/// A run's result.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ResultFile {
    /// Always [`RESULT_FORMAT`].
    pub format: String,
    /// Always [`RESULT_VERSION`].
    pub version: u32,
    /// The suite's name.
    pub suite: String,
    /// The program that ran it.
    pub program: String,
    /// Only the quick subset ran.
    pub quick: bool,
    /// Detector settings given for the whole run (empty normally).
    pub detector: DetectorOverrides,
    /// The scenarios, in suite order.
    pub scenarios: Vec<ScenarioResult>,
    /// The comparison with a baseline, when one was given.
    pub comparison: Option<Comparison>,
}

impl ResultFile {
    /// A result of a run.
    pub fn new(
        suite: &str,
        quick: bool,
        detector: DetectorOverrides,
        scenarios: Vec<ScenarioResult>,
        comparison: Option<Comparison>,
    ) -> ResultFile {
        ResultFile {
            format: RESULT_FORMAT.into(),
            version: RESULT_VERSION,
            suite: suite.into(),
            program: format!("facetcal {}", crate::cache::PROGRAM_VERSION),
            quick,
            detector,
            scenarios,
            comparison,
        }
    }

    /// Parses a result file's text; errors name the field.
    pub fn from_json(text: &str) -> Result<ResultFile, RegressError> {
        check_header(text, RESULT_FORMAT, RESULT_VERSION)?;
        parse_json(text)
    }

    /// Pretty JSON with a final newline.
    pub fn to_json(&self) -> String {
        let mut s = serde_json::to_string_pretty(self).unwrap_or_default();
        s.push('\n');
        s
    }

    /// A plain-text summary table, one line per scenario, for a terminal.
    pub fn summary(&self) -> String {
        use std::fmt::Write;
        let w = self.scenarios.iter().map(|s| s.name.len()).max().unwrap_or(8).max(8);
        let mut o = String::new();
        let _ = writeln!(
            o,
            "{:<w$}  {:>5}  {:>7}  {:>5}  {:>7}  {:>7}  {:>7}  {:>6}  {:>8}",
            "scenario",
            "views",
            "recall",
            "wrong",
            "rms_px",
            "p95_px",
            "max_px",
            "crb_x",
            "ms/image"
        );
        let f = |v: Option<f64>, p: usize| v.map_or("-".to_string(), |v| format!("{v:.p$}"));
        for s in &self.scenarios {
            let m = &s.metrics;
            let _ = writeln!(
                o,
                "{:<w$}  {:>5}  {:>7.4}  {:>5}  {:>7}  {:>7}  {:>7}  {:>6}  {:>8.1}",
                s.name,
                m.views,
                m.recall,
                m.wrong,
                f(m.rms_px, 4),
                f(m.p95_px, 4),
                f(m.max_px, 4),
                f(m.crb_ratio, 2),
                m.ms_per_image
            );
        }
        o
    }
}
