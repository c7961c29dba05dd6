//! Bounded summaries the picture blocks keep while items stream past.

use crate::dsp::wide_vectors::wide_vectors;
use crate::{BlockError, DistanceSetting, Stamp, Sweep, range_bin_m};
use num_complex::Complex32;

wide_vectors! {
    /// Add each sample's power (|x|^2 in float32, widened) to its bin's sum.
    fn add_powers(sums: &mut [f64], samples: &[Complex32]) -> () {
        for (p, x) in sums.iter_mut().zip(samples) {
            *p += f64::from(x.norm_sqr());
        }
    }
}

/// Most range bins one averaged sweep may hold (bounds memory per block).
pub const MAX_BINS: usize = 1 << 20;

/// Range window of a sweep picture, resolved to bins at the first sweep.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BinWindow {
    pub first: usize,
    pub len: usize,
    pub rate: f64,
}

impl BinWindow {
    /// From the distance settings `start` and `end` (end 0 = to the end of
    /// the sweep), at the sweep's rate and length.
    pub fn from_settings(
        start: &DistanceSetting,
        end: &DistanceSetting,
        sweep: &Sweep,
    ) -> Result<BinWindow, BlockError> {
        let rate = sweep.stamp.rate;
        if !(rate > 0.0 && rate.is_finite()) {
            return Err(BlockError::at(format!("sweep has an unusable sample rate {rate}"), sweep.stamp.index));
        }
        let first = start.bins(rate)?;
        let end_bins = end.bins(rate)?;
        let last = if end_bins <= 0.0 { sweep.iq.len() as f64 } else { end_bins };
        BinWindow::from_bins(first, last, sweep).map_err(|e| {
            BlockError::at(format!("parameters '{}'..'{}': {e}", start.name(), end.name()), sweep.stamp.index)
        })
    }

    /// From fractional bin numbers (rounded), at the sweep's rate.
    pub fn from_bins(first: f64, last: f64, sweep: &Sweep) -> Result<BinWindow, String> {
        let rate = sweep.stamp.rate;
        let first = first.round().max(0.0);
        let last = last.round();
        if last.is_nan() || last <= first + 1.0 {
            return Err(format!(
                "range window {:.0} to {:.0} m holds fewer than two range bins (sweep of {} bins)",
                first * range_bin_m(rate),
                last * range_bin_m(rate),
                sweep.iq.len()
            ));
        }
        if last - first > MAX_BINS as f64 {
            return Err(format!("range window spans {} bins; at most {MAX_BINS} can be averaged", last - first));
        }
        Ok(BinWindow { first: first as usize, len: (last - first) as usize, rate })
    }

    pub fn bin_m(&self) -> f64 {
        range_bin_m(self.rate)
    }
    /// Range of window bin `k` (may be fractional).
    pub fn range_m(&self, k: f64) -> f64 {
        (self.first as f64 + k) * self.bin_m()
    }
    pub fn start_m(&self) -> f64 {
        self.range_m(0.0)
    }
    pub fn end_m(&self) -> f64 {
        self.range_m(self.len as f64)
    }
}

/// Power averaged per range bin over many sweeps: a running mean of all
/// sweeps, or (with `memory` > 0) an exponential average that weighs about
/// the last `memory` sweeps. One accumulator per bin.
#[derive(Clone, Debug)]
pub struct SweepAverage {
    pub window: BinWindow,
    power: Vec<f64>,
    counts: Vec<u64>,
    /// Plain mean: the window bins the first sweep reached and how many
    /// sweeps reached exactly those. Such a sweep (nearly every one: the
    /// same blanking and length) is counted here once instead of in each
    /// bin of `counts`, which holds the other sweeps.
    usual_reach: Option<(usize, usize)>,
    usual_sweeps: u64,
    memory: u64,
    pub sweeps: u64,
    pub first_stamp: Stamp,
}

impl SweepAverage {
    pub fn new(window: BinWindow, memory: u64, first_stamp: Stamp) -> SweepAverage {
        SweepAverage {
            window,
            power: vec![0.0; window.len],
            counts: vec![0; window.len],
            usual_reach: None,
            usual_sweeps: 0,
            memory,
            sweeps: 0,
            first_stamp,
        }
    }

    /// Add one sweep; bins it does not reach keep their value.
    pub fn add(&mut self, sweep: &Sweep) -> Result<(), BlockError> {
        if sweep.stamp.rate != self.window.rate {
            return Err(BlockError::at(
                format!("sweep sample rate changed from {} to {} S/s", self.window.rate, sweep.stamp.rate),
                sweep.stamp.index,
            ));
        }
        let first = self.window.first.max(sweep.blanked as usize);
        let end = (self.window.first + self.window.len).min(sweep.iq.len());
        if first < end {
            let src = &sweep.iq[first..end];
            let k0 = first - self.window.first;
            let power = &mut self.power[k0..k0 + src.len()];
            let counts = &mut self.counts[k0..k0 + src.len()];
            if self.memory == 0 {
                // Plain mean: keep sums, divide once when drawing.
                add_powers(power, src);
                let reach = (k0, k0 + src.len());
                match self.usual_reach {
                    Some(usual) if usual == reach => self.usual_sweeps += 1,
                    Some(_) => counts.iter_mut().for_each(|c| *c += 1),
                    None => {
                        self.usual_reach = Some(reach);
                        self.usual_sweeps = 1;
                    }
                }
            } else {
                let bins = power.iter_mut().zip(counts.iter_mut()).zip(src);
                // Running mean while warming up, then a fixed weight 1/memory.
                let m = self.memory;
                let weight = 1.0 / m as f64;
                for ((p, c), x) in bins {
                    *c += 1;
                    let v = f64::from(x.norm_sqr());
                    let w = if *c >= m { weight } else { 1.0 / *c as f64 };
                    *p += (v - *p) * w;
                }
            }
        }
        self.sweeps += 1;
        Ok(())
    }

    /// Mean (or exponentially averaged) power of window bin `k`.
    pub fn power_at(&self, k: usize) -> Option<f64> {
        let usual = match self.usual_reach {
            Some((a, b)) if (a..b).contains(&k) => self.usual_sweeps,
            _ => 0,
        };
        match (self.counts.get(k), self.power.get(k)) {
            (Some(&c), Some(&p)) if c + usual > 0 => Some(if self.memory == 0 { p / (c + usual) as f64 } else { p }),
            _ => None,
        }
    }

    /// RMS amplitude per bin; NaN for bins no sweep reached.
    pub fn amplitude(&self) -> Vec<f64> {
        (0..self.window.len).map(|k| self.power_at(k).map_or(f64::NAN, |p| p.max(0.0).sqrt())).collect()
    }

    /// Amplitude in dB (20 log10 of the RMS amplitude), floored at -300 dB.
    pub fn amplitude_db(&self) -> Vec<f64> {
        self.amplitude().into_iter().map(|a| if a.is_nan() { a } else { 20.0 * a.max(1e-15).log10() }).collect()
    }

    /// Mean power over window bins `lo..hi` (clipped), ignoring unreached bins.
    pub fn mean_power(&self, lo: usize, hi: usize) -> Option<f64> {
        let hi = hi.min(self.window.len);
        let (mut s, mut n) = (0.0, 0);
        for p in (lo.min(hi)..hi).filter_map(|k| self.power_at(k)) {
            s += p;
            n += 1;
        }
        (n > 0).then(|| s / n as f64)
    }
}

/// Most separate lobe groups a picture keeps.
pub const MAX_GROUPS: usize = 16;

/// Averaged sweeps per lobe (or one group for all), in lobe order.
#[derive(Default)]
pub struct LobeAverages {
    pub groups: Vec<(String, usize, SweepAverage)>,
    pub memory: u64,
    /// Sweeps that fitted no group (more than [`MAX_GROUPS`] lobes).
    pub dropped: u64,
}

impl LobeAverages {
    pub fn new(memory: u64) -> Self {
        LobeAverages { memory, ..Default::default() }
    }

    /// Add `sweep` to the group `name` (lobe index `order`), creating it if
    /// new; `window` is called once, at the very first sweep. Returns false
    /// when the sweep was dropped for want of room.
    pub fn add(
        &mut self,
        name: &str,
        order: usize,
        sweep: &Sweep,
        window: impl FnOnce(&Sweep) -> Result<BinWindow, BlockError>,
    ) -> Result<bool, BlockError> {
        if let Some(g) = self.groups.iter_mut().find(|g| g.0 == name) {
            g.2.add(sweep)?;
            return Ok(true);
        }
        if self.groups.len() >= MAX_GROUPS {
            self.dropped += 1;
            return Ok(false);
        }
        let w = match self.groups.first() {
            Some(g) => g.2.window,
            None => window(sweep)?,
        };
        let mut avg = SweepAverage::new(w, self.memory, sweep.stamp);
        avg.add(sweep)?;
        self.groups.push((name.to_string(), order, avg));
        self.groups.sort_by(|a, b| a.1.cmp(&b.1).then_with(|| a.0.cmp(&b.0)));
        Ok(true)
    }

    pub fn get(&self, name: &str) -> Option<&SweepAverage> {
        self.groups.iter().find(|g| g.0 == name).map(|g| &g.2)
    }

    pub fn window(&self) -> Option<BinWindow> {
        self.groups.first().map(|g| g.2.window)
    }
}

/// Reduce a series to at most about `max_points` points, keeping each
/// group's minimum and maximum (so narrow echoes survive).
pub fn decimate_min_max(points: &[(f64, f64)], max_points: usize) -> Vec<(f64, f64)> {
    let finite: Vec<(f64, f64)> = points.iter().copied().filter(|p| p.0.is_finite() && p.1.is_finite()).collect();
    if finite.len() <= max_points.max(2) {
        return finite;
    }
    let group = finite.len().div_ceil(max_points.max(2) / 2);
    let mut out = Vec::with_capacity(max_points + 2);
    for chunk in finite.chunks(group) {
        let lo = chunk.iter().min_by(|a, b| a.1.total_cmp(&b.1)).copied();
        let hi = chunk.iter().max_by(|a, b| a.1.total_cmp(&b.1)).copied();
        if let (Some(lo), Some(hi)) = (lo, hi) {
            if lo.0 <= hi.0 {
                out.extend([lo, hi]);
            } else {
                out.extend([hi, lo]);
            }
        }
    }
    out
}

/// Median of the finite values (None if there are none).
pub fn median(values: &[f64]) -> Option<f64> {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return None;
    }
    v.sort_by(|a, b| a.total_cmp(b));
    Some(v[v.len() / 2])
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::{FromParam, ParamSpec, ParamType, Params, RawValue};
    use num_complex::Complex32;

    fn sweep(values: &[f32], index: u64) -> Sweep {
        Sweep {
            stamp: Stamp::new(index, 4e6),
            pulse: 0,
            iq: values.iter().map(|&v| Complex32::new(v, 0.0)).collect::<Vec<_>>().into(),
            sync: None,
            blanked: 0,
            predicted: false,
            lobe: None,
        }
    }

    /// The window a `start`..`end` setting pair (as written in a graph) gives for `sweep`.
    fn window(start: &str, end: &str, sweep: &Sweep) -> Result<BinWindow, BlockError> {
        let mut p = Params::new();
        let spec =
            |name| ParamSpec { name, ty: ParamType::Distance { min_m: 0.0, max_m: 1e7 }, default: None, doc: "" };
        p.insert("start", spec("start").parse(&RawValue::Text(start.into())).unwrap());
        p.insert("end", spec("end").parse(&RawValue::Text(end.into())).unwrap());
        let start = DistanceSetting::from_param(&p, &spec("start")).unwrap();
        let end = DistanceSetting::from_param(&p, &spec("end")).unwrap();
        BinWindow::from_settings(&start, &end, sweep)
    }

    #[test]
    fn running_mean_and_exponential_memory() {
        let s0 = sweep(&[1.0, 2.0, 0.0, 0.0], 0);
        let w = window("0 m", "0 m", &s0).unwrap();
        assert_eq!(w, BinWindow { first: 0, len: 4, rate: 4e6 });
        let mut all = SweepAverage::new(w, 0, s0.stamp);
        let mut last2 = SweepAverage::new(w, 2, s0.stamp);
        for (k, v) in [1.0f32, 3.0, 5.0].iter().enumerate() {
            let s = sweep(&[*v, 0.0, 0.0, 0.0], 1000 * k as u64);
            all.add(&s).unwrap();
            last2.add(&s).unwrap();
        }
        // Powers 1, 9, 25: mean 35/3; exponential with weight 1/2 after two: (1+9)/2 then halfway to 25.
        assert!((all.amplitude()[0] - (35.0f64 / 3.0).sqrt()).abs() < 1e-12);
        assert!((last2.amplitude()[0] - 15.0f64.sqrt()).abs() < 1e-12);
    }

    #[test]
    fn a_bin_averages_only_the_sweeps_that_reached_it() {
        let w = BinWindow { first: 0, len: 4, rate: 4e6 };
        let mut avg = SweepAverage::new(w, 0, Stamp::new(0, 4e6));
        // Powers 4 in every bin, twice; then 16 with two bins blanked; then
        // 36 in a sweep one bin short; a bin nothing reached stays empty.
        for (value, blanked, len) in [(2.0f32, 0, 4), (2.0, 0, 4), (4.0, 2, 4), (6.0, 0, 3)] {
            let mut s = sweep(&vec![value; len], 0);
            s.blanked = blanked;
            avg.add(&s).unwrap();
        }
        let means: Vec<f64> = (0..4).map(|k| avg.power_at(k).unwrap()).collect();
        assert_eq!(means, [(4.0 + 4.0 + 36.0) / 3.0, 44.0 / 3.0, (4.0 + 4.0 + 16.0 + 36.0) / 4.0, 24.0 / 3.0]);
        let never = SweepAverage::new(w, 0, Stamp::new(0, 4e6));
        assert_eq!(never.power_at(0), None);
    }

    #[test]
    fn window_in_metres_and_bins() {
        let s = sweep(&[0.0; 400], 0);
        // 37.47 m per bin at 4 MS/s (docs/derivations.md, section 5): 1.5 km starts at bin 40.
        let w = window("1.5 km", "100 bins", &s).unwrap();
        assert_eq!((w.first, w.len), (40, 60));
        assert!(window("100 bins", "100 bins", &s).is_err());
        let mut avg = SweepAverage::new(w, 0, s.stamp);
        let mut other_rate = s.clone();
        other_rate.stamp.rate = 2e6;
        assert!(avg.add(&other_rate).is_err());
    }

    #[test]
    fn decimation_keeps_narrow_peaks() {
        let pts: Vec<(f64, f64)> = (0..100_000).map(|k| (k as f64, if k == 51_234 { 9.0 } else { 0.0 })).collect();
        let d = decimate_min_max(&pts, 1000);
        assert!(d.len() <= 1002, "{}", d.len());
        assert!(d.iter().any(|p| p.1 == 9.0 && p.0 == 51_234.0));
        assert!(d.windows(2).all(|w| w[0].0 <= w[1].0));
    }
}

/// The range gate as a `range_gate` block reported it on its `gates` port
/// (metres from the transmit instant): the first gate set (fixed or
/// acquired), how far a following gate moved, and the noise region.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct GateReport {
    /// The first gate in use, (start, end) m.
    pub first: Option<(f64, f64)>,
    /// The least start and greatest end over every gate in use, m.
    pub span: Option<(f64, f64)>,
    /// The last gate in use, (start, end) m.
    pub last: Option<(f64, f64)>,
    /// The noise reference region, (start, end) m.
    pub noise: Option<(f64, f64)>,
    /// Echo length the gate takes off the centroid to give the leading edge, m.
    pub echo_length_m: f64,
    /// Gates in use: a row counts only when its gate differs from the
    /// last one (the gate reports itself every dwell); 1 for a gate that
    /// never moved.
    pub gates_in_use: u64,
}

impl GateReport {
    /// Take one row of a `gates` port; a row without the fields is an error
    /// naming the missing one.
    pub fn take(&mut self, row: &crate::TableRow) -> Result<(), BlockError> {
        let field = |name: &str| -> Result<f64, BlockError> {
            row.cell(name)
                .and_then(|c| match c {
                    crate::Cell::Num(v) if v.is_finite() => Some(*v),
                    _ => None,
                })
                .ok_or_else(|| {
                    BlockError::at(
                        format!("a gate row has no number '{name}': wire a range_gate's 'gates' output here"),
                        row.stamp.index,
                    )
                })
        };
        let gate = (field("gate_start_m")?, field("gate_end_m")?);
        self.noise = Some((field("noise_start_m")?, field("noise_end_m")?));
        self.echo_length_m = field("echo_length_m")?;
        if self.last != Some(gate) {
            self.gates_in_use += 1;
        }
        self.first.get_or_insert(gate);
        self.last = Some(gate);
        self.span = Some(self.span.map_or(gate, |(a, b)| (a.min(gate.0), b.max(gate.1))));
        Ok(())
    }

    /// What the gate did, for a legend: fixed or acquired where, and how far it followed.
    pub fn describe(&self) -> Option<String> {
        let (first, span) = (self.first?, self.span?);
        let km = |m: f64| format!("{:.2}", m / 1e3);
        Some(if self.gates_in_use > 1 {
            format!("gate {}–{} km, followed over {}–{} km", km(first.0), km(first.1), km(span.0), km(span.1))
        } else {
            format!("gate {}–{} km", km(first.0), km(first.1))
        })
    }
}
