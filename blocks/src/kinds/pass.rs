//! `pass`: hands every item on unchanged. A placeholder while re-wiring a
//! chain, and the trivial block of the pass-through benchmark.

use crate::block::{Block, BlockError, BlockSpec, BuildContext, Outputs, PortSpec};
use crate::item::{Item, ItemKind};
use crate::param::Params;

pub const SPEC: BlockSpec = BlockSpec {
    kind: "pass",
    doc: "Hands every sample chunk on unchanged (a placeholder while re-wiring, and the benchmark's trivial block).",
    inputs: &[PortSpec::required("samples", ItemKind::Samples, "any sample chunks")],
    outputs: &[PortSpec::optional("samples", ItemKind::Samples, "the same chunks")],
    params: &[],
    build,
};

fn build(_: &Params, _: &BuildContext) -> Result<Box<dyn Block>, String> {
    Ok(Box::new(Pass))
}

struct Pass;

impl Block for Pass {
    fn process(&mut self, _port: usize, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        out.push(0, item);
        Ok(())
    }
}
