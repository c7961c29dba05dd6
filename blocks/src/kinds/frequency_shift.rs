//! `frequency_shift`: moves the spectrum by `shift` Hz (multiplies by
//! `exp(j 2 pi shift t)`), e.g. to bring a beacon or an offset carrier to
//! 0 Hz. The phase is tied to the absolute sample index, so it is continuous
//! across chunks and stays right across gaps.

use crate::block::{Block, BlockError, BlockSpec, BuildContext, Outputs, PortSpec};
use crate::item::{Item, ItemKind};
use crate::param::{ParamSpec, ParamType, Params, Unit};
use num_complex::Complex32;
use std::f64::consts::TAU;

pub const SPEC: BlockSpec = BlockSpec {
    kind: "frequency_shift",
    doc: "Shifts the spectrum by a set frequency (phase-continuous across chunks); aux channels pass unchanged.",
    inputs: &[PortSpec::required("samples", ItemKind::Samples, "baseband samples")],
    outputs: &[PortSpec::optional("samples", ItemKind::Samples, "the shifted samples")],
    params: &[ParamSpec {
        name: "shift",
        ty: ParamType::Number { unit: Unit::Hertz, min: -5e9, max: 5e9 },
        default: None,
        doc: "frequency added to every component (negative moves down)",
    }],
    build,
};

fn build(p: &Params, _: &BuildContext) -> Result<Box<dyn Block>, String> {
    Ok(Box::new(FrequencyShift { shift: p.num("shift")?, phase: 0.0, next: None }))
}

struct FrequencyShift {
    shift: f64,
    /// Phase in radians, in [0, 2 pi), of the next expected sample.
    phase: f64,
    /// (next expected index, rate).
    next: Option<(u64, f64)>,
}

impl Block for FrequencyShift {
    fn process(&mut self, _port: usize, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let Item::Samples(mut chunk) = item else {
            return Ok(());
        };
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
        out.push(0, Item::Samples(chunk));
        Ok(())
    }
}
