//! `lobeflow run GRAPH`: run a graph on a capture, with progress, statistics
//! and a summary of what the blocks noticed.

use crate::error::Error;
use crate::graph::{Overrides, resolve};
use crate::runtime::{RunOptions, RunReport, run};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::fmt::Write;
use std::io::IsTerminal;
use std::path::PathBuf;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

pub struct RunArgs {
    pub graph: PathBuf,
    pub overrides: Overrides,
    pub out_dir: PathBuf,
    pub threads: Option<usize>,
    pub quiet: bool,
    pub stats: bool,
}

/// Notices printed in full; the rest are counted.
const NOTICES_SHOWN: usize = 20;

/// Run with a progress bar (unless quiet) and return the report.
pub fn run_graph(args: &RunArgs) -> Result<RunReport, Error> {
    let graph = resolve(&args.graph, &args.overrides, &crate::registry())?;
    let cancel = Arc::new(AtomicBool::new(false));
    {
        let c = Arc::clone(&cancel);
        // Ctrl-C raises the flag; the scheduler stops within a step and the
        // staged outputs are discarded. A second handler install (in tests
        // running several graphs in one process) is harmless to skip.
        let _ = ctrlc::set_handler(move || c.store(true, Ordering::SeqCst));
    }
    let show = !args.quiet && std::io::stderr().is_terminal();
    let bar = ProgressBar::with_draw_target(
        Some(0),
        if show { ProgressDrawTarget::stderr() } else { ProgressDrawTarget::hidden() },
    );
    bar.set_style(
        ProgressStyle::with_template("{bar:40} {bytes}/{total_bytes} {bytes_per_sec} eta {eta}")
            .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    let pb = bar.clone();
    let mut opts = RunOptions { out_dir: args.out_dir.clone(), cancel, ..RunOptions::default() };
    if let Some(t) = args.threads {
        opts.threads = t.max(1);
    }
    opts.progress = Some(Arc::new(move |done, total| {
        pb.set_length(total);
        pb.set_position(done);
    }));
    let result = run(&graph, &opts, Vec::new());
    bar.finish_and_clear();
    // The caller prints `summary`, so a closed or full standard error is
    // handled in one place (main.rs).
    result
}

/// Notices, written files and (with `stats`) the per-block table.
pub fn summary(report: &RunReport, stats: bool) -> String {
    let mut s = String::new();
    for n in report.notices.iter().take(NOTICES_SHOWN) {
        let _ = writeln!(s, "notice: {} at sample {} ({:.6} s): {}", n.block, n.stamp.index, n.stamp.seconds(), n.what);
    }
    if report.notices.len() > NOTICES_SHOWN {
        let _ = writeln!(s, "notice: ... and {} more", report.notices.len() - NOTICES_SHOWN);
    }
    for w in &report.written {
        let _ = writeln!(s, "wrote {}", w.display());
    }
    if stats {
        let _ = writeln!(
            s,
            "{:<28} {:<22} {:>10} {:>14} {:>12} {:>10}",
            "block", "kind", "items", "samples", "MS/s busy", "busy s"
        );
        for b in &report.stats {
            let secs = b.busy.as_secs_f64();
            let rate = if secs > 0.0 { b.samples_in as f64 / secs / 1e6 } else { 0.0 };
            let items = b.items_in.max(b.items_out);
            let _ = writeln!(
                s,
                "{:<28} {:<22} {:>10} {:>14} {:>12.1} {:>10.3}",
                b.name, b.kind, items, b.samples_in, rate, secs
            );
        }
        let _ = writeln!(s, "elapsed {:.3} s", report.elapsed.as_secs_f64());
    }
    s
}
