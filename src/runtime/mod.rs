//! Running a resolved graph: build the blocks, wire the queues, schedule,
//! and commit the output files only if everything succeeded.

pub(crate) mod outputs;
pub(crate) mod scheduler;
pub mod staging;

use crate::capture;
use crate::capture::live::{LiveEnd, LiveMonitor, PushedInput};
use crate::error::Error;
use crate::graph::ResolvedGraph;
use crate::report;
use crossbeam_channel::Sender;
use futures::task::AtomicWaker;
use lobeflow_blocks::summary::EstimateSummary;
use lobeflow_blocks::{
    BlockError, BuildContext, BuildError, DeliveryPolicy, Facts, FileStager, Item, ItemKind, NoPorts, Notice, Outputs,
    ParamType, StreamFacts, TypedBlock, Value, typed,
};
pub use scheduler::BlockStats;
use scheduler::{NodeSetup, ProgressFn, StopReason, run_nodes};
use staging::Staging;
use std::path::PathBuf;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;

/// How to run a graph.
#[derive(Clone)]
pub struct RunOptions {
    /// Worker threads (results are identical for any count).
    pub threads: usize,
    /// Items each wire may hold before its producer waits.
    pub capacity: usize,
    /// Where output files go.
    pub out_dir: PathBuf,
    /// Write the output files; when false they are computed and dropped
    /// (tables printed on standard output still print).
    pub write_files: bool,
    /// Raise to stop the run at once; nothing is written (a second Ctrl-C).
    pub cancel: Arc<AtomicBool>,
    /// Raise to end live inputs as if they had closed: the graph finishes
    /// with what it has and writes it (Ctrl-C on a live run).
    pub end_input: Arc<AtomicBool>,
    /// Called with (bytes done, bytes total) as sources read.
    pub progress: Option<ProgressFn>,
    /// A table writer whose rows are also printed on standard output.
    pub stream_table: Option<String>,
    /// The printed table's format (`csv` or `jsonl`); default the table's own.
    pub stream_format: Option<String>,
    /// Samples pushed from memory into capture readers (by block name).
    pub pushed: Vec<PushedInput>,
    /// Progress and lag of a live input, for a progress line.
    pub live: Arc<LiveMonitor>,
    /// Also write `report.html` (the run's page) with the outputs.
    pub page: bool,
}

impl Default for RunOptions {
    fn default() -> Self {
        RunOptions {
            threads: std::thread::available_parallelism().map(|n| n.get()).unwrap_or(2),
            capacity: 4,
            out_dir: PathBuf::from("."),
            write_files: true,
            cancel: Arc::new(AtomicBool::new(false)),
            end_input: Arc::new(AtomicBool::new(false)),
            progress: None,
            stream_table: None,
            stream_format: None,
            pushed: Vec::new(),
            live: Arc::new(LiveMonitor::default()),
            page: false,
        }
    }
}

/// How a run that produced its outputs came to its end.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Ending {
    /// The input was read to its end (a file).
    Complete,
    /// A live input closed (the pipe's writer finished) at this sample.
    InputClosed { at_sample: u64, rate: f64 },
    /// The run was asked to stop (a signal, or the application) while its
    /// live input was still open; what was done up to this sample is kept.
    CutShort { at_sample: u64, rate: f64 },
}

/// What a run that wrote its outputs did.
#[derive(Debug)]
pub struct RunReport {
    pub stats: Vec<BlockStats>,
    pub notices: Vec<Notice>,
    /// Output files, in the order they were committed.
    pub written: Vec<PathBuf>,
    pub elapsed: Duration,
    pub ending: Ending,
    /// Notes about the run itself (staging left by an earlier run removed,
    /// processing falling behind a live input).
    pub remarks: Vec<String>,
    /// A live input: the largest lag of processing behind it, capture seconds.
    pub max_lag_s: Option<f64>,
}

/// A listener on one output port (used by the streaming API and tests).
pub struct Tap {
    /// `block.port` (port may be left out for a block's first output).
    pub port: String,
    /// Receives (this tap's `index`, item).
    pub sender: Sender<(usize, Item)>,
    /// Told apart from other taps on the same channel by this.
    pub index: usize,
    pub waker: Option<Arc<AtomicWaker>>,
}

struct TapBlock {
    /// Taken on drop, so the listener sees the channel closed before it is woken.
    sender: Option<Sender<(usize, Item)>>,
    index: usize,
    waker: Option<Arc<AtomicWaker>>,
    cancel: Arc<AtomicBool>,
}

lobeflow_blocks::block_ports! {
    /// A listener's one input; it takes whatever the port it listens to
    /// carries (listeners are attached by the run, outside wiring checks).
    inputs enum TapIn { Items = required("items", ItemKind::Samples, "the items of the port listened to") }
}

impl TypedBlock for TapBlock {
    type Settings = ();
    type In = TapIn;
    type Out = NoPorts;

    fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
        attached_by_run()
    }

    fn process(&mut self, port: TapIn, item: Item, _out: &mut Outputs) -> Result<(), BlockError> {
        let TapIn::Items = port;
        let sent = match &self.sender {
            Some(s) => s.send((self.index, item)).is_ok(),
            None => false,
        };
        if let Some(w) = &self.waker {
            w.wake();
        }
        if !sent {
            // The listener went away: stop the run quietly.
            self.cancel.store(true, Ordering::SeqCst);
        }
        Ok(())
    }
}

impl Drop for TapBlock {
    fn drop(&mut self) {
        // Close the channel first: a listener woken while it is still open
        // would find it empty, go back to sleep, and never hear the end.
        drop(self.sender.take());
        if let Some(w) = &self.waker {
            w.wake();
        }
    }
}

/// The constructor of a block the run attaches itself (a listener, the
/// report's summary, a test's blocks): none is declared in a graph.
pub(crate) fn attached_by_run<B>() -> Result<B, BuildError> {
    Err(BuildError::Refused("this block is attached by the run, not declared in a graph".into()))
}

/// A lag above this many capture seconds is reported as falling behind.
const BEHIND_S: f64 = 1.0;

/// A graph with its blocks built and its output folder ready: every error
/// that can be found before samples flow has been found.
pub struct PreparedRun {
    setups: Vec<NodeSetup>,
    edges: usize,
    opts: RunOptions,
    files: FileStager,
    live: bool,
    remarks: Vec<String>,
    /// Removed (with any unfinished files) when the run is over.
    staging: Staging,
    /// The graph and the estimate summary its page is made from.
    page: Option<(Box<ResolvedGraph>, Arc<Mutex<EstimateSummary>>)>,
}

/// True when a capture reader of the graph reads a live input.
fn has_live_input(graph: &ResolvedGraph, opts: &RunOptions) -> bool {
    graph.blocks.iter().any(|b| {
        b.spec.kind == capture::source::SPEC.kind
            && (opts.pushed.iter().any(|p| p.block == b.name)
                || matches!(b.params.get("path"), Some(Value::Text(p)) if capture::reader::is_pipe(p)))
    })
}

/// Build the blocks and wire them, check the outputs and make the staging
/// folder. Nothing has been read or written yet.
pub fn prepare(graph: &ResolvedGraph, opts: &RunOptions, taps: Vec<Tap>) -> Result<PreparedRun, Error> {
    for p in &opts.pushed {
        match graph.block_index(&p.block) {
            Some(i) if graph.blocks[i].spec.kind == capture::source::SPEC.kind => {}
            _ => {
                return Err(Error::Usage(format!(
                    "samples are pushed into '{}', but the graph has no capture_reader of that name",
                    p.block
                )));
            }
        }
    }
    if let Some(f) = opts.stream_format.as_deref().filter(|f| !matches!(*f, "csv" | "jsonl")) {
        return Err(Error::Usage(format!("unknown table format '{f}' to print (known: csv, jsonl)")));
    }
    let mut remarks = Vec::new();
    let staging_root = if opts.write_files {
        std::fs::create_dir_all(&opts.out_dir)
            .map_err(Error::io(format!("cannot create output directory {}", opts.out_dir.display())))?;
        outputs::check_outputs(graph, &opts.out_dir, opts.stream_table.as_deref())?;
        remarks.extend(staging::remove_stale(&opts.out_dir));
        opts.out_dir.clone()
    } else {
        // Outputs are computed and dropped: stage them where nobody looks.
        outputs::check_printed_tables(graph, opts.stream_table.as_deref())?;
        std::env::temp_dir()
    };
    let staging =
        Staging::create(&staging_root).map_err(Error::io("cannot make the staging folder for the outputs"))?;
    let live = has_live_input(graph, opts);
    let policy = DeliveryPolicy {
        live,
        echo_table: opts.stream_table.clone(),
        echo_format: opts.stream_format.clone(),
        end_input: Arc::clone(&opts.end_input),
    };
    let files = FileStager::in_folder(staging.dir().to_path_buf(), policy);
    let mut setups = build_nodes(graph, opts, &files)?;
    let mut edges = 0;
    for w in &graph.wires {
        setups[w.to.0].inputs[w.to.1] = Some(edges);
        setups[w.from.0].outputs[w.from.1].push(edges);
        edges += 1;
    }
    start_blocks(graph, &mut setups)?;
    for tap in taps {
        let (bi, pi) = tap_place(graph, &tap.port)?;
        setups[bi].outputs[pi].push(edges);
        setups.push(NodeSetup {
            name: format!("listener:{}", tap.port),
            kind: "listener".into(),
            block: typed::boxed(TapBlock {
                sender: Some(tap.sender),
                index: tap.index,
                waker: tap.waker,
                cancel: Arc::clone(&opts.cancel),
            }),
            inputs: vec![Some(edges)],
            outputs: Vec::new(),
        });
        edges += 1;
    }
    let page = (opts.page && opts.write_files).then(|| {
        let summary = Arc::new(Mutex::new(EstimateSummary::default()));
        for (bi, pi) in report::final_estimate_ports(graph) {
            setups[bi].outputs[pi].push(edges);
            setups.push(NodeSetup {
                name: format!("report-summary:{}", graph.blocks[bi].name),
                kind: "report_summary".into(),
                block: typed::boxed(report::SummaryTap { summary: Arc::clone(&summary) }),
                inputs: vec![Some(edges)],
                outputs: Vec::new(),
            });
            edges += 1;
        }
        (Box::new(graph.clone()), summary)
    });
    Ok(PreparedRun { setups, edges, opts: opts.clone(), files, live, remarks, staging, page })
}

/// Build every block of the graph, output paths resolved against the output folder.
fn build_nodes(graph: &ResolvedGraph, opts: &RunOptions, files: &FileStager) -> Result<Vec<NodeSetup>, Error> {
    let mut setups = Vec::new();
    for b in &graph.blocks {
        let mut params = b.params.clone();
        for ps in b.spec.params {
            if let (ParamType::OutputPath, Some(Value::Text(p))) = (&ps.ty, params.get(ps.name)) {
                let resolved = outputs::output_path(&opts.out_dir, p.trim());
                params.insert(ps.name, Value::Text(resolved));
            }
        }
        let ctx = BuildContext { name: b.name.clone(), out_dir: opts.out_dir.clone(), files: files.clone() };
        let built = if b.spec.kind == capture::source::SPEC.kind {
            let hooks = capture::source::RunHooks {
                pushed: opts.pushed.iter().find(|p| p.block == b.name).cloned(),
                monitor: Some(Arc::clone(&opts.live)),
            };
            capture::source::build_in_run(&params, &ctx, &hooks)
        } else {
            (b.spec.build)(&params, &ctx)
        };
        let block = built.map_err(|e| Error::Block {
            block: b.name.clone(),
            kind: b.spec.kind.to_string(),
            message: e.to_string(),
        })?;
        setups.push(NodeSetup {
            name: b.name.clone(),
            kind: b.spec.kind.to_string(),
            block,
            inputs: vec![None; b.spec.inputs.len()],
            outputs: vec![Vec::new(); b.spec.outputs.len()],
        });
    }
    Ok(setups)
}

/// Hand every block the facts of its inputs, sources first, so each learns
/// the rate, pulse interval and lobes before any sample flows (and refuses a
/// setting they make impossible, for `check` as for `run`).
fn start_blocks(graph: &ResolvedGraph, setups: &mut [NodeSetup]) -> Result<(), Error> {
    let n = graph.blocks.len();
    let mut waiting: Vec<usize> = vec![0; n];
    for w in &graph.wires {
        waiting[w.to.0] += 1;
    }
    let mut ready: Vec<usize> = (0..n).rev().filter(|&b| waiting[b] == 0).collect();
    let mut facts: Vec<Option<StreamFacts>> = vec![None; n];
    while let Some(b) = ready.pop() {
        let mut inputs = vec![StreamFacts::default(); graph.blocks[b].spec.inputs.len()];
        for w in graph.wires.iter().filter(|w| w.to.0 == b) {
            inputs[w.to.1] = facts[w.from.0].clone().unwrap_or_default();
        }
        let started = setups[b].block.start(&Facts::new(&inputs)).map_err(|e| Error::Block {
            block: graph.blocks[b].name.clone(),
            kind: graph.blocks[b].spec.kind.to_string(),
            message: e.to_string(),
        })?;
        facts[b] = Some(started);
        for w in graph.wires.iter().filter(|w| w.from.0 == b) {
            waiting[w.to.0] -= 1;
            if waiting[w.to.0] == 0 {
                ready.push(w.to.0);
            }
        }
    }
    Ok(())
}

/// The (block, output port) a listener names: `block.port`, or `block` for its first output.
fn tap_place(graph: &ResolvedGraph, port: &str) -> Result<(usize, usize), Error> {
    let (blk, port) = match port.split_once('.') {
        Some((b, p)) => (b, Some(p)),
        None => (port, None),
    };
    let bi = graph.block_index(blk).ok_or_else(|| Error::Usage(format!("no block named '{blk}' to listen to")))?;
    let spec = &graph.blocks[bi].spec;
    let names: Vec<&str> = spec.outputs.iter().map(|o| o.name).collect();
    let pi = match port {
        Some(p) => spec.outputs.iter().position(|o| o.name == p),
        None => (!spec.outputs.is_empty()).then_some(0),
    };
    pi.map(|pi| (bi, pi)).ok_or_else(|| {
        let has = if names.is_empty() { "no outputs".to_string() } else { format!("outputs {}", names.join(", ")) };
        Error::Usage(format!(
            "block '{blk}' ({}) has no output port '{}'; it has {has}",
            spec.kind,
            port.unwrap_or("(any)")
        ))
    })
}

impl PreparedRun {
    /// True when the graph reads a live input (a pipe, a FIFO, pushed samples).
    pub fn is_live(&self) -> bool {
        self.live
    }

    /// Run to the end. Output files appear only when it succeeds (or when a
    /// live input was stopped: then what was done is written).
    pub fn execute(self) -> Result<RunReport, Error> {
        let PreparedRun { setups, edges, opts, files, live, mut remarks, staging, page } = self;
        let outcome =
            run_nodes(setups, edges, opts.threads, opts.capacity, Arc::clone(&opts.cancel), opts.progress.clone());
        let result = match outcome.stop {
            None => {
                let ending = match opts.live.ended() {
                    Some((LiveEnd::Stopped, at)) => Ending::CutShort { at_sample: at, rate: opts.live.rate() },
                    Some((LiveEnd::Closed, at)) => Ending::InputClosed { at_sample: at, rate: opts.live.rate() },
                    None => Ending::Complete,
                };
                let max_lag_s = live.then(|| opts.live.max_lag_s());
                if let Some(lag) = max_lag_s.filter(|l| *l > BEHIND_S) {
                    remarks.push(format!(
                        "processing fell behind the live input by up to {lag:.2} s of capture; a real-time receiver may have dropped samples"
                    ));
                }
                if let Some((graph, summary)) = &page {
                    let summary = summary.lock().unwrap_or_else(|e| e.into_inner());
                    let facts = report::RunFacts {
                        graph,
                        notices: &outcome.notices,
                        remarks: &remarks,
                        ending,
                        summary: &summary,
                        files: &files.staged_paths(),
                        out_dir: &opts.out_dir,
                    };
                    if let Err(e) = write_page(&report::run_page(&facts), &opts.out_dir, &files) {
                        files.discard();
                        drop(staging);
                        return Err(e);
                    }
                }
                let written = if opts.write_files {
                    files.commit().map_err(|e| {
                        Error::Output(format!("cannot move outputs into place: {e}; no outputs were written"))
                    })?
                } else {
                    files.discard();
                    Vec::new()
                };
                Ok(RunReport {
                    stats: outcome.stats,
                    notices: outcome.notices,
                    written,
                    elapsed: outcome.elapsed,
                    ending,
                    remarks,
                    max_lag_s,
                })
            }
            Some(StopReason::Cancelled) => {
                files.discard();
                Err(Error::Cancelled)
            }
            Some(StopReason::Failed { block, kind, error }) => {
                files.discard();
                Err(Error::Block { block, kind, message: error.to_string() })
            }
        };
        drop(staging);
        result
    }
}

/// Stage the run's page beside its other outputs.
fn write_page(html: &str, out_dir: &std::path::Path, files: &FileStager) -> Result<(), Error> {
    let path = out_dir.join(report::PAGE_NAME);
    let err =
        |e: std::io::Error| Error::Output(format!("cannot write {}: {e}; no outputs were written", path.display()));
    let mut f = files.create(&path).map_err(err)?;
    std::io::Write::write_all(f.writer(), html.as_bytes()).map_err(err)?;
    f.finish(files).map_err(err)
}

/// Run `graph` to the end. Output files appear only when it succeeds.
pub fn run(graph: &ResolvedGraph, opts: &RunOptions, taps: Vec<Tap>) -> Result<RunReport, Error> {
    prepare(graph, opts, taps)?.execute()
}
