//! Running a resolved graph: build the blocks, wire the queues, schedule,
//! and commit the output files only if everything succeeded.

pub mod scheduler;

use crate::error::Error;
use crate::graph::ResolvedGraph;
use crossbeam_channel::Sender;
use futures::task::AtomicWaker;
use lobeflow_blocks::{Block, BlockError, BuildContext, FileStager, Item, Notice, Outputs, ParamType, Value};
pub use scheduler::BlockStats;
use scheduler::{NodeSetup, ProgressFn, StopReason, run_nodes};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
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
    /// Raise to stop the run (Ctrl-C).
    pub cancel: Arc<AtomicBool>,
    /// Called with (bytes done, bytes total) as sources read.
    pub progress: Option<ProgressFn>,
}

impl Default for RunOptions {
    fn default() -> Self {
        RunOptions {
            threads: std::thread::available_parallelism().map(|n| n.get()).unwrap_or(2),
            capacity: 4,
            out_dir: PathBuf::from("."),
            cancel: Arc::new(AtomicBool::new(false)),
            progress: None,
        }
    }
}

/// What a successful run did.
#[derive(Debug)]
pub struct RunReport {
    pub stats: Vec<BlockStats>,
    pub notices: Vec<Notice>,
    /// Output files, in the order they were committed.
    pub written: Vec<PathBuf>,
    pub elapsed: Duration,
}

/// A listener on one output port (used by the streaming API and tests).
pub struct Tap {
    /// `block.port` (port may be left out for a block's first output).
    pub port: String,
    pub sender: Sender<Item>,
    pub waker: Option<Arc<AtomicWaker>>,
}

struct TapBlock {
    /// Taken on drop, so the listener sees the channel closed before it is woken.
    sender: Option<Sender<Item>>,
    waker: Option<Arc<AtomicWaker>>,
    cancel: Arc<AtomicBool>,
}

impl Block for TapBlock {
    fn process(&mut self, _port: usize, item: Item, _out: &mut Outputs) -> Result<(), BlockError> {
        let sent = match &self.sender {
            Some(s) => s.send(item).is_ok(),
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

/// Resolve an output-path parameter against the output directory.
fn output_path(out_dir: &Path, p: &str) -> String {
    if Path::new(p).is_absolute() { p.to_string() } else { out_dir.join(p).to_string_lossy().into_owned() }
}

/// Run `graph` to the end. Output files appear only when it succeeds.
pub fn run(graph: &ResolvedGraph, opts: &RunOptions, taps: Vec<Tap>) -> Result<RunReport, Error> {
    std::fs::create_dir_all(&opts.out_dir)
        .map_err(|e| Error::Output(format!("cannot create output directory {}: {e}", opts.out_dir.display())))?;
    let files = FileStager::default();
    let mut setups = Vec::new();
    for b in &graph.blocks {
        let mut params = b.params.clone();
        for ps in b.spec.params {
            if let (ParamType::OutputPath, Some(Value::Text(p))) = (&ps.ty, params.get(ps.name)) {
                let resolved = output_path(&opts.out_dir, p);
                params.insert(ps.name, Value::Text(resolved));
            }
        }
        let ctx = BuildContext { name: b.name.clone(), out_dir: opts.out_dir.clone(), files: files.clone() };
        let block = (b.spec.build)(&params, &ctx).map_err(|message| Error::Block {
            block: b.name.clone(),
            kind: b.spec.kind.to_string(),
            message,
        })?;
        setups.push(NodeSetup {
            name: b.name.clone(),
            kind: b.spec.kind.to_string(),
            block,
            inputs: vec![None; b.spec.inputs.len()],
            outputs: vec![Vec::new(); b.spec.outputs.len()],
        });
    }
    let mut edges = 0;
    for w in &graph.wires {
        setups[w.to.0].inputs[w.to.1] = Some(edges);
        setups[w.from.0].outputs[w.from.1].push(edges);
        edges += 1;
    }
    for tap in taps {
        let (blk, port) = match tap.port.split_once('.') {
            Some((b, p)) => (b, Some(p)),
            None => (tap.port.as_str(), None),
        };
        let bi = graph.block_index(blk).ok_or_else(|| Error::Usage(format!("no block named '{blk}' to listen to")))?;
        let spec = &graph.blocks[bi].spec;
        let pi = match port {
            Some(p) => spec.outputs.iter().position(|o| o.name == p),
            None => (!spec.outputs.is_empty()).then_some(0),
        }
        .ok_or_else(|| Error::Usage(format!("block '{blk}' has no output port '{}'", port.unwrap_or("(any)"))))?;
        setups[bi].outputs[pi].push(edges);
        setups.push(NodeSetup {
            name: format!("listener:{}", tap.port),
            kind: "listener".into(),
            block: Box::new(TapBlock { sender: Some(tap.sender), waker: tap.waker, cancel: Arc::clone(&opts.cancel) }),
            inputs: vec![Some(edges)],
            outputs: Vec::new(),
        });
        edges += 1;
    }
    let outcome =
        run_nodes(setups, edges, opts.threads, opts.capacity, Arc::clone(&opts.cancel), opts.progress.clone());
    match outcome.stop {
        None => {
            let written = files.commit().map_err(|e| Error::Output(format!("cannot move outputs into place: {e}")))?;
            Ok(RunReport { stats: outcome.stats, notices: outcome.notices, written, elapsed: outcome.elapsed })
        }
        Some(StopReason::Cancelled) => {
            files.discard();
            Err(Error::Cancelled)
        }
        Some(StopReason::Failed { block, kind, error }) => {
            files.discard();
            Err(Error::Block { block, kind, message: error.to_string() })
        }
    }
}
