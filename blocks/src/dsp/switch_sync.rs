//! Switch timing: which lobe is active at every sample, and the exact sample
//! index of each switch instant, from one of three sources: a recorded sync
//! staircase (`sync_tracker`, levels learned by `sync_levels`), a known
//! schedule (`switch_schedule`), or the signal's own amplitude steps and
//! transients (`switch_finder`). Shared by the gate blocks; no block code.
//!
//! Sync staircase convention: the lobe at position `i` of the configured
//! order has the `i`-th lowest sync level. The levels are learned from the
//! data (histogram peaks, refined by trimmed means), so rigs with other
//! voltages work as long as the order holds.

use super::switch_finder::{FinderSettings, SwitchFinder};
use num_complex::Complex32;

pub use super::switch_schedule::{ScheduleSettings, ScheduleTracker};
pub use super::sync_levels::learn_levels;
pub use super::sync_tracker::{MAX_LEARN_SAMPLES, SyncSettings, SyncTracker};

/// Kinds of irregularity, so callers can rate-limit each kind separately.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Irregularity {
    /// A dwell far shorter or longer than expected.
    DwellLength,
    /// The sync stayed at one level for several dwells.
    Stuck,
    /// The sync value matched no lobe level for a while.
    Stray,
    /// A lobe came out of the configured order (missing transition).
    Order,
    /// The signal disagrees with the switch schedule (see `timing_check`).
    Schedule,
    /// Switch timing from the signal lost its switch train (see `switch_finder`).
    LockLost,
}

impl Irregularity {
    pub const ALL: [Irregularity; 6] = [
        Irregularity::DwellLength,
        Irregularity::Stuck,
        Irregularity::Stray,
        Irregularity::Order,
        Irregularity::Schedule,
        Irregularity::LockLost,
    ];

    pub fn label(&self) -> &'static str {
        match self {
            Irregularity::DwellLength => "irregular dwell length",
            Irregularity::Stuck => "stuck sync",
            Irregularity::Stray => "sync value matching no lobe",
            Irregularity::Order => "lobe out of order",
            Irregularity::Schedule => "schedule against the signal",
            Irregularity::LockLost => "switch train lost",
        }
    }
}

/// What the tracker found, in sample order.
#[derive(Clone, Debug, PartialEq)]
pub enum SwitchEvent {
    /// The first sample seen: lobe active there. `switch_at` is the switch
    /// instant that began this dwell when it is known (schedules), possibly
    /// before the capture start (negative).
    Begin { at: u64, lobe: usize, switch_at: Option<i64> },
    /// A switch instant: from sample `at` on, `lobe` is active.
    Switch { at: u64, lobe: usize },
    /// Something a person should know, at sample `at`.
    Irregular { at: u64, kind: Irregularity, what: String },
    /// Information for the timeline (no warning), at sample `at`.
    Note { at: u64, what: String },
}

enum Stage {
    Learning { settings: SyncSettings, values: Vec<f32> },
    Sync(Box<SyncTracker>),
    Schedule(ScheduleTracker),
    Signal(Box<SwitchFinder>),
}

/// The lobe timeline of a stream from any source, with a learning stage
/// for sync channels and the signal's switch train. Callers buffer their
/// items while [`Self::learning`] is true, then feed them again in order.
pub struct SwitchSync {
    stage: Stage,
}

/// Power of each sample, as the switch finder takes it.
fn powers(iq: &[Complex32]) -> impl ExactSizeIterator<Item = f64> + '_ {
    iq.iter().map(|z| f64::from(z.norm_sqr()))
}

impl SwitchSync {
    pub fn from_sync(settings: SyncSettings) -> SwitchSync {
        let cap = settings.learn.clamp(16, MAX_LEARN_SAMPLES);
        SwitchSync { stage: Stage::Learning { settings, values: Vec::with_capacity(cap.min(1 << 16)) } }
    }

    pub fn from_schedule(settings: ScheduleSettings) -> Result<SwitchSync, String> {
        Ok(SwitchSync { stage: Stage::Schedule(ScheduleTracker::new(settings)?) })
    }

    pub fn from_signal(settings: FinderSettings) -> SwitchSync {
        SwitchSync { stage: Stage::Signal(Box::new(SwitchFinder::new(settings))) }
    }

    pub fn learning(&self) -> bool {
        match &self.stage {
            Stage::Learning { .. } => true,
            Stage::Signal(f) => f.acquiring(),
            Stage::Sync(_) | Stage::Schedule(_) => false,
        }
    }

    /// Collect what the learning needs from the samples at `index`; true once enough are in.
    pub fn learn_from(&mut self, index: u64, sync: Option<&[f32]>, iq: &[Complex32]) -> Result<bool, String> {
        match &mut self.stage {
            Stage::Learning { settings, values: buf } => {
                let Some(values) = sync else {
                    return Err(
                        "timing is 'sync' but the input has no sync channel; map one, or use timing: schedule".into()
                    );
                };
                let want = settings.learn.clamp(16, MAX_LEARN_SAMPLES);
                let take = want.saturating_sub(buf.len()).min(values.len());
                buf.extend_from_slice(&values[..take]);
                Ok(buf.len() >= want)
            }
            Stage::Signal(f) => Ok(f.acquire_from(index, powers(iq))),
            Stage::Sync(_) | Stage::Schedule(_) => Ok(true),
        }
    }

    /// End the learning: the sync levels, or the switch train found from
    /// sample `first` on. Returns what was learned, for the person running it.
    pub fn end_learning(&mut self, first: u64, rate: f64) -> Result<Option<String>, String> {
        match &mut self.stage {
            Stage::Learning { settings, values } => {
                let levels = learn_levels(values, settings.names.len())?;
                let list: Vec<String> =
                    levels.iter().zip(&settings.names).map(|(l, n)| format!("{n} {l:.3}")).collect();
                self.stage = Stage::Sync(Box::new(SyncTracker::new(settings.clone(), levels)));
                Ok(Some(format!("learned sync levels: {}", list.join(", "))))
            }
            Stage::Signal(f) if f.acquiring() => f.end_acquisition(first, rate).map(Some),
            Stage::Signal(_) | Stage::Sync(_) | Stage::Schedule(_) => Ok(None),
        }
    }

    /// Feed the samples `[index, index + iq.len())`; `sync` is required for sync timing.
    pub fn feed(&mut self, index: u64, sync: Option<&[f32]>, iq: &[Complex32]) -> Result<(), String> {
        let len = iq.len();
        match &mut self.stage {
            Stage::Learning { .. } => Err("switch sync fed before its levels were learned".into()),
            Stage::Sync(t) => match sync {
                Some(s) if s.len() != len => {
                    Err(format!("the sync channel has {} samples where the IQ has {len}, from sample {index}", s.len()))
                }
                Some(s) => {
                    t.feed(index, s);
                    Ok(())
                }
                None => Err(format!(
                    "timing is 'sync' but the stream has no sync channel from sample {index}; \
                     map a sync channel or use timing: schedule"
                )),
            },
            Stage::Schedule(t) => {
                t.feed(index, len);
                Ok(())
            }
            Stage::Signal(f) => {
                f.feed(index, powers(iq));
                Ok(())
            }
        }
    }

    /// At the end of the stream (one past its last sample): place the switches still pending.
    pub fn finish(&mut self, end: u64) {
        if let Stage::Signal(f) = &mut self.stage {
            f.finish(end);
        }
    }

    /// Every sample before this index has its lobe decided.
    pub fn settled(&self, fed_end: u64) -> u64 {
        match &self.stage {
            Stage::Sync(t) => t.settled(),
            Stage::Signal(f) => f.settled(fed_end),
            Stage::Learning { .. } | Stage::Schedule(_) => fed_end,
        }
    }

    pub fn pop_event(&mut self) -> Option<SwitchEvent> {
        match &mut self.stage {
            Stage::Sync(t) => t.pop_event(),
            Stage::Schedule(t) => t.pop_event(),
            Stage::Signal(f) => f.pop_event(),
            Stage::Learning { .. } => None,
        }
    }
}

/// Passes the first few notices of each kind on and counts the rest, so a
/// bad capture does not flood the report.
#[derive(Default)]
pub struct NoticeLimiter {
    shown: [u64; Irregularity::ALL.len()],
    hidden: [u64; Irregularity::ALL.len()],
}

/// Notices of one kind shown before the rest are only counted.
pub const NOTICES_SHOWN: u64 = 8;

impl NoticeLimiter {
    fn slot(kind: Irregularity) -> usize {
        Irregularity::ALL.iter().position(|k| *k == kind).unwrap_or(0)
    }
    /// True when this notice should be shown.
    pub fn admit(&mut self, kind: Irregularity) -> bool {
        let s = Self::slot(kind);
        if self.shown[s] < NOTICES_SHOWN {
            self.shown[s] += 1;
            true
        } else {
            self.hidden[s] += 1;
            false
        }
    }
    /// Summary lines for the kinds that were cut short.
    pub fn summary(&self) -> Vec<String> {
        Irregularity::ALL
            .iter()
            .enumerate()
            .filter(|(s, _)| self.hidden[*s] > 0)
            .map(|(s, k)| format!("{} more notices of {} not shown", self.hidden[s], k.label()))
            .collect()
    }
}
