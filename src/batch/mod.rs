//! Batch runs: one graph over many captures, each into its own folder, with
//! a summary row per capture. A list can be cut into deterministic shards
//! (one per job of a cluster scheduler's job array) and their summaries
//! merged back in list order; a stopped run resumes where it left off.

pub mod merge;
pub mod plan;
pub mod summary;

use crate::error::Error;
use crate::graph::{Overrides, ResolvedGraph, resolve};
use crate::runtime::{RunOptions, run};
use plan::{Plan, Shard};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Instant;
use summary::Outcome;

/// File in each capture's folder that marks its outputs complete.
pub const RESULT_FILE: &str = "batch-result.json";
/// File in the batch folder naming the list and shard it holds.
pub const PLAN_FILE: &str = "batch.json";

pub struct BatchArgs {
    pub graph: PathBuf,
    /// Captures as given (command line, or lines of the list file).
    pub captures: Vec<String>,
    /// Folder relative capture paths are read from (the list file's folder).
    pub base: PathBuf,
    pub overrides: Overrides,
    pub out: PathBuf,
    pub jobs: usize,
    pub shard: Shard,
}

/// What a batch run did.
pub struct BatchReport {
    pub ran: usize,
    pub skipped: usize,
    pub failed: Vec<(String, String)>,
}

/// Run this shard's share of the captures; write `summary.csv` and
/// `timings.csv` in `out` (also when some captures fail).
pub fn run_batch(args: &BatchArgs) -> Result<BatchReport, Error> {
    // A graph or setting that cannot resolve fails every capture alike: say so once.
    let graph = resolve(&args.graph, &args.overrides, &crate::registry())?;
    let axes = crate::regress::graph_axes(&graph);
    let plan = Plan::new(&args.graph, &args.captures, args.shard)?;
    std::fs::create_dir_all(&args.out)
        .map_err(|e| Error::Output(format!("cannot create {}: {e}", args.out.display())))?;
    plan.claim(&args.out)?;
    let cancel = Arc::new(AtomicBool::new(false));
    {
        let c = Arc::clone(&cancel);
        let _ = ctrlc::set_handler(move || c.store(true, Ordering::SeqCst));
    }
    let mine = plan.mine();
    let next = Mutex::new(0usize);
    let outcomes: Mutex<Vec<(usize, Outcome)>> = Mutex::new(Vec::new());
    std::thread::scope(|s| {
        for _ in 0..args.jobs.clamp(1, mine.len().max(1)) {
            s.spawn(|| {
                loop {
                    if cancel.load(Ordering::SeqCst) {
                        break;
                    }
                    let k = {
                        let mut n = next.lock().unwrap_or_else(|e| e.into_inner());
                        *n += 1;
                        *n - 1
                    };
                    let Some(&i) = mine.get(k) else { break };
                    let outcome = one_capture(args, &plan, i, &axes, &cancel);
                    eprintln!("[{}/{}] {}: {}", k + 1, mine.len(), plan.captures[i], outcome.status_line());
                    outcomes.lock().unwrap_or_else(|e| e.into_inner()).push((i, outcome));
                }
            });
        }
    });
    if cancel.load(Ordering::SeqCst) {
        return Err(Error::Cancelled);
    }
    let mut outcomes = outcomes.into_inner().unwrap_or_else(|e| e.into_inner());
    outcomes.sort_by_key(|(i, _)| *i);
    let header = summary::header(&axes);
    let mut table = header.clone();
    let mut timings = summary::TIMINGS_HEADER.to_string();
    for (i, o) in &outcomes {
        table.push_str(&o.row);
        timings.push_str(&summary::timing_line(&plan.captures[*i], o));
    }
    crate::commands::write_output(&args.out.join("summary.csv"), &table)?;
    crate::commands::write_output(&args.out.join("timings.csv"), &timings)?;
    Ok(BatchReport {
        ran: outcomes.iter().filter(|(_, o)| !o.resumed && o.error.is_none()).count(),
        skipped: outcomes.iter().filter(|(_, o)| o.resumed).count(),
        failed: outcomes
            .iter()
            .filter_map(|(i, o)| o.error.as_ref().map(|e| (plan.captures[*i].clone(), e.clone())))
            .collect(),
    })
}

/// Run capture `i` (or take its earlier complete result); never fails:
/// what goes wrong is the row's error.
fn one_capture(args: &BatchArgs, plan: &Plan, i: usize, axes: &[String], cancel: &Arc<AtomicBool>) -> Outcome {
    let text = &plan.captures[i];
    let dir = args.out.join(&plan.names[i]);
    let start = Instant::now();
    let failed = |e: Error| Outcome::failed(text, &plan.names[i], axes, e.to_string(), start.elapsed().as_secs_f64());
    let path = if Path::new(text).is_absolute() { PathBuf::from(text) } else { args.base.join(text) };
    let mut overrides = args.overrides.clone();
    overrides.set("input", lobeflow_blocks::RawValue::Text(path.to_string_lossy().into_owned()));
    let graph = match resolve(&args.graph, &overrides, &crate::registry()) {
        Ok(g) => g,
        Err(e) => return failed(e.into()),
    };
    let fingerprint = fingerprint(&graph);
    if let Some(done) = summary::Outcome::resume(&dir, &fingerprint) {
        return done;
    }
    let result_file = dir.join(RESULT_FILE);
    if let Err(e) = std::fs::remove_file(&result_file)
        && e.kind() != std::io::ErrorKind::NotFound
    {
        return failed(Error::Output(format!("cannot remove {}: {e}", result_file.display())));
    }
    let opts = RunOptions { threads: 1, out_dir: dir.clone(), cancel: Arc::clone(cancel), ..RunOptions::default() };
    let report = match run(&graph, &opts, Vec::new()) {
        Ok(r) => r,
        Err(e) => return failed(e),
    };
    let seconds = start.elapsed().as_secs_f64();
    let notices = crate::regress::notices::count(&report.notices, &graph, None);
    let outcome = match Outcome::measured(text, &plan.names[i], axes, &dir, notices, seconds) {
        Ok(o) => o,
        Err(e) => return failed(e),
    };
    let written: Vec<String> = report
        .written
        .iter()
        .filter_map(|p| p.strip_prefix(&dir).ok().map(|r| r.to_string_lossy().into_owned()))
        .collect();
    match outcome.save(&result_file, &fingerprint, &written) {
        Ok(()) => outcome,
        Err(e) => failed(e),
    }
}

/// What decides a capture's outputs: every block with its parameters (the
/// capture path among them) and the wiring. FNV-1a, stable across runs.
fn fingerprint(graph: &ResolvedGraph) -> String {
    let mut text = String::from(summary::FORMAT);
    for b in &graph.blocks {
        text.push_str(&format!("{}|{}|{:?}\n", b.name, b.spec.kind, b.params));
    }
    text.push_str(&format!("{:?}", graph.wires));
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for byte in text.bytes() {
        h ^= u64::from(byte);
        h = h.wrapping_mul(0x0000_0100_0000_01b3);
    }
    format!("{h:016x}")
}
