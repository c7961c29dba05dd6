//! `lobeflow synth SCENARIO.yaml --out PREFIX`: write a synthetic capture
//! with known truth (see `crate::synth::scenario` for the scenario syntax).

use crate::error::Error;
use crate::synth::{SynthReport, scenario::ScenarioFile, synthesize};
use std::fmt::Write;
use std::path::Path;

/// Noise below this many quantisation steps rms is worth a warning.
const FEW_STEPS: f64 = 2.0;

/// Run the synthesizer; returns the summary text for stderr.
pub fn synth(scenario: &Path, prefix: &Path) -> Result<(SynthReport, String), Error> {
    let file = ScenarioFile::load(scenario).map_err(Error::Input)?;
    let report = synthesize(&file, prefix)
        .map_err(|e| if e.starts_with(&scenario.display().to_string()) { Error::Input(e) } else { Error::Output(e) })?;
    let mut s = String::new();
    for r in &report.remarks {
        let _ = writeln!(s, "note: {r}");
    }
    let _ = writeln!(s, "{} samples, {} dwells; IQ scaled by {:e}", report.samples, report.dwells, report.scale);
    if let Some(steps) = report.noise_steps.filter(|&st| st < FEW_STEPS) {
        let _ = writeln!(
            s,
            "warning: the noise is only {steps:.2} quantisation steps rms; the signal peak forces a small scale"
        );
    }
    for w in &report.written {
        let _ = writeln!(s, "wrote {}", w.display());
    }
    Ok((report, s))
}
