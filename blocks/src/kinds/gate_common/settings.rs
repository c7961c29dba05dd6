//! The switch timing settings both gates read once: lobes, where the timing
//! comes from ([`SwitchTiming`]), dwell, guard and the rest, and the switch
//! source they build.

use crate::dsp::switch_finder::{FinderSettings, KnownLobe};
use crate::dsp::switch_sync::{MAX_LEARN_SAMPLES, ScheduleSettings, SwitchSync, SyncSettings};
use crate::dsp::timing_check::ScheduleCheck;
use crate::error::ParamError;
use crate::facts::LabelledSpan;
use crate::param::{ParamSpec, ParamType, Params, Unit};
use crate::typed::{FromParam, TimeSetting};
use std::sync::Arc;

crate::block_choice! {
    /// Where a gate learns the lobe timing. A new way adds a variant here
    /// and an arm in each `match` on it (the compiler lists them):
    /// [`SwitchTiming::needs_sync_channel`], [`GateSettings::source`],
    /// [`GateSettings::schedule_check`].
    pub enum SwitchTiming {
        /// From the recorded sync channel.
        Sync = "sync",
        /// From a known schedule (`dwell`, `first_start`).
        Schedule = "schedule",
        /// From the signal's amplitude steps and switch transients, the
        /// lobes named by a capture label or `known_lobe`.
        Signal = "signal",
    }
}

impl SwitchTiming {
    /// Whether this timing reads the capture's sync channel.
    pub fn needs_sync_channel(self) -> bool {
        match self {
            SwitchTiming::Sync => true,
            SwitchTiming::Schedule | SwitchTiming::Signal => false,
        }
    }
}

/// The switch timing settings both gates share, checked once at build time.
#[derive(Clone, Debug)]
pub struct GateSettings {
    /// Lobe names in switch order.
    pub lobes: Vec<Arc<str>>,
    pub timing: SwitchTiming,
    pub dwell: TimeSetting,
    pub first_start: TimeSetting,
    pub guard: TimeSetting,
    pub hysteresis: f64,
    pub min_dwell: TimeSetting,
    pub learn: TimeSetting,
    pub tolerance: f64,
    /// Timing 'signal': the position of the lobe known to be active at `known_at`.
    pub known_lobe: Option<usize>,
    pub known_at: TimeSetting,
}

impl GateSettings {
    /// How many settings [`GateSettings::params`] declares.
    pub const COUNT: usize = 11;

    /// The declarations of these settings; `pulses` lets times be given in
    /// pulses (gates on sweeps, whose spacing gives the pulse interval).
    /// A new setting goes here, into [`GateSettings::read`] and the struct.
    pub const fn params(pulses: bool) -> [ParamSpec; GateSettings::COUNT] {
        [
            ParamSpec {
                name: "lobes",
                ty: ParamType::Names,
                default: Some("up,right,down,left"),
                doc: "lobe names in switch order; the i-th has the i-th lowest sync level",
            },
            ParamSpec {
                name: "timing",
                ty: ParamType::Choice(SwitchTiming::WORDS),
                default: Some("sync"),
                doc: "lobe timing from the sync channel, from a known schedule, or found in the signal (amplitude steps and switch transients)",
            },
            ParamSpec {
                name: "dwell",
                ty: time(0.0, pulses),
                default: Some("0 s"),
                doc: "dwell length (schedule: required; sync: expected length, 0 = learn the median; signal: not used, it is measured)",
            },
            ParamSpec {
                name: "first_start",
                ty: time(-3600.0, pulses),
                default: Some("0 s"),
                doc: "schedule: start of the first lobe's dwell (earlier samples belong to the previous lobes)",
            },
            ParamSpec {
                name: "guard",
                ty: time(0.0, pulses),
                default: Some("20 us"),
                doc: "time after each switch instant left out (switch transient)",
            },
            ParamSpec {
                name: "hysteresis",
                ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 0.45 },
                default: Some("0.2"),
                doc: "switch only when nearer another level by this fraction of the level spacing",
            },
            ParamSpec {
                name: "min_dwell",
                ty: time(0.0, pulses),
                default: Some("100 us"),
                doc: "a new sync level must hold this long to count as a switch (longer than a switch ramp)",
            },
            ParamSpec {
                name: "learn",
                ty: time(0.0, pulses),
                default: Some("200 ms"),
                doc: "data used to learn the sync levels (at least one full lobe cycle, at most 4 Mi samples), or to find the switch train (timing signal: a dozen dwells or more, at most 4 Mi samples)",
            },
            ParamSpec {
                name: "tolerance",
                ty: ParamType::Number { unit: Unit::None, min: 0.01, max: 10.0 },
                default: Some("0.25"),
                doc: "relative dwell-length deviation reported as irregular",
            },
            ParamSpec {
                name: "known_lobe",
                ty: ParamType::Text,
                default: Some(""),
                doc: "timing signal: the lobe active at 'known_at' (by default the first sample: the first lobe); empty = from the capture's lobe labels (SigMF annotations)",
            },
            ParamSpec {
                name: "known_at",
                ty: time(0.0, pulses),
                default: Some("0 s"),
                doc: "timing signal: the time from the capture's first sample at which 'known_lobe' is active",
            },
        ]
    }

    /// Read the settings [`GateSettings::params`] declares from the checked parameters.
    pub fn read(p: &Params, pulses: bool) -> Result<GateSettings, ParamError> {
        let [lobes, timing, dwell, first_start, guard, hysteresis, min_dwell, learn, tolerance, known_lobe, known_at] =
            &GateSettings::params(pulses);
        let names = Vec::<String>::from_param(p, lobes)?;
        if names.len() < 2 {
            return Err(ParamError::invalid(
                "lobes",
                format!("needs at least two lobe names, got '{}'", names.join(",")),
            ));
        }
        if let Some((_, a)) = names.iter().enumerate().find(|(i, a)| names[..*i].contains(a)) {
            return Err(ParamError::invalid("lobes", format!("lobe name '{a}' appears twice")));
        }
        let settings = GateSettings {
            lobes: names.iter().map(|n| Arc::from(n.as_str())).collect(),
            timing: SwitchTiming::from_param(p, timing)?,
            dwell: TimeSetting::from_param(p, dwell)?,
            first_start: TimeSetting::from_param(p, first_start)?,
            guard: TimeSetting::from_param(p, guard)?,
            hysteresis: f64::from_param(p, hysteresis)?,
            min_dwell: TimeSetting::from_param(p, min_dwell)?,
            learn: TimeSetting::from_param(p, learn)?,
            tolerance: f64::from_param(p, tolerance)?,
            known_lobe: None,
            known_at: TimeSetting::from_param(p, known_at)?,
        };
        let known = String::from_param(p, known_lobe)?;
        let mut settings = settings;
        if !known.trim().is_empty() {
            let position = names.iter().position(|n| n.eq_ignore_ascii_case(known.trim()));
            settings.known_lobe = Some(position.ok_or_else(|| {
                ParamError::invalid(
                    "known_lobe",
                    format!("'{}' is none of the lobes {}", known.trim(), names.join(", ")),
                )
            })?);
        }
        if settings.timing == SwitchTiming::Schedule && settings.dwell.is_zero() {
            return Err(ParamError::invalid("dwell", "timing 'schedule' needs a 'dwell' longer than zero"));
        }
        Ok(settings)
    }

    fn times(&self) -> [&TimeSetting; 6] {
        [&self.dwell, &self.first_start, &self.guard, &self.min_dwell, &self.learn, &self.known_at]
    }

    /// Timing 'signal' without `known_lobe`: the first capture label that
    /// names a lobe, active at the middle of its stretch.
    pub(super) fn lobe_from_marks(&self, marks: Option<&[LabelledSpan]>, rate: f64) -> Option<KnownLobe> {
        marks?.iter().find_map(|m| {
            let lobe = self.lobes.iter().position(|n| n.eq_ignore_ascii_case(m.label.trim()))?;
            let at = (m.start_s + m.length_s.unwrap_or(0.0) / 2.0) * rate;
            Some(KnownLobe { lobe, at, source: format!("the capture's label '{}' at {} s", m.label, m.start_s) })
        })
    }

    /// The error when timing 'signal' cannot tell which lobe is which.
    pub(super) fn identity_missing(&self) -> String {
        let names: Vec<&str> = self.lobes.iter().map(|n| n.as_ref()).collect();
        format!(
            "parameter 'timing' is signal, which finds the switch instants but cannot tell which lobe is which: \
             the capture carries no lobe label (a SigMF annotation labelled {}) and known_lobe is not set. \
             Give one of the two: known_lobe, the first lobe (active at the first sample), or known_lobe and \
             known_at, a lobe and a time at which it is active",
            names.join(" or ")
        )
    }

    /// Which lobe is active when, for timing 'signal': the user's statement, else a capture label.
    fn known(&self, rate: f64, pri: Option<f64>, marks: Option<&[LabelledSpan]>) -> Result<KnownLobe, String> {
        match self.known_lobe {
            Some(lobe) => {
                let at = self.known_at.samples(rate, pri)?;
                let source = if self.known_at.is_zero() {
                    "known_lobe: the first lobe".to_string()
                } else {
                    "known_lobe at known_at".to_string()
                };
                Ok(KnownLobe { lobe, at, source })
            }
            None => self.lobe_from_marks(marks, rate).ok_or_else(|| self.identity_missing()),
        }
    }

    /// True when a time is given in pulses (the caller must know the PRI).
    pub fn needs_pri(&self) -> bool {
        self.times().iter().any(|t| t.in_pulses())
    }

    /// Schedule timing: the cross-check of the schedule against the signal.
    pub fn schedule_check(&self, rate: f64, pri: Option<f64>, guard: u64) -> Result<Option<ScheduleCheck>, String> {
        match self.timing {
            SwitchTiming::Sync | SwitchTiming::Signal => Ok(None),
            SwitchTiming::Schedule => {
                let first_start = self.first_start.samples(rate, pri)?;
                let dwell = self.dwell.samples(rate, pri)?;
                Ok(Some(ScheduleCheck::new(self.lobes.len(), first_start, dwell, guard as f64)))
            }
        }
    }

    /// The switch source and the guard length in samples, for a stream at
    /// `rate`; `marks` are the capture's labels, `one_cell` says the pieces
    /// are sweeps (each one cell of the switch finder).
    pub fn source(
        &self,
        rate: f64,
        pri: Option<f64>,
        marks: Option<&[LabelledSpan]>,
        one_cell: bool,
    ) -> Result<(SwitchSync, u64), String> {
        let guard = self.guard.samples(rate, pri)?.round().max(0.0) as u64;
        let dwell = self.dwell.samples(rate, pri)?;
        if dwell > 0.0 && guard as f64 >= dwell {
            return Err(format!(
                "guard of {guard} samples is not shorter than the dwell of {dwell} samples at {rate} S/s; every sample would be left out"
            ));
        }
        let source = match self.timing {
            SwitchTiming::Sync => SwitchSync::from_sync(SyncSettings {
                names: self.lobes.clone(),
                learn: self.learn.samples(rate, pri)?.round().max(0.0) as usize,
                hysteresis: self.hysteresis,
                min_dwell: self.min_dwell.samples(rate, pri)?.round().max(1.0) as usize,
                expected_dwell: (dwell > 0.0).then_some(dwell),
                tolerance: self.tolerance,
            }),
            SwitchTiming::Schedule => SwitchSync::from_schedule(ScheduleSettings {
                names: self.lobes.clone(),
                first_start: self.first_start.samples(rate, pri)?,
                dwell,
            })?,
            SwitchTiming::Signal => SwitchSync::from_signal(FinderSettings {
                names: self.lobes.clone(),
                // the held pieces are bounded as the sync levels' learning is
                acquire: (self.learn.samples(rate, pri)?.round().max(1.0) as usize).min(MAX_LEARN_SAMPLES),
                // about 30 us: fine enough to place a switch, coarse enough to fold fast
                cell: if one_cell { 0 } else { (rate * FINDER_CELL_S).round().max(1.0) as usize },
                known: self.known(rate, pri, marks)?,
            }),
        };
        Ok((source, guard))
    }
}

/// Cell length of the switch finder on runs of samples.
const FINDER_CELL_S: f64 = 31.25e-6;

const fn time(min_s: f64, pulses: bool) -> ParamType {
    ParamType::Time { min_s, max_s: 3600.0, pulses }
}
