//! Windows, FFT plan reuse and a streaming overlap-save correlator, shared by
//! the tone integrator and the matched filter.
//!
//! Windows are the symmetric forms (the same coefficients as numpy's
//! `hanning`/`blackman`), so tests can compare against numpy directly. The
//! figures of merit follow the usual definitions (e.g. Harris, "On the use of
//! windows for harmonic analysis with the DFT", from memory): coherent gain
//! `sum(w)/M` and equivalent noise bandwidth `M sum(w^2) / sum(w)^2` bins.

use num_complex::Complex32;
use rustfft::{Fft, FftPlanner};
use std::f64::consts::PI;
use std::sync::Arc;

crate::block_choice! {
    /// A data window for spectral estimates.
    pub enum Window { Rect = "rect", Hann = "hann", Blackman = "blackman" }
}

impl Window {
    /// Coefficient `n` of an `m`-point symmetric window.
    pub fn coefficient(&self, n: usize, m: usize) -> f64 {
        if m <= 1 {
            return 1.0;
        }
        let x = 2.0 * PI * n as f64 / (m - 1) as f64;
        match self {
            Window::Rect => 1.0,
            Window::Hann => 0.5 - 0.5 * x.cos(),
            Window::Blackman => 0.42 - 0.5 * x.cos() + 0.08 * (2.0 * x).cos(),
        }
    }

    /// Fill `out` with the window of length `out.len()`.
    pub fn fill(&self, out: &mut [f64]) {
        let m = out.len();
        for (n, w) in out.iter_mut().enumerate() {
            *w = self.coefficient(n, m);
        }
    }

    /// Half-width of the main lobe in bins of an unpadded transform (first null).
    pub fn main_lobe_half_width(&self) -> f64 {
        match self {
            Window::Rect => 1.0,
            Window::Hann => 2.0,
            Window::Blackman => 3.0,
        }
    }

    /// Bins (unpadded) either side of a tone left out of a noise estimate:
    /// beyond them the tone's leakage is under a hundredth of its peak power
    /// (rect sidelobes fall as 1/(pi k)^2, so it needs the widest margin).
    pub fn noise_exclusion(&self) -> f64 {
        match self {
            Window::Rect => 8.0,
            Window::Hann => 4.0,
            Window::Blackman => 5.0,
        }
    }
}

/// `sum(w) / M`: the amplitude a unit tone on a bin centre reads, per sample.
pub fn coherent_gain(w: &[f64]) -> f64 {
    if w.is_empty() {
        return 0.0;
    }
    w.iter().sum::<f64>() / w.len() as f64
}

/// Equivalent noise bandwidth in bins: `M sum(w^2) / sum(w)^2`.
pub fn enbw_bins(w: &[f64]) -> f64 {
    let s1: f64 = w.iter().sum();
    let s2: f64 = w.iter().map(|x| x * x).sum();
    if s1 == 0.0 { f64::NAN } else { w.len() as f64 * s2 / (s1 * s1) }
}

/// Smallest power of two at least `n` (1 for 0).
pub fn next_pow2(n: usize) -> usize {
    n.max(1).next_power_of_two()
}

/// Forward FFT plans by size, made once and reused.
pub struct FftCache {
    planner: FftPlanner<f32>,
    forward: Option<Arc<dyn Fft<f32>>>,
    scratch: Vec<Complex32>,
}

impl Default for FftCache {
    fn default() -> Self {
        Self::new()
    }
}

impl FftCache {
    pub fn new() -> Self {
        FftCache { planner: FftPlanner::new(), forward: None, scratch: Vec::new() }
    }

    /// In-place forward transform of `buf` (any length; plans are cached by the planner).
    pub fn forward(&mut self, buf: &mut [Complex32]) {
        if buf.is_empty() {
            return;
        }
        let plan = match &self.forward {
            Some(p) if p.len() == buf.len() => Arc::clone(p),
            _ => {
                let p = self.planner.plan_fft_forward(buf.len());
                self.forward = Some(Arc::clone(&p));
                p
            }
        };
        let need = plan.get_inplace_scratch_len();
        if self.scratch.len() < need {
            self.scratch.resize(need, Complex32::new(0.0, 0.0));
        }
        plan.process_with_scratch(buf, &mut self.scratch[..need]);
    }
}

/// The DTFT of `x` weighted by `w` at `cycles_per_sample`, in f64:
/// `sum_n w[n] x[n] exp(-j 2 pi f n)`. Used to read a tone's amplitude at a
/// refined frequency without scalloping loss.
pub fn weighted_dtft(x: &[Complex32], w: &[f64], cycles_per_sample: f64) -> (f64, f64) {
    let step = -2.0 * PI * cycles_per_sample;
    let (mut re, mut im) = (0.0, 0.0);
    for (n, (xv, wv)) in x.iter().zip(w).enumerate() {
        let (s, c) = (step * n as f64).sin_cos();
        let (xr, xi) = (xv.re as f64 * wv, xv.im as f64 * wv);
        re += xr * c - xi * s;
        im += xr * s + xi * c;
    }
    (re, im)
}

/// The frequency (cycles per sample) within `lo..hi` where `|weighted_dtft|`
/// peaks, by golden-section search: for a rect window this is the
/// least-squares fit of one complex tone (e.g. Kay, Fundamentals of
/// Statistical Signal Processing: Estimation Theory, 1993, sec. 7.10,
/// from memory). `lo..hi` must bracket a single maximum.
pub fn dtft_peak(x: &[Complex32], w: &[f64], mut lo: f64, mut hi: f64) -> f64 {
    let power = |f: f64| {
        let (re, im) = weighted_dtft(x, w, f);
        re * re + im * im
    };
    let ratio = (5f64.sqrt() - 1.0) / 2.0;
    let (mut a, mut b) = (hi - ratio * (hi - lo), lo + ratio * (hi - lo));
    let (mut pa, mut pb) = (power(a), power(b));
    for _ in 0..40 {
        if pa < pb {
            lo = a;
            (a, pa) = (b, pb);
            b = lo + ratio * (hi - lo);
            pb = power(b);
        } else {
            hi = b;
            (b, pb) = (a, pa);
            a = hi - ratio * (hi - lo);
            pa = power(a);
        }
    }
    0.5 * (lo + hi)
}

/// Vertex offset (in bins, within -0.5..0.5) of a parabola through three
/// equally spaced values; used on log magnitudes around a spectral peak.
pub fn parabolic_offset(left: f64, centre: f64, right: f64) -> f64 {
    let denom = left - 2.0 * centre + right;
    if denom.abs() < 1e-300 || !denom.is_finite() {
        return 0.0;
    }
    (0.5 * (left - right) / denom).clamp(-0.5, 0.5)
}

/// Streaming correlation with a fixed reference by overlap-save:
/// `y[n] = sum_k conj(h[k]) x[n + k]`, so an echo of the reference starting at
/// input sample `n` peaks at output sample `n`. Output `n` needs input up to
/// `n + L - 1`; [`OverlapSave::flush`] supplies zeros past the end, so the
/// output has exactly as many samples as the input.
pub struct OverlapSave {
    taps: usize,
    size: usize,
    /// FFT of the zero-padded reference, conjugated, and scaled by `1/size`
    /// (the inverse transform is unnormalised) and by `gain`.
    reference: Vec<Complex32>,
    pending: Vec<Complex32>,
    work: Vec<Complex32>,
    planner_fwd: Arc<dyn Fft<f32>>,
    planner_inv: Arc<dyn Fft<f32>>,
    scratch: Vec<Complex32>,
}

impl OverlapSave {
    /// `h` is the reference (at least one tap); every output is multiplied by `gain`.
    pub fn new(h: &[Complex32], gain: f32) -> Result<OverlapSave, String> {
        if h.is_empty() {
            return Err("the reference has no taps".into());
        }
        // Four times the reference keeps the wasted fraction at most a quarter.
        let size = next_pow2(4 * h.len()).max(1024);
        let mut planner = FftPlanner::<f32>::new();
        let fwd = planner.plan_fft_forward(size);
        let inv = planner.plan_fft_inverse(size);
        let mut reference = vec![Complex32::new(0.0, 0.0); size];
        reference[..h.len()].copy_from_slice(h);
        let scratch_len = fwd.get_inplace_scratch_len().max(inv.get_inplace_scratch_len());
        let mut scratch = vec![Complex32::new(0.0, 0.0); scratch_len];
        fwd.process_with_scratch(&mut reference, &mut scratch);
        let scale = gain / size as f32;
        for r in reference.iter_mut() {
            *r = r.conj() * scale;
        }
        Ok(OverlapSave {
            taps: h.len(),
            size,
            reference,
            pending: Vec::with_capacity(2 * size),
            work: vec![Complex32::new(0.0, 0.0); size],
            planner_fwd: fwd,
            planner_inv: inv,
            scratch,
        })
    }

    /// Outputs produced per transform.
    fn step(&self) -> usize {
        self.size - self.taps + 1
    }

    /// Input samples held back (not yet turned into output).
    pub fn held(&self) -> usize {
        self.pending.len()
    }

    /// Feed input; appends every output that is now complete to `out`.
    pub fn push(&mut self, x: &[Complex32], out: &mut Vec<Complex32>) {
        for piece in x.chunks(self.size) {
            self.pending.extend_from_slice(piece);
            while self.pending.len() >= self.size {
                self.transform(self.step(), out);
            }
        }
    }

    /// End of input: emit the remaining outputs (zeros assumed past the end).
    pub fn flush(&mut self, out: &mut Vec<Complex32>) {
        while !self.pending.is_empty() {
            let n = self.pending.len().min(self.step());
            self.transform(n, out);
        }
    }

    /// Correlate the first `size` pending samples (zero-padded), emit `n`
    /// outputs, and drop `n` inputs.
    fn transform(&mut self, n: usize, out: &mut Vec<Complex32>) {
        let avail = self.pending.len().min(self.size);
        self.work[..avail].copy_from_slice(&self.pending[..avail]);
        self.work[avail..].fill(Complex32::new(0.0, 0.0));
        self.planner_fwd.process_with_scratch(&mut self.work, &mut self.scratch);
        for (w, r) in self.work.iter_mut().zip(&self.reference) {
            *w *= *r;
        }
        self.planner_inv.process_with_scratch(&mut self.work, &mut self.scratch);
        // Circular correlation is free of wrap-around for lags 0..size-L+1.
        out.extend_from_slice(&self.work[..n]);
        self.pending.drain(..n);
    }
}

/// Direct correlation `y[n] = sum_k conj(h[k]) x[n+k]` (zeros past the end), for tests.
pub fn correlate_direct(x: &[Complex32], h: &[Complex32]) -> Vec<Complex32> {
    (0..x.len())
        .map(|n| {
            let mut acc = num_complex::Complex64::new(0.0, 0.0);
            for (k, hk) in h.iter().enumerate() {
                if let Some(xv) = x.get(n + k) {
                    let (a, b) = (hk.conj(), *xv);
                    acc += num_complex::Complex64::new(a.re as f64, a.im as f64)
                        * num_complex::Complex64::new(b.re as f64, b.im as f64);
                }
            }
            Complex32::new(acc.re as f32, acc.im as f32)
        })
        .collect()
}

/// A linear chirp of `len` samples sweeping `-bw/2..+bw/2` (bandwidth as a
/// fraction of the sample rate), unit magnitude.
pub fn linear_chirp(len: usize, bw_fraction: f64) -> Vec<Complex32> {
    let t_len = len.max(1) as f64;
    (0..len)
        .map(|n| {
            let t = n as f64;
            let phase = PI * bw_fraction * (t * t / t_len - t);
            Complex32::new(phase.cos() as f32, phase.sin() as f32)
        })
        .collect()
}

/// Windowed-sinc low-pass taps with a Blackman window, unity gain at 0 Hz.
/// `cutoff` is a fraction of the sample rate (0..0.5).
pub fn lowpass_taps(count: usize, cutoff: f64) -> Vec<f64> {
    let centre = (count as f64 - 1.0) / 2.0;
    let mut taps: Vec<f64> = (0..count)
        .map(|k| {
            let x = k as f64 - centre;
            let sinc = if x == 0.0 { 2.0 * cutoff } else { (2.0 * PI * cutoff * x).sin() / (PI * x) };
            sinc * Window::Blackman.coefficient(k, count)
        })
        .collect();
    let sum: f64 = taps.iter().sum();
    if sum != 0.0 {
        for t in taps.iter_mut() {
            *t /= sum;
        }
    }
    taps
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::rng::Rng;

    fn noise(n: usize, seed: u64) -> Vec<Complex32> {
        let mut r = Rng::new(seed);
        (0..n).map(|_| r.complex_gaussian(1.0)).collect()
    }

    #[test]
    fn fft_matches_direct_dft() {
        // The DFT definition X[k] = sum x[n] exp(-j 2 pi k n / N), computed directly.
        let mut cache = FftCache::new();
        for &n in &[1usize, 2, 7, 16, 60, 128] {
            let x = noise(n, n as u64);
            let mut y = x.clone();
            cache.forward(&mut y);
            for (k, yk) in y.iter().enumerate() {
                let (re, im) = weighted_dtft(&x, &vec![1.0; n], k as f64 / n as f64);
                let err = ((yk.re as f64 - re).powi(2) + (yk.im as f64 - im).powi(2)).sqrt();
                assert!(err < 1e-4 * (n as f64).sqrt() + 1e-5, "n {n} k {k} err {err}");
            }
        }
    }

    #[test]
    fn overlap_save_equals_direct_correlation_over_any_split() {
        let h = linear_chirp(37, 0.4);
        let x = noise(5000, 3);
        let direct = correlate_direct(&x, &h);
        for split in [1usize, 13, 700, 1024, 5000] {
            let mut ols = OverlapSave::new(&h, 1.0).unwrap();
            let mut y = Vec::new();
            for piece in x.chunks(split) {
                ols.push(piece, &mut y);
                assert!(ols.held() < 2 * 1024 + split);
            }
            ols.flush(&mut y);
            assert_eq!(y.len(), x.len());
            let worst = y.iter().zip(&direct).map(|(a, b)| (a - b).norm()).fold(0.0f32, f32::max);
            assert!(worst < 2e-4 * 37f32.sqrt(), "split {split}: {worst}");
        }
    }

    #[test]
    fn window_figures_match_known_values() {
        // ENBW 1.5 bins (Hann), 1.73 (Blackman), coherent gain 0.5 and 0.42
        // for long windows (Harris 1978, from memory).
        let mut w = vec![0.0; 4096];
        Window::Hann.fill(&mut w);
        assert!((enbw_bins(&w) - 1.5).abs() < 2e-3);
        assert!((coherent_gain(&w) - 0.5).abs() < 1e-3);
        Window::Blackman.fill(&mut w);
        assert!((enbw_bins(&w) - 1.727).abs() < 3e-3);
        assert!((coherent_gain(&w) - 0.42).abs() < 1e-3);
    }

    #[test]
    fn parabola_vertex_is_found() {
        // y = -(x - 0.3)^2 sampled at -1, 0, 1.
        let f = |x: f64| -(x - 0.3) * (x - 0.3);
        assert!((parabolic_offset(f(-1.0), f(0.0), f(1.0)) - 0.3).abs() < 1e-12);
        assert_eq!(parabolic_offset(1.0, 1.0, 1.0), 0.0);
    }
}
