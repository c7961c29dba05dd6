//! Cross-check of a sync channel against the signal on sample streams.
//!
//! Under sync timing the switch instants come from the recorded staircase;
//! when its line lags (or leads) the antenna, every dwell's samples near
//! its start belong to the previous lobe. Each released sample is folded,
//! per lobe, onto its phase since the switch the sync channel gave for its
//! dwell (observed instants, not a schedule; each dwell is collected and
//! stretched onto the usual dwell), and the fold is scored as the
//! schedule check scores its own ([`ScheduleCheck`]): flat profiles when the
//! two agree, a step at phase `dwell - lag` when the staircase lags.
//! Steps close to the switch are tolerated: after it, within the guard (those
//! samples are left out anyway); before it, a few samples (a line driver's
//! ramp places the sync switch a sample or two late). See docs/derivations.md
//! ("Sync channel cross-check on sample streams").

use super::timing_check::ScheduleCheck;
use num_complex::Complex32;

/// Switch spacings measured before the fold starts; their median is the dwell.
const SPACINGS: usize = 9;
/// Samples a step may sit before the sync switch without a warning (the
/// staircase's ramp; common practice for a slow line driver).
const RAMP_SAMPLES: f64 = 4.0;

/// A sync channel that disagrees with the signal.
#[derive(Clone, Debug, PartialEq)]
pub struct SyncFinding {
    /// Samples from the sync switch to the amplitude step (negative: the step comes first).
    pub offset: f64,
    /// Standard score of the step.
    pub score: f64,
}

/// Folds released samples by their phase since the observed switch.
pub struct SyncStepCheck {
    lobes: usize,
    guard: f64,
    /// The switch that began the dwell being collected, its lobe, and how many switches came before it.
    switch: Option<(u64, usize, i64)>,
    /// The power of the dwell being collected, from its switch on (at most a few dwells).
    powers: Vec<f32>,
    spacings: Vec<f64>,
    fold: Option<ScheduleCheck>,
}

/// Longest dwell collected, in fold dwells (a stuck staircase is not held in memory).
const LONGEST_DWELL: f64 = 4.0;
/// Samples collected per dwell before the fold's dwell is known.
const FIRST_DWELLS_CAP: usize = 1 << 20;

impl SyncStepCheck {
    /// `guard` in samples: left out after each switch, as the gate leaves it out.
    pub fn new(lobes: usize, guard: f64) -> SyncStepCheck {
        SyncStepCheck { lobes, guard, switch: None, powers: Vec::new(), spacings: Vec::new(), fold: None }
    }

    /// Samples from `index` on, all of the dwell of `lobe` that began at
    /// the sync switch `switch_at`.
    pub fn add(&mut self, index: u64, iq: &[Complex32], lobe: usize, switch_at: u64) {
        match self.switch {
            Some((at, _, _)) if at == switch_at => {}
            Some((at, before, n)) => {
                self.dwell_ended(before, n, switch_at.saturating_sub(at) as f64);
                self.switch = Some((switch_at, lobe, n + 1));
            }
            None => self.switch = Some((switch_at, lobe, 0)),
        }
        let cap = self.fold.as_ref().map_or(FIRST_DWELLS_CAP, |f| (LONGEST_DWELL * f.dwell()) as usize);
        for (i, x) in iq.iter().enumerate() {
            // samples arrive in order; a gap (none expected) ends the collection
            if (index + i as u64).checked_sub(switch_at) != Some(self.powers.len() as u64) || self.powers.len() >= cap {
                break;
            }
            self.powers.push(x.norm_sqr());
        }
    }

    /// A dwell of `lobe`, the `number`-th, ended after `length` samples:
    /// until the usual dwell is known, measure it; then fold the dwell
    /// stretched onto it (a dwell a few samples longer or shorter than
    /// usual covers every phase bin once, so a changing power cannot make
    /// the bins' means differ by which dwells reach them).
    fn dwell_ended(&mut self, lobe: usize, number: i64, length: f64) {
        let powers = std::mem::take(&mut self.powers);
        if length <= 0.0 || powers.len() as f64 != length {
            return;
        }
        let Some(fold) = self.fold.as_mut() else {
            self.spacings.push(length);
            if self.spacings.len() == SPACINGS {
                self.spacings.sort_by(f64::total_cmp);
                let dwell = self.spacings[SPACINGS / 2];
                self.fold = Some(ScheduleCheck::new(self.lobes, 0.0, dwell, self.guard));
            }
            return;
        };
        let stretch = fold.dwell() / length;
        for (k, &power) in powers.iter().enumerate() {
            fold.fold(number, lobe, k as f64 * stretch, power, None);
        }
        self.powers = powers;
        self.powers.clear();
    }

    /// The verdict: None when the steps sit at the sync switches (within the tolerance).
    pub fn finish(&mut self) -> Option<SyncFinding> {
        let fold = self.fold.as_mut()?;
        // the last dwell, unfinished, is not folded
        let found = fold.finish()?;
        // A dwell's samples from the observed switch on: a half-dwell step is
        // a real step either way, the side taken is the nearer one.
        let offset = found.offset;
        let tolerated = if offset >= 0.0 { self.guard.max(RAMP_SAMPLES) } else { RAMP_SAMPLES + fold.bin_width() };
        (offset.abs() > tolerated).then_some(SyncFinding { offset, score: found.score })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Two lobes of power 4 and 1 switching every `dwell` samples; the
    /// sync switches `lag` samples later. Returns the check's verdict.
    fn run(dwell: u64, lag: u64, guard: f64) -> Option<SyncFinding> {
        let mut check = SyncStepCheck::new(2, guard);
        let mut noise = crate::dsp::rng::Rng::new(5);
        let total = 400 * dwell;
        for k in 0..total {
            let real_lobe = (k / dwell) % 2;
            let amp = if real_lobe == 0 { 2.0 } else { 1.0 };
            let x = Complex32::new(amp + 0.1 * noise.gaussian() as f32, 0.1 * noise.gaussian() as f32);
            let Some(sync_dwell) = k.checked_sub(lag).map(|s| s / dwell) else { continue };
            check.add(k, &[x], (sync_dwell % 2) as usize, sync_dwell * dwell + lag);
        }
        check.finish()
    }

    #[test]
    fn a_lagging_staircase_is_measured_and_a_ramp_is_not() {
        let late = run(200, 50, 10.0).expect("a quarter dwell late");
        assert!((late.offset + 50.0).abs() <= 2.0, "{late:?}");
        assert_eq!(run(200, 0, 10.0), None);
        assert_eq!(run(200, 2, 10.0), None);
        assert_eq!(run(200, 3, 10.0), None);
    }

    #[test]
    fn a_leading_staircase_is_measured_beyond_the_guard_only() {
        // the sync switches `lead` samples early: the signal steps after them
        let lead = |lead: u64, guard: f64| run(200, 200 - lead, guard);
        let early = lead(40, 10.0).expect("40 samples early");
        assert!((early.offset - 40.0).abs() <= 2.0, "{early:?}");
        assert_eq!(lead(8, 10.0), None);
    }
}
