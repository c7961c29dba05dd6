//! `thin`: hands on one sweep in N. Pictures and other consumers that
//! only need a fair sample of a long capture read a thinned stream, so the
//! full-rate work stays with the blocks that need every sweep.

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::error::BuildError;
use crate::item::{Item, ItemKind};
use crate::param::ParamType;
use crate::typed::TypedBlock;

pub const SPEC: BlockSpec = BlockSpec::typed::<Thin>(
    "thin",
    "Hands on one sweep in N (the first, then every Nth). Pick N coprime with the pulses of a lobe cycle so every lobe keeps its share.",
);

crate::block_settings! {
    /// Settings of `thin`.
    pub struct ThinSettings {
        stride: u64 { ty: ParamType::Integer { min: 1, max: 1_000_000 }, default: Some("1"), doc: "keep one sweep in this many" },
    }
}

crate::block_ports! {
    inputs pub enum ThinIn { Sweeps = required("sweeps", ItemKind::Sweep, "sweeps") }
}

crate::block_ports! {
    outputs pub enum ThinOut { Sweeps = optional("sweeps", ItemKind::Sweep, "one sweep in N") }
}

pub struct Thin {
    stride: u64,
    seen: u64,
}

impl TypedBlock for Thin {
    type Settings = ThinSettings;
    type In = ThinIn;
    type Out = ThinOut;

    fn build(s: ThinSettings, _: &BuildContext) -> Result<Self, BuildError> {
        Ok(Thin { stride: s.stride.max(1), seen: 0 })
    }

    fn process(&mut self, port: ThinIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match port {
            ThinIn::Sweeps => {
                if self.seen.is_multiple_of(self.stride) {
                    out.push(ThinOut::Sweeps, item);
                }
                self.seen += 1;
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::item::{Span, Stamp, Sweep};

    #[test]
    fn keeps_the_first_and_every_nth() {
        let mut b = Thin { stride: 3, seen: 0 };
        let mut out = Outputs::new(1);
        for k in 0..10u64 {
            let sweep = Sweep {
                stamp: Stamp::new(k * 100, 1e6),
                pulse: k,
                iq: Span::new(Vec::new()),
                sync: None,
                blanked: 0,
                predicted: false,
                lobe: None,
            };
            b.process(ThinIn::Sweeps, Item::Sweep(sweep), &mut out).unwrap();
        }
        let kept: Vec<u64> = out.drain().map(|(_, i)| if let Item::Sweep(s) = i { s.pulse } else { 99 }).collect();
        assert_eq!(kept, [0, 3, 6, 9]);
    }
}
