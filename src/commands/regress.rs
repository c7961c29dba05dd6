//! `lobeflow regress [DIR]`: run every sample in DIR through its graph and
//! check it against its manifest; print a table, optionally a JSON report.

use crate::error::Error;
use crate::regress::{Manifest, Row, find_manifests, run_sample};
use std::fmt::Write;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

pub struct RegressArgs {
    pub dir: PathBuf,
    pub report: Option<PathBuf>,
    pub update: bool,
    /// Where each sample's outputs go (a folder per sample).
    pub out: PathBuf,
    pub jobs: usize,
}

/// Run all samples; Ok(rows) whatever the verdicts (the caller decides the exit).
pub fn regress(args: &RegressArgs) -> Result<Vec<Row>, Error> {
    let manifests: Vec<Manifest> =
        find_manifests(&args.dir)?.iter().map(|p| Manifest::load(p).map_err(Error::from)).collect::<Result<_, _>>()?;
    let next = Mutex::new(0usize);
    #[allow(clippy::type_complexity)]
    let results: Mutex<Vec<(usize, Result<Vec<Row>, Error>)>> = Mutex::new(Vec::new());
    std::thread::scope(|s| {
        for _ in 0..args.jobs.clamp(1, manifests.len().max(1)) {
            s.spawn(|| {
                loop {
                    let i = {
                        let mut n = next.lock().unwrap_or_else(|e| e.into_inner());
                        let i = *n;
                        *n += 1;
                        i
                    };
                    let Some(m) = manifests.get(i) else { break };
                    let out = args.out.join(&m.name);
                    let _ = std::fs::remove_dir_all(&out);
                    let r = run_sample(m, &out, args.update);
                    results.lock().unwrap_or_else(|e| e.into_inner()).push((i, r));
                }
            });
        }
    });
    let mut results = results.into_inner().unwrap_or_else(|e| e.into_inner());
    results.sort_by_key(|(i, _)| *i);
    let mut rows = Vec::new();
    for (_, r) in results {
        rows.extend(r?);
    }
    if let Some(path) = &args.report {
        write_report(path, &rows)?;
    }
    Ok(rows)
}

/// The table a person reads.
pub fn table(rows: &[Row]) -> String {
    let w = |f: &dyn Fn(&Row) -> usize, min: usize| rows.iter().map(f).max().unwrap_or(0).max(min);
    let (ws, wc, wm, wb) =
        (w(&|r| r.sample.len(), 6), w(&|r| r.check.len(), 5), w(&|r| r.measured.len(), 8), w(&|r| r.bound.len(), 5));
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{:<ws$}  {:<wc$}  {:>wm$}  {:<wb$}  {:<7}  {:>7}",
        "sample", "check", "measured", "bound", "verdict", "time s"
    );
    for r in rows {
        let v = if r.passed { "pass" } else { "FAIL" };
        let _ = writeln!(
            s,
            "{:<ws$}  {:<wc$}  {:>wm$}  {:<wb$}  {:<7}  {:>7.2}",
            r.sample, r.check, r.measured, r.bound, v, r.seconds
        );
    }
    let failed = rows.iter().filter(|r| !r.passed).count();
    let _ = writeln!(s, "{} checks, {} passed, {} failed", rows.len(), rows.len() - failed, failed);
    s
}

fn write_report(path: &Path, rows: &[Row]) -> Result<(), Error> {
    let json = serde_json::json!({
        "passed": rows.iter().all(|r| r.passed),
        "rows": rows.iter().map(|r| serde_json::json!({
            "sample": r.sample,
            "check": r.check,
            "measured": r.measured,
            "bound": r.bound,
            "verdict": if r.passed { "pass" } else { "fail" },
            "time_s": (r.seconds * 1000.0).round() / 1000.0,
        })).collect::<Vec<_>>(),
    });
    let text = serde_json::to_string_pretty(&json).map_err(|e| Error::Output(e.to_string()))?;
    let tmp = lobeflow_blocks::FileStager::temp_path(path);
    std::fs::write(&tmp, text + "\n")
        .and_then(|_| std::fs::rename(&tmp, path))
        .map_err(|e| Error::Output(format!("cannot write report {}: {e}", path.display())))
}
