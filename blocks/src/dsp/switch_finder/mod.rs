//! Switch instants found in the signal itself, for rigs with neither a sync
//! channel nor a known schedule. Shared by the gate blocks; no block code.
//!
//! The samples are summed into cells (fixed runs of samples, or one sweep
//! each): their energy and their largest sample power. A switch shows as a
//! step of the energy between the dwells on either side (the lobes' gains
//! differ) and as a transient (the switch's own spike). Per cell, the
//! standardised size of the step across it plus the standardised log peak
//! is large at each switch. Acquisition finds the train's period and phase
//! in the first stretch (the autocorrelation's fundamental, then a line
//! through the located events, as `inspect` does: [`super::event_period`]);
//! tracking then looks for each switch near its predicted instant and
//! corrects the phase and dwell by an alpha-beta step, coasting over
//! switches it does not see. Which lobe a dwell belongs to cannot be told
//! from the steps: it is given as one lobe known to be active at one
//! instant. Derivation and limits in docs/derivations.md ("Switch timing
//! from the signal").

mod acquisition;
mod cells;

use super::switch_sync::{Irregularity, SwitchEvent};
use acquisition::{DETECT_SD, MIN_DWELLS, acquire};
use cells::{Cell, Feature, locate, reach};
use std::collections::VecDeque;
use std::sync::Arc;

/// While tracking, a switch must also reach this share of the acquired
/// switches' typical height: noise alone passes four deviations somewhere
/// in a window now and then, and would reset the coasting count.
const TRACK_SHARE: f64 = 0.6;
/// While coasting, a switch must stand this much higher again to count.
const REGAIN: f64 = 1.4;
/// Alpha-beta gains of the phase and dwell corrections (a few dwells of memory).
const ALPHA: f64 = 0.15;
const BETA: f64 = 0.01;
/// Cells by which a switch in a run of samples is said early (about the
/// spread of the located switches).
const EARLY_CELLS: f64 = 2.0;
/// Switches missed in a row before the timeline says the finder is coasting.
const COAST_NOTE: u64 = 8;

/// Which lobe is active at one sample (from a capture's lobe labels or a user's statement).
#[derive(Clone, Debug, PartialEq)]
pub struct KnownLobe {
    /// Position of the lobe in the switch order.
    pub lobe: usize,
    /// Sample index at which it is active.
    pub at: f64,
    /// Where this came from, for the notices.
    pub source: String,
}

/// Settings of the finder, in samples.
#[derive(Clone, Debug)]
pub struct FinderSettings {
    pub names: Vec<Arc<str>>,
    /// Samples looked at before the first switch is decided.
    pub acquire: usize,
    /// Samples per cell; 0 makes every fed piece one cell (sweeps).
    pub cell: usize,
    pub known: KnownLobe,
}

/// What acquisition found, in samples.
#[derive(Clone, Debug, PartialEq)]
pub struct Acquired {
    pub dwell: f64,
    /// Four standard errors of the dwell.
    pub dwell_within: f64,
    /// A switch instant (the first found).
    pub switch_at: f64,
    /// Four standard errors of the switch instant, plus one cell.
    pub switch_within: f64,
    /// Switch instants the line went through.
    pub events: usize,
    /// The step window chosen, in cells.
    pub step_cells: usize,
    /// Significance of the train (autocorrelation peak over its noise).
    pub significance: f64,
    /// Samples from one cell's start to the next.
    pub spacing: f64,
    /// The located switches' median height over their windows (feature units).
    pub height: f64,
}

/// Tracking state after acquisition.
struct Track {
    feature: Feature,
    /// Predicted next switch instant and the dwell, in samples.
    next: f64,
    dwell: f64,
    /// Number of the next switch (dwell `k` belongs to lobe `(k + lobe_shift) mod N`).
    k: i64,
    lobe_shift: i64,
    missed: u64,
    /// Four standard errors of the acquired dwell (how fast a coasted phase strays).
    dwell_within: f64,
    /// Whether the loss was said (until a switch is seen again).
    lost: bool,
    /// Cells kept for the windows still to be judged.
    cells: VecDeque<Cell>,
    /// Samples from one cell's start to the next.
    spacing: f64,
    /// Least peak height that counts as a switch while tracking.
    threshold: f64,
}

enum Stage {
    Acquiring(Vec<Cell>),
    Tracking(Box<Track>),
}

/// Switch instants from amplitude steps and transients; see the module doc.
pub struct SwitchFinder {
    settings: FinderSettings,
    stage: Stage,
    /// The cell being summed (fixed-size cells).
    open: Option<Cell>,
    started: bool,
    next_index: u64,
    acquired: Option<Acquired>,
    events: VecDeque<SwitchEvent>,
    /// Switches seen since tracking began.
    seen: usize,
}

impl SwitchFinder {
    pub fn new(settings: FinderSettings) -> SwitchFinder {
        SwitchFinder {
            settings,
            stage: Stage::Acquiring(Vec::new()),
            open: None,
            started: false,
            next_index: 0,
            acquired: None,
            events: VecDeque::new(),
            seen: 0,
        }
    }

    pub fn acquiring(&self) -> bool {
        matches!(self.stage, Stage::Acquiring(_))
    }

    /// What acquisition found.
    pub fn acquired(&self) -> Option<&Acquired> {
        self.acquired.as_ref()
    }

    /// Switches seen (not coasted over) since tracking began.
    pub fn seen(&self) -> usize {
        self.seen
    }

    /// Cells of the samples `[index, index + powers.len())`.
    fn cells_of(&mut self, index: u64, powers: impl Iterator<Item = f64>, out: &mut Vec<Cell>) {
        let size = self.settings.cell as u64;
        if size == 0 {
            let mut cell = Cell { start: index, count: 0, energy: 0.0, peak: 0.0 };
            for p in powers {
                cell.count += 1;
                cell.energy += p;
                cell.peak = cell.peak.max(p);
            }
            if cell.count > 0 {
                out.push(cell);
            }
            return;
        }
        for (n, p) in (index..).zip(powers) {
            let start = n - n % size;
            let cell = match &mut self.open {
                Some(c) if c.start == start => c,
                open => {
                    if let Some(done) = open.take() {
                        out.push(done);
                    }
                    open.insert(Cell { start, count: 0, energy: 0.0, peak: 0.0 })
                }
            };
            cell.count += 1;
            cell.energy += p;
            cell.peak = cell.peak.max(p);
        }
        if self.open.is_some_and(|c| u64::from(c.count) == size) {
            out.extend(self.open.take());
        }
    }

    /// Collect samples for acquisition; true once enough are in.
    pub fn acquire_from(&mut self, index: u64, powers: impl Iterator<Item = f64>) -> bool {
        let mut fresh = Vec::new();
        self.cells_of(index, powers, &mut fresh);
        if let Stage::Acquiring(cells) = &mut self.stage {
            cells.extend(fresh);
            let span = cells.last().map_or(0, |c| c.start + u64::from(c.count)) - cells.first().map_or(0, |c| c.start);
            span >= self.settings.acquire as u64
        } else {
            true
        }
    }

    /// Fit the switch train to what was collected and start tracking at
    /// `first` (the first sample); returns what was found, for the person
    /// running it (times at `rate`).
    pub fn end_acquisition(&mut self, first: u64, rate: f64) -> Result<String, String> {
        let Stage::Acquiring(cells) = &mut self.stage else {
            return Err("the switch finder has already acquired its switch train".into());
        };
        cells.extend(self.open.take());
        let Some((found, feature)) = acquire(cells, self.settings.cell == 0) else {
            let seen = cells.last().map_or(0, |c| c.start + u64::from(c.count)) - cells.first().map_or(0, |c| c.start);
            return Err(format!(
                "timing 'signal' found no regular switch train (amplitude steps or switch transients) in the first \
                 {} ms; lengthen 'learn' to hold at least {MIN_DWELLS} dwells, or give the schedule (timing: schedule)",
                seen as f64 / rate * 1e3
            ));
        };
        let known = &self.settings.known;
        let lobes = self.settings.names.len() as i64;
        let dwell_of = |at: f64| ((at - found.switch_at) / found.dwell).floor() as i64;
        let lobe_shift = (known.lobe as i64 - dwell_of(known.at)).rem_euclid(lobes);
        let k = dwell_of(first as f64) + 1;
        let next = found.switch_at + k as f64 * found.dwell;
        let ms = |samples: f64| samples / rate * 1e3;
        let said = format!(
            "switch train found in the signal: dwell {:.5} ms ± {:.5} ms, a switch at {:.4} ms ± {:.4} ms \
             (line through {} switches; 4 standard errors, plus a cell for the instant); lobe {} active at {:.4} ms ({})",
            ms(found.dwell),
            ms(found.dwell_within),
            ms(found.switch_at),
            ms(found.switch_within),
            found.events,
            self.settings.names[known.lobe],
            ms(known.at),
            known.source
        );
        self.stage = Stage::Tracking(Box::new(Track {
            feature,
            next,
            dwell: found.dwell,
            k,
            lobe_shift,
            missed: 0,
            dwell_within: found.dwell_within.max(1e-6),
            lost: false,
            cells: VecDeque::new(),
            spacing: found.spacing,
            threshold: DETECT_SD.max(TRACK_SHARE * found.height),
        }));
        self.acquired = Some(found);
        Ok(said)
    }

    /// Feed the samples from `index` on (each sample's power); samples already seen are skipped.
    pub fn feed(&mut self, index: u64, powers: impl ExactSizeIterator<Item = f64>) {
        let len = powers.len() as u64;
        let skip = self.next_index.saturating_sub(index).min(len);
        if skip == len {
            return;
        }
        let index = index + skip;
        self.next_index = index + (len - skip);
        let mut fresh = Vec::new();
        self.cells_of(index, powers.skip(skip as usize), &mut fresh);
        let lobes = self.settings.names.len() as i64;
        let Stage::Tracking(track) = &mut self.stage else { return };
        if !self.started {
            self.started = true;
            let switch_at = track.next - track.dwell;
            let lobe = (track.k - 1 + track.lobe_shift).rem_euclid(lobes) as usize;
            self.events.push_back(SwitchEvent::Begin { at: index, lobe, switch_at: Some(switch_at.ceil() as i64) });
        }
        track.cells.extend(fresh);
        while track.judge_next(lobes, &mut self.seen, &mut self.events) {}
    }

    /// Every sample before this index has its lobe decided.
    pub fn settled(&self, fed_end: u64) -> u64 {
        match &self.stage {
            Stage::Tracking(t) => (t.next - t.reach()).floor().max(0.0).min(fed_end as f64) as u64,
            Stage::Acquiring(_) => 0,
        }
    }

    /// At the end of the stream: the switches still pending are placed where predicted.
    pub fn finish(&mut self, end: u64) {
        let lobes = self.settings.names.len() as i64;
        if let Stage::Tracking(t) = &mut self.stage {
            while t.next < end as f64 {
                let at = t.next.ceil() as u64;
                let lobe = (t.k + t.lobe_shift).rem_euclid(lobes) as usize;
                self.events.push_back(SwitchEvent::Switch { at, lobe });
                t.next += t.dwell;
                t.k += 1;
            }
        }
    }

    pub fn pop_event(&mut self) -> Option<SwitchEvent> {
        self.events.pop_front()
    }

    /// The dwell being tracked now, in samples.
    pub fn dwell(&self) -> Option<f64> {
        match &self.stage {
            Stage::Tracking(t) => Some(t.dwell),
            Stage::Acquiring(_) => None,
        }
    }
}

impl Track {
    fn reach(&self) -> f64 {
        reach(self.dwell, self.spacing)
    }

    /// Judge the next predicted switch once the cells around it are in;
    /// false when they are not in yet.
    fn judge_next(&mut self, lobes: i64, seen: &mut usize, events: &mut VecDeque<SwitchEvent>) -> bool {
        let margin = self.reach() + (self.feature.cells + 1) as f64 * self.spacing;
        let Some(last) = self.cells.back() else { return false };
        if ((last.start + u64::from(last.count)) as f64) < self.next + margin {
            return false;
        }
        // drop what no window will need again
        while self.cells.front().is_some_and(|c| (c.start as f64) < self.next - margin) {
            self.cells.pop_front();
        }
        let half = self.reach();
        let (lo, hi) = (self.next - half, self.next + half);
        let feature = self.feature;
        let cells = self.cells.make_contiguous();
        let window: Vec<(usize, f64)> = (0..cells.len())
            .filter(|&j| (lo..=hi).contains(&(cells[j].start as f64)))
            .map(|j| (j, feature.at(cells, j)))
            .collect();
        // after a run of misses a chance peak in the noise must not pass for the train
        let threshold = if self.missed >= COAST_NOTE { self.threshold * REGAIN } else { self.threshold };
        let at = match locate(cells, &window, feature.whole_cells, threshold) {
            Some((observed, _)) => {
                let error = (observed - self.next).clamp(-half, half);
                self.dwell += BETA * error;
                if self.missed >= COAST_NOTE {
                    let what = format!("switch train seen again after {} dwells without a switch", self.missed);
                    events.push_back(SwitchEvent::Note { at: observed.max(0.0) as u64, what });
                }
                self.missed = 0;
                self.lost = false;
                *seen += 1;
                self.next + ALPHA * error
            }
            None => {
                self.missed += 1;
                self.next
            }
        };
        let lobe = (self.k + self.lobe_shift).rem_euclid(lobes) as usize;
        let here = if feature.whole_cells {
            // a sweep switches at its start: the nearest one
            let nearest =
                cells.iter().min_by(|a, b| (a.start as f64 - at).abs().total_cmp(&(b.start as f64 - at).abs()));
            nearest.map_or(at.ceil().max(0.0) as u64, |c| c.start)
        } else {
            // early rather than late: a switch said late puts the new lobe's
            // first samples and its transient into the old dwell, a switch said
            // early only moves them into the guard
            let margin = (EARLY_CELLS * self.spacing).min((1.0 - ALPHA) * half);
            (at - margin).ceil().max(0.0) as u64
        };
        events.push_back(SwitchEvent::Switch { at: here, lobe });
        if self.missed == COAST_NOTE {
            // the timeline shows it; no warning: a target on the boresight hides the steps
            let what = format!("no switch seen for {COAST_NOTE} dwells: following the tracked dwell");
            events.push_back(SwitchEvent::Note { at: here, what });
        }
        // coasting, the phase may stray by the dwell's error once per dwell
        if !self.lost && self.missed as f64 * self.dwell_within > self.dwell / 8.0 {
            self.lost = true;
            let what = format!(
                "lost the switch train: no switch seen for {} dwells, so the switch instants may be off by more than \
                 an eighth of a dwell ({} samples) from here on",
                self.missed,
                (self.dwell / 8.0).round()
            );
            events.push_back(SwitchEvent::Irregular { at: here, kind: Irregularity::LockLost, what });
        }
        self.next = at + self.dwell;
        self.k += 1;
        true
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::rng::Rng;

    fn names() -> Vec<Arc<str>> {
        vec![Arc::from("left"), Arc::from("right")]
    }

    /// Power of a two-lobe signal: lobe gains 1.0 and 1.6 over unit noise,
    /// a dwell of `dwell` samples from `first`, a 6-sample transient at each
    /// switch except those in `hidden`, and a stray transient at `extra`.
    fn powers(n: usize, dwell: f64, first: f64, seed: u64, hidden: &[i64], extra: usize) -> Vec<f64> {
        let mut rng = Rng::new(seed);
        let mut p: Vec<f64> = (0..n)
            .map(|i| {
                let k = ((i as f64 - first) / dwell).floor() as i64;
                let gain = if k.rem_euclid(2) == 0 { 1.0 } else { 1.6 };
                let (re, im) = (gain + rng.gaussian() * 0.7, rng.gaussian() * 0.7);
                re * re + im * im
            })
            .collect();
        let mut k = ((0.0 - first) / dwell).ceil() as i64;
        while first + k as f64 * dwell < n as f64 - 6.0 {
            let at = (first + k as f64 * dwell).ceil() as usize;
            if !hidden.contains(&k) {
                p[at..at + 6].iter_mut().for_each(|v| *v += 25.0);
            }
            k += 1;
        }
        p[extra..extra + 6].iter_mut().for_each(|v| *v += 25.0);
        p
    }

    fn finder(known_at: f64) -> SwitchFinder {
        SwitchFinder::new(FinderSettings {
            names: names(),
            acquire: 40_000,
            cell: 4,
            known: KnownLobe { lobe: 0, at: known_at, source: "test".into() },
        })
    }

    #[test]
    fn finds_dwell_and_phase_and_follows_through_missed_and_extra_switches() {
        let (dwell, first) = (160.4, 57.3);
        let p = powers(200_000, dwell, first, 5, &[300, 301, 302, 500], 100_000 + 80);
        let mut f = finder(first + 10.0);
        assert!(f.acquire_from(0, p[..50_000].iter().copied()));
        f.end_acquisition(0, 64e3).unwrap();
        let found = f.acquired().unwrap().clone();
        assert!((found.dwell - dwell).abs() <= found.dwell_within.max(0.05), "{found:?}");
        let phase = (found.switch_at - first).rem_euclid(dwell);
        let phase = phase.min(dwell - phase);
        assert!(phase <= found.switch_within, "{found:?}");
        for chunk in (0..p.len()).step_by(7_000) {
            f.feed(chunk as u64, p[chunk..(chunk + 7_000).min(p.len())].iter().copied());
        }
        f.finish(p.len() as u64);
        let events: Vec<SwitchEvent> = std::iter::from_fn(|| f.pop_event()).collect();
        let SwitchEvent::Begin { at: 0, lobe: 1, switch_at: Some(before) } = events[0] else {
            panic!("{:?}", events[0])
        };
        assert!((before as f64 - (first - dwell)).abs() <= 4.0, "{before}");
        let mut switches = 0;
        let mut errs = Vec::new();
        for e in &events {
            if let SwitchEvent::Switch { at, lobe } = e {
                let k = ((*at as f64 - first) / dwell).round();
                errs.push(*at as f64 - (first + k * dwell));
                assert_eq!(*lobe as i64, (k as i64).rem_euclid(2), "{e:?}");
                switches += 1;
            }
            assert!(!matches!(e, SwitchEvent::Irregular { .. }), "{e:?}");
        }
        // said early rather than late (by two cells, 8 samples), and good to a cell about that
        let (earliest, latest) = errs.iter().fold((f64::MAX, f64::MIN), |a, &e| (a.0.min(e), a.1.max(e)));
        assert!(earliest >= -12.0 && latest <= 2.0, "from {earliest} to {latest}: {errs:?}");
        assert_eq!(switches, ((200_000.0 - first) / dwell).floor() as usize + 1);
        assert!(f.seen() > switches - 10);
    }

    #[test]
    fn noise_alone_is_no_switch_train() {
        let mut rng = Rng::new(9);
        let p: Vec<f64> = (0..50_000).map(|_| rng.gaussian().powi(2) + rng.gaussian().powi(2)).collect();
        let mut f = finder(0.0);
        f.acquire_from(0, p.iter().copied());
        let e = f.end_acquisition(0, 64e3).unwrap_err();
        assert!(e.contains("no regular switch train") && e.contains("'learn'"), "{e}");
    }

    #[test]
    fn a_train_that_fades_out_is_coasted_then_said_lost_and_found_again() {
        let (dwell, first) = (160.4, 57.3);
        let mut p = powers(600_000, dwell, first, 7, &[], 100);
        // switches hidden from 100k to 500k samples: the target on the
        // boresight (both lobes alike), no transients
        let mut rng = Rng::new(8);
        p[100_000..500_000].iter_mut().for_each(|v| {
            let (re, im) = (1.3 + 0.7 * rng.gaussian(), 0.7 * rng.gaussian());
            *v = re * re + im * im;
        });
        let mut f = finder(first + 10.0);
        // a short acquisition: a dwell good to a few hundredths of a sample,
        // so 2500 dwells of coasting may stray past an eighth of a dwell
        f.acquire_from(0, p[..20_000].iter().copied());
        f.end_acquisition(0, 64e3).unwrap();
        let within = f.acquired().unwrap().dwell_within;
        assert!(within * 2500.0 > dwell / 8.0, "{within}");
        for chunk in (0..p.len()).step_by(10_000) {
            f.feed(chunk as u64, p[chunk..chunk + 10_000].iter().copied());
        }
        let events: Vec<SwitchEvent> = std::iter::from_fn(|| f.pop_event()).collect();
        let at = |want: &str| -> Vec<u64> {
            events
                .iter()
                .filter_map(|e| match e {
                    SwitchEvent::Note { at, what } | SwitchEvent::Irregular { at, what, .. } if what.contains(want) => {
                        Some(*at)
                    }
                    _ => None,
                })
                .collect()
        };
        // (noise alone passes the threshold now and then in the gap, so the
        // coasting count may start over a few times)
        let coasting = at("following the tracked dwell");
        assert!(!coasting.is_empty() && coasting.iter().all(|&c| c > 100_000 && c < 500_000), "{coasting:?}");
        let lost = at("lost the switch train");
        assert!(lost.len() == 1 && lost[0] > coasting[0] && lost[0] < 500_000, "{lost:?}");
        let again = at("switch train seen again");
        assert!(again.iter().any(|&a| (500_000..501_000).contains(&a)), "{again:?}");
        let warnings = events.iter().filter(|e| matches!(e, SwitchEvent::Irregular { .. })).count();
        assert_eq!(warnings, 1, "the loss is the only warning");
    }
}
