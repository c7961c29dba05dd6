//! Beam models: the one-way voltage pattern of one lobe, and the ratio of a
//! squinted pair as a function of target angle (docs/derivations.md §2-3).
//!
//! For a pair with lobe axes at `+squint` and `-squint` and a target at
//! `theta`, the log ratio is `r(theta) = n ln(g(theta - squint) / g(theta + squint))`
//! with `n = 1` (one-way) or `2` (two-way). [`PairModel`] turns a measured
//! log ratio back into `theta`, on the monotonic part of `r` only.

use crate::csv_table::{CsvError, read_rows};
use std::f64::consts::{LN_2, PI};

/// The shape of one lobe's one-way voltage pattern (peak 1 on its own axis).
#[derive(Clone, Debug, PartialEq)]
pub enum BeamShape {
    /// `g(x) = exp(-2 ln2 x^2 / BW^2)`.
    Gaussian,
    /// Uniform line aperture: `g = sin(pi u) / (pi u)`, `u = (D/lambda) sin x`.
    Uniform,
    /// Cosine-tapered aperture: `g = cos(pi u) / (1 - 4 u^2)` (normalised).
    Cosine,
    /// Measured pattern: (angle from the lobe axis in degrees, gain in dB),
    /// sorted by angle; interpolated linearly in dB.
    Table(Vec<(f64, f64)>),
}

/// Half-power point `u` of the uniform aperture: sinc^2(u) = 1/2.
pub const UNIFORM_HALF_POWER_U: f64 = 0.442_946_470_689_452_3;
/// Half-power point `u` of the cosine-tapered aperture.
pub const COSINE_HALF_POWER_U: f64 = 0.594_482_390_466_472_7;

fn sinc(u: f64) -> f64 {
    if u.abs() < 1e-12 { 1.0 } else { (PI * u).sin() / (PI * u) }
}

fn cosine_taper(u: f64) -> f64 {
    let d = 1.0 - 4.0 * u * u;
    if d.abs() < 1e-9 {
        // Limit at u = 1/2: pi/4.
        PI / 4.0
    } else {
        (PI * u).cos() / d
    }
}

/// Find `u` in `[lo, hi]` with `f(u) = 1/2` by bisection (f decreasing).
pub fn half_power_u(f: impl Fn(f64) -> f64, mut lo: f64, mut hi: f64) -> f64 {
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if f(mid) > 0.5 { lo = mid } else { hi = mid }
    }
    0.5 * (lo + hi)
}

/// One lobe's pattern with its one-way half-power beamwidth.
#[derive(Clone, Debug, PartialEq)]
pub struct Beam {
    pub shape: BeamShape,
    /// One-way 3 dB beamwidth, degrees (for tables: measured from the table).
    pub beamwidth_deg: f64,
    /// Aperture length over wavelength, for the aperture shapes.
    aperture: f64,
}

impl Beam {
    /// A beam of `shape` with one-way 3 dB beamwidth `beamwidth_deg`. For a
    /// table the beamwidth is measured from the table and the argument ignored.
    pub fn new(shape: BeamShape, beamwidth_deg: f64) -> Result<Beam, String> {
        let table = matches!(shape, BeamShape::Table(_));
        // NaN fails the range test too.
        let in_range = beamwidth_deg > 0.0 && beamwidth_deg < 180.0;
        if !table && !in_range {
            return Err(format!("beamwidth {beamwidth_deg} deg is not between 0 and 180"));
        }
        let half = (beamwidth_deg / 2.0).to_radians().sin();
        let (aperture, bw) = match &shape {
            BeamShape::Gaussian => (0.0, beamwidth_deg),
            BeamShape::Uniform => (UNIFORM_HALF_POWER_U / half, beamwidth_deg),
            BeamShape::Cosine => (COSINE_HALF_POWER_U / half, beamwidth_deg),
            BeamShape::Table(t) => {
                check_table(t)?;
                (0.0, table_beamwidth(t)?)
            }
        };
        Ok(Beam { shape, beamwidth_deg: bw, aperture })
    }

    /// One-way voltage gain at `x_deg` from the lobe's own axis (peak 1).
    pub fn voltage(&self, x_deg: f64) -> f64 {
        match &self.shape {
            BeamShape::Gaussian => (-2.0 * LN_2 * x_deg * x_deg / (self.beamwidth_deg * self.beamwidth_deg)).exp(),
            BeamShape::Uniform => sinc(self.aperture * x_deg.to_radians().sin()),
            BeamShape::Cosine => cosine_taper(self.aperture * x_deg.to_radians().sin()),
            BeamShape::Table(t) => 10f64.powf(table_db(t, x_deg) / 20.0),
        }
    }

    /// Natural log of |voltage|, kept finite near nulls.
    pub fn ln_voltage(&self, x_deg: f64) -> f64 {
        match &self.shape {
            BeamShape::Gaussian => -2.0 * LN_2 * x_deg * x_deg / (self.beamwidth_deg * self.beamwidth_deg),
            BeamShape::Table(t) => table_db(t, x_deg) / 20.0 * std::f64::consts::LN_10,
            _ => self.voltage(x_deg).abs().max(1e-300).ln(),
        }
    }
}

fn check_table(t: &[(f64, f64)]) -> Result<(), String> {
    if t.len() < 3 {
        return Err("a measured pattern needs at least 3 points".into());
    }
    for w in t.windows(2) {
        if w[1].0 <= w[0].0 {
            return Err(format!("pattern angles must increase (at {} deg)", w[1].0));
        }
    }
    if t.iter().any(|(a, g)| !a.is_finite() || !g.is_finite()) {
        return Err("pattern has a non-finite value".into());
    }
    Ok(())
}

fn table_db(t: &[(f64, f64)], x: f64) -> f64 {
    let i = t.partition_point(|p| p.0 < x);
    if i == 0 {
        return t[0].1;
    }
    if i >= t.len() {
        return t[t.len() - 1].1;
    }
    let (a0, g0) = t[i - 1];
    let (a1, g1) = t[i];
    g0 + (g1 - g0) * (x - a0) / (a1 - a0)
}

/// Width between the -3.0103 dB points either side of the table's peak.
fn table_beamwidth(t: &[(f64, f64)]) -> Result<f64, String> {
    let (pk, &(_, gmax)) = t.iter().enumerate().max_by(|a, b| a.1.1.total_cmp(&b.1.1)).ok_or("empty pattern")?;
    let level = gmax - 10.0 * 2f64.log10();
    let cross = |range: &mut dyn Iterator<Item = usize>| -> Option<f64> {
        let mut prev = pk;
        for i in range {
            if t[i].1 <= level {
                let (a0, g0) = t[prev];
                let (a1, g1) = t[i];
                return Some(a0 + (a1 - a0) * (g0 - level) / (g0 - g1));
            }
            prev = i;
        }
        None
    };
    let right = cross(&mut (pk + 1..t.len())).ok_or("pattern never falls 3 dB right of its peak")?;
    let left = cross(&mut (0..pk).rev()).ok_or("pattern never falls 3 dB left of its peak")?;
    Ok(right - left)
}

/// Read a measured pattern CSV: rows of `angle_deg,gain_db` (quoted or
/// not); a header row and `#` comments are skipped. Errors name the line;
/// the caller names the file.
pub fn parse_pattern_csv(text: &str) -> Result<Vec<(f64, f64)>, String> {
    let mut out = Vec::new();
    for (k, row) in read_rows(text, "")?.into_iter().enumerate() {
        let field = |k: usize| row.fields.get(k).map_or("", String::as_str);
        match (field(0).parse::<f64>(), field(1).parse::<f64>()) {
            (Ok(a), Ok(g)) => out.push((a, g)),
            _ if k == 0 => continue, // header
            _ => {
                let got = row.fields.join(",");
                return Err(CsvError::at("", row.line, format!("expected 'angle_deg,gain_db', got '{got}'")).into());
            }
        }
    }
    check_table(&out)?;
    Ok(out)
}

/// A squinted pair of identical lobes and the inverse of its ratio.
#[derive(Clone, Debug)]
pub struct PairModel {
    pub beam: Beam,
    pub squint_deg: f64,
    /// 1 for one-way, 2 for two-way.
    pub way: u32,
    /// Monotonic region of the log ratio, degrees (symmetric).
    pub limit_deg: f64,
    r_limit: f64,
}

impl PairModel {
    pub fn new(beam: Beam, squint_deg: f64, way: u32) -> Result<PairModel, String> {
        if squint_deg.is_nan() || squint_deg <= 0.0 {
            return Err(format!("squint {squint_deg} deg must be positive"));
        }
        if way != 1 && way != 2 {
            return Err("way must be 1 (one-way) or 2 (two-way)".into());
        }
        let mut m = PairModel { beam, squint_deg, way, limit_deg: 0.0, r_limit: 0.0 };
        // Walk outward from boresight while r keeps increasing.
        let step = (m.beam.beamwidth_deg / 2000.0).max(1e-5);
        let mut theta = 0.0;
        let mut r_prev = m.log_ratio(0.0);
        let max = 90.0 - squint_deg;
        loop {
            let next = theta + step;
            let r = m.log_ratio(next);
            if next > max || !r.is_finite() || r <= r_prev {
                break;
            }
            theta = next;
            r_prev = r;
        }
        if theta <= 0.0 {
            return Err("the pair's ratio is not monotonic near boresight (check squint and pattern)".into());
        }
        m.limit_deg = theta;
        m.r_limit = r_prev;
        Ok(m)
    }

    /// `n ln(A/B)` for a target at `theta_deg` (A: lobe at +squint).
    pub fn log_ratio(&self, theta_deg: f64) -> f64 {
        self.way as f64
            * (self.beam.ln_voltage(theta_deg - self.squint_deg) - self.beam.ln_voltage(theta_deg + self.squint_deg))
    }

    /// Lobe amplitudes (A, B) for a target at `theta_deg` (pattern^n).
    pub fn amplitudes(&self, theta_deg: f64) -> (f64, f64) {
        let n = self.way as i32;
        (
            self.beam.voltage(theta_deg - self.squint_deg).abs().powi(n),
            self.beam.voltage(theta_deg + self.squint_deg).abs().powi(n),
        )
    }

    /// Slope d r / d theta at `theta_deg`, per degree.
    pub fn slope(&self, theta_deg: f64) -> f64 {
        if let BeamShape::Gaussian = self.beam.shape {
            let bw = self.beam.beamwidth_deg;
            return 8.0 * self.way as f64 * LN_2 * self.squint_deg / (bw * bw);
        }
        let h = (self.beam.beamwidth_deg * 1e-4).max(1e-7);
        (self.log_ratio(theta_deg + h) - self.log_ratio(theta_deg - h)) / (2.0 * h)
    }

    /// The angle whose log ratio is `r`, or None outside the monotonic region.
    pub fn angle(&self, r: f64) -> Option<f64> {
        if !r.is_finite() || r.abs() > self.r_limit {
            return None;
        }
        if let BeamShape::Gaussian = self.beam.shape {
            return Some(r / self.slope(0.0));
        }
        let (mut lo, mut hi) = (-self.limit_deg, self.limit_deg);
        for _ in 0..100 {
            let mid = 0.5 * (lo + hi);
            if self.log_ratio(mid) < r { lo = mid } else { hi = mid }
        }
        Some(0.5 * (lo + hi))
    }

    /// Narrow the usable region to where the far lobe's one-way gain is at
    /// least `floor_db` (negative, dB relative to its peak). Past that the far
    /// lobe's echo sinks towards the noise and its nulls and sidelobes make the
    /// ratio ambiguous, even where the pattern is still monotonic.
    pub fn with_floor(mut self, floor_db: f64) -> PairModel {
        let step = (self.beam.beamwidth_deg / 2000.0).max(1e-5);
        let mut theta = 0.0;
        while theta + step <= self.limit_deg
            && 20.0 * self.beam.voltage(theta + step + self.squint_deg).abs().max(1e-300).log10() >= floor_db
        {
            theta += step;
        }
        if theta > 0.0 && theta < self.limit_deg {
            self.limit_deg = theta;
            self.r_limit = self.log_ratio(theta);
        }
        self
    }

    /// Largest |log ratio| the usable region produces.
    pub fn r_limit(&self) -> f64 {
        self.r_limit
    }

    /// One-way or two-way gain of each lobe at boresight, dB (the crossover).
    pub fn crossover_db(&self) -> f64 {
        20.0 * self.way as f64 * self.beam.voltage(self.squint_deg).abs().log10()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Check values of docs/derivations.md §3, worked by hand from the
    // Gaussian formula (Skolnik, Introduction to Radar Systems, tracking-radar
    // chapter, from memory, for the Gaussian main-lobe model itself).
    #[test]
    fn gaussian_check_values() {
        let one = PairModel::new(Beam::new(BeamShape::Gaussian, 10.0).unwrap(), 5.0, 1).unwrap();
        let r = one.log_ratio(1.0);
        assert!((r - 0.277259).abs() < 1e-6, "{r}");
        assert!((r.exp() - 1.319508).abs() < 1e-6);
        assert!((20.0 * r.exp().log10() - 2.4082).abs() < 1e-4);
        assert!(((r / 2.0).tanh() - 0.137748).abs() < 1e-6);
        let two = PairModel::new(Beam::new(BeamShape::Gaussian, 6.0).unwrap(), 2.4, 2).unwrap();
        let r = two.log_ratio(0.5);
        assert!((r - 0.369678).abs() < 1e-6, "{r}");
        assert!((r.exp() - 1.447269).abs() < 1e-6);
        assert!((20.0 * r.exp().log10() - 3.2110).abs() < 1e-4);
        assert!(((r / 2.0).tanh() - 0.182763).abs() < 1e-6);
        assert!((two.crossover_db() + 3.853).abs() < 1e-3);
    }

    #[test]
    fn half_power_constants_rederived() {
        // 0.886 lambda/D for uniform (Balanis, Antenna Theory, from memory),
        // 1.19 lambda/D for cosine taper: BW = 2 u0 in the small-angle limit.
        let u = half_power_u(|u| sinc(u).powi(2), 0.0, 0.9);
        assert!((u - UNIFORM_HALF_POWER_U).abs() < 1e-12);
        assert!((2.0 * u - 0.886).abs() < 1e-3);
        let c = half_power_u(|u| cosine_taper(u).powi(2), 0.0, 1.2);
        assert!((c - COSINE_HALF_POWER_U).abs() < 1e-12);
        assert!((2.0 * c - 1.189).abs() < 1e-3);
    }

    #[test]
    fn every_model_round_trips_across_its_monotonic_region() {
        let table: Vec<(f64, f64)> = (-300..=300)
            .map(|i| {
                let x = i as f64 * 0.1;
                (x, 20.0 * Beam::new(BeamShape::Cosine, 8.0).unwrap().voltage(x).abs().max(1e-6).log10())
            })
            .collect();
        for shape in [BeamShape::Gaussian, BeamShape::Uniform, BeamShape::Cosine, BeamShape::Table(table)] {
            for way in [1, 2] {
                let beam = Beam::new(shape.clone(), 8.0).unwrap();
                assert!((beam.voltage(beam.beamwidth_deg / 2.0).powi(2) - 0.5).abs() < 2e-3, "{shape:?}");
                let m = PairModel::new(beam, 3.5, way).unwrap();
                assert!(m.limit_deg > 3.5, "{shape:?} limit {}", m.limit_deg);
                for k in -20..=20 {
                    let theta = m.limit_deg * 0.98 * k as f64 / 20.0;
                    let (a, b) = m.amplitudes(theta);
                    let back = m.angle((a / b).ln()).expect("inside region");
                    assert!((back - theta).abs() < 1e-4, "{shape:?} way {way}: {theta} -> {back}");
                }
                assert_eq!(m.angle(m.log_ratio(m.limit_deg) * 1.01), None);
            }
        }
    }

    #[test]
    fn a_floor_narrows_the_region_to_where_the_far_lobe_is_still_up() {
        // Uniform aperture, 8 deg, squint 3.5: the far lobe's first null sits
        // at asin(1/(D/lambda)) - 3.5 deg; a -20 dB floor stops short of it.
        let m = PairModel::new(Beam::new(BeamShape::Uniform, 8.0).unwrap(), 3.5, 2).unwrap();
        let null = (1.0 / (UNIFORM_HALF_POWER_U / 4f64.to_radians().sin())).asin().to_degrees() - 3.5;
        assert!((m.limit_deg - null).abs() < 0.01, "{} vs null {null}", m.limit_deg);
        let f = m.clone().with_floor(-20.0);
        assert!(f.limit_deg < null - 0.5 && f.limit_deg > 3.0, "{}", f.limit_deg);
        let far = f.beam.voltage(f.limit_deg + 3.5);
        assert!((20.0 * far.log10() + 20.0).abs() < 0.05);
        assert_eq!(f.angle(f.log_ratio(f.limit_deg + 0.1)), None);
        assert!(f.angle(f.log_ratio(f.limit_deg - 0.1)).is_some());
    }

    #[test]
    fn a_pattern_quoted_by_python_reads_as_the_plain_table() {
        let plain = parse_pattern_csv(include_str!("../../tests/fixtures/pattern_table.csv")).unwrap();
        let quoted = parse_pattern_csv(include_str!("../../tests/fixtures/pattern_table_quoted.csv")).unwrap();
        assert_eq!(quoted, plain);
        assert_eq!(plain[0], (-12.0, -40.0));
        let e = parse_pattern_csv("\"angle_deg\",\"gain_db\"\n\"-1\",\"-3\"\n\"0\",\"0, 1\"\n").unwrap_err();
        assert!(e.starts_with("line 3: ") && e.contains("0,0, 1"), "{e}");
    }

    #[test]
    fn pattern_csv_errors_name_the_line() {
        let e = parse_pattern_csv("angle_deg,gain_db\n-1,-3\n0,0\nx,1\n").unwrap_err();
        assert!(e.starts_with("line 4"), "{e}");
        let t = parse_pattern_csv("angle_deg,gain_db\n-2,-6\n-1,-1.5\n0,0\n1,-1.5\n2,-6\n").unwrap();
        assert_eq!(t.len(), 5);
    }
}
