//! Geometry of the circular sweep formatter (derived in docs/derivations.md,
//! section 10).
//!
//! A range window is wound onto a circle: `revolutions` turns per window, so
//! the angle around the circle is proportional to range within one turn. An
//! echo deflects the trace radially. Angles are measured clockwise from
//! twelve o'clock; screen coordinates have y pointing down.

use std::f64::consts::TAU;

/// One circle of the formatter: where it sits and how range winds onto it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Winding {
    pub centre: (f64, f64),
    pub radius: f64,
    pub range_start_m: f64,
    pub range_end_m: f64,
    pub revolutions: f64,
}

impl Winding {
    pub fn new(
        centre: (f64, f64),
        radius: f64,
        range_start_m: f64,
        range_end_m: f64,
        revolutions: f64,
    ) -> Result<Winding, String> {
        if !range_start_m.is_finite() || !range_end_m.is_finite() || range_end_m <= range_start_m {
            return Err(format!("range window {range_start_m} m to {range_end_m} m is empty"));
        }
        if !(revolutions > 0.0 && revolutions.is_finite()) {
            return Err(format!("revolutions must be positive, got {revolutions}"));
        }
        if !(radius > 0.0 && radius.is_finite()) {
            return Err(format!("radius must be positive, got {radius}"));
        }
        Ok(Winding { centre, radius, range_start_m, range_end_m, revolutions })
    }

    /// The same window and place, wound once (the coarse circle).
    pub fn single_turn(&self, centre: (f64, f64), radius: f64) -> Winding {
        Winding { centre, radius, revolutions: 1.0, ..*self }
    }

    /// Range covered by one turn.
    pub fn metres_per_turn(&self) -> f64 {
        (self.range_end_m - self.range_start_m) / self.revolutions
    }

    /// Turns (with fraction) from the window start to `range_m`.
    pub fn turns(&self, range_m: f64) -> f64 {
        (range_m - self.range_start_m) / self.metres_per_turn()
    }

    /// The coarse/fine split: whole turns completed, and the angle within
    /// the current turn in radians (0 ≤ angle < 2π).
    pub fn split(&self, range_m: f64) -> (i64, f64) {
        let t = self.turns(range_m);
        let whole = t.floor();
        let angle = ((t - whole) * TAU).clamp(0.0, TAU);
        if angle >= TAU { (whole as i64 + 1, 0.0) } else { (whole as i64, angle) }
    }

    /// Angle of `range_m` around the circle, radians clockwise from the top.
    pub fn angle(&self, range_m: f64) -> f64 {
        self.split(range_m).1
    }

    /// Screen point of `range_m` with the trace deflected by `deflection`
    /// pixels (positive outward).
    pub fn point(&self, range_m: f64, deflection: f64) -> (f64, f64) {
        let a = self.angle(range_m);
        self.point_at_angle(a, self.radius + deflection)
    }

    /// Screen point at angle `a` and distance `r` from the centre.
    pub fn point_at_angle(&self, a: f64, r: f64) -> (f64, f64) {
        (self.centre.0 + r * a.sin(), self.centre.1 - r * a.cos())
    }

    /// Angle (clockwise from the top, 0..2π) of a screen point: how a reader
    /// takes an echo's position off the picture.
    pub fn angle_of(&self, p: (f64, f64)) -> f64 {
        let a = (p.0 - self.centre.0).atan2(self.centre.1 - p.1);
        if a < 0.0 { a + TAU } else { a }
    }
}

/// Range read from a coarse single-turn circle and a fine circle of the same
/// window: the coarse angle picks the turn, the fine angle the place within
/// it (the turn whose reading lies closest to the coarse one).
pub fn read_range(fine: &Winding, coarse_angle: f64, fine_angle: f64) -> f64 {
    let coarse_turns = coarse_angle / TAU * fine.revolutions;
    let frac = fine_angle / TAU;
    let turn = (coarse_turns - frac).round().max(0.0);
    fine.range_start_m + (turn + frac) * fine.metres_per_turn()
}

/// A straight sweep of the same window drawn across the circle's diameter
/// (left to right through the centre), for comparison.
pub fn straight_point(w: &Winding, range_m: f64) -> (f64, f64) {
    let f = (range_m - w.range_start_m) / (w.range_end_m - w.range_start_m);
    (w.centre.0 - w.radius + 2.0 * w.radius * f, w.centre.1)
}

/// Length of a polyline.
pub fn path_length(points: &[(f64, f64)]) -> f64 {
    points.windows(2).map(|p| (p[1].0 - p[0].0).hypot(p[1].1 - p[0].1)).sum()
}

/// Peak of a sampled curve with sub-sample position by a parabola through
/// the largest sample and its neighbours. Returns (fractional index, value).
pub fn interpolated_peak(values: &[f64]) -> Option<(f64, f64)> {
    let (k, &v) = values.iter().enumerate().filter(|(_, v)| v.is_finite()).max_by(|a, b| a.1.total_cmp(b.1))?;
    if k == 0 || k + 1 >= values.len() {
        return Some((k as f64, v));
    }
    let (l, r) = (values[k - 1], values[k + 1]);
    if !l.is_finite() || !r.is_finite() {
        return Some((k as f64, v));
    }
    let denom = l - 2.0 * v + r;
    if denom >= 0.0 {
        return Some((k as f64, v));
    }
    let delta = (0.5 * (l - r) / denom).clamp(-0.5, 0.5);
    Some((k as f64 + delta, v - 0.25 * (l - r) * delta))
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::PI;

    fn fine() -> Winding {
        Winding::new((300.0, 300.0), 200.0, 2_000.0, 42_000.0, 8.0).unwrap()
    }

    #[test]
    fn zero_echo_points_lie_on_the_circle() {
        let w = fine();
        for k in 0..500 {
            let r = 2_000.0 + 80.0 * k as f64;
            let (x, y) = w.point(r, 0.0);
            let d = (x - 300.0).hypot(y - 300.0);
            assert!((d - 200.0).abs() < 1e-9, "range {r}: distance {d}");
        }
        // Window start at twelve o'clock, a quarter turn at three o'clock.
        let (x, y) = w.point(2_000.0, 0.0);
        assert!((x - 300.0).abs() < 1e-9 && (y - 100.0).abs() < 1e-9);
        let (x, y) = w.point(2_000.0 + w.metres_per_turn() / 4.0, 0.0);
        assert!((x - 500.0).abs() < 1e-9 && (y - 300.0).abs() < 1e-9);
        // Outward deflection moves away from the centre.
        let (x, y) = w.point(2_000.0, 30.0);
        assert!((x - 300.0).abs() < 1e-9 && (y - 70.0).abs() < 1e-9);
    }

    #[test]
    fn window_winds_the_set_number_of_turns() {
        let w = fine();
        assert_eq!(w.metres_per_turn(), 5_000.0);
        // Unwrap the angle along the window and count the turns.
        let mut total = 0.0;
        let mut prev = w.angle(2_000.0);
        for k in 1..=4000 {
            let a = w.angle(2_000.0 + 10.0 * k as f64);
            let mut d = a - prev;
            if d < -PI {
                d += TAU;
            }
            total += d;
            prev = a;
        }
        assert!((total / TAU - 8.0).abs() < 1e-9, "turns {}", total / TAU);
        // Coarse and fine split: 3 turns and a quarter after the start.
        let (turn, angle) = w.split(2_000.0 + 3.25 * 5_000.0);
        assert_eq!(turn, 3);
        assert!((angle - PI / 2.0).abs() < 1e-12);
        let coarse = w.single_turn((700.0, 300.0), 100.0);
        assert!((coarse.angle(2_000.0 + 3.25 * 5_000.0) - TAU * 3.25 / 8.0).abs() < 1e-12);
    }

    #[test]
    fn coarse_and_fine_angles_read_back_the_range() {
        let w = fine();
        let coarse = w.single_turn((700.0, 300.0), 100.0);
        for k in 0..997 {
            let r = 2_000.0 + 40.1 * k as f64;
            // A reader's coarse angle may be off by a few degrees; the fine
            // angle still fixes the reading exactly.
            let c = coarse.angle(r) + 0.05;
            let f = w.angle_of(w.point(r, 12.0));
            let got = read_range(&w, c, f);
            assert!((got - r).abs() < 1e-6, "range {r}: read {got}");
        }
    }

    #[test]
    fn circular_trace_is_pi_times_the_straight_one() {
        // docs/derivations.md section 10: for one turn, the circle's
        // circumference over its diameter.
        let w = Winding::new((0.0, 0.0), 150.0, 0.0, 30_000.0, 1.0).unwrap();
        let n = 20_000;
        let circ: Vec<(f64, f64)> = (0..=n)
            .map(|k| {
                let r = 30_000.0 * k as f64 / n as f64;
                // The last point would wrap to the start angle; place it there explicitly.
                if k == n { w.point_at_angle(TAU, w.radius) } else { w.point(r, 0.0) }
            })
            .collect();
        let straight: Vec<(f64, f64)> = (0..=n).map(|k| straight_point(&w, 30_000.0 * k as f64 / n as f64)).collect();
        let ratio = path_length(&circ) / path_length(&straight);
        assert!((ratio - PI).abs() < 1e-6, "ratio {ratio}");
    }

    #[test]
    fn parabolic_peak_finds_a_sampled_parabola_vertex() {
        // A parabola's vertex is recovered exactly by three samples of it.
        let vertex = 7.3;
        let v: Vec<f64> = (0..15).map(|k| 10.0 - (k as f64 - vertex).powi(2)).collect();
        let (pos, top) = interpolated_peak(&v).unwrap();
        assert!((pos - vertex).abs() < 1e-12 && (top - 10.0).abs() < 1e-12);
        assert_eq!(interpolated_peak(&[]), None);
        assert_eq!(interpolated_peak(&[1.0, 3.0]), Some((1.0, 3.0)));
    }

    #[test]
    fn empty_windows_are_refused() {
        assert!(Winding::new((0.0, 0.0), 10.0, 5.0, 5.0, 1.0).is_err());
        assert!(Winding::new((0.0, 0.0), 10.0, 0.0, 5.0, 0.0).is_err());
        assert!(Winding::new((0.0, 0.0), 10.0, 0.0, f64::NAN, 1.0).is_err());
    }
}
