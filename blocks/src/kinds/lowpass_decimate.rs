//! `lowpass_decimate`: a windowed-sinc low-pass (Blackman window, unity gain
//! at 0 Hz) followed by keeping every `factor`-th sample; only the kept
//! outputs are computed. The filter is centred (its delay of `(taps-1)/2`
//! samples is taken out), so output `m` is the filtered value at input sample
//! `m * factor`: its stamp index is `m` at `rate / factor`. Aux channels are
//! decimated by picking the sample at `m * factor`.

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::dsp::spectrum::lowpass_taps;
use crate::error::{BuildError, ParamError};
use crate::facts::{Facts, StreamFacts};
use crate::item::{Item, ItemKind, SampleChunk, Stamp};
use crate::param::{ParamType, Unit};
use crate::typed::TypedBlock;
use num_complex::Complex32;

pub const SPEC: BlockSpec = BlockSpec::typed::<LowpassDecimate>(
    "lowpass_decimate",
    "Low-pass filters (windowed sinc) and keeps every factor-th sample; stamps count output samples at rate/factor, \
     aux channels are picked at the kept samples.",
);

crate::block_settings! {
    /// Settings of `lowpass_decimate`.
    pub struct LowpassDecimateSettings {
        cutoff: f64 {
            ty: ParamType::Number { unit: Unit::Hertz, min: 1e-6, max: 5e9 },
            default: None,
            doc: "-6 dB edge of the low-pass; keep it below half the output rate",
        },
        taps: usize {
            ty: ParamType::Integer { min: 3, max: 8191 },
            default: Some("63"),
            doc: "filter length (odd, so the delay is whole samples); transition about 5.5 rate/taps wide",
        },
        factor: u64 {
            ty: ParamType::Integer { min: 1, max: 4096 },
            default: Some("4"),
            doc: "keep every factor-th sample",
        },
    }
}

crate::block_ports! {
    inputs pub enum LowpassIn { Samples = required("samples", ItemKind::Samples, "baseband samples") }
}

crate::block_ports! {
    outputs pub enum LowpassOut { Samples = optional("samples", ItemKind::Samples, "filtered, decimated samples") }
}

impl TypedBlock for LowpassDecimate {
    type Settings = LowpassDecimateSettings;
    type In = LowpassIn;
    type Out = LowpassOut;

    fn build(s: LowpassDecimateSettings, _: &BuildContext) -> Result<Self, BuildError> {
        if s.taps.is_multiple_of(2) {
            return Err(ParamError::invalid(
                "taps",
                format!("must be odd so the filter delay is whole samples (got {}; try {})", s.taps, s.taps + 1),
            )
            .into());
        }
        Ok(LowpassDecimate {
            cutoff: s.cutoff,
            taps: s.taps,
            factor: s.factor.max(1),
            filter: Vec::new(),
            run: None,
            restarts: 0,
        })
    }

    /// A known input rate checks the cutoff now; the output runs at rate/factor.
    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError> {
        let mut facts = facts.merged();
        if let Some(rate) = facts.rate {
            self.check_cutoff(rate)?;
            facts.rate = Some(rate / self.factor as f64);
            facts.pri_samples = facts.pri_samples.map(|pri| pri / self.factor as f64);
        }
        Ok(facts)
    }

    fn process(&mut self, port: LowpassIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let (LowpassIn::Samples, Item::Samples(chunk)) = (port, item) else {
            return Ok(());
        };
        self.take(chunk, out)
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.close(out);
        Ok(())
    }
}

/// One contiguous stretch of input.
struct Run {
    rate: f64,
    /// Absolute index of `iq[0]` (may be "before" the capture: zero padding).
    buf_start: i64,
    iq: Vec<Complex32>,
    sync: Option<Vec<f32>>,
    trigger: Option<Vec<f32>>,
    /// Input index of the next output's centre (a multiple of `factor`).
    next_centre: i64,
    /// Input index after the last real sample.
    next_in: i64,
}

pub struct LowpassDecimate {
    cutoff: f64,
    taps: usize,
    factor: u64,
    filter: Vec<f32>,
    run: Option<Run>,
    restarts: u64,
}

impl LowpassDecimate {
    fn half(&self) -> i64 {
        (self.taps as i64 - 1) / 2
    }

    fn check_cutoff(&self, rate: f64) -> Result<(), ParamError> {
        if self.cutoff >= rate / 2.0 {
            return Err(ParamError::invalid(
                "cutoff",
                format!("{} Hz is not below half the input rate ({rate} S/s)", self.cutoff),
            ));
        }
        Ok(())
    }

    fn open(&mut self, c: &SampleChunk, out: &mut Outputs) -> Result<Run, BlockError> {
        let rate = c.stamp.checked_rate("lowpass_decimate")?;
        self.check_cutoff(rate).map_err(|e| BlockError::at(e.to_string(), c.stamp.index))?;
        if self.filter.is_empty() || self.run.as_ref().is_some_and(|r| r.rate != rate) {
            self.filter = lowpass_taps(self.taps, self.cutoff / rate).into_iter().map(|t| t as f32).collect();
            if self.cutoff > rate / (2.0 * self.factor as f64) {
                out.warn(
                    c.stamp,
                    format!(
                        "cutoff {} Hz is above half the output rate ({} S/s): the band edge will alias",
                        self.cutoff,
                        rate / self.factor as f64
                    ),
                );
            }
        }
        let h = self.half();
        let start = c.stamp.index as i64;
        let d = self.factor as i64;
        Ok(Run {
            rate,
            buf_start: start - h,
            iq: vec![Complex32::new(0.0, 0.0); h as usize],
            sync: c.sync.as_ref().map(|_| vec![0.0; h as usize]),
            trigger: c.trigger.as_ref().map(|_| vec![0.0; h as usize]),
            next_centre: (start + d - 1).div_euclid(d) * d,
            next_in: start,
        })
    }

    /// Compute every output whose window is inside the buffer (and whose
    /// centre is a real sample), send them, and drop used input.
    fn drain(&mut self, out: &mut Outputs) {
        let h = self.half();
        let d = self.factor as i64;
        let Some(run) = &mut self.run else { return };
        let first_out = run.next_centre / d;
        let mut y = Vec::new();
        let mut sync = run.sync.as_ref().map(|_| Vec::new());
        let mut trigger = run.trigger.as_ref().map(|_| Vec::new());
        while run.next_centre + h < run.buf_start + run.iq.len() as i64 && run.next_centre < run.next_in {
            let pos = (run.next_centre - run.buf_start) as usize;
            let window = &run.iq[pos - h as usize..=pos + h as usize];
            // Symmetric taps: correlation and convolution coincide.
            let acc = window.iter().zip(&self.filter).fold(Complex32::new(0.0, 0.0), |a, (x, t)| a + x * *t);
            y.push(acc);
            if let (Some(v), Some(s)) = (&mut sync, &run.sync) {
                v.push(s[pos]);
            }
            if let (Some(v), Some(s)) = (&mut trigger, &run.trigger) {
                v.push(s[pos]);
            }
            run.next_centre += d;
        }
        let drop = (run.next_centre - h - run.buf_start).clamp(0, run.iq.len() as i64) as usize;
        run.iq.drain(..drop);
        if let Some(s) = &mut run.sync {
            s.drain(..drop);
        }
        if let Some(s) = &mut run.trigger {
            s.drain(..drop);
        }
        run.buf_start += drop as i64;
        if !y.is_empty() {
            out.push(
                LowpassOut::Samples,
                Item::Samples(SampleChunk {
                    stamp: Stamp::new(first_out as u64, run.rate / d as f64),
                    iq: y.into(),
                    sync: sync.map(Into::into),
                    trigger: trigger.map(Into::into),
                }),
            );
        }
    }

    /// End of a stretch: zeros past the end let the last outputs finish.
    fn close(&mut self, out: &mut Outputs) {
        let h = self.half() as usize;
        if let Some(run) = &mut self.run {
            run.iq.extend(std::iter::repeat_n(Complex32::new(0.0, 0.0), h));
            for s in [&mut run.sync, &mut run.trigger].into_iter().flatten() {
                s.extend(std::iter::repeat_n(0.0, h));
            }
        }
        self.drain(out);
        self.run = None;
    }
}

impl LowpassDecimate {
    fn take(&mut self, chunk: SampleChunk, out: &mut Outputs) -> Result<(), BlockError> {
        if chunk.is_empty() {
            return Ok(());
        }
        if let Some(run) = &self.run
            && (run.next_in != chunk.stamp.index as i64
                || run.rate != chunk.stamp.rate
                || run.sync.is_some() != chunk.sync.is_some()
                || run.trigger.is_some() != chunk.trigger.is_some())
        {
            let from = run.next_in;
            self.close(out);
            self.restarts += 1;
            if self.restarts <= 3 {
                out.warn(
                    chunk.stamp,
                    format!("input jumps from sample {from} (or its channels or rate change); the filter restarts"),
                );
            }
        }
        if self.run.is_none() {
            self.run = Some(self.open(&chunk, out)?);
        }
        if let Some(run) = &mut self.run {
            run.iq.extend_from_slice(&chunk.iq);
            if let (Some(b), Some(s)) = (&mut run.sync, &chunk.sync) {
                b.extend_from_slice(s);
            }
            if let (Some(b), Some(s)) = (&mut run.trigger, &chunk.trigger) {
                b.extend_from_slice(s);
            }
            run.next_in += chunk.len() as i64;
        }
        self.drain(out);
        Ok(())
    }
}
