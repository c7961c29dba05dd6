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
//! A worker takes up to `MAX_BATCH` queued items of a block (at most about
//! four default capture chunks of samples) under one lock acquisition and runs them in
//! order, so small items (sweeps, dwells) do not pay a lock round trip and a
//! wake-up each; after delivering it picks its next block under the same lock.
//! A sleeping worker is woken only when the ready work, at each block's recent
//! cost per step, is enough to share; otherwise the awake one runs it alone.
//! A worker that finds nothing to do watches for new work for a moment
//! (up to `SPIN_FOR`, shorter after watches that found nothing) before it
//! sleeps.
//!
//! Queues are bounded softly: a block runs only when its output queues have
//! room (a batch may overfill them by its own outputs), which keeps memory
//! flat however long the capture. When nothing can
//! run and nothing is running (a branching graph whose branches rejoin at
//! very different rates), the most downstream block that has input is allowed
//! to overfill its outputs once, so a graph never deadlocks.

use lobeflow_blocks::{Block, BlockError, Item, Notice, Outputs};
use std::collections::VecDeque;
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::{Arc, Condvar, Mutex, MutexGuard};
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

/// Items one step may take from a block's inputs: about the sweeps of one
/// capture chunk, so a pulsed chain hands work between workers about once
/// per chunk (64 measured slower on two workers: 2.5x the wake-ups).
const MAX_BATCH: usize = 256;
/// A merge waits for a starved input until another of its queues holds this
/// many times the queue bound (see `take_step`).
const STARVED_MERGE_FACTOR: usize = 64;
/// A batch stops growing once it holds this many samples (four default capture chunks).
const MAX_BATCH_SAMPLES: usize = 1 << 16;
/// A sleeping worker is woken only when it would save at least this much of
/// the work ready now (see [`helper_gain`]): a wake-up, the sleep after it and
/// items handed between cores cost microseconds, so sharing a pass-through
/// (a 50 us capture read beside 0.1 us pass and discard steps) only loses time.
const WAKE_WORTH: Duration = Duration::from_micros(3);
/// How long a worker that found nothing to do watches for work before it
/// sleeps: a few capture reads, the usual wait in a chain. (Waking a sleeping
/// worker took up to 4 ms on a virtual machine; at 50 us a worker often fell
/// asleep just before a read ended.)
const SPIN_FOR: Duration = Duration::from_micros(200);
/// The shortest watch: after watches that found nothing a worker halves its
/// next one down to this, so a worker with nothing to do mostly sleeps
/// instead of burning a core another thread (or process) could use.
const SPIN_MIN: Duration = Duration::from_micros(25);

struct Node {
    name: Arc<str>,
    block: Option<Box<dyn Block>>,
    inputs: Vec<Option<usize>>,
    /// (port, edge) of every wired input, in port order.
    wired: Vec<(usize, usize)>,
    outputs: Vec<Vec<usize>>,
    /// Every edge any output feeds.
    out_edges: Vec<usize>,
    running: bool,
    done: bool,
    /// Recent time per step (moving average); None before the first step.
    step_cost: Option<Duration>,
    stats: BlockStats,
}

struct Edge {
    queue: VecDeque<Item>,
    closed: bool,
    /// The node that reads this wire.
    consumer: usize,
    /// The consumer has all it needs (`Block::wants_input` turned false):
    /// items for it are dropped instead of queued.
    unwanted: bool,
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
    /// Process the items gathered in the worker's batch, in order.
    Process,
    Finish,
}

struct Shared {
    state: Mutex<State>,
    wake: Condvar,
    /// Bumped whenever a step ends (new work may be ready), so a worker that
    /// found nothing can watch for work without the lock.
    changes: AtomicU64,
    /// Workers in the pool; a lone worker has no one to wait for.
    threads: usize,
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
            wired: s.inputs.iter().enumerate().filter_map(|(p, e)| e.map(|e| (p, e))).collect(),
            out_edges: s.outputs.iter().flatten().copied().collect(),
            inputs: s.inputs,
            outputs: s.outputs,
            running: false,
            done: false,
            step_cost: None,
            stats: BlockStats { name: s.name, kind: s.kind, ..Default::default() },
        });
    }
    let order = downstream_first(&nodes, edge_count);
    let mut edges: Vec<Edge> = (0..edge_count)
        .map(|_| Edge { queue: VecDeque::new(), closed: false, consumer: usize::MAX, unwanted: false })
        .collect();
    for (i, nd) in nodes.iter().enumerate() {
        for &(_, e) in &nd.wired {
            edges[e].consumer = i;
        }
    }
    let shared = Arc::new(Shared {
        state: Mutex::new(State { nodes, edges, order, running: 0, idle: 0, done: 0, stop: None, notices: Vec::new() }),
        wake: Condvar::new(),
        changes: AtomicU64::new(0),
        threads: threads.max(1),
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

/// The first block (most downstream first) that can make progress. For a
/// `Process` step its items are moved into `batch`.
fn pick(st: &mut State, capacity: usize, relax: bool, batch: &mut Vec<(usize, Item)>) -> Option<(usize, Step)> {
    for oi in 0..st.order.len() {
        let i = st.order[oi];
        if let Some(step) = take_step(st, i, capacity, relax, batch) {
            return Some((i, step));
        }
    }
    None
}

/// Time a second worker would save on the work ready now: the step just
/// picked (`picked`) plus every other ready block's, at their recent cost per
/// step. Alone one worker needs the sum; two need at least half of it and at
/// least the longest step, so the gain is the smaller of (sum - longest) and
/// half the sum. Quick blocks beside one long one (a pass and a discard
/// beside a capture read) gain almost nothing, and waking a worker for them
/// costs more than it saves.
fn helper_gain(st: &State, picked: usize, capacity: usize) -> Duration {
    // Before its first step a block's cost is unknown: assume it is worth sharing.
    let cost = |i: usize| st.nodes[i].step_cost.unwrap_or(WAKE_WORTH * 4);
    let mut sum = cost(picked);
    let mut longest = sum;
    for &i in &st.order {
        if ready(st, i, capacity) {
            let c = cost(i);
            sum += c;
            longest = longest.max(c);
        }
    }
    (sum - longest).min(sum / 2)
}

/// Whether wire `e` holds back its producer. A wire at its bound whose
/// consumer is a merge waiting for another, empty input does not, up to
/// the starved-merge limit: the merge cannot take from it until the other
/// input delivers, and that input is often fed by the same producer further
/// up (a picture merging thinned sweeps with the range gate's per-dwell
/// rows). Holding the producer back there stalled the graph into the
/// one-item-at-a-time stall breaker. The merge order is unchanged.
fn holds_back(nodes: &[Node], edges: &[Edge], e: usize, capacity: usize) -> bool {
    let len = edges[e].queue.len();
    if len < capacity {
        return false;
    }
    if len >= capacity * STARVED_MERGE_FACTOR {
        return true;
    }
    let consumer = edges[e].consumer;
    let waiting_elsewhere = consumer != usize::MAX
        && nodes[consumer]
            .wired
            .iter()
            .any(|&(_, other)| other != e && edges[other].queue.is_empty() && !edges[other].closed);
    !waiting_elsewhere
}

fn ready(st: &State, i: usize, capacity: usize) -> bool {
    let nd = &st.nodes[i];
    if nd.running || nd.done || nd.out_edges.iter().any(|&e| holds_back(&st.nodes, &st.edges, e, capacity)) {
        return false;
    }
    // A source, a block whose inputs all ended (finish), or one with an item on every open input.
    nd.wired.iter().all(|&(_, e)| !st.edges[e].queue.is_empty() || st.edges[e].closed)
}

/// What block `i` can do now, if anything. Items are taken one merge
/// decision at a time, exactly as single steps would take them: an item is
/// taken only while every open input has one, the earliest first (ties by
/// port), so the order a block sees is independent of timing and batching.
fn take_step(st: &mut State, i: usize, capacity: usize, relax: bool, batch: &mut Vec<(usize, Item)>) -> Option<Step> {
    let State { nodes, edges, .. } = st;
    let nd = &nodes[i];
    if nd.running || nd.done {
        return None;
    }
    if !relax && nd.out_edges.iter().any(|&e| holds_back(nodes, edges, e, capacity)) {
        return None;
    }
    if nd.wired.is_empty() {
        return Some(Step::Generate);
    }
    // Overfilling to break a stall moves a single item.
    let max_items = if relax { 1 } else { MAX_BATCH };
    let mut samples = 0;
    if let [(port, e)] = nd.wired[..] {
        // One input: no merge to decide, take items in queue order.
        let queue = &mut edges[e].queue;
        if queue.is_empty() {
            return edges[e].closed.then_some(Step::Finish);
        }
        while batch.len() < max_items && samples < MAX_BATCH_SAMPLES {
            let Some(item) = queue.pop_front() else { break };
            samples += item.sample_count();
            batch.push((port, item));
        }
        return Some(Step::Process);
    }
    // Breaking a stall, a merge whose other inputs have piled up far past
    // their bound stops waiting for a starved input (one that may never
    // produce, e.g. notices that never come): otherwise the stall breaker
    // would overfill the piled-up queue one item at a time without end.
    // Only this pathological case gives up the strict time order.
    let starved_ok = relax && nd.wired.iter().any(|&(_, e)| edges[e].queue.len() >= capacity * STARVED_MERGE_FACTOR);
    while batch.len() < max_items && samples < MAX_BATCH_SAMPLES {
        let mut earliest: Option<(usize, usize, f64)> = None;
        let mut waiting = false;
        for &(port, e) in &nd.wired {
            let ed = &edges[e];
            match ed.queue.front() {
                Some(item) => {
                    let t = item.stamp().seconds();
                    if earliest.is_none_or(|(_, _, best)| t.total_cmp(&best).is_lt()) {
                        earliest = Some((port, e, t));
                    }
                }
                None if ed.closed || starved_ok => {}
                None => {
                    waiting = true; // wait for every open input, so the merge is by time
                    break;
                }
            }
        }
        if waiting {
            break;
        }
        let Some((port, e, _)) = earliest else {
            if starved_ok && nd.wired.iter().any(|&(_, e)| !edges[e].closed) {
                break;
            }
            // Every input has ended and is drained.
            if batch.is_empty() {
                return Some(Step::Finish);
            }
            break;
        };
        let Some(item) = edges[e].queue.pop_front() else { break };
        samples += item.sample_count();
        batch.push((port, item));
    }
    if batch.is_empty() { None } else { Some(Step::Process) }
}

/// A block taken out of the state to run one step.
struct Claimed {
    idx: usize,
    step: Step,
    block: Box<dyn Block>,
}

fn lock(sh: &Shared) -> MutexGuard<'_, State> {
    sh.state.lock().unwrap_or_else(|e| e.into_inner())
}

fn worker(sh: &Shared) {
    let mut batch: Vec<(usize, Item)> = Vec::with_capacity(MAX_BATCH);
    let mut spin_for = SPIN_FOR;
    let mut st = lock(sh);
    loop {
        let claimed;
        (st, claimed) = claim(sh, st, &mut batch, &mut spin_for);
        let Some(Claimed { idx, step, mut block }) = claimed else {
            return;
        };
        let n_out = st.nodes[idx].outputs.len();
        drop(st);

        let mut out = Outputs::new(n_out);
        let t0 = Instant::now();
        let (result, items_in, samples_in) = run_step(block.as_mut(), step, &mut batch, &mut out);
        // Items left after a failure are dropped with the run.
        batch.clear();
        let busy = t0.elapsed();
        let progress = block.progress();
        let satisfied = !block.wants_input();

        st = lock(sh);
        let finished = result.unwrap_or_else(|error| {
            fail(&mut st, idx, error);
            false
        });
        let items_out = deliver(&mut st, idx, &mut out);
        let nd = &mut st.nodes[idx];
        nd.block = Some(block);
        nd.running = false;
        nd.stats.items_in += items_in;
        nd.stats.samples_in += samples_in;
        nd.stats.items_out += items_out;
        nd.stats.busy += busy;
        nd.step_cost = Some(nd.step_cost.map_or(busy, |c| (c * 3 + busy) / 4));
        st.running -= 1;
        sh.changes.fetch_add(1, Ordering::Release);
        if satisfied {
            stop_feeding(&mut st, idx);
        }
        if finished {
            let State { nodes, edges, .. } = &mut *st;
            nodes[idx].done = true;
            for &e in &nodes[idx].out_edges {
                edges[e].closed = true;
            }
            st.done += 1;
        }
        if let (Some(p), Some((done, total))) = (&sh.progress, progress) {
            // Outside the lock: the callback may take its time.
            drop(st);
            p(done, total);
            st = lock(sh);
        }
    }
}

/// Wait for a block that can make progress and take it out to run, with
/// its input items in `batch`; None once the run is over (stopped,
/// cancelled, every block done, or stalled). `spin_for` is this worker's
/// current watch before sleeping (see `watch_for_work`).
fn claim<'a>(
    sh: &'a Shared,
    mut st: MutexGuard<'a, State>,
    batch: &mut Vec<(usize, Item)>,
    spin_for: &mut Duration,
) -> (MutexGuard<'a, State>, Option<Claimed>) {
    let mut spun = false;
    loop {
        if st.stop.is_some() || st.done == st.nodes.len() {
            sh.wake.notify_all();
            return (st, None);
        }
        if sh.cancel.load(Ordering::SeqCst) {
            st.stop.get_or_insert(StopReason::Cancelled);
            sh.wake.notify_all();
            return (st, None);
        }
        let picked = match pick(&mut st, sh.capacity, false, batch) {
            Some(p) => Some(p),
            None if st.running == 0 => pick(&mut st, sh.capacity, true, batch),
            None => None,
        };
        if let Some((idx, step)) = picked {
            let nd = &mut st.nodes[idx];
            nd.running = true;
            let block = nd.block.take().expect("a node not running holds its block");
            st.running += 1;
            // More work than this worker takes, enough that sharing it
            // pays for the wake-up: wake a sleeping one.
            if st.idle > 0 && helper_gain(&st, idx, sh.capacity) >= WAKE_WORTH {
                sh.wake.notify_one();
            }
            return (st, Some(Claimed { idx, step, block }));
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
            return (st, None);
        }
        if sh.threads > 1 && !spun {
            // Work usually turns up within a step of another worker:
            // watching for it briefly costs less than sleeping and being
            // woken (a system call each side, and the wake-up latency).
            let seen = sh.changes.load(Ordering::Acquire);
            drop(st);
            spun = true;
            watch_for_work(sh, seen, spin_for);
            st = lock(sh);
            continue;
        }
        spun = false;
        st.idle += 1;
        st = sh.wake.wait_timeout(st, Duration::from_millis(100)).unwrap_or_else(|e| e.into_inner()).0;
        st.idle -= 1;
    }
}

/// Watch for a change of the scheduler's state (since `seen`) for up to
/// `spin_for`, then adapt it: a watch that saw work keeps watching long next
/// time (doubled up to `SPIN_FOR`), one that saw none is halved (down to
/// `SPIN_MIN`), so an idle worker soon sleeps on the condition variable.
/// Between checks it yields its core, which on a shared core lets the
/// worker it waits for run.
fn watch_for_work(sh: &Shared, seen: u64, spin_for: &mut Duration) {
    let t0 = Instant::now();
    let mut rounds = 0u32;
    loop {
        if sh.changes.load(Ordering::Acquire) != seen {
            *spin_for = (*spin_for * 2).min(SPIN_FOR);
            return;
        }
        if t0.elapsed() >= *spin_for {
            *spin_for = (*spin_for / 2).max(SPIN_MIN);
            return;
        }
        rounds += 1;
        if rounds.is_multiple_of(8) {
            std::thread::yield_now();
        } else {
            for _ in 0..64 {
                std::hint::spin_loop();
            }
        }
    }
}

/// Run one step of `block` without the lock: whether it finished, and the
/// items and samples it took. A panic becomes the block's error.
fn run_step(
    block: &mut dyn Block,
    step: Step,
    batch: &mut Vec<(usize, Item)>,
    out: &mut Outputs,
) -> (Result<bool, BlockError>, u64, u64) {
    let mut items_in = 0;
    let mut samples_in = 0;
    let result = catch_unwind(AssertUnwindSafe(|| match step {
        Step::Generate => match block.generate(out) {
            Ok(true) => Ok(false),
            Ok(false) => block.finish(out).map(|_| true),
            Err(e) => Err(e),
        },
        Step::Process => {
            for (port, item) in batch.drain(..) {
                items_in += 1;
                samples_in += item.sample_count() as u64;
                block.process(port, item, out)?;
            }
            Ok(false)
        }
        Step::Finish => block.finish(out).map(|_| true),
    }));
    let result = result.unwrap_or_else(|panic| {
        let msg = panic
            .downcast_ref::<String>()
            .cloned()
            .or_else(|| panic.downcast_ref::<&str>().map(|s| s.to_string()))
            .unwrap_or_else(|| "unknown".into());
        Err(BlockError::new(format!("internal error (panic): {msg}")))
    });
    (result, items_in, samples_in)
}

/// Queue the items of one step on the wires out of block `idx` (not on
/// those whose consumer wants no more) and collect its notices; returns how
/// many items it produced.
fn deliver(st: &mut State, idx: usize, out: &mut Outputs) -> u64 {
    let State { nodes, edges, notices, .. } = st;
    let nd = &nodes[idx];
    let mut items_out = 0;
    for (port, item) in out.drain() {
        let targets = &nd.outputs[port];
        let last = targets.iter().rposition(|&e| !edges[e].unwanted);
        if let Some(last) = last {
            for &e in &targets[..last] {
                if !edges[e].unwanted {
                    edges[e].queue.push_back(item.clone());
                }
            }
            edges[targets[last]].queue.push_back(item);
        }
        items_out += 1;
    }
    for mut n in out.drain_notices() {
        n.block = Arc::clone(&nd.name);
        notices.push(n);
    }
    items_out
}

/// Stop feeding block `idx`, which has what it needs; it still finishes
/// when its inputs end. Which items it saw depends only on its own
/// processing, so outputs stay independent of timing.
fn stop_feeding(st: &mut State, idx: usize) {
    let State { nodes, edges, .. } = st;
    for &(_, e) in &nodes[idx].wired {
        edges[e].unwanted = true;
        edges[e].queue.clear();
    }
}

fn fail(st: &mut State, idx: usize, error: BlockError) {
    if st.stop.is_none() {
        let nd = &st.nodes[idx];
        st.stop = Some(StopReason::Failed { block: nd.name.to_string(), kind: nd.stats.kind.clone(), error });
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use lobeflow_blocks::typed::boxed;
    use lobeflow_blocks::{BuildContext, BuildError, ItemKind, NoPorts, SampleChunk, Stamp, TypedBlock, block_ports};

    block_ports! { outputs enum TicksOut { Ticks = optional("ticks", ItemKind::Samples, "empty chunks") } }

    /// Emits `count` one-sample chunks, `step` samples apart, at `rate`.
    struct Ticks {
        next: u64,
        count: u64,
        step: u64,
        rate: f64,
    }
    impl TypedBlock for Ticks {
        type Settings = ();
        type In = NoPorts;
        type Out = TicksOut;
        fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
            crate::runtime::attached_by_run()
        }
        fn generate(&mut self, out: &mut Outputs) -> Result<bool, BlockError> {
            // Several items per call, so queues fill past one batch.
            for _ in 0..3 {
                if self.count == 0 {
                    break;
                }
                let stamp = Stamp::new(self.next, self.rate);
                out.push(
                    TicksOut::Ticks,
                    Item::Samples(SampleChunk { stamp, iq: vec![].into(), sync: None, trigger: None }),
                );
                self.next += self.step;
                self.count -= 1;
            }
            Ok(self.count > 0)
        }
    }

    block_ports! {
        inputs enum RecorderIn {
            First = required("first", ItemKind::Samples, "merged first on ties"),
            Second = required("second", ItemKind::Samples, "merged second on ties"),
        }
    }

    /// Records (port, sample index) of every item, in the order it sees them.
    struct Recorder(Arc<Mutex<Vec<(usize, u64)>>>);
    impl TypedBlock for Recorder {
        type Settings = ();
        type In = RecorderIn;
        type Out = NoPorts;
        fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
            crate::runtime::attached_by_run()
        }
        fn process(&mut self, port: RecorderIn, item: Item, _: &mut Outputs) -> Result<(), BlockError> {
            self.0.lock().expect("recorder").push((port as usize, item.stamp().index));
            Ok(())
        }
    }

    fn ticks(count: u64, step: u64, rate: f64) -> Box<dyn Block> {
        boxed(Ticks { next: 0, count, step, rate })
    }

    #[test]
    fn batched_merge_keeps_time_order_for_any_thread_count_and_capacity() {
        // Port 0 ticks every 3 samples at 1 kS/s, port 1 every 4 samples at
        // 2 kS/s (every 2 ms): ties at multiples of 6 ms must go to port 0.
        let (a, b) = (700, 600);
        let mut want: Vec<(f64, usize, u64)> = (0..a).map(|k| (3.0 * k as f64 / 1e3, 0, 3 * k)).collect();
        want.extend((0..b).map(|k| (4.0 * k as f64 / 2e3, 1, 4 * k)));
        want.sort_by(|x, y| x.0.total_cmp(&y.0).then(x.1.cmp(&y.1)));
        let want: Vec<(usize, u64)> = want.into_iter().map(|(_, p, n)| (p, n)).collect();
        for threads in [1, 2, 3] {
            for capacity in [1, 4, 100] {
                let seen = Arc::new(Mutex::new(Vec::new()));
                let setups = vec![
                    NodeSetup {
                        name: "a".into(),
                        kind: "ticks".into(),
                        block: ticks(a, 3, 1e3),
                        inputs: vec![],
                        outputs: vec![vec![0]],
                    },
                    NodeSetup {
                        name: "b".into(),
                        kind: "ticks".into(),
                        block: ticks(b, 4, 2e3),
                        inputs: vec![],
                        outputs: vec![vec![1]],
                    },
                    NodeSetup {
                        name: "merge".into(),
                        kind: "recorder".into(),
                        block: boxed(Recorder(Arc::clone(&seen))),
                        inputs: vec![Some(0), Some(1)],
                        outputs: vec![],
                    },
                ];
                let outcome = run_nodes(setups, 2, threads, capacity, Arc::new(AtomicBool::new(false)), None);
                assert!(outcome.stop.is_none(), "threads {threads}, capacity {capacity}");
                assert_eq!(outcome.stats[2].items_in, a + b);
                let got = seen.lock().expect("recorder").clone();
                assert!(got == want, "threads {threads}, capacity {capacity}: merge order differs");
            }
        }
    }
}

#[cfg(test)]
mod holding_back {
    use super::*;
    use lobeflow_blocks::{SampleChunk, Stamp};

    fn node(name: &str, wired: Vec<(usize, usize)>) -> Node {
        Node {
            name: Arc::from(name),
            block: None,
            inputs: wired.iter().map(|&(_, e)| Some(e)).collect(),
            wired,
            outputs: Vec::new(),
            out_edges: Vec::new(),
            running: false,
            done: false,
            step_cost: None,
            stats: BlockStats::default(),
        }
    }

    fn edge(len: usize, closed: bool, consumer: usize) -> Edge {
        let item =
            Item::Samples(SampleChunk { stamp: Stamp::new(0, 1.0), iq: vec![].into(), sync: None, trigger: None });
        Edge { queue: std::iter::repeat_n(item, len).collect(), closed, consumer, unwanted: false }
    }

    #[test]
    fn a_full_wire_into_a_merge_waiting_elsewhere_lets_its_producer_run() {
        // Node 0 merges wire 0 (full) with wire 1.
        let nodes = vec![node("merge", vec![(0, 0), (1, 1)])];
        let cap = 4;
        // Wire 1 open and empty: the merge cannot take from wire 0 yet.
        assert!(!holds_back(&nodes, &[edge(cap, false, 0), edge(0, false, 0)], 0, cap));
        // Until the starved-merge bound, where the stall breaker takes over.
        assert!(holds_back(&nodes, &[edge(cap * STARVED_MERGE_FACTOR, false, 0), edge(0, false, 0)], 0, cap));
        // Wire 1 has an item, or has ended: the merge can take from wire 0.
        assert!(holds_back(&nodes, &[edge(cap, false, 0), edge(1, false, 0)], 0, cap));
        assert!(holds_back(&nodes, &[edge(cap, false, 0), edge(0, true, 0)], 0, cap));
        // Below the bound nothing holds back.
        assert!(!holds_back(&nodes, &[edge(cap - 1, false, 0), edge(1, false, 0)], 0, cap));
        // A single-input consumer is held back as before.
        let single = vec![node("one", vec![(0, 0)])];
        assert!(holds_back(&single, &[edge(cap, false, 0)], 0, cap));
    }
}
