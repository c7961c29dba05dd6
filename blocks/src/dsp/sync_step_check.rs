//! Cross-check of a sync channel against the signal on sample streams.
//!
//! Under sync timing the switch instants come from the recorded staircase;
//! when its line lags (or leads) the antenna, every dwell's samples near
//! its start belong to the previous lobe. Each released sample is folded,
//! per lobe, onto its phase since the switch the sync channel gave for its
//! dwell (observed instants, not a schedule), and the fold is scored as the
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
    /// The switch the samples folded last belong to, and how many switches came before it.
    switch: Option<(u64, i64)>,
    spacings: Vec<f64>,
    fold: Option<ScheduleCheck>,
}

impl SyncStepCheck {
    /// `guard` in samples: left out after each switch, as the gate leaves it out.
    pub fn new(lobes: usize, guard: f64) -> SyncStepCheck {
        SyncStepCheck { lobes, guard, switch: None, spacings: Vec::new(), fold: None }
    }

    /// Fold samples from `index` on, all of the dwell of `lobe` that began
    /// at the sync switch `switch_at`.
    pub fn add(&mut self, index: u64, iq: &[Complex32], lobe: usize, switch_at: u64) {
        let dwell_number = match self.switch {
            Some((at, n)) if at == switch_at => n,
            Some((at, n)) => {
                self.switched(switch_at.saturating_sub(at) as f64);
                n + 1
            }
            None => 0,
        };
        self.switch = Some((switch_at, dwell_number));
        let Some(fold) = self.fold.as_mut() else {
            return;
        };
        for (i, x) in iq.iter().enumerate() {
            let phase = (index + i as u64).saturating_sub(switch_at) as f64;
            fold.fold(dwell_number, lobe, phase, x.norm_sqr(), None);
        }
    }

    /// A new dwell began `spacing` samples after the last: until the dwell is known, measure it.
    fn switched(&mut self, spacing: f64) {
        if self.fold.is_some() || spacing <= 0.0 {
            return;
        }
        self.spacings.push(spacing);
        if self.spacings.len() == SPACINGS {
            self.spacings.sort_by(f64::total_cmp);
            let dwell = self.spacings[SPACINGS / 2];
            self.fold = Some(ScheduleCheck::new(self.lobes, 0.0, dwell, self.guard));
        }
    }

    /// The verdict: None when the steps sit at the sync switches (within the tolerance).
    pub fn finish(&mut self) -> Option<SyncFinding> {
        let fold = self.fold.as_mut()?;
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
}
