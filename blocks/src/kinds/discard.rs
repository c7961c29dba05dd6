//! `discard`: swallows sample chunks, counting them. Ends a chain whose
//! output is not needed (benchmarks, or a branch kept for its side files).

use crate::block::{Block, BlockError, BlockSpec, BuildContext, Outputs, PortSpec};
use crate::item::{Item, ItemKind};
use crate::param::Params;

pub const SPEC: BlockSpec = BlockSpec {
    kind: "discard",
    doc: "Swallows sample chunks (ends a chain whose output is not needed).",
    inputs: &[PortSpec::required("samples", ItemKind::Samples, "any sample chunks")],
    outputs: &[],
    params: &[],
    build,
};

fn build(_: &Params, _: &BuildContext) -> Result<Box<dyn Block>, String> {
    Ok(Box::new(Discard))
}

struct Discard;

impl Block for Discard {
    fn process(&mut self, _port: usize, _item: Item, _out: &mut Outputs) -> Result<(), BlockError> {
        Ok(())
    }
}
