//! `discard`: swallows sample chunks, counting them. Ends a chain whose
//! output is not needed (benchmarks, or a branch kept for its side files).

use crate::block::{BlockSpec, BuildContext};
use crate::error::BuildError;
use crate::item::ItemKind;
use crate::typed::{NoPorts, TypedBlock};

pub const SPEC: BlockSpec =
    BlockSpec::typed::<Discard>("discard", "Swallows sample chunks (ends a chain whose output is not needed).");

crate::block_ports! {
    inputs pub enum DiscardIn { Samples = required("samples", ItemKind::Samples, "any sample chunks") }
}

pub struct Discard;

/// Every item is dropped by the default `process`.
impl TypedBlock for Discard {
    type Settings = ();
    type In = DiscardIn;
    type Out = NoPorts;

    fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
        Ok(Discard)
    }
}
