//! Finding the period of a train of events (switch instants) by folding.
//!
//! A feature sequence that is large at each event is folded at a candidate
//! period: at the true period, or any multiple of it, one phase collects
//! every event; at a fraction of it, only some. The contrast (best phase
//! over the mean) is therefore as high at twice the period as at the period
//! itself, and the answer is the *shortest* period whose contrast reaches
//! most of the best one: the fundamental, never a harmonic or a multiple.

/// Share of the best autocorrelation peak a shorter lag must reach to be
/// taken as the fundamental.
const FUNDAMENTAL_SHARE: f64 = 0.7;
/// An autocorrelation peak must stand this many of its noise deviations.
const MIN_PEAK_SD: f64 = 5.0;
/// Multiples of a lag whose autocorrelation peaks are summed.
const COMB_MULTIPLES: usize = 8;

/// Result of folding at whole periods.
#[derive(Clone, Debug, PartialEq)]
pub struct Folded {
    /// Period in steps of the sequence.
    pub period: usize,
    /// Phase (index mod period) of the events.
    pub phase: usize,
    /// The autocorrelation at the period over its noise deviation.
    pub significance: f64,
}

/// Mean of `x` at each of `bins` phases of a (possibly fractional) period.
fn phase_means(x: &[f64], period: f64, bins: usize) -> Vec<f64> {
    let mut sum = vec![0.0; bins];
    let mut n = vec![0usize; bins];
    for (i, &v) in x.iter().enumerate() {
        let b = (((i as f64).rem_euclid(period)) / period * bins as f64) as usize;
        sum[b.min(bins - 1)] += v;
        n[b.min(bins - 1)] += 1;
    }
    sum.iter().zip(&n).map(|(s, &c)| if c > 0 { s / c as f64 } else { 0.0 }).collect()
}

/// Autocorrelation of `x` (mean removed) at lags 0..=max, each over the
/// pairs it has.
fn autocorrelation(x: &[f64], max: usize) -> Vec<f64> {
    let n = x.len();
    let m = x.iter().sum::<f64>() / n as f64;
    let y: Vec<f64> = x.iter().map(|v| v - m).collect();
    (0..=max.min(n - 1))
        .map(|l| y[..n - l].iter().zip(&y[l..]).map(|(a, b)| a * b).sum::<f64>() / (n - l) as f64)
        .collect()
}

/// The fundamental period of an event train in `x`, in whole steps, with
/// its significance. The autocorrelation of a train of events of period P
/// peaks at P, 2P, 3P... about equally and not at P/2, and averaging over all
/// pairs (instead of taking the best of many phases) keeps noise from
/// favouring long lags: the shortest lag whose peak reaches most of the
/// highest one is the fundamental.
pub fn fundamental_lag(x: &[f64], max_lag: usize) -> Option<(usize, f64)> {
    let max_lag = max_lag.min(x.len() / 4);
    if max_lag < 3 {
        return None;
    }
    let r = autocorrelation(x, max_lag + 1);
    let r0 = r[0].max(1e-300);
    let noise = |l: usize| r0 / ((x.len() - l) as f64).sqrt();
    // a peak's height over the median of the lags from half to one and a
    // half times it: a slowly changing level lifts all lags alike, events
    // lift only their own
    let prominence = |l: usize| {
        let mut around: Vec<f64> = r[(l / 2).max(1)..=(l + l / 2).min(max_lag + 1)].to_vec();
        around.sort_by(f64::total_cmp);
        r[l] - around[around.len() / 2]
    };
    let prom: Vec<f64> = (0..=max_lag).map(|l| if l < 2 { 0.0 } else { prominence(l) }).collect();
    // the mean prominence at the first multiples of a lag (each the best
    // within a lag or so, as a fractional period drifts): weak events that
    // repeat add up, and a lag half the period scores half
    let comb = |l: usize| {
        let (mut sum, mut k) = (0.0, 0usize);
        while (k + 1) * l + 1 + (k + 1) / 4 <= max_lag && k < COMB_MULTIPLES {
            k += 1;
            let reach = 1 + k / 4;
            sum += prom[k * l - reach..=k * l + reach].iter().cloned().fold(f64::NEG_INFINITY, f64::max);
        }
        (if k > 0 { sum / k as f64 } else { 0.0 }, k)
    };
    let scored: Vec<(usize, f64, f64)> = (2..=max_lag / 2)
        .filter(|&l| r[l] >= r[l - 1] && r[l] >= r[l + 1])
        .map(|l| {
            let (c, k) = comb(l);
            (l, c, c * (k as f64).sqrt() / noise(l))
        })
        .filter(|s| s.2 > MIN_PEAK_SD)
        .collect();
    let best = scored.iter().map(|s| s.1).fold(f64::NEG_INFINITY, f64::max);
    let &(lag, _, significance) = scored.iter().find(|s| s.1 >= FUNDAMENTAL_SHARE * best)?;
    Some((lag, significance))
}

/// The event period of `x` among 2..=max_period steps (at least four events
/// must fit), with the phase of the events.
pub fn whole_period(x: &[f64], max_period: usize) -> Option<Folded> {
    let (period, significance) = fundamental_lag(x, max_period)?;
    let means = phase_means(x, period as f64, period);
    let phase = (0..period).max_by(|&a, &b| means[a].total_cmp(&means[b]))?;
    Some(Folded { period, phase, significance })
}

/// A fractional period near the whole lag `lag`: the autocorrelation peak
/// near the largest multiple of it that fits, located by a parabola and
/// divided by the multiple; then the fold (one bin per step) whose two
/// strongest neighbouring bins stand highest within a step either side.
/// Returns (period, phase of the events' first bin).
pub fn fractional_period(x: &[f64], lag: usize, max_lag: usize) -> (f64, f64) {
    let k = (max_lag / lag).max(1);
    let r = autocorrelation(x, k * lag + 2);
    let c = k * lag;
    let (a, b, d) = (r[c - 1], r[c], r[c + 1]);
    let den = a - 2.0 * b + d;
    let shift = if den < 0.0 { (0.5 * (a - d) / den).clamp(-0.5, 0.5) } else { 0.0 };
    let p0 = (c as f64 + shift) / k as f64;
    let score = |p: f64| {
        let bins = p.floor() as usize;
        let m = phase_means(x, p, bins);
        (0..bins).map(|i| (i, m[i] + m[(i + 1) % bins])).max_by(|a, b| a.1.total_cmp(&b.1)).unwrap_or((0, 0.0))
    };
    let steps = 200;
    let span = 1.0 / k as f64;
    let mut best = (p0, score(p0));
    for j in 0..=steps {
        let p = p0 - span + 2.0 * span * j as f64 / steps as f64;
        let s = score(p);
        if s.1 > best.1.1 {
            best = (p, s);
        }
    }
    (best.0, best.1.0 as f64 * best.0 / best.0.floor())
}

/// A straight line `t = intercept + slope * k` through event times.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LineFit {
    pub slope: f64,
    pub intercept: f64,
    /// Standard deviation of the events about the line (their jitter).
    pub jitter: f64,
    /// Standard error of the slope.
    pub slope_se: f64,
    /// Standard error of the line's value at k = 0.
    pub intercept_se: f64,
    pub used: usize,
}

/// Least-squares line through (k, t), refitted once without the events
/// further than four deviations (or `floor`) from the first line.
pub fn line_fit(points: &[(f64, f64)], floor: f64) -> Option<LineFit> {
    let first = fit_once(points)?;
    let limit = (4.0 * first.jitter).max(floor);
    let kept: Vec<(f64, f64)> =
        points.iter().copied().filter(|&(k, t)| (t - first.intercept - first.slope * k).abs() <= limit).collect();
    fit_once(&kept).or(Some(first))
}

fn fit_once(points: &[(f64, f64)]) -> Option<LineFit> {
    let n = points.len() as f64;
    if points.len() < 3 {
        return None;
    }
    let mk = points.iter().map(|p| p.0).sum::<f64>() / n;
    let mt = points.iter().map(|p| p.1).sum::<f64>() / n;
    let sxx = points.iter().map(|p| (p.0 - mk).powi(2)).sum::<f64>();
    if sxx <= 0.0 {
        return None;
    }
    let slope = points.iter().map(|p| (p.0 - mk) * (p.1 - mt)).sum::<f64>() / sxx;
    let intercept = mt - slope * mk;
    let ss = points.iter().map(|p| (p.1 - intercept - slope * p.0).powi(2)).sum::<f64>();
    let jitter = (ss / (n - 2.0)).sqrt();
    Some(LineFit {
        slope,
        intercept,
        jitter,
        slope_se: jitter / sxx.sqrt(),
        intercept_se: jitter * (1.0 / n + mk * mk / sxx).sqrt(),
        used: points.len(),
    })
}

/// Sub-step position of the largest value of `x` within `lo..hi` (a
/// centroid of the peak and its two neighbours above the window's median).
pub fn peak_in(x: &[f32], lo: usize, hi: usize) -> Option<(f64, f32)> {
    let hi = hi.min(x.len());
    if hi <= lo + 2 {
        return None;
    }
    let w = &x[lo..hi];
    let mut sorted = w.to_vec();
    sorted.sort_by(f32::total_cmp);
    let median = sorted[sorted.len() / 2];
    let (at, peak) = w.iter().enumerate().fold((0, f32::NEG_INFINITY), |a, (i, &v)| if v > a.1 { (i, v) } else { a });
    let mut num = 0.0f64;
    let mut den = 0.0f64;
    let from = at.saturating_sub(1);
    for (j, &x) in w.iter().enumerate().take((at + 2).min(w.len())).skip(from) {
        let v = f64::from((x - median).max(0.0));
        num += v * j as f64;
        den += v;
    }
    let centre = if den > 0.0 { num / den } else { at as f64 };
    Some((lo as f64 + centre, peak - median))
}

/// Events of `feature`: the period from block sums of `w` samples, then
/// each event located to a fraction of a sample, walking from one to the
/// next, and a line through them. Returns the line and the significance.
pub fn find_events(feature: &[f32], w: usize) -> Option<(LineFit, f64)> {
    let blocks: Vec<f64> = feature.chunks(w).map(|c| c.iter().map(|&v| f64::from(v)).sum()).collect();
    let max_lag = blocks.len() / 8;
    let (lag, significance) = fundamental_lag(&blocks, max_lag)?;
    if lag < 4 {
        return None; // too few blocks per dwell at this window: a shorter one sees it
    }
    let (period_blocks, phase_blocks) = fractional_period(&blocks, lag, max_lag);
    let mut events: Vec<f64> = Vec::new();
    let mut period = period_blocks * w as f64;
    let mut guess = phase_blocks * w as f64 + w as f64 / 2.0;
    while guess + 2.0 * w as f64 <= feature.len() as f64 {
        let lo = (guess - 1.5 * w as f64).max(0.0) as usize;
        if let Some((at, _)) = peak_in(feature, lo, lo + 3 * w) {
            if let Some(&first) = events.first() {
                period = (at - first) / ((at - first) / period).round().max(1.0);
            }
            events.push(at);
            guess = at + period;
        } else {
            guess += period;
        }
    }
    let first = *events.first()?;
    let points: Vec<(f64, f64)> = events.iter().map(|&t| (((t - first) / period).round(), t)).collect();
    let fit = line_fit(&points, w as f64)?;
    // events too weak to locate one by one wander off the folded period:
    // then the fold's own period and phase stand, good to a block
    let folded = period_blocks * w as f64;
    let drift = (fit.slope - folded).abs() * fit.used as f64;
    if drift > w as f64 || fit.jitter > w as f64 / 2.0 {
        let n = (feature.len() as f64 / folded).floor().max(1.0);
        return Some((
            LineFit {
                slope: folded,
                intercept: phase_blocks * w as f64,
                jitter: w as f64,
                slope_se: w as f64 / n / 4.0,
                intercept_se: w as f64 / 4.0,
                used: n as usize,
            },
            significance,
        ));
    }
    Some((fit, significance))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fundamental_not_multiple_or_harmonic() {
        // events every 7 steps at phase 3, plus a weaker pattern every 14
        let x: Vec<f64> = (0..700)
            .map(|i| if i % 7 == 3 { 5.0 } else { 0.0 } + if i % 14 == 3 { 1.0 } else { 0.0 } + ((i * 37 % 11) as f64) * 0.05)
            .collect();
        let f = whole_period(&x, 60).unwrap();
        assert_eq!((f.period, f.phase), (7, 3));
        assert!(f.significance > 10.0);
        // (a period of 9.6 steps is picked as 19: fractional periods of a few
        // steps are a known limit of the whole-lag search)
    }

    #[test]
    fn line_fit_recovers_slope_and_drops_an_outlier() {
        let mut pts: Vec<(f64, f64)> =
            (0..50).map(|k| (k as f64, 3.0 + 97.56 * k as f64 + if k % 2 == 0 { 0.2 } else { -0.2 })).collect();
        pts[10].1 += 40.0;
        let f = line_fit(&pts, 1.0).unwrap();
        assert!((f.slope - 97.56).abs() < 0.01, "{f:?}");
        assert_eq!(f.used, 49);
        assert!((f.jitter - 0.2).abs() < 0.02);
    }

    #[test]
    fn peak_between_samples() {
        let x = [0.0f32, 0.0, 1.0, 1.0, 0.0, 0.0, 0.0];
        let (at, h) = peak_in(&x, 0, 7).unwrap();
        assert!((at - 2.5).abs() < 1e-9 && h == 1.0);
    }
}
