//! Beacon captures: the tone's frequency and SNR from the spectrum of the
//! IQ, and the lobe switch instants from switch transients and steps of the
//! tone's amplitude (folded at the full sample rate).

use super::levels::{Survey, SyncLevels};
use super::{Figure, Installation, Source, Switching, identity_from_annotations, number};
use lobeflow_blocks::dsp::event_period::{LineFit, find_events};
use num_complex::{Complex32, Complex64};
use rustfft::FftPlanner;
use std::f64::consts::PI;

/// Samples whose features are kept for the switch search (4 MiB of complex
/// samples plus 2 MiB of features).
const MAX_STORED: usize = 1 << 19;
/// Spectral line this far (dB) over the median bin counts as a tone.
const MIN_TONE_DB: f64 = 10.0;
/// Bins either side of the DC bin left out (a receiver's DC offset).
const DC_BINS: usize = 2;
/// Groups the frequency estimate is split into for its spread.
const GROUPS: usize = 16;

/// FFT length: a power of two giving bins of 50 Hz or finer.
fn fft_len(rate: f64) -> usize {
    ((rate / 50.0).ceil() as usize).next_power_of_two().clamp(256, 1 << 16)
}

/// Measure a beacon capture. Returns false when no tone stands out.
pub(super) fn measure(
    source: &Source,
    survey: &Survey,
    _sync: Option<&SyncLevels>,
    inst: &mut Installation,
) -> Result<bool, String> {
    let rate = survey.rate;
    let len = fft_len(rate);
    let window: Vec<f32> = (0..len).map(|k| (0.5 - 0.5 * (2.0 * PI * k as f64 / len as f64).cos()) as f32).collect();
    let fft = FftPlanner::<f32>::new().plan_fft_forward(len);
    let (mut power, mut segment, mut segments) = (vec![0.0f64; len], Vec::with_capacity(len), 0u64);
    let dc = survey.mean;
    source.pass(|c| {
        for z in c.iq {
            segment.push(*z - dc);
            if segment.len() == len {
                for (s, w) in segment.iter_mut().zip(&window) {
                    *s *= *w;
                }
                fft.process(&mut segment);
                for (p, s) in power.iter_mut().zip(&segment) {
                    *p += f64::from(s.norm_sqr());
                }
                segment.clear();
                segments += 1;
            }
        }
    })?;
    if segments < 2 {
        return Ok(false);
    }
    let allowed = |k: usize| k > DC_BINS && k < len - DC_BINS;
    let Some(peak) = (0..len).filter(|&k| allowed(k)).max_by(|&a, &b| power[a].total_cmp(&power[b])) else {
        return Ok(false);
    };
    let mut sorted: Vec<f64> = (0..len).filter(|&k| allowed(k)).map(|k| power[k]).collect();
    sorted.sort_by(f64::total_cmp);
    let noise_bin = sorted[sorted.len() / 2];
    if !(power[peak] > noise_bin * 10f64.powf(MIN_TONE_DB / 10.0)) {
        return Ok(false);
    }
    let signed = if peak > len / 2 { peak as f64 - len as f64 } else { peak as f64 };
    let coarse = signed * rate / len as f64;
    // Parseval with the window: a bin of noise holds sigma^2 sum(w^2), the
    // tone's main lobe A^2 sum(w)^2 spread as len * A^2 * sum(w^2) in total.
    let lobe: f64 = (-3i64..=3).map(|d| power[(peak as i64 + d).rem_euclid(len as i64) as usize] - noise_bin).sum();
    let snr = lobe.max(0.0) / (len as f64 * noise_bin);
    let noise = noise_bin / segments as f64 / window.iter().map(|w| f64::from(w * w)).sum::<f64>();
    let fine = refine(source, survey, coarse, len)?;
    inst.tone_hz = Some(fine.tone_hz);
    inst.figures.push(Figure::new(
        "tone frequency",
        fine.tone_hz,
        "Hz",
        fine.within,
        format!(
            "peak of a {len}-point spectrum averaged over {segments} segments, refined by the phase advance of the mixed-down tone; 4 standard errors over {GROUPS} groups"
        ),
    ));
    let snr_db = 10.0 * snr.log10();
    inst.figures.push(Figure::new(
        "tone SNR per sample",
        snr_db,
        "dB",
        1.0,
        format!(
            "tone power in its main lobe over the median bin's noise; C/N0 {} dB-Hz",
            number(snr_db + 10.0 * rate.log10())
        ),
    ));
    switching(source, survey, &fine, noise, inst);
    Ok(true)
}

/// The tone's fine frequency and the samples kept for the switch search.
struct Fine {
    tone_hz: f64,
    within: f64,
    /// Tone-mixed samples (DC removed, mixed by the fine frequency).
    mixed: Vec<Complex32>,
}

/// Mix down by the coarse frequency, sum blocks of a quarter FFT length, and
/// read the remaining offset from the mean phase advance between blocks.
fn refine(source: &Source, survey: &Survey, coarse: f64, len: usize) -> Result<Fine, String> {
    let rate = survey.rate;
    let block = len / 4;
    let dc = survey.mean;
    let step = Complex64::from_polar(1.0, -2.0 * PI * coarse / rate);
    let (mut osc, mut acc, mut n) = (Complex64::new(1.0, 0.0), Complex64::new(0.0, 0.0), 0usize);
    let mut blocks: Vec<Complex64> = Vec::new();
    let mut mixed = Vec::new();
    source.pass(|c| {
        for z in c.iq {
            let x = *z - dc;
            let m = Complex64::new(f64::from(x.re), f64::from(x.im)) * osc;
            osc *= step;
            acc += m;
            n += 1;
            if n == block {
                blocks.push(acc);
                acc = Complex64::new(0.0, 0.0);
                n = 0;
                osc /= osc.norm();
            }
            if mixed.len() < MAX_STORED {
                mixed.push(Complex32::new(m.re as f32, m.im as f32));
            }
        }
    })?;
    let advances: Vec<Complex64> = blocks.windows(2).map(|w| w[1] * w[0].conj()).collect();
    let to_hz = |z: Complex64| z.arg() / (2.0 * PI) * rate / block as f64;
    let offset = to_hz(advances.iter().sum());
    let per_group = (advances.len() / GROUPS).max(1);
    let groups: Vec<f64> = advances.chunks(per_group).map(|g| to_hz(g.iter().sum())).collect();
    let g = groups.len() as f64;
    let mean = groups.iter().sum::<f64>() / g;
    let sd = (groups.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (g - 1.0).max(1.0)).sqrt();
    let tone_hz = coarse + offset;
    // mix the kept samples the rest of the way, so the tone is at DC
    let rest = Complex64::from_polar(1.0, -2.0 * PI * offset / rate);
    let mut o = Complex64::new(1.0, 0.0);
    for (k, m) in mixed.iter_mut().enumerate() {
        *m *= Complex32::new(o.re as f32, o.im as f32);
        o *= rest;
        if k % 1024 == 0 {
            o /= o.norm();
        }
    }
    Ok(Fine { tone_hz, within: 4.0 * sd / g.sqrt() + 1e-3, mixed })
}

/// Windows (seconds) over which the tone's amplitude before and after a
/// sample is compared, shortest first: short dwells need short windows,
/// small steps under noise long ones.
const STEP_WINDOWS: [f64; 3] = [2.5e-4, 1e-3, 4e-3];

/// Running sums of the kept (tone-mixed) samples.
fn running_sums(x: &[Complex32]) -> Vec<Complex64> {
    let mut cum = vec![Complex64::new(0.0, 0.0); x.len() + 1];
    for (i, z) in x.iter().enumerate() {
        cum[i + 1] = cum[i] + Complex64::new(f64::from(z.re), f64::from(z.im));
    }
    cum
}

/// Log of each sample's power over the noise once the tone (its mean over
/// `h` samples either side) is taken out, when above the noise: large in a
/// switch transient, and blind to which lobe is on (the tone's level is
/// not in it, so the lobe cycle does not show as a square wave).
fn transient_feature(x: &[Complex32], cum: &[Complex64], noise: f64, h: usize) -> Vec<f32> {
    (0..x.len())
        .map(|i| {
            let (a, b) = (i.saturating_sub(h), (i + h + 1).min(x.len()));
            let local = (cum[b] - cum[a]) / (b - a) as f64;
            let r = (Complex64::new(f64::from(x[i].re), f64::from(x[i].im)) - local).norm_sqr() / noise;
            r.max(1.0).ln() as f32
        })
        .collect()
}

/// Per sample: the difference of the tone's amplitude over `w` samples
/// after and before it (scaled by sqrt(w), so in units of the noise), plus
/// the transient feature.
fn event_feature(x: &[Complex32], cum: &[Complex64], transients: &[f32], w: usize) -> Vec<f32> {
    let mean_amp = (cum[x.len()] / x.len() as f64).norm().max(1e-300);
    let mut feature = vec![0.0f32; x.len()];
    for i in w..x.len() - w {
        let before = ((cum[i] - cum[i - w]) / w as f64).norm();
        let after = ((cum[i + w] - cum[i]) / w as f64).norm();
        let step = ((after - before).abs() / mean_amp) * (w as f64).sqrt();
        feature[i] = step as f32 + transients[i];
    }
    feature
}

/// Switch instants from the kept samples, at the shortest step window that
/// shows a train of events.
fn switching(source: &Source, survey: &Survey, fine: &Fine, noise: f64, inst: &mut Installation) {
    let rate = survey.rate;
    let x = &fine.mixed;
    let cum = running_sums(x);
    let transients = transient_feature(x, &cum, noise.max(1e-300), ((rate * 1.25e-4) as usize).max(2));
    // the window whose events stand out most
    let found = STEP_WINDOWS
        .iter()
        .filter_map(|&seconds| {
            let w = ((rate * seconds).round() as usize).max(4);
            if x.len() < 40 * w {
                return None;
            }
            find_events(&event_feature(x, &cum, &transients, w), w)
        })
        .max_by(|a, b| a.1.total_cmp(&b.1));
    let Some((fit, significance)) = found else {
        inst.remarks.push("no lobe switching found in the tone (no amplitude steps, no transients)".into());
        return;
    };
    // the transients folded over the whole period place the switch best;
    // without them, the line through the steps stands
    // (the period is searched within its confidence for the sharpest fold)
    let span = (4.0 * fit.slope_se).max(0.05);
    let best =
        onset_offset(&transients, fit.slope, fit.intercept).map(|(o, score)| (fit.slope, o, score)).or_else(|| {
            (0..=100)
                .map(|j| fit.slope - span + 2.0 * span * f64::from(j) / 100.0)
                .filter_map(|p| onset_offset(&transients, p, fit.intercept).map(|(o, score)| (p, o, score)))
                .max_by(|a, b| a.2.total_cmp(&b.2))
        });
    let (fit, onset) = match best {
        Some((period, onset, _)) => (LineFit { slope: period, intercept_se: fit.intercept_se.min(1.0), ..fit }, onset),
        None => (fit, 0.0),
    };
    let dwell_s = fit.slope / rate;
    let phase_s = (fit.intercept + onset) / rate;
    let phase_s = phase_s - (phase_s / dwell_s).floor() * dwell_s;
    inst.figures.push(Figure::new(
        "dwell",
        dwell_s,
        "s",
        4.0 * fit.slope_se / rate,
        format!(
            "line through {} switch instants (the autocorrelation's fundamental at {} noise deviations, then each located); 4 standard errors",
            fit.used,
            number(significance)
        ),
    ));
    let within = (4.0 * fit.intercept_se + 1.5) / rate;
    inst.figures.push(Figure::new(
        "switch instant",
        phase_s,
        "s",
        within,
        "onset of the folded switch event (half its height), first in the capture; 4 standard errors and a sample and a half".into(),
    ));
    let (first_start, identity) = match identity_from_annotations(&survey.info, &source.lobe_order, phase_s, dwell_s) {
        Some((t, how)) => (Some(t), how),
        None => (None, "which lobe starts when cannot be told from the signal alone (no sync, no lobe labels)".into()),
    };
    if let Some(f) = first_start {
        inst.figures.push(Figure::new("first lobe's dwell start", f, "s", within, identity.clone()));
    }
    lobe_snr(fine, dwell_s * rate, phase_s * rate, first_start.map(|f| f * rate), source, noise, inst);
    inst.switching =
        Some(Switching { dwell_s, dwell_pulses: None, first_start_s: first_start, switch_phase_s: phase_s, identity });
}

/// Where the switch transients begin relative to the fitted event centre:
/// the log power folded at the period, its half-height crossing before its
/// peak, when the fold shows a clear peak anywhere in the period (else the
/// centre of the amplitude steps stands).
fn onset_offset(spikes: &[f32], period: f64, centre: f64) -> Option<(f64, f64)> {
    let reach = (period / 2.0).floor() as i64 - 1;
    let mut fold = vec![0.0f64; (2 * reach + 1) as usize];
    let mut count = vec![0u32; fold.len()];
    for (i, &v) in spikes.iter().enumerate() {
        let rel = (i as f64 - centre).rem_euclid(period);
        let rel = (if rel > period / 2.0 { rel - period } else { rel }).round() as i64;
        if rel.abs() <= reach {
            fold[(rel + reach) as usize] += f64::from(v);
            count[(rel + reach) as usize] += 1;
        }
    }
    let means: Vec<f64> = fold.iter().zip(&count).map(|(s, &c)| if c > 0 { s / f64::from(c) } else { 0.0 }).collect();
    let mut sorted = means.clone();
    sorted.sort_by(f64::total_cmp);
    let base = sorted[sorted.len() / 2];
    let mut dev: Vec<f64> = means.iter().map(|m| (m - base).abs()).collect();
    dev.sort_by(f64::total_cmp);
    let spread = 1.4826 * dev[dev.len() / 2];
    let (peak, top) =
        means.iter().enumerate().fold((0, f64::NEG_INFINITY), |a, (i, &m)| if m > a.1 { (i, m) } else { a });
    let score = (top - base) / spread.max(1e-12);
    if score < 6.0 {
        return None;
    }
    let half = base + (top - base) / 2.0;
    let mut k = peak;
    while k > 0 && means[k - 1] >= half {
        k -= 1;
    }
    let frac = if k > 0 && means[k] > means[k - 1] { (means[k] - half) / (means[k] - means[k - 1]) } else { 0.0 };
    Some((k as f64 - frac.clamp(0.0, 1.0) - reach as f64, score))
}

/// Tone SNR per sample of each lobe: dwells classed by their position in
/// the lobe cycle, the switch transient (a quarter of the dwell) left out.
fn lobe_snr(
    fine: &Fine,
    dwell: f64,
    phase: f64,
    first_start: Option<f64>,
    source: &Source,
    noise: f64,
    inst: &mut Installation,
) {
    let lobes = if source.lobe_order.is_empty() { 2 } else { source.lobe_order.len() };
    let origin = first_start.unwrap_or(phase);
    let mut sums = vec![(0.0f64, 0u64); lobes];
    let mut start = phase;
    while start + dwell <= fine.mixed.len() as f64 {
        let (a, b) = ((start + dwell / 4.0).ceil() as usize, (start + dwell).floor() as usize);
        if b > a {
            let s: Complex64 =
                fine.mixed[a..b].iter().map(|z| Complex64::new(f64::from(z.re), f64::from(z.im))).sum::<Complex64>();
            let n = (b - a) as f64;
            let class = (((start - origin) / dwell).round() as i64).rem_euclid(lobes as i64) as usize;
            sums[class].0 += (s.norm_sqr() - n * noise) / (n * n);
            sums[class].1 += 1;
        }
        start += dwell;
    }
    for (k, (sum, n)) in sums.iter().enumerate() {
        if *n == 0 {
            continue;
        }
        let name = match (first_start, source.lobe_order.get(k)) {
            (Some(_), Some(l)) => format!("tone SNR, lobe {l}"),
            _ => format!("tone SNR, lobe {} of the cycle", k + 1),
        };
        let snr = (sum / *n as f64 / noise).max(1e-30);
        inst.figures.push(Figure::new(
            &name,
            10.0 * snr.log10(),
            "dB",
            1.0,
            format!("mean over {n} dwells of the tone power per sample over the noise"),
        ));
    }
}
