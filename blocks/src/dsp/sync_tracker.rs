//! The sync-channel tracker: which lobe is active at every sample and the
//! exact sample index of each switch, from a recorded sync staircase whose
//! levels were learned (see `sync_levels`). The lobe at position `i` of the
//! configured order has the `i`-th lowest level.
//!
//! Per-sample work is kept small: a sample inside the current level's quiet
//! band changes nothing (tested a block at a time, in float32), and
//! midpoint crossings of a pending level are found 32 samples per bit mask
//! (`sync_scan`).

use super::switch_sync::{Irregularity, SwitchEvent};
use super::sync_scan::{EMPTY_BAND, end_of_band_run, float32_above, float32_band, float32_below, rising_in_band};
use std::collections::VecDeque;
use std::sync::Arc;

/// Settings of the sync-channel tracker, in samples.
#[derive(Clone, Debug)]
pub struct SyncSettings {
    pub names: Vec<Arc<str>>,
    /// Samples to learn the levels from (bounded by [`MAX_LEARN_SAMPLES`]).
    pub learn: usize,
    /// Switch only when nearer another level by this fraction of the spacing.
    pub hysteresis: f64,
    /// A new level must hold this many samples to count as a switch.
    pub min_dwell: usize,
    /// Expected dwell length; `None` = median of the dwells seen.
    pub expected_dwell: Option<f64>,
    /// Allowed relative deviation of a dwell from the expected length.
    pub tolerance: f64,
}

/// Upper bound of the learning window, so memory stays bounded.
pub const MAX_LEARN_SAMPLES: usize = 1 << 22;
/// A dwell longer than this many expected dwells means a stuck sync.
const STUCK_DWELLS: f64 = 3.0;
/// Dwell lengths kept for the running median.
const DWELL_HISTORY: usize = 31;
/// A value farther than this fraction of the level spacing from every level matches no lobe.
const STRAY_FRACTION: f64 = 0.3;

pub(crate) fn min_spacing(levels: &[f64]) -> f64 {
    levels.windows(2).map(|w| (w[1] - w[0]).abs()).fold(f64::INFINITY, f64::min)
}

fn median(values: impl Iterator<Item = u64>) -> Option<f64> {
    let mut v: Vec<u64> = values.collect();
    if v.is_empty() {
        return None;
    }
    v.sort_unstable();
    let m = v.len() / 2;
    Some(if v.len() % 2 == 1 { v[m] as f64 } else { (v[m - 1] + v[m]) as f64 / 2.0 })
}

fn lobe_list(names: &[Arc<str>], from: usize, count: usize) -> String {
    (0..count).map(|k| names[(from + k) % names.len()].to_string()).collect::<Vec<_>>().join(", ")
}

/// Classifies a sync channel sample by sample, after the levels are learned.
pub struct SyncTracker {
    settings: SyncSettings,
    levels: Vec<f64>,
    margin: f64,
    stray_distance: f64,
    stray_limit: u64,
    max_hold: u64,
    started: bool,
    current: usize,
    pending: usize,
    pending_since: u64,
    /// Per level: whether the value is past the midpoint between the current level and it.
    past_mid: Vec<bool>,
    /// Per level: where the value last crossed that midpoint.
    crossed_at: Vec<u64>,
    dwell_start: u64,
    dwell_from_switch: bool,
    stuck_reported: bool,
    history: VecDeque<u64>,
    /// `expected_dwell` as of the last history change (it is read every sample).
    expected: Option<f64>,
    /// Per level: the float32 values that sit close enough to it to be nearest
    /// to it, within the stray distance and short of every midpoint (the fast
    /// path's band; empty as (inf, -inf)).
    quiet_band: Vec<(f32, f32)>,
    /// Row `c`, column `k`: the midpoint between levels `c` and `k`, and
    /// whether `k` lies above `c` (the midpoint test of `step`).
    midpoints: Vec<(f64, bool)>,
    stray_start: Option<u64>,
    stray_reported: bool,
    next_index: u64,
    settled_floor: u64,
    events: VecDeque<SwitchEvent>,
}

impl SyncTracker {
    pub fn new(settings: SyncSettings, levels: Vec<f64>) -> SyncTracker {
        let n = levels.len();
        let spacing = min_spacing(&levels);
        let min_dwell = settings.min_dwell.max(1) as u64;
        let stray_distance = STRAY_FRACTION * spacing;
        // 0.45 rather than 0.5 of the gap to each other level keeps the band
        // clear of the midpoints whatever the rounding.
        let quiet_band = (0..n)
            .map(|i| {
                let r = (0..n)
                    .filter(|&k| k != i)
                    .map(|k| 0.45 * (levels[k] - levels[i]).abs())
                    .fold(stray_distance, f64::min);
                if r.is_finite() && r > 0.0 { float32_band(levels[i] - r, levels[i] + r) } else { EMPTY_BAND }
            })
            .collect();
        let midpoints = (0..n * n)
            .map(|ck| {
                let (here, there) = (levels[ck / n], levels[ck % n]);
                (0.5 * (here + there), there > here)
            })
            .collect();
        SyncTracker {
            midpoints,
            expected: settings.expected_dwell,
            quiet_band,
            margin: settings.hysteresis * spacing,
            stray_distance,
            stray_limit: (min_dwell / 2).max(32),
            max_hold: min_dwell + min_dwell.max(4096),
            settings,
            levels,
            started: false,
            current: 0,
            pending: 0,
            pending_since: 0,
            past_mid: vec![false; n],
            crossed_at: vec![0; n],
            dwell_start: 0,
            dwell_from_switch: false,
            stuck_reported: false,
            history: VecDeque::new(),
            stray_start: None,
            stray_reported: false,
            next_index: 0,
            settled_floor: 0,
            events: VecDeque::new(),
        }
    }

    pub fn levels(&self) -> &[f64] {
        &self.levels
    }

    fn nearest(&self, v: f64) -> (usize, f64) {
        let mut best = (0, f64::INFINITY);
        for (i, &l) in self.levels.iter().enumerate() {
            let d = (v - l).abs();
            if d < best.1 {
                best = (i, d);
            }
        }
        best
    }

    fn expected_dwell(&self) -> Option<f64> {
        self.expected
    }

    fn update_expected_dwell(&mut self) {
        self.expected = self
            .settings
            .expected_dwell
            .or_else(|| if self.history.len() >= 3 { median(self.history.iter().copied()) } else { None });
    }

    /// Nothing pending: the value sits at the current level, no other level's
    /// midpoint is crossed and no stray run is open. A sample inside the
    /// current level's quiet band then changes nothing but the stuck check.
    fn quiet(&self) -> bool {
        self.started && self.pending == self.current && self.stray_start.is_none() && !self.past_mid.contains(&true)
    }

    /// First sample index at which `check_stuck` could report (u64::MAX: never).
    fn stuck_from(&self) -> u64 {
        if self.stuck_reported {
            return u64::MAX;
        }
        let Some(expected) = self.expected_dwell() else {
            return u64::MAX;
        };
        let threshold = STUCK_DWELLS * expected;
        if threshold.is_nan() || threshold >= 9.0e15 {
            u64::MAX
        } else if threshold < 0.0 {
            0
        } else {
            // Smallest whole length strictly above the threshold.
            self.dwell_start.saturating_add(threshold.floor() as u64 + 1)
        }
    }

    fn irregular(&mut self, at: u64, kind: Irregularity, what: String) {
        self.events.push_back(SwitchEvent::Irregular { at, kind, what });
    }

    /// Feed sync values starting at absolute sample `index`. Samples already
    /// seen are skipped; a jump forward is treated as a gap in the stream.
    pub fn feed(&mut self, index: u64, values: &[f32]) {
        let skip = self.next_index.saturating_sub(index).min(values.len() as u64) as usize;
        if !self.started {
            self.settled_floor = index;
        }
        let mut k = skip;
        while k < values.len() {
            if self.quiet() {
                // Fast path: skip the run of samples that stay in the current level's band.
                let (lo, hi) = self.quiet_band[self.current];
                let until = self.stuck_from().saturating_sub(index).min(values.len() as u64) as usize;
                k = end_of_band_run(values, k, until, (lo, hi));
                if k == values.len() {
                    break;
                }
            } else if self.started && self.pending != self.current && self.stray_start.is_none() {
                // A new level is pending confirmation: while the value stays in its
                // band only the midpoint crossings change, up to the confirming sample.
                let (lo, hi) = self.quiet_band[self.pending];
                let confirm_at = self.pending_since + self.settings.min_dwell.max(1) as u64 - 1;
                let until = self.stuck_from().min(confirm_at).saturating_sub(index).min(values.len() as u64) as usize;
                let lobes = self.levels.len();
                let row = &self.midpoints[self.current * lobes..(self.current + 1) * lobes];
                let run_start = k;
                k = end_of_band_run(values, k, until, (lo, hi));
                // Each lobe's midpoint is independent of the others': one pass
                // per lobe over the run keeps its state in registers.
                for (j, &(mid, up)) in row.iter().enumerate() {
                    if j == self.current {
                        continue;
                    }
                    let state = (self.past_mid[j], self.crossed_at[j]);
                    let run = &values[run_start..k];
                    let first = index + run_start as u64;
                    let (past, crossed) = if up {
                        rising_in_band::<true>(run, first, float32_above(mid), (lo, hi), state)
                    } else {
                        rising_in_band::<false>(run, first, float32_below(mid), (lo, hi), state)
                    };
                    self.past_mid[j] = past;
                    self.crossed_at[j] = crossed;
                }
                if k == values.len() {
                    break;
                }
            }
            self.step(index + k as u64, values[k] as f64);
            k += 1;
        }
        self.after_feed(index + values.len() as u64);
    }

    /// Bookkeeping after samples up to `end` were fed.
    fn after_feed(&mut self, end: u64) {
        self.next_index = self.next_index.max(end);
        // Bound how far back a switch may still be placed, so callers hold bounded data.
        let floor = self.next_index.saturating_sub(self.max_hold);
        if floor > self.settled_floor {
            self.settled_floor = floor;
            for c in self.crossed_at.iter_mut() {
                *c = (*c).max(floor);
            }
        }
        // Never move back: a later switch may not be placed before what callers already released.
        self.settled_floor = self.settled();
    }

    /// `feed` without the fast path: the full step on every sample (the
    /// reference the fast path is checked against).
    #[cfg(test)]
    fn feed_every_sample(&mut self, index: u64, values: &[f32]) {
        let skip = self.next_index.saturating_sub(index).min(values.len() as u64) as usize;
        if !self.started {
            self.settled_floor = index;
        }
        for (k, &v) in values.iter().enumerate().skip(skip) {
            self.step(index + k as u64, v as f64);
        }
        self.after_feed(index + values.len() as u64);
    }

    /// Every sample before this index has its lobe decided.
    pub fn settled(&self) -> u64 {
        let mut s = self.next_index;
        for (k, &past) in self.past_mid.iter().enumerate() {
            if past && k != self.current {
                s = s.min(self.crossed_at[k]);
            }
        }
        s.max(self.settled_floor)
    }

    fn step(&mut self, n: u64, v: f64) {
        let (j, dist) = if v.is_finite() { self.nearest(v) } else { (self.current, f64::INFINITY) };
        self.track_stray(n, v, dist);
        if !v.is_finite() {
            return;
        }
        if !self.started {
            self.started = true;
            self.current = j;
            self.pending = j;
            self.dwell_start = n;
            self.events.push_back(SwitchEvent::Begin { at: n, lobe: j, switch_at: None });
            return;
        }
        if j != self.pending && (v - self.levels[self.pending]).abs() - dist > self.margin {
            self.pending = j;
            self.pending_since = n;
        }
        let lobes = self.levels.len();
        for k in 0..lobes {
            if k == self.current {
                continue;
            }
            let (mid, up) = self.midpoints[self.current * lobes + k];
            let past = if up { v > mid } else { v < mid };
            if past && !self.past_mid[k] {
                self.crossed_at[k] = n;
            }
            self.past_mid[k] = past;
        }
        if self.pending != self.current && n + 1 - self.pending_since >= self.settings.min_dwell.max(1) as u64 {
            self.confirm(n);
        }
        self.check_stuck(n);
    }

    fn track_stray(&mut self, n: u64, v: f64, dist: f64) {
        if dist > self.stray_distance {
            let start = *self.stray_start.get_or_insert(n);
            if !self.stray_reported && n + 1 - start >= self.stray_limit {
                self.stray_reported = true;
                let levels: Vec<String> = self.levels.iter().map(|l| format!("{l:.3}")).collect();
                self.irregular(
                    start,
                    Irregularity::Stray,
                    format!(
                        "sync value {v:.3} matches no lobe level (levels {}) for {}+ samples from sample {start}",
                        levels.join(", "),
                        self.stray_limit
                    ),
                );
            }
        } else {
            self.stray_start = None;
            self.stray_reported = false;
        }
    }

    fn confirm(&mut self, n: u64) {
        let new = self.pending;
        let at = if self.past_mid[new] { self.crossed_at[new] } else { self.pending_since };
        let at = at.max(self.settled_floor).min(n);
        let old = self.current;
        if self.dwell_from_switch {
            let len = at.saturating_sub(self.dwell_start);
            if let Some(what) = self.dwell_length_notice(old, len) {
                self.irregular(self.dwell_start, Irregularity::DwellLength, what);
            }
            self.history.push_back(len);
            if self.history.len() > DWELL_HISTORY {
                self.history.pop_front();
            }
            self.update_expected_dwell();
        }
        let lobes = self.levels.len();
        let expected_next = (old + 1) % lobes;
        if new != expected_next {
            let names = &self.settings.names;
            let skipped = (new + lobes - old - 1) % lobes;
            let what = format!(
                "lobe order broken at sample {at}: {} followed by {} (skipped {}: a missing transition?)",
                names[old],
                names[new],
                lobe_list(names, expected_next, skipped)
            );
            self.irregular(at, Irregularity::Order, what);
        }
        self.current = new;
        self.dwell_start = at;
        self.dwell_from_switch = true;
        self.stuck_reported = false;
        self.past_mid.iter_mut().for_each(|p| *p = false);
        self.events.push_back(SwitchEvent::Switch { at, lobe: new });
    }

    /// The notice for a dwell of lobe `old` that lasted `len` samples, when
    /// it is farther from the expected length than the tolerance.
    fn dwell_length_notice(&self, old: usize, len: u64) -> Option<String> {
        let expected = self.expected_dwell()?;
        let tol = self.settings.tolerance;
        let off = (len as f64 - expected).abs() > tol * expected;
        if !off {
            return None;
        }
        let what = if (len as f64) < expected { "short" } else { "long" };
        Some(format!(
            "{what} dwell of lobe {} from sample {}: {len} samples, expected about {expected:.0} (tolerance {:.0} %)",
            self.settings.names[old],
            self.dwell_start,
            tol * 100.0
        ))
    }

    fn check_stuck(&mut self, n: u64) {
        if self.stuck_reported {
            return;
        }
        if let Some(expected) = self.expected_dwell()
            && n.saturating_sub(self.dwell_start) as f64 > STUCK_DWELLS * expected
        {
            {
                self.stuck_reported = true;
                let start = self.dwell_start;
                let name = self.settings.names[self.current].clone();
                self.irregular(
                    start,
                    Irregularity::Stuck,
                    format!(
                        "sync stuck at lobe {name}'s level from sample {start} for more than {STUCK_DWELLS} dwells (about {expected:.0} samples each)"
                    ),
                );
            }
        }
    }

    pub fn pop_event(&mut self) -> Option<SwitchEvent> {
        self.events.pop_front()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::rng::Rng;
    use crate::dsp::sync_levels::learn_levels;

    fn names(n: usize) -> Vec<Arc<str>> {
        (0..n).map(|i| Arc::from(format!("l{i}"))).collect()
    }

    fn staircase(n_lobes: usize, dwell: usize, total: usize, seed: u64) -> Vec<f32> {
        let mut rng = Rng::new(seed);
        (0..total)
            .map(|k| {
                let lobe = (k / dwell) % n_lobes;
                (-0.8 + 1.6 * lobe as f64 / (n_lobes - 1) as f64 + 0.01 * rng.gaussian()) as f32
            })
            .collect()
    }

    #[test]
    fn learns_four_levels_of_the_staircase() {
        let v = staircase(4, 500, 5000, 1);
        let levels = learn_levels(&v, 4).unwrap();
        let want = [-0.8, -0.8 + 1.6 / 3.0, -0.8 + 3.2 / 3.0, 0.8];
        for (l, w) in levels.iter().zip(want) {
            assert!((l - w).abs() < 0.003, "{levels:?}");
        }
    }

    #[test]
    fn two_level_sync_is_not_four_lobes() {
        let v = staircase(2, 500, 5000, 2);
        let e = learn_levels(&v, 4).unwrap_err();
        assert!(e.contains("found 2 sync levels") && e.contains("expected 4"), "{e}");
    }

    #[test]
    fn flat_sync_is_an_error() {
        let mut rng = Rng::new(3);
        let v: Vec<f32> = (0..4000).map(|_| (0.3 + 0.01 * rng.gaussian()) as f32).collect();
        let e = learn_levels(&v, 4).unwrap_err();
        assert!(e.contains("sync channel is flat"), "{e}");
        let e = learn_levels(&[0.5; 100], 2).unwrap_err();
        assert!(e.contains("sync channel is flat"), "{e}");
    }

    #[test]
    fn glitches_and_excursions_inside_the_hysteresis_do_not_switch() {
        let settings = SyncSettings {
            names: names(2),
            learn: 0,
            hysteresis: 0.2,
            min_dwell: 20,
            expected_dwell: None,
            tolerance: 0.25,
        };
        let mut t = SyncTracker::new(settings, vec![0.0, 1.0]);
        let mut v = vec![0.0f32; 3000];
        v[500..510].fill(1.0); // shorter than min_dwell
        v[1000..1200].fill(0.58); // past the midpoint, short of the 0.6 hysteresis margin
        v[2000..].fill(1.0);
        t.feed(0, &v[..1100]);
        // A switch could still be placed at the midpoint crossing: nothing after it is decided.
        assert_eq!(t.settled(), 1000);
        t.feed(1100, &v[1100..]);
        assert_eq!(t.settled(), 3000);
        let events: Vec<SwitchEvent> = std::iter::from_fn(|| t.pop_event()).collect();
        assert_eq!(events.len(), 3, "{events:?}");
        assert_eq!(events[0], SwitchEvent::Begin { at: 0, lobe: 0, switch_at: None });
        assert!(matches!(&events[1], SwitchEvent::Irregular { at: 1000, kind: Irregularity::Stray, .. }));
        assert_eq!(events[2], SwitchEvent::Switch { at: 2000, lobe: 1 });
    }

    /// A noisy four-level staircase with every irregularity the tracker
    /// knows (glitches, values between levels, stray values, NaNs, a stuck
    /// stretch, skipped lobes, a slow ramp), fed in uneven chunks.
    fn rough_staircase(seed: u64, total: usize) -> Vec<f32> {
        let mut rng = Rng::new(seed);
        let level = |lobe: usize| -0.8 + 1.6 * lobe as f64 / 3.0;
        let mut v = Vec::with_capacity(total);
        let mut lobe = 0;
        while v.len() < total {
            let dwell = if rng.uniform() < 0.1 { 1500 + (rng.uniform() * 4000.0) as usize } else { 1000 };
            lobe = (lobe + if rng.uniform() < 0.05 { 2 } else { 1 }) % 4;
            let from = level((lobe + 3) % 4);
            for k in 0..dwell {
                // A short ramp at each switch, like a real sync line settling.
                let x = if k < 6 { from + (level(lobe) - from) * k as f64 / 6.0 } else { level(lobe) };
                v.push((x + 0.02 * rng.gaussian()) as f32);
            }
        }
        v.truncate(total);
        for _ in 0..40 {
            let at = (rng.uniform() * (total - 300) as f64) as usize;
            let len = 1 + (rng.uniform() * 120.0) as usize;
            let what = rng.uniform();
            for x in &mut v[at..at + len] {
                *x = if what < 0.3 {
                    f32::NAN
                } else if what < 0.6 {
                    (*x as f64 + 0.2) as f32 // towards a midpoint, maybe past the stray distance
                } else {
                    level((rng.uniform() * 4.0) as usize) as f32 // a glitch to another level
                };
            }
        }
        v
    }

    #[test]
    fn fast_path_gives_the_same_events_and_settled_indices_as_every_sample_steps() {
        for (seed, expected_dwell) in [(11, None), (12, Some(1000.0)), (13, None)] {
            let settings = SyncSettings {
                names: names(4),
                learn: 0,
                hysteresis: 0.2,
                min_dwell: 20,
                expected_dwell,
                tolerance: 0.25,
            };
            let levels = vec![-0.8, -0.8 + 1.6 / 3.0, -0.8 + 3.2 / 3.0, 0.8];
            let mut fast = SyncTracker::new(settings.clone(), levels.clone());
            let mut reference = SyncTracker::new(settings, levels);
            let v = rough_staircase(seed, 200_000);
            let mut rng = Rng::new(seed + 100);
            let (mut at, mut switches, mut notices) = (0usize, 0, 0);
            while at < v.len() {
                let len = (1 + (rng.uniform() * 3000.0) as usize).min(v.len() - at);
                fast.feed(at as u64 + 5, &v[at..at + len]);
                reference.feed_every_sample(at as u64 + 5, &v[at..at + len]);
                assert_eq!(fast.settled(), reference.settled(), "seed {seed}, chunk at {at}");
                loop {
                    let (a, b) = (fast.pop_event(), reference.pop_event());
                    assert_eq!(a, b, "seed {seed}, chunk at {at}");
                    match a {
                        None => break,
                        Some(SwitchEvent::Switch { .. }) => switches += 1,
                        Some(SwitchEvent::Irregular { .. }) => notices += 1,
                        Some(SwitchEvent::Begin { .. } | SwitchEvent::Note { .. }) => {}
                    }
                }
                at += len;
            }
            // The staircase must exercise both paths: switches and irregularities.
            assert!(switches > 100 && notices > 5, "seed {seed}: {switches} switches, {notices} notices");
        }
    }
}
