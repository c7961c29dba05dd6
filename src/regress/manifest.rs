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
//! golden:
//!   - {output: angles.csv, file: ridge-four-lobe.golden.csv, tolerance: 1e-6}
//! ```

use crate::graph::GraphError;
use crate::graph::file::{parse_yaml, read_text};
use crate::graph::locate::{Seg, key, locate};
use serde::Deserialize;
use std::collections::BTreeMap;
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
        }
    }
    pub fn unit(&self) -> &'static str {
        match self {
            Measure::RmsError | Measure::Bias | Measure::WorstError => " deg",
            Measure::RangeRms => " m",
            _ => "",
        }
    }
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Check {
    pub measure: Measure,
    pub axis: Option<String>,
    pub flag: Option<String>,
    pub min: Option<f64>,
    pub max: Option<f64>,
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
    settings: BTreeMap<String, serde_yaml::Value>,
    #[serde(default)]
    checks: Vec<Check>,
    #[serde(default)]
    golden: Vec<Golden>,
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
        let text = read_text(path)?;
        // Syntax first (with position), then shape (serde keeps the position too).
        parse_yaml(path, &text)?;
        let raw: Raw = serde_yaml::from_str(&text).map_err(|e| {
            let (line, column) = e.location().map(|l| (l.line(), l.column())).unwrap_or((1, 1));
            GraphError { file: path.to_path_buf(), line, column, message: format!("bad manifest: {e}"), hint: None }
        })?;
        let dir = path.parent().map(Path::to_path_buf).unwrap_or_default();
        let err = |at: &[Seg], msg: String| {
            let (line, column) = locate(&text, at);
            GraphError { file: path.to_path_buf(), line, column, message: msg, hint: None }
        };
        for (i, c) in raw.checks.iter().enumerate() {
            let at = [key("checks"), Seg::Index(i)];
            if c.min.is_none() && c.max.is_none() {
                return Err(err(
                    &at,
                    format!("check {} ({}) needs a bound: min, max or both", i + 1, c.measure.name()),
                ));
            }
            let needs_axis = matches!(
                c.measure,
                Measure::Estimates | Measure::RmsError | Measure::Bias | Measure::RmsOverSigma | Measure::WorstError
            );
            if needs_axis && c.axis.is_none() {
                return Err(err(&at, format!("check {} ({}) needs an axis (e.g. az)", i + 1, c.measure.name())));
            }
            if c.measure == Measure::Flags && c.flag.is_none() {
                return Err(err(
                    &at,
                    format!("check {} (flags) needs a flag (ok, out_of_range, no_signal, outlier)", i + 1),
                ));
            }
            if matches!(
                c.measure,
                Measure::RmsError | Measure::Bias | Measure::RangeRms | Measure::RmsOverSigma | Measure::WorstError
            ) && raw.truth.is_none()
            {
                return Err(err(
                    &at,
                    format!(
                        "check {} ({}) compares with the truth, but the manifest names no truth file",
                        i + 1,
                        c.measure.name()
                    ),
                ));
            }
        }
        let mut settings = crate::graph::Overrides::default();
        for (name, v) in &raw.settings {
            let value = crate::graph::file::raw_value(v).ok_or_else(|| {
                err(
                    &[key("settings"), key(name)],
                    format!("knob '{name}' must be a number, text, true/false or a list"),
                )
            })?;
            let (line, _) = locate(&text, &[key("settings"), key(name)]);
            settings.items.push(crate::graph::Override {
                name: name.clone(),
                value,
                origin: crate::graph::Origin::ParamsFile { file: path.to_path_buf(), line },
                base: dir.clone(),
            });
        }
        let file_name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
        Ok(Manifest {
            path: path.to_path_buf(),
            name: file_name.strip_suffix(SUFFIX).unwrap_or(&file_name).to_string(),
            about: raw.about,
            graph: dir.join(&raw.graph),
            capture: dir.join(&raw.capture),
            truth: raw.truth.as_ref().map(|t| dir.join(t)),
            settings,
            checks: raw.checks,
            golden: raw.golden,
        })
    }
}
