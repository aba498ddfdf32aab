//! The fleet summary file (format `facetcal-fleet`, version 1) with its CSV form, and the merge
//! of shard outputs into the summary a single run would have written.

use std::collections::BTreeSet;

use facetcal_model::ModelError;
use facetcal_model::files::{InputRecord, parse_with_path};
use serde::{Deserialize, Serialize};

use crate::spec::check_header;
use crate::stats::{PARAMETERS, ParameterStats, parameter_stats};
use crate::{CameraEntry, CameraStatus, FleetError, FleetSpec, Shard};

/// The fleet file's `format`.
pub const FLEET_FORMAT: &str = "facetcal-fleet";
/// The fleet file version this crate reads and writes.
pub const FLEET_VERSION: u32 = 1;

/// What every camera of one fleet run shares.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FleetHeader {
    /// The program that wrote the file (`facetcal 0.1.0`).
    pub program: String,
    /// The target file and its SHA-256.
    pub target_file: InputRecord,
    /// SHA-256 of the calibration options as the program spells them: equal options of one
    /// program version give equal digests, so shards run with other options are refused.
    pub settings_sha256: String,
    /// The spec the cameras were judged against, when one was given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub spec: Option<FleetSpec>,
    /// The shard this output covers (`K/N`); absent for a whole fleet.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub shard: Option<String>,
}

/// Counts of cameras by verdict.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Counts {
    /// Every camera.
    pub cameras: usize,
    /// Cameras that passed.
    pub passed: usize,
    /// Cameras calibrated that failed a check.
    pub failed: usize,
    /// Cameras without a calibration.
    pub not_calibrated: usize,
}

/// The fleet summary.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FleetFile {
    /// Always [`FLEET_FORMAT`].
    pub format: String,
    /// Always [`FLEET_VERSION`].
    pub version: u32,
    /// What the cameras share.
    #[serde(flatten)]
    pub header: FleetHeader,
    /// Cameras by verdict.
    pub counts: Counts,
    /// Per parameter over the calibrated cameras, in the order fx, fy, cx, cy, k1, rms_px.
    pub statistics: Vec<ParameterStats>,
    /// Every camera, sorted by id.
    pub cameras: Vec<CameraEntry>,
}

impl FleetFile {
    /// The summary of `cameras`: sorted by id, statistics over the calibrated ones, each
    /// camera's outlier flags filled in. The result does not depend on the order of `cameras`.
    pub fn assemble(header: FleetHeader, mut cameras: Vec<CameraEntry>) -> FleetFile {
        cameras.sort_by(|a, b| a.id.cmp(&b.id));
        let mut statistics = Vec::new();
        for name in PARAMETERS {
            let values: Vec<(String, f64)> = cameras
                .iter()
                .filter_map(|c| Some((c.id.clone(), c.values.as_ref()?.get(name)?)))
                .collect();
            if let Some(s) = parameter_stats(name, &values) {
                statistics.push(s);
            }
        }
        for c in &mut cameras {
            c.outliers = statistics
                .iter()
                .filter(|s| s.outliers.binary_search(&c.id).is_ok())
                .map(|s| s.name.clone())
                .collect();
        }
        let count = |s: CameraStatus| cameras.iter().filter(|c| c.status == s).count();
        let counts = Counts {
            cameras: cameras.len(),
            passed: count(CameraStatus::Passed),
            failed: count(CameraStatus::Failed),
            not_calibrated: count(CameraStatus::NotCalibrated),
        };
        FleetFile {
            format: FLEET_FORMAT.into(),
            version: FLEET_VERSION,
            header,
            counts,
            statistics,
            cameras,
        }
    }

    /// Parses a fleet file; an error names the bad field.
    pub fn from_json(text: &str) -> Result<FleetFile, FleetError> {
        check_header(text, FLEET_FORMAT, FLEET_VERSION)?;
        Ok(parse_with_path(text)?)
    }

    /// The file's text, pretty-printed. Refuses a non-finite number, naming the field.
    pub fn to_json(&self) -> Result<String, FleetError> {
        let value = serde_json::to_value(self).map_err(|e| ModelError::Parse(e.to_string()))?;
        if let Some(path) = facetcal_model::files::first_null_path(&value) {
            return Err(ModelError::field(path, "is not a finite number").into());
        }
        Ok(serde_json::to_string_pretty(&value).map_err(|e| ModelError::Parse(e.to_string()))?)
    }

    /// One row per camera, sorted by id, with a header row; fields quoted as RFC 4180 says
    /// (a field holding a comma, a double quote or a line break is enclosed in double quotes,
    /// its double quotes doubled); lines end in CRLF as RFC 4180 specifies.
    pub fn to_csv(&self) -> String {
        let mut out = String::new();
        let header = [
            "id",
            "status",
            "fx",
            "fy",
            "cx",
            "cy",
            "k1",
            "rms_px",
            "points",
            "coverage",
            "images_used",
            "images",
            "outliers",
            "reasons",
        ];
        out.push_str(&header.join(","));
        out.push_str("\r\n");
        for c in &self.cameras {
            let mut row: Vec<String> = vec![csv_field(&c.id), c.status.name().into()];
            match &c.values {
                Some(v) => {
                    for x in [v.fx, v.fy, v.cx, v.cy, v.k1, v.rms_px] {
                        row.push(format!("{x}"));
                    }
                    row.push(v.points.to_string());
                    row.push(format!("{}", v.coverage));
                    row.push(v.images_used.to_string());
                    row.push(v.images.to_string());
                }
                None => row.extend(std::iter::repeat_n(String::new(), 10)),
            }
            row.push(csv_field(&c.outliers.join(" ")));
            row.push(csv_field(&c.reasons.join("; ")));
            out.push_str(&row.join(","));
            out.push_str("\r\n");
        }
        out
    }
}

/// One CSV field, quoted when RFC 4180 requires it.
pub fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\r', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// The summary a single run over every camera of `shards` would have written. Refuses shard
/// outputs that do not belong together (another program version, target file, calibration
/// options or spec; shard counts that differ; a shard given twice or missing) and any camera
/// that appears twice. Statistics and outlier flags are recomputed over all cameras.
pub fn merge(shards: &[FleetFile]) -> Result<FleetFile, FleetError> {
    let first = shards.first().ok_or(FleetError::NothingToMerge)?;
    let h0 = &first.header;
    let mut seen_shards = BTreeSet::new();
    let mut count = None;
    for (k, s) in shards.iter().enumerate() {
        let h = &s.header;
        let what = if h.program != h0.program {
            Some("program")
        } else if h.target_file.sha256 != h0.target_file.sha256 {
            Some("target file (SHA-256)")
        } else if h.settings_sha256 != h0.settings_sha256 {
            Some("calibration options")
        } else if h.spec != h0.spec {
            Some("spec")
        } else {
            None
        };
        if let Some(what) = what {
            return Err(FleetError::Mismatch(format!(
                "output {} has another {what} than output 1",
                k + 1
            )));
        }
        match &h.shard {
            None if shards.len() > 1 => {
                return Err(FleetError::Mismatch(format!(
                    "output {} covers a whole fleet, not a shard",
                    k + 1
                )));
            }
            None => {}
            Some(text) => {
                let shard: Shard = text.parse()?;
                if *count.get_or_insert(shard.count) != shard.count {
                    return Err(FleetError::Mismatch(format!(
                        "shard {shard} is of another shard count than {}",
                        count.unwrap_or(0)
                    )));
                }
                if !seen_shards.insert(shard.index) {
                    return Err(FleetError::Mismatch(format!("shard {shard} is given twice")));
                }
            }
        }
    }
    if let Some(n) = count {
        let missing: Vec<String> =
            (0..n).filter(|k| !seen_shards.contains(k)).map(|k| format!("{k}/{n}")).collect();
        if !missing.is_empty() {
            return Err(FleetError::Mismatch(format!("missing shard {}", missing.join(", "))));
        }
    }
    let mut ids = BTreeSet::new();
    let mut cameras = Vec::new();
    for s in shards {
        for c in &s.cameras {
            if !ids.insert(c.id.clone()) {
                return Err(FleetError::DuplicateCamera { id: c.id.clone() });
            }
            cameras.push(CameraEntry { outliers: vec![], ..c.clone() });
        }
    }
    let header = FleetHeader { shard: None, ..h0.clone() };
    Ok(FleetFile::assemble(header, cameras))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::CameraValues;

    fn header(shard: Option<&str>) -> FleetHeader {
        FleetHeader {
            program: "p".into(),
            target_file: InputRecord { path: "t.json".into(), sha256: "ab".into() },
            settings_sha256: "cd".into(),
            spec: None,
            shard: shard.map(str::to_string),
        }
    }

    fn entry(id: &str, fx: f64) -> CameraEntry {
        let values = CameraValues {
            fx,
            fy: fx,
            cx: 320.0,
            cy: 240.0,
            k1: -0.1,
            rms_px: 0.05,
            points: 100,
            coverage: 0.5,
            images_used: 3,
            images: 3,
        };
        CameraEntry {
            id: id.into(),
            status: CameraStatus::Passed,
            reasons: vec![],
            values: Some(values),
            outliers: vec![],
            result: Some(format!("{id}/calibration.json")),
        }
    }

    /// RFC 4180, section 2, rules 6 and 7: fields with commas, quotes or line breaks are
    /// enclosed in double quotes, and a double quote inside is doubled.
    #[test]
    fn csv_fields_are_quoted_as_rfc_4180_says() {
        assert_eq!(csv_field("cam-1"), "cam-1");
        assert_eq!(csv_field("a,b"), "\"a,b\"");
        assert_eq!(csv_field("say \"hi\""), "\"say \"\"hi\"\"\"");
        assert_eq!(csv_field("two\nlines"), "\"two\nlines\"");
    }

    #[test]
    fn merge_equals_assemble_of_all_and_refuses_duplicates() {
        let all: Vec<CameraEntry> =
            [("a", 900.0), ("b", 901.0), ("c", 899.0), ("d", 950.0), ("e", 900.5)]
                .iter()
                .map(|(id, f)| entry(id, *f))
                .collect();
        let whole = FleetFile::assemble(header(None), all.clone());
        assert_eq!(whole.cameras.iter().find(|c| c.id == "d").unwrap().outliers, ["fx", "fy"]);
        let mut reversed = all.clone();
        reversed.reverse();
        assert_eq!(FleetFile::assemble(header(None), reversed), whole);
        let s0 = FleetFile::assemble(header(Some("0/2")), all[..2].to_vec());
        let s1 = FleetFile::assemble(header(Some("1/2")), all[2..].to_vec());
        assert_eq!(merge(&[s1.clone(), s0.clone()]).unwrap(), whole);
        let dup = FleetFile::assemble(header(Some("1/2")), all[1..].to_vec());
        assert!(matches!(merge(&[s0.clone(), dup]), Err(FleetError::DuplicateCamera { .. })));
        assert!(matches!(merge(std::slice::from_ref(&s0)), Err(FleetError::Mismatch(_))));
        let mut other = s1.clone();
        other.header.target_file.sha256 = "ff".into();
        assert!(matches!(merge(&[s0, other]), Err(FleetError::Mismatch(_))));
    }

    #[test]
    fn a_non_finite_value_is_refused_by_name() {
        let mut e = entry("a", 900.0);
        e.values.as_mut().unwrap().rms_px = f64::NAN;
        let f = FleetFile::assemble(header(None), vec![e]);
        let err = f.to_json().unwrap_err().to_string();
        assert!(err.contains("rms_px"), "{err}");
    }
}
