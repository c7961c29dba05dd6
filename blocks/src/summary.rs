//! Per-axis figures of a stream of angle estimates, kept as they pass: the
//! one definition the angle plot's legend and the run's report page share,
//! so the two always print the same numbers.

use crate::{AngleEstimate, Flag};

/// Most predicted σ values kept for the median (8 bytes each); past this the
/// median is taken over the first ones kept.
pub const MAX_SIGMAS: usize = 1 << 20;

/// Figures of one axis. Mean and RMS are over the ordinary (`ok`)
/// estimates' angle values; `median_sigma` is the median of their predicted
/// one-sigma spread.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct AxisSummary {
    pub axis: String,
    pub ok: u64,
    pub out_of_range: u64,
    pub no_signal: u64,
    pub outliers: u64,
    sum: f64,
    sum_sq: f64,
    sigmas: Vec<f64>,
    /// Sum and count of the ok estimates' ranges (the echo's leading edge).
    range_sum: f64,
    ranges: u64,
}

impl AxisSummary {
    pub fn new(axis: &str) -> AxisSummary {
        AxisSummary { axis: axis.to_string(), ..AxisSummary::default() }
    }

    pub fn add(&mut self, e: &AngleEstimate) {
        match (e.flag, e.error_deg.filter(|v| v.is_finite())) {
            (Flag::Ok, Some(v)) => {
                self.ok += 1;
                self.sum += v;
                self.sum_sq += v * v;
                if let Some(r) = e.range_m.filter(|r| r.is_finite()) {
                    self.range_sum += r;
                    self.ranges += 1;
                }
                if e.sigma_deg.is_finite() && self.sigmas.len() < MAX_SIGMAS {
                    self.sigmas.push(e.sigma_deg);
                }
            }
            (Flag::Outlier, _) => self.outliers += 1,
            (Flag::OutOfRange, _) => self.out_of_range += 1,
            _ => self.no_signal += 1,
        }
    }

    /// Every estimate of the axis, whatever its flag.
    pub fn count(&self) -> u64 {
        self.ok + self.out_of_range + self.no_signal + self.outliers
    }

    pub fn mean(&self) -> Option<f64> {
        (self.ok > 0).then(|| self.sum / self.ok as f64)
    }

    /// Root mean square of the angle values (about zero, i.e. boresight).
    pub fn rms(&self) -> Option<f64> {
        (self.ok > 0).then(|| (self.sum_sq / self.ok as f64).sqrt())
    }

    /// Sample standard deviation of the angle values about their mean.
    pub fn std_dev(&self) -> Option<f64> {
        let n = self.ok as f64;
        (self.ok > 1).then(|| ((self.sum_sq - self.sum * self.sum / n).max(0.0) / (n - 1.0)).sqrt())
    }

    /// Mean range of the ok estimates that carry one: the echo's leading
    /// edge (docs/derivations.md §5); None for a beacon.
    pub fn mean_range_m(&self) -> Option<f64> {
        (self.ranges > 0).then(|| self.range_sum / self.ranges as f64)
    }

    /// Median of the predicted one-sigma spreads.
    pub fn median_sigma(&self) -> Option<f64> {
        let mut v = self.sigmas.clone();
        if v.is_empty() {
            return None;
        }
        v.sort_by(|a, b| a.total_cmp(b));
        let m = v.len() / 2;
        Some(if v.len() % 2 == 1 { v[m] } else { 0.5 * (v[m - 1] + v[m]) })
    }

    /// `mean`, `rms`, `median σ` as the legend and the page print them.
    pub fn figure(v: Option<f64>) -> String {
        v.map_or_else(|| "–".to_string(), |x| format!("{x:.3}"))
    }
}

/// Summaries of every axis, in the order the axes first appeared.
#[derive(Clone, Debug, Default)]
pub struct EstimateSummary {
    pub axes: Vec<AxisSummary>,
}

/// Most axes summarised; estimates of further axes are counted in `other`.
pub const MAX_AXES: usize = 64;

impl EstimateSummary {
    pub fn add(&mut self, e: &AngleEstimate) {
        let axis: &str = &e.axis;
        if let Some(s) = self.axes.iter_mut().find(|s| s.axis == axis) {
            s.add(e);
        } else if self.axes.len() < MAX_AXES {
            let mut s = AxisSummary::new(axis);
            s.add(e);
            self.axes.push(s);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::Stamp;
    use std::sync::Arc;

    fn estimate(err: f64, sigma: f64, flag: Flag) -> AngleEstimate {
        AngleEstimate {
            stamp: Stamp::new(0, 1.0),
            axis: Arc::from("az"),
            error_deg: Some(err),
            sigma_deg: sigma,
            snr_db: 20.0,
            ratio_db: 0.0,
            range_m: None,
            flag,
            tracked_deg: None,
            tracked_sigma_deg: None,
            absolute_deg: None,
        }
    }

    #[test]
    fn figures_by_hand() {
        let mut s = EstimateSummary::default();
        // Values 1, 2, 3, 6: mean 3, mean square 50/4, sample variance 14/3.
        for (v, sg) in [(1.0, 0.4), (2.0, 0.1), (3.0, 0.3), (6.0, 0.2)] {
            s.add(&estimate(v, sg, Flag::Ok));
        }
        s.add(&estimate(40.0, 0.1, Flag::Outlier));
        s.add(&estimate(0.0, 0.1, Flag::OutOfRange));
        let a = &s.axes[0];
        assert_eq!((a.ok, a.outliers, a.out_of_range, a.no_signal, a.count()), (4, 1, 1, 0, 6));
        assert_eq!(a.mean(), Some(3.0));
        assert!((a.rms().unwrap() - 12.5f64.sqrt()).abs() < 1e-12);
        assert!((a.std_dev().unwrap() - (14.0f64 / 3.0).sqrt()).abs() < 1e-12);
        assert!((a.median_sigma().unwrap() - 0.25).abs() < 1e-12);
        assert_eq!(AxisSummary::figure(None), "–");
    }
}
