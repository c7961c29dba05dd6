//! `lobeflow calibrate GRAPH --input SCAN --pointing CSV --source AZ,EL --out DIR`:
//! measure the discriminator from a scan and write a params file for GRAPH.

use crate::calibrate::output::{PARAMS_FILE, PATTERN_FILE};
use crate::calibrate::{CalibrateArgs, Calibration, calibrate};
use crate::error::Error;
use std::fmt::Write;

/// `AZ,EL` in degrees (a `deg` suffix is allowed on either).
pub fn parse_source(text: &str) -> Result<(f64, f64), Error> {
    let bad = || Error::Usage(format!("--source takes AZ,EL in degrees, e.g. 131.4,23.0; got '{text}'"));
    let (a, e) = text.split_once(',').ok_or_else(bad)?;
    let num = |s: &str| s.trim().trim_end_matches("deg").trim().parse::<f64>().ok().filter(|v| v.is_finite());
    let (az, el) = (num(a).ok_or_else(bad)?, num(e).ok_or_else(bad)?);
    if !(-90.0..=90.0).contains(&el) {
        return Err(Error::Usage(format!("--source elevation {el} deg is not between -90 and 90")));
    }
    Ok((az, el))
}

/// Seconds with an optional unit (`s`, `ms`, `us`), sign allowed.
pub fn parse_seconds(text: &str, what: &str) -> Result<f64, Error> {
    let t = text.trim();
    let (num, scale) = if let Some(v) = t.strip_suffix("ms") {
        (v, 1e-3)
    } else if let Some(v) = t.strip_suffix("us") {
        (v, 1e-6)
    } else if let Some(v) = t.strip_suffix('s') {
        (v, 1.0)
    } else {
        (t, 1.0)
    };
    num.trim()
        .parse::<f64>()
        .ok()
        .filter(|v| v.is_finite())
        .map(|v| v * scale)
        .ok_or_else(|| Error::Usage(format!("{what} takes a time such as 0.25 s or -120 ms; got '{text}'")))
}

/// Calibrate and describe the result.
pub fn run(args: &CalibrateArgs) -> Result<String, Error> {
    let (cal, written) = calibrate(args)?;
    let mut s = summary(&cal);
    for w in written {
        let _ = writeln!(s, "wrote {}", w.display());
    }
    let _ = writeln!(
        s,
        "next: lobeflow run {} --params {} (the pattern is read from {PATTERN_FILE} beside it)",
        args.graph.display(),
        args.out_dir.join(PARAMS_FILE).display()
    );
    Ok(s)
}

/// What was measured, pair by pair, with the telemetry's irregularities.
pub fn summary(cal: &Calibration) -> String {
    let mut s = String::new();
    for n in &cal.telemetry_notes {
        let _ = writeln!(s, "telemetry: {n}");
    }
    let d = &cal.dropped;
    let _ = writeln!(
        s,
        "{} dwells; left out: {} without signal, {} without pointing (outside the table, in a gap or jump), {} too far across the pair's axis, {} of unpaired lobes",
        cal.dwells, d.no_signal, d.no_pointing, d.off_cross_axis, d.other_lobes
    );
    for p in &cal.pairs {
        let l = &p.local;
        let _ = writeln!(
            s,
            "pair {} ({}/{}), scan reached {:.2} to {:.2} deg off axis:",
            p.axis, p.plus, p.minus, p.reach.0, p.reach.1
        );
        let _ = writeln!(s, "  ratio at boresight (gain imbalance) {:+.3} +- {:.3} dB", l.ratio0_db, l.ratio0_sigma_db);
        let _ = writeln!(
            s,
            "  slope at boresight                  {:.4} +- {:.4} dB/deg",
            l.slope_db_per_deg, l.slope_sigma
        );
        let _ = writeln!(
            s,
            "  crossover                           {:+.4} +- {:.4} deg",
            l.crossover_deg, l.crossover_sigma
        );
        for (i, m) in p.models.iter().chain(std::iter::once(&p.table)).enumerate() {
            let _ = writeln!(s, "  {}", m.summary_line(i == p.best));
        }
    }
    let _ = writeln!(s, "usable region of the measured pattern: +-{:.2} deg", cal.joint.usable_deg);
    s
}
