//! `dc_remove`: takes off the DC offset cheap receivers leave at 0 Hz with a
//! one-pole high-pass (running-mean removal). `y[n] = x[n] - m[n-1]`,
//! `m[n] = m[n-1] + a (x[n] - m[n-1])`, so `H(z) = (1 - z^-1) / (1 - (1-a) z^-1)`:
//! a zero at DC and a pole at `1-a`, with `a = 1 - exp(-2 pi corner / fs)`.

use crate::block::{Block, BlockError, BlockSpec, BuildContext, Outputs, PortSpec};
use crate::item::{Item, ItemKind};
use crate::param::{ParamSpec, ParamType, Params, Unit};
use num_complex::Complex64;

pub const SPEC: BlockSpec = BlockSpec {
    kind: "dc_remove",
    doc: "Removes the receiver's DC offset (the spike at 0 Hz) with a one-pole high-pass; aux channels pass unchanged.",
    inputs: &[PortSpec::required("samples", ItemKind::Samples, "baseband samples")],
    outputs: &[PortSpec::optional("samples", ItemKind::Samples, "the samples without their DC offset")],
    params: &[ParamSpec {
        name: "corner",
        ty: ParamType::Number { unit: Unit::Hertz, min: 1e-6, max: 1e9 },
        default: Some("100 Hz"),
        doc: "-3 dB corner of the high-pass; keep it far below the signals of interest",
    }],
    build,
};

fn build(p: &Params, _: &BuildContext) -> Result<Box<dyn Block>, String> {
    Ok(Box::new(DcRemove {
        corner: p.num("corner")?,
        alpha: None,
        mean: Complex64::new(0.0, 0.0),
        next: None,
        gaps: 0,
    }))
}

/// The smoothing factor for a corner frequency at a sample rate.
pub fn alpha(corner: f64, rate: f64) -> f64 {
    1.0 - (-2.0 * std::f64::consts::PI * corner / rate).exp()
}

struct DcRemove {
    corner: f64,
    alpha: Option<(f64, f64)>,
    mean: Complex64,
    next: Option<u64>,
    gaps: u64,
}

impl Block for DcRemove {
    fn process(&mut self, _port: usize, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let Item::Samples(mut chunk) = item else {
            return Ok(());
        };
        let rate = chunk.stamp.checked_rate("dc_remove")?;
        let a = match self.alpha {
            Some((r, a)) if r == rate => a,
            _ => {
                if self.corner >= rate / 2.0 {
                    return Err(BlockError::at(
                        format!("dc_remove: corner {} Hz is not below half the sample rate ({rate} S/s)", self.corner),
                        chunk.stamp.index,
                    ));
                }
                let a = alpha(self.corner, rate);
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
        out.push(0, Item::Samples(chunk));
        Ok(())
    }
}
