//! `lobeflow regress [DIR]`: run every sample in DIR through its graph and
//! check it against its manifest; print a table, optionally JSON and JUnit
//! XML reports. Every sample gets its rows, whatever goes wrong.

use crate::error::Error;
use crate::regress::report::{self, overall};
use crate::regress::{Manifest, Row, SampleResult, Verdict, find_manifests, run_sample, sample_dir};
use std::fmt::Write;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

pub struct RegressArgs {
    pub dir: PathBuf,
    /// JSON report path (`-` for standard output).
    pub report: Option<PathBuf>,
    /// JUnit XML report path (`-` for standard output).
    pub junit: Option<PathBuf>,
    pub update: bool,
    /// Where each sample's outputs go (a folder per sample).
    pub out: PathBuf,
    pub jobs: usize,
}

/// What a regression run found.
pub struct Regression {
    pub rows: Vec<Row>,
    /// What `--update` moved in each golden file it rewrote.
    pub updates: Vec<String>,
}

impl Regression {
    /// Exit status: 2 if any row errored, else 1 if any check failed, else 0.
    pub fn outcome(&self) -> Result<(), Error> {
        let n = |v| self.rows.iter().filter(|r| r.verdict == v).count();
        match overall(&self.rows) {
            Verdict::Pass => Ok(()),
            Verdict::Fail => Err(Error::Failed(format!("{} regression checks failed", n(Verdict::Fail)))),
            Verdict::Error => Err(Error::Input(format!(
                "{} regression rows could not be evaluated (verdict error); {} checks failed",
                n(Verdict::Error),
                n(Verdict::Fail)
            ))),
        }
    }
}

/// The default output folder: a private one under the system's temporary folder.
pub fn default_out() -> PathBuf {
    std::env::temp_dir().join(format!("lobeflow-regress-{}", std::process::id()))
}

/// Run all samples, then write the reports (always, whatever the verdicts).
pub fn regress(args: &RegressArgs) -> Result<Regression, Error> {
    if args.report.as_deref() == Some(Path::new("-")) && args.junit.as_deref() == Some(Path::new("-")) {
        return Err(Error::Usage("--report - and --junit - cannot both use standard output".into()));
    }
    let regression = match find_manifests(&args.dir) {
        Ok(paths) => run_all(&paths, args),
        Err(e) => Regression {
            rows: vec![Row::error(&args.dir.display().to_string(), "manifests", e.to_string())],
            updates: vec![],
        },
    };
    std::fs::create_dir_all(&args.out)
        .map_err(|e| Error::Output(format!("cannot create {}: {e}", args.out.display())))?;
    super::write_output(
        &args.out.join(crate::report::PAGE_NAME),
        &crate::report::regress_page(&regression.rows, &args.out),
    )?;
    if let Some(path) = &args.report {
        super::write_output(path, &report::json(&regression.rows))?;
    }
    if let Some(path) = &args.junit {
        let xml = report::junit(&regression.rows, std::time::SystemTime::now(), &report::hostname());
        super::write_output(path, &xml)?;
    }
    Ok(regression)
}

fn run_all(paths: &[PathBuf], args: &RegressArgs) -> Regression {
    let next = Mutex::new(0usize);
    let results: Mutex<Vec<(usize, SampleResult)>> = Mutex::new(Vec::new());
    std::thread::scope(|s| {
        for _ in 0..args.jobs.clamp(1, paths.len().max(1)) {
            s.spawn(|| {
                loop {
                    let i = {
                        let mut n = next.lock().unwrap_or_else(|e| e.into_inner());
                        *n += 1;
                        *n - 1
                    };
                    let Some(path) = paths.get(i) else { break };
                    let r = one_sample(path, args);
                    results.lock().unwrap_or_else(|e| e.into_inner()).push((i, r));
                }
            });
        }
    });
    let mut results = results.into_inner().unwrap_or_else(|e| e.into_inner());
    results.sort_by_key(|(i, _)| *i);
    let mut regression = Regression { rows: Vec::new(), updates: Vec::new() };
    for (_, r) in results {
        regression.rows.extend(r.rows);
        regression.updates.extend(r.updates);
    }
    regression
}

/// Load, clear the sample's own output folder (never anything else), run.
fn one_sample(path: &Path, args: &RegressArgs) -> SampleResult {
    let fallback_name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let error =
        |e: Error| SampleResult { rows: vec![Row::error(&fallback_name, "manifest", e.to_string())], updates: vec![] };
    let m = match Manifest::load(path) {
        Ok(m) => m,
        Err(e) => return error(e.into()),
    };
    let out = match sample_dir(&args.out, &m.name) {
        Ok(o) => o,
        Err(e) => return error(e),
    };
    if let Err(e) = std::fs::remove_dir_all(&out)
        && e.kind() != std::io::ErrorKind::NotFound
    {
        return error(Error::Output(format!("cannot clear {}: {e}", out.display())));
    }
    run_sample(&m, &out, args.update)
}

/// The table a person reads.
pub fn table(rows: &[Row]) -> String {
    let measured: Vec<String> = rows.iter().map(Row::measured_text).collect();
    let bounds: Vec<String> = rows.iter().map(Row::bound_text).collect();
    let w = |lens: &mut dyn Iterator<Item = usize>, min: usize| lens.max().unwrap_or(0).max(min);
    let ws = w(&mut rows.iter().map(|r| r.sample.len()), 6);
    let wc = w(&mut rows.iter().map(|r| r.check.len()), 5);
    let wm = w(&mut measured.iter().map(String::len), 8);
    let wb = w(&mut bounds.iter().map(String::len), 5);
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{:<ws$}  {:<wc$}  {:>wm$}  {:<wb$}  {:<7}  {:>7}  note",
        "sample", "check", "measured", "bound", "verdict", "time s"
    );
    for (i, r) in rows.iter().enumerate() {
        let v = match r.verdict {
            Verdict::Pass => "pass",
            Verdict::Fail => "FAIL",
            Verdict::Error => "ERROR",
        };
        let line = format!(
            "{:<ws$}  {:<wc$}  {:>wm$}  {:<wb$}  {:<7}  {:>7.2}  {}",
            r.sample,
            r.check,
            measured[i],
            bounds[i],
            v,
            r.seconds,
            r.message.as_deref().unwrap_or("")
        );
        let _ = writeln!(s, "{}", line.trim_end());
    }
    let n = |v| rows.iter().filter(|r| r.verdict == v).count();
    let _ = writeln!(
        s,
        "{} rows, {} passed, {} failed, {} errors",
        rows.len(),
        n(Verdict::Pass),
        n(Verdict::Fail),
        n(Verdict::Error)
    );
    s
}
