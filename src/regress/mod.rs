//! The regression runner: run every sample's graph, compare the results with
//! the sample's truth and bounds, and say which checks hold.

pub mod manifest;

use crate::error::Error;
use crate::graph::resolve;
use crate::runtime::{RunOptions, run};
use lobeflow_blocks::RawValue;
pub use manifest::{Check, Manifest, Measure};
use std::path::{Path, PathBuf};
use std::time::Instant;

/// One line of the regression table.
#[derive(Clone, Debug, PartialEq)]
pub struct Row {
    pub sample: String,
    pub check: String,
    pub measured: String,
    pub bound: String,
    pub passed: bool,
    pub seconds: f64,
}

/// All manifests (`*.check.yaml`) in `dir`, sorted by name.
pub fn find_manifests(dir: &Path) -> Result<Vec<PathBuf>, Error> {
    let rd = std::fs::read_dir(dir)
        .map_err(|e| Error::Input(format!("cannot read sample folder {}: {e}", dir.display())))?;
    let mut out: Vec<PathBuf> = rd
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.file_name().is_some_and(|n| n.to_string_lossy().ends_with(manifest::SUFFIX)))
        .collect();
    out.sort();
    if out.is_empty() {
        return Err(Error::Input(format!("no sample manifests (*{}) in {}", manifest::SUFFIX, dir.display())));
    }
    Ok(out)
}

/// A CSV file as header + rows of text cells.
pub struct Table {
    pub header: Vec<String>,
    pub rows: Vec<Vec<String>>,
}

impl Table {
    pub fn read(path: &Path) -> Result<Table, Error> {
        let text =
            std::fs::read_to_string(path).map_err(|e| Error::Input(format!("cannot read {}: {e}", path.display())))?;
        let mut lines = text.lines().filter(|l| !l.trim().is_empty() && !l.starts_with('#'));
        let header: Vec<String> = lines.next().unwrap_or("").split(',').map(|s| s.trim().to_string()).collect();
        let rows = lines.map(|l| l.split(',').map(|s| s.trim().to_string()).collect()).collect();
        Ok(Table { header, rows })
    }
    pub fn column(&self, name: &str, path: &Path) -> Result<usize, Error> {
        self.header.iter().position(|h| h == name).ok_or_else(|| {
            Error::Input(format!("{} has no column '{name}' (columns: {})", path.display(), self.header.join(",")))
        })
    }
}

fn num(cell: &str) -> Option<f64> {
    cell.parse::<f64>().ok().filter(|v| v.is_finite())
}

/// Truth as time series, interpolated linearly.
struct Truth {
    time: Vec<f64>,
    columns: Vec<(String, Vec<Option<f64>>)>,
}

impl Truth {
    fn read(path: &Path) -> Result<Truth, Error> {
        let t = Table::read(path)?;
        let tc = t.column("time_s", path)?;
        let mut order: Vec<usize> = (0..t.rows.len()).collect();
        let times: Vec<f64> = t.rows.iter().map(|r| r.get(tc).and_then(|c| num(c)).unwrap_or(f64::NAN)).collect();
        if let Some(bad) = times.iter().position(|v| v.is_nan()) {
            return Err(Error::Input(format!("{}: row {} has no time_s", path.display(), bad + 2)));
        }
        order.sort_by(|&a, &b| times[a].total_cmp(&times[b]));
        let columns = t
            .header
            .iter()
            .enumerate()
            .filter(|(i, _)| *i != tc)
            .map(|(i, h)| (h.clone(), order.iter().map(|&r| t.rows[r].get(i).and_then(|c| num(c))).collect()))
            .collect();
        Ok(Truth { time: order.iter().map(|&r| times[r]).collect(), columns })
    }

    fn at(&self, column: &str, t: f64) -> Option<f64> {
        let (_, values) = self.columns.iter().find(|(n, _)| n == column)?;
        let i = self.time.partition_point(|&x| x < t);
        let pick = |k: usize| values.get(k).copied().flatten().map(|v| (self.time[k], v));
        match (i.checked_sub(1).and_then(pick), pick(i)) {
            (Some((t0, v0)), Some((t1, v1))) if t1 > t0 => Some(v0 + (v1 - v0) * (t - t0) / (t1 - t0)),
            (Some((_, v)), _) | (None, Some((_, v))) => Some(v),
            _ => None,
        }
    }
}

/// Truth column for an axis: `az` → `az_deg`, `el` → `el_deg`, else `<axis>_deg`.
fn truth_column(axis: &str) -> String {
    format!("{axis}_deg")
}

/// Run one sample and evaluate its checks. `out` receives the run's files.
pub fn run_sample(m: &Manifest, out: &Path, update: bool) -> Result<Vec<Row>, Error> {
    let start = Instant::now();
    let mut overrides = m.settings.clone();
    overrides.set("input", RawValue::Text(m.capture.to_string_lossy().into_owned()));
    let graph = resolve(&m.graph, &overrides, &crate::registry())?;
    let opts = RunOptions { threads: 1, out_dir: out.to_path_buf(), ..RunOptions::default() };
    run(&graph, &opts, Vec::new()).map_err(|e| match e {
        Error::Block { block, kind, message } => Error::Block { block: format!("{}: {block}", m.name), kind, message },
        other => other,
    })?;
    let seconds = start.elapsed().as_secs_f64();
    let angles_path = out.join("angles.csv");
    let angles = Table::read(&angles_path)?;
    let truth = m.truth.as_ref().map(|p| Truth::read(p)).transpose()?;
    let mut rows = Vec::new();
    for c in &m.checks {
        let value = measure(c, &angles, &angles_path, truth.as_ref())?;
        rows.push(verdict(&m.name, c, value, seconds));
    }
    for g in &m.golden {
        rows.push(compare_golden(m, g, out, update, seconds)?);
    }
    Ok(rows)
}

fn measure(c: &Check, t: &Table, path: &Path, truth: Option<&Truth>) -> Result<Option<f64>, Error> {
    let axis_c = t.column("axis", path)?;
    let flag_c = t.column("flag", path)?;
    let time_c = t.column("time_s", path)?;
    let on_axis = |r: &&Vec<String>| c.axis.as_deref().is_none_or(|a| r.get(axis_c).map(String::as_str) == Some(a));
    let ok = |r: &&Vec<String>| r.get(flag_c).map(String::as_str) == Some("ok");
    Ok(match c.measure {
        Measure::Estimates => Some(t.rows.iter().filter(on_axis).filter(ok).count() as f64),
        Measure::Flags => {
            let flag = c.flag.as_deref().unwrap_or("");
            Some(t.rows.iter().filter(on_axis).filter(|r| r.get(flag_c).map(String::as_str) == Some(flag)).count()
                as f64)
        }
        Measure::RmsError | Measure::Bias | Measure::RmsOverSigma | Measure::WorstError => {
            let truth = truth.ok_or_else(|| Error::Input("no truth file".into()))?;
            let err_c = t.column("error_deg", path)?;
            let sig_c = t.column("sigma_deg", path)?;
            let col = truth_column(c.axis.as_deref().unwrap_or(""));
            let mut errs = Vec::new();
            let mut sig2 = 0.0;
            for r in t.rows.iter().filter(on_axis).filter(ok) {
                let (Some(time), Some(est)) = (num(&r[time_c]), r.get(err_c).and_then(|v| num(v))) else { continue };
                let Some(want) = truth.at(&col, time) else {
                    return Err(Error::Input(format!(
                        "the truth file has no column '{col}' for axis {}",
                        c.axis.as_deref().unwrap_or("")
                    )));
                };
                errs.push(est - want);
                sig2 += r.get(sig_c).and_then(|v| num(v)).unwrap_or(f64::NAN).powi(2);
            }
            if errs.is_empty() {
                None
            } else {
                let n = errs.len() as f64;
                let rms = (errs.iter().map(|e| e * e).sum::<f64>() / n).sqrt();
                match c.measure {
                    Measure::RmsError => Some(rms),
                    Measure::Bias => Some((errs.iter().sum::<f64>() / n).abs()),
                    Measure::WorstError => errs.iter().map(|e| e.abs()).reduce(f64::max),
                    _ => Some(rms / (sig2 / n).sqrt()),
                }
            }
        }
        Measure::RangeRms => {
            let truth = truth.ok_or_else(|| Error::Input("no truth file".into()))?;
            let rc = t.column("range_m", path)?;
            let mut sum = 0.0;
            let mut n = 0usize;
            for r in t.rows.iter().filter(on_axis).filter(ok) {
                if let (Some(time), Some(range)) = (num(&r[time_c]), r.get(rc).and_then(|v| num(v)))
                    && let Some(want) = truth.at("range_m", time)
                {
                    sum += (range - want).powi(2);
                    n += 1;
                }
            }
            (n > 0).then(|| (sum / n as f64).sqrt())
        }
    })
}

fn verdict(sample: &str, c: &Check, value: Option<f64>, seconds: f64) -> Row {
    let unit = c.measure.unit();
    let mut what = c.measure.name().to_string();
    if let Some(a) = &c.axis {
        what.push_str(&format!(" {a}"));
    }
    if let Some(f) = &c.flag {
        what.push_str(&format!(" {f}"));
    }
    let bound = match (c.min, c.max) {
        (Some(lo), Some(hi)) => format!("{lo}..{hi}{unit}"),
        (Some(lo), None) => format!(">= {lo}{unit}"),
        (None, Some(hi)) => format!("<= {hi}{unit}"),
        (None, None) => "-".into(),
    };
    let passed = value.is_some_and(|v| c.min.is_none_or(|lo| v >= lo) && c.max.is_none_or(|hi| v <= hi));
    let measured = match value {
        Some(v) if v.fract() == 0.0 && v.abs() < 1e9 => format!("{v}{unit}"),
        Some(v) => format!("{v:.4}{unit}"),
        None => "no data".into(),
    };
    Row { sample: sample.to_string(), check: what, measured, bound, passed, seconds }
}

fn compare_golden(m: &Manifest, g: &manifest::Golden, out: &Path, update: bool, seconds: f64) -> Result<Row, Error> {
    let produced = out.join(&g.output);
    let golden = m.path.parent().unwrap_or(Path::new(".")).join(&g.file);
    let check = format!("golden {}", g.output);
    let bound = format!("|diff| <= {}", g.tolerance);
    let diff = if golden.exists() { Some(table_diff(&produced, &golden, g.tolerance)?) } else { None };
    if update {
        let same = diff.as_ref().is_some_and(|d| d.is_none());
        let measured = if same {
            "unchanged".to_string()
        } else {
            let bytes = std::fs::read(&produced)
                .map_err(|e| Error::Input(format!("cannot read {}: {e}", produced.display())))?;
            let tmp = lobeflow_blocks::FileStager::temp_path(&golden);
            std::fs::write(&tmp, bytes)
                .and_then(|_| std::fs::rename(&tmp, &golden))
                .map_err(|e| Error::Output(format!("cannot write {}: {e}", golden.display())))?;
            match diff {
                None => "created".to_string(),
                Some(Some(d)) => format!("updated ({d})"),
                Some(None) => unreachable!("same handled above"),
            }
        };
        return Ok(Row { sample: m.name.clone(), check, measured, bound, passed: true, seconds });
    }
    match diff {
        None => Ok(Row {
            sample: m.name.clone(),
            check,
            measured: "no golden file (run with --update)".into(),
            bound,
            passed: false,
            seconds,
        }),
        Some(None) => {
            Ok(Row { sample: m.name.clone(), check, measured: "matches".into(), bound, passed: true, seconds })
        }
        Some(Some(d)) => Ok(Row { sample: m.name.clone(), check, measured: d, bound, passed: false, seconds }),
    }
}

/// None when the tables agree within `tol`; else a description of the first difference.
fn table_diff(produced: &Path, golden: &Path, tol: f64) -> Result<Option<String>, Error> {
    let a = Table::read(produced)?;
    let b = Table::read(golden)?;
    if a.header != b.header {
        return Ok(Some(format!("columns differ: {} vs {}", a.header.join(","), b.header.join(","))));
    }
    if a.rows.len() != b.rows.len() {
        return Ok(Some(format!("{} rows, golden has {}", a.rows.len(), b.rows.len())));
    }
    let mut worst = 0.0f64;
    let mut changed = 0;
    for (ra, rb) in a.rows.iter().zip(&b.rows) {
        let mut row_changed = false;
        for (ca, cb) in ra.iter().zip(rb) {
            match (num(ca), num(cb)) {
                (Some(x), Some(y)) => {
                    let d = (x - y).abs();
                    worst = worst.max(d);
                    row_changed |= d > tol;
                }
                _ => row_changed |= ca != cb,
            }
        }
        changed += usize::from(row_changed);
    }
    Ok((changed > 0).then(|| format!("{changed} rows differ, max |diff| {worst:.3e}")))
}
