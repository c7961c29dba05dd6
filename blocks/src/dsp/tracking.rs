//! Smoothing angle errors over time: one constant-velocity filter per axis
//! (fixed-gain alpha-beta, or a Kalman filter), an innovation gate against
//! outliers, and pointing telemetry read from a CSV table.

use crate::csv_table::{CsvError, read_rows};

/// The filter law of an [`AxisFilter`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum FilterMethod {
    /// Fixed gains: position `alpha`, rate `beta / dt`.
    AlphaBeta { alpha: f64, beta: f64 },
    /// Constant-velocity Kalman filter driven by white acceleration of
    /// standard deviation `accel_sigma` (deg/s^2); the measurement noise is
    /// each estimate's own sigma.
    Kalman { accel_sigma: f64 },
}

/// What one measurement did to the track.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Step {
    /// The track's angle at the measurement time after this step (the
    /// prediction, for an outlier).
    pub tracked: f64,
    /// Rejected by the gate and not used.
    pub outlier: bool,
    /// Variance of `tracked` (deg^2).
    pub variance: f64,
}

#[derive(Clone, Copy, Debug)]
struct TrackState {
    t: f64,
    /// Angle (deg) and rate (deg/s).
    x: [f64; 2],
    /// Covariance of `x`.
    p: [[f64; 2]; 2],
}

/// A per-axis tracker. The track starts from the first two measurements
/// (two-point start) and restarts after `reset_after` outliers in a row, so
/// one bad starting value cannot lock it out for ever.
#[derive(Clone, Debug)]
pub struct AxisFilter {
    method: FilterMethod,
    gate_sigmas: f64,
    reset_after: u32,
    /// A lone first measurement (time, angle, variance) waiting for a second.
    first: Option<(f64, f64, f64)>,
    state: Option<TrackState>,
    outliers_in_a_row: u32,
}

impl AxisFilter {
    /// `gate_sigmas` of 0 turns the gate off.
    pub fn new(method: FilterMethod, gate_sigmas: f64, reset_after: u32) -> AxisFilter {
        AxisFilter {
            method,
            gate_sigmas,
            reset_after: reset_after.max(1),
            first: None,
            state: None,
            outliers_in_a_row: 0,
        }
    }

    /// Variance of the predicted angle at time `t`, when a track exists.
    pub fn predicted_variance(&self, t: f64) -> Option<f64> {
        self.state.map(|s| self.predict(&s, t).1[0][0])
    }

    fn predict(&self, s: &TrackState, t: f64) -> ([f64; 2], [[f64; 2]; 2]) {
        let dt = t - s.t;
        let p = s.p;
        let x = [s.x[0] + dt * s.x[1], s.x[1]];
        let mut pp = [
            [p[0][0] + dt * (p[0][1] + p[1][0]) + dt * dt * p[1][1], p[0][1] + dt * p[1][1]],
            [p[1][0] + dt * p[1][1], p[1][1]],
        ];
        if let FilterMethod::Kalman { accel_sigma } = self.method {
            let q = accel_sigma * accel_sigma;
            pp[0][0] += q * dt.powi(4) / 4.0;
            pp[0][1] += q * dt.powi(3) / 2.0;
            pp[1][0] += q * dt.powi(3) / 2.0;
            pp[1][1] += q * dt * dt;
        }
        (x, pp)
    }

    /// Take measurement `z` (deg) with standard deviation `sigma` at time `t` (s).
    /// Times should not go backwards; a measurement at the same time as the
    /// last one updates the angle only.
    pub fn step(&mut self, t: f64, z: f64, sigma: f64) -> Step {
        let r = sigma * sigma;
        let Some(state) = self.state else {
            return self.start(t, z, r);
        };
        // A late-arriving estimate is taken as current rather than predicted backwards.
        let t = t.max(state.t);
        let (x, p) = self.predict(&state, t);
        let innovation = z - x[0];
        let s = r + p[0][0];
        if self.gate_sigmas > 0.0 && innovation.abs() > self.gate_sigmas * s.sqrt() {
            self.outliers_in_a_row += 1;
            if self.outliers_in_a_row >= self.reset_after {
                self.state = None;
                self.first = Some((t, z, r));
                self.outliers_in_a_row = 0;
            }
            return Step { tracked: x[0], outlier: true, variance: p[0][0] };
        }
        self.outliers_in_a_row = 0;
        let dt = t - state.t;
        let k = match self.method {
            FilterMethod::AlphaBeta { alpha, beta } => [alpha, if dt > 0.0 { beta / dt } else { 0.0 }],
            FilterMethod::Kalman { .. } if s > 0.0 => [p[0][0] / s, p[1][0] / s],
            FilterMethod::Kalman { .. } => [0.0, 0.0],
        };
        let x = [x[0] + k[0] * innovation, x[1] + k[1] * innovation];
        // Joseph form: right for any gain, so the alpha-beta variance is true too.
        let a = 1.0 - k[0];
        let m = [[a * p[0][0], a * p[0][1]], [p[1][0] - k[1] * p[0][0], p[1][1] - k[1] * p[0][1]]];
        let p = [
            [m[0][0] * a + r * k[0] * k[0], m[0][1] - m[0][0] * k[1] + r * k[0] * k[1]],
            [m[1][0] * a + r * k[0] * k[1], m[1][1] - m[1][0] * k[1] + r * k[1] * k[1]],
        ];
        self.state = Some(TrackState { t, x, p });
        Step { tracked: x[0], outlier: false, variance: p[0][0] }
    }

    fn start(&mut self, t: f64, z: f64, r: f64) -> Step {
        match self.first.take() {
            None => {
                self.first = Some((t, z, r));
                Step { tracked: z, outlier: false, variance: r }
            }
            Some((t1, z1, r1)) if t > t1 => {
                let dt = t - t1;
                let p = [[r, r / dt], [r / dt, (r + r1) / (dt * dt)]];
                self.state = Some(TrackState { t, x: [z, (z - z1) / dt], p });
                Step { tracked: z, outlier: false, variance: r }
            }
            Some((t1, z1, r1)) => {
                // Same instant: combine by inverse variance (plain mean if unknown).
                let (w1, w) = if r1 > 0.0 && r > 0.0 { (1.0 / r1, 1.0 / r) } else { (1.0, 1.0) };
                let zm = (w1 * z1 + w * z) / (w1 + w);
                self.first = Some((t1.max(t), zm, 1.0 / (w1 + w)));
                Step { tracked: zm, outlier: false, variance: 1.0 / (w1 + w) }
            }
        }
    }
}

/// Steady-state variance of the alpha-beta filter's updated angle over the
/// measurement variance, for white measurement noise and a constant-rate
/// target: `(2a^2 + 2b - 3ab) / (a (4 - 2a - b))` (Benedict and Bordner;
/// also in Brookner, Tracking and Kalman Filtering Made Easy, from memory).
pub fn alpha_beta_variance_ratio(alpha: f64, beta: f64) -> f64 {
    (2.0 * alpha * alpha + 2.0 * beta - 3.0 * alpha * beta) / (alpha * (4.0 - 2.0 * alpha - beta))
}

/// Pointing angles against time, read from `time_s,<col>,<col>...` CSV.
#[derive(Clone, Debug)]
pub struct Telemetry {
    columns: Vec<String>,
    times: Vec<f64>,
    /// Row-major values of every column after `time_s`.
    values: Vec<f64>,
}

impl Telemetry {
    /// Parse CSV text; `file` names the source in errors, with the line.
    /// The first line (after blank and `#` lines) is the header, whose first
    /// column must be `time_s`; times must increase.
    pub fn parse(text: &str, file: &str) -> Result<Telemetry, String> {
        let mut rows = read_rows(text, file)?.into_iter();
        let header = rows.next().ok_or_else(|| CsvError::whole(file, "no header line (time_s,az_deg,el_deg)"))?;
        if header.fields[0] != "time_s" || header.fields.len() < 2 {
            let got = header.fields.join(",");
            let problem = format!("expected a header starting 'time_s,' (e.g. time_s,az_deg,el_deg), got '{got}'");
            return Err(CsvError::at(file, header.line, problem).into());
        }
        let (mut times, mut values) = (Vec::new(), Vec::new());
        for row in rows {
            let bad = |problem: String| CsvError::at(file, row.line, problem);
            if row.fields.len() != header.fields.len() {
                let (want, got) = (header.fields.len(), row.fields.len());
                return Err(bad(format!("expected {want} fields like the header, got {got}")).into());
            }
            let mut numbers = Vec::with_capacity(row.fields.len());
            for (name, f) in header.fields.iter().zip(&row.fields) {
                match f.parse::<f64>() {
                    Ok(v) if v.is_finite() => numbers.push(v),
                    _ => return Err(bad(format!("{name} '{f}' is not a number")).into()),
                }
            }
            if times.last().is_some_and(|&last| numbers[0] <= last) {
                return Err(bad(format!("time_s {} does not increase", numbers[0])).into());
            }
            times.push(numbers[0]);
            values.extend_from_slice(&numbers[1..]);
        }
        if times.len() < 2 {
            return Err(format!("{file}: needs at least two rows of pointing angles"));
        }
        Ok(Telemetry { columns: header.fields[1..].to_vec(), times, values })
    }

    /// Index of a named column.
    pub fn column(&self, name: &str) -> Option<usize> {
        self.columns.iter().position(|c| c == name)
    }

    pub fn columns(&self) -> &[String] {
        &self.columns
    }

    /// Time span covered, seconds.
    pub fn span(&self) -> (f64, f64) {
        (self.times[0], self.times[self.times.len() - 1])
    }

    /// Column `col` linearly interpolated at `t`; None outside the table's time span.
    pub fn at(&self, col: usize, t: f64) -> Option<f64> {
        let (first, last) = self.span();
        if !(t >= first && t <= last) || col >= self.columns.len() {
            return None;
        }
        let width = self.columns.len();
        let i = self.times.partition_point(|&x| x < t).clamp(1, self.times.len() - 1);
        let (t0, t1) = (self.times[i - 1], self.times[i]);
        let (v0, v1) = (self.values[(i - 1) * width + col], self.values[i * width + col]);
        Some(v0 + (v1 - v0) * (t - t0) / (t1 - t0))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn telemetry_interpolates_and_names_bad_lines() {
        let t = Telemetry::parse("time_s,az_deg,el_deg\n0,10,20\n2,12,19\n", "p.csv").unwrap();
        assert_eq!(t.at(0, 1.0), Some(11.0));
        assert_eq!(t.at(1, 0.5), Some(19.75));
        assert_eq!(t.at(0, 2.5), None);
        assert_eq!(t.column("el_deg"), Some(1));
        let e = Telemetry::parse("time_s,az_deg\n0,1\n1,x\n", "p.csv").unwrap_err();
        assert!(e.starts_with("p.csv line 3") && e.contains("az_deg"), "{e}");
        let e = Telemetry::parse("time_s,az_deg\n0,1\n0,2\n", "p.csv").unwrap_err();
        assert!(e.contains("line 3") && e.contains("increase"), "{e}");
        let e = Telemetry::parse("t,az\n", "p.csv").unwrap_err();
        assert!(e.contains("line 1"), "{e}");
        assert!(Telemetry::parse("time_s,az_deg\n0,1,2\n", "p.csv").unwrap_err().contains("line 2"));
    }

    #[test]
    fn telemetry_with_a_quoted_column_name_written_by_python() {
        let text = include_str!("../../tests/fixtures/telemetry_quoted.csv");
        let t = Telemetry::parse(text, "telemetry_quoted.csv").unwrap();
        let az = t.column("az \"true\", deg").expect("the quoted name, unquoted");
        assert_eq!(t.columns().len(), 2);
        assert!((t.at(az, 1.25).unwrap() - 11.25).abs() < 1e-12);
        assert!((t.at(t.column("el_deg").unwrap(), 2.0).unwrap() - 19.0).abs() < 1e-12);
        let e = Telemetry::parse("time_s,\"az, deg\"\n0,1\n1,\"2,x\"\n", "p.csv").unwrap_err();
        assert!(e.starts_with("p.csv line 3: az, deg '2,x'"), "{e}");
    }

    #[test]
    fn time_going_backwards_stays_finite() {
        let mut f = AxisFilter::new(FilterMethod::Kalman { accel_sigma: 0.5 }, 4.0, 3);
        for (t, z) in [(0.0, 0.1), (0.1, 0.12), (0.05, 0.11), (0.05, 0.11), (0.2, 0.13)] {
            let s = f.step(t, z, 0.01);
            assert!(s.tracked.is_finite() && !s.outlier, "{t}: {s:?}");
        }
        assert!(f.predicted_variance(0.3).unwrap() > 0.0);
    }

    #[test]
    fn joseph_form_reaches_the_published_alpha_beta_variance() {
        // Fixed gains with no process noise: the propagated variance must
        // settle at the closed form above (independent derivation).
        let (alpha, beta) = (0.3, 0.05);
        let mut f = AxisFilter::new(FilterMethod::AlphaBeta { alpha, beta }, 0.0, 3);
        for k in 0..2000 {
            f.step(k as f64 * 0.1, 0.0, 1.0);
        }
        let s = f.state.unwrap();
        let want = alpha_beta_variance_ratio(alpha, beta);
        assert!((s.p[0][0] - want).abs() < 1e-9, "{} vs {want}", s.p[0][0]);
    }
}
