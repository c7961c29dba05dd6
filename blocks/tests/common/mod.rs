//! Helpers shared by the block tests: parameters from a kind's own
//! declarations, running a block over items, and building dwell records.
#![allow(dead_code)]

use lobeflow_blocks::{Block, BlockSpec, BuildContext, DwellRecord, Item, LobeTag, Notice, Outputs, Params, Stamp};
use std::sync::Arc;

/// Parameters of `spec`: the declared defaults, overridden by `set`, each
/// checked by its declaration like a graph file value.
pub fn params(spec: &BlockSpec, set: &[(&str, &str)]) -> Params {
    spec.params_from_text(set).unwrap_or_else(|e| panic!("test parameters: {e}"))
}

pub fn build(spec: &BlockSpec, set: &[(&str, &str)]) -> Result<Box<dyn Block>, lobeflow_blocks::BuildError> {
    (spec.build)(&params(spec, set), &BuildContext::default())
}

/// Feed `items` to port 0, then finish; returns the outputs and notices.
pub fn run(block: &mut dyn Block, items: impl IntoIterator<Item = Item>) -> (Vec<Item>, Vec<Notice>) {
    let mut out = Outputs::new(4);
    let mut items_out = Vec::new();
    let mut notices = Vec::new();
    for item in items {
        block.process(0, item, &mut out).expect("process");
        items_out.extend(out.drain().map(|(_, i)| i));
        notices.extend(out.drain_notices());
    }
    block.finish(&mut out).expect("finish");
    items_out.extend(out.drain().map(|(_, i)| i));
    notices.extend(out.drain_notices());
    (items_out, notices)
}

pub const RATE: f64 = 1.0e6;

/// A dwell record of lobe `name` centred at sample `mid`.
pub fn dwell(name: &str, count: u64, mid: u64, amplitude: f64, var_ln_amp: f64, snr: f64) -> DwellRecord {
    DwellRecord {
        tag: LobeTag { lobe: 0, name: Arc::from(name), dwell: count, dwell_start: mid.saturating_sub(500) },
        mid: Stamp::new(mid, RATE),
        amplitude,
        noise_power: 1.0,
        snr,
        var_ln_amp,
        range_m: None,
        used: 16,
    }
}

pub fn estimates(items: &[Item]) -> Vec<lobeflow_blocks::AngleEstimate> {
    items
        .iter()
        .filter_map(|i| match i {
            Item::Estimate(e) => Some(lobeflow_blocks::AngleEstimate::clone(e)),
            _ => None,
        })
        .collect()
}
