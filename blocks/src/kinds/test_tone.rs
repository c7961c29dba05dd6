//! `test_tone`: a complex tone of a set length, for examples and tests of
//! graphs without a capture file.

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::error::BuildError;
use crate::facts::{Channels, Facts, StreamFacts};
use crate::item::{Item, ItemKind, SampleChunk, Stamp};
use crate::param::{ParamType, Unit};
use crate::typed::{NoPorts, TypedBlock};
use num_complex::Complex32;

pub const SPEC: BlockSpec = BlockSpec::typed::<TestTone>(
    "test_tone",
    "Generates a complex tone of a set number of samples (examples and tests without a capture).",
);

crate::block_settings! {
    /// Settings of `test_tone`.
    pub struct TestToneSettings {
        samples: u64 { ty: ParamType::Integer { min: 0, max: i64::MAX }, default: Some("65536"), doc: "how many samples in all" },
        rate: f64 { ty: ParamType::Number { unit: Unit::SampleRate, min: 1.0, max: 1e10 }, default: Some("1 MS/s"), doc: "sample rate" },
        frequency: f64 {
            ty: ParamType::Number { unit: Unit::Hertz, min: -5e9, max: 5e9 },
            default: Some("1 kHz"),
            doc: "tone frequency (baseband)",
        },
        chunk: usize { ty: ParamType::Integer { min: 1, max: 1 << 24 }, default: Some("4096"), doc: "samples per chunk" },
    }
}

crate::block_ports! {
    outputs pub enum ToneOut { Samples = optional("samples", ItemKind::Samples, "the tone, in chunks") }
}

pub struct TestTone {
    left: u64,
    next: u64,
    rate: f64,
    freq: f64,
    chunk: usize,
}

impl TypedBlock for TestTone {
    type Settings = TestToneSettings;
    type In = NoPorts;
    type Out = ToneOut;

    fn build(s: TestToneSettings, _: &BuildContext) -> Result<Self, BuildError> {
        Ok(TestTone { left: s.samples, next: 0, rate: s.rate, freq: s.frequency, chunk: s.chunk })
    }

    fn start(&mut self, _: &Facts) -> Result<StreamFacts, BlockError> {
        Ok(StreamFacts { channels: Some(Channels::default()), ..StreamFacts::at_rate(self.rate) })
    }

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
            ToneOut::Samples,
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
