//! Echo energy after pulse compression (docs/derivations.md §7).
//!
//! A matched filter leaves the noise of neighbouring output samples
//! correlated (their covariance is the pulse's autocorrelation), so a gate
//! over compressed samples cannot treat its bins as independent. These sums
//! keep, per dwell, the gate's cross products `sum y_k conj(y_l)` and the
//! noise region's lag products up to the gate width; from them
//! [`CompressedSums::interpolated`] reads the echo at its fitted fractional
//! delay (the single-sample limit at any delay) and
//! [`CompressedSums::gate_sum`] sums the gate with the spread its
//! correlated bins give.

use num_complex::{Complex32, Complex64};

/// Cross products of one dwell's gate bins and lag products of its noise.
#[derive(Clone, Debug)]
pub struct CompressedSums {
    width: usize,
    /// `cross[k * width + l]` = sum over pulses of `y_k conj(y_l)`.
    cross: Vec<Complex64>,
    /// `noise_lag[d]` = sum of `x_i conj(x_{i+d})` over the noise region.
    noise_lag: Vec<Complex64>,
    noise_lag_count: Vec<u64>,
    pulses: u64,
}

/// What the compressed gate read from one dwell.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CompressedReading {
    /// Echo energy over the noise power per sample (E); may be <= 0 on noise.
    pub energy_ratio: f64,
    /// Expected var(ln amplitude), infinite when E <= 0.
    pub var_ln_amp: f64,
    /// Echo position in gate bins (fractional), when the reading fits one.
    pub position: Option<f64>,
}

impl CompressedSums {
    pub fn new(width: usize) -> CompressedSums {
        let width = width.max(1);
        CompressedSums {
            width,
            cross: vec![Complex64::new(0.0, 0.0); width * width],
            noise_lag: vec![Complex64::new(0.0, 0.0); width],
            noise_lag_count: vec![0; width],
            pulses: 0,
        }
    }

    /// Add one pulse's gate samples and its noise reference parts (each part
    /// contiguous, so lag products stay inside it).
    pub fn add(&mut self, gate: &[Complex32], noise: &[&[Complex32]]) {
        let y: Vec<Complex64> = gate.iter().map(|z| Complex64::new(z.re as f64, z.im as f64)).collect();
        for (k, yk) in y.iter().enumerate().take(self.width) {
            for (l, yl) in y.iter().enumerate().take(self.width) {
                self.cross[k * self.width + l] += yk * yl.conj();
            }
        }
        for part in noise {
            for d in 0..self.width.min(part.len()) {
                let mut acc = Complex64::new(0.0, 0.0);
                for (a, b) in part.iter().zip(&part[d..]) {
                    acc += Complex64::new(a.re as f64, a.im as f64) * Complex64::new(b.re as f64, -b.im as f64);
                }
                self.noise_lag[d] += acc;
                self.noise_lag_count[d] += (part.len() - d) as u64;
            }
        }
        self.pulses += 1;
    }

    /// Noise covariance `E[w_k conj(w_l)]` for gate bins `k`, `l`, with the
    /// lag-0 power `noise` (the caller's noise estimate) and the lags
    /// measured in the noise region, scaled to it.
    fn covariance(&self, noise: f64) -> Vec<Complex64> {
        let lag0 = self.noise_lag[0].re / self.noise_lag_count[0].max(1) as f64;
        let rho: Vec<Complex64> = (0..self.width)
            .map(|d| match self.noise_lag_count[d] {
                0 => Complex64::new(if d == 0 { 1.0 } else { 0.0 }, 0.0),
                _ if lag0 > 0.0 => self.noise_lag[d] / self.noise_lag_count[d] as f64 / lag0,
                _ => Complex64::new(if d == 0 { 1.0 } else { 0.0 }, 0.0),
            })
            .collect();
        let mut c = vec![Complex64::new(0.0, 0.0); self.width * self.width];
        for k in 0..self.width {
            for l in 0..self.width {
                let r = if l >= k { rho[l - k] } else { rho[k - l].conj() };
                c[k * self.width + l] = r * noise;
            }
        }
        c
    }

    /// Mean power of `sum_k w_k y_k` over the pulses, and its noise part.
    fn weighted(&self, w: &[f64], cov: &[Complex64]) -> (f64, f64) {
        let n = self.pulses.max(1) as f64;
        let (mut power, mut noise) = (0.0, 0.0);
        for (k, wk) in w.iter().enumerate() {
            for (l, wl) in w.iter().enumerate() {
                power += wk * wl * self.cross[k * self.width + l].re / n;
                noise += wk * wl * cov[k * self.width + l].re;
            }
        }
        (power, noise)
    }

    /// The echo at its fitted fractional delay: the compressed output
    /// interpolated between the strongest bin and its stronger neighbour,
    /// `z = (1-t) y_p + t y_q`, with `t` maximising the power of `z` over its
    /// own noise (for a box pulse sampled by integrate and dump this `z` is
    /// exactly the correlation with the echo as sampled, so it holds the
    /// pulse's whole energy at any delay). Single-sample spread at the
    /// energy ratio `z` holds over its own noise.
    pub fn interpolated(&self, noise: f64) -> CompressedReading {
        let cov = self.covariance(noise);
        let n = self.pulses.max(1) as f64;
        let signal = |k: usize| self.cross[k * self.width + k].re / n - cov[k * self.width + k].re;
        let peak = (0..self.width).max_by(|&a, &b| signal(a).total_cmp(&signal(b))).unwrap_or(0);
        let neighbour = [peak.checked_sub(1), (peak + 1 < self.width).then_some(peak + 1)]
            .into_iter()
            .flatten()
            .max_by(|&a, &b| signal(a).total_cmp(&signal(b)));
        let weights = |t: f64| {
            let mut w = vec![0.0; self.width];
            w[peak] = 1.0 - t;
            if let Some(q) = neighbour {
                w[q] = t;
            }
            w
        };
        let ratio = |t: f64| {
            let (p, q) = self.weighted(&weights(t), &cov);
            if q > 0.0 { p / q } else { 0.0 }
        };
        let t = if neighbour.is_some() { maximise_on_unit(ratio) } else { 0.0 };
        let (power, noise_w) = self.weighted(&weights(t), &cov);
        let e = if noise_w > 0.0 { (power - noise_w) / noise_w } else { 0.0 };
        let position = peak as f64 + neighbour.map_or(0.0, |q| t * (q as f64 - peak as f64));
        CompressedReading { energy_ratio: e, var_ln_amp: single_sample_var(e, n), position: Some(position) }
    }

    /// The whole gate summed (`Q = sum_k |y_k|^2`), its spread from the
    /// correlated noise: per pulse `var Q = tr(C C) + 2 tr(C M)` with `C` the
    /// noise covariance and `M = a a^H` the echo's (estimated) cross products.
    pub fn gate_sum(&self, noise: f64) -> CompressedReading {
        let cov = self.covariance(noise);
        let n = self.pulses.max(1) as f64;
        let g = self.width;
        let echo = |k: usize, l: usize| self.cross[k * g + l] / n - cov[k * g + l];
        let energy: f64 = (0..g).map(|k| echo(k, k).re).sum();
        let mut var_q = 0.0;
        for k in 0..g {
            for l in 0..g {
                var_q += cov[k * g + l].norm_sqr() + 2.0 * (cov[k * g + l] * echo(l, k)).re;
            }
        }
        let var_q = var_q.max((0..g).map(|k| cov[k * g + k].re.powi(2)).sum());
        let (e, var_ln_amp) = if energy > 0.0 && noise > 0.0 {
            (energy / noise, var_q / (4.0 * n * energy * energy))
        } else {
            (if noise > 0.0 { energy / noise } else { 0.0 }, f64::INFINITY)
        };
        CompressedReading { energy_ratio: e, var_ln_amp, position: None }
    }
}

/// var(ln A) of one sample holding energy ratio `e`, over `n` pulses.
pub fn single_sample_var(e: f64, n: f64) -> f64 {
    if e > 0.0 { (1.0 / (e * e) + 2.0 / e) / (4.0 * n) } else { f64::INFINITY }
}

/// Arg max of `f` on [0, 1]: golden-section search, ends checked.
fn maximise_on_unit(f: impl Fn(f64) -> f64) -> f64 {
    let phi = 0.5 * (5f64.sqrt() - 1.0);
    let (mut a, mut b) = (0.0, 1.0);
    let (mut c, mut d) = (b - phi * (b - a), a + phi * (b - a));
    let (mut fc, mut fd) = (f(c), f(d));
    for _ in 0..40 {
        if fc > fd {
            b = d;
            d = c;
            fd = fc;
            c = b - phi * (b - a);
            fc = f(c);
        } else {
            a = c;
            c = d;
            fc = fd;
            d = a + phi * (b - a);
            fd = f(d);
        }
    }
    let mid = 0.5 * (a + b);
    [0.0, mid, 1.0].into_iter().max_by(|&x, &y| f(x).total_cmp(&f(y))).unwrap_or(mid)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::rng::Rng;

    /// Rect matched filter (normalised to keep the noise power) of a sampled
    /// box echo `L` long at delay `start + f`, plus white noise of power 1.
    fn compressed(x: &[Complex32], len: usize) -> Vec<Complex32> {
        let scale = 1.0 / (len as f32).sqrt();
        (0..x.len().saturating_sub(len - 1)).map(|k| x[k..k + len].iter().sum::<Complex32>() * scale).collect()
    }

    fn boxed(len: usize, f: f64, at: usize, total: usize, amp: f64) -> Vec<Complex32> {
        let mut x = vec![Complex32::new(0.0, 0.0); total];
        for k in 0..=len {
            let lo = (k as f64).max(f);
            let hi = (k as f64 + 1.0).min(f + len as f64);
            if hi > lo {
                x[at + k] = Complex32::new((amp * (hi - lo)) as f32, 0.0);
            }
        }
        x
    }

    #[test]
    fn interpolation_recovers_the_whole_pulse_energy_at_any_delay() {
        // No noise in the gate, a known white noise of power 1 in the
        // covariance: E must be the sampled box's energy, sum of squares
        // (1-f)^2 + (L-1) + f^2, and the position the echo start.
        let len = 4;
        for f in [0.0, 0.2, 0.35, 0.5, 0.8] {
            let y = compressed(&boxed(len, f, 10, 40, 1.0), len);
            let mut white: Vec<Complex32> = Vec::new();
            // Compressed white noise: its lags are the rect autocorrelation.
            let mut rng = Rng::new(3);
            let raw: Vec<Complex32> = (0..200_000).map(|_| rng.complex_gaussian(1.0)).collect();
            white.extend(compressed(&raw, len));
            let mut sums = CompressedSums::new(3);
            let start = if f < 0.5 { 9 } else { 10 };
            sums.add(&y[start..start + 3], &[&white]);
            // Take the noise's own bias out: the gate had no noise, so add it back.
            let noise = 1.0;
            let cov = sums.covariance(noise);
            for k in 0..3 {
                for l in 0..3 {
                    sums.cross[k * 3 + l] += cov[k * 3 + l];
                }
            }
            let r = sums.interpolated(noise);
            let want = (1.0 - f) * (1.0 - f) + (len as f64 - 1.0) + f * f;
            assert!((r.energy_ratio - want).abs() < 0.02 * want, "f {f}: E {} want {want}", r.energy_ratio);
            let pos = start as f64 + r.position.unwrap();
            assert!((pos - (10.0 + f)).abs() < 0.02, "f {f}: position {pos}");
        }
    }

    #[test]
    fn single_bin_of_white_noise_gate_sum_matches_the_independent_form() {
        // White noise: the correlated-gate spread falls back to (G/E^2 + 2/E)/(4N).
        let mut rng = Rng::new(9);
        let mut sums = CompressedSums::new(3);
        for _ in 0..8 {
            let gate: Vec<Complex32> = (0..3)
                .map(|k| rng.complex_gaussian(1.0) + Complex32::new(if k == 1 { 3.0 } else { 0.0 }, 0.0))
                .collect();
            let noise: Vec<Complex32> = (0..20_000).map(|_| rng.complex_gaussian(1.0)).collect();
            sums.add(&gate, &[&noise]);
        }
        let r = sums.gate_sum(1.0);
        let e = r.energy_ratio;
        let independent = (3.0 / (e * e) + 2.0 / e) / 32.0;
        assert!((r.var_ln_amp / independent - 1.0).abs() < 0.05, "{} vs {independent}", r.var_ln_amp);
    }

    #[test]
    fn correlated_gate_spread_matches_a_monte_carlo() {
        // Gate of 3 compressed bins over a rect-4 echo at E = 6 per pulse,
        // N = 4: the spread of ln sqrt(Q - noise) over many dwells against the
        // formula, which treats the bins as correlated.
        let (len, n_pulses, trials) = (4, 4, 4000);
        let mut rng = Rng::new(21);
        let amp = (6.0f64 / len as f64).sqrt();
        let mut logs = Vec::new();
        let mut predicted = 0.0;
        for _ in 0..trials {
            let mut sums = CompressedSums::new(3);
            for _ in 0..n_pulses {
                let mut x = boxed(len, 0.0, 20, 64, amp);
                let phase = Complex32::from_polar(1.0, rng.uniform() as f32 * std::f32::consts::TAU);
                for v in x.iter_mut() {
                    *v = *v * phase + rng.complex_gaussian(1.0);
                }
                let y = compressed(&x, len);
                sums.add(&y[19..22], &[&y[30..]]);
            }
            let r = sums.gate_sum(1.0);
            if r.energy_ratio > 0.0 {
                logs.push(0.5 * r.energy_ratio.ln());
                predicted += r.var_ln_amp;
            }
        }
        let m = logs.iter().sum::<f64>() / logs.len() as f64;
        let var = logs.iter().map(|l| (l - m) * (l - m)).sum::<f64>() / (logs.len() - 1) as f64;
        let predicted = predicted / logs.len() as f64;
        assert!((var / predicted - 1.0).abs() < 0.12, "measured {var:.5} predicted {predicted:.5}");
    }
}
