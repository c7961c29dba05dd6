//! `lobeflow run GRAPH`: run a graph on a capture, with progress, statistics
//! and a summary of what the blocks noticed. A live input (standard input, a
//! FIFO) can be stopped with Ctrl-C, SIGTERM or SIGHUP and keeps what was
//! done; a second signal stops at once and writes nothing.

use crate::capture::live::LiveMonitor;
use crate::error::Error;
use crate::graph::{Overrides, ResolvedGraph, resolve};
use crate::runtime::{Ending, RunOptions, RunReport, prepare};
use lobeflow_blocks::RawValue;
use std::fmt::Write;
use std::path::PathBuf;
use std::sync::Arc;
use std::sync::atomic::Ordering;
use std::time::{Duration, Instant};

pub struct RunArgs {
    pub graph: PathBuf,
    pub overrides: Overrides,
    pub out_dir: PathBuf,
    pub threads: Option<usize>,
    pub quiet: bool,
    pub stats: bool,
    /// Parameters set on every capture reader of the graph (`--format`,
    /// `--datatype`, `--rate`, `--channels`, `--roles`), as (name, value).
    pub capture: Vec<(&'static str, String)>,
    /// A table writer whose rows are printed on standard output.
    pub stream: Option<String>,
    pub stream_format: Option<String>,
}

/// Notices printed in full; the rest are counted.
const NOTICES_SHOWN: usize = 20;

/// Set `params` (name, value) on every capture reader of `graph`, each
/// checked by the reader's own declaration.
pub fn set_capture_options(graph: &mut ResolvedGraph, params: &[(&'static str, String)]) -> Result<(), Error> {
    let kind = crate::capture::source::SPEC.kind;
    let readers: Vec<usize> = (0..graph.blocks.len()).filter(|&i| graph.blocks[i].spec.kind == kind).collect();
    if !params.is_empty() && readers.is_empty() {
        return Err(Error::Usage(format!("--{} was given, but the graph has no {kind} block", params[0].0)));
    }
    for &i in &readers {
        let b = &mut graph.blocks[i];
        for (name, value) in params {
            let spec = b.spec.param(name).ok_or_else(|| Error::Usage(format!("{kind} has no parameter '{name}'")))?;
            let parsed = spec
                .parse(&RawValue::from_text(value))
                .map_err(|m| Error::Usage(format!("--{name} {value}: {m} ({})", spec.ty.describe())))?;
            b.params.insert_declared(spec, parsed);
            b.sources.insert(name.to_string(), format!("--{name}"));
        }
    }
    Ok(())
}

/// Run, print the summary to stderr, and return the report.
pub fn run_graph(args: &RunArgs) -> Result<RunReport, Error> {
    run_with_exit(args).0
}

/// Run as [`run_graph`] does; also returns the exit code a run stopped by a
/// signal ends with (128 + the signal, e.g. 130 for Ctrl-C, 143 for SIGTERM).
pub fn run_with_exit(args: &RunArgs) -> (Result<RunReport, Error>, Option<i32>) {
    let mut signal = None;
    let result = run_watched(args, &mut signal);
    let stopped = matches!(result, Err(Error::Cancelled) | Ok(RunReport { ending: Ending::CutShort { .. }, .. }));
    (result, signal.filter(|_| stopped).map(|sig| 128 + sig))
}

fn run_watched(args: &RunArgs, signal: &mut Option<i32>) -> Result<RunReport, Error> {
    let mut graph = resolve(&args.graph, &args.overrides, &crate::registry())?;
    if !args.quiet {
        eprint!("{}", crate::inspect::measured_settings(&graph.settings));
    }
    set_capture_options(&mut graph, &args.capture)?;
    let mut opts = RunOptions {
        out_dir: args.out_dir.clone(),
        stream_table: args.stream.clone(),
        stream_format: args.stream_format.clone(),
        page: true,
        ..RunOptions::default()
    };
    if let Some(t) = args.threads {
        opts.threads = t.max(1);
    }
    let show = !args.quiet && terminal::stderr_is_terminal();
    let progress = terminal::Progress::new(show);
    opts.progress = progress.callback();
    // Handlers first: a signal while the blocks are built is acted on as
    // soon as the watch starts.
    let before = signals::install();
    // The validation phase `check` shares: errors placed in the graph file.
    let prepared = prepare(&graph, &opts, Vec::new()).map_err(|e| super::check::place_error(&graph, e))?;
    let live = prepared.is_live();
    let watch = Watch::start(&opts, live, progress, args.stats && !args.quiet, before);
    let result = prepared.execute();
    *signal = watch.stop();
    // The caller prints `summary`, so a closed or full standard error is
    // handled in one place (main.rs).
    result
}

/// Watches for signals while a run goes, and keeps the progress line of a
/// live input (capture time and lag) up to date.
struct Watch {
    /// Dropped to stop the watcher: it wakes at once instead of at its next tick.
    done: Option<crossbeam_channel::Sender<()>>,
    thread: Option<std::thread::JoinHandle<Option<i32>>>,
}

/// How often the watcher looks for signals.
const WATCH_TICK: Duration = Duration::from_millis(10);
/// How often a live run's lag is shown.
const LAG_EVERY: Duration = Duration::from_millis(250);
/// How often `--stats` prints a lag line when stderr is not a terminal.
const LAG_LINE_EVERY: Duration = Duration::from_secs(1);

impl Watch {
    /// `before`: signals counted before this run's handlers were installed.
    fn start(opts: &RunOptions, live: bool, progress: terminal::Progress, stats: bool, before: u64) -> Watch {
        let (done, stopped) = crossbeam_channel::bounded::<()>(0);
        let (cancel, end_input, monitor) =
            (Arc::clone(&opts.cancel), Arc::clone(&opts.end_input), Arc::clone(&opts.live));
        let thread = std::thread::spawn(move || {
            let mut seen = before;
            let mut first_signal = None;
            let mut last_show = Instant::now();
            let mut last_line = Instant::now();
            while let Err(crossbeam_channel::RecvTimeoutError::Timeout) = stopped.recv_timeout(WATCH_TICK) {
                let (count, sig) = signals::received();
                if count > seen {
                    seen = count;
                    // The first signal ends a live input (what was done is
                    // kept); on a file, or the second time, stop at once.
                    if live && first_signal.is_none() {
                        end_input.store(true, Ordering::SeqCst);
                    } else {
                        cancel.store(true, Ordering::SeqCst);
                    }
                    first_signal.get_or_insert(sig);
                }
                if live && last_show.elapsed() >= LAG_EVERY {
                    last_show = Instant::now();
                    progress.live(&monitor);
                }
                if live && stats && !progress.shown() && last_line.elapsed() >= LAG_LINE_EVERY {
                    last_line = Instant::now();
                    // Nowhere to report a failed write of a progress line.
                    let line = format!("{}\n", live_line(&monitor));
                    let _ = std::io::Write::write_all(&mut std::io::stderr(), line.as_bytes());
                }
            }
            progress.finish();
            first_signal
        });
        Watch { done: Some(done), thread: Some(thread) }
    }

    /// Stop watching; returns the first signal that arrived, if any.
    fn stop(mut self) -> Option<i32> {
        drop(self.done.take());
        self.thread.take().and_then(|t| t.join().ok()).flatten()
    }
}

/// One line about a live input: capture time taken in, and the lag.
fn live_line(m: &LiveMonitor) -> String {
    let rate = m.rate();
    let frames = m.frames.load(Ordering::Relaxed);
    let secs = if rate > 0.0 { frames as f64 / rate } else { 0.0 };
    format!("live: {secs:.2} s of capture in (sample {frames}), processing {:.3} s behind", m.lag_s())
}

/// Notices, written files and (with `stats`) the per-block table.
pub fn summary(report: &RunReport, stats: bool) -> String {
    let mut s = String::new();
    for n in report.notices.iter().take(NOTICES_SHOWN) {
        let (kind, index, secs) = (n.severity.label(), n.stamp.index, n.stamp.seconds());
        let _ = writeln!(s, "{kind}: {} at sample {index} ({secs:.6} s): {}", n.block, n.what);
    }
    if report.notices.len() > NOTICES_SHOWN {
        let _ = writeln!(s, "notice: ... and {} more", report.notices.len() - NOTICES_SHOWN);
    }
    for r in &report.remarks {
        let _ = writeln!(s, "note: {r}");
    }
    match report.ending {
        Ending::Complete => {}
        Ending::InputClosed { at_sample, rate } => {
            let _ = writeln!(s, "the live input ended at sample {at_sample} ({:.6} s)", at_sample as f64 / rate);
        }
        Ending::CutShort { at_sample, rate } => {
            let _ = writeln!(
                s,
                "cut short: the run was stopped at sample {at_sample} ({:.6} s); the results up to there were written",
                at_sample as f64 / rate
            );
        }
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
        if let Some(lag) = report.max_lag_s {
            let _ = writeln!(s, "live input: processing was at most {lag:.3} s of capture behind it");
        }
        let _ = writeln!(s, "elapsed {:.3} s", report.elapsed.as_secs_f64());
    }
    s
}

/// The progress line, with or without the terminal crates.
#[cfg(feature = "cli")]
mod terminal {
    use crate::capture::live::LiveMonitor;
    use crate::runtime::scheduler::ProgressFn;
    use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
    use std::io::IsTerminal;
    use std::sync::Arc;

    pub fn stderr_is_terminal() -> bool {
        std::io::stderr().is_terminal()
    }

    /// A progress bar for files, a line of capture time and lag for live inputs.
    pub struct Progress {
        bar: ProgressBar,
        shown: bool,
    }

    impl Progress {
        pub fn new(show: bool) -> Progress {
            let bar = ProgressBar::with_draw_target(
                Some(0),
                if show { ProgressDrawTarget::stderr() } else { ProgressDrawTarget::hidden() },
            );
            bar.set_style(
                ProgressStyle::with_template("{bar:40} {bytes}/{total_bytes} {bytes_per_sec} eta {eta}")
                    .unwrap_or_else(|_| ProgressStyle::default_bar()),
            );
            Progress { bar, shown: show }
        }

        pub fn shown(&self) -> bool {
            self.shown
        }

        pub fn callback(&self) -> Option<ProgressFn> {
            let pb = self.bar.clone();
            Some(Arc::new(move |done, total| {
                pb.set_length(total);
                pb.set_position(done);
            }))
        }

        pub fn live(&self, monitor: &LiveMonitor) {
            if self.shown {
                self.bar
                    .set_style(ProgressStyle::with_template("{msg}").unwrap_or_else(|_| ProgressStyle::default_bar()));
                self.bar.set_message(super::live_line(monitor));
            }
        }

        pub fn finish(&self) {
            self.bar.finish_and_clear();
        }
    }
}

/// Without the terminal crates: no progress line.
#[cfg(not(feature = "cli"))]
mod terminal {
    use crate::capture::live::LiveMonitor;
    use crate::runtime::scheduler::ProgressFn;

    pub fn stderr_is_terminal() -> bool {
        false
    }

    pub struct Progress;

    impl Progress {
        pub fn new(_show: bool) -> Progress {
            Progress
        }
        pub fn shown(&self) -> bool {
            false
        }
        pub fn callback(&self) -> Option<ProgressFn> {
            None
        }
        pub fn live(&self, _: &LiveMonitor) {}
        pub fn finish(&self) {}
    }
}

/// SIGINT, SIGTERM and SIGHUP: counted by a handler that only stores
/// atomics (all a signal handler may do); the watcher thread acts on them.
mod signals {
    use std::sync::atomic::{AtomicI32, AtomicU64, Ordering};

    static COUNT: AtomicU64 = AtomicU64::new(0);
    static LAST: AtomicI32 = AtomicI32::new(0);

    /// Signals received so far, and the last one.
    pub fn received() -> (u64, i32) {
        (COUNT.load(Ordering::SeqCst), LAST.load(Ordering::SeqCst))
    }

    #[cfg(unix)]
    extern "C" fn on_signal(sig: libc::c_int) {
        LAST.store(sig, Ordering::SeqCst);
        COUNT.fetch_add(1, Ordering::SeqCst);
    }

    /// Install the handlers (again: harmless); returns the count so far.
    #[cfg(unix)]
    #[allow(unsafe_code)] // sigaction: SIGHUP too, which the ctrlc crate does not offer
    pub fn install() -> u64 {
        for sig in [libc::SIGINT, libc::SIGTERM, libc::SIGHUP] {
            // SAFETY: the handler only touches atomics, which is
            // async-signal-safe; SA_RESTART keeps blocking reads going.
            unsafe {
                let mut action: libc::sigaction = std::mem::zeroed();
                action.sa_sigaction = on_signal as extern "C" fn(libc::c_int) as libc::sighandler_t;
                action.sa_flags = libc::SA_RESTART;
                libc::sigemptyset(&mut action.sa_mask);
                libc::sigaction(sig, &action, std::ptr::null_mut());
            }
        }
        COUNT.load(Ordering::SeqCst)
    }

    /// Elsewhere Ctrl-C is all there is (through the `ctrlc` crate, with the CLI).
    #[cfg(not(unix))]
    pub fn install() -> u64 {
        #[cfg(feature = "cli")]
        let _ = ctrlc::set_handler(|| {
            LAST.store(2, Ordering::SeqCst);
            COUNT.fetch_add(1, Ordering::SeqCst);
        });
        COUNT.load(Ordering::SeqCst)
    }
}
