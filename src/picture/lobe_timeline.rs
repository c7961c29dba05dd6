//! `lobe_timeline`: which lobe was active when. One row per lobe with a bar
//! per dwell (from lobe segments and/or labelled sweeps), the guard gaps
//! between dwells shaded and noticed irregularities marked. Only the first
//! `span` of the capture (at most `max_dwells` dwells) is kept, so the
//! picture stays readable and memory bounded.

use super::{Picture, chart, draw_err, frame, padded, palette, text_style, write_picture};
use lobeflow_blocks::kinds::gate_common::is_switch_report;
use lobeflow_blocks::{
    Block, BlockError, BlockSpec, BuildContext, FileStager, Item, ItemKind, Outputs, ParamSpec, ParamType, Params,
    PortSpec,
};
use plotters::coord::Shift;
use plotters::prelude::*;

pub const SPEC: BlockSpec = BlockSpec {
    kind: "lobe_timeline",
    doc: "Lobe timeline picture: one row per lobe with a bar per dwell (upper bar from lobe segments, lower bar from \
          labelled sweeps), guard gaps between dwells shaded and notices marked; draws the first part of the capture \
          (span, max_dwells). Writes <path>.png and <path>.svg.",
    inputs: &[
        PortSpec::optional("sweeps", ItemKind::Sweep, "sweeps, labelled with their lobe or not"),
        PortSpec::optional("segments", ItemKind::Segment, "lobe segments of each dwell"),
        PortSpec::optional("notices", ItemKind::Notice, "irregularities to mark"),
    ],
    outputs: &[],
    params: &[
        ParamSpec {
            name: "span",
            ty: ParamType::Time { min_s: 0.0, max_s: 1e6, pulses: false },
            default: Some("0 s"),
            doc: "how much of the capture to draw from the first item (0 = as far as max_dwells reaches)",
        },
        ParamSpec {
            name: "max_dwells",
            ty: ParamType::Integer { min: 10, max: 100_000 },
            default: Some("2000"),
            doc: "most dwells drawn",
        },
        ParamSpec {
            name: "path",
            ty: ParamType::OutputPath,
            default: Some("lobe-timeline"),
            doc: "base name: writes <path>.png and <path>.svg",
        },
    ],
    build,
};

const WIDTH: u32 = 1200;
/// Most lobe rows; more lobes are counted, not drawn.
const MAX_ROWS: usize = 16;
/// Most notices marked; later ones are counted.
const MAX_NOTICES: usize = 200;

fn build(p: &Params, ctx: &BuildContext) -> Result<Box<dyn Block>, lobeflow_blocks::BuildError> {
    Ok(Box::new(LobeTimeline {
        params: p.clone(),
        span_s: None,
        max_dwells: p.int("max_dwells")?.max(1) as usize,
        timeline: Timeline::default(),
        path: p.text("path")?.to_string(),
        files: ctx.files.clone(),
    }))
}

/// One bar: a dwell (or a run of unlabelled sweeps) in seconds.
#[derive(Clone, Debug, PartialEq)]
pub struct Bar {
    pub start: f64,
    pub end: f64,
    pub row: usize,
    /// Dwell count of the lobe tag; None for unlabelled sweeps.
    pub dwell: Option<u64>,
}

/// What the picture shows, gathered with bounded memory.
#[derive(Clone, Debug, Default)]
pub struct Timeline {
    /// Row names with their lobe order (unlabelled sweeps sort last).
    pub rows: Vec<(usize, String)>,
    pub segment_bars: Vec<Bar>,
    pub sweep_bars: Vec<Bar>,
    pub notices: Vec<(f64, String)>,
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

struct LobeTimeline {
    params: Params,
    span_s: Option<Option<f64>>,
    max_dwells: usize,
    timeline: Timeline,
    path: String,
    files: FileStager,
}

impl LobeTimeline {
    /// The end of the drawn span, fixed at the first item.
    fn limit(&mut self, start_s: f64, rate: f64) -> Result<Option<f64>, BlockError> {
        if self.span_s.is_none() {
            let samples = self.params.samples_at("span", rate, None)?;
            self.span_s = Some((samples > 0.0).then(|| samples / rate));
        }
        let first = *self.timeline.first_s.get_or_insert(start_s);
        Ok(self.span_s.flatten().map(|s| first + s))
    }
}

impl Block for LobeTimeline {
    fn wants_input(&self) -> bool {
        !self.timeline.truncated
    }

    fn process(&mut self, port: usize, item: Item, _out: &mut Outputs) -> Result<(), BlockError> {
        if self.timeline.truncated {
            // The picture is full; what follows is not read (see wants_input).
            return Ok(());
        }
        let stamp = item.stamp();
        if !(stamp.rate > 0.0 && stamp.rate.is_finite()) {
            return Err(BlockError::at(
                format!("item on port {port} has an unusable sample rate {}", stamp.rate),
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
                    t.add(true, Bar { start, end, row, dwell: Some(seg.tag.dwell) }, limit, self.max_dwells);
                }
            }
            Item::Sweep(sweep) => {
                let row = match &sweep.lobe {
                    Some(tag) => t.row(tag.lobe, &tag.name),
                    None => t.row(usize::MAX, "unlabelled"),
                };
                if let Some(row) = row {
                    t.add(
                        false,
                        Bar { start, end, row, dwell: sweep.lobe.as_ref().map(|g| g.dwell) },
                        limit,
                        self.max_dwells,
                    );
                }
            }
            // The gates also report every switch instant; the bars already
            // show those, so only irregularities are marked.
            Item::Notice(n) if is_switch_report(&n.what) => {}
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
        write_picture(&TimelinePicture { t: &self.timeline }, &self.path, &self.files)?;
        Ok(())
    }
}

struct TimelinePicture<'a> {
    t: &'a Timeline,
}

impl TimelinePicture<'_> {
    fn height(&self) -> u32 {
        68 + 100 + 52 * self.t.rows.len().max(1) as u32 + 110
    }
}

impl Picture for TimelinePicture<'_> {
    fn size(&self) -> (u32, u32) {
        (WIDTH, self.height())
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let t = self.t;
        let first = t.first_s.unwrap_or(0.0);
        let drawn_end = t.segment_bars.iter().chain(&t.sweep_bars).map(|b| b.end).fold(first, f64::max);
        let mut sub = format!(
            "{} dwell bars from segments, {} from sweeps; upper bar: lobe segments, lower bar: sweeps; grey: guard gaps",
            t.segment_bars.len(),
            t.sweep_bars.len()
        );
        if t.truncated {
            sub = format!("first {:.4} s shown (the rest of the capture is not read); {sub}", drawn_end - first);
        }
        let area = frame(root, "Lobe timeline", &sub)?;
        let (plot, notes) = area.split_vertically(area.dim_in_pixel().1 as i32 - 100);
        let extent = (drawn_end - first).max(1e-6);
        let (scale, unit) = if extent < 2.0 { (1e3, "ms") } else { (1.0, "s") };
        let (x0, x1) = padded(0.0, extent * scale, 0.01, 1e-9);
        let n = t.rows.len().max(1);
        let mut ch = chart(&plot, "", x0..x1, 0.0..n as f64)?;
        let x = |s: f64| (s - first) * scale;
        let y = |row: usize| (n - 1 - row) as f64;
        // Guard gaps between consecutive dwells, across all rows.
        ch.draw_series(t.segment_bars.windows(2).filter(|w| w[1].start > w[0].end).map(|w| {
            Rectangle::new([(x(w[0].end), 0.0), (x(w[1].start), n as f64)], palette::GUARD.mix(0.6).filled())
        }))
        .map_err(draw_err)?;
        let names: Vec<String> = t.rows.iter().map(|r| r.1.clone()).collect();
        ch.configure_mesh()
            .bold_line_style(palette::GRID)
            .light_line_style(palette::GRID_FINE)
            .axis_style(palette::MUTED)
            .label_style(text_style(13.0, palette::INK))
            .axis_desc_style(text_style(14.0, palette::INK))
            .x_desc(format!("time from {first:.4} s ({unit})"))
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
        let colour =
            |row: usize| palette::lobe(t.rows.get(row).map_or(row, |r| if r.0 == usize::MAX { 5 } else { r.0 }));
        ch.draw_series(t.segment_bars.iter().map(|b| {
            Rectangle::new([(x(b.start), y(b.row) + 0.45), (x(b.end), y(b.row) + 0.85)], colour(b.row).filled())
        }))
        .map_err(draw_err)?;
        ch.draw_series(t.sweep_bars.iter().map(|b| {
            Rectangle::new(
                [(x(b.start), y(b.row) + 0.15), (x(b.end), y(b.row) + 0.4)],
                colour(b.row).mix(0.55).filled(),
            )
        }))
        .map_err(draw_err)?;
        ch.draw_series(
            t.notices
                .iter()
                .map(|(s, _)| PathElement::new(vec![(x(*s), 0.0), (x(*s), n as f64)], palette::ALERT.stroke_width(2))),
        )
        .map_err(draw_err)?;
        // Notices listed under the plot (the first few), with the count of the rest.
        let mut lines: Vec<String> =
            t.notices.iter().take(3).map(|(s, what)| format!("▲ {:.4} s  {}", s, clip(what, 120))).collect();
        let more = t.notices.len().saturating_sub(3) as u64 + t.notices_left_out;
        if more > 0 {
            lines.push(format!("… and {more} more notices"));
        }
        if t.notices.is_empty() && t.notices_left_out == 0 {
            lines.push("no notices".into());
        }
        if t.lobes_left_out > 0 {
            lines.push(format!("{} items of lobes beyond the first {MAX_ROWS} not drawn", t.lobes_left_out));
        }
        for (i, line) in lines.into_iter().enumerate() {
            notes
                .draw(&Text::new(line, (24, 6 + 22 * i as i32), text_style(13.0, palette::ALERT)))
                .map_err(draw_err)?;
        }
        Ok(())
    }
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
        t.add(true, Bar { start: 0.0, end: 1.0, row: r, dwell: Some(0) }, None, 3);
        t.add(true, Bar { start: 1.0, end: 2.0, row: r, dwell: Some(0) }, None, 3);
        assert_eq!(t.segment_bars.len(), 1);
        assert_eq!(t.segment_bars[0].end, 2.0);
        for d in 1..6 {
            t.add(true, Bar { start: 2.5 * d as f64, end: 2.5 * d as f64 + 2.0, row: r, dwell: Some(d) }, None, 3);
        }
        assert_eq!(t.segment_bars.len(), 3);
        assert!(t.truncated && t.left_out == 3);
        // Beyond the span limit nothing new starts.
        let mut u = Timeline::default();
        u.add(false, Bar { start: 5.0, end: 6.0, row: 0, dwell: Some(1) }, Some(4.0), 100);
        assert!(u.sweep_bars.is_empty() && u.truncated);
    }
}
