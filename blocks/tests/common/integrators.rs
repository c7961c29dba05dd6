//! Helpers shared by the integrator and front-end tests.
#![allow(dead_code)]

use lobeflow_blocks::dsp::rng::Rng;
use lobeflow_blocks::{Block, BlockSpec, BuildContext, Item, LobeTag, Outputs, SampleChunk, Stamp};
use num_complex::Complex32;
use std::sync::Arc;

// Parameters are made the same way for every block test.
#[path = "mod.rs"]
mod shared;
pub use shared::params;

pub fn build(spec: &BlockSpec, set: &[(&str, &str)]) -> Box<dyn Block> {
    (spec.build)(&params(spec, set), &BuildContext::default()).unwrap_or_else(|e| panic!("build: {e}"))
}

/// Everything a block pushed (all ports) and the notice texts.
pub struct Run {
    pub items: Vec<Item>,
    pub notices: Vec<String>,
}

pub fn run(block: &mut dyn Block, items: impl IntoIterator<Item = Item>) -> Run {
    let mut out = Outputs::new(4);
    let mut r = Run { items: Vec::new(), notices: Vec::new() };
    let take = |out: &mut Outputs, r: &mut Run| {
        r.items.extend(out.drain().map(|(_, i)| i));
        r.notices.extend(out.drain_notices().map(|n| n.what));
    };
    for item in items {
        block.process(0, item, &mut out).unwrap_or_else(|e| panic!("process: {e}"));
        take(&mut out, &mut r);
    }
    block.finish(&mut out).unwrap_or_else(|e| panic!("finish: {e}"));
    take(&mut out, &mut r);
    r
}

pub fn tag(lobe: usize, dwell: u64, dwell_start: u64) -> LobeTag {
    let name: Arc<str> = Arc::from(if lobe == 0 { "right" } else { "left" });
    LobeTag { lobe, name, dwell, dwell_start }
}

/// Sample weights of a box echo `len` samples long starting at fractional
/// delay `delay`, sampled by integrate-and-dump: overlap of [n, n+1) with the box.
pub fn box_weight(n: usize, delay: f64, len: f64) -> f64 {
    let (a, b) = (n as f64, n as f64 + 1.0);
    (b.min(delay + len) - a.max(delay)).max(0.0)
}

pub fn noise(rng: &mut Rng, n: usize, power: f64) -> Vec<Complex32> {
    (0..n).map(|_| rng.complex_gaussian(power)).collect()
}

pub fn chunk(index: u64, rate: f64, iq: Vec<Complex32>) -> SampleChunk {
    SampleChunk { stamp: Stamp::new(index, rate), iq: iq.into(), sync: None, trigger: None }
}
