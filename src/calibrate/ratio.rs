//! The discriminator curve itself: the ratio of the pair's lobes against
//! the source's off-axis angle, read near boresight by a weighted cubic
//! (ratio at boresight, slope, crossover), and the angle residuals of a
//! fitted pattern over the usable region.

use super::fit::{Solution, linear};
use super::scan::RatioPoint;
use lobeflow_blocks::dsp::beam::PairModel;
use std::f64::consts::LN_10;

/// Nepers of amplitude ratio to dB.
pub const DB_PER_NEPER: f64 = 20.0 / LN_10;

/// The curve near boresight.
#[derive(Clone, Debug)]
pub struct LocalFit {
    /// Half-width of the angle window fitted, degrees.
    pub window_deg: f64,
    pub points: usize,
    pub ratio0_db: f64,
    pub ratio0_sigma_db: f64,
    pub slope_db_per_deg: f64,
    pub slope_sigma: f64,
    pub crossover_deg: f64,
    pub crossover_sigma: f64,
    pub solution: Solution,
}

/// Polynomial degree of the local fit: a cubic follows an odd curve with
/// its first bend, and the square term takes up any asymmetry.
const DEGREE: usize = 3;

/// Fit `r(theta) = a0 + a1 theta + a2 theta^2 + a3 theta^3` to the ratios
/// with |theta| <= window, weighted by the dwells' variances.
pub fn local_fit(points: &[RatioPoint], window_deg: f64) -> Result<LocalFit, String> {
    let rows: Vec<(Vec<f64>, f64, f64)> = points
        .iter()
        .filter(|p| p.theta.abs() <= window_deg)
        .map(|p| ((0..=DEGREE).map(|k| p.theta.powi(k as i32)).collect(), p.r, 1.0 / p.var))
        .collect();
    if rows.len() < 3 * (DEGREE + 1) {
        return Err(format!(
            "only {} ratios within {window_deg:.2} deg of boresight; the fit near the crossover needs at least {}",
            rows.len(),
            3 * (DEGREE + 1)
        ));
    }
    let s = linear(&rows).ok_or("the ratios near boresight do not determine a curve (all at one angle?)")?;
    let a = &s.params;
    let poly = |x: f64| a.iter().enumerate().map(|(k, c)| c * x.powi(k as i32)).sum::<f64>();
    let deriv = |x: f64| a.iter().enumerate().skip(1).map(|(k, c)| k as f64 * c * x.powi(k as i32 - 1)).sum::<f64>();
    // Newton from the linear estimate; the crossover lies near boresight.
    let mut x0 = -a[0] / a[1];
    for _ in 0..50 {
        let step = poly(x0) / deriv(x0);
        x0 -= step;
        if step.abs() < 1e-12 {
            break;
        }
    }
    if !x0.is_finite() || x0.abs() > window_deg {
        return Err(format!(
            "the ratio does not cross 0 dB within {window_deg:.2} deg of boresight (ratio at boresight {:.2} dB)",
            a[0] * DB_PER_NEPER
        ));
    }
    // Delta method: d x0 / d a_k = -x0^k / r'(x0).
    let g: Vec<f64> = (0..=DEGREE).map(|k| -x0.powi(k as i32) / deriv(x0)).collect();
    let mut var = 0.0;
    for i in 0..=DEGREE {
        for j in 0..=DEGREE {
            var += g[i] * g[j] * s.cov[i][j];
        }
    }
    Ok(LocalFit {
        window_deg,
        points: rows.len(),
        ratio0_db: a[0] * DB_PER_NEPER,
        ratio0_sigma_db: s.sigma(0) * DB_PER_NEPER,
        slope_db_per_deg: a[1] * DB_PER_NEPER,
        slope_sigma: s.sigma(1) * DB_PER_NEPER,
        crossover_deg: x0,
        crossover_sigma: var.max(0.0).sqrt(),
        solution: s,
    })
}

/// Angle read back through `model` from each ratio after removing the
/// imbalance `imbalance` (nepers), minus the telemetry's angle; None
/// outside the usable region.
pub fn angle_residual(model: &PairModel, imbalance: f64, p: &RatioPoint) -> Option<f64> {
    if p.theta.abs() > model.limit_deg {
        return None;
    }
    model.angle(p.r - imbalance).map(|a| a - p.theta)
}

/// RMS of the angle residuals over the usable region, and how many.
pub fn residual_rms(model: &PairModel, imbalance: f64, points: &[RatioPoint]) -> (f64, usize) {
    let r: Vec<f64> = points.iter().filter_map(|p| angle_residual(model, imbalance, p)).collect();
    if r.is_empty() {
        return (f64::NAN, 0);
    }
    ((r.iter().map(|v| v * v).sum::<f64>() / r.len() as f64).sqrt(), r.len())
}

/// Parts of [-limit, limit] the scan's angles leave uncovered: the ends
/// beyond its reach and holes wider than `max_hole` degrees.
pub fn coverage_gaps(thetas: &[f64], limit: f64, max_hole: f64) -> Vec<(f64, f64)> {
    let mut t: Vec<f64> = thetas.iter().copied().filter(|x| x.abs() <= limit).collect();
    t.sort_by(f64::total_cmp);
    let mut gaps = Vec::new();
    let mut prev = -limit;
    for &x in t.iter().chain(std::iter::once(&limit)) {
        if x - prev > max_hole {
            gaps.push((prev, x));
        }
        prev = x;
    }
    gaps
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pt(theta: f64, r: f64) -> RatioPoint {
        RatioPoint { time_s: 0.0, pair: 0, theta, r, var: 1e-4, plus_y: 0.0, minus_y: 0.0 }
    }

    #[test]
    fn a_cubic_curve_gives_back_its_numbers() {
        // r = 0.05 + 0.2 x - 0.001 x^3 (nepers): ratio at boresight
        // 0.4343 dB, slope 1.737 dB/deg, root near -0.25 deg.
        let pts: Vec<_> =
            (-40..=40).map(|i| i as f64 * 0.1).map(|x| pt(x, 0.05 + 0.2 * x - 0.001 * x.powi(3))).collect();
        let f = local_fit(&pts, 3.0).unwrap();
        assert!((f.ratio0_db - 0.05 * DB_PER_NEPER).abs() < 1e-9);
        assert!((f.slope_db_per_deg - 0.2 * DB_PER_NEPER).abs() < 1e-9);
        let root = f.crossover_deg;
        assert!((0.05 + 0.2 * root - 0.001 * root.powi(3)).abs() < 1e-12 && (root + 0.25).abs() < 0.01);
        assert!(local_fit(&pts[..5], 3.0).is_err());
    }

    #[test]
    fn gaps_name_the_missing_parts() {
        let t: Vec<f64> = (-20..=10).map(|i| i as f64 * 0.1).filter(|x| !(0.3..0.9).contains(x)).collect();
        let g = coverage_gaps(&t, 3.0, 0.25);
        assert_eq!(g.len(), 3, "{g:?}");
        assert!((g[0].0 + 3.0).abs() < 1e-9 && (g[0].1 + 2.0).abs() < 1e-9);
        assert!((g[2].0 - 1.0).abs() < 1e-9 && (g[2].1 - 3.0).abs() < 1e-9);
    }
}
