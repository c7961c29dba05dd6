//! Which block runs next, and with which items: the scan order (most
//! downstream first), the soft queue bounds and the merge of several inputs
//! in time order, and whether the ready work is worth waking a second worker.

use super::{Edge, Node, State, Step};
use lobeflow_blocks::Item;
use std::collections::VecDeque;
use std::time::Duration;

/// Items one step may take from a block's inputs: about the sweeps of one
/// capture chunk, so a pulsed chain hands work between workers about once
/// per chunk (64 measured slower on two workers: 2.5x the wake-ups).
pub(super) const MAX_BATCH: usize = 256;
/// A merge waits for a starved input until another of its queues holds this
/// many times the queue bound (see `take_step`).
pub(super) const STARVED_MERGE_FACTOR: usize = 64;
/// Queue bounds a wire holds before a producer's further items wait with it
/// (`step::deliver`): past what a step adds in a steady run (a batch's
/// sweeps, a merge's starved limit), so only bursts wait.
pub(super) const BURST_BOUNDS: usize = MAX_BATCH;
/// A batch stops growing once it holds this many samples (four default capture chunks).
pub(super) const MAX_BATCH_SAMPLES: usize = 1 << 16;
/// A sleeping worker is woken only when it would save at least this much of
/// the work ready now (see [`helper_gain`]): a wake-up, the sleep after it and
/// items handed between cores cost microseconds, so sharing a pass-through
/// (a 50 us capture read beside 0.1 us pass and discard steps) only loses time.
pub(super) const WAKE_WORTH: Duration = Duration::from_micros(3);

/// Topological order reversed (sinks first); nodes on no path keep their place.
pub(super) fn downstream_first(nodes: &[Node], edge_count: usize) -> Vec<usize> {
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
pub(super) fn pick(
    st: &mut State,
    capacity: usize,
    relax: bool,
    batch: &mut Vec<(usize, Item)>,
) -> Option<(usize, Step)> {
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
pub(super) fn helper_gain(st: &State, picked: usize, capacity: usize) -> Duration {
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
pub(super) fn holds_back(nodes: &[Node], edges: &[Edge], e: usize, capacity: usize) -> bool {
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

pub(super) fn ready(st: &State, i: usize, capacity: usize) -> bool {
    let nd = &st.nodes[i];
    let busy = nd.running || nd.done || !nd.pending.is_empty();
    if busy || nd.out_edges.iter().any(|&e| holds_back(&st.nodes, &st.edges, e, capacity)) {
        return false;
    }
    // A source, a block whose inputs all ended (finish), or one with an item on every open input.
    nd.wired.iter().all(|&(_, e)| !st.edges[e].queue.is_empty() || st.edges[e].closed)
}

/// What block `i` can do now, if anything. Items are taken one merge
/// decision at a time, exactly as single steps would take them: an item is
/// taken only while every open input has one, the earliest first (ties by
/// port), so the order a block sees is independent of timing and batching.
pub(super) fn take_step(
    st: &mut State,
    i: usize,
    capacity: usize,
    relax: bool,
    batch: &mut Vec<(usize, Item)>,
) -> Option<Step> {
    let State { nodes, edges, .. } = st;
    let nd = &nodes[i];
    // A block holding items back runs again once they are all queued.
    if nd.running || nd.done || !nd.pending.is_empty() {
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

#[cfg(test)]
mod holding_back {
    use super::*;
    use crate::runtime::scheduler::BlockStats;
    use lobeflow_blocks::{Outputs, SampleChunk, Stamp};
    use std::sync::Arc;

    fn node(name: &str, wired: Vec<(usize, usize)>) -> Node {
        Node {
            name: Arc::from(name),
            block: None,
            out: Outputs::new(0),
            inputs: wired.iter().map(|&(_, e)| Some(e)).collect(),
            wired,
            outputs: Vec::new(),
            out_edges: Vec::new(),
            pending: VecDeque::new(),
            running: false,
            done: false,
            step_cost: None,
            stats: BlockStats::default(),
        }
    }

    fn edge(len: usize, closed: bool, consumer: usize) -> Edge {
        let item =
            Item::Samples(SampleChunk { stamp: Stamp::new(0, 1.0), iq: vec![].into(), sync: None, trigger: None });
        Edge {
            queue: std::iter::repeat_n(item, len).collect(),
            closed,
            consumer,
            producer: usize::MAX,
            unwanted: false,
        }
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
