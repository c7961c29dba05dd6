//! `range_trace`: averaged amplitude (dB) against range (km): the mean of
//! the lobes with their spread over the whole window, and each lobe's own
//! trace around the gate, with the range gate and the noise reference
//! region a `range_gate` reported (its `gates` output) shaded.

use super::accum::{BinWindow, GateReport, LobeAverages, decimate_min_max};
use super::{
    Chart, Picture, PictureFormats, chart, draw_err, draw_mesh, frame, legend, padded, palette, write_picture,
};
use crate::{
    BlockError, BlockSpec, BuildContext, DistanceSetting, FileStager, Item, ItemKind, NoPorts, Outputs, ParamType,
    TypedBlock,
};
use plotters::coord::Shift;
use plotters::prelude::*;

pub const SPEC: BlockSpec = BlockSpec::typed::<RangeTrace>(
    "range_trace",
    "Range trace picture: averaged echo amplitude in dB against range in km, the lobes' mean with their spread over \
     the window and each lobe around the gate, with the gate and the noise reference region shaded (from a \
     range_gate's gates output, else the gate settings); writes <path>.png and <path>.svg.",
);

const DIST: ParamType = ParamType::Distance { min_m: 0.0, max_m: 1e8 };

crate::block_choice! {
    /// Whether the lobes get a trace each.
    pub enum LobeTraces { Separate = "separate", Together = "together" }
}

crate::block_settings! {
    /// Settings of `range_trace`.
    pub struct RangeTraceSettings {
        range_start: DistanceSetting { ty: DIST, default: Some("0 m"), doc: "start of the range axis" },
        range_end: DistanceSetting {
            ty: DIST,
            default: Some("0 m"),
            doc: "end of the range axis (0 = to the end of the first sweep)",
        },
        lobes: LobeTraces {
            ty: ParamType::Choice(LobeTraces::WORDS),
            default: Some("separate"),
            doc: "one trace per lobe (by the sweeps' lobe tags) or one for all",
        },
        gate_start: DistanceSetting {
            ty: DIST,
            default: Some("0 m"),
            doc: "range gate start to mark when no gates input is wired",
        },
        gate_width: DistanceSetting {
            ty: DIST,
            default: Some("0 m"),
            doc: "range gate width when no gates input is wired (0 = no gate marked)",
        },
        average: u64 {
            ty: ParamType::Integer { min: 0, max: 1_000_000_000 },
            default: Some("0"),
            doc: "sweeps to average (0 = all; N = exponential average over about the last N)",
        },
        path: String {
            ty: ParamType::OutputPath,
            default: Some("range-trace"),
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
    inputs pub enum RangeTraceIn {
        Sweeps = required("sweeps", ItemKind::Sweep, "sweeps to average"),
        Gates = optional("gates", ItemKind::Row, "a range_gate's gates output: the gate and noise region to shade"),
    }
}

const WIDTH: u32 = 1200;
const HEIGHT: u32 = 820;

pub struct RangeTrace {
    settings: RangeTraceSettings,
    averages: LobeAverages,
    gate: GateReport,
    files: FileStager,
    dropped_noticed: bool,
}

impl TypedBlock for RangeTrace {
    type Settings = RangeTraceSettings;
    type In = RangeTraceIn;
    type Out = NoPorts;

    fn build(s: RangeTraceSettings, ctx: &BuildContext) -> Result<Self, crate::BuildError> {
        Ok(RangeTrace {
            averages: LobeAverages::new(s.average),
            settings: s,
            gate: GateReport::default(),
            files: ctx.files.clone(),
            dropped_noticed: false,
        })
    }

    fn process(&mut self, port: RangeTraceIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match (port, item) {
            (RangeTraceIn::Sweeps, Item::Sweep(sweep)) => self.take(&sweep, out),
            (RangeTraceIn::Gates, Item::Row(row)) => self.gate.take(&row),
            _ => Ok(()),
        }
    }

    fn finish(&mut self, _out: &mut Outputs) -> Result<(), BlockError> {
        let window = self.averages.window();
        if self.gate.first.is_none()
            && let Some(w) = window
        {
            let width = self.settings.gate_width.bins(w.rate)? * w.bin_m();
            let start = self.settings.gate_start.bins(w.rate)? * w.bin_m();
            if width > 0.0 {
                self.gate = GateReport {
                    first: Some((start, start + width)),
                    span: Some((start, start + width)),
                    gates_in_use: 1,
                    ..GateReport::default()
                };
            }
        }
        let picture = TracePicture::new(&self.averages, self.gate, window);
        write_picture(&picture, &self.settings.path, self.settings.formats, &self.files)?;
        Ok(())
    }
}

impl RangeTrace {
    fn take(&mut self, sweep: &crate::Sweep, out: &mut Outputs) -> Result<(), BlockError> {
        let (name, order): (&str, usize) = match (&sweep.lobe, self.settings.lobes) {
            (Some(tag), LobeTraces::Separate) => (&tag.name, tag.lobe),
            (None, LobeTraces::Separate) => ("untagged", usize::MAX),
            (_, LobeTraces::Together) => ("all lobes", 0),
        };
        let s = &self.settings;
        let kept =
            self.averages.add(name, order, sweep, |sw| BinWindow::from_settings(&s.range_start, &s.range_end, sw))?;
        if !kept && !self.dropped_noticed {
            self.dropped_noticed = true;
            out.warn(
                sweep.stamp,
                format!(
                    "more than {} lobes; sweeps of lobe '{name}' and later new lobes are not drawn",
                    super::accum::MAX_GROUPS
                ),
            );
        }
        Ok(())
    }
}

/// Colour, legend label and (km, dB) points of one lobe's trace.
type Trace = (RGBColor, String, Vec<(f64, f64)>);

/// What the picture draws, in km and dB.
pub struct TracePicture {
    /// Each lobe's trace at full resolution.
    pub lobes: Vec<Trace>,
    /// Mean power of the lobes per bin, dB, and the least and greatest lobe: (km, mean, low, high).
    pub mean: Vec<(f64, f64, f64, f64)>,
    pub gate: GateReport,
    pub window: Option<BinWindow>,
    pub dropped: u64,
}

/// Points drawn per trace over the whole window.
const DRAWN: usize = 3000;

impl TracePicture {
    pub fn new(averages: &LobeAverages, gate: GateReport, window: Option<BinWindow>) -> TracePicture {
        let lobes: Vec<Trace> = averages
            .groups
            .iter()
            .enumerate()
            .map(|(i, (name, _, avg))| {
                let w = avg.window;
                let pts =
                    avg.amplitude_db().iter().enumerate().map(|(k, &db)| (w.range_m(k as f64) / 1e3, db)).collect();
                (palette::lobe(i), format!("{name}: {} sweeps averaged", avg.sweeps), pts)
            })
            .collect();
        let bins = lobes.iter().map(|l| l.2.len()).min().unwrap_or(0);
        let mean = (0..bins)
            .filter_map(|k| {
                let dbs: Vec<f64> = lobes.iter().map(|l| l.2[k].1).filter(|v| v.is_finite()).collect();
                if dbs.is_empty() {
                    return None;
                }
                let power = dbs.iter().map(|db| 10f64.powf(db / 10.0)).sum::<f64>() / dbs.len() as f64;
                let lo = dbs.iter().copied().fold(f64::INFINITY, f64::min);
                let hi = dbs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                Some((lobes[0].2[k].0, 10.0 * power.log10(), lo, hi))
            })
            .collect();
        TracePicture { lobes, mean, gate, window, dropped: averages.dropped }
    }

    /// The range shown around the gate (or the strongest mean bin): the gate
    /// and three gate widths (at least ten bins) either side, km.
    pub fn zoom_km(&self) -> Option<(f64, f64)> {
        let bin_km = self.window?.bin_m() / 1e3;
        let (a, b) = match self.gate.span {
            Some((a, b)) => (a / 1e3, b / 1e3),
            None => {
                let peak = self.mean.iter().max_by(|x, y| x.1.total_cmp(&y.1))?;
                (peak.0, peak.0 + bin_km)
            }
        };
        let margin = (3.0 * (b - a)).max(10.0 * bin_km);
        Some((a - margin, b + margin))
    }
}

impl Picture for TracePicture {
    fn size(&self) -> (u32, u32) {
        (WIDTH, HEIGHT)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let sub = match self.window {
            Some(w) => format!(
                "RMS amplitude of the averaged sweeps, range bin {:.2} m; range counted from the transmit instant{}",
                w.bin_m(),
                if self.dropped > 0 {
                    format!("; {} sweeps of further lobes not drawn", self.dropped)
                } else {
                    String::new()
                }
            ),
            None => "no sweeps arrived".to_string(),
        };
        let area = frame(root, "Range trace", &sub)?;
        let (top, bottom) = area.split_vertically(((HEIGHT - 68) as f64 * 0.55) as u32);
        self.draw_whole(&top)?;
        self.draw_zoom(&bottom)
    }
}

impl TracePicture {
    /// Gate and noise region over `y`.
    fn shade_gate<DB: DrawingBackend>(&self, c: &mut Chart<'_, DB>, y: (f64, f64)) -> Result<(), String> {
        let band =
            |r: (f64, f64), colour: RGBAColor| Rectangle::new([(r.0 / 1e3, y.0), (r.1 / 1e3, y.1)], colour.filled());
        if let Some(noise) = self.gate.noise {
            c.draw_series(std::iter::once(band(noise, palette::GUARD.mix(0.45)))).map_err(draw_err)?;
        }
        if let Some(span) = self.gate.span
            && self.gate.gates_in_use > 1
        {
            c.draw_series(std::iter::once(band(span, palette::GATE.mix(0.25)))).map_err(draw_err)?;
        }
        if let Some(first) = self.gate.first {
            c.draw_series(std::iter::once(band(first, palette::GATE.mix(0.6)))).map_err(draw_err)?;
        }
        Ok(())
    }

    fn gate_entries(&self) -> Vec<(RGBColor, String)> {
        let mut entries = Vec::new();
        if let Some(text) = self.gate.describe() {
            entries.push((palette::GATE, text));
        }
        if let Some((a, b)) = self.gate.noise {
            entries.push((palette::GUARD, format!("noise reference {:.2}–{:.2} km", a / 1e3, b / 1e3)));
        }
        entries
    }

    fn y_range(points: impl Iterator<Item = f64> + Clone) -> (f64, f64) {
        let hi = points.clone().fold(f64::NEG_INFINITY, f64::max);
        // At most 90 dB below the strongest point, so near-empty bins do not flatten the trace.
        let lo = points.fold(f64::INFINITY, f64::min).max(hi - 90.0);
        padded(lo, hi, 0.06, 6.0)
    }

    /// The whole window: the lobes' mean power with their spread.
    fn draw_whole<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        // The axis starts near the first bin with data (blanked bins have none).
        let first = self.mean.first().map(|p| p.0);
        let last = self.mean.last().map(|p| p.0);
        let (x0, x1) = match (first, last) {
            (Some(a), Some(b)) if b > a => (a - 0.01 * (b - a), b + 0.01 * (b - a)),
            _ => (0.0, 1.0),
        };
        let y = Self::y_range(self.mean.iter().flat_map(|p| [p.2, p.3]));
        let caption =
            if self.lobes.len() > 1 { "whole window: mean of the lobes, their spread shaded" } else { "whole window" };
        let mut c = chart(area, caption, x0..x1, y.0..y.1)?;
        self.shade_gate(&mut c, y)?;
        draw_mesh(&mut c, "range (km)", "amplitude (dB, RMS)")?;
        if self.lobes.len() > 1 {
            let step = self.mean.len().div_ceil(DRAWN).max(1);
            let chunks = self.mean.chunks(step);
            let upper =
                chunks.clone().map(|ch| (ch[0].0, ch.iter().map(|p| p.3).fold(f64::NEG_INFINITY, f64::max).max(y.0)));
            let lower = chunks.map(|ch| (ch[0].0, ch.iter().map(|p| p.2).fold(f64::INFINITY, f64::min).max(y.0)));
            let mut outline: Vec<(f64, f64)> = upper.collect();
            outline.extend(lower.collect::<Vec<_>>().into_iter().rev());
            c.draw_series(std::iter::once(Polygon::new(outline, palette::BAND.mix(0.7).filled()))).map_err(draw_err)?;
        }
        let mean: Vec<(f64, f64)> = self.mean.iter().map(|p| (p.0, p.1.max(y.0))).collect();
        c.draw_series(LineSeries::new(decimate_min_max(&mean, DRAWN), palette::INK.stroke_width(1)))
            .map_err(draw_err)?;
        let mut entries = vec![(
            palette::INK,
            if self.lobes.len() > 1 {
                format!("mean power of {} lobes", self.lobes.len())
            } else {
                "average".to_string()
            },
        )];
        if self.lobes.len() > 1 {
            entries.push((palette::BAND, "weakest to strongest lobe".to_string()));
        }
        entries.extend(self.gate_entries());
        legend(area, 30, &entries)
    }

    /// Around the gate: each lobe's own trace.
    fn draw_zoom<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let Some((x0, x1)) = self.zoom_km() else { return Ok(()) };
        let inside = |p: &&(f64, f64)| p.0 >= x0 && p.0 <= x1 && p.1.is_finite();
        let y = Self::y_range(self.lobes.iter().flat_map(|l| l.2.iter().filter(inside).map(|p| p.1)));
        let caption = if self.gate.first.is_some() {
            "around the gate: each lobe"
        } else {
            "around the strongest echo: each lobe"
        };
        let mut c = chart(area, caption, x0..x1, y.0..y.1)?;
        self.shade_gate(&mut c, y)?;
        draw_mesh(&mut c, "range (km)", "amplitude (dB, RMS)")?;
        for (colour, _, pts) in &self.lobes {
            let shown = pts.iter().filter(inside).map(|&(x, v)| (x, v.max(y.0)));
            c.draw_series(LineSeries::new(shown, colour.stroke_width(2))).map_err(draw_err)?;
        }
        let mut entries: Vec<(RGBColor, String)> = self.lobes.iter().map(|t| (t.0, t.1.clone())).collect();
        if entries.is_empty() {
            entries.push((palette::MUTED, "no sweeps".into()));
        }
        legend(area, 30, &entries)
    }
}
