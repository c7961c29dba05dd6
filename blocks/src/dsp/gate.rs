//! Range-gate arithmetic for one lobe dwell: sums over pulses, noise
//! correction, amplitude, expected spread and sub-bin range (docs/derivations.md §4-5).
//!
//! Range comes from a centroid of the noise-corrected gate, amplitude-weighted
//! by default ([`Weighting`]). Why amplitude and not power: a rectangular echo of `L` samples whose
//! delay falls a fraction `f` between samples is sampled (integrate-and-dump)
//! as weights `1-f, 1, ..., 1, f`; their amplitude centroid is exactly
//! `n0 + (L-1)/2 + f`, while power weights `(1-f)^2, ..., f^2` bend the
//! estimate towards the whole bin. The same holds for the triangle a matched
//! filter makes of it (a box convolved with a box keeps first moments).
//! Power weighting is offered for wide gates: it lets the many low-SNR bins
//! count little, and is nearly exact for echoes of four samples or more and
//! for matched-filter triangles (bias below 0.03 and 0.01 bin).

use crate::dsp::compressed_gate::CompressedSums;
use crate::dsp::wide_vectors::wide_vectors;
use num_complex::{Complex32, Complex64};

crate::block_choice! {
    /// How the pulses of a dwell are combined.
    pub enum Integration {
        /// Sum of |x|^2 over pulses, minus the expected noise.
        Noncoherent = "noncoherent",
        /// Complex mean over pulses per gate bin, then power minus the noise of the mean.
        Coherent = "coherent",
    }
}

crate::block_choice! {
    /// Where a dwell's echo energy is read from.
    pub enum AmplitudeFrom {
        /// Summed over the gate, bins independent (an uncompressed echo).
        Gate = "gate",
        /// The gate's centre bin alone.
        Peak = "peak",
        /// After a matched filter: the compressed output interpolated at the
        /// echo's fitted fractional delay (docs/derivations.md §7); the range
        /// is that delay.
        Interpolated = "interpolated",
        /// After a matched filter: summed over the gate, with the spread its
        /// correlated bins give (docs/derivations.md §7).
        CompressedGate = "compressed_gate",
    }
}

impl AmplitudeFrom {
    /// Whether the mode needs the compressed cross sums (noncoherent only).
    pub fn compressed(self) -> bool {
        matches!(self, AmplitudeFrom::Interpolated | AmplitudeFrom::CompressedGate)
    }
}

crate::block_choice! {
    /// How the gate bins are weighted for the range centroid.
    pub enum Weighting {
        /// sqrt of the noise-corrected power: exact for box echoes of any length
        /// and their matched-filter triangles, but low-SNR bins of a wide gate add
        /// spread.
        Amplitude = "amplitude",
        /// Noise-corrected power: low-SNR bins count little (less spread in wide
        /// gates, e.g. after a matched filter, where the triangle keeps it within
        /// 0.01 bin); biased up to 0.15 bin for echoes of one or two samples.
        Power = "power",
    }
}

impl Weighting {
    /// Centroid (bins from the first) of noise-corrected bin powers, or None
    /// when no bin stands over the noise. The echo's leading edge, the range
    /// every output gives, lies (P - 1) / 2 bins before it for an echo P
    /// samples long.
    pub fn centroid(self, corrected: &[f64]) -> Option<f64> {
        let weight = |c: f64| match self {
            Weighting::Amplitude => c.max(0.0).sqrt(),
            Weighting::Power => c.max(0.0),
        };
        let total: f64 = corrected.iter().map(|&c| weight(c)).sum();
        (total > 0.0).then(|| corrected.iter().enumerate().map(|(k, &c)| k as f64 * weight(c)).sum::<f64>() / total)
    }
}

crate::block_choice! {
    /// How a tracking gate re-centres itself.
    pub enum Follow { None = "none", Centroid = "centroid", EarlyLate = "early_late" }
}

impl Follow {
    pub fn accumulator() -> FollowAccumulator {
        FollowAccumulator::default()
    }
}

/// What one dwell's gate measured.
#[derive(Clone, Debug, PartialEq)]
pub struct GateSummary {
    /// sqrt of the noise-corrected per-pulse echo energy in the gate; NaN if not positive.
    pub amplitude: f64,
    /// Per-pulse echo energy in the gate over the noise power per sample (E); 0 if not positive.
    pub energy_ratio: f64,
    /// Expected var(ln amplitude).
    pub var_ln_amp: f64,
    /// Weighted centroid of the gate, absolute bin.
    pub centroid_bin: Option<f64>,
    /// The centroid minus the echo's centre offset: the echo's start, in bins.
    pub range_bin: Option<f64>,
    /// Noise-corrected power in the early and late halves (middle bin left out).
    pub early: f64,
    pub late: f64,
}

/// Running sums of one dwell's gate and noise region.
#[derive(Clone, Debug)]
pub struct DwellSums {
    /// First gate bin.
    pub start: usize,
    integration: Integration,
    /// Where the echo energy is read (see [`AmplitudeFrom`]).
    amplitude_from: AmplitudeFrom,
    /// Cross and lag products for the compressed modes.
    compressed: Option<CompressedSums>,
    power: Vec<f64>,
    sum: Vec<Complex64>,
    noise_sum: f64,
    noise_count: u64,
    pulses: u64,
    first_index: Option<u64>,
    last_index: u64,
}

wide_vectors! {
/// Sum of |x|^2 in double precision, over four running sums so the adds
/// do not wait on each other (the noise region is most of what a range
/// gate reads).
pub fn power_sum(x: &[Complex32]) -> f64 {
    let (quads, rest) = x.as_chunks::<4>();
    let mut acc = [0f64; 4];
    for q in quads {
        for (a, z) in acc.iter_mut().zip(q) {
            *a += z.norm_sqr() as f64;
        }
    }
    let tail: f64 = rest.iter().map(|z| z.norm_sqr() as f64).sum();
    (acc[0] + acc[1]) + (acc[2] + acc[3]) + tail
}
}

impl DwellSums {
    pub fn new(start: usize, width: usize, integration: Integration) -> DwellSums {
        let width = width.max(1);
        DwellSums {
            start,
            integration,
            amplitude_from: AmplitudeFrom::Gate,
            compressed: None,
            power: vec![0.0; width],
            sum: vec![Complex64::new(0.0, 0.0); width],
            noise_sum: 0.0,
            noise_count: 0,
            pulses: 0,
            first_index: None,
            last_index: 0,
        }
    }

    /// Read the echo energy as `from` says.
    pub fn with_amplitude_from(mut self, from: AmplitudeFrom) -> DwellSums {
        self.amplitude_from = from;
        self.compressed = from.compressed().then(|| CompressedSums::new(self.width()));
        self
    }

    pub fn width(&self) -> usize {
        self.power.len()
    }
    pub fn pulses(&self) -> u64 {
        self.pulses
    }

    /// Add one pulse: its gate samples, its noise reference samples, and the
    /// absolute index of its range bin 0.
    pub fn add(&mut self, gate: &[Complex32], noise: &[&[Complex32]], sweep_index: u64) {
        for ((p, s), x) in self.power.iter_mut().zip(self.sum.iter_mut()).zip(gate) {
            let x = Complex64::new(x.re as f64, x.im as f64);
            *p += x.norm_sqr();
            *s += x;
        }
        if let Some(c) = &mut self.compressed {
            c.add(gate, noise);
        }
        for part in noise {
            self.noise_sum += power_sum(part);
            self.noise_count += part.len() as u64;
        }
        self.pulses += 1;
        let first = sweep_index + self.start as u64;
        self.first_index.get_or_insert(first);
        self.last_index = first + self.width() as u64 - 1;
    }

    /// Mean noise power per sample, if any reference sample was seen.
    pub fn noise_power(&self) -> Option<f64> {
        (self.noise_count > 0).then(|| self.noise_sum / self.noise_count as f64)
    }

    /// Absolute index of the middle of the samples used.
    pub fn mid_index(&self) -> u64 {
        let first = self.first_index.unwrap_or(self.last_index);
        first + (self.last_index - first) / 2
    }

    /// Amplitude, energy ratio, expected spread and range with noise power
    /// `noise` per sample and an echo `pulse_samples` long.
    /// `detect_sigmas`: the noise-corrected energy must exceed this many
    /// standard deviations of what noise alone gives in the gate, else the
    /// dwell counts as holding no echo (amplitude NaN). Without it a lobe deep
    /// in its null still yields a "signal" whenever the noise happens to
    /// fluctuate up, and that ratio would read as an angle.
    pub fn summarise(&self, noise: f64, pulse_samples: f64, weighting: Weighting, detect_sigmas: f64) -> GateSummary {
        let n = self.pulses.max(1) as f64;
        let amplitude_bins = if self.amplitude_from == AmplitudeFrom::Peak {
            self.width() / 2..self.width() / 2 + 1
        } else {
            0..self.width()
        };
        // Noise-corrected per-pulse echo energy in each gate bin.
        let corrected: Vec<f64> = match self.integration {
            Integration::Noncoherent => self.power.iter().map(|p| p / n - noise).collect(),
            // The mean of N pulses keeps the echo and carries noise power noise/N.
            Integration::Coherent => self.sum.iter().map(|s| (s / n).norm_sqr() - noise / n).collect(),
        };
        let reading = self.compressed.as_ref().map(|c| match self.amplitude_from {
            AmplitudeFrom::Interpolated => c.interpolated(noise),
            _ => c.gate_sum(noise),
        });
        let (energy, e, var_ln_amp, g) = match reading {
            Some(r) => {
                let g = if r.position.is_some() { 1.0 } else { self.width() as f64 };
                (r.energy_ratio * noise, r.energy_ratio, r.var_ln_amp, g)
            }
            None => {
                let g = amplitude_bins.len() as f64;
                let energy: f64 = corrected[amplitude_bins].iter().sum();
                let e = if noise > 0.0 {
                    energy / noise
                } else if energy > 0.0 {
                    f64::INFINITY
                } else {
                    0.0
                };
                (energy, e, self.independent_bins_var(e, g), g)
            }
        };
        // Noise alone: each bin's mean of N powers has std noise/sqrt(N)
        // (noncoherent); the power of a mean of N has std noise/N (coherent).
        let noise_std = match self.integration {
            Integration::Noncoherent => noise * (g / n).sqrt(),
            Integration::Coherent => noise / n * g.sqrt(),
        };
        let amplitude = if energy > 0.0 && energy > detect_sigmas * noise_std { energy.sqrt() } else { f64::NAN };
        // The interpolated reading fits the echo's delay itself.
        let fitted = reading.and_then(|r| r.position).filter(|_| e > 0.0);
        let centroid_bin = match fitted {
            Some(p) => Some(self.start as f64 + p),
            None => weighting.centroid(&corrected).map(|c| self.start as f64 + c),
        };
        let half = self.width() / 2;
        let early = corrected[..half].iter().map(|c| c.max(0.0)).sum();
        let late = corrected[self.width() - half..].iter().map(|c| c.max(0.0)).sum();
        GateSummary {
            amplitude,
            energy_ratio: e.max(0.0),
            var_ln_amp,
            centroid_bin,
            range_bin: centroid_bin.map(|c| c - (pulse_samples - 1.0) / 2.0),
            early,
            late,
        }
    }
}

impl DwellSums {
    /// Expected var(ln A) of a gate of `g` independent bins at energy ratio `e`.
    fn independent_bins_var(&self, e: f64, g: f64) -> f64 {
        let n = self.pulses.max(1) as f64;
        if e.is_nan() || e <= 0.0 {
            return f64::INFINITY;
        }
        match self.integration {
            // docs/derivations.md §4: var(ln A) ~= (G/E^2 + 2/E) / (4N).
            Integration::Noncoherent => (g / (e * e) + 2.0 / e) / (4.0 * n),
            // The coherent mean is one "pulse" whose echo energy over its own
            // noise (noise/N) is N E; put E -> N E, N -> 1 in the same form:
            // (G/(N E)^2 + 2/(N E)) / 4, which for G = 1 is 1/(2 N s) to first
            // order, the coherent result of §4.
            Integration::Coherent => {
                let ne = n * e;
                (g / (ne * ne) + 2.0 / ne) / 4.0
            }
        }
    }
}

/// Follow measurements over one lobe cycle.
#[derive(Clone, Debug, Default)]
pub struct FollowAccumulator {
    weight: f64,
    weighted_centroid: f64,
    early: f64,
    late: f64,
}

impl FollowAccumulator {
    pub fn add(&mut self, s: &GateSummary, _gate_start: usize) {
        if let Some(c) = s.centroid_bin
            && s.energy_ratio > 0.0
            && s.energy_ratio.is_finite()
        {
            self.weight += s.energy_ratio;
            self.weighted_centroid += s.energy_ratio * c;
        }
        self.early += s.early;
        self.late += s.late;
    }

    /// The new gate start the cycle's measurements ask for, if any.
    pub fn proposal(&self, follow: Follow, old_start: usize, width: usize) -> Option<usize> {
        match follow {
            Follow::None => None,
            Follow::Centroid => (self.weight > 0.0).then(|| {
                let c = self.weighted_centroid / self.weight;
                (c - (width as f64 - 1.0) / 2.0).round().max(0.0) as usize
            }),
            Follow::EarlyLate => {
                let total = self.early + self.late;
                (total > 0.0 && width >= 2).then(|| {
                    // For an echo filling the gate, (late-early)/(late+early) = 2 d / width
                    // for a displacement of d bins.
                    let d = (self.late - self.early) / total * width as f64 / 2.0;
                    (old_start as f64 + d.round()).max(0.0) as usize
                })
            }
        }
    }
}

/// Start (index into `power`) of the `width`-bin window holding the most power.
pub fn best_gate_start(power: &[f64], width: usize) -> Option<usize> {
    if width == 0 || power.len() < width {
        return None;
    }
    let mut sum: f64 = power[..width].iter().sum();
    let (mut best, mut best_sum) = (0, sum);
    for s in 1..=power.len() - width {
        sum += power[s + width - 1] - power[s - 1];
        if sum > best_sum {
            best = s;
            best_sum = sum;
        }
    }
    (best_sum > 0.0).then_some(best)
}

#[cfg(test)]
mod tests {
    #[test]
    fn power_sum_matches_a_plain_sum() {
        let mut rng = crate::dsp::rng::Rng::new(4);
        for n in [0usize, 1, 3, 4, 5, 53, 200] {
            let x: Vec<Complex32> = (0..n).map(|_| rng.complex_gaussian(2.0)).collect();
            let plain: f64 = x.iter().map(|z| z.norm_sqr() as f64).sum();
            assert!((power_sum(&x) - plain).abs() <= 1e-12 * plain.max(1.0), "{n}");
        }
    }

    use super::*;

    #[test]
    fn box_echo_centroid_is_exact_without_noise() {
        // Integrate-and-dump samples of a 4-sample box at delay 10.3: weights 0.7,1,1,1,0.3.
        let mut sums = DwellSums::new(9, 7, Integration::Noncoherent);
        let gate: Vec<Complex32> =
            [0.0, 0.7, 1.0, 1.0, 1.0, 0.3, 0.0].iter().map(|&a| Complex32::new(a, 0.0)).collect();
        sums.add(&gate, &[], 0);
        let s = sums.summarise(0.0, 4.0, Weighting::Amplitude, 3.0);
        assert!((s.range_bin.unwrap() - 10.3).abs() < 1e-6, "{:?}", s.range_bin);
    }

    #[test]
    fn peak_amplitude_reads_the_centre_bin_and_ranges_over_the_gate() {
        // A matched-filter triangle 0.5, 1, 0.5 (amplitudes) at bins 4..7, no noise.
        let mut sums = DwellSums::new(4, 3, Integration::Noncoherent).with_amplitude_from(AmplitudeFrom::Peak);
        let gate: Vec<Complex32> = [0.5, 1.0, 0.5].iter().map(|&a| Complex32::new(a, 0.0)).collect();
        sums.add(&gate, &[], 0);
        // Noise 0.25 per bin: the outer bins correct to 0, the centre to 0.75.
        let s = sums.summarise(0.25, 1.0, Weighting::Power, 0.0);
        assert!((s.amplitude - 0.75f64.sqrt()).abs() < 1e-6 && (s.energy_ratio - 3.0).abs() < 1e-6, "{s:?}");
        // One bin: var(ln A) = (1/E^2 + 2/E)/(4N) at E = 3, N = 1.
        assert!((s.var_ln_amp - (1.0 / 9.0 + 2.0 / 3.0) / 4.0).abs() < 1e-6);
        assert!((s.range_bin.unwrap() - 5.0).abs() < 1e-12);
    }

    #[test]
    fn best_window_is_found() {
        let p = [0.0, 1.0, 0.0, 5.0, 6.0, 1.0, 0.0];
        assert_eq!(best_gate_start(&p, 2), Some(3));
        assert_eq!(best_gate_start(&p, 8), None);
        assert_eq!(best_gate_start(&[0.0; 4], 2), None);
    }
}
