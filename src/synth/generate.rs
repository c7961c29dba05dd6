//! The chunked generator of a [`Model`]'s samples. Every random draw tied
//! to a pulse or dwell comes from its own seeded stream, and the noise
//! streams run sample by sample, so the output does not depend on the
//! chunk size.

use super::model::*;
use super::scenario::{Fluctuation, PhaseMode};
use lobeflow_blocks::SPEED_OF_LIGHT;
use lobeflow_blocks::dsp::rng::Rng;
use num_complex::{Complex32, Complex64};
use std::f64::consts::PI;

/// One chunk of generated frames (buffers reused between chunks).
#[derive(Default)]
pub struct Frames {
    /// Index of the first sample.
    pub index: u64,
    pub iq: Vec<Complex32>,
    pub sync: Vec<f32>,
    pub trigger: Vec<f32>,
}

/// Produces the capture chunk by chunk, unscaled (noise power 1).
pub struct Generator {
    model: Model,
    next: u64,
    noise: Rng,
    sync_noise: Rng,
    /// Accumulator in f64 so many small additions stay exact enough.
    acc: Vec<Complex64>,
}

impl Generator {
    pub fn new(model: Model) -> Generator {
        let noise = sub_rng(model.seed, STREAM_NOISE, 0);
        let sync_noise = sub_rng(model.seed, STREAM_SYNC, 0);
        Generator { model, next: 0, noise, sync_noise, acc: Vec::new() }
    }

    pub fn model(&self) -> &Model {
        &self.model
    }

    /// Fill `out` with the next chunk; false when the capture is complete.
    pub fn next_chunk(&mut self, out: &mut Frames) -> bool {
        let m = &self.model;
        let n = (m.chunk as u64).min(m.samples - self.next) as usize;
        if n == 0 {
            return false;
        }
        let n0 = self.next;
        out.index = n0;
        self.acc.clear();
        self.acc.extend((0..n).map(|_| {
            let z = self.noise.complex_gaussian(1.0);
            Complex64::new(z.re as f64, z.im as f64)
        }));
        out.trigger.clear();
        out.trigger.resize(if m.trigger_channel { n } else { 0 }, 0.0);
        out.sync.clear();
        let ta = m.time_of(n0 as f64);
        let tb = m.time_of((n0 + n as u64) as f64);
        let signal = m.signal.clone();
        if m.sync_channel {
            self.fill_sync(n0, n, &mut out.sync);
        }
        self.add_transients(n0, n, ta, tb);
        match signal {
            Signal::Pulsed(p) => self.add_pulses(&p, n0, n, ta, tb, &mut out.trigger),
            Signal::Beacon(b) => self.add_beacon(&b, n0, n),
        }
        out.iq.clear();
        out.iq.extend(self.acc.iter().map(|z| Complex32::new(z.re as f32, z.im as f32)));
        self.next += n as u64;
        true
    }

    fn fill_sync(&mut self, n0: u64, n: usize, sync: &mut Vec<f32>) {
        let m = &self.model;
        let lobes = m.lobes.len();
        let mut d = m.dwell_at_sample(n0 as f64);
        let mut this_switch = m.sample_pos(m.switch_time(d));
        let mut next_switch = m.sample_pos(m.switch_time(d + 1));
        for i in 0..n {
            let x = (n0 + i as u64) as f64;
            while x >= next_switch {
                d += 1;
                this_switch = next_switch;
                next_switch = m.sample_pos(m.switch_time(d + 1));
            }
            let level = sync_level(m.lobe_of_dwell(d), lobes);
            let since = x - this_switch;
            let v = if since < SYNC_RAMP_SAMPLES {
                let prev = sync_level(m.lobe_of_dwell(d - 1), lobes);
                prev + (level - prev) * since.max(0.0) / SYNC_RAMP_SAMPLES
            } else {
                level
            };
            sync.push((v + SYNC_NOISE_RMS * self.sync_noise.gaussian()) as f32);
        }
    }

    /// A damped ring at an eighth of the sample rate from each switch instant.
    fn add_transients(&mut self, n0: u64, n: usize, ta: f64, tb: f64) {
        let m = &self.model;
        let Some((amp, len)) = m.transient else {
            return;
        };
        let len_samples = len * m.rate;
        let end = (n0 + n as u64) as f64;
        let mut d = m.dwell_at(ta - len);
        loop {
            let s = m.sample_pos(m.switch_time(d));
            if s >= end || m.switch_time(d) >= tb {
                break;
            }
            let first = s.ceil().max(n0 as f64);
            let last = (s + len_samples).ceil().min(end);
            let mut idx = first;
            while idx < last {
                let dt = idx - s;
                let env = amp * (-5.0 * dt / len_samples).exp();
                self.acc[(idx as u64 - n0) as usize] += Complex64::from_polar(env, 2.0 * PI * 0.125 * dt);
                idx += 1.0;
            }
            d += 1;
        }
    }

    fn add_pulses(&mut self, p: &Pulsed, n0: u64, n: usize, ta: f64, tb: f64, trigger: &mut [f32]) {
        let m = &self.model;
        let reach = m.max_delay(p) + p.pulse_length;
        let k_first = ((ta - reach - p.t0) / p.pri).floor() as i64 - 1;
        let k_last = ((tb - p.t0) / p.pri).ceil() as i64 + 1;
        let lo = n0 as f64;
        let hi = (n0 + n as u64) as f64;
        // Adds `value` times the coverage of [a, b) (sample units) to the chunk.
        let add_rect = |acc: &mut [Complex64], a: f64, b: f64, value: Complex64| {
            if b <= lo || a >= hi {
                return;
            }
            let first = a.floor().max(lo) as u64;
            let last = b.ceil().min(hi) as u64;
            for idx in first..last {
                let x = idx as f64;
                let cover = b.min(x + 1.0) - a.max(x);
                if cover > 0.0 {
                    acc[(idx - n0) as usize] += value * cover;
                }
            }
        };
        let len_samples = p.pulse_length * m.rate;
        for k in k_first..=k_last {
            let tx = m.transmit_time(p, k);
            let a = m.sample_pos(tx);
            if let Some(leak) = p.leakage_amplitude {
                add_rect(&mut self.acc, a, a + len_samples, Complex64::new(leak, 0.0));
            }
            if !trigger.is_empty() {
                let first = a.ceil();
                let last = (a + len_samples).ceil().max(first + 1.0);
                for idx in first.max(lo) as u64..last.min(hi).max(lo) as u64 {
                    trigger[(idx - n0) as usize] = 1.0;
                }
            }
            let delay = 2.0 * p.range.at_time(tx) / SPEED_OF_LIGHT;
            let ea = m.sample_pos(tx + delay);
            if ea + len_samples <= lo || ea >= hi {
                continue;
            }
            let d = k.div_euclid(p.pulses_per_dwell);
            let gain = m.pattern_factor(m.lobe_of_dwell(d), tx) * p.amplitude;
            let value = m.target_factor(p.fluctuation, p.phase, d, k) * gain;
            add_rect(&mut self.acc, ea, ea + len_samples, value);
        }
    }

    fn add_beacon(&mut self, b: &Beacon, n0: u64, n: usize) {
        let m = &self.model;
        let mut d = m.dwell_at_sample(n0 as f64);
        let mut next_switch = m.sample_pos(m.switch_time(d + 1));
        let mut gain = Complex64::new(0.0, 0.0);
        let mut gain_dwell = None;
        for i in 0..n {
            let x = (n0 + i as u64) as f64;
            while x >= next_switch {
                d += 1;
                next_switch = m.sample_pos(m.switch_time(d + 1));
            }
            if gain_dwell != Some(d) {
                let mid = 0.5 * (m.switch_time(d) + m.switch_time(d + 1));
                let fluct = match b.fluctuation {
                    Fluctuation::PerDwell => m.target_factor(Fluctuation::PerDwell, PhaseMode::PerDwell, d, 0),
                    _ => Complex64::new(1.0, 0.0),
                };
                gain = fluct * (b.amplitude * m.pattern_factor(m.lobe_of_dwell(d), mid));
                gain_dwell = Some(d);
            }
            // Tone phase from the sample index, so long captures keep precision.
            let cycles = (b.tone_hz * (x / m.rate)).fract() + (b.tone_hz * m.start).fract();
            self.acc[i] += gain * Complex64::from_polar(1.0, 2.0 * PI * cycles);
        }
    }
}
