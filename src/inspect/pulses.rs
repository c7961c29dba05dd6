//! Pulsed captures: transmit instants from the leakage at full rate, the PRF
//! as the slope of a line through them (so the fundamental, never a harmonic
//! or an alias), the pulse length, the range window holding echoes, the sync
//! channel's dwell, and without a sync channel the switch instants from the
//! switch transients and the steps of the echo amplitude.

use super::levels::{Survey, SyncLevels};
use super::{Figure, Installation, Source, Switching, identity_from_annotations, number};
use lobeflow_blocks::SPEED_OF_LIGHT;
use lobeflow_blocks::dsp::event_period::{LineFit, line_fit, whole_period};

/// Longest sweep profiled, samples (a PRI longer than this is not measured).
const MAX_SWEEP: usize = 1 << 16;
/// Transmit instants and sweeps kept (about 50 s at 4 kHz).
const MAX_EVENTS: usize = 200_000;
/// Regular events this far (dB) over the noise count as transmit leakage.
const MIN_LEAKAGE_DB: f64 = 25.0;
/// A rising edge starts a new pulse only after this many samples below.
const REARM: usize = 3;
/// Sync samples a new level must hold to count as a switch.
const SYNC_HOLD: usize = 4;
/// Longest dwell looked for without a sync channel, in pulses.
const MAX_DWELL_PULSES: usize = 128;

/// What the second pass gathers.
struct Edges {
    threshold: f32,
    /// Rising crossings (fractional sample index).
    instants: Vec<f64>,
    /// Width of each pulse at the threshold (half the event amplitude).
    widths: (f64, f64, u64),
    below: usize,
    rise: Option<f64>,
    last_amp: f32,
    /// Integer index of the last transmit instant (first sample above).
    sweep_start: Option<u64>,
    current: Vec<f32>,
    ring: Vec<Vec<f32>>,
    mean_profile: Vec<f64>,
    median_profile: Vec<f64>,
    sweeps: u64,
    medians: u64,
    /// Sync switches: (sample index, level index).
    switches: Vec<(u64, usize)>,
    sync_class: Option<usize>,
    candidate: (usize, usize),
}

impl Edges {
    fn sample(&mut self, index: u64, amp: f32, power: f32) {
        let above = amp >= self.threshold;
        if above && self.below >= REARM && self.instants.len() < MAX_EVENTS {
            let a0 = self.last_amp;
            let frac = if amp > a0 { f64::from((self.threshold - a0) / (amp - a0)) } else { 1.0 };
            let t = index as f64 - 1.0 + frac.clamp(0.0, 1.0);
            self.instants.push(t);
            self.rise = Some(t);
            self.end_sweep();
            self.sweep_start = Some(index);
        }
        if !above
            && self.last_amp >= self.threshold
            && let Some(r) = self.rise.take()
        {
            let a0 = self.last_amp;
            let frac = if a0 > amp { f64::from((a0 - self.threshold) / (a0 - amp)) } else { 0.0 };
            let w = index as f64 - 1.0 + frac.clamp(0.0, 1.0) - r;
            self.widths.0 += w;
            self.widths.1 += w * w;
            self.widths.2 += 1;
        }
        self.below = if above { 0 } else { self.below + 1 };
        self.last_amp = amp;
        if let Some(s) = self.sweep_start
            && ((index - s) as usize) < MAX_SWEEP
        {
            self.current.push(power);
        }
    }

    /// A sweep ended: add it to the mean profile, and the median of it and
    /// the two before to the median profile (a transient in one sweep of
    /// three is left out, an echo in all of them stays).
    fn end_sweep(&mut self) {
        if self.sweep_start.is_none() || self.current.is_empty() {
            return;
        }
        let sweep = std::mem::take(&mut self.current);
        if self.mean_profile.len() < sweep.len() {
            self.mean_profile.resize(sweep.len(), 0.0);
        }
        for (m, &p) in self.mean_profile.iter_mut().zip(&sweep) {
            *m += f64::from(p);
        }
        self.sweeps += 1;
        self.ring.push(sweep);
        if self.ring.len() > 3 {
            let old = self.ring.remove(0);
            self.current = old;
            self.current.clear();
        }
        if self.ring.len() == 3 {
            let len = self.ring.iter().map(Vec::len).min().unwrap_or(0);
            if self.median_profile.len() < len {
                self.median_profile.resize(len, 0.0);
            }
            for d in 0..len {
                let (a, b, c) = (self.ring[0][d], self.ring[1][d], self.ring[2][d]);
                self.median_profile[d] += f64::from(a.max(b).min(a.min(b).max(c)));
            }
            self.medians += 1;
        }
    }

    fn sync_sample(&mut self, index: u64, v: f32, levels: &SyncLevels) {
        let c = levels.nearest(f64::from(v));
        if self.sync_class == Some(c) {
            self.candidate = (c, 0);
            return;
        }
        if self.candidate.0 == c {
            self.candidate.1 += 1;
        } else {
            self.candidate = (c, 1);
        }
        if self.candidate.1 >= SYNC_HOLD {
            if self.sync_class.is_some() && self.switches.len() < MAX_EVENTS {
                self.switches.push((index + 1 - SYNC_HOLD as u64, c));
            }
            self.sync_class = Some(c);
        }
    }
}

/// Measure a pulsed capture. Returns false (and adds nothing) when the
/// capture holds no regular transmit pulses.
pub(super) fn measure(
    source: &Source,
    survey: &Survey,
    sync: Option<&SyncLevels>,
    inst: &mut Installation,
) -> Result<bool, String> {
    let noise = survey.noise_power();
    let events = survey.event_power();
    if !(events > noise * 10f64.powf(MIN_LEAKAGE_DB / 10.0)) {
        return Ok(false);
    }
    let rate = survey.rate;
    let mut e = Edges {
        threshold: (events.sqrt() / 2.0) as f32,
        instants: Vec::new(),
        widths: (0.0, 0.0, 0),
        below: 0,
        rise: None,
        last_amp: 0.0,
        sweep_start: None,
        current: Vec::new(),
        ring: Vec::new(),
        mean_profile: Vec::new(),
        median_profile: Vec::new(),
        sweeps: 0,
        medians: 0,
        switches: Vec::new(),
        sync_class: None,
        candidate: (usize::MAX, 0),
    };
    source.pass(|c| {
        for (k, z) in c.iq.iter().enumerate() {
            let p = z.norm_sqr();
            e.sample(c.first + k as u64, p.sqrt(), p);
        }
        if let (Some(s), Some(levels)) = (c.sync, sync) {
            for (k, &v) in s.iter().enumerate() {
                e.sync_sample(c.first + k as u64, v, levels);
            }
        }
    })?;
    let Some(pri) = pri_fit(&e.instants) else { return Ok(false) };
    if pri.used < 8 || pri.slope * 1.5 < REARM as f64 || e.medians < 4 {
        return Ok(false);
    }
    let prf = rate / pri.slope;
    inst.prf_hz = Some(prf);
    inst.figures.push(Figure::new(
        "PRF",
        prf,
        "Hz",
        prf * (4.0 * pri.slope_se / pri.slope).max(1e-9),
        format!(
            "line through {} transmit instants found at full rate (leakage {} dB over the noise); 4 standard errors",
            pri.used,
            number(10.0 * (events / noise).log10())
        ),
    ));
    inst.figures.push(Figure::new(
        "PRI jitter (rms)",
        pri.jitter / rate,
        "s",
        0.5 / rate,
        "spread of the transmit instants about the line, sample quantisation included".into(),
    ));
    let (sum, sum2, n) = e.widths;
    if n > 0 {
        let w = sum / n as f64;
        let sd = (sum2 / n as f64 - w * w).max(0.0).sqrt();
        inst.pulse_s = Some(w / rate);
        inst.figures.push(Figure::new(
            "pulse length",
            w / rate,
            "s",
            (0.5 + 3.0 * sd / (n as f64).sqrt()) / rate,
            format!("width of {n} leakage pulses at half their amplitude; half a sample"),
        ));
    }
    let sweep_len = (pri.slope.floor() as usize).min(e.median_profile.len());
    let profile = Profile::new(&e, sweep_len, noise);
    let range_of = |d: f64| d / rate * SPEED_OF_LIGHT / 2.0;
    inst.sweep_m = Some(range_of(pri.slope));
    inst.leakage_s = Some(profile.leak_end as f64 / rate);
    inst.figures.push(Figure::new(
        "transmit leakage length",
        profile.leak_end as f64 / rate,
        "s",
        1.0 / rate,
        "mean sweep power back within 6 dB of the noise".into(),
    ));
    let echo = profile.echo_bins();
    if let Some((a, b)) = echo {
        inst.echo_window_m = Some((range_of(a as f64), range_of(b as f64 + 1.0)));
        let bin = range_of(1.0);
        inst.figures.push(Figure::new(
            "echo window start",
            range_of(a as f64),
            "m",
            bin,
            format!(
                "first range bin whose median-of-3-sweeps power stands 6 deviations over the noise; one bin ({} m)",
                number(bin)
            ),
        ));
        inst.figures.push(Figure::new(
            "echo window end",
            range_of(b as f64 + 1.0),
            "m",
            bin,
            "end of the last such bin; one bin".into(),
        ));
    } else {
        inst.remarks.push("no echo stands above the noise in the mean sweep".into());
    }
    if let Some(d) = profile.transient_bin() {
        inst.figures.push(Figure::new(
            "switch transient delay",
            range_of(d as f64),
            "m",
            range_of(1.0),
            "where the sweep power exceeds the median of neighbouring sweeps most (a switch transient)".into(),
        ));
    }
    if let Some(levels) = sync {
        sync_dwell(&e.switches, levels, rate, prf, source, inst);
    } else if let Some((a, b)) = echo {
        blind_switching(source, survey, &e.instants, (a, b), &profile, rate, pri.slope, inst)?;
    }
    Ok(true)
}

/// Line through the transmit instants: each is numbered by the whole number
/// of median intervals since the previous one, so a missed pulse does not
/// halve the rate and a spurious one is dropped as an outlier.
fn pri_fit(instants: &[f64]) -> Option<LineFit> {
    if instants.len() < 8 {
        return None;
    }
    let mut gaps: Vec<f64> = instants.windows(2).map(|w| w[1] - w[0]).collect();
    gaps.sort_by(f64::total_cmp);
    let median = gaps[gaps.len() / 2];
    let mut k = 0.0;
    let mut points = vec![(0.0, instants[0])];
    for w in instants.windows(2) {
        let steps = ((w[1] - w[0]) / median).round();
        if steps < 1.0 {
            continue;
        }
        k += steps;
        points.push((k, w[1]));
    }
    line_fit(&points, 1.0)
}

/// The sweep profiles reduced to what the estimators need.
struct Profile {
    mean: Vec<f64>,
    median: Vec<f64>,
    leak_end: usize,
    floor: f64,
    spread: f64,
    noise: f64,
}

impl Profile {
    fn new(e: &Edges, len: usize, noise: f64) -> Profile {
        let mean: Vec<f64> = e.mean_profile[..len].iter().map(|v| v / e.sweeps as f64).collect();
        let median: Vec<f64> = e.median_profile[..len].iter().map(|v| v / e.medians as f64).collect();
        let leak_end = mean.iter().position(|&p| p < 4.0 * noise).unwrap_or(len).min(len);
        let mut rest: Vec<f64> = median[leak_end..].to_vec();
        rest.sort_by(f64::total_cmp);
        let floor = rest.get(rest.len() / 2).copied().unwrap_or(0.0);
        let mut dev: Vec<f64> = rest.iter().map(|v| (v - floor).abs()).collect();
        dev.sort_by(f64::total_cmp);
        let spread = 1.4826 * dev.get(dev.len() / 2).copied().unwrap_or(0.0);
        Profile { mean, median, leak_end, floor, spread, noise }
    }

    /// The largest group of range bins standing over the noise (gaps of up
    /// to two bins joined).
    fn echo_bins(&self) -> Option<(usize, usize)> {
        let limit = self.floor + 6.0 * self.spread.max(self.floor * 1e-3);
        let hot: Vec<usize> = (self.leak_end..self.median.len()).filter(|&d| self.median[d] > limit).collect();
        let mut best: Option<(usize, usize, f64)> = None;
        let mut i = 0;
        while i < hot.len() {
            let mut j = i;
            while j + 1 < hot.len() && hot[j + 1] - hot[j] <= 3 {
                j += 1;
            }
            let energy: f64 = (hot[i]..=hot[j]).map(|d| self.median[d] - self.floor).sum();
            if best.is_none_or(|b| energy > b.2) {
                best = Some((hot[i], hot[j], energy));
            }
            i = j + 1;
        }
        best.map(|b| (b.0, b.1))
    }

    /// Bin where the mean exceeds the median profile most, when it does so
    /// clearly (energy that only some sweeps hold: switch transients).
    fn transient_bin(&self) -> Option<usize> {
        let excess = |d: usize| self.mean[d] - self.median[d] * 1.2;
        let d = (self.leak_end..self.mean.len()).max_by(|&a, &b| excess(a).total_cmp(&excess(b)))?;
        (excess(d) > 3.0 * self.noise).then_some(d)
    }
}

/// Dwell, lobe count check and schedule phase from the sync switches.
fn sync_dwell(
    switches: &[(u64, usize)],
    levels: &SyncLevels,
    rate: f64,
    prf: f64,
    source: &Source,
    inst: &mut Installation,
) {
    if switches.len() < 4 {
        inst.remarks.push(format!("the sync channel switched only {} times in the stretch measured", switches.len()));
        return;
    }
    let times: Vec<f64> = switches.iter().map(|s| s.0 as f64).collect();
    let Some(fit) = pri_fit(&times) else { return };
    let n = levels.levels.len();
    let ascending =
        switches.windows(2).filter(|w| w[1].1 == (w[0].1 + 1) % n).count() as f64 / (switches.len() - 1) as f64;
    let dwell_s = fit.slope / rate;
    let pulses = dwell_s * prf;
    inst.figures.push(Figure::new(
        "dwell",
        dwell_s,
        "s",
        4.0 * fit.slope_se / rate + fit.jitter / rate / (fit.used as f64).sqrt(),
        format!("line through {} sync switches (jitter {} samples); 4 standard errors", fit.used, number(fit.jitter)),
    ));
    let whole = pulses.round();
    let dwell_pulses = ((pulses - whole).abs() < 0.1 && whole >= 1.0).then_some(whole as u64);
    if let Some(p) = dwell_pulses {
        inst.figures.push(Figure::new("dwell (pulses)", p as f64, "pulses", 0.0, "dwell times the PRF".into()));
    }
    // the switch into the lowest level starts the first lobe's dwell
    let first = switches.iter().find(|s| s.1 == 0).map(|s| s.0 as f64 / rate);
    let cycle = dwell_s * n as f64;
    let first_start = first.map(|t| t - (t / cycle).ceil() * cycle);
    if let Some(f) = first_start {
        inst.figures.push(Figure::new(
            "first lobe's dwell start",
            f,
            "s",
            (SYNC_HOLD as f64 + 1.0) / rate,
            format!("switch into the lowest sync level, folded into one lobe cycle of {} s", number(cycle)),
        ));
    }
    if ascending < 0.9 {
        inst.remarks.push(format!(
            "only {} % of the sync switches step to the next higher level: the staircase is not in switching order",
            number(100.0 * ascending)
        ));
    }
    if !source.lobe_order.is_empty() && source.lobe_order.len() != n {
        inst.remarks.push(format!(
            "the sync channel has {n} levels but the lobe order names {} lobes ({})",
            source.lobe_order.len(),
            source.lobe_order.join(",")
        ));
    }
    inst.switching = Some(Switching {
        dwell_s,
        dwell_pulses,
        first_start_s: first_start,
        switch_phase_s: first.unwrap_or(times[0] / rate),
        identity: "the lowest sync level is the first lobe".into(),
    });
}

/// Without a sync channel: per sweep, the echo energy and the largest power
/// outside the leakage and the echo; a switch shows as a transient at the
/// end of the sweep before it and as a step of the echo energy. Folding
/// both at whole numbers of pulses gives the dwell and which sweeps start one.
#[allow(clippy::too_many_arguments)]
fn blind_switching(
    source: &Source,
    survey: &Survey,
    instants: &[f64],
    echo: (usize, usize),
    profile: &Profile,
    rate: f64,
    pri: f64,
    inst: &mut Installation,
) -> Result<(), String> {
    let starts: Vec<u64> = instants.iter().map(|t| t.ceil() as u64).collect();
    let count = starts.len().saturating_sub(1);
    let (mut energy, mut spike) = (vec![0.0f64; count], vec![0.0f64; count]);
    let mut sweep = 0usize;
    source.pass(|c| {
        for (k, z) in c.iq.iter().enumerate() {
            let i = c.first + k as u64;
            while sweep + 1 < starts.len() && i >= starts[sweep + 1] {
                sweep += 1;
            }
            if sweep >= count || i < starts[sweep] {
                continue;
            }
            let d = (i - starts[sweep]) as usize;
            let p = f64::from(z.norm_sqr());
            if d >= echo.0 && d <= echo.1 {
                energy[sweep] += p;
            } else if d >= profile.leak_end && p > spike[sweep] {
                spike[sweep] = p;
            }
        }
    })?;
    let noise = survey.noise_power();
    let z = |v: &[f64]| -> Vec<f64> {
        let n = v.len().max(1) as f64;
        let m = v.iter().sum::<f64>() / n;
        let sd = (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / n).sqrt().max(1e-300);
        v.iter().map(|x| (x - m) / sd).collect()
    };
    let steps: Vec<f64> = (0..count)
        .map(|j| if j + 1 < count { ((energy[j + 1] + noise) / (energy[j] + noise)).ln().abs() } else { 0.0 })
        .collect();
    let spikes: Vec<f64> = spike.iter().map(|p| (p / noise).ln()).collect();
    let feature: Vec<f64> = z(&steps).iter().zip(z(&spikes)).map(|(a, b)| a + b).collect();
    let Some(f) = whole_period(&feature, MAX_DWELL_PULSES) else {
        inst.remarks.push("no switch pattern found in the sweeps (no transients, no echo steps)".into());
        return Ok(());
    };
    // the switch lies after sweep `phase`: the next sweep starts a dwell
    let first_sweep = (f.phase + 1) % f.period;
    let phase_s = instants[first_sweep] / rate;
    let dwell_s = f.period as f64 * pri / rate;
    inst.figures.push(Figure::new(
        "dwell (pulses)",
        f.period as f64,
        "pulses",
        0.0,
        format!(
            "fundamental period of the switch transients and echo steps per sweep (autocorrelation {} noise deviations)",
            number(f.significance)
        ),
    ));
    inst.figures.push(Figure::new("dwell", dwell_s, "s", 0.0, "dwell in pulses times the PRI".into()));
    inst.figures.push(Figure::new(
        "switch instant",
        phase_s,
        "s",
        pri / rate / 2.0,
        format!("dwells start at transmit instant {first_sweep} and every {} after it; half a PRI", f.period),
    ));
    let (first_start, identity) = match identity_from_annotations(&survey.info, &source.lobe_order, phase_s, dwell_s) {
        Some((t, how)) => (Some(t), how),
        None => (None, "which lobe starts when cannot be told from the signal alone (no sync, no lobe labels)".into()),
    };
    inst.switching = Some(Switching {
        dwell_s,
        dwell_pulses: Some(f.period as u64),
        first_start_s: first_start,
        switch_phase_s: phase_s,
        identity,
    });
    Ok(())
}
