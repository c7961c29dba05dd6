//! `lobe_timeline`: which lobe was active when, against the signal. One row
//! per lobe with a bar per dwell (from lobe segments and/or labelled
//! sweeps), the guard gaps between dwells shaded, the gates' switch instants
//! and noticed irregularities marked, and under the bars each dwell's signal
//! level (segments: RMS amplitude; sweeps: mean peak power of the sweep) in
//! its lobe's colour, with each lobe's mean written in the key. A wrong
//! schedule or a swapped lobe order shows as levels that do not follow their
//! lobes. Only the first `span` of the capture (at most `max_dwells` dwells)
//! is kept, so the picture stays readable and memory bounded.

use super::{
    Chart, Picture, PictureFormats, chart, draw_err, draw_mesh, frame, legend, padded, palette, text_style,
    write_picture,
};
use crate::kinds::gate_common::is_switch_report;
use crate::{
    BlockError, BlockSpec, BuildContext, FileStager, Item, ItemKind, NoPorts, Outputs, ParamType, TimeSetting,
    TypedBlock,
};
use plotters::coord::Shift;
use plotters::prelude::*;

pub const SPEC: BlockSpec = BlockSpec::typed::<LobeTimeline>(
    "lobe_timeline",
    "Lobe timeline picture: one row per lobe with a bar per dwell (upper bar from lobe segments, lower bar from \
     labelled sweeps), guard gaps between dwells shaded, switch instants and notices marked, and under the bars \
     each dwell's signal level in its lobe's colour with the per-lobe means in the key; draws the first part of \
     the capture (span, max_dwells). Writes <path>.png and <path>.svg.",
);

crate::block_settings! {
    /// Settings of `lobe_timeline`.
    pub struct LobeTimelineSettings {
        span: TimeSetting {
            ty: ParamType::Time { min_s: 0.0, max_s: 1e6, pulses: false },
            default: Some("0 s"),
            doc: "how much of the capture to draw from the first item (0 = as far as max_dwells reaches)",
        },
        max_dwells: usize {
            ty: ParamType::Integer { min: 10, max: 100_000 },
            default: Some("40"),
            doc: "most dwells drawn (a few lobe cycles keep the guard gaps visible)",
        },
        path: String {
            ty: ParamType::OutputPath,
            default: Some("lobe-timeline"),
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
    inputs pub enum LobeTimelineIn {
        Sweeps = optional("sweeps", ItemKind::Sweep, "sweeps, labelled with their lobe or not"),
        Segments = optional("segments", ItemKind::Segment, "lobe segments of each dwell"),
        Notices = optional("notices", ItemKind::Notice, "irregularities to mark"),
    }
}

const WIDTH: u32 = 1200;
/// Most lobe rows; more lobes are counted, not drawn.
const MAX_ROWS: usize = 16;
/// Most notices marked; later ones are counted.
const MAX_NOTICES: usize = 200;
/// Most switch instants marked.
const MAX_SWITCHES: usize = 100_000;

/// One bar: a dwell (or a run of unlabelled sweeps) in seconds.
#[derive(Clone, Debug, PartialEq)]
pub struct Bar {
    pub start: f64,
    pub end: f64,
    pub row: usize,
    /// Dwell count of the lobe tag; None for unlabelled sweeps.
    pub dwell: Option<u64>,
    /// Sum and count of the signal powers of the bar (per sample for
    /// segments, the peak of each sweep for sweeps).
    pub power_sum: f64,
    pub power_n: u64,
}

impl Bar {
    pub fn new(start: f64, end: f64, row: usize, dwell: Option<u64>) -> Bar {
        Bar { start, end, row, dwell, power_sum: 0.0, power_n: 0 }
    }

    /// Mean power of the bar in dB (10 log10), None without samples.
    pub fn level_db(&self) -> Option<f64> {
        (self.power_n > 0 && self.power_sum > 0.0).then(|| 10.0 * (self.power_sum / self.power_n as f64).log10())
    }
}

/// What the picture shows, gathered with bounded memory.
#[derive(Clone, Debug, Default)]
pub struct Timeline {
    /// Row names with their lobe order (unlabelled sweeps sort last).
    pub rows: Vec<(usize, String)>,
    pub segment_bars: Vec<Bar>,
    pub sweep_bars: Vec<Bar>,
    pub notices: Vec<(f64, String)>,
    /// Switch instants the gates reported, seconds.
    pub switches: Vec<f64>,
    pub first_s: Option<f64>,
    /// Time of the last item seen at all (drawn or not).
    pub last_s: f64,
    /// Items not drawn because the span or the dwell limit was reached.
    pub left_out: u64,
    pub notices_left_out: u64,
    pub lobes_left_out: u64,
    pub truncated: bool,
}

impl Timeline {
    fn row(&mut self, order: usize, name: &str) -> Option<usize> {
        if let Some(i) = self.rows.iter().position(|r| r.1 == name) {
            return Some(i);
        }
        if self.rows.len() >= MAX_ROWS {
            self.lobes_left_out += 1;
            return None;
        }
        self.rows.push((order, name.to_string()));
        Some(self.rows.len() - 1)
    }

    /// Extend the last bar if it is the same dwell (or touching unlabelled
    /// sweeps), else start a new bar when within the limits.
    fn add(&mut self, segments: bool, bar: Bar, limit_s: Option<f64>, max_bars: usize) {
        let bars = if segments { &mut self.segment_bars } else { &mut self.sweep_bars };
        if let Some(last) = bars.last_mut() {
            let same_dwell = last.row == bar.row && last.dwell.is_some() && last.dwell == bar.dwell;
            let touching =
                last.row == bar.row && last.dwell.is_none() && bar.dwell.is_none() && bar.start - last.end <= 1e-9;
            if same_dwell || touching {
                last.end = last.end.max(bar.end);
                last.power_sum += bar.power_sum;
                last.power_n += bar.power_n;
                return;
            }
        }
        let beyond = limit_s.is_some_and(|l| bar.start >= l);
        if beyond || bars.len() >= max_bars || self.truncated {
            self.truncated = true;
            self.left_out += 1;
        } else {
            bars.push(bar);
        }
    }
}

pub struct LobeTimeline {
    span: TimeSetting,
    span_s: Option<Option<f64>>,
    max_dwells: usize,
    timeline: Timeline,
    path: String,
    formats: PictureFormats,
    files: FileStager,
}

impl LobeTimeline {
    /// The end of the drawn span, fixed at the first item.
    fn limit(&mut self, start_s: f64, rate: f64) -> Result<Option<f64>, BlockError> {
        if self.span_s.is_none() {
            let samples = self.span.samples(rate, None)?;
            self.span_s = Some((samples > 0.0).then(|| samples / rate));
        }
        let first = *self.timeline.first_s.get_or_insert(start_s);
        Ok(self.span_s.flatten().map(|s| first + s))
    }
}

impl TypedBlock for LobeTimeline {
    type Settings = LobeTimelineSettings;
    type In = LobeTimelineIn;
    type Out = NoPorts;

    fn build(s: LobeTimelineSettings, ctx: &BuildContext) -> Result<Self, crate::error::BuildError> {
        Ok(LobeTimeline {
            span: s.span,
            span_s: None,
            max_dwells: s.max_dwells.max(1),
            timeline: Timeline::default(),
            path: s.path,
            formats: s.formats,
            files: ctx.files.clone(),
        })
    }

    fn wants_input(&self) -> bool {
        !self.timeline.truncated
    }

    fn process(&mut self, port: LobeTimelineIn, item: Item, _out: &mut Outputs) -> Result<(), BlockError> {
        if self.timeline.truncated {
            // The picture is full; what follows is not read (see wants_input).
            return Ok(());
        }
        let stamp = item.stamp();
        if !(stamp.rate > 0.0 && stamp.rate.is_finite()) {
            return Err(BlockError::at(
                format!("item on port {} has an unusable sample rate {}", port as usize, stamp.rate),
                stamp.index,
            ));
        }
        let start = stamp.seconds();
        let limit = self.limit(start, stamp.rate)?;
        let end = start + item.sample_count() as f64 / stamp.rate;
        let t = &mut self.timeline;
        t.last_s = t.last_s.max(end);
        match item {
            Item::Segment(seg) => {
                if let Some(row) = t.row(seg.tag.lobe, &seg.tag.name) {
                    let mut bar = Bar::new(start, end, row, Some(seg.tag.dwell));
                    bar.power_sum = seg.chunk.iq.iter().map(|x| f64::from(x.norm_sqr())).sum();
                    bar.power_n = seg.chunk.iq.len() as u64;
                    t.add(true, bar, limit, self.max_dwells);
                }
            }
            Item::Sweep(sweep) => {
                let row = match &sweep.lobe {
                    Some(tag) => t.row(tag.lobe, &tag.name),
                    None => t.row(usize::MAX, "unlabelled"),
                };
                if let Some(row) = row {
                    let mut bar = Bar::new(start, end, row, sweep.lobe.as_ref().map(|g| g.dwell));
                    let echo = sweep.iq.get(sweep.blanked as usize..).unwrap_or(&[]);
                    bar.power_sum = echo.iter().fold(0.0f32, |m, x| m.max(x.norm_sqr())).into();
                    bar.power_n = 1;
                    t.add(false, bar, limit, self.max_dwells);
                }
            }
            // The gates also report every switch instant: marked as lines.
            Item::Notice(n) if is_switch_report(&n.what) => {
                let keep = limit.is_none_or(|l| start < l) && !t.truncated && t.switches.len() < MAX_SWITCHES;
                t.switches.extend(keep.then_some(start));
            }
            Item::Notice(n) => {
                let within = limit.is_none_or(|l| start < l)
                    && !(t.truncated && start > t.segment_bars.last().map_or(start, |b| b.end));
                if within && t.notices.len() < MAX_NOTICES {
                    let who = if n.block.is_empty() { String::new() } else { format!("{}: ", n.block) };
                    t.notices.push((start, format!("{who}{}", n.what)));
                } else {
                    t.notices_left_out += 1;
                }
            }
            _ => {}
        }
        Ok(())
    }

    fn finish(&mut self, _out: &mut Outputs) -> Result<(), BlockError> {
        write_picture(&TimelinePicture { t: &self.timeline }, &self.path, self.formats, &self.files)?;
        Ok(())
    }
}

struct TimelinePicture<'a> {
    t: &'a Timeline,
}

/// Height of the lobe-bar panel per row, of the level panel, of the notes.
const ROW_HEIGHT: u32 = 44;
const LEVEL_HEIGHT: u32 = 280;
const NOTES_HEIGHT: u32 = 100;

impl Timeline {
    /// The bars whose levels are drawn: lobe segments when there are any,
    /// else the sweeps.
    pub fn level_bars(&self) -> &[Bar] {
        if self.segment_bars.is_empty() { &self.sweep_bars } else { &self.segment_bars }
    }

    /// Per row: mean power over its drawn dwells in dB, and the dwell count.
    pub fn lobe_levels(&self) -> Vec<(usize, Option<f64>, u64)> {
        (0..self.rows.len())
            .map(|row| {
                let (mut sum, mut n) = (0.0, 0u64);
                for b in self.level_bars().iter().filter(|b| b.row == row && b.power_n > 0) {
                    sum += b.power_sum / b.power_n as f64;
                    n += 1;
                }
                let db = (n > 0 && sum > 0.0).then(|| 10.0 * (sum / n as f64).log10());
                (row, db, n)
            })
            .collect()
    }

    fn colour(&self, row: usize) -> RGBColor {
        palette::lobe(self.rows.get(row).map_or(row, |r| if r.0 == usize::MAX { 5 } else { r.0 }))
    }
}

impl TimelinePicture<'_> {
    fn bars_height(&self) -> u32 {
        60 + ROW_HEIGHT * self.t.rows.len().max(1) as u32
    }
}

impl Picture for TimelinePicture<'_> {
    fn size(&self) -> (u32, u32) {
        (WIDTH, 68 + self.bars_height() + LEVEL_HEIGHT + NOTES_HEIGHT)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let t = self.t;
        let first = t.first_s.unwrap_or(0.0);
        let drawn_end = t.segment_bars.iter().chain(&t.sweep_bars).map(|b| b.end).fold(first, f64::max);
        let mut parts = Vec::new();
        if !t.segment_bars.is_empty() {
            parts.push(format!("{} dwells from lobe segments (upper bars)", t.segment_bars.len()));
        }
        if !t.sweep_bars.is_empty() {
            parts.push(format!("{} dwells from labelled sweeps (lower bars)", t.sweep_bars.len()));
        }
        if parts.is_empty() {
            parts.push("no dwells arrived".into());
        }
        let mut sub = format!("{}; grey: guard gaps; thin lines: switch instants", parts.join(", "));
        if t.truncated {
            sub = format!("first {:.4} s shown; {sub}", drawn_end - first);
        }
        let area = frame(root, "Lobe timeline and signal level", &sub)?;
        let (bars_area, rest) = area.split_vertically(self.bars_height() as i32);
        let (level_area, notes) = rest.split_vertically(LEVEL_HEIGHT as i32);
        let extent = (drawn_end - first).max(1e-6);
        let (scale, unit) = if drawn_end < 2.0 { (1e3, "ms") } else { (1.0, "s") };
        let (x0, x1) = padded(first * scale, drawn_end * scale, 0.01, extent * scale * 1e-3);
        self.draw_bars(&bars_area, (x0, x1), scale, unit)?;
        self.draw_levels(&level_area, (x0, x1), scale, unit)?;
        self.draw_notes(&notes)
    }
}

impl TimelinePicture<'_> {
    fn draw_bars<DB: DrawingBackend>(
        &self,
        area: &DrawingArea<DB, Shift>,
        (x0, x1): (f64, f64),
        scale: f64,
        unit: &str,
    ) -> Result<(), String> {
        let t = self.t;
        let n = t.rows.len().max(1);
        let mut ch = chart(area, "", x0..x1, 0.0..n as f64)?;
        let x = |s: f64| s * scale;
        let y = |row: usize| (n - 1 - row) as f64;
        let names: Vec<String> = t.rows.iter().map(|r| r.1.clone()).collect();
        ch.configure_mesh()
            .bold_line_style(palette::GRID)
            .light_line_style(palette::GRID_FINE)
            .axis_style(palette::MUTED)
            .label_style(text_style(13.0, palette::INK))
            .axis_desc_style(text_style(14.0, palette::INK))
            .x_desc(format!("time from capture start ({unit})"))
            .y_desc("lobe")
            .y_labels(2 * n + 1)
            .y_label_formatter(&|v: &f64| {
                let k = v - v.floor();
                let row = n as i64 - 1 - v.floor() as i64;
                if (k - 0.5).abs() < 1e-6 && row >= 0 {
                    names.get(row as usize).cloned().unwrap_or_default()
                } else {
                    String::new()
                }
            })
            .disable_y_mesh()
            .draw()
            .map_err(draw_err)?;
        draw_guard_gaps(&mut ch, t.level_bars(), (0.0, n as f64), scale)?;
        ch.draw_series(t.segment_bars.iter().map(|b| {
            Rectangle::new([(x(b.start), y(b.row) + 0.45), (x(b.end), y(b.row) + 0.85)], t.colour(b.row).filled())
        }))
        .map_err(draw_err)?;
        ch.draw_series(t.sweep_bars.iter().map(|b| {
            Rectangle::new(
                [(x(b.start), y(b.row) + 0.15), (x(b.end), y(b.row) + 0.4)],
                t.colour(b.row).mix(0.55).filled(),
            )
        }))
        .map_err(draw_err)?;
        draw_instants(&mut ch, &t.switches, (0.0, n as f64), scale, palette::INK.mix(0.45).stroke_width(1))?;
        let alert = palette::ALERT.stroke_width(2);
        draw_instants(&mut ch, t.notices.iter().map(|n| &n.0), (0.0, n as f64), scale, alert)
    }

    fn draw_levels<DB: DrawingBackend>(
        &self,
        area: &DrawingArea<DB, Shift>,
        (x0, x1): (f64, f64),
        scale: f64,
        unit: &str,
    ) -> Result<(), String> {
        let t = self.t;
        let bars = t.level_bars();
        let (lo, hi) = bars
            .iter()
            .filter_map(Bar::level_db)
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v)));
        let (y0, y1) = padded(lo, hi, 0.1, 1.0);
        let (plot, key) = area.split_horizontally(area.dim_in_pixel().0 as i32 - 280);
        let mut ch = chart(&plot, "", x0..x1, y0..y1)?;
        let what = if t.segment_bars.is_empty() { "peak power per sweep, dwell mean" } else { "mean power per dwell" };
        draw_mesh(&mut ch, &format!("time from capture start ({unit})"), &format!("level (dB, {what})"))?;
        draw_guard_gaps(&mut ch, bars, (y0, y1), scale)?;
        draw_instants(&mut ch, &t.switches, (y0, y1), scale, palette::INK.mix(0.45).stroke_width(1))?;
        ch.draw_series(bars.iter().filter_map(|b| {
            b.level_db().map(|v| {
                PathElement::new(vec![(b.start * scale, v), (b.end * scale, v)], t.colour(b.row).stroke_width(4))
            })
        }))
        .map_err(draw_err)?;
        let entries: Vec<(RGBColor, String)> = t
            .lobe_levels()
            .into_iter()
            .map(|(row, db, n)| {
                let name = t.rows.get(row).map_or("", |r| r.1.as_str());
                let mean = db.map_or_else(|| "–".to_string(), |v| format!("{v:.2}"));
                (t.colour(row), format!("{name}: mean {mean} dB, {n} dwells"))
            })
            .collect();
        legend(&key, 20, &entries)
    }

    fn draw_notes<DB: DrawingBackend>(&self, notes: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let t = self.t;
        // Notices listed under the plot (the first few), with the count of the rest.
        let mut lines: Vec<(String, RGBColor)> = t
            .notices
            .iter()
            .take(3)
            .map(|(s, what)| (format!("▲ {:.4} s  {}", s, clip(what, 120)), palette::ALERT))
            .collect();
        let more = t.notices.len().saturating_sub(3) as u64 + t.notices_left_out;
        if more > 0 {
            lines.push((format!("… and {more} more notices"), palette::ALERT));
        }
        if t.notices.is_empty() && t.notices_left_out == 0 {
            lines.push(("no irregularities noticed in this window".into(), palette::MUTED));
        }
        if t.lobes_left_out > 0 {
            lines.push((
                format!("{} items of lobes beyond the first {MAX_ROWS} not drawn", t.lobes_left_out),
                palette::MUTED,
            ));
        }
        for (i, (line, colour)) in lines.into_iter().enumerate() {
            notes.draw(&Text::new(line, (24, 6 + 22 * i as i32), text_style(13.0, colour))).map_err(draw_err)?;
        }
        Ok(())
    }
}

/// Guard gaps between consecutive bars, shaded and at least 3 pixels wide
/// (a 15 us guard is under a pixel at a few dwells per 100 pixels).
fn draw_guard_gaps<DB: DrawingBackend>(
    ch: &mut Chart<'_, DB>,
    bars: &[Bar],
    (y0, y1): (f64, f64),
    scale: f64,
) -> Result<(), String> {
    let gaps = bars.windows(2).filter(|w| w[1].start > w[0].end);
    ch.draw_series(
        gaps.clone().map(|w| {
            Rectangle::new([(w[0].end * scale, y0), (w[1].start * scale, y1)], palette::GUARD.mix(0.6).filled())
        }),
    )
    .map_err(draw_err)?;
    let mid = |w: &[Bar]| 0.5 * (w[0].end + w[1].start) * scale;
    ch.draw_series(gaps.map(|w| PathElement::new(vec![(mid(w), y0), (mid(w), y1)], palette::GUARD.stroke_width(3))))
        .map_err(draw_err)?;
    Ok(())
}

/// A vertical line at each instant (seconds).
fn draw_instants<'a, DB: DrawingBackend>(
    ch: &mut Chart<'_, DB>,
    instants: impl IntoIterator<Item = &'a f64>,
    (y0, y1): (f64, f64),
    scale: f64,
    style: ShapeStyle,
) -> Result<(), String> {
    ch.draw_series(instants.into_iter().map(|&s| PathElement::new(vec![(s * scale, y0), (s * scale, y1)], style)))
        .map_err(draw_err)?;
    Ok(())
}

fn clip(s: &str, max: usize) -> String {
    if s.chars().count() <= max { s.to_string() } else { format!("{}…", s.chars().take(max).collect::<String>()) }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dwells_merge_and_the_limit_truncates() {
        let mut t = Timeline::default();
        let r = t.row(0, "right").unwrap();
        // Two segments of one dwell become one bar.
        t.add(true, Bar::new(0.0, 1.0, r, Some(0)), None, 3);
        t.add(true, Bar::new(1.0, 2.0, r, Some(0)), None, 3);
        assert_eq!(t.segment_bars.len(), 1);
        assert_eq!(t.segment_bars[0].end, 2.0);
        for d in 1..6 {
            t.add(true, Bar::new(2.5 * d as f64, 2.5 * d as f64 + 2.0, r, Some(d)), None, 3);
        }
        assert_eq!(t.segment_bars.len(), 3);
        assert!(t.truncated && t.left_out == 3);
        // Beyond the span limit nothing new starts.
        let mut u = Timeline::default();
        u.add(false, Bar::new(5.0, 6.0, 0, Some(1)), Some(4.0), 100);
        assert!(u.sweep_bars.is_empty() && u.truncated);
    }
}
