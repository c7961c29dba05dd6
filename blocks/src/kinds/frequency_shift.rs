//! `frequency_shift`: moves the spectrum by `shift` Hz (multiplies by
//! `exp(j 2 pi shift t)`), e.g. to bring a beacon or an offset carrier to
//! 0 Hz. The phase is tied to the absolute sample index, so it is continuous
//! across chunks and stays right across gaps.

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::error::BuildError;
use crate::item::{Item, ItemKind, SampleChunk};
use crate::param::{ParamType, Unit};
use crate::typed::TypedBlock;
use num_complex::Complex32;
use std::f64::consts::TAU;

pub const SPEC: BlockSpec = BlockSpec::typed::<FrequencyShift>(
    "frequency_shift",
    "Shifts the spectrum by a set frequency (phase-continuous across chunks); aux channels pass unchanged.",
);

crate::block_settings! {
    /// Settings of `frequency_shift`.
    pub struct FrequencyShiftSettings {
        shift: f64 {
            ty: ParamType::Number { unit: Unit::Hertz, min: -5e9, max: 5e9 },
            default: None,
            doc: "frequency added to every component (negative moves down)",
        },
    }
}

crate::block_ports! {
    inputs pub enum ShiftIn { Samples = required("samples", ItemKind::Samples, "baseband samples") }
}

crate::block_ports! {
    outputs pub enum ShiftOut { Samples = optional("samples", ItemKind::Samples, "the shifted samples") }
}

pub struct FrequencyShift {
    shift: f64,
    /// Phase in radians, in [0, 2 pi), of the next expected sample.
    phase: f64,
    /// (next expected index, rate).
    next: Option<(u64, f64)>,
}

impl TypedBlock for FrequencyShift {
    type Settings = FrequencyShiftSettings;
    type In = ShiftIn;
    type Out = ShiftOut;

    fn build(s: FrequencyShiftSettings, _: &BuildContext) -> Result<Self, BuildError> {
        Ok(FrequencyShift { shift: s.shift, phase: 0.0, next: None })
    }

    fn process(&mut self, port: ShiftIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match (port, item) {
            (ShiftIn::Samples, Item::Samples(chunk)) => self.take(chunk, out),
            (ShiftIn::Samples, _) => Ok(()),
        }
    }
}

impl FrequencyShift {
    fn take(&mut self, mut chunk: SampleChunk, out: &mut Outputs) -> Result<(), BlockError> {
        let rate = chunk.stamp.checked_rate("frequency_shift")?;
        let cycles_per_sample = self.shift / rate;
        let step = TAU * cycles_per_sample;
        match self.next {
            Some((n, r)) if n == chunk.stamp.index && r == rate => {}
            _ => {
                // Start (or resync after a jump) from the absolute index; the
                // fraction is taken before scaling to keep precision on long captures.
                let turns = (chunk.stamp.index as f64 * cycles_per_sample.fract()).rem_euclid(1.0);
                self.phase = TAU * turns;
            }
        }
        let mut phase = self.phase;
        let y: Vec<Complex32> = chunk
            .iq
            .iter()
            .map(|x| {
                let (s, c) = phase.sin_cos();
                phase += step;
                if !(0.0..TAU).contains(&phase) {
                    phase = phase.rem_euclid(TAU);
                }
                x * Complex32::new(c as f32, s as f32)
            })
            .collect();
        self.phase = phase;
        self.next = Some((chunk.stamp.index + chunk.len() as u64, rate));
        chunk.iq = y.into();
        out.push(ShiftOut::Samples, Item::Samples(chunk));
        Ok(())
    }
}
