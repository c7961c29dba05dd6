//! The signal model of the synthesizer: a checked, plain-number form of a
//! scenario ([`Model`]); [`super::generate`] makes its samples chunk by chunk.
//!
//! Conventions shared with the sync-gate and pulse-framing blocks:
//! - Sync staircase: the lobe at position `i` of `N` has level
//!   `-0.8 + 1.6 i / (N - 1)`, plus 0.01 rms noise, with a linear ramp of
//!   [`SYNC_RAMP_SAMPLES`] samples starting at each switch instant.
//! - Pulsed: pulse `k` is transmitted at `t0 + k PRI (+ jitter)`; pulse 0 is
//!   the first pulse of a dwell of the first lobe; dwells switch on pulse
//!   boundaries, `switch_lead` before the first transmit of the new dwell.
//!   The trigger channel is 1 for the pulse length from each transmit instant.
//!   The echo is a rectangular pulse delayed by `2R/c`; sample `n` gets the
//!   fraction of `[n, n+1)` the pulse covers.
//! - Pattern factor of lobe axis `(az_l, el_l)`: `g(hypot(az-az_l, el-el_l))^n`.
//! - Beacon: dwell `d` of lobe `d mod N` starts at `t0 + d * dwell`; the tone
//!   amplitude uses the target position at mid-dwell.
//!
//! Every random draw tied to a pulse or dwell comes from its own seeded
//! stream (`sub_rng`), so the output does not depend on the chunk size.

use super::scenario::{
    BeaconSpec, BeamKind, Degrees, Fluctuation, Metres, PhaseMode, PulsedSpec, Quantity, ScaleSpec, ScenarioFile,
    SignalSpec, SyncMode, Toward, Track, Way,
};
use crate::capture::write::{AuxRole, WriteFormat};
use lobeflow_blocks::SPEED_OF_LIGHT;
use lobeflow_blocks::dsp::beam::{Beam, BeamShape, parse_pattern_csv};
use lobeflow_blocks::dsp::rng::Rng;
use num_complex::Complex64;
use std::f64::consts::PI;

/// Samples of the linear sync ramp at each switch.
pub const SYNC_RAMP_SAMPLES: f64 = 4.0;
/// RMS noise on the sync channel.
pub const SYNC_NOISE_RMS: f64 = 0.01;
/// Ranges beyond this are refused (the echo loop would span too many PRIs).
const MAX_RANGE_M: f64 = 1e8;
/// A capture longer than this many samples is refused (about 2^40).
const MAX_SAMPLES: f64 = 1.1e12;
/// Rayleigh amplitude allowance for the auto scale (exceeded with
/// probability exp(-12.25), about 5e-6, per dwell or pulse).
const FLUCTUATION_PEAK: f64 = 3.5;
/// Noise allowance per component for the auto scale, in noise rms.
const NOISE_PEAK_SIGMAS: f64 = 5.5;
/// Headroom below full scale for the auto scale.
const FULL_SCALE_MARGIN: f64 = 0.9;

/// The sync level of lobe position `i` of `n` (see the module docs).
pub fn sync_level(i: usize, n: usize) -> f64 {
    -0.8 + 1.6 * i as f64 / (n.max(2) - 1) as f64
}

#[derive(Clone, Debug)]
pub struct Lobe {
    pub name: String,
    pub az: f64,
    pub el: f64,
    /// Amplitude factor of the lobe's own path (switch, cable, amplifier).
    pub gain: f64,
}

#[derive(Clone, Debug)]
pub struct Pulsed {
    pub pri: f64,
    pub t0: f64,
    pub pulse_length: f64,
    pub pulses_per_dwell: i64,
    pub jitter_rms: f64,
    pub switch_lead: f64,
    /// Echo amplitude at beam peak, sqrt(SNR).
    pub amplitude: f64,
    pub leakage_amplitude: Option<f64>,
    pub fluctuation: Fluctuation,
    pub phase: PhaseMode,
    pub range: Track<Metres>,
}

#[derive(Clone, Debug)]
pub struct Beacon {
    pub tone_hz: f64,
    pub amplitude: f64,
    pub dwell: f64,
    pub t0: f64,
    pub fluctuation: Fluctuation,
}

#[derive(Clone, Debug)]
pub enum Signal {
    Pulsed(Pulsed),
    Beacon(Beacon),
}

/// A scenario as plain numbers, checked.
#[derive(Clone, Debug)]
pub struct Model {
    pub rate: f64,
    /// Scenario time of sample 0.
    pub start: f64,
    pub samples: u64,
    pub format: WriteFormat,
    pub scale: f64,
    pub frequency: Option<f64>,
    pub sync_channel: bool,
    pub trigger_channel: bool,
    pub chunk: usize,
    pub lobes: Vec<Lobe>,
    pub beam: Beam,
    pub way: i32,
    pub signal: Signal,
    /// (peak amplitude, length in s) of the burst at each switch.
    pub transient: Option<(f64, f64)>,
    pub az: Track<Degrees>,
    pub el: Track<Degrees>,
    pub seed: u64,
    pub name: String,
}

/// The capture's sample rate, length in samples and format, checked.
fn capture_size(f: &ScenarioFile) -> Result<(f64, f64, WriteFormat), String> {
    let err = |at: &str, m: String| f.error_at_keys(at, m);
    let c = &f.scenario.capture;
    let rate = c.sample_rate.0;
    if !(rate.is_finite() && rate > 0.0) {
        return Err(err("capture/sample_rate", format!("sample rate {rate} must be positive")));
    }
    let samples = (c.duration.0 * rate).round();
    if !(1.0..=MAX_SAMPLES).contains(&samples) {
        return Err(err(
            "capture/duration",
            format!("duration {} s gives {samples} samples (need 1 to {MAX_SAMPLES:e})", c.duration.0),
        ));
    }
    if !c.start.0.is_finite() {
        return Err(err("capture/start", "start must be a finite time".into()));
    }
    let format = WriteFormat::parse(&c.format).map_err(|e| err("capture/format", e.to_string()))?;
    if c.chunk == 0 || c.chunk > 1 << 24 {
        return Err(err("capture/chunk", format!("chunk {} must be between 1 and {}", c.chunk, 1 << 24)));
    }
    Ok((rate, samples, format))
}

/// The lobes: names, offsets (from `toward` and the squint, or `az`/`el`) and gains.
fn lobes_from(f: &ScenarioFile) -> Result<Vec<Lobe>, String> {
    let (s, a) = (&f.scenario, &f.scenario.antenna);
    let err = |at: &str, m: String| f.error_at_keys(at, m);
    if s.lobes.len() < 2 {
        return Err(err("lobes", format!("{} lobe(s) given; lobe switching needs at least two", s.lobes.len())));
    }
    let mut lobes = Vec::new();
    for (i, l) in s.lobes.iter().enumerate() {
        let at = format!("lobes/{i}");
        let name = l.name.trim();
        if name.is_empty() || name.contains(',') {
            return Err(err(&at, format!("lobe name '{}' must be non-empty and without commas", l.name)));
        }
        if lobes.iter().any(|o: &Lobe| o.name == name) {
            return Err(err(&at, format!("lobe name '{name}' is used twice")));
        }
        let (az, el) = match (l.toward, l.az, l.el) {
            (Some(t), None, None) => {
                let sq = a.squint.ok_or_else(|| err("antenna", "`squint` is needed when lobes use `toward`".into()))?.0;
                match t {
                    Toward::Right => (sq, 0.0),
                    Toward::Left => (-sq, 0.0),
                    Toward::Up => (0.0, sq),
                    Toward::Down => (0.0, -sq),
                }
            }
            (None, az, el) if az.is_some() || el.is_some() => (az.map_or(0.0, |v| v.0), el.map_or(0.0, |v| v.0)),
            _ => {
                return Err(err(&at, format!("lobe '{name}' needs either `toward` or `az`/`el` offsets (not both)")));
            }
        };
        let gain = db_amplitude(l.gain_db.map_or(0.0, |g| g.0));
        lobes.push(Lobe { name: name.to_string(), az, el, gain });
    }
    Ok(lobes)
}

/// Every track value finite, every swing period positive.
fn check_tracks(f: &ScenarioFile) -> Result<(), String> {
    let s = &f.scenario;
    let err = |at: &str, m: String| f.error_at_keys(at, m);
    let tracks = [
        ("target/az", track_numbers(&s.target.az)),
        ("target/el", track_numbers(&s.target.el)),
        ("target/range", s.target.range.as_ref().map(track_numbers).unwrap_or_default()),
    ];
    for (at, numbers) in tracks {
        if numbers.iter().any(|v| !v.is_finite()) {
            return Err(err(at, "every value of a track must be a finite number".into()));
        }
        if numbers.len() > 2 && !positive(numbers[3]) {
            return Err(err(&format!("{at}/swing/period"), format!("swing period {} s must be positive", numbers[3])));
        }
    }
    Ok(())
}

/// A pulsed signal, checked against its PRI and the target's range over the capture (which ends at `end`).
fn pulsed_from(f: &ScenarioFile, p: &PulsedSpec, end: f64) -> Result<Signal, String> {
    let (s, c) = (&f.scenario, &f.scenario.capture);
    let err = |at: &str, m: String| f.error_at_keys(at, m);
    let at = |k: &str| format!("signal/pulsed/{k}");
    let pri = 1.0 / p.prf.0;
    if !(p.prf.0 > 0.0 && pri.is_finite()) {
        return Err(err(&at("prf"), format!("PRF {} Hz must be positive", p.prf.0)));
    }
    if !(p.pulse.0 > 0.0 && p.pulse.0 < pri) {
        return Err(err(
            &at("pulse"),
            format!("pulse length {} s must be positive and shorter than the PRI {pri} s", p.pulse.0),
        ));
    }
    if p.pulses_per_dwell == 0 {
        return Err(err(&at("pulses_per_dwell"), "at least one pulse per dwell is needed".into()));
    }
    if !(p.prf_jitter.0 >= 0.0 && p.prf_jitter.0 < 0.1 * pri) {
        return Err(err(
            &at("prf_jitter"),
            format!("PRF jitter {} s must be from 0 to a tenth of the PRI", p.prf_jitter.0),
        ));
    }
    let lead = p.switch_lead.map_or(0.1 * pri, |l| l.0);
    if !(lead >= 0.0 && lead < 0.5 * pri) {
        return Err(err(&at("switch_lead"), format!("switch lead {lead} s must be from 0 to half the PRI")));
    }
    let range = s
        .target
        .range
        .ok_or_else(|| err("target", "a pulsed scenario needs `range` (e.g. `range: {at: 12 km}`)".into()))?;
    let (rmin, rmax) = range.bounds(c.start.0, end);
    if rmax > MAX_RANGE_M {
        return Err(err("target/range", format!("range reaches {rmax} m; the synthesizer stops at {MAX_RANGE_M:e} m")));
    }
    if !positive(rmin) {
        return Err(err("target/range", format!("range falls to {rmin} m during the capture; it must stay positive")));
    }
    if !p.first_transmit.0.is_finite() {
        return Err(err(&at("first_transmit"), "must be a finite time".into()));
    }
    Ok(Signal::Pulsed(Pulsed {
        pri,
        t0: p.first_transmit.0,
        pulse_length: p.pulse.0,
        pulses_per_dwell: p.pulses_per_dwell as i64,
        jitter_rms: p.prf_jitter.0,
        switch_lead: lead,
        amplitude: db_amplitude(p.snr.0),
        leakage_amplitude: p.leakage.map(|l| db_amplitude(l.0)),
        fluctuation: p.fluctuation,
        phase: p.phase,
        range,
    }))
}

/// A beacon's tone, checked against the sample `rate`.
fn beacon_from(f: &ScenarioFile, b: &BeaconSpec, rate: f64) -> Result<Signal, String> {
    let (s, c) = (&f.scenario, &f.scenario.capture);
    let err = |at: &str, m: String| f.error_at_keys(at, m);
    let at = |k: &str| format!("signal/beacon/{k}");
    if !(b.dwell.0 > 0.0 && b.dwell.0 * rate >= 1.0) {
        return Err(err(&at("dwell"), format!("dwell {} s must hold at least one sample", b.dwell.0)));
    }
    if b.fluctuation == Fluctuation::PerPulse {
        return Err(err(&at("fluctuation"), "a beacon has no pulses: use none or per_dwell".into()));
    }
    if s.target.range.is_some() {
        return Err(err("target/range", "a beacon scenario has no range; remove `range`".into()));
    }
    if c.trigger {
        return Err(err("capture/trigger", "a beacon has no transmit trigger; remove `trigger`".into()));
    }
    if b.tone.0.abs().partial_cmp(&(rate / 2.0)) != Some(std::cmp::Ordering::Less) {
        return Err(err(
            &at("tone"),
            format!("tone {} Hz must lie within +-{} Hz (half the sample rate)", b.tone.0, rate / 2.0),
        ));
    }
    Ok(Signal::Beacon(Beacon {
        tone_hz: b.tone.0,
        amplitude: db_amplitude(b.snr.0),
        dwell: b.dwell.0,
        t0: b.first_start.0,
        fluctuation: b.fluctuation,
    }))
}

/// at, per_second, then (amplitude, period, phase) when the track swings.
fn track_numbers<Q: Quantity + Default>(t: &Track<Q>) -> Vec<f64> {
    let mut v = vec![t.at.value(), t.per_second.value()];
    if let Some(s) = &t.swing {
        v.extend([s.amplitude.value(), s.period.0, s.phase.0]);
    }
    v
}

/// Above zero (false for NaN).
fn positive(x: f64) -> bool {
    x.partial_cmp(&0.0) == Some(std::cmp::Ordering::Greater)
}

fn db_amplitude(db: f64) -> f64 {
    10f64.powf(db / 20.0)
}

impl Model {
    /// Check a parsed scenario and turn it into numbers; errors point at the key.
    pub fn from_file(f: &ScenarioFile) -> Result<Model, String> {
        let s = &f.scenario;
        let err = |at: &str, m: String| f.error_at_keys(at, m);
        let c = &s.capture;
        let (rate, samples, format) = capture_size(f)?;

        let a = &s.antenna;
        let shape = match a.beam {
            BeamKind::Gaussian => BeamShape::Gaussian,
            BeamKind::Uniform => BeamShape::Uniform,
            BeamKind::Cosine => BeamShape::Cosine,
            BeamKind::Table => {
                let rel = a
                    .pattern
                    .as_deref()
                    .ok_or_else(|| err("antenna/beam", "a table beam needs `pattern: FILE.csv`".into()))?;
                let path = f.dir().join(rel);
                let text = std::fs::read_to_string(&path)
                    .map_err(|e| err("antenna/pattern", format!("cannot read {}: {e}", path.display())))?;
                BeamShape::Table(
                    parse_pattern_csv(&text).map_err(|e| err("antenna/pattern", format!("{}: {e}", path.display())))?,
                )
            }
        };
        let bw = match (&shape, a.beamwidth) {
            (BeamShape::Table(_), _) => 0.0,
            (_, Some(b)) => b.0,
            (_, None) => return Err(err("antenna", "`beamwidth` is needed for this beam".into())),
        };
        let beam = Beam::new(shape, bw).map_err(|e| err("antenna", e))?;
        let pulsed = matches!(s.signal, SignalSpec::Pulsed(_));
        let way = match a.way.unwrap_or(if pulsed { Way::Two } else { Way::One }) {
            Way::One => 1,
            Way::Two => 2,
        };

        let lobes = lobes_from(f)?;
        let end = c.start.0 + samples / rate;
        check_tracks(f)?;
        let signal = match &s.signal {
            SignalSpec::Pulsed(p) => pulsed_from(f, p, end)?,
            SignalSpec::Beacon(b) => beacon_from(f, b, rate)?,
        };
        let transient = match &s.switch_transient {
            Some(t) if !positive(t.length.0) => {
                return Err(err("switch_transient/length", "length must be positive".into()));
            }
            Some(t) => Some((db_amplitude(t.level.0), t.length.0)),
            None => None,
        };
        let mut model = Model {
            rate,
            start: c.start.0,
            samples: samples as u64,
            format,
            scale: 1.0,
            frequency: c.frequency.map(|f| f.0),
            sync_channel: c.sync == SyncMode::Channel,
            trigger_channel: c.trigger,
            chunk: c.chunk,
            lobes,
            beam,
            way,
            signal,
            transient,
            az: s.target.az,
            el: s.target.el,
            seed: s.seed,
            name: s.name.clone(),
        };
        model.scale = match c.scale {
            ScaleSpec::Fixed(x) => x,
            ScaleSpec::Auto => FULL_SCALE_MARGIN / model.expected_peak(),
        };
        Ok(model)
    }

    /// The largest |component| expected before scaling: noise allowance plus
    /// echo or tone, leakage and switch transient all at once.
    pub fn expected_peak(&self) -> f64 {
        let noise = NOISE_PEAK_SIGMAS * std::f64::consts::FRAC_1_SQRT_2;
        let (signal, fluct, leak) = match &self.signal {
            Signal::Pulsed(p) => (p.amplitude, p.fluctuation, p.leakage_amplitude.unwrap_or(0.0)),
            Signal::Beacon(b) => (b.amplitude, b.fluctuation, 0.0),
        };
        let f = if fluct == Fluctuation::None { 1.0 } else { FLUCTUATION_PEAK };
        noise + signal * f + leak + self.transient.map_or(0.0, |t| t.0)
    }

    /// Aux channels in the written order.
    pub fn aux(&self) -> Vec<AuxRole> {
        let mut a = Vec::new();
        if self.sync_channel {
            a.push(AuxRole::Sync);
        }
        if self.trigger_channel {
            a.push(AuxRole::Trigger);
        }
        a
    }

    /// Scenario time of sample `n`.
    pub fn time_of(&self, n: f64) -> f64 {
        self.start + n / self.rate
    }

    /// Position of scenario time `t` in samples (fractional). Within a
    /// millionth of a sample of a whole number it is snapped to it, so
    /// instants meant to fall on a sample do not slip by rounding error.
    pub fn sample_pos(&self, t: f64) -> f64 {
        let x = (t - self.start) * self.rate;
        let r = x.round();
        if (x - r).abs() < 1e-6 { r } else { x }
    }

    /// The dwell sample `x` belongs to (by switch positions in samples, so
    /// the answer does not depend on where a chunk starts).
    pub fn dwell_at_sample(&self, x: f64) -> i64 {
        let mut d = self.dwell_at(self.time_of(x));
        while self.sample_pos(self.switch_time(d)) > x {
            d -= 1;
        }
        while self.sample_pos(self.switch_time(d + 1)) <= x {
            d += 1;
        }
        d
    }

    /// Pattern factor `g(x)^n` of lobe `l` for the target at scenario time `t`.
    pub fn pattern_factor(&self, l: usize, t: f64) -> f64 {
        let lobe = &self.lobes[l];
        let x = (self.az.at_time(t) - lobe.az).hypot(self.el.at_time(t) - lobe.el);
        lobe.gain * self.beam.voltage(x).powi(self.way)
    }

    /// Transmit instant of pulse `k` (scenario time), with its jitter.
    pub fn transmit_time(&self, p: &Pulsed, k: i64) -> f64 {
        let mut t = p.t0 + k as f64 * p.pri;
        if p.jitter_rms > 0.0 {
            let j = sub_rng(self.seed, STREAM_JITTER, k).gaussian() * p.jitter_rms;
            // Keep the pulse order whatever the draw.
            t += j.clamp(-0.3 * p.pri, 0.3 * p.pri);
        }
        t
    }

    /// Switch instant starting dwell `d` (scenario time).
    pub fn switch_time(&self, d: i64) -> f64 {
        match &self.signal {
            Signal::Pulsed(p) => self.transmit_time(p, d * p.pulses_per_dwell) - p.switch_lead,
            Signal::Beacon(b) => b.t0 + d as f64 * b.dwell,
        }
    }

    /// The dwell in progress at scenario time `t`.
    pub fn dwell_at(&self, t: f64) -> i64 {
        let (origin, len) = match &self.signal {
            Signal::Pulsed(p) => (p.t0 - p.switch_lead, p.pri * p.pulses_per_dwell as f64),
            Signal::Beacon(b) => (b.t0, b.dwell),
        };
        let mut d = ((t - origin) / len).floor() as i64;
        while self.switch_time(d) > t {
            d -= 1;
        }
        while self.switch_time(d + 1) <= t {
            d += 1;
        }
        d
    }

    /// Position of dwell `d`'s lobe in the lobe order.
    pub fn lobe_of_dwell(&self, d: i64) -> usize {
        d.rem_euclid(self.lobes.len() as i64) as usize
    }

    /// Complex amplitude factor of the target for dwell `d` / pulse `k`:
    /// Rayleigh amplitude when fluctuating, times a random phase.
    pub(super) fn target_factor(&self, fluct: Fluctuation, phase: PhaseMode, d: i64, k: i64) -> Complex64 {
        let amp = match fluct {
            Fluctuation::None => 1.0,
            Fluctuation::PerDwell => sub_rng(self.seed, STREAM_FLUCT, d).complex_gaussian(1.0).norm() as f64,
            Fluctuation::PerPulse => sub_rng(self.seed, STREAM_FLUCT, k).complex_gaussian(1.0).norm() as f64,
        };
        let ph = match phase {
            PhaseMode::PerDwell => sub_rng(self.seed, STREAM_PHASE_DWELL, d).uniform(),
            PhaseMode::PerPulse => sub_rng(self.seed, STREAM_PHASE_PULSE, k).uniform(),
        };
        Complex64::from_polar(amp, 2.0 * PI * ph)
    }

    /// The longest echo delay of any pulse whose echo can reach the capture
    /// (the range bound taken back to transmits one delay before the start).
    pub(super) fn max_delay(&self, p: &Pulsed) -> f64 {
        let end = self.time_of(self.samples as f64);
        let (_, first) = p.range.bounds(self.start - p.pri, end);
        let early = self.start - 2.0 * first / SPEED_OF_LIGHT - p.pri;
        2.0 * p.range.bounds(early, end).1 / SPEED_OF_LIGHT
    }
}

/// Seeded random streams, one per kind of draw, so a draw tied to pulse
/// or dwell `index` does not depend on how many were drawn before it.
pub(super) const STREAM_NOISE: u64 = 1;
pub(super) const STREAM_SYNC: u64 = 2;
pub(super) const STREAM_JITTER: u64 = 3;
pub(super) const STREAM_FLUCT: u64 = 4;
pub(super) const STREAM_PHASE_DWELL: u64 = 5;
pub(super) const STREAM_PHASE_PULSE: u64 = 6;

fn mix(mut z: u64) -> u64 {
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// An independent random stream for (seed, stream, index).
pub(super) fn sub_rng(seed: u64, stream: u64, index: i64) -> Rng {
    Rng::new(mix(seed ^ mix(stream.wrapping_mul(0x9E37_79B9_7F4A_7C15) ^ mix(index as u64))))
}
