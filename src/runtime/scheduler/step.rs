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
