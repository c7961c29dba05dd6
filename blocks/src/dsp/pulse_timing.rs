//! Pieces of transmit-instant detection shared by framing blocks: a running
//! noise-floor estimate of power, robust to strong short pulses.

use super::wide_vectors::wide_vectors;
use num_complex::Complex32;
use std::collections::VecDeque;

/// Readings per block whose median power makes one floor reading.
pub const FLOOR_BLOCK: usize = 1024;
/// Block medians kept; the floor is their median.
const FLOOR_BLOCKS: usize = 16;
/// After the first block, one reading in this many is kept: the median of
/// 1024 readings is as good wherever they come from, and selecting it is
/// the costly part (every sample of a capture passes here).
pub const FLOOR_STRIDE: usize = 8;

/// Running noise power per sample from the median of |x|^2 in blocks.
///
/// For complex Gaussian noise |x|^2 is exponential, whose median is
/// `ln 2` times its mean, so the mean noise power is `median / ln 2`.
/// Leakage pulses and echoes fill a small part of each block and barely
/// move the median. The first block takes every reading, so a floor is
/// known after [`FLOOR_BLOCK`] samples; later blocks take one in
/// [`FLOOR_STRIDE`].
pub struct NoiseFloor {
    /// The block being filled (`filled` of it), as integer keys in
    /// `f32::total_cmp` order (integer selection is cheaper, and picks the
    /// very same value).
    block: Box<[i32; FLOOR_BLOCK]>,
    filled: usize,
    /// 1 for the first block, then [`FLOOR_STRIDE`].
    stride: usize,
    /// Finite readings since the last kept one, modulo `stride`.
    phase: usize,
    medians: VecDeque<f32>,
    floor: f64,
}

/// The block's middle key (rank `FLOOR_BLOCK / 2` in integer order), as
/// `select_nth_unstable` gives it. A block's median seldom moves far from the
/// last one (`near`): the keys between 3/4 and 4/3 of it are gathered and
/// counted in one pass, and the median is selected among those few when it
/// is one of them; otherwise among all keys.
fn median_key(block: &mut [i32; FLOOR_BLOCK], near: Option<f32>) -> i32 {
    const RANK: usize = FLOOR_BLOCK / 2;
    if let Some(near) = near.filter(|m| m.is_finite() && *m > 0.0) {
        // Positive float32 keep their bits as keys.
        let (lo, hi) = ((0.75 * near).to_bits() as i32, (near / 0.75).to_bits() as i32);
        let mut middle = [0i32; FLOOR_BLOCK];
        let (mut below, mut kept) = (0, 0);
        for &key in block.iter() {
            below += (key < lo) as usize;
            middle[kept] = key;
            kept += ((key >= lo) & (key <= hi)) as usize;
        }
        if below <= RANK && RANK < below + kept {
            return *middle[..kept].select_nth_unstable(RANK - below).1;
        }
    }
    *block.select_nth_unstable(RANK).1
}

/// Readings tested together in [`NoiseFloor::push_below`]: one stride.
const LANES: usize = 8;

/// The powers |x|^2 of one group of samples (a shape the compiler vectorises).
#[inline(always)]
fn group_powers(group: &[Complex32; LANES]) -> [f32; LANES] {
    let mut power = [0f32; LANES];
    for (p, x) in power.iter_mut().zip(group) {
        *p = x.norm_sqr();
    }
    power
}

/// Whether every power of a group is finite and at most `limit` (branch-free).
#[inline(always)]
fn all_below(power: &[f32; LANES], limit: f32) -> bool {
    power.iter().fold(true, |ok, &p| ok & p.is_finite() & (p <= limit))
}

/// `f32::total_cmp` order as a plain integer order; the map is its own inverse.
#[inline]
fn total_order_key(bits: i32) -> i32 {
    bits ^ (((bits >> 31) as u32) >> 1) as i32
}

impl Default for NoiseFloor {
    fn default() -> Self {
        NoiseFloor {
            block: Box::new([0; FLOOR_BLOCK]),
            filled: 0,
            stride: 1,
            phase: 0,
            medians: VecDeque::with_capacity(FLOOR_BLOCKS),
            floor: 0.0,
        }
    }
}

impl NoiseFloor {
    /// Add one power reading; true when it completed a block and the floor was updated.
    #[inline]
    pub fn push(&mut self, power: f32) -> bool {
        if !power.is_finite() {
            return false;
        }
        let keep = self.phase == 0;
        self.phase = (self.phase + 1) & (self.stride - 1);
        if !keep {
            return false;
        }
        self.block[self.filled] = total_order_key(power.to_bits() as i32);
        self.filled += 1;
        if self.filled == FLOOR_BLOCK {
            self.close_block();
            return true;
        }
        false
    }

    #[inline(never)]
    fn close_block(&mut self) {
        let m = median_key(&mut self.block, self.medians.back().copied());
        let m = f32::from_bits(total_order_key(m) as u32);
        self.filled = 0;
        self.stride = FLOOR_STRIDE;
        if self.medians.len() == FLOOR_BLOCKS {
            self.medians.pop_front();
        }
        self.medians.push_back(m);
        let mut sorted = [0f32; FLOOR_BLOCKS];
        let sorted = &mut sorted[..self.medians.len()];
        for (s, m) in sorted.iter_mut().zip(&self.medians) {
            *s = *m;
        }
        sorted.sort_unstable_by(f32::total_cmp);
        self.floor = sorted[sorted.len() / 2] as f64 / std::f64::consts::LN_2;
    }

    /// Push the powers |x|^2 of `samples` up to the first one over `limit`
    /// (which is left out), stopping short of completing a block, so the
    /// floor does not move. Returns how many samples were taken; each was
    /// pushed exactly as [`Self::push`] would.
    #[inline]
    pub fn push_below(&mut self, samples: &[Complex32], limit: f64) -> usize {
        push_below(self, samples, limit)
    }

    /// Mean noise power per sample; 0 until a first block is complete.
    pub fn power(&self) -> f64 {
        self.floor
    }

    /// True once at least one block has been measured.
    pub fn ready(&self) -> bool {
        !self.medians.is_empty()
    }
}

wide_vectors! {
/// [`NoiseFloor::push_below`], built for the widest vectors the CPU has.
fn push_below(floor: &mut NoiseFloor, samples: &[Complex32], limit: f64) -> usize {
    let mut filled = floor.filled;
    let mut taken = 0;
    // Eight at a time while all are finite and under the limit (the usual
    // case; vectorised), then one at a time. Eight finite readings are
    // one whole stride, so the phase stays where it is.
    const _: () = assert!(FLOOR_STRIDE == LANES && LANES.is_power_of_two());
    let per_group = if floor.stride == 1 { LANES } else { 1 };
    // The one lane of a group kept once the stride applies.
    let lane = (LANES - floor.phase) % LANES;
    // The same test in float32: the largest float32 not above the limit.
    let limit = {
        let t = limit as f32;
        if (t as f64) > limit { t.next_down() } else { t }
    };
    if per_group == 1 {
        // Once the stride applies: four groups per test, so the test and
        // its branch cost less per sample (every sample of a capture
        // passes here); where one fails, the groups below find the sample.
        const WIDE: usize = 4 * LANES;
        const GROUPS: usize = WIDE / LANES;
        while taken + WIDE <= samples.len() && filled + GROUPS < FLOOR_BLOCK {
            let (groups, _) = samples[taken..taken + WIDE].as_chunks::<LANES>();
            let (mut below, mut keys) = (true, [0i32; GROUPS]);
            for (key, group) in keys.iter_mut().zip(groups) {
                let power = group_powers(group);
                below &= all_below(&power, limit);
                *key = total_order_key(power[lane].to_bits() as i32);
            }
            if !below {
                break;
            }
            floor.block[filled..filled + GROUPS].copy_from_slice(&keys);
            filled += GROUPS;
            taken += WIDE;
        }
    }
    while taken + LANES <= samples.len() && filled + per_group < FLOOR_BLOCK {
        let power = group_powers(&samples[taken..taken + LANES].as_chunks::<LANES>().0[0]);
        if !all_below(&power, limit) {
            break;
        }
        if per_group == LANES {
            for (slot, p) in floor.block[filled..filled + LANES].iter_mut().zip(power) {
                *slot = total_order_key(p.to_bits() as i32);
            }
        } else {
            floor.block[filled] = total_order_key(power[lane].to_bits() as i32);
        }
        filled += per_group;
        taken += LANES;
    }
    let mut phase = floor.phase;
    for x in &samples[taken..] {
        let p = x.norm_sqr();
        let finite = p.is_finite();
        let keep = finite & (phase == 0);
        if (keep && filled + 1 >= FLOOR_BLOCK) || p > limit {
            break;
        }
        // Non-finite powers are skipped, as in `push` (branch-free).
        floor.block[filled] = total_order_key(p.to_bits() as i32);
        filled += keep as usize;
        // The stride is a power of two: a mask, not a division.
        phase = (phase + finite as usize) & (floor.stride - 1);
        taken += 1;
    }
    floor.filled = filled;
    floor.phase = phase;
    taken
}
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::rng::Rng;

    #[test]
    fn floor_matches_noise_power_despite_pulses() {
        // Exponential median = ln 2 x mean (any statistics text): the estimate
        // of unit-power complex noise should come out near 1.
        let mut rng = Rng::new(5);
        let mut f = NoiseFloor::default();
        for n in 0..(20 * FLOOR_BLOCK) {
            let x = rng.complex_gaussian(2.0);
            let p = if n % 500 < 10 { 1e4 } else { x.norm_sqr() };
            f.push(p);
        }
        assert!((f.power() - 2.0).abs() < 0.1, "{}", f.power());
    }

    #[test]
    fn floor_is_the_median_of_block_medians_by_total_order() {
        // The definition, by sorting with f32::total_cmp, on readings of
        // mixed sign, zeros of both signs, subnormals and non-finite values
        // (which are skipped).
        let mut rng = Rng::new(9);
        let mut f = NoiseFloor::default();
        let mut block: Vec<f32> = Vec::new();
        let mut medians: VecDeque<f32> = VecDeque::new();
        let mut kept = 0usize;
        for n in 0..(40 * FLOOR_STRIDE * FLOOR_BLOCK) {
            let x = match n % 97 {
                0 => f32::NAN,
                1 => f32::INFINITY,
                2 => -0.0,
                3 => 0.0,
                4 => f32::MIN_POSITIVE / 4.0,
                _ => (1.0 + rng.gaussian() * 3.0) as f32,
            };
            let moved = f.push(x);
            if x.is_finite() {
                // Every reading for the first block, then one in FLOOR_STRIDE.
                if medians.is_empty() || kept.is_multiple_of(FLOOR_STRIDE) {
                    block.push(x);
                }
                if !medians.is_empty() {
                    kept += 1;
                }
            }
            assert_eq!(moved, block.len() == FLOOR_BLOCK, "sample {n}");
            if block.len() == FLOOR_BLOCK {
                block.sort_by(f32::total_cmp);
                if medians.len() == FLOOR_BLOCKS {
                    medians.pop_front();
                }
                medians.push_back(block[FLOOR_BLOCK / 2]);
                block.clear();
                let mut sorted: Vec<f32> = medians.iter().copied().collect();
                sorted.sort_by(f32::total_cmp);
                let want = sorted[sorted.len() / 2] as f64 / std::f64::consts::LN_2;
                assert_eq!(f.power().to_bits(), want.to_bits(), "sample {n}");
            }
        }
        assert!(f.ready() && f.power() != 0.0);
    }

    #[test]
    fn pushing_below_a_limit_matches_single_pushes() {
        let mut rng = Rng::new(21);
        let samples: Vec<Complex32> = (0..(9 * FLOOR_STRIDE * FLOOR_BLOCK + 77))
            .map(|n| match n % 331 {
                0 => Complex32::new(f32::NAN, 0.0),
                1 => Complex32::new(30.0, 0.0), // over the limit
                _ => rng.complex_gaussian(1.0),
            })
            .collect();
        let limit = 100.0;
        let (mut bulk, mut single) = (NoiseFloor::default(), NoiseFloor::default());
        let mut at = 0;
        let mut stops = 0;
        while at < samples.len() {
            let taken = bulk.push_below(&samples[at..], limit);
            for x in &samples[at..at + taken] {
                assert!(!single.push(x.norm_sqr()), "a block completed inside a bulk push");
            }
            at += taken;
            if at < samples.len() {
                // Where the bulk push stopped: a sample over the limit or the block's last slot.
                let p = samples[at].norm_sqr();
                let over = p as f64 > limit;
                let moved = bulk.push(p);
                assert_eq!(moved, single.push(p));
                assert!(over || moved, "stopped at sample {at} for no reason");
                stops += 1;
                at += 1;
            }
            assert_eq!(bulk.power().to_bits(), single.power().to_bits(), "sample {at}");
        }
        assert!(bulk.ready() && stops > 9);
    }

    #[test]
    fn median_key_is_the_middle_key_whether_near_the_last_or_not() {
        let mut rng = Rng::new(41);
        let (mut near_hits, mut cases) = (0, 0);
        for level in [1.0f64, 1.05, 1.2, 3.0, 0.01, 1e-30] {
            for near in [None, Some(1.0f32), Some(0.0), Some(-1.0), Some(f32::NAN), Some(f32::INFINITY)] {
                let mut block = [0i32; FLOOR_BLOCK];
                for (n, key) in block.iter_mut().enumerate() {
                    let z = rng.complex_gaussian(level);
                    let p = match n % 211 {
                        0 => -0.0,
                        1 => 1e6,
                        _ => z.norm_sqr(),
                    };
                    *key = total_order_key(p.to_bits() as i32);
                }
                let mut sorted = block;
                sorted.sort_unstable();
                let got = median_key(&mut block, near);
                assert_eq!(got, sorted[FLOOR_BLOCK / 2], "level {level}, near {near:?}");
                let m = f32::from_bits(total_order_key(got) as u32);
                near_hits += near.is_some_and(|n| n > 0.0 && n.is_finite() && m >= 0.75 * n && m <= n / 0.75) as usize;
                cases += 1;
            }
        }
        // Both ways are taken: the median near the last one, and far from it.
        assert!(near_hits > 0 && near_hits < cases, "{near_hits} of {cases}");
    }
}
