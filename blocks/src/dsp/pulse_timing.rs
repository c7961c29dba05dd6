//! Pieces of transmit-instant detection shared by framing blocks: a running
//! noise-floor estimate of power, robust to strong short pulses.

use std::collections::VecDeque;

/// Samples per block whose median power makes one floor reading.
pub const FLOOR_BLOCK: usize = 1024;
/// Block medians kept; the floor is their median.
const FLOOR_BLOCKS: usize = 16;

/// Running noise power per sample from the median of |x|^2 in blocks.
///
/// For complex Gaussian noise |x|^2 is exponential, whose median is
/// `ln 2` times its mean, so the mean noise power is `median / ln 2`.
/// Leakage pulses and echoes fill a small part of each block and barely
/// move the median.
pub struct NoiseFloor {
    block: Vec<f32>,
    medians: VecDeque<f32>,
    floor: f64,
}

impl Default for NoiseFloor {
    fn default() -> Self {
        NoiseFloor {
            block: Vec::with_capacity(FLOOR_BLOCK),
            medians: VecDeque::with_capacity(FLOOR_BLOCKS),
            floor: 0.0,
        }
    }
}

impl NoiseFloor {
    pub fn push(&mut self, power: f32) {
        if !power.is_finite() {
            return;
        }
        self.block.push(power);
        if self.block.len() == FLOOR_BLOCK {
            let (_, m, _) = self.block.select_nth_unstable_by(FLOOR_BLOCK / 2, f32::total_cmp);
            let m = *m;
            self.block.clear();
            if self.medians.len() == FLOOR_BLOCKS {
                self.medians.pop_front();
            }
            self.medians.push_back(m);
            let mut sorted: Vec<f32> = self.medians.iter().copied().collect();
            sorted.sort_unstable_by(f32::total_cmp);
            self.floor = sorted[sorted.len() / 2] as f64 / std::f64::consts::LN_2;
        }
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
}
