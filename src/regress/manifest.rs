//! Sample manifests: which graph a sample runs through, with which settings,
//! and what must hold afterwards.
//!
//! ```yaml
//! about: four-lobe pulsed track of a slow crossing target
//! graph: ../graphs/four-lobe-pulsed.yaml
//! capture: ridge-four-lobe.wav
//! truth: ridge-four-lobe.truth.csv
//! settings: {guard: 12 us}
//! checks:
//!   - {measure: estimates, axis: az, min: 40}
//!   - {measure: rms_error, axis: az, max: 0.05}        # degrees
//!   - {measure: bias, axis: az, max: 0.01}             # degrees
//!   - {measure: rms_over_sigma, axis: az, max: 1.2}
//!   - {measure: worst_error, axis: az, max: 0.5}       # degrees
//!   - {measure: range_rms, max: 15}                    # metres
//!   - {measure: flags, flag: out_of_range, min: 1}
//!   - {measure: notices, max: 3}                       # every notice of the run
//!   - {measure: notices, block: sweep_gate, max: 1}    # those of one block kind or instance
//!   - {measure: warnings, max: 0}                      # notices that warn (block: optional)
//! golden:
//!   - {output: angles.csv, file: ridge-four-lobe.golden.csv, tolerance: 1e-6}
//! ```

use crate::config::{Document, Entries, Located, ParamValue, Seg, key};
use crate::graph::GraphError;
use serde::Deserialize;
use std::path::{Path, PathBuf};

/// What a check measures on the run's `angles.csv`.
#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum Measure {
    /// Number of estimates flagged ok on `axis`.
    Estimates,
    /// RMS of (error_deg - truth) over ok estimates on `axis`, degrees.
    RmsError,
    /// |mean of (error_deg - truth)| over ok estimates on `axis`, degrees.
    Bias,
    /// RMS error over the RMS of the estimates' own sigma_deg.
    RmsOverSigma,
    /// Largest |error_deg - truth| of any ok estimate on `axis`, degrees: a
    /// number reported for a target the chain cannot see shows here.
    WorstError,
    /// RMS of (range_m - truth range) over rows with a range, metres.
    RangeRms,
    /// Number of estimates with flag `flag` (any axis unless `axis` is given).
    Flags,
    /// Notices the blocks raised to the run (all, or those of `block`, a
    /// block kind or instance name), counting the ones held back.
    Notices,
    /// Of those, the ones that warn (information left out).
    Warnings,
}

impl Measure {
    pub fn name(&self) -> &'static str {
        match self {
            Measure::Estimates => "estimates",
            Measure::RmsError => "rms_error",
            Measure::Bias => "bias",
            Measure::RmsOverSigma => "rms_over_sigma",
            Measure::WorstError => "worst_error",
            Measure::RangeRms => "range_rms",
            Measure::Flags => "flags",
            Measure::Notices => "notices",
            Measure::Warnings => "warnings",
        }
    }
    /// Unit of the measured value and its bounds ("" for counts and ratios).
    pub fn unit(&self) -> &'static str {
        match self {
            Measure::RmsError | Measure::Bias | Measure::WorstError => "deg",
            Measure::RangeRms => "m",
            _ => "",
        }
    }
    /// Whether the check counts the run's notices rather than reading the table.
    pub fn counts_notices(&self) -> bool {
        matches!(self, Measure::Notices | Measure::Warnings)
    }
    fn needs_axis(&self) -> bool {
        matches!(
            self,
            Measure::Estimates | Measure::RmsError | Measure::Bias | Measure::RmsOverSigma | Measure::WorstError
        )
    }
    fn needs_truth(&self) -> bool {
        matches!(
            self,
            Measure::RmsError | Measure::Bias | Measure::RangeRms | Measure::RmsOverSigma | Measure::WorstError
        )
    }
}

/// Flags an estimate can carry in `angles.csv`.
pub const FLAGS: [&str; 4] = ["ok", "out_of_range", "no_signal", "outlier"];

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Check {
    pub measure: Measure,
    pub axis: Option<String>,
    pub flag: Option<String>,
    /// Block kind or instance name whose notices a `notices` check counts.
    pub block: Option<String>,
    pub min: Option<f64>,
    pub max: Option<f64>,
    /// Line of the check in its manifest.
    #[serde(skip)]
    pub line: usize,
}

impl Check {
    /// The check as the table names it, e.g. `rms_error az`.
    pub fn label(&self) -> String {
        let parts = [Some(self.measure.name()), self.axis.as_deref(), self.flag.as_deref(), self.block.as_deref()];
        parts.into_iter().flatten().collect::<Vec<_>>().join(" ")
    }
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Golden {
    /// Output file of the run (relative to its output directory).
    pub output: String,
    /// The golden copy, relative to the manifest.
    pub file: String,
    /// Largest absolute difference allowed in numeric cells.
    #[serde(default)]
    pub tolerance: f64,
    /// Line of the entry in its manifest.
    #[serde(skip)]
    pub line: usize,
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Raw {
    #[serde(default)]
    about: String,
    graph: String,
    capture: String,
    truth: Option<String>,
    #[serde(default)]
    settings: Entries<Located<String>, ParamValue>,
    #[serde(default)]
    checks: Vec<Located<Check>>,
    #[serde(default)]
    golden: Vec<Located<Golden>>,
}

/// A manifest with its paths resolved against its own folder.
#[derive(Clone, Debug)]
pub struct Manifest {
    pub path: PathBuf,
    /// Sample name: the manifest's file name without `.check.yaml`.
    pub name: String,
    pub about: String,
    pub graph: PathBuf,
    pub capture: PathBuf,
    pub truth: Option<PathBuf>,
    /// Knob overrides, as a params file would give them.
    pub settings: crate::graph::Overrides,
    pub checks: Vec<Check>,
    pub golden: Vec<Golden>,
}

/// Manifest files end in this.
pub const SUFFIX: &str = ".check.yaml";

impl Manifest {
    pub fn load(path: &Path) -> Result<Manifest, GraphError> {
        let doc = Document::load(path)?;
        let raw: Raw = doc.read()?;
        let dir = path.parent().map(Path::to_path_buf).unwrap_or_default();
        let name = sample_name(path).map_err(|msg| doc.error(&[], msg))?;
        let has_truth = raw.truth.is_some();
        let checks = raw
            .checks
            .into_iter()
            .enumerate()
            .map(|(i, c)| {
                let at = [key("checks"), Seg::Index(i)];
                validate_check(&c, i, has_truth).map_err(|(field, msg)| {
                    let field_at = [key("checks"), Seg::Index(i), key(field)];
                    doc.error(if field.is_empty() { &at } else { &field_at }, msg)
                })?;
                Ok(Check { line: c.at.line, ..c.value })
            })
            .collect::<Result<Vec<_>, GraphError>>()?;
        let golden = raw
            .golden
            .into_iter()
            .enumerate()
            .map(|(i, g)| {
                validate_golden(&g, i)
                    .map_err(|(field, msg)| doc.error(&[key("golden"), Seg::Index(i), key(field)], msg))?;
                Ok(Golden { line: g.at.line, ..g.value })
            })
            .collect::<Result<Vec<_>, GraphError>>()?;
        let mut settings = crate::graph::Overrides::default();
        for (name, value) in raw.settings.0 {
            settings.items.push(crate::graph::Override {
                name: name.value,
                value: value.0,
                origin: crate::graph::Origin::ParamsFile { file: path.to_path_buf(), line: name.at.line },
                base: dir.clone(),
            });
        }
        Ok(Manifest {
            path: path.to_path_buf(),
            name,
            about: raw.about,
            graph: dir.join(&raw.graph),
            capture: dir.join(&raw.capture),
            truth: raw.truth.as_ref().map(|t| dir.join(t)),
            settings,
            checks,
            golden,
        })
    }
}

/// The sample name: the manifest's file name before `.check.yaml`. It names
/// the sample's output folder inside `--out`, so it must be a plain name.
pub fn sample_name(path: &Path) -> Result<String, String> {
    let file_name = path.file_name().and_then(|n| n.to_str()).unwrap_or_default();
    let name = file_name.strip_suffix(SUFFIX).unwrap_or_default();
    if is_plain_name(name) {
        Ok(name.to_string())
    } else {
        Err(format!(
            "the sample name '{name}' (the file name before {SUFFIX}) must be a plain file name: \
             not empty, not '.' or '..', no path separators"
        ))
    }
}

/// A name that stays one level inside the folder it is joined to.
pub fn is_plain_name(name: &str) -> bool {
    !name.is_empty() && name != "." && name != ".." && !name.contains(['/', '\\', '\0'])
}

/// A relative path that stays inside the folder it is joined to.
fn stays_inside(path: &str) -> bool {
    let p = Path::new(path);
    !path.is_empty()
        && p.components().all(|c| matches!(c, std::path::Component::Normal(_) | std::path::Component::CurDir))
}

/// Why a check is malformed: (field to point at, message).
fn validate_check(c: &Check, i: usize, has_truth: bool) -> Result<(), (&'static str, String)> {
    let n = i + 1;
    let what = c.measure.name();
    if c.min.is_none() && c.max.is_none() {
        return Err(("", format!("check {n} ({what}) needs a bound: min, max or both")));
    }
    for (field, bound) in [("min", c.min), ("max", c.max)] {
        let Some(v) = bound else { continue };
        if !v.is_finite() {
            return Err((field, format!("check {n} ({what}): {field} must be a finite number, not {v}")));
        }
        if v < 0.0 {
            return Err((field, format!("check {n} ({what}): {field} is {v}, but {what} is never negative")));
        }
    }
    if let (Some(lo), Some(hi)) = (c.min, c.max)
        && lo > hi
    {
        return Err(("min", format!("check {n} ({what}): min {lo} is above max {hi}, so nothing could pass")));
    }
    if c.measure.needs_axis() && c.axis.is_none() {
        return Err(("", format!("check {n} ({what}) needs an axis (e.g. az)")));
    }
    if c.measure.counts_notices() && c.axis.is_some() {
        return Err(("axis", format!("check {n} ({what}) counts notices of the whole run; it takes no axis")));
    }
    match (&c.flag, c.measure) {
        (None, Measure::Flags) => {
            return Err(("", format!("check {n} (flags) needs a flag ({})", FLAGS.join(", "))));
        }
        (Some(f), Measure::Flags) if !FLAGS.contains(&f.as_str()) => {
            return Err(("flag", format!("check {n}: unknown flag '{f}' (flags: {})", FLAGS.join(", "))));
        }
        (Some(_), m) if m != Measure::Flags => {
            return Err(("flag", format!("check {n} ({what}) takes no flag (only the flags measure does)")));
        }
        _ => {}
    }
    if c.block.is_some() && !c.measure.counts_notices() {
        return Err((
            "block",
            format!("check {n} ({what}) takes no block (only the notices and warnings measures do)"),
        ));
    }
    if c.measure.needs_truth() && !has_truth {
        return Err(("", format!("check {n} ({what}) compares with the truth, but the manifest names no truth file")));
    }
    Ok(())
}

fn validate_golden(g: &Golden, i: usize) -> Result<(), (&'static str, String)> {
    let n = i + 1;
    if !g.tolerance.is_finite() || g.tolerance < 0.0 {
        return Err((
            "tolerance",
            format!("golden {n}: tolerance must be a finite number of at least 0, not {}", g.tolerance),
        ));
    }
    if !stays_inside(&g.output) {
        return Err((
            "output",
            format!("golden {n}: output '{}' must be a relative path inside the run's folder", g.output),
        ));
    }
    if !stays_inside(&g.file) {
        return Err((
            "file",
            format!("golden {n}: file '{}' must be a relative path inside the manifest's folder", g.file),
        ));
    }
    Ok(())
}
