//! `tone_dwell`: the beacon-mode integrator. Per lobe dwell, the amplitude of
//! a known tone from a windowed transform: the peak is found in an FFT and
//! refined to where the windowed DTFT peaks; the amplitude is read off at the
//! median frequency of the last few dwells (the tone is one oscillator for
//! every lobe, and a frequency fitted to the same noise would bias the
//! amplitude up). With the default rect window this is the least-squares fit
//! of a tone and reaches the white-noise limit; Hann and Blackman cost their
//! noise bandwidth but keep a strong interferer's leakage out. The noise
//! comes from bins well away from the tone, and the expected spread includes
//! each window's noise bandwidth (docs/derivations.md). Shared math:
//! [`crate::dsp::spectrum`].

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::dsp::spectrum::{FftCache, Window, dtft_peak, next_pow2, parabolic_offset, weighted_dtft};
use crate::error::{BuildError, ParamError};
use crate::facts::{Facts, StreamFacts};
use crate::item::{DwellRecord, Item, ItemKind, LobeSegment, LobeTag, Stamp};
use crate::param::{ParamType, Unit};
use crate::typed::TypedBlock;
use num_complex::Complex32;
use std::collections::VecDeque;

pub const SPEC: BlockSpec = BlockSpec::typed::<ToneDwell>(
    "tone_dwell",
    "Beacon integrator: per lobe dwell, the amplitude of a known tone from a windowed FFT with the peak \
     interpolated between bins (or the whole-band power), noise from off-tone bins, and the expected \
     spread of ln(amplitude).",
);

crate::block_ports! {
    inputs pub enum ToneDwellIn {
        Segments = required("segments", ItemKind::Segment, "lobe segments; dwell_end closes a dwell"),
    }
}

crate::block_ports! {
    outputs pub enum ToneDwellOut { Dwells = optional("dwells", ItemKind::Dwell, "one record per lobe dwell") }
}

crate::block_choice! {
    /// What a dwell's amplitude is read from.
    pub enum ToneMethod { FftBin = "fft_bin", BandPower = "band_power" }
}

crate::block_settings! {
    /// Settings of `tone_dwell`.
    pub struct ToneDwellSettings {
        tone: f64 {
            ty: ParamType::Number { unit: Unit::Hertz, min: -5e9, max: 5e9 },
            default: None,
            doc: "beacon tone frequency at baseband",
        },
        search: f64 {
            ty: ParamType::Number { unit: Unit::Hertz, min: 0.0, max: 5e9 },
            default: Some("0 Hz"),
            doc: "extra half-width around the tone in which to look for its peak (drift)",
        },
        window: Window {
            ty: ParamType::Choice(Window::WORDS),
            default: Some("rect"),
            doc: "data window: rect (white-noise limit), or hann / blackman against strong interferers at the cost of their noise bandwidth (1.5 and 1.73 bins)",
        },
        method: ToneMethod {
            ty: ParamType::Choice(ToneMethod::WORDS),
            default: Some("fft_bin"),
            doc: "fft_bin: the tone's coherent amplitude; band_power: whole-band power minus the noise estimate",
        },
        fft_size: usize {
            ty: ParamType::Integer { min: 0, max: 1 << 22 },
            default: Some("0"),
            doc: "transform length (rounded up to a power of two; samples past it are not used); 0 = whole dwell, padded to twice its power of two",
        },
        max_samples: usize {
            ty: ParamType::Integer { min: 16, max: 1 << 22 },
            default: Some("1048576"),
            doc: "most samples collected per dwell (the rest are left out)",
        },
    }
}

impl TypedBlock for ToneDwell {
    type Settings = ToneDwellSettings;
    type In = ToneDwellIn;
    type Out = ToneDwellOut;

    fn build(s: ToneDwellSettings, _: &BuildContext) -> Result<Self, BuildError> {
        let max_samples = s.max_samples.max(16);
        let cap = if s.fft_size > 0 { max_samples.min(s.fft_size) } else { max_samples };
        Ok(ToneDwell {
            tone_hz: s.tone,
            search_hz: s.search,
            window: s.window,
            band_power: s.method == ToneMethod::BandPower,
            fft_size: if s.fft_size > 0 { Some(next_pow2(s.fft_size)) } else { None },
            cap,
            fft: FftCache::new(),
            samples: Vec::new(),
            weights: Vec::new(),
            spectrum: Vec::new(),
            powers: Vec::new(),
            recent_hz: VecDeque::new(),
            current: None,
            left_out: 0,
            gaps: 0,
            unterminated: 0,
            too_short: 0,
            last_stamp: Stamp::new(0, 1.0),
        })
    }

    /// A known rate checks that the tone lies inside the band.
    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError> {
        let facts = facts.merged();
        if let Some(rate) = facts.rate {
            self.check_band(rate)?;
        }
        Ok(facts)
    }

    fn process(&mut self, port: ToneDwellIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match (port, item) {
            (ToneDwellIn::Segments, Item::Segment(seg)) => self.take(&seg, out),
            (ToneDwellIn::Segments, _) => Ok(()),
        }
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.close(out)?;
        self.report(out);
        Ok(())
    }
}

/// The dwell being collected.
struct Open {
    tag: LobeTag,
    rate: f64,
    first: u64,
    last: u64,
    next: u64,
}

pub struct ToneDwell {
    tone_hz: f64,
    search_hz: f64,
    window: Window,
    band_power: bool,
    fft_size: Option<usize>,
    cap: usize,
    fft: FftCache,
    // Buffers reused from dwell to dwell (bounded by `cap` and the FFT size).
    samples: Vec<Complex32>,
    weights: Vec<f64>,
    spectrum: Vec<Complex32>,
    powers: Vec<f64>,
    /// Tone frequencies (Hz) fitted in the last dwells with a clear peak.
    recent_hz: VecDeque<f64>,
    current: Option<Open>,
    left_out: u64,
    gaps: u64,
    unterminated: u64,
    too_short: u64,
    last_stamp: Stamp,
}

/// Result of one dwell's estimate.
struct ToneEstimate {
    amplitude: f64,
    noise_power: f64,
    energy_ratio: f64,
    var_ln_amp: f64,
}

impl ToneDwell {
    fn add(&mut self, seg: &LobeSegment, out: &mut Outputs) {
        let stamp = seg.chunk.stamp;
        let cur = self.current.get_or_insert(Open {
            tag: seg.tag.clone(),
            rate: stamp.rate,
            first: stamp.index,
            last: stamp.index,
            next: stamp.index,
        });
        if stamp.index != cur.next && !self.samples.is_empty() {
            self.gaps += 1;
            if self.gaps == 1 {
                out.warn(
                    stamp,
                    format!(
                        "dwell {} has a gap of samples before this segment; joined as if contiguous",
                        seg.tag.dwell
                    ),
                );
            }
        }
        let room = self.cap - self.samples.len();
        let take = room.min(seg.chunk.len());
        self.samples.extend_from_slice(&seg.chunk.iq[..take]);
        self.left_out += (seg.chunk.len() - take) as u64;
        if take > 0 {
            cur.last = stamp.index + take as u64 - 1;
        }
        cur.next = stamp.index + seg.chunk.len() as u64;
    }

    fn close(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        let Some(cur) = self.current.take() else {
            return Ok(());
        };
        let m = self.samples.len();
        if m < 8 {
            self.too_short += 1;
            if self.too_short == 1 {
                out.warn(
                    Stamp::new(cur.first, cur.rate),
                    format!("dwell {} has only {m} samples; skipped", cur.tag.dwell),
                );
            }
            self.samples.clear();
            return Ok(());
        }
        let est = self.estimate(cur.rate);
        self.samples.clear();
        out.push(
            ToneDwellOut::Dwells,
            Item::Dwell(DwellRecord {
                tag: cur.tag,
                mid: Stamp::new(cur.first + (cur.last - cur.first) / 2, cur.rate),
                amplitude: est.amplitude,
                noise_power: est.noise_power,
                snr: est.energy_ratio,
                var_ln_amp: est.var_ln_amp,
                range_m: None,
                used: m as u64,
            }),
        );
        Ok(())
    }

    fn estimate(&mut self, rate: f64) -> ToneEstimate {
        let m = self.samples.len();
        let nfft = self.fft_size.unwrap_or(2 * next_pow2(m)).max(next_pow2(m));
        self.weights.resize(m, 0.0);
        self.window.fill(&mut self.weights);
        let sum_w: f64 = self.weights.iter().sum();
        let sum_w2: f64 = self.weights.iter().map(|w| w * w).sum();
        self.windowed_powers(nfft, None);

        // Peak near the tone: within one unpadded bin plus the search width.
        // Reduced to one turn of the spectrum so far-out tones stay in range.
        let tone_bin = (self.tone_hz / rate).rem_euclid(1.0) * nfft as f64;
        // Never wider than half the transform: the search wraps around.
        let reach = search_reach_bins(self.search_hz, rate, m, nfft).ceil().min(nfft as f64 / 2.0) as i64;
        let centre = tone_bin.round() as i64;
        let wrap = |k: i64| k.rem_euclid(nfft as i64) as usize;
        let peak = (centre - reach..=centre + reach)
            .max_by(|&a, &b| self.powers[wrap(a)].total_cmp(&self.powers[wrap(b)]))
            .unwrap_or(centre);
        let ln = |k: i64| self.powers[wrap(k)].max(1e-300).ln();
        let offset = parabolic_offset(ln(peak - 1), ln(peak), ln(peak + 1));
        let peak_power = self.powers[wrap(peak)];
        let rough = (peak as f64 + offset) / nfft as f64;
        let half_bin = 0.5 / nfft as f64;
        let fitted = dtft_peak(&self.samples, &self.weights, rough - half_bin, rough + half_bin);
        let exclude = noise_exclusion_bins(self.window, m, nfft);
        let rough_noise_bin = self.off_tone_noise(fitted * nfft as f64, exclude);
        let freq = self.readout_frequency(fitted, rate, peak_power, rough_noise_bin);
        let (re, im) = weighted_dtft(&self.samples, &self.weights, freq);

        // Noise from the bins well away from the tone, with the fitted tone
        // taken out first: a strong tone's leakage (rect sidelobes fall only
        // as 1/k^2) would otherwise raise them.
        let fit = num_complex::Complex64::new(re, im) / sum_w;
        self.windowed_powers(nfft, Some((freq, fit)));
        let noise_power = self.off_tone_noise(freq * nfft as f64, exclude) / sum_w2;

        let m_f = m as f64;
        if self.band_power {
            // Whole-band power minus noise; the noncoherent gate form (docs/derivations.md) with
            // one "pulse" and a gate of M samples: (M/E^2 + 2/E)/4, E = M P / noise.
            let mean_power = self.samples.iter().map(|x| x.norm_sqr() as f64).sum::<f64>() / m_f;
            let p = mean_power - noise_power;
            let e = ratio(p * m_f, noise_power);
            return ToneEstimate {
                amplitude: if p > 0.0 { p.sqrt() } else { f64::NAN },
                noise_power,
                energy_ratio: e.max(0.0),
                var_ln_amp: if e > 0.0 { (m_f / (e * e) + 2.0 / e) / 4.0 } else { f64::INFINITY },
            };
        }
        let (re, im) = weighted_dtft(&self.samples, &self.weights, freq);
        // E|Y|^2 = A^2 (sum w)^2 + noise * sum w^2: take the noise part off.
        let a2 = (re * re + im * im - noise_power * sum_w2) / (sum_w * sum_w);
        let e = ratio(a2 * m_f, noise_power);
        // Y = A sum(w) + noise of variance noise*sum(w^2): the window sees an
        // energy ratio E' = E / ENBW, and ln|Y|^2 less the noise has
        // var(ln A) = (1/E'^2 + 2/E') / 4 (docs/derivations.md); a rect
        // window (ENBW 1 bin) gives the white-noise limit.
        let enbw = m_f * sum_w2 / (sum_w * sum_w);
        let e_window = e / enbw;
        ToneEstimate {
            amplitude: if a2 > 0.0 { a2.sqrt() } else { f64::NAN },
            noise_power,
            energy_ratio: e.max(0.0),
            var_ln_amp: if e > 0.0 { (1.0 / (e_window * e_window) + 2.0 / e_window) / 4.0 } else { f64::INFINITY },
        }
    }

    /// `powers` = |FFT|^2 of the windowed samples, less `tone` (frequency in
    /// cycles per sample, complex amplitude) when given, zero-padded to `nfft`.
    fn windowed_powers(&mut self, nfft: usize, tone: Option<(f64, num_complex::Complex64)>) {
        self.spectrum.clear();
        let step = tone.map_or(0.0, |(f, _)| 2.0 * std::f64::consts::PI * f);
        let amp = tone.map_or(num_complex::Complex64::new(0.0, 0.0), |(_, a)| a);
        self.spectrum.extend(self.samples.iter().zip(&self.weights).enumerate().map(|(n, (x, w))| {
            let fit = amp * num_complex::Complex64::from_polar(1.0, step * n as f64);
            Complex32::new(((x.re as f64 - fit.re) * w) as f32, ((x.im as f64 - fit.im) * w) as f32)
        }));
        self.spectrum.resize(nfft, Complex32::new(0.0, 0.0));
        self.fft.forward(&mut self.spectrum);
        self.powers.clear();
        self.powers.extend(self.spectrum.iter().map(|x| x.norm_sqr() as f64));
    }

    /// Mean noise power per bin of `powers`, from the bins more than
    /// `exclude` bins from `tone_pos`: their median over ln 2 is the mean of
    /// the exponential distribution noise bins follow, and ignores spurs (a
    /// DC spike). Reorders `powers`.
    fn off_tone_noise(&mut self, tone_pos: f64, exclude: f64) -> f64 {
        let n = self.powers.len() as f64;
        let mut k = -1.0;
        self.powers.retain(|_| {
            k += 1.0;
            let d = (k - tone_pos).rem_euclid(n);
            d.min(n - d) > exclude
        });
        if self.powers.is_empty() {
            return f64::NAN;
        }
        let mid = self.powers.len() / 2;
        let (_, median, _) = self.powers.select_nth_unstable_by(mid, |a, b| a.total_cmp(b));
        *median / std::f64::consts::LN_2
    }

    /// The frequency (cycles per sample) to read the amplitude at: the median
    /// of the last dwells' fitted frequencies, so this dwell's noise does not
    /// pick it. A dwell whose peak stands clearly over the noise (`peak_power`
    /// over `noise_bin` ten times) adds its own fit first.
    fn readout_frequency(&mut self, fitted: f64, rate: f64, peak_power: f64, noise_bin: f64) -> f64 {
        const KEEP: usize = 15;
        let shared = self.median_recent_hz().map(|hz| hz / rate);
        if peak_power > 10.0 * noise_bin {
            if self.recent_hz.len() == KEEP {
                self.recent_hz.pop_front();
            }
            // Unwrapped to the side of the turn nearest the tone setting.
            let hz = fitted * rate;
            let turns = ((self.tone_hz - hz) / rate).round();
            self.recent_hz.push_back(hz + turns * rate);
        }
        // Too few dwells yet, or the tone moved away from the shared value: own fit.
        match shared {
            Some(f)
                if self.recent_hz.len() >= 3
                    && (f - fitted).rem_euclid(1.0).min((fitted - f).rem_euclid(1.0))
                        < 2.0 / self.samples.len() as f64 =>
            {
                f
            }
            _ => fitted,
        }
    }

    fn median_recent_hz(&self) -> Option<f64> {
        let mut v: Vec<f64> = self.recent_hz.iter().copied().collect();
        if v.is_empty() {
            return None;
        }
        v.sort_by(f64::total_cmp);
        Some(v[v.len() / 2])
    }
}

/// Bins of an `nfft`-point transform of `samples` samples either side of
/// the tone setting searched for its peak: one bin of the unpadded
/// transform plus the `search_hz` drift allowance.
pub fn search_reach_bins(search_hz: f64, rate: f64, samples: usize, nfft: usize) -> f64 {
    let pad = nfft as f64 / samples as f64;
    pad + search_hz / rate * nfft as f64
}

/// Bins of an `nfft`-point transform of `samples` samples either side of
/// the tone left out of the noise estimate: the window's main lobe and its
/// leakage margin. Every bin beyond is a noise bin.
pub fn noise_exclusion_bins(window: Window, samples: usize, nfft: usize) -> f64 {
    let pad = nfft as f64 / samples as f64;
    (window.main_lobe_half_width() + window.noise_exclusion()) * pad
}

fn ratio(signal: f64, noise: f64) -> f64 {
    if noise > 0.0 {
        signal / noise
    } else if signal > 0.0 {
        f64::INFINITY
    } else {
        0.0
    }
}

impl ToneDwell {
    /// Complex baseband holds tones within ±rate/2; one beyond would be
    /// measured at its alias and look like a good beacon.
    fn check_band(&self, rate: f64) -> Result<(), ParamError> {
        if !self.band_power && self.tone_hz.abs() > rate / 2.0 {
            return Err(ParamError::invalid(
                "tone",
                format!(
                    "{} Hz lies outside the band of ±{} Hz that a stream of {rate} S/s holds",
                    self.tone_hz,
                    rate / 2.0
                ),
            ));
        }
        Ok(())
    }

    fn take(&mut self, seg: &LobeSegment, out: &mut Outputs) -> Result<(), BlockError> {
        self.last_stamp = seg.chunk.stamp;
        if let Some(cur) = &self.current
            && (cur.tag.dwell != seg.tag.dwell || cur.tag.lobe != seg.tag.lobe)
        {
            self.unterminated += 1;
            if self.unterminated == 1 {
                out.warn(
                    seg.chunk.stamp,
                    format!("dwell {} ended without its last segment; integrated what arrived", cur.tag.dwell),
                );
            }
            self.close(out)?;
        }
        if let Some(cur) = &self.current
            && cur.rate != seg.chunk.stamp.rate
        {
            return Err(BlockError::at(
                format!("tone_dwell: sample rate changed from {} to {} S/s", cur.rate, seg.chunk.stamp.rate),
                seg.chunk.stamp.index,
            ));
        }
        let rate = seg.chunk.stamp.checked_rate("tone_dwell")?;
        self.check_band(rate).map_err(|e| BlockError::at(e.to_string(), seg.chunk.stamp.index))?;
        self.add(seg, out);
        if seg.dwell_end {
            self.close(out)?;
        }
        Ok(())
    }

    /// The counts of irregular dwells, at the end.
    fn report(&self, out: &mut Outputs) {
        let at = self.last_stamp;
        if self.left_out > 0 {
            out.warn(at, format!("{} samples past the per-dwell limit ({}) were left out", self.left_out, self.cap));
        }
        if self.gaps > 1 {
            out.warn(at, format!("{} segments followed a gap within their dwell", self.gaps));
        }
        if self.unterminated > 1 {
            out.warn(at, format!("{} dwells ended without a last segment", self.unterminated));
        }
        if self.too_short > 1 {
            out.warn(at, format!("{} dwells had fewer than 8 samples and were skipped", self.too_short));
        }
    }
}
