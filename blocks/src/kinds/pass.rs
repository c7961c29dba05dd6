//! `pass`: hands every item on unchanged. A placeholder while re-wiring a
//! chain, and the trivial block of the pass-through benchmark.

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::error::BuildError;
use crate::item::{Item, ItemKind};
use crate::typed::TypedBlock;

pub const SPEC: BlockSpec = BlockSpec::typed::<Pass>(
    "pass",
    "Hands every sample chunk on unchanged (a placeholder while re-wiring, and the benchmark's trivial block).",
);

crate::block_ports! {
    inputs pub enum PassIn { Samples = required("samples", ItemKind::Samples, "any sample chunks") }
}

crate::block_ports! {
    outputs pub enum PassOut { Samples = optional("samples", ItemKind::Samples, "the same chunks") }
}

pub struct Pass;

impl TypedBlock for Pass {
    type Settings = ();
    type In = PassIn;
    type Out = PassOut;

    fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
        Ok(Pass)
    }

    fn process(&mut self, port: PassIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match port {
            PassIn::Samples => out.push(PassOut::Samples, item),
        }
        Ok(())
    }
}
