//! `dc_remove`: takes off the DC offset cheap receivers leave at 0 Hz with a
//! one-pole high-pass (running-mean removal). `y[n] = x[n] - m[n-1]`,
//! `m[n] = m[n-1] + a (x[n] - m[n-1])`, so `H(z) = (1 - z^-1) / (1 - (1-a) z^-1)`:
//! a zero at DC and a pole at `1-a`, with `a = 1 - exp(-2 pi corner / fs)`.

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::error::{BuildError, ParamError};
use crate::facts::{Facts, StreamFacts};
use crate::item::{Item, ItemKind, SampleChunk};
use crate::param::{ParamType, Unit};
use crate::typed::TypedBlock;
use num_complex::Complex64;

pub const SPEC: BlockSpec = BlockSpec::typed::<DcRemove>(
    "dc_remove",
    "Removes the receiver's DC offset (the spike at 0 Hz) with a one-pole high-pass; aux channels pass unchanged.",
);

crate::block_settings! {
    /// Settings of `dc_remove`.
    pub struct DcRemoveSettings {
        corner: f64 {
            ty: ParamType::Number { unit: Unit::Hertz, min: 1e-6, max: 1e9 },
            default: Some("100 Hz"),
            doc: "-3 dB corner of the high-pass; keep it far below the signals of interest",
        },
    }
}

crate::block_ports! {
    inputs pub enum DcRemoveIn { Samples = required("samples", ItemKind::Samples, "baseband samples") }
}

crate::block_ports! {
    outputs pub enum DcRemoveOut { Samples = optional("samples", ItemKind::Samples, "the samples without their DC offset") }
}

impl TypedBlock for DcRemove {
    type Settings = DcRemoveSettings;
    type In = DcRemoveIn;
    type Out = DcRemoveOut;

    fn build(s: DcRemoveSettings, _: &BuildContext) -> Result<Self, BuildError> {
        Ok(DcRemove { corner: s.corner, alpha: None, mean: Complex64::new(0.0, 0.0), next: None, gaps: 0 })
    }

    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError> {
        let facts = facts.merged();
        if let Some(rate) = facts.rate {
            self.alpha = Some((rate, self.alpha_at(rate)?));
        }
        Ok(facts)
    }

    fn process(&mut self, port: DcRemoveIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match (port, item) {
            (DcRemoveIn::Samples, Item::Samples(chunk)) => self.take(chunk, out),
            (DcRemoveIn::Samples, _) => Ok(()),
        }
    }
}

/// The smoothing factor for a corner frequency at a sample rate.
pub fn alpha(corner: f64, rate: f64) -> f64 {
    1.0 - (-2.0 * std::f64::consts::PI * corner / rate).exp()
}

pub struct DcRemove {
    corner: f64,
    alpha: Option<(f64, f64)>,
    mean: Complex64,
    next: Option<u64>,
    gaps: u64,
}

impl DcRemove {
    fn alpha_at(&self, rate: f64) -> Result<f64, ParamError> {
        if self.corner >= rate / 2.0 {
            return Err(ParamError::invalid(
                "corner",
                format!("{} Hz is not below half the sample rate ({rate} S/s)", self.corner),
            ));
        }
        Ok(alpha(self.corner, rate))
    }

    fn take(&mut self, mut chunk: SampleChunk, out: &mut Outputs) -> Result<(), BlockError> {
        let rate = chunk.stamp.checked_rate("dc_remove")?;
        let a = match self.alpha {
            Some((r, a)) if r == rate => a,
            _ => {
                let a = self.alpha_at(rate).map_err(|e| BlockError::at(e.to_string(), chunk.stamp.index))?;
                self.alpha = Some((rate, a));
                a
            }
        };
        if let Some(n) = self.next
            && n != chunk.stamp.index
        {
            self.gaps += 1;
            if self.gaps == 1 {
                out.warn(chunk.stamp, format!("input jumps from sample {n}; the running mean carries on"));
            }
        }
        self.next = Some(chunk.stamp.index + chunk.len() as u64);
        let mut m = self.mean;
        let y: Vec<_> = chunk
            .iq
            .iter()
            .map(|x| {
                let x = Complex64::new(x.re as f64, x.im as f64);
                let y = x - m;
                m += (x - m) * a;
                num_complex::Complex32::new(y.re as f32, y.im as f32)
            })
            .collect();
        self.mean = m;
        chunk.iq = y.into();
        out.push(DcRemoveOut::Samples, Item::Samples(chunk));
        Ok(())
    }
}
