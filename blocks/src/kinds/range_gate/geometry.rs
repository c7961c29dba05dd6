//! The range gate's settings in whole range bins at the stream's sample rate.

use super::RangeGateSettings;
use crate::block::BlockError;
use crate::error::ParamError;
use crate::typed::DistanceSetting;

/// Parameters converted to whole bins at one sample rate.
#[derive(Clone, Debug)]
pub(super) struct Geometry {
    pub(super) rate: f64,
    pub(super) gate_start: usize,
    pub(super) gate_width: usize,
    pub(super) search_start: usize,
    /// 0 = up to the noise region / sweep end.
    pub(super) search_end: usize,
    /// None = the last `noise_width` bins of each sweep.
    pub(super) noise_start: Option<usize>,
    pub(super) noise_width: usize,
    pub(super) pulse_samples: f64,
}

fn whole_bins(name: &str, d: &DistanceSetting, rate: f64) -> Result<usize, ParamError> {
    let b = d.bins(rate)?;
    if !(0.0..=1e8).contains(&b) {
        return Err(ParamError::invalid(name, format!("{b} bins at {rate} S/s; too large")));
    }
    Ok(b.round() as usize)
}

impl Geometry {
    pub(super) fn resolve(s: &RangeGateSettings, rate: f64) -> Result<Geometry, BlockError> {
        if !(rate.is_finite() && rate > 0.0) {
            return Err(BlockError::new(format!("range_gate: sweeps carry a sample rate of {rate} S/s")));
        }
        let noise_start = whole_bins("noise_start", &s.noise_start, rate)?;
        let pulse = s.pulse.samples(rate, None)?;
        if !(pulse.is_finite() && (0.0..=1e8).contains(&pulse)) {
            return Err(ParamError::invalid("pulse", format!("{pulse} samples at {rate} S/s")).into());
        }
        let g = Geometry {
            rate,
            gate_start: whole_bins("gate_start", &s.gate_start, rate)?,
            gate_width: whole_bins("gate_width", &s.gate_width, rate)?.max(1),
            search_start: whole_bins("search_start", &s.search_start, rate)?,
            search_end: whole_bins("search_end", &s.search_end, rate)?,
            noise_start: (noise_start > 0).then_some(noise_start),
            noise_width: whole_bins("noise_width", &s.noise_width, rate)?.max(1),
            pulse_samples: pulse.round().max(1.0),
        };
        if g.search_end != 0 && g.search_end < g.search_start + g.gate_width {
            return Err(ParamError::invalid(
                "search_end",
                format!(
                    "search window {}..{} bins is narrower than the gate ({} bins)",
                    g.search_start, g.search_end, g.gate_width
                ),
            )
            .into());
        }
        Ok(g)
    }
    /// The noise reference bins of a sweep of `len` samples.
    pub(super) fn noise_range(&self, len: usize) -> std::ops::Range<usize> {
        match self.noise_start {
            Some(s) => s.min(len)..(s + self.noise_width).min(len),
            None => len.saturating_sub(self.noise_width)..len,
        }
    }
}
