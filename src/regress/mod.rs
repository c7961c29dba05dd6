//! The regression runner: run every sample's graph, compare the results with
//! the sample's truth and bounds, and say which checks hold. Every sample
//! gets its rows: one that cannot run is a row with verdict `error`.

pub(crate) mod golden;
pub(crate) mod manifest;
pub(crate) mod notices;
pub(crate) mod report;

use crate::error::Error;
use crate::graph::{ResolvedGraph, resolve};
use crate::runtime::{RunOptions, RunReport, run};
use golden::GoldenDiff;
use lobeflow_blocks::RawValue;
pub use manifest::{Check, Manifest, Measure};
use std::path::{Path, PathBuf};
use std::time::Instant;

/// What became of a check.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Verdict {
    Pass,
    Fail,
    /// The check could not be evaluated (the sample did not run, or the
    /// manifest is wrong).
    Error,
}

impl Verdict {
    pub fn name(&self) -> &'static str {
        match self {
            Verdict::Pass => "pass",
            Verdict::Fail => "fail",
            Verdict::Error => "error",
        }
    }
}

/// One line of the regression table. Each sample has a `run` row (the graph
/// ran; its time) followed by a row per check and per golden file.
#[derive(Clone, Debug, PartialEq)]
pub struct Row {
    pub sample: String,
    /// The check as the table names it, e.g. `rms_error az`.
    pub check: String,
    /// `run`, a measure name, or `golden`.
    pub measure: String,
    pub axis: Option<String>,
    pub flag: Option<String>,
    pub block: Option<String>,
    /// The output file a golden row compares.
    pub output: Option<String>,
    pub measured: Option<f64>,
    pub min: Option<f64>,
    pub max: Option<f64>,
    /// Unit of `measured`, `min` and `max` ("" for counts and ratios).
    pub unit: &'static str,
    pub verdict: Verdict,
    /// Seconds spent: the run for a `run` row, the evaluation for a check.
    pub seconds: f64,
    /// Why a check failed or errored, or what `--update` did.
    pub message: Option<String>,
}

impl Row {
    fn new(sample: &str, check: String, measure: &str) -> Row {
        Row {
            sample: sample.to_string(),
            check,
            measure: measure.to_string(),
            axis: None,
            flag: None,
            block: None,
            output: None,
            measured: None,
            min: None,
            max: None,
            unit: "",
            verdict: Verdict::Pass,
            seconds: 0.0,
            message: None,
        }
    }

    /// A row saying the sample (or one check of it) could not be evaluated.
    pub fn error(sample: &str, check: &str, message: String) -> Row {
        Row { verdict: Verdict::Error, message: Some(message), ..Row::new(sample, check.to_string(), check) }
    }

    fn with_check(sample: &str, c: &Check) -> Row {
        Row {
            axis: c.axis.clone(),
            flag: c.flag.clone(),
            block: c.block.clone(),
            min: c.min,
            max: c.max,
            unit: c.measure.unit(),
            ..Row::new(sample, c.label(), c.measure.name())
        }
    }

    /// The measured value with its unit, as the table shows it.
    pub fn measured_text(&self) -> String {
        match self.measured {
            Some(v) if v.fract() == 0.0 && v.abs() < 1e9 => with_unit(format!("{v}"), self.unit),
            Some(v) if self.measure == "golden" => format!("{v:.3e}"),
            Some(v) => with_unit(format!("{v:.4}"), self.unit),
            None if self.measure == "run" => "-".into(),
            None => "no data".into(),
        }
    }

    /// The bounds, as the table shows them.
    pub fn bound_text(&self) -> String {
        let what = if self.measure == "golden" { "|diff| " } else { "" };
        match (self.min, self.max) {
            (Some(lo), Some(hi)) => with_unit(format!("{what}{lo}..{hi}"), self.unit),
            (Some(lo), None) => with_unit(format!("{what}>= {lo}"), self.unit),
            (None, Some(hi)) => with_unit(format!("{what}<= {hi}"), self.unit),
            (None, None) => "-".into(),
        }
    }
}

fn with_unit(text: String, unit: &str) -> String {
    if unit.is_empty() { text } else { format!("{text} {unit}") }
}

/// A sample's rows, and what `--update` moved in its golden files.
#[derive(Debug, Default)]
pub struct SampleResult {
    pub rows: Vec<Row>,
    /// One entry per golden file rewritten: a heading line and what moved.
    pub updates: Vec<String>,
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
        Table::parse(&text).map_err(|e| Error::Input(format!("{}: {e}", path.display())))
    }

    /// A CSV text (quoted fields as the table writer writes them; `#`
    /// lines and blank lines skipped), the first record its header.
    pub fn parse(text: &str) -> Result<Table, String> {
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .trim(csv::Trim::All)
            .comment(Some(b'#'))
            .from_reader(text.as_bytes());
        let mut records = reader.records();
        let mut next = || -> Result<Option<Vec<String>>, String> {
            match records.next() {
                None => Ok(None),
                Some(Ok(r)) => Ok(Some(r.iter().map(str::to_string).collect())),
                Some(Err(e)) => Err(format!("not a readable CSV table: {e}")),
            }
        };
        let header = next()?.unwrap_or_default();
        let mut rows = Vec::new();
        while let Some(row) = next()? {
            rows.push(row);
        }
        Ok(Table { header, rows })
    }
    /// One CSV record, fields quoted where they need it, newline included.
    pub fn line<S: AsRef<str>>(cells: &[S]) -> String {
        let mut w = csv::WriterBuilder::new().terminator(csv::Terminator::Any(b'\n')).from_writer(Vec::new());
        // Writing to memory cannot fail, and the fields are UTF-8 text.
        let _ = w.write_record(cells.iter().map(|c| c.as_ref()));
        let bytes = w.into_inner().unwrap_or_default();
        String::from_utf8(bytes).unwrap_or_default()
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

/// The axes a graph measures: those named by the `pairs` of its blocks.
pub fn graph_axes(graph: &ResolvedGraph) -> Vec<String> {
    let mut axes: Vec<String> = Vec::new();
    for b in &graph.blocks {
        let Ok(pairs) = b.params.lobe_pairs("pairs") else { continue };
        for pair in pairs {
            if !axes.iter().any(|a| **a == *pair.axis) {
                axes.push(pair.axis.to_string());
            }
        }
    }
    axes
}

/// The sample's output folder: `out/<name>`, for a name that is a plain file name.
pub fn sample_dir(out: &Path, name: &str) -> Result<PathBuf, Error> {
    if manifest::is_plain_name(name) {
        Ok(out.join(name))
    } else {
        Err(Error::Usage(format!(
            "'{name}' is not a plain file name; it cannot name a folder inside {}",
            out.display()
        )))
    }
}

/// Run one sample into `out` and evaluate its checks; never fails: what
/// goes wrong is an `error` row. With `update`, golden files are rewritten
/// only when every other check of the sample passes.
pub fn run_sample(m: &Manifest, out: &Path, update: bool) -> SampleResult {
    let start = Instant::now();
    let ran = run_graph(m, out);
    let seconds = start.elapsed().as_secs_f64();
    let (graph, report, angles, truth) = match ran {
        Ok(r) => r,
        Err(e) => {
            return SampleResult {
                rows: vec![Row { seconds, ..Row::error(&m.name, "run", e.to_string()) }],
                updates: vec![],
            };
        }
    };
    let mut rows = vec![Row { seconds, ..Row::new(&m.name, "run".into(), "run") }];
    let angles_path = out.join("angles.csv");
    let mut axes = graph_axes(&graph);
    if axes.is_empty() {
        // A graph without pairs: accept the axes its table shows.
        if let Ok(c) = angles.column("axis", &angles_path) {
            axes = angles.rows.iter().filter_map(|r| r.get(c).cloned()).collect();
        }
    }
    for c in &m.checks {
        let started = Instant::now();
        let mut row = Row::with_check(&m.name, c);
        let value = match &c.axis {
            Some(a) if !axes.contains(a) => Err(Error::Input(format!(
                "{}:{}: check on axis '{a}', but the graph measures {}",
                m.path.display(),
                c.line,
                if axes.is_empty() { "no axes".to_string() } else { axes.join(", ") }
            ))),
            _ => {
                let count = |block: Option<&str>| match c.measure {
                    Measure::Warnings => notices::count_warnings(&report.notices, &graph, block),
                    _ => notices::count(&report.notices, &graph, block),
                };
                measure(c, &angles, &angles_path, truth.as_ref(), &count)
            }
        };
        match value {
            Ok(v) => {
                row.measured = v;
                let within = v.is_some_and(|v| c.min.is_none_or(|lo| v >= lo) && c.max.is_none_or(|hi| v <= hi));
                row.verdict = if within { Verdict::Pass } else { Verdict::Fail };
            }
            Err(e) => {
                row.verdict = Verdict::Error;
                row.message = Some(e.to_string());
            }
        }
        row.seconds = started.elapsed().as_secs_f64();
        rows.push(row);
    }
    let blocking = rows.iter().filter(|r| r.verdict != Verdict::Pass).count();
    let mut updates = Vec::new();
    for g in &m.golden {
        let started = Instant::now();
        let (mut row, moved) = golden_row(m, g, out, update, blocking);
        row.seconds = started.elapsed().as_secs_f64();
        updates.extend(moved);
        rows.push(row);
    }
    SampleResult { rows, updates }
}

type Ran = (ResolvedGraph, RunReport, Table, Option<Truth>);

fn run_graph(m: &Manifest, out: &Path) -> Result<Ran, Error> {
    let mut overrides = m.settings.clone();
    overrides.set("input", RawValue::Text(m.capture.to_string_lossy().into_owned()));
    let graph = resolve(&m.graph, &overrides, &crate::registry())?;
    let opts = RunOptions { threads: 1, out_dir: out.to_path_buf(), page: true, ..RunOptions::default() };
    let report = run(&graph, &opts, Vec::new())?;
    let angles = Table::read(&out.join("angles.csv"))?;
    let truth = m.truth.as_ref().map(|p| Truth::read(p)).transpose()?;
    Ok((graph, report, angles, truth))
}

/// The value a check bounds; `notices` counts the run's notices (or, for a
/// `warnings` check, its warnings) of a block (all blocks for None).
fn measure(
    c: &Check,
    t: &Table,
    path: &Path,
    truth: Option<&Truth>,
    notices: &dyn Fn(Option<&str>) -> u64,
) -> Result<Option<f64>, Error> {
    if c.measure.counts_notices() {
        return Ok(Some(notices(c.block.as_deref()) as f64));
    }
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
        Measure::Notices | Measure::Warnings => None,
    })
}

/// Compare (or with `update` and no `blocking` rows, rewrite) one golden
/// file; the second value says what moved when it was rewritten.
fn golden_row(m: &Manifest, g: &manifest::Golden, out: &Path, update: bool, blocking: usize) -> (Row, Option<String>) {
    let mut row = Row {
        output: Some(g.output.clone()),
        max: Some(g.tolerance),
        ..Row::new(&m.name, format!("golden {}", g.output), "golden")
    };
    let produced_path = out.join(&g.output);
    let golden_path = m.path.parent().unwrap_or(Path::new(".")).join(&g.file);
    let produced = match Table::read(&produced_path) {
        Ok(t) => t,
        Err(e) => {
            return (Row { verdict: Verdict::Error, message: Some(e.to_string()), ..row }, None);
        }
    };
    let diff = if golden_path.exists() {
        match Table::read(&golden_path) {
            Ok(old) => Some(GoldenDiff::between(&produced, &old, g.tolerance)),
            Err(e) => return (Row { verdict: Verdict::Error, message: Some(e.to_string()), ..row }, None),
        }
    } else {
        None
    };
    row.measured = diff.as_ref().and_then(GoldenDiff::largest_change);
    if diff.as_ref().is_some_and(GoldenDiff::matches) {
        return (row, None);
    }
    if update && blocking == 0 {
        if let Err(e) = replace_file(&produced_path, &golden_path) {
            return (Row { verdict: Verdict::Error, message: Some(e.to_string()), ..row }, None);
        }
        let (message, moved) = match &diff {
            None => (
                format!("created ({} rows)", produced.rows.len()),
                format!("  created with {} rows\n", produced.rows.len()),
            ),
            Some(d) => (format!("updated: {}", d.summary()), d.moved()),
        };
        row.message = Some(message);
        return (row, Some(format!("{}: {} ({})\n{moved}", m.name, golden_path.display(), g.output)));
    }
    row.verdict = Verdict::Fail;
    let mut message = match &diff {
        None => "no golden file (run with --update)".to_string(),
        Some(d) => d.summary(),
    };
    if update {
        message.push_str(&format!("; not updated: {blocking} other checks of this sample did not pass"));
    }
    row.message = Some(message);
    (row, None)
}

/// Copy `from` over `to` through a temporary file beside `to`.
fn replace_file(from: &Path, to: &Path) -> Result<(), Error> {
    let bytes = std::fs::read(from).map_err(|e| Error::Input(format!("cannot read {}: {e}", from.display())))?;
    let tmp = lobeflow_blocks::FileStager::temp_path(to);
    std::fs::write(&tmp, bytes).and_then(|_| std::fs::rename(&tmp, to)).map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        Error::Output(format!("cannot write {}: {e}", to.display()))
    })
}
