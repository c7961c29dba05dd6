//! Antenna pointing telemetry for a calibration scan: the CSV
//! `time_s,az_deg,el_deg`, moved onto the capture's clock, checked for gaps
//! and jumps, and turned into the source's offset from boresight in the
//! antenna frame (see docs/calibration.md for the geometry).

use lobeflow_blocks::csv_table::read_rows;
use lobeflow_blocks::dsp::tracking::Telemetry;

/// Pointing samples on the capture's clock.
pub struct Pointing {
    /// (line number in the file, time on the file's clock, az, el).
    rows: Vec<(usize, f64, f64, f64)>,
    /// Added to the file's `time_s` to put it on the capture's clock.
    clock_offset_s: f64,
    /// Gaps and jumps found, one line each.
    pub irregularities: Vec<String>,
    /// Longest interval between rows that is still interpolated across, s.
    pub max_step_s: f64,
    /// Largest angular step between rows that is still interpolated across, deg.
    pub max_jump_deg: f64,
}

/// Rows further apart than this many typical intervals make a gap.
const GAP_INTERVALS: f64 = 3.0;
/// A step this many times the typical angular step (and over
/// [`JUMP_FLOOR_DEG`]) makes a jump.
const JUMP_STEPS: f64 = 5.0;
const JUMP_FLOOR_DEG: f64 = 0.05;
/// Irregularities listed one by one; the rest are counted.
const LISTED: usize = 10;

impl Pointing {
    /// Parse `text` (file name `file` for messages); `clock_offset_s` is
    /// added to each `time_s` to put it on the capture's clock.
    pub fn parse(text: &str, file: &str, clock_offset_s: f64) -> Result<Pointing, String> {
        // The tracker's reader checks the syntax and names bad lines.
        let table = Telemetry::parse(text, file)?;
        let col = |name: &str| {
            table.column(name).ok_or_else(|| {
                format!(
                    "{file}: no column '{name}' (calibration needs time_s,az_deg,el_deg); its columns: {}",
                    table.columns().join(",")
                )
            })
        };
        let (az, el) = (col("az_deg")? + 1, col("el_deg")? + 1);
        // The header row first, then the rows Telemetry::parse checked.
        let rows = read_rows(text, file)?
            .into_iter()
            .skip(1)
            .map(|row| {
                let f = |c: usize| row.fields.get(c).and_then(|x| x.parse::<f64>().ok()).unwrap_or(f64::NAN);
                (row.line as usize, f(0), f(az), f(el))
            })
            .collect();
        let mut p = Pointing {
            rows,
            clock_offset_s,
            irregularities: Vec::new(),
            max_step_s: f64::INFINITY,
            max_jump_deg: f64::INFINITY,
        };
        p.find_irregularities(file);
        Ok(p)
    }

    /// Gaps (intervals much longer than usual) and jumps (angular steps much
    /// larger than usual); estimates inside either are not used.
    fn find_irregularities(&mut self, file: &str) {
        let steps: Vec<f64> = self.rows.windows(2).map(|w| w[1].1 - w[0].1).collect();
        let jumps: Vec<f64> =
            self.rows.windows(2).map(|w| great_circle_deg((w[0].2, w[0].3), (w[1].2, w[1].3))).collect();
        let typical_step = median(&steps);
        let typical_jump = median(&jumps);
        self.max_step_s = GAP_INTERVALS * typical_step;
        self.max_jump_deg = (JUMP_STEPS * typical_jump).max(JUMP_FLOOR_DEG);
        let mut found = Vec::new();
        for (w, (dt, da)) in self.rows.windows(2).zip(steps.iter().zip(&jumps)) {
            let (a, b) = (w[0].1 + self.clock_offset_s, w[1].1 + self.clock_offset_s);
            let (la, lb) = (w[0].0, w[1].0);
            if *dt > self.max_step_s {
                found.push(format!(
                    "{file}: gap of {dt:.3} s between lines {la} and {lb} (capture time {a:.3} to {b:.3} s; usual interval {typical_step:.3} s)"
                ));
            } else if *da > self.max_jump_deg {
                found.push(format!(
                    "{file}: jump of {da:.3} deg between lines {la} and {lb} (capture time {a:.3} to {b:.3} s; usual step {typical_jump:.4} deg)"
                ));
            }
        }
        if found.len() > LISTED {
            let more = found.len() - LISTED;
            found.truncate(LISTED);
            found.push(format!("{file}: ... and {more} more gaps or jumps"));
        }
        self.irregularities = found;
    }

    /// Pointing (az, el) in degrees at capture time `t`, or None outside the
    /// table or across a gap or jump.
    pub fn at(&self, t: f64) -> Option<(f64, f64)> {
        let tf = t - self.clock_offset_s;
        let i = self.rows.partition_point(|r| r.1 < tf);
        if i == 0 {
            return (self.rows.first()?.1 == tf).then(|| (self.rows[0].2, self.rows[0].3));
        }
        let (a, b) = (self.rows[i - 1], *self.rows.get(i)?);
        if b.1 - a.1 > self.max_step_s || great_circle_deg((a.2, a.3), (b.2, b.3)) > self.max_jump_deg {
            return None;
        }
        let f = (tf - a.1) / (b.1 - a.1);
        // Azimuth the short way round (359.9 to 0.1 is 0.2 deg).
        let daz = (b.2 - a.2 + 540.0).rem_euclid(360.0) - 180.0;
        Some((a.2 + f * daz, a.3 + f * (b.3 - a.3)))
    }

    /// Capture-clock span of the table, s.
    pub fn span(&self) -> (f64, f64) {
        let first = self.rows.first().map_or(f64::NAN, |r| r.1);
        let last = self.rows.last().map_or(f64::NAN, |r| r.1);
        (first + self.clock_offset_s, last + self.clock_offset_s)
    }
}

fn median(v: &[f64]) -> f64 {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    if s.is_empty() {
        return f64::NAN;
    }
    s.sort_by(f64::total_cmp);
    s[s.len() / 2]
}

fn unit(az_deg: f64, el_deg: f64) -> [f64; 3] {
    let (az, el) = (az_deg.to_radians(), el_deg.to_radians());
    [el.cos() * az.cos(), el.cos() * az.sin(), el.sin()]
}

fn great_circle_deg(a: (f64, f64), b: (f64, f64)) -> f64 {
    let (u, v) = (unit(a.0, a.1), unit(b.0, b.1));
    let dot: f64 = u.iter().zip(&v).map(|(x, y)| x * y).sum();
    let cross = [u[1] * v[2] - u[2] * v[1], u[2] * v[0] - u[0] * v[2], u[0] * v[1] - u[1] * v[0]];
    let n = cross.iter().map(|c| c * c).sum::<f64>().sqrt();
    n.atan2(dot).to_degrees()
}

/// The source's offset from boresight in the antenna frame, degrees:
/// (traverse, toward the antenna's right; elevation, up). The traverse
/// angle is the azimuth difference shrunk by cos(el) near boresight.
pub fn antenna_frame_offset(pointing: (f64, f64), source: (f64, f64)) -> (f64, f64) {
    let (az_p, el_p) = (pointing.0.to_radians(), pointing.1.to_radians());
    let s = unit(source.0, source.1);
    // Basis of the antenna frame: boresight b, right r (horizontal), up u.
    let b = unit(pointing.0, pointing.1);
    let r = [-az_p.sin(), az_p.cos(), 0.0];
    let u = [-el_p.sin() * az_p.cos(), -el_p.sin() * az_p.sin(), el_p.cos()];
    let dot = |a: &[f64; 3], c: &[f64; 3]| a[0] * c[0] + a[1] * c[1] + a[2] * c[2];
    let (sb, sr, su) = (dot(&s, &b), dot(&s, &r), dot(&s, &u));
    let traverse = sr.clamp(-1.0, 1.0).asin().to_degrees();
    let elevation = su.atan2(sb).to_degrees();
    (traverse, elevation)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn traverse_shrinks_with_cos_el_and_elevation_is_direct() {
        // 1 deg of azimuth at 60 deg elevation is 0.5 deg across the sky
        // (small-angle: delta_az cos el).
        let (x, y) = antenna_frame_offset((100.0, 60.0), (101.0, 60.0));
        assert!((x - 0.5).abs() < 1e-3, "{x}");
        assert!(y.abs() < 0.01, "{y}");
        let (x, y) = antenna_frame_offset((100.0, 10.0), (100.0, 12.5));
        assert!(x.abs() < 1e-12 && (y - 2.5).abs() < 1e-9, "{x} {y}");
        // Exact: a source on the horizon 90 deg right of an antenna at the zenith side.
        let (x, _) = antenna_frame_offset((0.0, 0.0), (90.0, 0.0));
        assert!((x - 90.0).abs() < 1e-9);
    }

    #[test]
    fn gaps_and_jumps_are_reported_and_not_interpolated() {
        // A comment and a blank line first: the lines named count them.
        let mut text = String::from("# scan of the test source\n\ntime_s,az_deg,el_deg\n");
        for k in 0..50 {
            let t = k as f64 * 0.1 + if k >= 30 { 1.0 } else { 0.0 };
            let az = 10.0 + 0.01 * k as f64 + if k >= 40 { 2.0 } else { 0.0 };
            text.push_str(&format!("{t:.2},{az:.3},5\n"));
        }
        let p = Pointing::parse(&text, "scan.csv", 0.5).unwrap();
        assert_eq!(p.irregularities.len(), 2, "{:?}", p.irregularities);
        assert!(
            p.irregularities[0].contains("gap") && p.irregularities[0].contains("lines 33 and 34"),
            "{:?}",
            p.irregularities
        );
        assert!(p.irregularities[1].contains("jump"));
        assert!(p.at(0.5 + 0.15).is_some());
        assert!(p.at(0.5 + 3.4).is_none(), "inside the gap");
        assert!(p.at(0.1).is_none(), "before the table on the capture clock");
        let e = Pointing::parse("time_s,az_deg\n0,1\n1,2\n", "p.csv", 0.0).err().unwrap();
        assert!(e.contains("el_deg"), "{e}");
    }
}
