//! First pass: the distribution of sample power (noise floor, the level of
//! the strongest regular events) and of the sync channel (its levels).

use super::{Figure, Installation, Source, number};
use crate::capture::reader::CaptureInfo;
use num_complex::Complex32;

/// Power histogram: bins of 0.1 dB from -300 dB to +60 dB (full scale 0 dB).
const POWER_LO_DB: f64 = -300.0;
const POWER_STEP_DB: f64 = 0.1;
const POWER_BINS: usize = 3600;
/// Sync histogram: bins of 0.001 full scale over [-1.2, 1.2].
const SYNC_LO: f64 = -1.2;
const SYNC_STEP: f64 = 0.001;
const SYNC_BINS: usize = 2400;

pub(super) struct Survey {
    pub info: CaptureInfo,
    pub rate: f64,
    pub frames: u64,
    power: Vec<u64>,
    pub sync: Option<Vec<u64>>,
    /// Mean of the complex samples (a receiver's DC offset).
    pub mean: Complex32,
}

impl Survey {
    /// Power (linear) below which `fraction` of the samples lie.
    pub fn power_quantile(&self, fraction: f64) -> f64 {
        let want = (fraction * self.frames as f64).ceil().max(1.0) as u64;
        let mut below = 0u64;
        for (k, &n) in self.power.iter().enumerate() {
            below += n;
            if below >= want {
                return 10f64.powf((POWER_LO_DB + (k as f64 + 0.5) * POWER_STEP_DB) / 10.0);
            }
        }
        10f64.powf((POWER_LO_DB + POWER_BINS as f64 * POWER_STEP_DB) / 10.0)
    }

    /// Mean noise power per sample: the median of |x|^2 over ln 2 (the
    /// median of an exponential distribution is ln 2 times its mean), which
    /// pulses or transients filling a small part of the samples barely move.
    pub fn noise_power(&self) -> f64 {
        self.power_quantile(0.5) / std::f64::consts::LN_2
    }

    /// Power of the strongest regular events: the level exceeded by one
    /// sample in 5000 (at least 20 samples), so a lone glitch does not set it.
    pub fn event_power(&self) -> f64 {
        let top = (20.0 / self.frames as f64).max(2e-4);
        self.power_quantile(1.0 - top)
    }
}

pub(super) fn survey(source: &Source) -> Result<Survey, String> {
    let mut power = vec![0u64; POWER_BINS];
    let mut sync: Option<Vec<u64>> = None;
    let (mut frames, mut sum) = (0u64, num_complex::Complex64::new(0.0, 0.0));
    let info = source.pass(|c| {
        for z in c.iq {
            let p = f64::from(z.norm_sqr());
            let db = if p > 0.0 { 10.0 * p.log10() } else { POWER_LO_DB };
            let k = ((db - POWER_LO_DB) / POWER_STEP_DB).clamp(0.0, (POWER_BINS - 1) as f64) as usize;
            power[k] += 1;
            sum += num_complex::Complex64::new(f64::from(z.re), f64::from(z.im));
        }
        frames += c.iq.len() as u64;
        if let Some(s) = c.sync {
            let h = sync.get_or_insert_with(|| vec![0u64; SYNC_BINS]);
            for &v in s {
                let k = ((f64::from(v) - SYNC_LO) / SYNC_STEP).clamp(0.0, (SYNC_BINS - 1) as f64) as usize;
                h[k] += 1;
            }
        }
    })?;
    let mean = if frames > 0 { sum / frames as f64 } else { sum };
    Ok(Survey { rate: info.rate, info, frames, power, sync, mean: Complex32::new(mean.re as f32, mean.im as f32) })
}

/// The sync channel's levels: clusters of its histogram.
#[derive(Clone, Debug)]
pub(super) struct SyncLevels {
    /// Level centres, lowest first.
    pub levels: Vec<f64>,
    /// Standard deviation of the samples around each level.
    pub spread: Vec<f64>,
    /// Share of the samples at each level.
    pub share: Vec<f64>,
}

/// A level must hold at least this share of the samples (transitions between
/// levels fill the bins between them thinly).
const MIN_LEVEL_SHARE: f64 = 0.03;

impl SyncLevels {
    /// Clusters: runs of bins above a small share of the largest smoothed
    /// bin, each kept when it holds [`MIN_LEVEL_SHARE`] of the samples.
    pub fn from_histogram(h: &[u64]) -> SyncLevels {
        let total: u64 = h.iter().sum();
        let smooth: Vec<f64> =
            (0..h.len()).map(|k| h[k.saturating_sub(4)..(k + 5).min(h.len())].iter().sum::<u64>() as f64).collect();
        let top = smooth.iter().cloned().fold(0.0, f64::max);
        let mut out = SyncLevels { levels: Vec::new(), spread: Vec::new(), share: Vec::new() };
        let mut k = 0;
        while k < h.len() {
            if smooth[k] <= top * 1e-3 {
                k += 1;
                continue;
            }
            let start = k;
            while k < h.len() && smooth[k] > top * 1e-3 {
                k += 1;
            }
            let (mut n, mut s1, mut s2) = (0.0, 0.0, 0.0);
            for (j, &c) in h.iter().enumerate().take(k).skip(start) {
                let v = SYNC_LO + (j as f64 + 0.5) * SYNC_STEP;
                n += c as f64;
                s1 += c as f64 * v;
                s2 += c as f64 * v * v;
            }
            if n >= MIN_LEVEL_SHARE * total as f64 {
                let mean = s1 / n;
                out.levels.push(mean);
                out.spread.push((s2 / n - mean * mean).max(0.0).sqrt());
                out.share.push(n / total as f64);
            }
        }
        out
    }

    /// Index of the level nearest to `v`.
    pub fn nearest(&self, v: f64) -> usize {
        let mut best = 0;
        for (i, l) in self.levels.iter().enumerate() {
            if (v - l).abs() < (v - self.levels[best]).abs() {
                best = i;
            }
        }
        best
    }

    pub fn describe(&self, inst: &mut Installation) {
        inst.sync_levels = self.levels.clone();
        inst.figures.push(Figure::new(
            "sync levels (count)",
            self.levels.len() as f64,
            "levels",
            0.0,
            "clusters of the sync channel's values, each holding 3 % of the samples or more".into(),
        ));
        for (i, l) in self.levels.iter().enumerate() {
            let sigma = self.spread[i];
            inst.figures.push(Figure::new(
                &format!("sync level {}", i + 1),
                *l,
                "FS",
                (3.0 * sigma).max(1e-3),
                format!(
                    "{} % of the samples, spread {} FS; 3 spreads or the bin width",
                    number(100.0 * self.share[i]),
                    number(sigma)
                ),
            ));
        }
    }
}
