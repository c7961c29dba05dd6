//! `pulse_framer`: finds each transmit instant (trigger channel, transmit
//! leakage in the IQ, or a known PRF) and cuts the stream into sweeps, one
//! pulse repetition interval each, numbered, with missing pulses predicted.

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::dsp::pulse_timing::{FLOOR_BLOCK, NoiseFloor};
use crate::error::BuildError;
use crate::facts::{Facts, StreamFacts};
use crate::item::{Item, ItemKind, SampleChunk, Stamp};
use crate::param::{ParamType, Unit};
use crate::typed::{TimeSetting, TypedBlock};
use leakage_rise::{RISE_MAX, Rise};
use num_complex::Complex32;
use std::collections::VecDeque;
use std::ops::Range;
use sweep_cutting::{HeldSweep, Opening};

mod leakage_rise;
mod sweep_cutting;

pub const SPEC: BlockSpec = BlockSpec::typed::<PulseFramer>(
    "pulse_framer",
    "Finds transmit instants from a trigger channel, the transmit leakage in the IQ, or a known PRF, \
     and hands on one sweep per pulse interval (leakage blanked); gaps over 1.5 PRI get predicted \
     instants so pulse numbers stay right.",
);

crate::block_ports! {
    inputs pub enum FramerIn {
        Samples = required("samples", ItemKind::Samples, "capture chunks (with a trigger channel for trigger timing)"),
    }
}

crate::block_ports! {
    outputs pub enum FramerOut {
        Sweeps = optional("sweeps", ItemKind::Sweep, "one sweep per pulse interval, from its transmit instant"),
    }
}

crate::block_choice! {
    /// Where transmit instants come from.
    pub enum Timing { Trigger = "trigger", Leakage = "leakage", Schedule = "schedule" }
}

crate::block_choice! {
    /// Which sample of the leakage pulse is the transmit instant.
    pub enum LeakageInstant { Rise = "rise", Peak = "peak" }
}

crate::block_settings! {
    /// Settings of `pulse_framer`.
    pub struct PulseFramerSettings {
        timing: Timing {
            ty: ParamType::Choice(Timing::WORDS),
            default: Some("leakage"),
            doc: "where transmit instants come from",
        },
        prf: f64 {
            ty: ParamType::Number { unit: Unit::Hertz, min: 0.01, max: 1e8 },
            default: None,
            doc: "nominal pulse repetition frequency (hold-off, missing pulses, schedule)",
        },
        threshold: f64 {
            ty: ParamType::Number { unit: Unit::None, min: 0.01, max: 0.99 },
            default: Some("0.5"),
            doc: "trigger: rising edge through this fraction of the trigger's maximum",
        },
        threshold_db: f64 {
            ty: ParamType::Number { unit: Unit::Decibels, min: 1.0, max: 150.0 },
            default: Some("20 dB"),
            doc: "leakage: power this far above the running noise floor",
        },
        leakage_instant: LeakageInstant {
            ty: ParamType::Choice(LeakageInstant::WORDS),
            default: Some("rise"),
            doc: "leakage: the transmit instant is the first sample within 3 dB of the top (rise), or the top itself (peak: for pulse-compressed leakage, whose correlation peak is the transmit instant)",
        },
        holdoff: f64 {
            ty: ParamType::Number { unit: Unit::None, min: 0.05, max: 1.4 },
            default: Some("0.7"),
            doc: "no new instant within this fraction of a PRI after one",
        },
        offset: TimeSetting {
            ty: ParamType::Time { min_s: -3600.0, max_s: 3600.0, pulses: false },
            default: Some("0 s"),
            doc: "schedule: time of one transmit instant",
        },
        blank: TimeSetting {
            ty: ParamType::Time { min_s: 0.0, max_s: 1.0, pulses: false },
            default: Some("1 us"),
            doc: "samples zeroed at the start of each sweep (transmit leakage)",
        },
    }
}

/// Pulse intervals searched for a first transmit instant before giving up.
const SEARCH_PRIS: f64 = 32.0;
/// Missing-pulse notices shown before the rest are only counted.
const MISSING_SHOWN: u64 = 8;

impl TypedBlock for PulseFramer {
    type Settings = PulseFramerSettings;
    type In = FramerIn;
    type Out = FramerOut;

    fn build(s: PulseFramerSettings, _: &BuildContext) -> Result<Self, BuildError> {
        Ok(PulseFramer {
            mode: s.timing,
            prf: s.prf,
            threshold: s.threshold as f32,
            power_ratio: 10f64.powf(s.threshold_db / 10.0),
            leakage_peak: s.leakage_instant == LeakageInstant::Peak,
            holdoff_frac: s.holdoff,
            blank: s.blank,
            offset: s.offset,
            planned: None,
            setup: None,
            warm_buf: Vec::new(),
            warm_have: 0,
            warmed: false,
            trig_max: 0.0,
            prev_above: true,
            noise: NoiseFloor::default(),
            last_real: None,
            last: None,
            found: Vec::new(),
            open: None,
            blanked_in_place: 0..0,
            pulse: 0,
            pending: VecDeque::new(),
            missing_run: None,
            missing_reports: 0,
            missing_total: 0,
            next_scheduled: None,
            rise: None,
            rise_spare: Vec::new(),
            held: Vec::new(),
            copies: Vec::new(),
            seen: 0,
            last_stamp: None,
        })
    }

    /// The pulse interval follows from the rate and `prf`; the sweeps carry it on.
    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError> {
        let mut facts = facts.merged();
        if self.mode == Timing::Trigger && facts.channels.is_some_and(|c| !c.trigger) {
            return Err(BlockError::new(
                "parameter 'timing' is 'trigger' but the capture has no trigger channel; map one, or use timing: leakage",
            ));
        }
        if let Some(rate) = facts.rate {
            let plan = self.plan(rate)?;
            facts.pri_samples = Some(plan.pri);
            self.planned = Some(plan);
        }
        Ok(facts)
    }

    fn process(&mut self, port: FramerIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let result = match (port, item) {
            (FramerIn::Samples, Item::Samples(chunk)) => self.take(chunk, out),
            (FramerIn::Samples, _) => Ok(()),
        };
        self.release_held(out);
        result
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        let result = self.flush(out);
        self.release_held(out);
        result
    }
}

/// The settings in samples at one rate, worked out before the stream
/// starts when its rate is known.
#[derive(Clone, Copy)]
struct Plan {
    rate: f64,
    pri: f64,
    holdoff: u64,
    /// A gap longer than this (1.5 PRI) means a missing pulse.
    gap: u64,
    blank: usize,
    offset: f64,
    /// Samples before detection starts, to measure the trigger maximum or noise floor.
    warm: u64,
}

/// Stream-dependent settings, fixed at the first chunk: the plan at the
/// stream's rate, where the stream starts, and where the search for a first
/// transmit instant gives up.
struct Setup {
    plan: Plan,
    start: u64,
    give_up: u64,
}

pub struct PulseFramer {
    mode: Timing,
    prf: f64,
    threshold: f32,
    power_ratio: f64,
    /// Transmit instant at the leakage's top instead of its rise.
    leakage_peak: bool,
    holdoff_frac: f64,
    blank: TimeSetting,
    offset: TimeSetting,
    planned: Option<Plan>,
    setup: Option<Setup>,
    warm_buf: Vec<SampleChunk>,
    warm_have: u64,
    warmed: bool,
    trig_max: f32,
    prev_above: bool,
    noise: NoiseFloor,
    last_real: Option<u64>,
    /// The latest transmit instant found, and whether it was predicted.
    last: Option<(u64, bool)>,
    /// Instants found in this step, not yet cut into sweeps (see [`PulseFramer::cut_found`]).
    found: Vec<(u64, bool)>,
    /// The open sweep (the latest instant cut).
    open: Option<Opening>,
    /// Samples of this step's chunk whose instants had their leakage blanked in place.
    blanked_in_place: Range<u64>,
    /// Number of the open sweep.
    pulse: u64,
    /// The chunks holding the samples from the open sweep's start on.
    pending: VecDeque<SampleChunk>,
    /// (first predicted instant, count) of the current run of missing pulses.
    missing_run: Option<(u64, u64)>,
    missing_reports: u64,
    missing_total: u64,
    next_scheduled: Option<i64>,
    /// The leading edge of a leakage pulse being followed to its top.
    rise: Option<Rise>,
    /// The samples buffer of the last rise, for the next one.
    rise_spare: Vec<(u64, f32)>,
    /// Sweeps cut in this step, handed on at its end.
    held: Vec<HeldSweep>,
    /// Blanked copies of this step's sweeps, one buffer for all of them.
    copies: Vec<Complex32>,
    seen: u64,
    last_stamp: Option<Stamp>,
}

impl PulseFramer {
    fn plan(&self, rate: f64) -> Result<Plan, BlockError> {
        let pri = rate / self.prf;
        if pri.is_nan() || pri < 2.0 {
            return Err(BlockError::new(format!(
                "prf {} Hz gives a pulse interval of {pri:.2} samples at {rate} S/s; it must be at least 2",
                self.prf
            )));
        }
        // The warm-up buffers 2.5 intervals and every sweep is one interval
        // of complex samples: a very low PRF would need gigabytes.
        crate::limits::check_memory(
            &format!("prf {} Hz at {rate} S/s (a pulse interval of {pri:.0} samples; 2.5 intervals of 8-byte samples are buffered)", self.prf),
            2.5 * pri * 8.0,
        )
        .map_err(BlockError::new)?;
        let warm = match self.mode {
            Timing::Schedule => 0,
            Timing::Trigger | Timing::Leakage => ((2.5 * pri).ceil() as u64).max(4 * FLOOR_BLOCK as u64),
        };
        Ok(Plan {
            rate,
            pri,
            holdoff: (self.holdoff_frac * pri).round().max(1.0) as u64,
            gap: (1.5 * pri).floor() as u64,
            blank: self.blank.samples(rate, None)?.round().max(0.0) as usize,
            offset: self.offset.samples(rate, None)?,
            warm,
        })
    }

    fn set_up(&mut self, first: Stamp) -> Result<(), BlockError> {
        let plan = match self.planned {
            Some(plan) if plan.rate == first.rate => plan,
            _ => self.plan(first.rate)?,
        };
        let give_up = first.index + plan.warm + (SEARCH_PRIS * plan.pri).ceil() as u64;
        self.setup = Some(Setup { plan, start: first.index, give_up });
        Ok(())
    }

    /// Measure the trigger maximum or the noise floor over the warm-up window.
    fn warm_up(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        let Some(s) = self.setup.as_ref() else {
            return Ok(());
        };
        let warm_end = s.start + s.plan.warm;
        for chunk in &self.warm_buf {
            let n = (warm_end.saturating_sub(chunk.stamp.index) as usize).min(chunk.len());
            match self.mode {
                Timing::Trigger => {
                    if let Some(t) = &chunk.trigger {
                        self.trig_max = t[..n].iter().copied().filter(|v| v.is_finite()).fold(self.trig_max, f32::max);
                    }
                }
                Timing::Leakage => chunk.iq[..n].iter().for_each(|x| {
                    self.noise.push(x.norm_sqr());
                }),
                Timing::Schedule => {}
            }
        }
        self.warmed = true;
        for chunk in std::mem::take(&mut self.warm_buf) {
            self.scan(chunk, out)?;
        }
        Ok(())
    }

    fn scan(&mut self, chunk: SampleChunk, out: &mut Outputs) -> Result<(), BlockError> {
        let Some(give_up) = self.setup.as_ref().map(|s| s.give_up) else {
            return Ok(());
        };
        let (start, len) = (chunk.stamp.index, chunk.len());
        let trigger = match (self.mode, &chunk.trigger) {
            (Timing::Trigger, None) => {
                return Err(BlockError::at(
                    "timing is 'trigger' but the capture has no trigger channel; map one, or use timing: leakage",
                    start,
                ));
            }
            (_, Some(t)) if t.len() != len => {
                return Err(BlockError::at(
                    format!("the trigger channel has {} samples where the IQ has {len}", t.len()),
                    start,
                ));
            }
            (_, t) => t.clone(),
        };
        if self.mode == Timing::Schedule {
            self.scan_schedule(start, len, out);
        } else {
            self.scan_edges(&chunk, trigger.as_deref(), out);
        }
        drop(trigger);
        self.blank_in_place(chunk);
        self.cut_found();
        let end = start + len as u64;
        if self.last.is_none() {
            self.pending.clear();
            if end >= give_up {
                return Err(self.not_found(end));
            }
        }
        Ok(())
    }

    /// Find the transmit instants of one chunk from the trigger channel or
    /// the leakage's rising edges, predicting missing pulses.
    fn scan_edges(&mut self, chunk: &SampleChunk, trigger: Option<&[f32]>, out: &mut Outputs) {
        let Some(&Setup { start: first, plan: Plan { warm, holdoff, gap, pri, .. }, .. }) = self.setup.as_ref() else {
            return;
        };
        let warm_end = first + warm;
        let (start, len) = (chunk.stamp.index, chunk.len());
        let by_trigger = self.mode == Timing::Trigger && trigger.is_some();
        // The leakage threshold changes only when the noise floor does.
        let mut leak_limit = self.leak_limit();
        let mut next = 0;
        while next < len {
            if !by_trigger && !self.prev_above && self.rise.is_none() && start + next as u64 >= warm_end {
                // Between pulses: take the run of samples under the threshold in
                // one go, up to where a missing pulse would be predicted.
                let gap_at = self.last.map_or(u64::MAX, |(l, _)| l + gap + 1);
                let until = (gap_at.saturating_sub(start).min(len as u64) as usize).max(next);
                next += self.noise.push_below(&chunk.iq[next..until], leak_limit);
                if next == len {
                    break;
                }
            }
            let k = next;
            next += 1;
            let n = start + k as u64;
            let above = match &trigger {
                Some(t) if by_trigger => {
                    let v = t[k];
                    if n >= warm_end && v.is_finite() {
                        self.trig_max = self.trig_max.max(v);
                    }
                    self.trig_max > 0.0 && v >= self.threshold * self.trig_max
                }
                _ => {
                    let p = chunk.iq[k].norm_sqr();
                    if n >= warm_end && self.noise.push(p) {
                        leak_limit = self.leak_limit();
                    }
                    p as f64 > leak_limit
                }
            };
            if !above && !self.prev_above && self.rise.is_none() {
                // Between pulses: only a missing pulse can happen here.
                if let Some((l, _)) = self.last
                    && n - l > gap
                {
                    self.instant(l + pri.round() as u64, true, out);
                }
                continue;
            }
            let edge = above && !self.prev_above;
            self.prev_above = above;
            if let Some(rise) = &mut self.rise {
                // Still on the leading edge of the leakage: keep looking for its top.
                if above && rise.len() < RISE_MAX {
                    rise.push(n, chunk.iq[k].norm_sqr());
                    continue;
                }
                let at = rise.instant(self.leakage_peak);
                if let Some(done) = self.rise.take() {
                    self.rise_spare = done.into_buffer();
                }
                self.instant(at, false, out);
            }
            if edge && self.last_real.is_none_or(|r| n - r >= holdoff) {
                if self.mode == Timing::Leakage {
                    let buf = std::mem::take(&mut self.rise_spare);
                    self.rise = Some(Rise::new(buf, n, chunk.iq[k].norm_sqr()));
                } else {
                    self.instant(n, false, out);
                }
            } else if let Some((l, _)) = self.last
                && n - l > gap
            {
                self.instant(l + pri.round() as u64, true, out);
            }
        }
    }

    /// Power over which a sample is transmit leakage (never, before the floor is known).
    fn leak_limit(&self) -> f64 {
        if self.noise.ready() { self.power_ratio * self.noise.power().max(f64::MIN_POSITIVE) } else { f64::INFINITY }
    }

    fn not_found(&self, end: u64) -> BlockError {
        let hint = match self.mode {
            Timing::Trigger => "is the trigger channel mapped, and is 'threshold' right?",
            Timing::Leakage | Timing::Schedule => {
                "is 'threshold_db' above the leakage, or is there no leakage in this capture (try timing: schedule)?"
            }
        };
        let from = self.setup.as_ref().map_or(0, |s| s.start);
        BlockError::at(format!("no transmit instants found in the first {} samples; {hint}", end - from), from)
    }

    fn scan_schedule(&mut self, start: u64, len: usize, out: &mut Outputs) {
        let Some(s) = self.setup.as_ref() else { return };
        let (offset, pri, first) = (s.plan.offset, s.plan.pri, s.start as f64);
        let at = |k: i64| (offset + k as f64 * pri).round();
        let mut k = match self.next_scheduled {
            Some(k) => k,
            None => {
                let mut k = ((first - offset) / pri).ceil() as i64;
                while at(k - 1) >= first {
                    k -= 1;
                }
                while at(k) < first {
                    k += 1;
                }
                k
            }
        };
        let end = (start + len as u64) as f64;
        while at(k) < end {
            self.instant(at(k) as u64, false, out);
            k += 1;
        }
        self.next_scheduled = Some(k);
    }

    /// A transmit instant at `n`. The sweeps are cut once the step's chunk
    /// is blanked ([`Self::cut_found`]); the detection state moves on now.
    fn instant(&mut self, n: u64, predicted: bool, out: &mut Outputs) {
        if predicted {
            self.missing_total += 1;
            match &mut self.missing_run {
                Some((_, count)) => *count += 1,
                None => self.missing_run = Some((n, 1)),
            }
        } else {
            self.report_missing(out);
            self.last_real = Some(n);
        }
        self.last = Some((n, predicted));
        self.found.push((n, predicted));
    }

    fn report_missing(&mut self, out: &mut Outputs) {
        let (Some((first, count)), Some(s)) = (self.missing_run.take(), self.setup.as_ref()) else {
            return;
        };
        if self.missing_reports < MISSING_SHOWN {
            out.warn(
                Stamp::new(first, s.plan.rate),
                format!("{count} missing pulse(s) from sample {first}: predicted transmit instants inserted"),
            );
        }
        self.missing_reports += 1;
    }
}

impl PulseFramer {
    fn take(&mut self, chunk: SampleChunk, out: &mut Outputs) -> Result<(), BlockError> {
        if chunk.is_empty() {
            return Ok(());
        }
        if self.setup.is_none() {
            self.set_up(chunk.stamp)?;
        }
        self.seen += chunk.len() as u64;
        self.last_stamp = Some(chunk.stamp.after(chunk.len()));
        if self.warmed {
            return self.scan(chunk, out);
        }
        self.warm_have += chunk.len() as u64;
        self.warm_buf.push(chunk);
        if self.setup.as_ref().is_some_and(|s| self.warm_have >= s.plan.warm) {
            self.warm_up(out)?;
        }
        Ok(())
    }

    fn flush(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        if !self.warmed && !self.warm_buf.is_empty() {
            self.warm_up(out)?;
        }
        if let Some(rise) = self.rise.take() {
            self.instant(rise.instant(self.leakage_peak), false, out);
        }
        self.blanked_in_place = 0..0;
        self.cut_found();
        let Some(end) = self.last_stamp else {
            return Ok(());
        };
        match self.open {
            Some(open) if end.index > open.at => self.emit(open, end.index),
            Some(_) => {}
            None if self.mode != Timing::Schedule && self.seen > 0 => {
                return Err(self.not_found(end.index));
            }
            None => {}
        }
        self.report_missing(out);
        if self.missing_reports > MISSING_SHOWN {
            out.warn(
                end,
                format!(
                    "{} missing pulses in all ({} runs; only the first {MISSING_SHOWN} runs were listed)",
                    self.missing_total, self.missing_reports
                ),
            );
        }
        Ok(())
    }
}
