//! One step of a block, run without the lock, and what follows it under
//! the lock: its items queued on the wires out, its notices kept, a satisfied
//! block's inputs dropped, a failure recorded.

use super::{State, Step, StopReason};
use lobeflow_blocks::{Block, BlockError, Item, Outputs};
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
/// many items it produced.
pub(super) fn deliver(st: &mut State, idx: usize, out: &mut Outputs) -> u64 {
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
pub(super) fn stop_feeding(st: &mut State, idx: usize) {
    let State { nodes, edges, .. } = st;
    for &(_, e) in &nodes[idx].wired {
        edges[e].unwanted = true;
        edges[e].queue.clear();
    }
}

pub(super) fn fail(st: &mut State, idx: usize, error: BlockError) {
    if st.stop.is_none() {
        let nd = &st.nodes[idx];
        st.stop = Some(StopReason::Failed { block: nd.name.to_string(), kind: nd.stats.kind.clone(), error });
    }
}
