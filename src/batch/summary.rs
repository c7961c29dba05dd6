//! The summary row of one capture (what the run found, never how long it
//! took, so summaries compare byte for byte) and its timing line.

use crate::error::Error;
use crate::regress::Table;
use crate::regress::manifest::FLAGS;
use std::path::Path;

/// Version of the summary's columns; part of every capture's fingerprint so
/// a new layout re-runs old results instead of mixing them.
pub const FORMAT: &str = "batch summary 1\n";

pub const TIMINGS_HEADER: &str = "capture,seconds,resumed\n";

/// Columns: the capture and its folder, status, estimates (all rows of
/// `angles.csv`), per axis the ok estimates with their mean and RMS angle
/// error, a count per flag, notices, and the error message of a failed run.
pub fn header(axes: &[String]) -> String {
    let mut cols = vec!["capture".to_string(), "output".into(), "status".into(), "estimates".into()];
    for a in axes {
        cols.extend([format!("{a}_ok"), format!("{a}_mean_deg"), format!("{a}_rms_deg")]);
    }
    cols.extend(FLAGS.iter().map(|f| f.to_string()));
    cols.extend(["notices".to_string(), "error".into()]);
    Table::line(&cols)
}

/// One capture's result.
#[derive(Debug)]
pub struct Outcome {
    /// Its summary line, newline included.
    pub row: String,
    pub error: Option<String>,
    pub seconds: f64,
    /// Taken from an earlier run's complete outputs.
    pub resumed: bool,
}

impl Outcome {
    /// Summarise a finished run from the `angles.csv` in `dir`.
    pub fn measured(
        capture: &str,
        name: &str,
        axes: &[String],
        dir: &Path,
        notices: u64,
        seconds: f64,
    ) -> Result<Outcome, Error> {
        let path = dir.join("angles.csv");
        let t = Table::read(&path)?;
        let (axis_c, flag_c, err_c) =
            (t.column("axis", &path)?, t.column("flag", &path)?, t.column("error_deg", &path)?);
        let mut cells = vec![capture.to_string(), name.to_string(), "ok".into(), t.rows.len().to_string()];
        for a in axes {
            let errs: Vec<f64> = t
                .rows
                .iter()
                .filter(|r| cell(r, axis_c) == a && cell(r, flag_c) == "ok")
                .filter_map(|r| cell(r, err_c).parse::<f64>().ok().filter(|v| v.is_finite()))
                .collect();
            let n = errs.len() as f64;
            cells.push(errs.len().to_string());
            if errs.is_empty() {
                cells.extend([String::new(), String::new()]);
            } else {
                cells.push(format!("{:.4}", errs.iter().sum::<f64>() / n));
                cells.push(format!("{:.4}", (errs.iter().map(|e| e * e).sum::<f64>() / n).sqrt()));
            }
        }
        for f in FLAGS {
            cells.push(t.rows.iter().filter(|r| cell(r, flag_c) == f).count().to_string());
        }
        cells.extend([notices.to_string(), String::new()]);
        Ok(Outcome { row: Table::line(&cells), error: None, seconds, resumed: false })
    }

    /// The row of a capture that could not run.
    pub fn failed(capture: &str, name: &str, axes: &[String], message: String, seconds: f64) -> Outcome {
        let mut cells = vec![capture.to_string(), name.to_string(), "error".into(), String::new()];
        cells.extend(std::iter::repeat_n(String::new(), 3 * axes.len() + FLAGS.len() + 1));
        cells.push(message.clone());
        Outcome { row: Table::line(&cells), error: Some(message), seconds, resumed: false }
    }

    /// Record a complete capture beside its outputs.
    pub fn save(&self, path: &Path, fingerprint: &str, written: &[String]) -> Result<(), Error> {
        let v = serde_json::json!({
            "fingerprint": fingerprint,
            "row": self.row,
            "seconds": self.seconds,
            "written": written,
        });
        crate::commands::write_output(path, &(serde_json::to_string_pretty(&v).unwrap_or_default() + "\n"))
    }

    /// An earlier run's result, if it ran the same graph and settings on the
    /// same capture and every output it wrote is still there.
    pub fn resume(dir: &Path, fingerprint: &str) -> Option<Outcome> {
        let text = std::fs::read_to_string(dir.join(super::RESULT_FILE)).ok()?;
        let v: serde_json::Value = serde_json::from_str(&text).ok()?;
        if v["fingerprint"].as_str()? != fingerprint {
            return None;
        }
        let complete = v["written"].as_array()?.iter().all(|w| w.as_str().is_some_and(|w| dir.join(w).is_file()));
        let row = v["row"].as_str()?;
        (complete && row.ends_with('\n')).then(|| Outcome {
            row: row.to_string(),
            error: None,
            seconds: v["seconds"].as_f64().unwrap_or(0.0),
            resumed: true,
        })
    }

    pub fn status_line(&self) -> String {
        match (&self.error, self.resumed) {
            (Some(e), _) => format!("error: {e}"),
            (None, true) => "complete from an earlier run, skipped".into(),
            (None, false) => format!("ok ({:.2} s)", self.seconds),
        }
    }
}

pub fn timing_line(capture: &str, o: &Outcome) -> String {
    Table::line(&[capture.to_string(), format!("{:.3}", o.seconds), (if o.resumed { "yes" } else { "no" }).to_string()])
}

/// The text of column `c` of a row (empty past its end).
fn cell(row: &[String], c: usize) -> &str {
    row.get(c).map(String::as_str).unwrap_or("")
}
