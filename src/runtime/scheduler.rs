//! The scheduler: a small pool of worker threads running the blocks.
//!
//! Each wire is a bounded FIFO queue. A worker picks a block that can make
//! progress (an input item waiting and room downstream), takes it out, runs
//! one step without holding the lock, delivers the outputs and puts it back.
//! A block never runs on two workers at once and every queue is FIFO, so the
//! items every block sees, and therefore every output byte, are the same for
//! any number of workers. Several inputs of one block are merged in time
//! order (ties by port number), which is also independent of timing.
//!
//! Queues are bounded softly: a block runs only when its output queues have
//! room, which keeps memory flat however long the capture. When nothing can
//! run and nothing is running (a branching graph whose branches rejoin at
//! very different rates), the most downstream block that has input is allowed
//! to overfill its outputs once, so a graph never deadlocks.

use lobeflow_blocks::{Block, BlockError, Item, Notice, Outputs};
use std::collections::VecDeque;
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Condvar, Mutex};
use std::time::{Duration, Instant};

/// A block ready to be scheduled, with its wiring.
pub struct NodeSetup {
    pub name: String,
    pub kind: String,
    pub block: Box<dyn Block>,
    /// For each input port, the edge feeding it (None if unwired).
    pub inputs: Vec<Option<usize>>,
    /// For each output port, the edges it feeds.
    pub outputs: Vec<Vec<usize>>,
}

/// Counters for `--stats`.
#[derive(Clone, Debug, Default)]
pub struct BlockStats {
    pub name: String,
    pub kind: String,
    pub items_in: u64,
    pub samples_in: u64,
    pub items_out: u64,
    pub busy: Duration,
}

/// Why a run stopped early.
#[derive(Clone, Debug, PartialEq)]
pub enum StopReason {
    /// A block failed; the graph was stopped.
    Failed { block: String, kind: String, error: BlockError },
    /// The cancel flag was raised (Ctrl-C, or the embedding dropped its stream).
    Cancelled,
}

/// Called after each source step with (bytes done, bytes total).
pub type ProgressFn = Arc<dyn Fn(u64, u64) + Send + Sync>;

struct Node {
    name: Arc<str>,
    block: Option<Box<dyn Block>>,
    inputs: Vec<Option<usize>>,
    outputs: Vec<Vec<usize>>,
    running: bool,
    done: bool,
    stats: BlockStats,
}

struct Edge {
    queue: VecDeque<Item>,
    closed: bool,
}

struct State {
    nodes: Vec<Node>,
    edges: Vec<Edge>,
    /// Scan order: most downstream first, so queues drain before they fill.
    order: Vec<usize>,
    running: usize,
    /// Workers asleep on the condition variable (wake-ups cost a system call).
    idle: usize,
    done: usize,
    stop: Option<StopReason>,
    notices: Vec<Notice>,
}

enum Step {
    Generate,
    Process(usize, Item),
    Finish,
}

struct Shared {
    state: Mutex<State>,
    wake: Condvar,
    cancel: Arc<AtomicBool>,
    capacity: usize,
    progress: Option<ProgressFn>,
}

/// The result of a run: statistics and notices, and how it ended.
pub struct RunOutcome {
    pub stats: Vec<BlockStats>,
    pub notices: Vec<Notice>,
    pub stop: Option<StopReason>,
    pub elapsed: Duration,
}

/// Run the nodes to completion on `threads` workers.
pub fn run_nodes(
    setups: Vec<NodeSetup>,
    edge_count: usize,
    threads: usize,
    capacity: usize,
    cancel: Arc<AtomicBool>,
    progress: Option<ProgressFn>,
) -> RunOutcome {
    let start = Instant::now();
    let n = setups.len();
    let mut nodes = Vec::with_capacity(n);
    for s in setups {
        nodes.push(Node {
            name: Arc::from(s.name.as_str()),
            block: Some(s.block),
            inputs: s.inputs,
            outputs: s.outputs,
            running: false,
            done: false,
            stats: BlockStats { name: s.name, kind: s.kind, ..Default::default() },
        });
    }
    let order = downstream_first(&nodes, edge_count);
    let edges = (0..edge_count).map(|_| Edge { queue: VecDeque::new(), closed: false }).collect();
    let shared = Arc::new(Shared {
        state: Mutex::new(State { nodes, edges, order, running: 0, idle: 0, done: 0, stop: None, notices: Vec::new() }),
        wake: Condvar::new(),
        cancel,
        capacity: capacity.max(1),
        progress,
    });
    let workers: Vec<_> = (0..threads.max(1))
        .map(|_| {
            let sh = Arc::clone(&shared);
            std::thread::spawn(move || worker(&sh))
        })
        .collect();
    for w in workers {
        // A worker cannot panic (steps are caught), but never hang on join.
        let _ = w.join();
    }
    let mut st = shared.state.lock().unwrap_or_else(|e| e.into_inner());
    if st.stop.is_none() && shared.cancel.load(Ordering::SeqCst) && st.done < st.nodes.len() {
        st.stop = Some(StopReason::Cancelled);
    }
    RunOutcome {
        stats: st.nodes.iter().map(|nd| nd.stats.clone()).collect(),
        notices: std::mem::take(&mut st.notices),
        stop: st.stop.take(),
        elapsed: start.elapsed(),
    }
}

/// Topological order reversed (sinks first); nodes on no path keep their place.
fn downstream_first(nodes: &[Node], edge_count: usize) -> Vec<usize> {
    let mut edge_to = vec![usize::MAX; edge_count];
    for (i, nd) in nodes.iter().enumerate() {
        for e in nd.inputs.iter().flatten() {
            edge_to[*e] = i;
        }
    }
    let mut indeg: Vec<usize> = nodes.iter().map(|nd| nd.inputs.iter().flatten().count()).collect();
    let mut ready: VecDeque<usize> = (0..nodes.len()).filter(|&i| indeg[i] == 0).collect();
    let mut topo = Vec::new();
    while let Some(v) = ready.pop_front() {
        topo.push(v);
        for e in nodes[v].outputs.iter().flatten() {
            let u = edge_to[*e];
            if u != usize::MAX {
                indeg[u] -= 1;
                if indeg[u] == 0 {
                    ready.push_back(u);
                }
            }
        }
    }
    topo.reverse();
    topo
}

fn pick(st: &mut State, capacity: usize, relax: bool) -> Option<(usize, Step)> {
    for oi in 0..st.order.len() {
        let i = st.order[oi];
        let nd = &st.nodes[i];
        if nd.running || nd.done {
            continue;
        }
        let room = relax || nd.outputs.iter().flatten().all(|&e| st.edges[e].queue.len() < capacity);
        if !room {
            continue;
        }
        let wired: Vec<(usize, usize)> = nd.inputs.iter().enumerate().filter_map(|(p, e)| e.map(|e| (p, e))).collect();
        if wired.is_empty() {
            return Some((i, Step::Generate));
        }
        let open: Vec<(usize, usize)> =
            wired.into_iter().filter(|&(_, e)| !(st.edges[e].closed && st.edges[e].queue.is_empty())).collect();
        if open.is_empty() {
            return Some((i, Step::Finish));
        }
        if open.iter().any(|&(_, e)| st.edges[e].queue.is_empty()) {
            continue; // wait for every open input, so the merge is by time
        }
        let (port, edge) = open
            .iter()
            .copied()
            .min_by(|a, b| {
                let ta = st.edges[a.1].queue[0].stamp().seconds();
                let tb = st.edges[b.1].queue[0].stamp().seconds();
                ta.total_cmp(&tb).then(a.0.cmp(&b.0))
            })
            .expect("open is not empty");
        let item = st.edges[edge].queue.pop_front().expect("queue checked non-empty");
        return Some((i, Step::Process(port, item)));
    }
    None
}

fn worker(sh: &Shared) {
    loop {
        let mut st = sh.state.lock().unwrap_or_else(|e| e.into_inner());
        let (idx, step, mut block) = loop {
            if st.stop.is_some() || st.done == st.nodes.len() {
                sh.wake.notify_all();
                return;
            }
            if sh.cancel.load(Ordering::SeqCst) {
                st.stop.get_or_insert(StopReason::Cancelled);
                sh.wake.notify_all();
                return;
            }
            let picked = match pick(&mut st, sh.capacity, false) {
                Some(p) => Some(p),
                None if st.running == 0 => pick(&mut st, sh.capacity, true),
                None => None,
            };
            if let Some((i, step)) = picked {
                let nd = &mut st.nodes[i];
                nd.running = true;
                let block = nd.block.take().expect("a node not running holds its block");
                st.running += 1;
                break (i, step, block);
            }
            if st.running == 0 {
                // Nothing can run and nothing is running: a scheduler bug.
                let name = st.nodes.iter().find(|n| !n.done).map(|n| n.name.to_string()).unwrap_or_default();
                st.stop = Some(StopReason::Failed {
                    block: name,
                    kind: String::new(),
                    error: BlockError::new("the graph stalled (internal error)"),
                });
                sh.wake.notify_all();
                return;
            }
            st.idle += 1;
            st = sh.wake.wait_timeout(st, Duration::from_millis(100)).unwrap_or_else(|e| e.into_inner()).0;
            st.idle -= 1;
        };
        let n_out = st.nodes[idx].outputs.len();
        drop(st);

        let mut out = Outputs::new(n_out);
        let (items_in, samples_in) = match &step {
            Step::Process(_, item) => (1, item.sample_count() as u64),
            _ => (0, 0),
        };
        let t0 = Instant::now();
        let result = catch_unwind(AssertUnwindSafe(|| match step {
            Step::Generate => match block.generate(&mut out) {
                Ok(true) => Ok(false),
                Ok(false) => block.finish(&mut out).map(|_| true),
                Err(e) => Err(e),
            },
            Step::Process(port, item) => block.process(port, item, &mut out).map(|_| false),
            Step::Finish => block.finish(&mut out).map(|_| true),
        }));
        let busy = t0.elapsed();
        let progress = block.progress();

        let mut st = sh.state.lock().unwrap_or_else(|e| e.into_inner());
        let name = Arc::clone(&st.nodes[idx].name);
        let finished = match result {
            Ok(Ok(f)) => f,
            Ok(Err(error)) => {
                fail(&mut st, idx, error);
                false
            }
            Err(panic) => {
                let msg = panic
                    .downcast_ref::<String>()
                    .cloned()
                    .or_else(|| panic.downcast_ref::<&str>().map(|s| s.to_string()))
                    .unwrap_or_else(|| "unknown".into());
                fail(&mut st, idx, BlockError::new(format!("internal error (panic): {msg}")));
                false
            }
        };
        let mut items_out = 0;
        for (port, item) in out.drain() {
            let targets = &st.nodes[idx].outputs[port];
            let last = targets.len().saturating_sub(1);
            let targets: Vec<usize> = targets.clone();
            let mut item = Some(item);
            for (k, e) in targets.into_iter().enumerate() {
                let it =
                    if k == last { item.take().expect("moved once") } else { item.clone().expect("kept until last") };
                st.edges[e].queue.push_back(it);
            }
            items_out += 1;
        }
        for mut n in out.drain_notices() {
            n.block = Arc::clone(&name);
            st.notices.push(n);
        }
        let nd = &mut st.nodes[idx];
        nd.block = Some(block);
        nd.running = false;
        nd.stats.items_in += items_in;
        nd.stats.samples_in += samples_in;
        nd.stats.items_out += items_out;
        nd.stats.busy += busy;
        st.running -= 1;
        if finished {
            st.nodes[idx].done = true;
            st.done += 1;
            let outs: Vec<usize> = st.nodes[idx].outputs.iter().flatten().copied().collect();
            for e in outs {
                st.edges[e].closed = true;
            }
        }
        if st.idle > 0 {
            sh.wake.notify_all();
        }
        drop(st);
        if let (Some(p), Some((done, total))) = (&sh.progress, progress) {
            p(done, total);
        }
    }
}

fn fail(st: &mut State, idx: usize, error: BlockError) {
    if st.stop.is_none() {
        let nd = &st.nodes[idx];
        st.stop = Some(StopReason::Failed { block: nd.name.to_string(), kind: nd.stats.kind.clone(), error });
    }
}
