//! Least-squares machinery of the calibration: weighted normal equations
//! solved by Cholesky, and a Levenberg-Marquardt loop with a numerical
//! Jacobian (Press et al., Numerical Recipes, 3rd ed., section 15.5.2).
//!
//! Every fit returns its parameter covariance `(J^T W J)^-1` scaled by the
//! reduced chi-square (the Birge ratio): the dwells' own sigmas fix the
//! relative weights, the residuals fix the overall scale, so an imperfect
//! model or underestimated dwell noise widens the uncertainties instead of
//! hiding behind them.

/// A solved least-squares problem.
#[derive(Clone, Debug)]
pub struct Solution {
    pub params: Vec<f64>,
    /// Covariance of the parameters, already scaled by `reduced_chi2`.
    pub cov: Vec<Vec<f64>>,
    /// Sum of squared weighted residuals of the data rows.
    pub chi2: f64,
    /// Data rows minus parameters.
    pub dof: usize,
}

impl Solution {
    pub fn reduced_chi2(&self) -> f64 {
        if self.dof == 0 { f64::NAN } else { self.chi2 / self.dof as f64 }
    }

    /// Standard uncertainty of parameter `k`.
    pub fn sigma(&self, k: usize) -> f64 {
        self.cov[k][k].max(0.0).sqrt()
    }
}

/// Cholesky factor of a symmetric positive definite matrix (lower), or None.
fn cholesky(a: &[Vec<f64>]) -> Option<Vec<Vec<f64>>> {
    let n = a.len();
    let mut l = vec![vec![0.0; n]; n];
    for i in 0..n {
        for j in 0..=i {
            let s: f64 = a[i][j] - (0..j).map(|k| l[i][k] * l[j][k]).sum::<f64>();
            if i == j {
                if s.is_nan() || s <= 0.0 {
                    return None;
                }
                l[i][i] = s.sqrt();
            } else {
                l[i][j] = s / l[j][j];
            }
        }
    }
    Some(l)
}

fn cholesky_solve(l: &[Vec<f64>], b: &[f64]) -> Vec<f64> {
    let n = l.len();
    let mut y = vec![0.0; n];
    for i in 0..n {
        y[i] = (b[i] - (0..i).map(|k| l[i][k] * y[k]).sum::<f64>()) / l[i][i];
    }
    let mut x = vec![0.0; n];
    for i in (0..n).rev() {
        x[i] = (y[i] - (i + 1..n).map(|k| l[k][i] * x[k]).sum::<f64>()) / l[i][i];
    }
    x
}

/// Inverse of a symmetric positive definite matrix.
pub fn spd_inverse(a: &[Vec<f64>]) -> Option<Vec<Vec<f64>>> {
    let l = cholesky(a)?;
    let n = a.len();
    let mut inv = vec![vec![0.0; n]; n];
    for j in 0..n {
        let mut e = vec![0.0; n];
        e[j] = 1.0;
        let col = cholesky_solve(&l, &e);
        for i in 0..n {
            inv[i][j] = col[i];
        }
    }
    Some(inv)
}

/// Weighted linear least squares: rows of (basis values, y, weight).
pub fn linear(rows: &[(Vec<f64>, f64, f64)]) -> Option<Solution> {
    let p = rows.first()?.0.len();
    let mut a = vec![vec![0.0; p]; p];
    let mut b = vec![0.0; p];
    for (x, y, w) in rows {
        for i in 0..p {
            b[i] += w * x[i] * y;
            for j in 0..=i {
                a[i][j] += w * x[i] * x[j];
            }
        }
    }
    for i in 1..p {
        let (upper, lower) = a.split_at_mut(i);
        for (j, row) in upper.iter_mut().enumerate() {
            row[i] = lower[0][j];
        }
    }
    let l = cholesky(&a)?;
    let params = cholesky_solve(&l, &b);
    let chi2: f64 = rows
        .iter()
        .map(|(x, y, w)| {
            let f: f64 = x.iter().zip(&params).map(|(a, b)| a * b).sum();
            w * (y - f) * (y - f)
        })
        .sum();
    let dof = rows.len().saturating_sub(p);
    let mut cov = spd_inverse(&a)?;
    scale_cov(&mut cov, chi2, dof);
    Some(Solution { params, cov, chi2, dof })
}

fn scale_cov(cov: &mut [Vec<f64>], chi2: f64, dof: usize) {
    let s = if dof > 0 { chi2 / dof as f64 } else { 1.0 };
    for row in cov.iter_mut() {
        for v in row.iter_mut() {
            *v *= s;
        }
    }
}

/// Levenberg-Marquardt on `residuals(p)`: weighted residuals (already times
/// sqrt(weight)); the first `data_rows` are data, any further rows are
/// penalties that shape the solution but do not count as data. `steps` are
/// the finite-difference steps of each parameter.
pub fn levenberg_marquardt(
    p0: &[f64],
    steps: &[f64],
    data_rows: usize,
    residuals: impl Fn(&[f64]) -> Vec<f64>,
) -> Option<Solution> {
    let n = p0.len();
    let mut p = p0.to_vec();
    let mut r = residuals(&p);
    let cost = |r: &[f64]| r.iter().map(|v| v * v).sum::<f64>();
    let mut c = cost(&r);
    if !c.is_finite() {
        return None;
    }
    let mut lambda = 1e-3;
    let mut jtj = vec![vec![0.0; n]; n];
    for _ in 0..200 {
        let jac = jacobian(&p, steps, &residuals);
        let mut g = vec![0.0; n];
        for i in 0..n {
            g[i] = -jac[i].iter().zip(&r).map(|(a, b)| a * b).sum::<f64>();
            for j in 0..=i {
                jtj[i][j] = jac[i].iter().zip(&jac[j]).map(|(a, b)| a * b).sum();
                jtj[j][i] = jtj[i][j];
            }
        }
        let mut improved = false;
        for _ in 0..30 {
            let mut a = jtj.clone();
            for (i, row) in a.iter_mut().enumerate() {
                row[i] *= 1.0 + lambda;
                row[i] += 1e-12;
            }
            let Some(l) = cholesky(&a) else {
                lambda *= 10.0;
                continue;
            };
            let dp = cholesky_solve(&l, &g);
            let trial: Vec<f64> = p.iter().zip(&dp).map(|(a, b)| a + b).collect();
            let rt = residuals(&trial);
            let ct = cost(&rt);
            if ct.is_finite() && ct < c {
                let small = dp.iter().zip(steps).all(|(d, s)| d.abs() < 1e-4 * s.abs().max(1e-12));
                let rel = (c - ct) / c.max(1e-300);
                p = trial;
                r = rt;
                c = ct;
                lambda = (lambda / 10.0).max(1e-12);
                improved = true;
                if small || rel < 1e-10 {
                    return finish(p, r, data_rows, steps, &residuals);
                }
                break;
            }
            lambda *= 10.0;
        }
        if !improved {
            break;
        }
    }
    finish(p, r, data_rows, steps, &residuals)
}

fn jacobian(p: &[f64], steps: &[f64], residuals: &impl Fn(&[f64]) -> Vec<f64>) -> Vec<Vec<f64>> {
    let mut q = p.to_vec();
    (0..p.len())
        .map(|k| {
            let h = steps[k];
            q[k] = p[k] + h;
            let up = residuals(&q);
            q[k] = p[k] - h;
            let down = residuals(&q);
            q[k] = p[k];
            up.iter().zip(&down).map(|(a, b)| (a - b) / (2.0 * h)).collect()
        })
        .collect()
}

fn finish(
    p: Vec<f64>,
    r: Vec<f64>,
    data_rows: usize,
    steps: &[f64],
    residuals: &impl Fn(&[f64]) -> Vec<f64>,
) -> Option<Solution> {
    let jac = jacobian(&p, steps, residuals);
    let n = p.len();
    let mut jtj = vec![vec![0.0; n]; n];
    for i in 0..n {
        for j in 0..=i {
            jtj[i][j] = jac[i].iter().zip(&jac[j]).map(|(a, b)| a * b).sum();
            jtj[j][i] = jtj[i][j];
        }
    }
    let mut cov = spd_inverse(&jtj)?;
    let chi2: f64 = r[..data_rows.min(r.len())].iter().map(|v| v * v).sum();
    let dof = data_rows.saturating_sub(n);
    scale_cov(&mut cov, chi2, dof);
    Some(Solution { params: p, cov, chi2, dof })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn straight_line_matches_the_textbook_formulas() {
        // Unweighted line through 5 points: slope and intercept from the
        // closed-form sums (Bevington & Robinson, Data Reduction and Error
        // Analysis, 3rd ed., eq. 6.12-6.13), sigma scaled by the residuals.
        let pts = [(0.0, 1.1), (1.0, 2.9), (2.0, 5.2), (3.0, 6.8), (4.0, 9.1)];
        let rows: Vec<_> = pts.iter().map(|&(x, y)| (vec![1.0, x], y, 1.0)).collect();
        let s = linear(&rows).unwrap();
        let n = 5.0;
        let (sx, sy) = (10.0, 25.1);
        let sxx = 30.0;
        let sxy: f64 = pts.iter().map(|p| p.0 * p.1).sum();
        let delta = n * sxx - sx * sx;
        let b = (n * sxy - sx * sy) / delta;
        let a = (sxx * sy - sx * sxy) / delta;
        assert!((s.params[0] - a).abs() < 1e-12 && (s.params[1] - b).abs() < 1e-12);
        let resid: f64 = pts.iter().map(|p| (p.1 - a - b * p.0).powi(2)).sum();
        let var = resid / 3.0;
        assert!((s.sigma(1) - (var * n / delta).sqrt()).abs() < 1e-12);
    }

    #[test]
    fn levenberg_marquardt_finds_an_exponential() {
        let xs: Vec<f64> = (0..30).map(|i| i as f64 * 0.1).collect();
        let ys: Vec<f64> = xs.iter().map(|x| 2.5 * (-1.3 * x).exp()).collect();
        let s = levenberg_marquardt(&[1.0, -0.5], &[1e-6, 1e-6], xs.len(), |p| {
            xs.iter().zip(&ys).map(|(x, y)| y - p[0] * (p[1] * x).exp()).collect()
        })
        .unwrap();
        assert!((s.params[0] - 2.5).abs() < 1e-6 && (s.params[1] + 1.3).abs() < 1e-6, "{:?}", s.params);
    }
}
