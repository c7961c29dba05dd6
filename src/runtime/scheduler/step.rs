//! One step of a block, run without the lock, and what follows it under
//! the lock: its items queued on the wires out, its notices kept, a satisfied
//! block's inputs dropped, a failure recorded.

use super::{Edge, Node, State, Step, StopReason};
use lobeflow_blocks::{Block, BlockError, Item, Outputs};
use std::collections::VecDeque;
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::sync::Arc;

/// Run one step of `block` without the lock: whether it finished, and the
/// items and samples it took. A panic becomes the block's error.
pub(super) fn run_step(
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
/// many items it produced. A step whose items would fill a wire past
/// `limit` (a burst: a smoother handing on a whole recording's estimates
/// at its end) keeps them with the block, in one copy however many wires
/// they go to, and they are queued as the consumers take them
/// ([`forward_pending`]).
pub(super) fn deliver(st: &mut State, idx: usize, out: &mut Outputs, limit: usize) -> u64 {
    let State { nodes, edges, notices, .. } = st;
    let nd = &mut nodes[idx];
    let items_out = out.len() as u64;
    let fits = nd.pending.is_empty() && nd.out_edges.iter().all(|&e| edges[e].queue.len() + out.len() <= limit);
    if fits {
        for (port, item) in out.drain() {
            queue_on(&nd.outputs[port], edges, item);
        }
    } else {
        let burst = out.take_items();
        if nd.pending.is_empty() {
            nd.pending = VecDeque::from(burst);
        } else {
            nd.pending.extend(burst);
        }
        forward_pending(nodes, edges, idx, Some(limit));
    }
    for mut n in out.drain_notices() {
        n.block = Arc::clone(&nodes[idx].name);
        notices.push(n);
    }
    items_out
}

/// Put `item` on every wire of `targets` whose consumer still wants it:
/// a clone each but the last, which takes the item itself.
fn queue_on(targets: &[usize], edges: &mut [Edge], item: Item) {
    let Some(last) = targets.iter().rposition(|&e| !edges[e].unwanted) else { return };
    for &e in &targets[..last] {
        if !edges[e].unwanted {
            edges[e].queue.push_back(item.clone());
        }
    }
    edges[targets[last]].queue.push_back(item);
}

/// Queue the items block `p` holds back, in order, while every wire an
/// item goes to holds fewer than `limit` (all of them with no limit: the
/// stall breaker's way back to queueing everything at once). A finished
/// block's wires end once it holds nothing more.
pub(super) fn forward_pending(nodes: &mut [Node], edges: &mut [Edge], p: usize, limit: Option<usize>) {
    let nd = &mut nodes[p];
    while let Some(&(port, _)) = nd.pending.front() {
        let targets = &nd.outputs[port];
        if let Some(limit) = limit
            && targets.iter().any(|&e| !edges[e].unwanted && edges[e].queue.len() >= limit)
        {
            return;
        }
        let Some((_, item)) = nd.pending.pop_front() else { break };
        queue_on(targets, edges, item);
    }
    // The burst's buffer is freed now, not at the end of the run.
    nd.pending = VecDeque::new();
    if nd.done {
        for &e in &nd.out_edges {
            edges[e].closed = true;
        }
    }
}

/// After block `idx` took items: queue what the blocks feeding it hold back.
pub(super) fn forward_to(st: &mut State, idx: usize, limit: usize) {
    let State { nodes, edges, .. } = st;
    for k in 0..nodes[idx].wired.len() {
        let producer = edges[nodes[idx].wired[k].1].producer;
        if !nodes[producer].pending.is_empty() {
            forward_pending(nodes, edges, producer, Some(limit));
        }
    }
}

/// Queue everything every block holds back (nothing can run otherwise);
/// whether there was anything.
pub(super) fn forward_all(st: &mut State) -> bool {
    let State { nodes, edges, .. } = st;
    let mut any = false;
    for p in 0..nodes.len() {
        if !nodes[p].pending.is_empty() {
            forward_pending(nodes, edges, p, None);
            any = true;
        }
    }
    any
}

/// Stop feeding block `idx`, which has what it needs; it still finishes
/// when its inputs end. Which items it saw depends only on its own
/// processing, so outputs stay independent of timing.
pub(super) fn stop_feeding(st: &mut State, idx: usize, limit: usize) {
    let State { nodes, edges, .. } = st;
    for &(_, e) in &nodes[idx].wired {
        edges[e].unwanted = true;
        edges[e].queue.clear();
    }
    // Items held back for this block alone need not wait any more.
    forward_to(st, idx, limit);
}

pub(super) fn fail(st: &mut State, idx: usize, error: BlockError) {
    if st.stop.is_none() {
        let nd = &st.nodes[idx];
        st.stop = Some(StopReason::Failed { block: nd.name.to_string(), kind: nd.stats.kind.clone(), error });
    }
}

#[cfg(test)]
mod bursts {
    use super::*;
    use crate::runtime::scheduler::BlockStats;
    use lobeflow_blocks::{InstancePort, SampleChunk, Stamp};

    fn chunk(index: u64) -> Item {
        Item::Samples(SampleChunk { stamp: Stamp::new(index, 1.0), iq: vec![].into(), sync: None, trigger: None })
    }

    /// Node 0 writes its one port to wires 0, 1 and 2; nodes 1 to 3 read one each.
    fn fan_out_of_three() -> State {
        let node = |wired: Vec<(usize, usize)>, outputs: Vec<Vec<usize>>| Node {
            name: Arc::from("n"),
            block: None,
            out: Outputs::new(outputs.len()),
            inputs: wired.iter().map(|&(_, e)| Some(e)).collect(),
            out_edges: outputs.iter().flatten().copied().collect(),
            wired,
            outputs,
            pending: VecDeque::new(),
            running: false,
            done: false,
            step_cost: None,
            stats: BlockStats::default(),
        };
        let edge = |consumer| Edge { queue: VecDeque::new(), closed: false, consumer, producer: 0, unwanted: false };
        State {
            nodes: vec![
                node(vec![], vec![vec![0, 1, 2]]),
                node(vec![(0, 0)], vec![]),
                node(vec![(0, 1)], vec![]),
                node(vec![(0, 2)], vec![]),
            ],
            edges: vec![edge(1), edge(2), edge(3)],
            order: vec![1, 2, 3, 0],
            running: 0,
            idle: 0,
            done: 0,
            stop: None,
            notices: Vec::new(),
        }
    }

    fn queued(st: &State) -> Vec<usize> {
        st.edges.iter().map(|e| e.queue.len()).collect()
    }

    #[test]
    fn a_burst_waits_with_its_producer_and_moves_as_the_slowest_wire_drains() {
        let mut st = fan_out_of_three();
        let mut out = Outputs::new(1);
        for k in 0..1000 {
            out.push(InstancePort(0), chunk(k));
        }
        assert_eq!(deliver(&mut st, 0, &mut out, 100), 1000);
        assert_eq!((queued(&st), st.nodes[0].pending.len()), (vec![100, 100, 100], 900));
        // One wire drained: the others are still full, so nothing moves.
        st.edges[0].queue.drain(..60);
        forward_to(&mut st, 1, 100);
        assert_eq!(queued(&st), [40, 100, 100]);
        // Every wire with room: items move, each wire in order.
        st.edges[1].queue.drain(..60);
        st.edges[2].queue.drain(..30);
        forward_to(&mut st, 3, 100);
        assert_eq!((queued(&st), st.nodes[0].pending.len()), (vec![70, 70, 100], 870));
        assert_eq!(st.edges[0].queue.back().map(|i| i.stamp().index), Some(129));
        assert_eq!(st.edges[2].queue.front().map(|i| i.stamp().index), Some(30));
        // A finished producer's wires end only once it holds nothing more.
        st.nodes[0].done = true;
        assert!(!st.edges.iter().any(|e| e.closed));
        assert!(forward_all(&mut st));
        assert_eq!((queued(&st), st.nodes[0].pending.capacity()), (vec![940, 940, 970], 0));
        assert!(st.edges.iter().all(|e| e.closed));
        assert!(!forward_all(&mut st));
    }

    #[test]
    fn a_wire_whose_reader_has_enough_does_not_hold_a_burst_back() {
        let mut st = fan_out_of_three();
        let mut out = Outputs::new(1);
        for k in 0..300 {
            out.push(InstancePort(0), chunk(k));
        }
        deliver(&mut st, 0, &mut out, 100);
        st.edges[0].queue.drain(..);
        st.edges[1].queue.drain(..);
        stop_feeding(&mut st, 3, 100);
        assert_eq!((queued(&st), st.nodes[0].pending.len()), (vec![100, 100, 0], 100));
        // Small steps go straight onto the wires.
        let mut st = fan_out_of_three();
        out.push(InstancePort(0), chunk(0));
        deliver(&mut st, 0, &mut out, 100);
        assert_eq!((queued(&st), st.nodes[0].pending.len()), (vec![1, 1, 1], 0));
    }
}
