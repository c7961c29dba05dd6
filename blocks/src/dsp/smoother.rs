//! Fixed-interval smoothing of one axis's angle estimates for recordings:
//! a forward Kalman filter and a backward Rauch-Tung-Striebel pass (Rauch,
//! Tung and Striebel, "Maximum likelihood estimates of linear dynamic
//! systems", AIAA Journal 3(8), 1965; also Bar-Shalom, Li and Kirubarajan,
//! Estimation with Applications to Tracking and Navigation, 2001, the
//! fixed-interval smoother of the chapter on linear estimation, from memory).
//!
//! The target's angle is a constant-velocity or constant-acceleration model
//! driven by continuous white noise of spectral density `q` (the
//! discretised covariances are the usual ones, written out in
//! docs/derivations.md). With `q` unknown, it is chosen from a grid by the
//! likelihood of the forward pass's innovations. Every smoothed angle comes
//! with its variance.

crate::block_choice! {
    /// The motion model of the smoothed angle.
    pub enum Model {
        /// Angle and rate; white acceleration of density `q` (deg^2/s^3).
        ConstantVelocity = "constant_velocity",
        /// Angle, rate and acceleration; white jerk of density `q` (deg^2/s^5).
        ConstantAcceleration = "constant_acceleration",
    }
}

type Mat<const N: usize> = [[f64; N]; N];
type M3 = Mat<3>;

/// One measurement: time (s), angle (deg), variance (deg^2); `None` angle =
/// a time step without a usable measurement (smoothed, not updated).
#[derive(Clone, Copy, Debug)]
pub struct Measurement {
    pub t: f64,
    pub z: Option<f64>,
    pub r: f64,
}

/// What the smoother says at one measurement time.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Smoothed {
    pub angle: f64,
    pub variance: f64,
    /// Rejected by the innovation gate of the forward pass.
    pub outlier: bool,
}

/// Forward-pass record of one step, on the model's `N` states.
#[derive(Clone, Copy)]
struct Forward<const N: usize> {
    x_pred: [f64; N],
    p_pred: Mat<N>,
    x: [f64; N],
    p: Mat<N>,
    f: Mat<N>,
    outlier: bool,
}

/// Smooth `data` (times not decreasing) with density `q`, or with the most
/// likely `q` of a grid when `q` is `None`; returns the results and the `q` used.
pub fn smooth(data: &[Measurement], model: Model, q: Option<f64>, gate_sigmas: f64) -> (Vec<Smoothed>, f64) {
    let q = q.unwrap_or_else(|| most_likely_q(data, model, gate_sigmas));
    let smoothed = match model {
        Model::ConstantVelocity => backward(&forward::<2>(data, model, q, gate_sigmas)),
        Model::ConstantAcceleration => backward(&forward::<3>(data, model, q, gate_sigmas)),
    };
    (smoothed, q)
}

/// The grid value of `q` (1e-8 to 1e4, four per decade) whose forward pass
/// gives the innovations the highest likelihood.
fn most_likely_q(data: &[Measurement], model: Model, gate_sigmas: f64) -> f64 {
    (-32..=16)
        .map(|k| 10f64.powf(k as f64 / 4.0))
        .map(|q| (q, likelihood(data, model, q, gate_sigmas)))
        .max_by(|a, b| a.1.total_cmp(&b.1))
        .map_or(1.0, |(q, _)| q)
}

fn transition(model: Model, dt: f64) -> M3 {
    match model {
        Model::ConstantVelocity => [[1.0, dt, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 0.0]],
        Model::ConstantAcceleration => [[1.0, dt, dt * dt / 2.0], [0.0, 1.0, dt], [0.0, 0.0, 1.0]],
    }
}

/// Discretised covariance of continuous white noise of density `q` over `dt`.
fn process_noise(model: Model, q: f64, dt: f64) -> M3 {
    let (d2, d3) = (dt * dt, dt * dt * dt);
    match model {
        Model::ConstantVelocity => [[q * d3 / 3.0, q * d2 / 2.0, 0.0], [q * d2 / 2.0, q * dt, 0.0], [0.0; 3]],
        Model::ConstantAcceleration => {
            let (d4, d5) = (d2 * d2, d2 * d3);
            [
                [q * d5 / 20.0, q * d4 / 8.0, q * d3 / 6.0],
                [q * d4 / 8.0, q * d3 / 3.0, q * d2 / 2.0],
                [q * d3 / 6.0, q * d2 / 2.0, q * dt],
            ]
        }
    }
}

/// The forward Kalman pass's records, on the model's `N` states (two for
/// constant velocity: the records of a long recording are half the size).
fn forward<const N: usize>(data: &[Measurement], model: Model, q: f64, gate_sigmas: f64) -> Vec<Forward<N>> {
    let mut out = Vec::with_capacity(data.len());
    filter::<N>(data, model, q, gate_sigmas, Some(&mut out));
    out
}

/// The forward pass's innovation log-likelihood (the first `N` updates,
/// which only fill the diffuse start, left out) and no records: the `q`
/// grid search runs the pass once per grid value.
fn likelihood(data: &[Measurement], model: Model, q: f64, gate_sigmas: f64) -> f64 {
    match model {
        Model::ConstantVelocity => filter::<2>(data, model, q, gate_sigmas, None),
        Model::ConstantAcceleration => filter::<3>(data, model, q, gate_sigmas, None),
    }
}

/// The forward Kalman filter on the model's `N` states, pushing each step's
/// record onto `keep` when given; returns the
/// innovation log-likelihood. One routine for both uses, so the grid search
/// scores exactly the pass that is then kept. Working on `N` = 2 states for
/// the constant-velocity model skips the products with the unused third
/// state, which were zeros: the sums are the same numbers.
fn filter<const N: usize>(
    data: &[Measurement],
    model: Model,
    q: f64,
    gate_sigmas: f64,
    mut keep: Option<&mut Vec<Forward<N>>>,
) -> f64 {
    // Diffuse start: the first usable angle, any rate within ~100 deg/s.
    let first = data.iter().find_map(|m| m.z.map(|z| (z, m.r))).unwrap_or((0.0, 1.0));
    let mut x = [0.0; N];
    x[0] = first.0;
    let mut p = [[0.0; N]; N];
    p[0][0] = first.1.max(1e-12) * 1e4;
    for (i, row) in p.iter_mut().enumerate().skip(1) {
        row[i] = 1e4;
    }
    let mut t_prev = data.first().map_or(0.0, |m| m.t);
    let (mut loglik, mut updates) = (0.0, 0usize);
    for m in data {
        let dt = (m.t - t_prev).max(0.0);
        t_prev = m.t.max(t_prev);
        let f: Mat<N> = leading(&transition(model, dt));
        let x_pred = mat_vec(&f, &x);
        let p_pred = add(&mat_mul(&mat_mul(&f, &p), &transpose(&f)), &leading(&process_noise(model, q, dt)));
        let (mut x_new, mut p_new, mut outlier) = (x_pred, p_pred, false);
        if let Some(z) = m.z {
            let s = p_pred[0][0] + m.r;
            let nu = z - x_pred[0];
            if updates >= N && gate_sigmas > 0.0 && nu * nu > gate_sigmas * gate_sigmas * s {
                outlier = true;
            } else if s > 0.0 {
                if updates >= N {
                    loglik -= 0.5 * (s.ln() + nu * nu / s);
                }
                updates += 1;
                let k: [f64; N] = std::array::from_fn(|i| p_pred[i][0] / s);
                x_new = std::array::from_fn(|i| x_pred[i] + k[i] * nu);
                p_new = std::array::from_fn(|i| std::array::from_fn(|j| p_pred[i][j] - k[i] * p_pred[0][j]));
            }
        }
        x = x_new;
        p = p_new;
        if let Some(records) = keep.as_deref_mut() {
            records.push(Forward { x_pred, p_pred, x, p, f, outlier });
        }
    }
    loglik
}

/// The leading `N` x `N` block of a 3 x 3 matrix.
fn leading<const N: usize>(a: &M3) -> Mat<N> {
    std::array::from_fn(|i| std::array::from_fn(|j| a[i][j]))
}
/// The Rauch-Tung-Striebel pass over the forward records.
fn backward<const N: usize>(fwd: &[Forward<N>]) -> Vec<Smoothed> {
    let mut out = vec![Smoothed { angle: f64::NAN, variance: f64::NAN, outlier: false }; fwd.len()];
    let Some(last) = fwd.last() else { return out };
    let (mut xs, mut ps) = (last.x, last.p);
    out[fwd.len() - 1] = Smoothed { angle: xs[0], variance: ps[0][0], outlier: last.outlier };
    for k in (0..fwd.len() - 1).rev() {
        let (now, next) = (&fwd[k], &fwd[k + 1]);
        // C = P_k|k F' P_k+1|k^-1
        let c = match invert(&next.p_pred) {
            Some(inv) => mat_mul(&mat_mul(&now.p, &transpose(&next.f)), &inv),
            None => [[0.0; N]; N],
        };
        let dx: [f64; N] = std::array::from_fn(|i| xs[i] - next.x_pred[i]);
        let dp: Mat<N> = std::array::from_fn(|i| std::array::from_fn(|j| ps[i][j] - next.p_pred[i][j]));
        let gain = mat_vec(&c, &dx);
        xs = std::array::from_fn(|i| now.x[i] + gain[i]);
        ps = add(&now.p, &mat_mul(&mat_mul(&c, &dp), &transpose(&c)));
        out[k] = Smoothed { angle: xs[0], variance: ps[0][0].max(0.0), outlier: now.outlier };
    }
    out
}

fn mat_mul<const N: usize>(a: &Mat<N>, b: &Mat<N>) -> Mat<N> {
    std::array::from_fn(|i| std::array::from_fn(|j| (0..N).map(|k| a[i][k] * b[k][j]).sum()))
}
fn mat_vec<const N: usize>(a: &Mat<N>, x: &[f64; N]) -> [f64; N] {
    std::array::from_fn(|i| (0..N).map(|k| a[i][k] * x[k]).sum())
}
fn transpose<const N: usize>(a: &Mat<N>) -> Mat<N> {
    std::array::from_fn(|i| std::array::from_fn(|j| a[j][i]))
}
fn add<const N: usize>(a: &Mat<N>, b: &Mat<N>) -> Mat<N> {
    std::array::from_fn(|i| std::array::from_fn(|j| a[i][j] + b[i][j]))
}
/// Inverse of a 2 x 2 or 3 x 3 matrix; `None` when it is singular.
fn invert<const N: usize>(a: &Mat<N>) -> Option<Mat<N>> {
    let mut inv = [[0.0; N]; N];
    if N == 2 {
        let det = a[0][0] * a[1][1] - a[0][1] * a[1][0];
        if det.abs() < 1e-300 || !det.is_finite() {
            return None;
        }
        inv[0][0] = a[1][1] / det;
        inv[0][1] = -a[0][1] / det;
        inv[1][0] = -a[1][0] / det;
        inv[1][1] = a[0][0] / det;
        return Some(inv);
    }
    let cof = |i: usize, j: usize| {
        let (r0, r1) = ((i + 1) % 3, (i + 2) % 3);
        let (c0, c1) = ((j + 1) % 3, (j + 2) % 3);
        a[r0][c0] * a[r1][c1] - a[r0][c1] * a[r1][c0]
    };
    let det = a[0][0] * cof(0, 0) + a[0][1] * cof(0, 1) + a[0][2] * cof(0, 2);
    if det.abs() < 1e-300 || !det.is_finite() {
        return None;
    }
    for (i, row) in inv.iter_mut().enumerate() {
        for (j, v) in row.iter_mut().enumerate() {
            *v = cof(j, i) / det;
        }
    }
    Some(inv)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::rng::Rng;

    fn weave(t: f64) -> f64 {
        0.2 + 0.8 * (2.0 * std::f64::consts::PI * t / 5.0).sin()
    }

    #[test]
    fn smoothing_a_slow_weave_beats_the_raw_spread_and_its_sigma_is_honest() {
        let mut rng = Rng::new(5);
        let sigma = 0.1;
        let data: Vec<Measurement> = (0..2000)
            .map(|k| {
                let t = k as f64 * 0.01;
                Measurement { t, z: Some(weave(t) + sigma * rng.gaussian()), r: sigma * sigma }
            })
            .collect();
        for model in [Model::ConstantVelocity, Model::ConstantAcceleration] {
            let (out, q) = smooth(&data, model, None, 0.0);
            let (mut e2, mut v) = (0.0, 0.0);
            for (k, s) in out.iter().enumerate() {
                e2 += (s.angle - weave(data[k].t)).powi(2);
                v += s.variance;
            }
            let rms = (e2 / out.len() as f64).sqrt();
            let sig = (v / out.len() as f64).sqrt();
            eprintln!("{model:?}: q {q:.3e}, smoothed RMS {rms:.4} (raw {sigma}), sigma {sig:.4}");
            assert!(rms < 0.3 * sigma, "{model:?}: {rms}");
            assert!((rms / sig - 1.0).abs() < 0.3, "{model:?}: RMS {rms} vs its sigma {sig}");
        }
    }

    #[test]
    fn a_constant_is_recovered_to_the_mean_of_all() {
        // With q tiny the smoother is the least-squares line through all points.
        let data: Vec<Measurement> = [1.0, 3.0, 2.0, 2.0]
            .iter()
            .enumerate()
            .map(|(k, &z)| Measurement { t: k as f64, z: Some(z), r: 1.0 })
            .collect();
        let (out, _) = smooth(&data, Model::ConstantVelocity, Some(1e-12), 0.0);
        // Line fit through (0,1),(1,3),(2,2),(3,2): slope 0.2, intercept 1.7.
        for (k, s) in out.iter().enumerate() {
            assert!((s.angle - (1.7 + 0.2 * k as f64)).abs() < 1e-3, "{k}: {}", s.angle);
        }
    }

    #[test]
    fn three_by_three_inverse() {
        let a = [[4.0, 1.0, 0.5], [1.0, 3.0, 0.2], [0.5, 0.2, 2.0]];
        let inv = invert(&a).unwrap();
        let i = mat_mul(&a, &inv);
        for (r, row) in i.iter().enumerate() {
            for (c, v) in row.iter().enumerate() {
                assert!((v - if r == c { 1.0 } else { 0.0 }).abs() < 1e-12);
            }
        }
    }
}
