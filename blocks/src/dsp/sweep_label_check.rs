//! Cross-check of a sync channel's lobe labels against the echoes, sweep by
//! sweep (sync timing on pulsed captures).
//!
//! Each sweep gets one number, its mean power over the range window, and a
//! place: its label (from the sync channel) and its position in the dwell
//! (sweeps since the sync switch). A lobe's gain holds over its dwell, so
//! with the right labels a label's means are the same at every position.
//! When the sync edges lag the real switches by `m` sweeps, the last `m`
//! positions of every label hold the next lobe: the label's means step
//! between positions `P - m - 1` and `P - m`; when they lead, the first
//! positions hold the previous lobe. The profile common to all labels
//! (a transient in a fixed sweep) is taken out, and each candidate step is
//! scored against the sweep-to-sweep spread, per block of 32 lobe cycles (the
//! step's sign follows the target; its square does not). See
//! docs/derivations.md ("Schedule cross-checks").

/// Dwells of each lobe per scored block.
const BLOCK_CYCLES: usize = 32;
/// Dwells measured before the positions per dwell are set.
const FIRST_DWELLS: usize = 8;
/// Sweeps each (label, position) needs in a block for its spread to be trusted.
const MIN_SWEEPS: f64 = 8.0;
/// Standard score above which a step is reported.
const STEP_SCORE: f64 = 12.0;

use super::wide_vectors::wide_vectors;
use num_complex::Complex32;

wide_vectors! {
/// `iq.iter().map(|z| f64::from(z.norm_sqr())).sum::<f64>()`, the window
/// power the check has always taken (added in order), to the last bit, but
/// added in lanes when that cannot change it: every power is a whole
/// multiple of the finest float32 step among them, so while the total stays
/// below 2^53 of those steps every partial sum in any order is exact. That
/// holds unless the total is over about 2^28 times the smallest non-zero
/// power; then the powers are added in order. Every sweep's window passes here.
pub fn window_power_sum(iq: &[Complex32]) -> f64 {
    let in_order = || iq.iter().map(|z| f64::from(z.norm_sqr())).sum::<f64>();
    if iq.is_empty() {
        return in_order();
    }
    // Sixteen lanes: four vectors of four float64, so the adds do not wait
    // on each other.
    const LANES: usize = 16;
    let (groups, rest) = iq.as_chunks::<LANES>();
    let mut lanes = [0f64; LANES];
    // The smallest non-zero power, as its bits less one in integer order:
    // powers are +0, positive or NaN, and positive float32 order as their
    // bits, so +0 wraps to the top and is never the least. The running
    // minimum is the loop's critical path: an integer minimum is one
    // instruction where a float compare, an and and a blend were three.
    let mut low_less_one = [u32::MAX; LANES];
    for group in groups {
        for k in 0..LANES {
            let p = group[k].norm_sqr();
            lanes[k] += f64::from(p);
            low_less_one[k] = low_less_one[k].min(p.to_bits().wrapping_sub(1));
        }
    }
    for z in rest {
        let p = z.norm_sqr();
        lanes[0] += f64::from(p);
        low_less_one[0] = low_less_one[0].min(p.to_bits().wrapping_sub(1));
    }
    let sum = lanes.iter().sum::<f64>();
    let low = match low_less_one.iter().min().copied() {
        // The least is infinite or NaN: then so is the sum, which is taken in order.
        Some(m) if m < f32::INFINITY.to_bits() - 1 => f32::from_bits(m + 1),
        _ => f32::INFINITY,
    };
    if low == f32::INFINITY {
        // No power above zero: zero, or some power is not finite.
        return if sum == 0.0 { sum } else { in_order() };
    }
    // Every power is a whole multiple of `step`, the float32 step at the
    // smallest one's exponent (biased exponent field `e`: 2^(max(e, 1) - 150)).
    let e = ((low.to_bits() >> 23) as i64).max(1);
    // Summed in any order, `sum` is within gamma(len - 1) < 1/2 of the exact
    // total, relatively (Higham, Accuracy and Stability of Numerical
    // Algorithms, 2nd ed., sec. 4.2; from memory): at most 2^52 steps here
    // keeps the exact total, and so every partial sum, below 2^53 steps.
    let limit = f64::from_bits(((e - 150 + 52 + 1023) as u64) << 52);
    if sum.is_finite() && sum <= limit { sum } else { in_order() }
}
}

/// What the check found.
#[derive(Clone, Debug, PartialEq)]
pub struct SweepStep {
    /// Sweeps by which the signal's switches come after (+) or before (-) the sync edges.
    pub sweeps: i64,
    pub score: f64,
}

#[derive(Clone, Copy, Default)]
struct Moments {
    n: f64,
    sum: f64,
    squares: f64,
}

/// Folds labelled sweeps and scores steps inside the dwells.
pub struct SweepLabelCheck {
    lobes: usize,
    /// Sweeps per dwell, once measured.
    positions: Option<usize>,
    counts: Vec<usize>,
    /// (label, position) of the sweep being placed, and the current dwell's count.
    current: Option<(usize, usize)>,
    dwells: usize,
    cells: Vec<Moments>,
    /// Summed scores per candidate step position (1..P), and the blocks scored.
    score: Vec<f64>,
    scored: usize,
    /// Sweeps seen before the positions are known: (label, position, power).
    early: Vec<(usize, usize, f64)>,
}

impl SweepLabelCheck {
    pub fn new(lobes: usize) -> SweepLabelCheck {
        SweepLabelCheck {
            lobes,
            positions: None,
            counts: Vec::new(),
            current: None,
            dwells: 0,
            cells: Vec::new(),
            score: Vec::new(),
            scored: 0,
            early: Vec::new(),
        }
    }

    /// A new dwell of `lobe` begins (a sync switch before this sweep's window).
    pub fn switch(&mut self, lobe: usize) {
        if let Some((_, count)) = self.current
            && self.counts.len() < FIRST_DWELLS
        {
            self.counts.push(count);
        }
        self.current = Some((lobe, 0));
        self.dwells += 1;
        if self.positions.is_some() && self.dwells.is_multiple_of(BLOCK_CYCLES * self.lobes) {
            self.end_block();
        }
    }

    /// One sweep of the dwell in force, its mean power over the range window.
    pub fn sweep(&mut self, power: f64) {
        let Some((lobe, position)) = self.current else { return };
        self.current = Some((lobe, position + 1));
        if self.dwells < 2 {
            return; // the first dwell began before the capture
        }
        match self.positions {
            Some(p) => self.add(lobe, position, power, p),
            None => {
                self.early.push((lobe, position, power));
                if self.counts.len() >= FIRST_DWELLS {
                    let mut c = self.counts[1..].to_vec();
                    c.sort_unstable();
                    let p = c[c.len() / 2];
                    if p < 2 {
                        self.early.clear();
                        return;
                    }
                    self.positions = Some(p);
                    self.cells = vec![Moments::default(); self.lobes * p];
                    self.score = vec![0.0; p];
                    for (l, q, v) in std::mem::take(&mut self.early) {
                        self.add(l, q, v, p);
                    }
                }
            }
        }
    }

    fn add(&mut self, lobe: usize, position: usize, power: f64, p: usize) {
        if position >= p || !power.is_finite() {
            return; // an irregular dwell
        }
        let m = &mut self.cells[lobe * p + position];
        m.n += 1.0;
        m.sum += power;
        m.squares += power * power;
    }

    /// Score the block: per label, the difference of the residual means on
    /// either side of each candidate step over its standard error.
    fn end_block(&mut self) {
        let Some(p) = self.positions else { return };
        let cells = std::mem::replace(&mut self.cells, vec![Moments::default(); self.lobes * p]);
        // a spread from a few sweeps can be small by chance (the last, short block)
        if cells.iter().any(|m| m.n < MIN_SWEEPS) {
            return;
        }
        let mean = |m: &Moments| m.sum / m.n;
        let var = |m: &Moments| ((m.squares - m.sum * m.sum / m.n) / (m.n - 1.0)).max(0.0) / m.n;
        let common: Vec<f64> = (0..p).map(|q| (0..self.lobes).map(|l| mean(&cells[l * p + q])).sum::<f64>()).collect();
        let lobes = self.lobes as f64;
        for l in 0..self.lobes {
            let r: Vec<f64> = (0..p).map(|q| mean(&cells[l * p + q]) - common[q] / lobes).collect();
            let v: Vec<f64> = (0..p).map(|q| var(&cells[l * p + q])).collect();
            for d in 1..p {
                let (lo, hi) = (d as f64, (p - d) as f64);
                let diff = r[d..].iter().sum::<f64>() / hi - r[..d].iter().sum::<f64>() / lo;
                let spread = v[d..].iter().sum::<f64>() / (hi * hi) + v[..d].iter().sum::<f64>() / (lo * lo);
                if spread > 0.0 {
                    self.score[d] += diff * diff / spread;
                }
            }
        }
        self.scored += 1;
    }

    /// The verdict: None when the echoes agree with the labels.
    pub fn finish(&mut self) -> Option<SweepStep> {
        self.end_block();
        let p = self.positions?;
        if self.scored == 0 {
            return None;
        }
        // each label's score is about chi-square with one degree of freedom
        let dof = (self.lobes * self.scored) as f64;
        let (d, best) = self.score.iter().enumerate().skip(1).max_by(|a, b| a.1.total_cmp(b.1))?;
        let z = (best - dof) / (2.0 * dof).sqrt();
        // a step after position d: the sync lags by p - d sweeps when that is the shorter way
        let sweeps = if 2 * d >= p { -((p - d) as i64) } else { d as i64 };
        (z > STEP_SCORE).then_some(SweepStep { sweeps, score: z })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::rng::Rng;

    /// Four lobes of 8 sweeps; the sync edges `lag` sweeps after the real switches.
    fn run(lag: usize) -> Option<SweepStep> {
        let mut rng = Rng::new(3);
        let mut check = SweepLabelCheck::new(4);
        let gain = [1.0, 1.3, 0.8, 1.1];
        for k in 0..40_000usize {
            if (k + 8 - lag).is_multiple_of(8) {
                check.switch((k + 8 - lag) / 8 % 4);
            }
            let real = k / 8 % 4;
            let transient = if k % 8 == 7 { 3.0 * rng.uniform() } else { 0.0 };
            check.sweep(gain[real] + transient + 0.2 * rng.gaussian());
        }
        check.finish()
    }

    #[test]
    fn right_labels_give_nothing_and_a_lagging_sync_is_counted_in_sweeps() {
        assert_eq!(run(0), None);
        assert_eq!(run(1).map(|s| s.sweeps), Some(-1));
        assert_eq!(run(3).map(|s| s.sweeps), Some(-3));
    }

    #[test]
    fn window_power_sum_is_the_in_order_sum_to_the_last_bit() {
        let mut rng = Rng::new(31);
        let in_order = |iq: &[Complex32]| iq.iter().map(|z| f64::from(z.norm_sqr())).sum::<f64>();
        // Some windows must be ones whose sum depends on the order (the wide spreads).
        let (mut order_free, mut cases) = (0, 0);
        for len in [0usize, 1, 3, 4, 7, 160, 161, 250, 1000] {
            for spread in [0.0, 2.0, 6.0, 12.0, 30.0] {
                for special in 0..5 {
                    let mut iq: Vec<Complex32> = (0..len)
                        .map(|_| {
                            // amplitudes spread over 10^spread, so powers over 10^(2 spread)
                            let scale = 10f64.powf(spread * (rng.uniform() - 0.5)) as f32;
                            let z = rng.complex_gaussian(1.0);
                            Complex32::new(z.re * scale, z.im * scale)
                        })
                        .collect();
                    if len > 2 {
                        let at = (rng.uniform() * len as f64) as usize % len;
                        iq[at] = match special {
                            0 => iq[at],
                            1 => Complex32::new(0.0, -0.0),
                            2 => Complex32::new(f32::MIN_POSITIVE / 64.0, 0.0),
                            3 => Complex32::new(f32::NAN, 1.0),
                            _ => Complex32::new(3e19, 3e19),
                        };
                    }
                    let (got, want) = (window_power_sum(&iq), in_order(&iq));
                    assert_eq!(got.to_bits(), want.to_bits(), "len {len}, spread {spread}, case {special}");
                    cases += 1;
                    let reversed: f64 = iq.iter().map(|z| f64::from(z.norm_sqr())).rev().sum();
                    order_free += (reversed.to_bits() == want.to_bits()) as usize;
                }
            }
        }
        assert!(order_free > 0 && order_free < cases, "{order_free} of {cases}");
        let zeros = vec![Complex32::new(0.0, 0.0); 9];
        assert_eq!(window_power_sum(&zeros).to_bits(), in_order(&zeros).to_bits());
        // Zeros and one power that is not finite, at every place of 19 (lanes and tail).
        for bad in [Complex32::new(3e19, 0.0), Complex32::new(f32::NAN, 0.0), Complex32::new(f32::INFINITY, 0.0)] {
            for at in 0..19 {
                let mut iq = vec![Complex32::new(0.0, -0.0); 19];
                iq[at] = bad;
                assert_eq!(window_power_sum(&iq).to_bits(), in_order(&iq).to_bits(), "{bad} at {at}");
            }
        }
    }
}
