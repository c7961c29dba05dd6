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
//!
//! The grid search is where the time goes (one forward pass per grid value
//! against one kept pass and one backward pass), and a recording is only
//! smoothed once its input has ended: run then, the search is a serial
//! tail of the whole run, with the other workers idle. [`QSearch`]
//! therefore runs it as the measurements arrive: a bank of one filter
//! state per grid value, each stepped by every measurement and adding up
//! its log-likelihood, so the end keeps only the choice, the kept pass
//! (run again for the chosen `q`: keeping 49 passes' records would cost 49
//! times the memory) and the backward pass. Both searches take their steps
//! through one `State::advance`, the same floating-point operations in
//! the same order, so they choose the same `q` to the bit. The diffuse
//! start sits on the first usable angle, so the bank holds the times of
//! the steps before it until it comes. A fixed `q` needs no search.

mod small_matrix;

use small_matrix::{M3, Mat, add, invert, leading, mat_mul, mat_vec, transpose};

crate::block_choice! {
    /// The motion model of the smoothed angle.
    pub enum Model {
        /// Angle and rate; white acceleration of density `q` (deg^2/s^3).
        ConstantVelocity = "constant_velocity",
        /// Angle, rate and acceleration; white jerk of density `q` (deg^2/s^5).
        ConstantAcceleration = "constant_acceleration",
    }
}

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
/// With the measurements fed to a [`QSearch`] as they came, its
/// [`QSearch::most_likely_q`] is the same `q` (to the bit), found without a
/// pass over the data here.
pub fn smooth(data: &[Measurement], model: Model, q: Option<f64>, gate_sigmas: f64) -> (Vec<Smoothed>, f64) {
    let q = q.unwrap_or_else(|| most_likely_q(data, model, gate_sigmas));
    let smoothed = match model {
        Model::ConstantVelocity => backward(&forward::<2>(data, model, q, gate_sigmas)),
        Model::ConstantAcceleration => backward(&forward::<3>(data, model, q, gate_sigmas)),
    };
    (smoothed, q)
}

/// How many values of `q` the search tries.
const GRID_LEN: usize = 49;

/// The grid of `q`: 1e-8 to 1e4, four per decade.
fn grid() -> [f64; GRID_LEN] {
    std::array::from_fn(|i| 10f64.powf((i as i32 - 32) as f64 / 4.0))
}

/// The `q` of the highest log-likelihood (the last of equals, as
/// `Iterator::max_by` picks).
fn best(scored: impl Iterator<Item = (f64, f64)>) -> f64 {
    scored.max_by(|a, b| a.1.total_cmp(&b.1)).map_or(1.0, |(q, _)| q)
}

/// The grid value of `q` whose forward pass gives the innovations the
/// highest likelihood: one pass per grid value over the whole data (the
/// batch form of [`QSearch`], used when no search ran alongside).
fn most_likely_q(data: &[Measurement], model: Model, gate_sigmas: f64) -> f64 {
    best(grid().into_iter().map(|q| (q, likelihood(data, model, q, gate_sigmas))))
}

fn transition(model: Model, dt: f64) -> M3 {
    match model {
        Model::ConstantVelocity => [[1.0, dt, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 0.0]],
        Model::ConstantAcceleration => [[1.0, dt, dt * dt / 2.0], [0.0, 1.0, dt], [0.0, 0.0, 1.0]],
    }
}

/// The powers of a step's `dt` that the process noise needs, worked out
/// once per step for every `q` of the search.
#[derive(Clone, Copy)]
struct Powers {
    dt: f64,
    d2: f64,
    d3: f64,
}

impl Powers {
    fn of(dt: f64) -> Powers {
        Powers { dt, d2: dt * dt, d3: dt * dt * dt }
    }
}

/// Discretised covariance of continuous white noise of density `q` over `dt`.
fn process_noise(model: Model, q: f64, d: Powers) -> M3 {
    let Powers { dt, d2, d3 } = d;
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
/// which only fill the diffuse start, left out) and no records.
fn likelihood(data: &[Measurement], model: Model, q: f64, gate_sigmas: f64) -> f64 {
    match model {
        Model::ConstantVelocity => filter::<2>(data, model, q, gate_sigmas, None),
        Model::ConstantAcceleration => filter::<3>(data, model, q, gate_sigmas, None),
    }
}

/// The angle and variance the diffuse start is built on: the first usable
/// angle of the data, or (0, 1) when there is none.
fn first_usable<'a>(data: impl IntoIterator<Item = &'a Measurement>) -> (f64, f64) {
    data.into_iter().find_map(|m| m.z.map(|z| (z, m.r))).unwrap_or((0.0, 1.0))
}

/// The forward Kalman filter over `data` on the model's `N` states, pushing
/// each step's record onto `keep` when given; returns the innovation
/// log-likelihood. The grid search ([`QSearch`] or [`most_likely_q`]) and
/// the kept pass take the same [`State::advance`] steps, so the search
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
    let mut state = State::<N>::start(first_usable(data));
    let mut clock = Clock::new(data.first().map_or(0.0, |m| m.t));
    for m in data {
        let dt = clock.tick(m.t);
        let f: Mat<N> = leading(&transition(model, dt));
        let record = state.advance(m, &f, &leading(&process_noise(model, q, Powers::of(dt))), gate_sigmas);
        if let Some(records) = keep.as_deref_mut() {
            records.push(record);
        }
    }
    state.loglik
}

/// The time between steps (never negative: a step back in time predicts
/// over zero seconds and the clock stays at the later time).
#[derive(Clone, Copy)]
struct Clock {
    t_prev: f64,
}

impl Clock {
    /// Starting at the first measurement's time.
    fn new(t0: f64) -> Clock {
        Clock { t_prev: t0 }
    }

    fn tick(&mut self, t: f64) -> f64 {
        let dt = (t - self.t_prev).max(0.0);
        self.t_prev = t.max(self.t_prev);
        dt
    }
}

/// The forward filter between steps, for one `q`.
#[derive(Clone, Copy)]
struct State<const N: usize> {
    x: [f64; N],
    p: Mat<N>,
    loglik: f64,
    /// Updates made so far: the first `N` fill the diffuse start, are not
    /// gated and do not count in the likelihood.
    updates: usize,
}

impl<const N: usize> State<N> {
    /// Diffuse start at the first usable angle `(z, r)`, any rate within
    /// ~100 deg/s.
    fn start(first: (f64, f64)) -> Self {
        let mut x = [0.0; N];
        x[0] = first.0;
        let mut p = [[0.0; N]; N];
        p[0][0] = first.1.max(1e-12) * 1e4;
        for (i, row) in p.iter_mut().enumerate().skip(1) {
            row[i] = 1e4;
        }
        State { x, p, loglik: 0.0, updates: 0 }
    }

    /// One step: predict with transition `f` and process noise `qd`, then
    /// update with the measurement unless it has no angle or the innovation
    /// gate rejects it.
    #[inline]
    fn advance(&mut self, m: &Measurement, f: &Mat<N>, qd: &Mat<N>, gate_sigmas: f64) -> Forward<N> {
        let x_pred = mat_vec(f, &self.x);
        let p_pred = add(&mat_mul(&mat_mul(f, &self.p), &transpose(f)), qd);
        let (mut x_new, mut p_new, mut outlier) = (x_pred, p_pred, false);
        if let Some(z) = m.z {
            let s = p_pred[0][0] + m.r;
            let nu = z - x_pred[0];
            if self.updates >= N && gate_sigmas > 0.0 && nu * nu > gate_sigmas * gate_sigmas * s {
                outlier = true;
            } else if s > 0.0 {
                if self.updates >= N {
                    self.loglik -= 0.5 * (s.ln() + nu * nu / s);
                }
                self.updates += 1;
                let k: [f64; N] = std::array::from_fn(|i| p_pred[i][0] / s);
                x_new = std::array::from_fn(|i| x_pred[i] + k[i] * nu);
                p_new = std::array::from_fn(|i| std::array::from_fn(|j| p_pred[i][j] - k[i] * p_pred[0][j]));
            }
        }
        self.x = x_new;
        self.p = p_new;
        Forward { x_pred, p_pred, x: self.x, p: self.p, f: *f, outlier }
    }
}

/// The search for the most likely `q`, run as the measurements arrive: one
/// forward filter per grid value, each stepped by every measurement and
/// adding up its innovation log-likelihood, so that at the end of a
/// recording only the choice, the kept pass and the backward pass remain.
/// Fed the measurements [`smooth`] is given, in their order, it takes the
/// same steps as the batch search of [`smooth`] and picks the same `q`.
pub struct QSearch {
    model: Model,
    gate_sigmas: f64,
    grid: [f64; GRID_LEN],
    clock: Clock,
    /// Measurements taken so far.
    count: usize,
    /// The times of the measurements before the first usable angle, which
    /// the diffuse start is built on: held until it comes, then stepped.
    waiting: Vec<f64>,
    bank: Bank,
}

/// One filter state per grid value, on the model's states.
enum Bank {
    Waiting,
    Velocity(Box<[State<2>; GRID_LEN]>),
    Acceleration(Box<[State<3>; GRID_LEN]>),
}

impl QSearch {
    pub fn new(model: Model, gate_sigmas: f64) -> QSearch {
        QSearch {
            model,
            gate_sigmas,
            grid: grid(),
            clock: Clock::new(0.0),
            count: 0,
            waiting: Vec::new(),
            bank: Bank::Waiting,
        }
    }

    /// Measurements taken so far.
    pub fn len(&self) -> usize {
        self.count
    }

    pub fn is_empty(&self) -> bool {
        self.count == 0
    }

    /// Take the next measurement (times not decreasing, as for [`smooth`]).
    pub fn push(&mut self, m: Measurement) {
        if self.count == 0 {
            self.clock = Clock::new(m.t);
        }
        self.count += 1;
        if let Bank::Waiting = self.bank {
            let Some(z) = m.z else {
                self.waiting.push(m.t);
                return;
            };
            self.begin((z, m.r));
        }
        self.step(&m);
    }

    /// The diffuse start at `first`, then the steps without an angle that
    /// came before it.
    fn begin(&mut self, first: (f64, f64)) {
        self.bank = match self.model {
            Model::ConstantVelocity => Bank::Velocity(Box::new([State::start(first); GRID_LEN])),
            Model::ConstantAcceleration => Bank::Acceleration(Box::new([State::start(first); GRID_LEN])),
        };
        for t in std::mem::take(&mut self.waiting) {
            self.step(&Measurement { t, z: None, r: 1.0 });
        }
    }

    fn step(&mut self, m: &Measurement) {
        let dt = self.clock.tick(m.t);
        let powers = Powers::of(dt);
        let (model, gate, grid) = (self.model, self.gate_sigmas, &self.grid);
        let f = transition(model, dt);
        match &mut self.bank {
            Bank::Waiting => unreachable!("stepped before the start"),
            Bank::Velocity(states) => step_all(states, grid, m, &f, model, powers, gate),
            Bank::Acceleration(states) => step_all(states, grid, m, &f, model, powers, gate),
        }
    }

    /// The grid value of `q` whose forward pass gave the innovations so
    /// far the highest likelihood.
    pub fn most_likely_q(self) -> f64 {
        best(self.scores().into_iter())
    }

    /// Each grid value of `q` with its forward pass's log-likelihood.
    fn scores(mut self) -> Vec<(f64, f64)> {
        if let Bank::Waiting = self.bank {
            // No usable angle at all: the batch pass starts from (0, 1).
            self.begin(first_usable(&[] as &[Measurement]));
        }
        let loglik: Vec<f64> = match &self.bank {
            Bank::Waiting => unreachable!("begun above"),
            Bank::Velocity(states) => states.iter().map(|s| s.loglik).collect(),
            Bank::Acceleration(states) => states.iter().map(|s| s.loglik).collect(),
        };
        self.grid.into_iter().zip(loglik).collect()
    }
}

/// Step every state of a bank by one measurement.
fn step_all<const N: usize>(
    states: &mut [State<N>; GRID_LEN],
    grid: &[f64; GRID_LEN],
    m: &Measurement,
    f: &M3,
    model: Model,
    powers: Powers,
    gate_sigmas: f64,
) {
    let f: Mat<N> = leading(f);
    for (state, &q) in states.iter_mut().zip(grid) {
        state.advance(m, &f, &leading(&process_noise(model, q, powers)), gate_sigmas);
    }
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

    /// Varied data: a run of steps without an angle first, repeated times,
    /// gaps, steps without an angle, outliers, changing variances.
    fn varied(rng: &mut Rng, len: usize) -> Vec<Measurement> {
        let lead = (rng.uniform() * 6.0) as usize;
        let mut t = rng.uniform() * 100.0;
        (0..len)
            .map(|k| {
                let u = rng.uniform();
                t += if u < 0.05 {
                    0.0
                } else if u < 0.1 {
                    1.0 + 10.0 * rng.uniform()
                } else {
                    0.01
                };
                let r = (0.02 + 0.3 * rng.uniform()).powi(2);
                let z = match rng.uniform() {
                    _ if k < lead => None,
                    v if v < 0.1 => None,
                    v if v < 0.15 => Some(weave(t) + 20.0 * rng.gaussian()),
                    _ => Some(weave(t) + r.sqrt() * rng.gaussian()),
                };
                Measurement { t, z, r }
            })
            .collect()
    }

    fn bits(out: &[Smoothed]) -> Vec<(u64, u64, bool)> {
        out.iter().map(|s| (s.angle.to_bits(), s.variance.to_bits(), s.outlier)).collect()
    }

    #[test]
    fn the_search_run_as_measurements_come_picks_the_batch_q_and_smooths_to_the_same_bits() {
        let mut rng = Rng::new(16);
        let mut picked = std::collections::BTreeSet::new();
        for case in 0..120 {
            let len = [0, 1, 2, 3, 4, 7, 40, 300, 2500][case % 9];
            let mut data = varied(&mut rng, len);
            if case % 11 == 5 {
                data.iter_mut().for_each(|m| m.z = None);
            }
            let model = if case % 2 == 0 { Model::ConstantVelocity } else { Model::ConstantAcceleration };
            let gate = [0.0, 4.0, 2.5][case % 3];
            let mut search = QSearch::new(model, gate);
            data.iter().for_each(|&m| search.push(m));
            assert_eq!(search.len(), data.len());
            // Every grid value's pass, to the bit, not only the winner.
            for (q, loglik) in search.scores() {
                let batch = likelihood(&data, model, q, gate);
                assert_eq!(loglik.to_bits(), batch.to_bits(), "case {case}, q {q:e}: {loglik} vs {batch}");
            }
            let mut search = QSearch::new(model, gate);
            data.iter().for_each(|&m| search.push(m));
            let online = search.most_likely_q();
            let batch = most_likely_q(&data, model, gate);
            assert_eq!(online.to_bits(), batch.to_bits(), "case {case}: q {online} vs {batch}");
            let (kept, q) = smooth(&data, model, Some(online), gate);
            let (searched, q_batch) = smooth(&data, model, None, gate);
            assert_eq!(q.to_bits(), q_batch.to_bits());
            assert_eq!(bits(&kept), bits(&searched), "case {case}");
            picked.insert(online.to_bits());
        }
        // The cases are varied enough to move the choice around the grid.
        assert!(picked.len() >= 4, "only {} values of q picked", picked.len());
    }

    #[test]
    fn steps_before_the_first_angle_are_predicted_from_it() {
        // The diffuse start sits on the first usable angle, also for the
        // steps before it: with q tiny, all of a still target's smoothed
        // angles are the mean of its measurements, whichever search ran.
        let mut data: Vec<Measurement> = (0..3).map(|k| Measurement { t: k as f64, z: None, r: 1.0 }).collect();
        data.extend([4.0, 6.0, 5.0, 5.0].iter().enumerate().map(|(k, &z)| Measurement {
            t: 3.0 + k as f64,
            z: Some(z),
            r: 1.0,
        }));
        let mut search = QSearch::new(Model::ConstantVelocity, 0.0);
        data.iter().for_each(|&m| search.push(m));
        let q = search.most_likely_q();
        assert_eq!(q.to_bits(), most_likely_q(&data, Model::ConstantVelocity, 0.0).to_bits());
        let (out, _) = smooth(&data, Model::ConstantVelocity, Some(1e-12), 0.0);
        // Line through (3,4),(4,6),(5,5),(6,5): slope 0.2, 5 at t = 4.5.
        for (m, s) in data.iter().zip(&out) {
            assert!((s.angle - (5.0 + 0.2 * (m.t - 4.5))).abs() < 1e-3, "{}: {}", m.t, s.angle);
        }
    }
}
