//! A small seeded random source for synthesis and tests: reproducible on
//! every platform, no dependency. SplitMix64 (Steele, Lea and Flood, 2014)
//! for uniform bits, Box-Muller for Gaussians.

use num_complex::Complex32;

#[derive(Clone, Debug)]
pub struct Rng {
    state: u64,
    spare: Option<f64>,
}

impl Rng {
    pub fn new(seed: u64) -> Rng {
        Rng { state: seed, spare: None }
    }

    pub fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1).
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Standard normal.
    pub fn gaussian(&mut self) -> f64 {
        if let Some(s) = self.spare.take() {
            return s;
        }
        let u1 = 1.0 - self.uniform(); // (0, 1]
        let u2 = self.uniform();
        let r = (-2.0 * u1.ln()).sqrt();
        let (s, c) = (2.0 * std::f64::consts::PI * u2).sin_cos();
        self.spare = Some(r * s);
        r * c
    }

    /// Circular complex Gaussian with E|z|^2 = `power`.
    pub fn complex_gaussian(&mut self, power: f64) -> Complex32 {
        let s = (power / 2.0).sqrt();
        Complex32::new((self.gaussian() * s) as f32, (self.gaussian() * s) as f32)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn moments_are_right() {
        let mut r = Rng::new(7);
        let n = 200_000;
        let (mut m, mut v) = (0.0, 0.0);
        for _ in 0..n {
            let g = r.gaussian();
            m += g;
            v += g * g;
        }
        m /= n as f64;
        v = v / n as f64 - m * m;
        assert!(m.abs() < 0.01 && (v - 1.0).abs() < 0.02, "mean {m} var {v}");
        let p: f64 = (0..n).map(|_| r.complex_gaussian(2.0).norm_sqr() as f64).sum::<f64>() / n as f64;
        assert!((p - 2.0).abs() < 0.03, "{p}");
    }
}
