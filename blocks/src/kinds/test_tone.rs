//! `test_tone`: a complex tone of a set length, for examples and tests of
//! graphs without a capture file.

use crate::block::{Block, BlockError, BlockSpec, BuildContext, Outputs, PortSpec};
use crate::item::{Item, ItemKind, SampleChunk, Stamp};
use crate::param::{ParamSpec, ParamType, Params, Unit};
use num_complex::Complex32;

pub const SPEC: BlockSpec = BlockSpec {
    kind: "test_tone",
    doc: "Generates a complex tone of a set number of samples (examples and tests without a capture).",
    inputs: &[],
    outputs: &[PortSpec::optional("samples", ItemKind::Samples, "the tone, in chunks")],
    params: &[
        ParamSpec {
            name: "samples",
            ty: ParamType::Integer { min: 0, max: i64::MAX },
            default: Some("65536"),
            doc: "how many samples in all",
        },
        ParamSpec {
            name: "rate",
            ty: ParamType::Number { unit: Unit::SampleRate, min: 1.0, max: 1e10 },
            default: Some("1 MS/s"),
            doc: "sample rate",
        },
        ParamSpec {
            name: "frequency",
            ty: ParamType::Number { unit: Unit::Hertz, min: -5e9, max: 5e9 },
            default: Some("1 kHz"),
            doc: "tone frequency (baseband)",
        },
        ParamSpec {
            name: "chunk",
            ty: ParamType::Integer { min: 1, max: 1 << 24 },
            default: Some("4096"),
            doc: "samples per chunk",
        },
    ],
    build,
};

fn build(p: &Params, _: &BuildContext) -> Result<Box<dyn Block>, String> {
    Ok(Box::new(TestTone {
        left: p.int("samples")? as u64,
        next: 0,
        rate: p.num("rate")?,
        freq: p.num("frequency")?,
        chunk: p.int("chunk")? as usize,
    }))
}

struct TestTone {
    left: u64,
    next: u64,
    rate: f64,
    freq: f64,
    chunk: usize,
}

impl Block for TestTone {
    fn generate(&mut self, out: &mut Outputs) -> Result<bool, BlockError> {
        let n = (self.chunk as u64).min(self.left) as usize;
        if n == 0 {
            return Ok(false);
        }
        let w = 2.0 * std::f64::consts::PI * self.freq / self.rate;
        let iq: Vec<Complex32> = (0..n)
            .map(|k| {
                let ph = w * (self.next + k as u64) as f64;
                Complex32::new(ph.cos() as f32, ph.sin() as f32)
            })
            .collect();
        out.push(
            0,
            Item::Samples(SampleChunk {
                stamp: Stamp::new(self.next, self.rate),
                iq: iq.into(),
                sync: None,
                trigger: None,
            }),
        );
        self.next += n as u64;
        self.left -= n as u64;
        Ok(self.left > 0)
    }
}
