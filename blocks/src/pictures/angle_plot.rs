//! `angle_plot`: angle error against time, one panel per axis, with the
//! expected ±σ band, the tracked value and flagged estimates marked. Long
//! runs are reduced to time buckets (min/max/mean) as estimates arrive.

use super::{Picture, PictureFormats, chart, draw_err, draw_mesh, frame, legend, padded, palette, write_picture};
use crate::summary::AxisSummary;
use crate::{
    AngleEstimate, BlockError, BlockSpec, BuildContext, FileStager, Flag, Item, ItemKind, NoPorts, Outputs, ParamType,
    TypedBlock, Unit,
};
use plotters::coord::Shift;
use plotters::prelude::*;

pub const SPEC: BlockSpec = BlockSpec::typed::<AnglePlot>(
    "angle_plot",
    "Angle plot picture: angle error against time for each axis (one panel each), with the expected ±σ band, the \
     tracked value when present and flagged estimates marked (out of range at the panel edge); long runs are reduced \
     to min/max time buckets. Writes <path>.png and <path>.svg.",
);

crate::block_settings! {
    /// Settings of `angle_plot`.
    pub struct AnglePlotSettings {
        max_points: usize {
            ty: ParamType::Integer { min: 100, max: 100_000 },
            default: Some("4000"),
            doc: "most points drawn per axis (min/max of time buckets beyond that)",
        },
        span: f64 {
            ty: ParamType::Number { unit: Unit::Degrees, min: 0.0, max: 180.0 },
            default: Some("0 deg"),
            doc: "half-height of each panel (0 = fit the data)",
        },
        path: String {
            ty: ParamType::OutputPath,
            default: Some("angle-plot"),
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
    inputs pub enum AnglePlotIn {
        Estimates = required("estimates", ItemKind::Estimate, "angle estimates of one or more axes"),
    }
}

const WIDTH: u32 = 1200;
const PANEL_HEIGHT: u32 = 280;
/// Most axes drawn (panels); estimates of further axes are counted only.
const MAX_AXES: usize = 8;

/// Summary of the estimates of one time bucket.
#[derive(Clone, Copy, Debug)]
pub struct Bucket {
    pub t0: f64,
    pub t1: f64,
    /// Ordinary (flag ok) estimates.
    pub n_ok: u64,
    pub err_min: f64,
    pub err_max: f64,
    pub err_sum: f64,
    pub sigma_sum: f64,
    pub tracked_n: u64,
    pub tracked_sum: f64,
    pub out_of_range: u64,
    pub no_signal: u64,
    pub outliers: u64,
    pub outlier_min: f64,
    pub outlier_max: f64,
}

impl Bucket {
    fn empty(t: f64) -> Bucket {
        Bucket {
            t0: t,
            t1: t,
            n_ok: 0,
            err_min: f64::INFINITY,
            err_max: f64::NEG_INFINITY,
            err_sum: 0.0,
            sigma_sum: 0.0,
            tracked_n: 0,
            tracked_sum: 0.0,
            out_of_range: 0,
            no_signal: 0,
            outliers: 0,
            outlier_min: f64::INFINITY,
            outlier_max: f64::NEG_INFINITY,
        }
    }

    fn add(&mut self, t: f64, e: &AngleEstimate) {
        self.t0 = self.t0.min(t);
        self.t1 = self.t1.max(t);
        let err = e.error_deg.filter(|v| v.is_finite());
        match (e.flag, err) {
            (Flag::Ok, Some(v)) => {
                self.n_ok += 1;
                self.err_min = self.err_min.min(v);
                self.err_max = self.err_max.max(v);
                self.err_sum += v;
                if e.sigma_deg.is_finite() {
                    self.sigma_sum += e.sigma_deg;
                }
            }
            (Flag::Outlier, Some(v)) => {
                self.outliers += 1;
                self.outlier_min = self.outlier_min.min(v);
                self.outlier_max = self.outlier_max.max(v);
            }
            (Flag::OutOfRange, _) => self.out_of_range += 1,
            _ => self.no_signal += 1,
        }
        if let Some(t) = e.tracked_deg.filter(|v| v.is_finite()) {
            self.tracked_n += 1;
            self.tracked_sum += t;
        }
    }

    fn merge(&mut self, o: &Bucket) {
        self.t0 = self.t0.min(o.t0);
        self.t1 = self.t1.max(o.t1);
        self.n_ok += o.n_ok;
        self.err_min = self.err_min.min(o.err_min);
        self.err_max = self.err_max.max(o.err_max);
        self.err_sum += o.err_sum;
        self.sigma_sum += o.sigma_sum;
        self.tracked_n += o.tracked_n;
        self.tracked_sum += o.tracked_sum;
        self.out_of_range += o.out_of_range;
        self.no_signal += o.no_signal;
        self.outliers += o.outliers;
        self.outlier_min = self.outlier_min.min(o.outlier_min);
        self.outlier_max = self.outlier_max.max(o.outlier_max);
    }

    pub fn mid(&self) -> f64 {
        0.5 * (self.t0 + self.t1)
    }
    pub fn mean(&self) -> Option<f64> {
        (self.n_ok > 0).then(|| self.err_sum / self.n_ok as f64)
    }
    pub fn sigma(&self) -> Option<f64> {
        (self.n_ok > 0).then(|| self.sigma_sum / self.n_ok as f64)
    }
    pub fn tracked(&self) -> Option<f64> {
        (self.tracked_n > 0).then(|| self.tracked_sum / self.tracked_n as f64)
    }
}

/// The estimates of one axis, reduced to at most `cap` time buckets: one per
/// estimate at first, then buckets of a width that doubles whenever full.
#[derive(Clone, Debug)]
pub struct AxisSeries {
    pub axis: String,
    pub buckets: Vec<Bucket>,
    cap: usize,
    origin: f64,
    /// Bucket width in seconds; 0 while every estimate has its own bucket.
    width: f64,
    pub count: u64,
    /// Mean, RMS, median σ and counts over every estimate (not the buckets):
    /// the same figures as the run's report page.
    pub summary: AxisSummary,
}

impl AxisSeries {
    pub fn new(axis: &str, cap: usize) -> AxisSeries {
        AxisSeries {
            axis: axis.into(),
            buckets: Vec::new(),
            cap: cap.max(2),
            origin: 0.0,
            width: 0.0,
            count: 0,
            summary: AxisSummary::new(axis),
        }
    }

    fn key(&self, t: f64) -> i64 {
        ((t - self.origin) / self.width).floor() as i64
    }

    pub fn add(&mut self, e: &AngleEstimate) {
        let t = e.stamp.seconds();
        if !t.is_finite() {
            return;
        }
        if self.count == 0 {
            self.origin = t;
        }
        self.count += 1;
        self.summary.add(e);
        let same = self.width > 0.0 && self.buckets.last().is_some_and(|b| self.key(t) <= self.key(b.t0));
        match self.buckets.last_mut() {
            Some(b) if same => b.add(t, e),
            _ => {
                let mut b = Bucket::empty(t);
                b.add(t, e);
                self.buckets.push(b);
            }
        }
        if self.buckets.len() > self.cap {
            self.coarsen();
        }
    }

    /// Double the bucket width (or set a first one) and merge buckets.
    fn coarsen(&mut self) {
        let span = self.buckets.last().map_or(0.0, |b| b.t1) - self.origin;
        self.width = if self.width > 0.0 { 2.0 * self.width } else { (span / (self.cap / 2) as f64).max(1e-9) };
        while self.width < span * 2.0 / self.cap as f64 {
            self.width *= 2.0;
        }
        let old = std::mem::take(&mut self.buckets);
        for b in old {
            let k = self.key(b.t0);
            match self.buckets.last_mut() {
                Some(last) if ((last.t0 - self.origin) / self.width).floor() as i64 >= k => last.merge(&b),
                _ => self.buckets.push(b),
            }
        }
    }

    fn counts(&self) -> (u64, u64, u64, u64) {
        self.buckets
            .iter()
            .fold((0, 0, 0, 0), |c, b| (c.0 + b.n_ok, c.1 + b.out_of_range, c.2 + b.no_signal, c.3 + b.outliers))
    }
}

pub struct AnglePlot {
    max_buckets: usize,
    span: f64,
    axes: Vec<AxisSeries>,
    other_axes: u64,
    path: String,
    formats: PictureFormats,
    files: FileStager,
}

impl TypedBlock for AnglePlot {
    type Settings = AnglePlotSettings;
    type In = AnglePlotIn;
    type Out = NoPorts;

    fn build(s: AnglePlotSettings, ctx: &BuildContext) -> Result<Self, crate::BuildError> {
        Ok(AnglePlot {
            max_buckets: (s.max_points / 2).max(50),
            span: s.span,
            axes: Vec::new(),
            other_axes: 0,
            path: s.path,
            formats: s.formats,
            files: ctx.files.clone(),
        })
    }

    fn process(&mut self, _port: AnglePlotIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let Item::Estimate(e) = item else {
            return Ok(());
        };
        let axis: &str = &e.axis;
        let known = self.axes.len();
        match self.axes.iter_mut().find(|a| a.axis == axis) {
            Some(series) => series.add(&e),
            None if known < MAX_AXES => {
                let mut series = AxisSeries::new(axis, self.max_buckets);
                series.add(&e);
                self.axes.push(series);
            }
            None => {
                if self.other_axes == 0 {
                    out.warn(
                        e.stamp,
                        format!("more than {MAX_AXES} axes; axis '{axis}' and later new axes are not drawn"),
                    );
                }
                self.other_axes += 1;
            }
        }
        Ok(())
    }

    fn finish(&mut self, _out: &mut Outputs) -> Result<(), BlockError> {
        let picture = AnglePicture { axes: &self.axes, span: self.span, other: self.other_axes };
        write_picture(&picture, &self.path, self.formats, &self.files)?;
        Ok(())
    }
}

struct AnglePicture<'a> {
    axes: &'a [AxisSeries],
    span: f64,
    other: u64,
}

impl Picture for AnglePicture<'_> {
    fn size(&self) -> (u32, u32) {
        (WIDTH, 68 + PANEL_HEIGHT * self.axes.len().max(1) as u32)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let total: u64 = self.axes.iter().map(|a| a.count).sum();
        let mut sub = format!(
            "{total} estimates; angle off boresight per dwell pair; shaded: expected ±σ around the tracked (or mean) value"
        );
        if self.other > 0 {
            sub.push_str(&format!("; {} estimates of further axes not drawn", self.other));
        }
        let area = frame(root, "Angle off boresight", &sub)?;
        if self.axes.is_empty() {
            return area
                .draw(&Text::new("no estimates arrived", (40, 80), super::text_style(18.0, palette::MUTED)))
                .map_err(draw_err);
        }
        let (t0, t1) = self
            .axes
            .iter()
            .flat_map(|a| a.buckets.iter())
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), k| (a.min(k.t0), b.max(k.t1)));
        let (t0, t1) = if t1 > t0 { (t0, t1) } else { padded(t0, t1, 0.0, 1.0) };
        for (series, cell) in self.axes.iter().zip(area.split_evenly((self.axes.len(), 1))) {
            draw_axis(series, self.span, (t0, t1), &cell)?;
        }
        Ok(())
    }
}

fn draw_axis<DB: DrawingBackend>(
    s: &AxisSeries,
    span: f64,
    (t0, t1): (f64, f64),
    cell: &DrawingArea<DB, Shift>,
) -> Result<(), String> {
    let (y0, y1) = if span > 0.0 {
        (-span, span)
    } else {
        let mut lo = f64::INFINITY;
        let mut hi = f64::NEG_INFINITY;
        for b in &s.buckets {
            if let (Some(m), Some(sg)) = (b.mean(), b.sigma()) {
                let centre = b.tracked().unwrap_or(m);
                lo = lo.min(b.err_min).min(centre - sg);
                hi = hi.max(b.err_max).max(centre + sg);
            }
            if let Some(t) = b.tracked() {
                lo = lo.min(t);
                hi = hi.max(t);
            }
        }
        padded(lo, hi, 0.08, 0.2)
    };
    let (ok, oor, nosig, outl) = s.counts();
    let caption = format!("axis {}: {ok} ok, {oor} out of range, {nosig} no signal, {outl} outliers", s.axis);
    let (plot, key) = cell.split_horizontally(cell.dim_in_pixel().0 as i32 - 250);
    let mut ch = chart(&plot, &caption, t0..t1, y0..y1)?;
    // Grid first, so the band hides it where it lies.
    draw_mesh(&mut ch, "time from capture start (s)", "angle (deg)")?;
    let clamp = |v: f64| v.clamp(y0, y1);
    // The ±σ band, one polygon per run of buckets with ordinary estimates.
    let mut runs: Vec<Vec<(f64, f64, f64)>> = vec![Vec::new()];
    for b in &s.buckets {
        match (b.mean(), b.sigma()) {
            (Some(m), Some(sg)) => {
                let c = b.tracked().unwrap_or(m);
                if let Some(run) = runs.last_mut() {
                    run.push((b.mid(), clamp(c - sg), clamp(c + sg)));
                }
            }
            _ => runs.push(Vec::new()),
        }
    }
    for run in runs.iter().filter(|r| !r.is_empty()) {
        let mut poly: Vec<(f64, f64)> = run.iter().map(|p| (p.0, p.2)).collect();
        poly.extend(run.iter().rev().map(|p| (p.0, p.1)));
        if run.len() == 1 {
            let p = run[0];
            ch.draw_series(std::iter::once(PathElement::new(
                vec![(p.0, p.1), (p.0, p.2)],
                palette::BAND.stroke_width(4),
            )))
            .map_err(draw_err)?;
        } else {
            ch.draw_series(std::iter::once(Polygon::new(poly, palette::BAND.filled()))).map_err(draw_err)?;
        }
    }
    // Ordinary estimates: min and max of each bucket, joined in time order.
    let mut pts = Vec::new();
    for b in s.buckets.iter().filter(|b| b.n_ok > 0) {
        if b.n_ok == 1 || b.err_min == b.err_max {
            pts.push((b.mid(), clamp(b.err_min)));
        } else {
            pts.push((b.mid(), clamp(b.err_min)));
            pts.push((b.mid(), clamp(b.err_max)));
        }
    }
    ch.draw_series(LineSeries::new(pts.iter().copied(), palette::TRACE.stroke_width(1))).map_err(draw_err)?;
    if pts.len() <= 600 {
        ch.draw_series(pts.iter().map(|&p| Circle::new(p, 2, palette::TRACE.filled()))).map_err(draw_err)?;
    }
    let tracked: Vec<(f64, f64)> = s.buckets.iter().filter_map(|b| b.tracked().map(|t| (b.mid(), clamp(t)))).collect();
    let f = &s.summary;
    let mut entries = vec![
        (palette::TRACE, format!("angle, {} ok of {}", f.ok, f.count())),
        (palette::PANEL, format!("mean {} deg", AxisSummary::figure(f.mean()))),
        (palette::PANEL, format!("RMS {} deg", AxisSummary::figure(f.rms()))),
        (palette::BAND, format!("median σ {} deg", AxisSummary::figure(f.median_sigma()))),
    ];
    if !tracked.is_empty() {
        ch.draw_series(LineSeries::new(tracked, palette::lobe(1).stroke_width(2))).map_err(draw_err)?;
        entries.push((palette::lobe(1), "tracked".into()));
    }
    // Flagged estimates: out of range on the top edge, no signal on the bottom, outliers where they fell.
    let edge = 0.015 * (y1 - y0);
    ch.draw_series(
        s.buckets
            .iter()
            .filter(|b| b.out_of_range > 0)
            .map(|b| TriangleMarker::new((b.mid(), y1 - edge), 4, palette::FLAG_EDGE.filled())),
    )
    .map_err(draw_err)?;
    ch.draw_series(
        s.buckets
            .iter()
            .filter(|b| b.no_signal > 0)
            .map(|b| Cross::new((b.mid(), y0 + edge), 3, palette::MUTED.stroke_width(1))),
    )
    .map_err(draw_err)?;
    ch.draw_series(s.buckets.iter().filter(|b| b.outliers > 0).flat_map(|b| {
        [b.outlier_min, b.outlier_max]
            .into_iter()
            .map(move |v| Circle::new((b.mid(), clamp(v)), 3, palette::ALERT.stroke_width(1)))
    }))
    .map_err(draw_err)?;
    if oor > 0 {
        entries.push((palette::FLAG_EDGE, format!("out of range: {oor}, top")));
    }
    if nosig > 0 {
        entries.push((palette::MUTED, format!("no signal: {nosig}, bottom")));
    }
    if outl > 0 {
        entries.push((palette::ALERT, format!("outliers: {outl}")));
    }
    legend(&key, 40, &entries)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::Stamp;
    use std::sync::Arc;

    fn estimate(index: u64, err: f64, flag: Flag) -> AngleEstimate {
        AngleEstimate {
            stamp: Stamp::new(index, 1000.0),
            axis: Arc::from("az"),
            error_deg: (flag == Flag::Ok || flag == Flag::Outlier).then_some(err),
            sigma_deg: 0.1,
            snr_db: 20.0,
            ratio_db: 0.0,
            range_m: None,
            flag,
            tracked_deg: Some(0.0),
            tracked_sigma_deg: None,
            absolute_deg: None,
        }
    }

    #[test]
    fn buckets_stay_bounded_and_keep_extremes_and_counts() {
        let mut s = AxisSeries::new("az", 100);
        let n = 100_000u64;
        for k in 0..n {
            let flag = if k % 1000 == 7 { Flag::OutOfRange } else { Flag::Ok };
            let err = if k == 77_777 { 5.0 } else { ((k as f64) * 0.01).sin() };
            s.add(&estimate(k, err, flag));
            assert!(s.buckets.len() <= 101);
        }
        let (ok, oor, nosig, outl) = s.counts();
        assert_eq!((ok + oor + nosig + outl, oor), (n, 100));
        assert!(s.buckets.iter().any(|b| b.err_max == 5.0));
        assert!(s.buckets.windows(2).all(|w| w[0].t1 <= w[1].t0));
        assert_eq!(s.buckets[0].t0, 0.0);
    }
}
