//! `circular_sweep`: the circular sweep formatter. The averaged sweep (or a
//! range window of it) is wound onto a fine circle of several turns, with a
//! coarse single-turn circle beside it; echoes deflect the trace radially and
//! the strongest echo's range is read off both circles.

use super::accum::{BinWindow, GateReport, SweepAverage, decimate_min_max, median};
use super::circular::{Winding, interpolated_peak, read_range};
use super::{Picture, PictureFormats, draw_err, fmt_km, frame, palette, text_style, write_picture};
use crate::dsp::gate::Weighting;
use crate::{
    BlockError, BlockSpec, BuildContext, Cell, DistanceSetting, FileStager, Item, ItemKind, Outputs, ParamType,
    TableRow, TypedBlock, Unit,
};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor;
use std::f64::consts::TAU;
use std::sync::Arc;

pub const SPEC: BlockSpec = BlockSpec::typed::<CircularSweep>(
    "circular_sweep",
    "Circular sweep formatter: winds the averaged sweep (or a range window of it) onto a fine circle of several turns \
     with a coarse one-turn circle beside it, echoes deflecting the trace; reads the strongest echo's range from both \
     circles and writes <path>.png and <path>.svg, optionally the trace as table rows.",
);

const DIST: ParamType = ParamType::Distance { min_m: 0.0, max_m: 1e8 };

crate::block_choice! {
    /// Which way echoes deflect the trace.
    pub enum Deflection { Outward = "outward", Inward = "inward" }
}

impl Deflection {
    /// +1 outward, -1 inward: the sign of a radial deflection.
    fn sign(self) -> f64 {
        match self {
            Deflection::Outward => 1.0,
            Deflection::Inward => -1.0,
        }
    }
}

crate::block_settings! {
    /// Settings of `circular_sweep`.
    pub struct CircularSweepSettings {
        range_start: DistanceSetting { ty: DIST, default: Some("0 m"), doc: "start of the range window" },
        range_end: DistanceSetting {
            ty: DIST,
            default: Some("0 m"),
            doc: "end of the range window (0 = to the end of the first sweep)",
        },
        revolutions: f64 {
            ty: ParamType::Number { unit: Unit::None, min: 1.0, max: 200.0 },
            default: Some("8"),
            doc: "turns of the fine circle per window",
        },
        deflection: Deflection {
            ty: ParamType::Choice(Deflection::WORDS),
            default: Some("outward"),
            doc: "which way echoes deflect the trace",
        },
        gain: f64 {
            ty: ParamType::Number { unit: Unit::None, min: 0.01, max: 100.0 },
            default: Some("1"),
            doc: "deflection scale (1: the strongest echo deflects by a quarter of the radius)",
        },
        mark_every: DistanceSetting {
            ty: ParamType::Distance { min_m: 1.0, max_m: 1e8 },
            default: Some("1 km"),
            doc: "range mark spacing",
        },
        average: u64 {
            ty: ParamType::Integer { min: 0, max: 1_000_000_000 },
            default: Some("0"),
            doc: "sweeps to average (0 = all; N = exponential average over about the last N)",
        },
        path: String {
            ty: ParamType::OutputPath,
            default: Some("sweep-circle"),
            doc: "base name: writes <path>.png and <path>.svg (see formats)",
        },
        formats: PictureFormats {
            ty: ParamType::Choice(PictureFormats::WORDS),
            default: Some("both"),
            doc: "which files: both (<path>.png and <path>.svg), svg or png (svg alone skips the bitmap, most of the cost)",
        },
    }
}

crate::block_ports! {
    inputs pub enum CircularSweepIn {
        Sweeps = required("sweeps", ItemKind::Sweep, "sweeps to average (all lobes)"),
        Gates = optional("gates", ItemKind::Row, "a range_gate's gates output: its echo length turns the peak into the leading edge"),
    }
}

crate::block_ports! {
    outputs pub enum CircularSweepOut {
        Rows = optional("rows", ItemKind::Row, "trace points (range_m, x, y, ...) and a final readout row"),
    }
}

const WIDTH: u32 = 1280;
const HEIGHT: u32 = 780;
/// Most trace points drawn per circle (the rows carry every bin).
const DRAWN_POINTS: usize = 6000;
/// Most range marks drawn around the fine circle per turn.
const MAX_MARKS_PER_TURN: f64 = 100.0;
/// Largest angle (radians) between drawn points of the trace: a degree.
const MAX_STEP_RAD: f64 = std::f64::consts::PI / 180.0;
/// Most points of an interpolated trace.
const INTERPOLATED_POINTS: usize = 40_000;
/// Width of a label character and height of a label line, pixels (12 px font).
const LABEL_CHAR_PX: f64 = 7.0;
const LABEL_HEIGHT_PX: f64 = 14.0;

/// Memory one range bin of the window takes by the end of a run: the
/// average (16 bytes), the trace (16) and its table row (about 450: the
/// item and seven cells; the column names are shared), estimated generously.
const BYTES_PER_BIN: f64 = 768.0;

pub struct CircularSweep {
    settings: CircularSweepSettings,
    files: FileStager,
    average: Option<SweepAverage>,
    gate: GateReport,
}

impl TypedBlock for CircularSweep {
    type Settings = CircularSweepSettings;
    type In = CircularSweepIn;
    type Out = CircularSweepOut;

    fn build(settings: CircularSweepSettings, ctx: &BuildContext) -> Result<Self, crate::BuildError> {
        Ok(CircularSweep { settings, files: ctx.files.clone(), average: None, gate: GateReport::default() })
    }

    fn process(&mut self, port: CircularSweepIn, item: Item, _out: &mut Outputs) -> Result<(), BlockError> {
        let sweep = match (port, item) {
            (CircularSweepIn::Sweeps, Item::Sweep(sweep)) => sweep,
            (CircularSweepIn::Gates, Item::Row(row)) => return self.gate.take(&row),
            _ => return Ok(()),
        };
        if self.average.is_none() {
            let s = &self.settings;
            let window = BinWindow::from_settings(&s.range_start, &s.range_end, &sweep)?;
            // Each bin becomes an averaged value, a trace point and a table
            // row of seven named cells at the end.
            crate::check_memory(
                &format!("a range window ('range_start'..'range_end') of {} bins", window.len),
                window.len as f64 * BYTES_PER_BIN,
            )
            .map_err(|e| BlockError::at(e, sweep.stamp.index))?;
            self.average = Some(SweepAverage::new(window, s.average, sweep.stamp));
        }
        if let Some(avg) = self.average.as_mut() {
            avg.add(&sweep)?;
        }
        Ok(())
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        let s = &self.settings;
        let Some(avg) = self.average.as_ref() else {
            out.warn(crate::Stamp::new(0, 1.0), "no sweeps arrived; the circle is drawn empty");
            return write_picture(&Empty, &s.path, s.formats, &self.files).map(|_| ());
        };
        let mark_m = s.mark_every.metres(avg.window.rate)?;
        if !(mark_m > 0.0 && mark_m.is_finite()) {
            return Err(BlockError::new(format!("parameter 'mark_every' must be a positive distance, got {mark_m} m")));
        }
        let mut scene =
            Scene::compute(avg, s.revolutions, s.deflection.sign(), s.gain, mark_m).map_err(BlockError::new)?;
        scene.read_leading_edge(avg, &self.gate);
        for row in scene.rows(avg) {
            out.push(CircularSweepOut::Rows, Item::Row(row));
        }
        write_picture(&scene, &s.path, s.formats, &self.files)?;
        Ok(())
    }
}

/// Everything the picture shows, computed once from the averaged sweep.
pub struct Scene {
    pub fine: Winding,
    pub coarse: Winding,
    /// Range (m) and radial deflection in pixels of the fine circle, per bin.
    pub trace: Vec<(f64, f64)>,
    pub amplitude: Vec<f64>,
    pub readout: Readout,
    pub mark_m: f64,
    pub sweeps: u64,
    /// The echo's leading edge (the range every table gives), when a gate
    /// was wired: read in the gate as the range gate reads it.
    pub leading_edge_m: Option<f64>,
    coarse_scale: f64,
    /// +1 outward, -1 inward.
    sign: f64,
}

/// The strongest echo as read from the picture.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Readout {
    /// Range from the coarse turn plus the fine angle.
    pub range_m: f64,
    pub turn: i64,
    pub fine_angle: f64,
    pub coarse_angle: f64,
    /// Echo amplitude over the median (floor) amplitude, dB.
    pub above_floor_db: f64,
}

impl Scene {
    pub fn compute(avg: &SweepAverage, revolutions: f64, sign: f64, gain: f64, mark_m: f64) -> Result<Scene, String> {
        let w = avg.window;
        let fine = Winding::new((400.0, 418.0), 260.0, w.start_m(), w.end_m(), revolutions)?;
        let coarse = fine.single_turn((1000.0, 300.0), 140.0);
        let amplitude = avg.amplitude();
        let floor = median(&amplitude).unwrap_or(0.0);
        let lifted: Vec<f64> =
            amplitude.iter().map(|a| if a.is_finite() { (a - floor).max(0.0) } else { 0.0 }).collect();
        let (peak_bin, peak_lift) = interpolated_peak(&lifted).unwrap_or((0.0, 0.0));
        let full_scale = if peak_lift > 0.0 { peak_lift } else { 1.0 };
        let max_defl = 0.25 * fine.radius * gain;
        let trace: Vec<(f64, f64)> = lifted
            .iter()
            .enumerate()
            .map(|(k, &l)| (w.range_m(k as f64), sign * (max_defl * l / full_scale).min(0.45 * fine.radius)))
            .collect();
        // Read the echo the way a person would: its angle on each circle.
        let echo_m = w.range_m(peak_bin);
        let echo_defl = sign * max_defl.min(0.45 * fine.radius);
        let fine_angle = fine.angle_of(fine.point(echo_m, echo_defl));
        let coarse_scale = coarse.radius / fine.radius;
        let coarse_angle = coarse.angle_of(coarse.point(echo_m, echo_defl * coarse_scale));
        let range_m = read_range(&fine, coarse_angle, fine_angle);
        let peak_amp = floor + peak_lift;
        let above_floor_db =
            if floor > 0.0 && peak_amp > 0.0 { 20.0 * (peak_amp / floor).log10() } else { f64::INFINITY };
        Ok(Scene {
            fine,
            coarse,
            trace,
            amplitude,
            readout: Readout { range_m, turn: fine.split(range_m).0, fine_angle, coarse_angle, above_floor_db },
            mark_m,
            sweeps: avg.sweeps,
            leading_edge_m: None,
            coarse_scale,
            sign,
        })
    }

    /// The echo's leading edge read as the range gate reads it: the
    /// amplitude centroid of the averaged power over the gate, less the
    /// noise (the mean over the noise region), less half the echo length
    /// ((P - 1) / 2 bins; docs/derivations.md, "Range").
    pub fn read_leading_edge(&mut self, avg: &SweepAverage, gate: &GateReport) {
        let w = avg.window;
        let (Some((g0, g1)), Some((n0, n1))) = (gate.span, gate.noise) else { return };
        let bin = |m: f64| (m / w.bin_m()).round() as i64 - w.first as i64;
        let clip = |b: i64| b.clamp(0, w.len as i64) as usize;
        let Some(noise) = avg.mean_power(clip(bin(n0)), clip(bin(n1))) else { return };
        let (lo, hi) = (clip(bin(g0)), clip(bin(g1)));
        let corrected: Vec<f64> = (lo..hi).map(|k| avg.power_at(k).map_or(0.0, |p| p - noise)).collect();
        self.leading_edge_m = Weighting::Amplitude
            .centroid(&corrected)
            .map(|c| w.range_m(lo as f64 + c) - 0.5 * (gate.echo_length_m - w.bin_m()).max(0.0));
    }

    /// Table rows: one per bin of the averaged window, then the readout.
    pub fn rows(&self, avg: &SweepAverage) -> Vec<TableRow> {
        // Column names and the point kinds, shared by every row.
        let [point, range, amplitude, x_name, y_name, turn_name, angle_name, trace, readout] =
            ["point", "range_m", "amplitude", "x", "y", "turn", "angle_deg", "trace", "readout"].map(Arc::<str>::from);
        let mut rows = Vec::with_capacity(self.trace.len() + 1);
        let make = |kind: &Arc<str>, range_m: f64, amp: f64, defl: f64| {
            let (x, y) = self.fine.point(range_m, defl);
            let (turn, angle) = self.fine.split(range_m);
            let fields = [
                (point.clone(), Cell::Text(kind.clone())),
                (range.clone(), Cell::Num(range_m)),
                (amplitude.clone(), if amp.is_finite() { Cell::Num(amp) } else { Cell::Empty }),
                // Normalised: circle radius 1, centre at the origin, y up.
                (x_name.clone(), Cell::Num((x - self.fine.centre.0) / self.fine.radius)),
                (y_name.clone(), Cell::Num((self.fine.centre.1 - y) / self.fine.radius)),
                (turn_name.clone(), Cell::Int(turn)),
                (angle_name.clone(), Cell::Num(angle.to_degrees())),
            ];
            TableRow { stamp: avg.first_stamp, fields: Arc::from(fields) }
        };
        for (k, &(r, d)) in self.trace.iter().enumerate() {
            rows.push(make(&trace, r, self.amplitude[k], d));
        }
        let peak_amp = self.amplitude.iter().copied().filter(|a| a.is_finite()).fold(f64::NAN, f64::max);
        let defl = self.trace.iter().map(|t| t.1).fold(0.0, |m: f64, d| if d.abs() > m.abs() { d } else { m });
        rows.push(make(&readout, self.readout.range_m, peak_amp, defl));
        rows
    }

    /// The trace as drawn on `w`: a vertex at every averaged bin, joined by
    /// points between neighbours (range and deflection taken linearly) so
    /// the circle is round however few bins a turn holds. Very long windows
    /// are reduced to their per-group extremes instead.
    pub fn drawn_trace(&self, w: &Winding, scale: f64) -> Vec<(f64, f64)> {
        let bins = self.trace.len();
        if bins > DRAWN_POINTS {
            let series: Vec<(f64, f64)> = self.trace.iter().enumerate().map(|(k, t)| (k as f64, t.1)).collect();
            return decimate_min_max(&series, DRAWN_POINTS)
                .into_iter()
                .map(|(k, d)| w.point(self.trace[k as usize].0, d * scale))
                .collect();
        }
        let bin_turns = match self.trace.get(..2) {
            Some([a, b]) => (b.0 - a.0) / w.metres_per_turn(),
            _ => 0.0,
        };
        let steps =
            ((bin_turns * TAU / MAX_STEP_RAD).ceil() as usize).clamp(1, (INTERPOLATED_POINTS / bins.max(1)).max(1));
        let mut points = Vec::with_capacity(bins * steps);
        for (k, &(r, d)) in self.trace.iter().enumerate() {
            points.push(w.point(r, d * scale));
            if let Some(&(r1, d1)) = self.trace.get(k + 1) {
                for j in 1..steps {
                    let f = j as f64 / steps as f64;
                    points.push(w.point(r + f * (r1 - r), (d + f * (d1 - d)) * scale));
                }
            }
        }
        points
    }

    fn draw_circle<DB: DrawingBackend>(
        &self,
        area: &DrawingArea<DB, Shift>,
        w: &Winding,
        scale: f64,
        fine: bool,
    ) -> Result<(), String> {
        let px = |p: (f64, f64)| (p.0.round() as i32, p.1.round() as i32);
        let c = px(w.centre);
        area.draw(&Circle::new(c, w.radius.round() as i32, palette::GRID.stroke_width(1))).map_err(draw_err)?;
        area.draw(&Circle::new(c, 3, palette::MUTED.filled())).map_err(draw_err)?;
        if fine {
            self.draw_fine_marks(area, w)?;
        } else {
            self.draw_coarse_marks(area, w)?;
        }
        let points: Vec<(i32, i32)> = self.drawn_trace(w, scale).into_iter().map(px).collect();
        area.draw(&PathElement::new(points, palette::TRACE.stroke_width(1))).map_err(draw_err)?;
        // Cursor through the echo.
        let a = if fine { self.readout.fine_angle } else { self.readout.coarse_angle };
        let tip = w.point_at_angle(a, w.radius + self.sign * 0.47 * self.fine.radius * scale);
        area.draw(&PathElement::new(vec![c, px(tip)], palette::ALERT.stroke_width(1))).map_err(draw_err)?;
        Ok(())
    }

    /// Mark spacing on `w`: the setting, doubled until a turn holds few enough.
    fn mark_step(&self, w: &Winding) -> f64 {
        let mut step = self.mark_m;
        while w.metres_per_turn() / step > MAX_MARKS_PER_TURN {
            step *= 2.0;
        }
        step
    }

    /// Fine circle: marks every step from the turn start, about a dozen
    /// labelled with their offset into the turn (the same on every turn).
    fn draw_fine_marks<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>, w: &Winding) -> Result<(), String> {
        let step = self.mark_step(w);
        let per_turn = w.metres_per_turn();
        let label_every = ((per_turn / step) / 12.0).ceil().max(1.0) as usize;
        let marks = ((per_turn - 0.5 * step) / step).floor().max(0.0) as usize;
        for j in 0..=marks.min(20_000) {
            let offset = j as f64 * step;
            let label = (j % label_every == 0).then(|| format!("+{}", trim_km(offset)));
            self.draw_mark(area, w, w.range_start_m + offset, j == 0, label)?;
        }
        Ok(())
    }

    /// Coarse circle: marks at whole multiples of the step (round ranges),
    /// about a dozen labelled with their range; each fine turn's start a
    /// long unlabelled tick.
    fn draw_coarse_marks<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>, w: &Winding) -> Result<(), String> {
        let step = self.mark_step(w);
        let span = w.range_end_m - w.range_start_m;
        let label_step = round_step(span / 12.0).max(step);
        let first = (w.range_start_m / step).ceil() as i64;
        let last = (w.range_end_m / step).floor() as i64;
        for m in first..=last.min(first + 20_000) {
            let r = m as f64 * step;
            let on_label = (r / label_step - (r / label_step).round()).abs() < 1e-6;
            self.draw_mark(area, w, r, on_label, on_label.then(|| trim_km(r)))?;
        }
        let fine_turn = self.fine.metres_per_turn();
        for t in 0..=(self.fine.revolutions.ceil() as usize).min(200) {
            let r = w.range_start_m + t as f64 * fine_turn;
            if r <= w.range_end_m {
                let (p0, p1) =
                    (w.point_at_angle(w.angle(r), w.radius), w.point_at_angle(w.angle(r), w.radius - self.sign * 16.0));
                let px = |p: (f64, f64)| (p.0.round() as i32, p.1.round() as i32);
                area.draw(&PathElement::new(vec![px(p0), px(p1)], palette::ALERT.stroke_width(2))).map_err(draw_err)?;
            }
        }
        Ok(())
    }

    /// One tick at `range_m` on the side away from the deflection, and its
    /// label placed clear of the tick and the circle: the label's centre
    /// sits out along the radius by half the text box's extent that way.
    fn draw_mark<DB: DrawingBackend>(
        &self,
        area: &DrawingArea<DB, Shift>,
        w: &Winding,
        range_m: f64,
        long: bool,
        label: Option<String>,
    ) -> Result<(), String> {
        let px = |p: (f64, f64)| (p.0.round() as i32, p.1.round() as i32);
        let tick_dir = -self.sign;
        let a = w.angle(range_m);
        let len = if long { 12.0 } else { 6.0 };
        let p0 = w.point_at_angle(a, w.radius);
        let p1 = w.point_at_angle(a, w.radius + tick_dir * len);
        area.draw(&PathElement::new(vec![px(p0), px(p1)], palette::INK.stroke_width(1))).map_err(draw_err)?;
        if let Some(label) = label {
            let (half_w, half_h) = (0.5 * LABEL_CHAR_PX * label.chars().count() as f64, 0.5 * LABEL_HEIGHT_PX);
            let clear = half_w * a.sin().abs() + half_h * a.cos().abs() + 4.0;
            let q = w.point_at_angle(a, w.radius + tick_dir * (len + clear));
            let style = text_style(12.0, palette::MUTED)
                .pos(text_anchor::Pos::new(text_anchor::HPos::Center, text_anchor::VPos::Center));
            area.draw(&Text::new(label, px(q), style)).map_err(draw_err)?;
        }
        Ok(())
    }
}

/// The 1-2-5 step at least `x`.
fn round_step(x: f64) -> f64 {
    let decade = 10f64.powf(x.max(1e-9).log10().floor());
    [1.0, 2.0, 5.0, 10.0].iter().map(|m| m * decade).find(|s| *s >= x).unwrap_or(10.0 * decade)
}

fn trim_km(m: f64) -> String {
    let s = format!("{:.3}", m / 1e3);
    let s = s.trim_end_matches('0').trim_end_matches('.');
    format!("{s} km")
}

impl Picture for Scene {
    fn size(&self) -> (u32, u32) {
        (WIDTH, HEIGHT)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let sub = format!(
            "{} sweeps averaged; window {} to {}; fine circle {} turns of {}, coarse circle one turn",
            self.sweeps,
            fmt_km(self.fine.range_start_m),
            fmt_km(self.fine.range_end_m),
            self.fine.revolutions,
            trim_km(self.fine.metres_per_turn())
        );
        frame(root, "Circular sweep", &sub)?;
        // Windings are in whole-picture pixels, so draw on the root.
        self.draw_circle(root, &self.fine, 1.0, true)?;
        self.draw_circle(root, &self.coarse, self.coarse_scale, false)?;
        let ink = text_style(16.0, palette::INK);
        let muted = text_style(14.0, palette::MUTED);
        let r = &self.readout;
        let (headline, how) = match self.leading_edge_m {
            Some(edge) => (
                format!("Echo leading edge  {}", fmt_km(edge)),
                format!("gate's amplitude centroid less half the echo length; peak {}", fmt_km(r.range_m)),
            ),
            None => (
                format!("Echo peak  {}", fmt_km(r.range_m)),
                "no gate wired: the leading edge (the tables' range) is not known".to_string(),
            ),
        };
        let lines = [
            (headline, text_style(24.0, palette::ALERT)),
            (how, muted.clone()),
            (
                format!(
                    "coarse circle: turn {} of {} ({:.1}°)",
                    r.turn + 1,
                    self.fine.revolutions,
                    r.coarse_angle.to_degrees()
                ),
                ink.clone(),
            ),
            (
                format!(
                    "fine circle: {:.1}° of 360° = +{}",
                    r.fine_angle.to_degrees(),
                    fmt_km(r.fine_angle / TAU * self.fine.metres_per_turn())
                ),
                ink.clone(),
            ),
            (
                format!(
                    "turn start {} (red tick on the coarse circle) + fine offset",
                    fmt_km(self.fine.range_start_m + r.turn as f64 * self.fine.metres_per_turn())
                ),
                ink.clone(),
            ),
            (
                if r.above_floor_db.is_finite() {
                    format!("echo {:.1} dB over the median level", r.above_floor_db)
                } else {
                    "no noise floor to compare with".into()
                },
                muted.clone(),
            ),
            (format!("range marks every {}", trim_km(self.mark_m)), muted.clone()),
        ];
        for (i, (line, style)) in lines.into_iter().enumerate() {
            root.draw(&Text::new(line, (760, 470 + 32 * i as i32), style)).map_err(draw_err)?;
        }
        Ok(())
    }
}

/// The picture drawn when no sweep arrived.
pub struct Empty;

impl Picture for Empty {
    fn size(&self) -> (u32, u32) {
        (WIDTH, HEIGHT)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        frame(root, "Circular sweep", "no sweeps arrived")?;
        root.draw(&Text::new("nothing to draw", (400, 400), text_style(20.0, palette::MUTED))).map_err(draw_err)
    }
}
