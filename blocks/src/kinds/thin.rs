//! `thin`: hands on one sweep in N. Pictures and other consumers that
//! only need a fair sample of a long capture read a thinned stream, so the
//! full-rate work stays with the blocks that need every sweep.

use crate::block::{Block, BlockError, BlockSpec, BuildContext, Outputs, PortSpec};
use crate::item::{Item, ItemKind};
use crate::param::{ParamSpec, ParamType, Params};

pub const SPEC: BlockSpec = BlockSpec {
    kind: "thin",
    doc: "Hands on one sweep in N (the first, then every Nth). Pick N coprime with the pulses of a lobe cycle so every lobe keeps its share.",
    inputs: &[PortSpec::required("sweeps", ItemKind::Sweep, "sweeps")],
    outputs: &[PortSpec::optional("sweeps", ItemKind::Sweep, "one sweep in N")],
    params: &[ParamSpec {
        name: "stride",
        ty: ParamType::Integer { min: 1, max: 1_000_000 },
        default: Some("1"),
        doc: "keep one sweep in this many",
    }],
    build,
};

fn build(p: &Params, _: &BuildContext) -> Result<Box<dyn Block>, String> {
    Ok(Box::new(Thin { stride: p.int("stride")? as u64, seen: 0 }))
}

struct Thin {
    stride: u64,
    seen: u64,
}

impl Block for Thin {
    fn process(&mut self, _port: usize, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        if self.seen.is_multiple_of(self.stride) {
            out.push(0, item);
        }
        self.seen += 1;
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
            b.process(0, Item::Sweep(sweep), &mut out).unwrap();
        }
        let kept: Vec<u64> = out.drain().map(|(_, i)| if let Item::Sweep(s) = i { s.pulse } else { 99 }).collect();
        assert_eq!(kept, [0, 3, 6, 9]);
    }
}
