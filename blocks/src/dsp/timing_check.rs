//! Cross-check of a switch schedule against the signal it labels.
//!
//! Every sample the schedule labels is folded onto its dwell phase, per lobe
//! label: its power, and the sync channel's value when the capture has one.
//! With the right schedule, each label's profile over the phase is flat
//! (a lobe's gain does not change inside its dwell). With the switches
//! scheduled `d` samples before the real ones, every label's profile steps
//! at phase `d`: the samples before it belong to the previous lobe. The
//! step's sign follows the target (which lobe is stronger), so the fold is
//! scored block by block and the scores add up; a block's score at a
//! candidate phase is the between-segment sum of squares of the labels'
//! profiles (the common profile, e.g. switch transients, taken out) over
//! the bin-to-bin noise. A sync channel also tells which lobe each label
//! really had (the i-th lobe has the i-th lowest level), which finds whole
//! dwells of offset that amplitudes cannot. See docs/derivations.md
//! ("Schedule cross-checks").

use super::event_period::line_fit;
use num_complex::Complex32;
use std::ops::Range;

/// Dwells of each lobe folded into one block before it is scored.
const BLOCK_CYCLES: i64 = 32;
/// Phase bins of the fold (fewer when a dwell is shorter).
const MAX_BINS: usize = 128;
/// Standard scores above this say the profiles step inside the dwell.
const STEP_SCORE: f64 = 12.0;
/// One block's best step score (per lobe past the first) that places its step for the drift check.
const BLOCK_STEP_SCORE: f64 = 40.0;
/// Steps that move less than this many fold bins over the run are no drift.
const DRIFT_BINS: f64 = 3.0;

/// What the check found.
#[derive(Clone, Debug, PartialEq)]
pub struct Finding {
    /// Samples from the scheduled switch to the observed one, in (-dwell/2, dwell/2].
    pub offset: f64,
    /// Whole dwells by which the labels are rotated (sync channel only).
    pub dwells: Option<i64>,
    /// The first_start (samples) that fits the signal.
    pub first_start: f64,
    /// A second first_start that fits as well (a half-dwell step without sync).
    pub alternative: Option<f64>,
    /// The dwell (samples) that fits when the steps drift against the schedule.
    pub drift_dwell: Option<f64>,
    /// Standard score of the step.
    pub score: f64,
}

/// One signal folded onto (label, phase bin).
#[derive(Clone)]
struct Fold {
    sum: Vec<f64>,
    count: Vec<u32>,
}

impl Fold {
    fn new(cells: usize) -> Fold {
        Fold { sum: vec![0.0; cells], count: vec![0; cells] }
    }
    fn clear(&mut self) {
        self.sum.fill(0.0);
        self.count.fill(0);
    }
    /// Per-cell means, or None when a cell is empty.
    fn means(&self) -> Option<Vec<f64>> {
        self.sum.iter().zip(&self.count).map(|(&s, &n)| (n > 0).then(|| s / n as f64)).collect()
    }
}

/// Folds the labelled samples and scores steps inside the dwells.
pub struct ScheduleCheck {
    lobes: usize,
    first_start: f64,
    dwell: f64,
    /// Phases before this (the guard after each switch) are left out, as the gate leaves them out.
    skip: f64,
    bins: usize,
    power: Fold,
    sync: Fold,
    /// Sync values over the whole run (the rotation check).
    sync_all: Fold,
    block: Option<i64>,
    /// Summed block scores per candidate step bin, and the blocks scored:
    /// [power, sync]. The sync channel, when there is one, decides alone
    /// (its steps are the switches themselves; power also follows the target).
    score: [Vec<f64>; 2],
    scored: [usize; 2],
    /// Per channel: (middle dwell of a block, step offset) of the blocks whose own step is clear.
    block_steps: [Vec<(f64, f64)>; 2],
}

impl ScheduleCheck {
    /// `first_start`, `dwell` and `guard` in samples, as the schedule uses them.
    pub fn new(lobes: usize, first_start: f64, dwell: f64, guard: f64) -> ScheduleCheck {
        let skip = guard.clamp(0.0, dwell / 2.0);
        let bins = ((dwell - skip).floor() as usize).clamp(4, MAX_BINS);
        let cells = lobes * bins;
        ScheduleCheck {
            lobes,
            first_start,
            dwell,
            skip,
            bins,
            power: Fold::new(cells),
            sync: Fold::new(cells),
            sync_all: Fold::new(cells),
            block: None,
            score: [vec![0.0; bins], vec![0.0; bins]],
            scored: [0, 0],
            block_steps: [Vec::new(), Vec::new()],
        }
    }

    /// Fold samples from `index` on.
    pub fn add(&mut self, index: u64, iq: &[Complex32], sync: Option<&[f32]>) {
        for (i, x) in iq.iter().enumerate() {
            let t = (index + i as u64) as f64 - self.first_start;
            let dwell = (t / self.dwell).floor();
            let phase = t - dwell * self.dwell;
            let dwell = dwell as i64;
            let lobe = dwell.rem_euclid(self.lobes as i64) as usize;
            self.fold(dwell, lobe, phase, x.norm_sqr(), sync.and_then(|s| s.get(i)).copied());
        }
    }

    /// Fold one sample: the `dwell`-th dwell, labelled `lobe`, `phase`
    /// samples after its (scheduled or observed) switch.
    pub fn fold(&mut self, dwell: i64, lobe: usize, phase: f64, power: f32, sync: Option<f32>) {
        let block = dwell.div_euclid(BLOCK_CYCLES * self.lobes as i64);
        if self.block != Some(block) {
            self.end_block();
            self.block = Some(block);
        }
        if phase < self.skip {
            return;
        }
        let bin = ((phase - self.skip) / self.bin_width()) as usize;
        let cell = lobe * self.bins + bin.min(self.bins - 1);
        self.power.sum[cell] += f64::from(power);
        self.power.count[cell] += 1;
        if let Some(s) = sync {
            for fold in [&mut self.sync, &mut self.sync_all] {
                fold.sum[cell] += f64::from(s);
                fold.count[cell] += 1;
            }
        }
    }

    /// Score the finished block's folds (a block with an empty cell is left out).
    fn end_block(&mut self) {
        for (channel, fold) in [&self.power, &self.sync].into_iter().enumerate() {
            if let Some(means) = fold.means()
                && let Some(score) = step_scores(&means, self.lobes, self.bins)
            {
                if let (Some(block), Some((bin, &best))) =
                    (self.block, score.iter().enumerate().skip(1).max_by(|a, b| a.1.total_cmp(b.1)))
                    && best > BLOCK_STEP_SCORE * (self.lobes - 1) as f64
                {
                    let middle = (block as f64 + 0.5) * (BLOCK_CYCLES * self.lobes as i64) as f64;
                    let offset = self.skip + bin as f64 * (self.dwell - self.skip) / self.bins as f64;
                    self.block_steps[channel].push((middle, offset));
                }
                self.score[channel].iter_mut().zip(score).for_each(|(a, b)| *a += b);
                self.scored[channel] += 1;
            }
        }
        self.power.clear();
        self.sync.clear();
    }

    /// The verdict over everything folded: None when the signal agrees with the schedule.
    pub fn finish(&mut self) -> Option<Finding> {
        self.end_block();
        if let Some(found) = self.drift() {
            return Some(found);
        }
        let step = self.step();
        let bin = self.bin_width();
        let (step_bin, score) = step.unwrap_or((0, 0.0));
        let mut offset = if step.is_some() { self.skip + step_bin as f64 * bin } else { 0.0 };
        // A step past half the dwell is taken as the real switch coming
        // early: the labels before the step are the right ones (one lobe
        // later than those after it), and they are the larger part.
        let late = offset > self.dwell / 2.0;
        if late {
            offset -= self.dwell;
        }
        let majority = match step {
            Some(_) if late => 0..step_bin,
            Some(_) => step_bin..self.bins,
            None => 0..self.bins,
        };
        let rotation = self.sync_all.means().and_then(|m| rotation(&m, self.lobes, self.bins, majority));
        let (dwells, alternative) = match rotation {
            // The sync channel says which lobe every part of the dwell had.
            Some(r) => (Some(r), None),
            None => {
                let half = (offset.abs() - self.dwell / 2.0).abs() <= bin;
                (None, half.then_some(self.first_start + offset - self.dwell.copysign(offset)))
            }
        };
        if step.is_none() && dwells.unwrap_or(0) == 0 {
            return None;
        }
        let whole = dwells.unwrap_or(0) as f64 * self.dwell;
        let first_start = self.first_start + offset - whole;
        Some(Finding { offset, dwells, first_start, alternative, score, drift_dwell: None })
    }

    /// The steps' offsets block by block, when they move along a line: the
    /// schedule's dwell is not the switch's. The offsets are unwrapped
    /// (a step leaving the dwell at one end comes back at the other) and a
    /// line through them gives the drift per dwell and the offset at dwell 0.
    fn drift(&self) -> Option<Finding> {
        let channel = if self.scored[1] > 0 { 1 } else { 0 };
        let steps = &self.block_steps[channel];
        if steps.len() < 3 {
            return None;
        }
        let mut unwrapped: Vec<(f64, f64)> = Vec::with_capacity(steps.len());
        for &(at, offset) in steps {
            let offset = match unwrapped.last() {
                Some(&(_, before)) => offset + ((before - offset) / self.dwell).round() * self.dwell,
                None => offset,
            };
            unwrapped.push((at, offset));
        }
        let line = line_fit(&unwrapped, self.bin_width())?;
        let span = unwrapped[unwrapped.len() - 1].0 - unwrapped[0].0;
        let moved = line.slope * span;
        if moved.abs() < DRIFT_BINS * self.bin_width() || line.slope.abs() < 4.0 * line.slope_se {
            return None;
        }
        let offset = line.intercept.rem_euclid(self.dwell);
        let offset = if offset > self.dwell / 2.0 { offset - self.dwell } else { offset };
        Some(Finding {
            offset,
            dwells: None,
            first_start: self.first_start + offset,
            alternative: None,
            score: line.slope.abs() / line.slope_se.max(1e-12),
            drift_dwell: Some(self.dwell + line.slope),
        })
    }

    /// The schedule's dwell, in samples.
    pub fn dwell(&self) -> f64 {
        self.dwell
    }

    /// Samples per phase bin of the fold.
    pub fn bin_width(&self) -> f64 {
        (self.dwell - self.skip) / self.bins as f64
    }

    /// The bin where the labels' profiles step, with its standard score, when significant.
    fn step(&self) -> Option<(usize, f64)> {
        let channel = if self.scored[1] > 0 { 1 } else { 0 };
        if self.scored[channel] == 0 {
            return None;
        }
        // Each block's score is about chi-square with lobes-1 degrees of freedom without a step.
        let dof = (self.lobes - 1) as f64 * self.scored[channel] as f64;
        let (bin, best) = self.score[channel].iter().enumerate().skip(1).max_by(|a, b| a.1.total_cmp(b.1))?;
        let z = (best - dof) / (2.0 * dof).sqrt();
        (z > STEP_SCORE).then_some((bin, z))
    }
}

/// Per candidate bin `d` (1..bins), how much of the labels' profiles a
/// step at `d` explains beyond a straight line (a gain drifting across the
/// dwell, from a fading or moving target, is no step), over the bin-to-bin
/// noise; index 0 stays 0.
fn step_scores(means: &[f64], lobes: usize, bins: usize) -> Option<Vec<f64>> {
    // Take out the profile common to all labels (transients, leakage).
    let common: Vec<f64> =
        (0..bins).map(|b| (0..lobes).map(|l| means[l * bins + b]).sum::<f64>() / lobes as f64).collect();
    let n = bins as f64;
    let mid = (n - 1.0) / 2.0;
    let sxx: f64 = (0..bins).map(|b| (b as f64 - mid).powi(2)).sum();
    let mut scores = vec![0.0; bins];
    for l in 0..lobes {
        let r: Vec<f64> = detrend((0..bins).map(|b| means[l * bins + b] - common[b]).collect());
        // Noise of one bin from successive differences (one step adds one large term only).
        let mut diffs: Vec<f64> = r.windows(2).map(|w| (w[1] - w[0]).powi(2)).collect();
        diffs.sort_by(f64::total_cmp);
        let noise = diffs[..diffs.len() - 1].iter().sum::<f64>() / (2.0 * (diffs.len() - 1).max(1) as f64);
        if !noise.is_finite() {
            return None;
        }
        // A noiseless channel (a clean sync staircase) still scores a step.
        let noise = noise.max(1e-12);
        // The step indicator s_d (1 from bin d on) less its own line: r is
        // already free of its line, so <r, s_d> is the tail sum of r.
        let (mut tail, mut tail_x) = (0.0, 0.0);
        for d in (1..bins).rev() {
            tail += r[d];
            tail_x += d as f64 - mid;
            let k = (bins - d) as f64;
            let norm = k - k * k / n - tail_x * tail_x / sxx;
            if norm > 1e-9 {
                scores[d] += tail * tail / norm / noise;
            }
        }
    }
    Some(scores)
}

/// The profile less its least-squares line: a gain that drifts across the
/// dwell (a fading or moving target) is no step.
fn detrend(mut r: Vec<f64>) -> Vec<f64> {
    let n = r.len() as f64;
    let mid = (n - 1.0) / 2.0;
    let mean = r.iter().sum::<f64>() / n;
    let (mut sxy, mut sxx) = (0.0, 0.0);
    for (i, v) in r.iter().enumerate() {
        let x = i as f64 - mid;
        sxy += x * (v - mean);
        sxx += x * x;
    }
    let slope = sxy / sxx;
    r.iter_mut().enumerate().for_each(|(i, v)| *v -= mean + slope * (i as f64 - mid));
    r
}

/// Whole dwells by which the labels are rotated, from the sync channel: in
/// the bins `within` (one side of the step) label `l` should have the `l`-th
/// lowest level. None when the levels do not sort into a rotation.
fn rotation(means: &[f64], lobes: usize, bins: usize, within: Range<usize>) -> Option<i64> {
    let width = within.len().max(1) as f64;
    let level = |l: usize| within.clone().map(|b| means[l * bins + b]).sum::<f64>() / width;
    let levels: Vec<f64> = (0..lobes).map(level).collect();
    let mut order: Vec<usize> = (0..lobes).collect();
    order.sort_by(|&a, &b| levels[a].total_cmp(&levels[b]));
    // order[j]: the label that had lobe j; label l had lobe l + r.
    let r = (lobes - order[0]) % lobes;
    let consistent = order.iter().enumerate().all(|(j, &l)| (l + r) % lobes == j);
    let r = r as i64;
    consistent.then_some(if r > lobes as i64 / 2 { r - lobes as i64 } else { r })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Two lobes whose powers differ; the real switches `offset` samples after the scheduled ones.
    fn run(offset: i64, sync: bool, dwells_off: i64) -> Option<Finding> {
        run_at(100.0, offset, sync, dwells_off)
    }

    /// As `run`, with the real switch's dwell `real` samples against the schedule's 100.
    fn run_at(real: f64, offset: i64, sync: bool, dwells_off: i64) -> Option<Finding> {
        let (dwell, first) = (100i64, 30i64);
        let mut check = ScheduleCheck::new(2, first as f64, dwell as f64, 5.0);
        let real_first = first + offset + dwells_off * dwell;
        let mut seed = 7u64;
        let iq: Vec<Complex32> = (0..200_000i64)
            .map(|n| {
                seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
                let noise = ((seed >> 33) as f32 / (1u64 << 31) as f32 - 0.5) * 2.0;
                let lobe = ((n - real_first) as f64 / real).floor().rem_euclid(2.0) as i64;
                let slow = if (n / 20_000) % 2 == 0 { 1.0 } else { -1.0 };
                Complex32::new(1.0 + 0.2 * slow * (lobe as f32 - 0.5) + noise, 0.0)
            })
            .collect();
        let levels: Vec<f32> = (0..200_000i64)
            .map(|n| 0.2 + 0.5 * ((n - real_first) as f64 / real).floor().rem_euclid(2.0) as f32)
            .collect();
        check.add(0, &iq, sync.then_some(&levels[..]));
        check.finish()
    }

    #[test]
    fn a_right_schedule_finds_nothing() {
        assert_eq!(run(0, false, 0), None);
        assert_eq!(run(0, true, 0), None);
    }

    #[test]
    fn a_quarter_dwell_late_schedule_is_found_with_its_correction() {
        let f = run(-25, false, 0).expect("found");
        assert!((f.offset + 25.0).abs() <= 1.0 && (f.first_start - 5.0).abs() <= 1.0, "{f:?}");
        let f = run(25, true, 0).expect("found");
        assert!((f.first_start - 55.0).abs() <= 1.0 && f.dwells == Some(0), "{f:?}");
    }

    #[test]
    fn a_whole_dwell_needs_the_sync_channel() {
        assert_eq!(run(0, false, 1), None);
        let f = run(0, true, 1).expect("found");
        assert!((f.first_start - 130.0).abs() <= 1.0 || (f.first_start + 70.0).abs() <= 1.0, "{f:?}");
    }

    #[test]
    fn a_schedule_whose_dwell_is_off_is_named_with_the_dwell_that_fits() {
        // 0.05 % long: the switches move 100 samples (a dwell) over the run
        let f = run_at(100.05, 0, false, 0).expect("found");
        let dwell = f.drift_dwell.expect("drift");
        assert!((dwell - 100.05).abs() <= 0.01, "{f:?}");
        assert_eq!(run_at(100.0, 0, false, 0), None);
        let f = run_at(99.97, 0, true, 0).expect("found");
        assert!((f.drift_dwell.expect("drift") - 99.97).abs() <= 0.01, "{f:?}");
    }
}
