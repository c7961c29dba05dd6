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
//! flat however long the capture. A step whose items would overfill a wire
//! far past its bound (a smoother's whole recording at its end) keeps them
//! with the block, one copy for all its wires, queued as the consumers take
//! them (`step::forward_pending`). When nothing can
//! run and nothing is running (a branching graph whose branches rejoin at
//! very different rates), the most downstream block that has input is allowed
//! to overfill its outputs once, so a graph never deadlocks.
//!
//! `picking` decides which block runs next with which items, `waiting` is
//! an idle worker's watch and sleep, `step` runs a step and delivers it.

mod picking;
mod step;
mod waiting;

use lobeflow_blocks::{Block, BlockError, Item, Notice, Outputs};
use picking::{BURST_BOUNDS, MAX_BATCH, downstream_first};
use std::collections::VecDeque;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::{Arc, Condvar, Mutex, MutexGuard};
use std::time::{Duration, Instant};
use step::{deliver, fail, run_step, stop_feeding};
use waiting::{SPIN_FOR, claim};

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
    /// The block's output buffer, kept between steps (with the block while
    /// it runs): a step's items then go into room the earlier steps grew
    /// instead of a new vector grown item by item.
    out: Outputs,
    inputs: Vec<Option<usize>>,
    /// (port, edge) of every wired input, in port order.
    wired: Vec<(usize, usize)>,
    outputs: Vec<Vec<usize>>,
    /// Every edge any output feeds.
    out_edges: Vec<usize>,
    /// Items made but not queued yet, (port, item) in order: a burst waits
    /// here, shared by the wires it goes to, and the block does not run
    /// again before they are all queued (`step::forward_pending`).
    pending: VecDeque<(usize, Item)>,
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
    /// The node that writes it.
    producer: usize,
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
    /// Items a wire may hold before its producer's further items wait with it.
    burst_limit: usize,
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
            out: Outputs::new(s.outputs.len()),
            wired: s.inputs.iter().enumerate().filter_map(|(p, e)| e.map(|e| (p, e))).collect(),
            out_edges: s.outputs.iter().flatten().copied().collect(),
            pending: VecDeque::new(),
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
        .map(|_| Edge {
            queue: VecDeque::new(),
            closed: false,
            consumer: usize::MAX,
            producer: usize::MAX,
            unwanted: false,
        })
        .collect();
    for (i, nd) in nodes.iter().enumerate() {
        for &(_, e) in &nd.wired {
            edges[e].consumer = i;
        }
        for &e in &nd.out_edges {
            edges[e].producer = i;
        }
    }
    let shared = Arc::new(Shared {
        state: Mutex::new(State { nodes, edges, order, running: 0, idle: 0, done: 0, stop: None, notices: Vec::new() }),
        wake: Condvar::new(),
        changes: AtomicU64::new(0),
        threads: threads.max(1),
        cancel,
        capacity: capacity.max(1),
        burst_limit: capacity.max(1) * BURST_BOUNDS,
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

/// A block taken out of the state to run one step.
struct Claimed {
    idx: usize,
    step: Step,
    block: Box<dyn Block>,
    out: Outputs,
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
        let Some(Claimed { idx, step, mut block, mut out }) = claimed else {
            return;
        };
        drop(st);

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
        let items_out = deliver(&mut st, idx, &mut out, sh.burst_limit);
        let nd = &mut st.nodes[idx];
        nd.block = Some(block);
        if !finished {
            // A finished block's (often its largest) output buffer is freed now.
            nd.out = out;
        }
        nd.running = false;
        nd.stats.items_in += items_in;
        nd.stats.samples_in += samples_in;
        nd.stats.items_out += items_out;
        nd.stats.busy += busy;
        nd.step_cost = Some(nd.step_cost.map_or(busy, |c| (c * 3 + busy) / 4));
        st.running -= 1;
        sh.changes.fetch_add(1, Ordering::Release);
        if satisfied {
            stop_feeding(&mut st, idx, sh.burst_limit);
        }
        if finished {
            let State { nodes, edges, .. } = &mut *st;
            nodes[idx].done = true;
            // Wires end once the items held back are queued too.
            if nodes[idx].pending.is_empty() {
                for &e in &nodes[idx].out_edges {
                    edges[e].closed = true;
                }
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

    block_ports! { outputs enum BurstOut { Early = optional("early", ItemKind::Samples, "even samples"), Late = optional("late", ItemKind::Samples, "odd samples") } }

    /// Emits `count` one-sample chunks at once, the even-numbered on port
    /// `early` first, then the odd-numbered on `late`.
    struct Burst {
        count: u64,
    }
    impl TypedBlock for Burst {
        type Settings = ();
        type In = NoPorts;
        type Out = BurstOut;
        fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
            crate::runtime::attached_by_run()
        }
        fn generate(&mut self, out: &mut Outputs) -> Result<bool, BlockError> {
            for (port, first) in [(BurstOut::Early, 0), (BurstOut::Late, 1)] {
                for k in (first..self.count).step_by(2) {
                    let item = SampleChunk { stamp: Stamp::new(k, 1.0), iq: vec![].into(), sync: None, trigger: None };
                    out.push(port, Item::Samples(item));
                }
            }
            Ok(false)
        }
    }

    #[test]
    fn a_burst_reaches_every_reader_in_order_and_a_merge_of_its_ports_does_not_stall() {
        // Port `early` feeds a merge and two plain readers, `late` the merge's
        // second input: the merge needs items the burst holds behind a full wire.
        let count = 3000;
        for threads in [1, 2] {
            for capacity in [1, 4] {
                let logs: Vec<_> = (0..3).map(|_| Arc::new(Mutex::new(Vec::new()))).collect();
                let reader = |log: &Arc<Mutex<Vec<(usize, u64)>>>, inputs| NodeSetup {
                    name: "reader".into(),
                    kind: "recorder".into(),
                    block: boxed(Recorder(Arc::clone(log))),
                    inputs,
                    outputs: vec![],
                };
                let setups = vec![
                    NodeSetup {
                        name: "burst".into(),
                        kind: "burst".into(),
                        block: boxed(Burst { count }),
                        inputs: vec![],
                        outputs: vec![vec![0, 1, 2], vec![3]],
                    },
                    reader(&logs[0], vec![Some(0), Some(3)]),
                    reader(&logs[1], vec![Some(1), None]),
                    reader(&logs[2], vec![Some(2), None]),
                ];
                let outcome = run_nodes(setups, 4, threads, capacity, Arc::new(AtomicBool::new(false)), None);
                assert!(outcome.stop.is_none(), "threads {threads}, capacity {capacity}");
                let merged: Vec<(usize, u64)> = (0..count).map(|k| ((k % 2) as usize, k)).collect();
                let early: Vec<(usize, u64)> = (0..count).step_by(2).map(|k| (0, k)).collect();
                assert!(*logs[0].lock().expect("log") == merged, "threads {threads}, capacity {capacity}");
                assert!(*logs[1].lock().expect("log") == early && *logs[2].lock().expect("log") == early);
            }
        }
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
