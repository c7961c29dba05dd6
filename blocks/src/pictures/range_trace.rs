//! `range_trace`: averaged amplitude (dB) against range (km), all lobes
//! together or one colour per lobe, with the range gate marked.

use super::accum::{BinWindow, LobeAverages, decimate_min_max};
use super::{Picture, chart, draw_err, draw_mesh, frame, legend, padded, palette, write_picture};
use crate::{
    BlockError, BlockSpec, BuildContext, DistanceSetting, FileStager, Item, ItemKind, NoPorts, Outputs, ParamType,
    TypedBlock,
};
use plotters::coord::Shift;
use plotters::prelude::*;

pub const SPEC: BlockSpec = BlockSpec::typed::<RangeTrace>(
    "range_trace",
    "Range trace picture: averaged echo amplitude in dB against range in km, for all lobes together or one colour \
     per lobe, with the range gate shaded; writes <path>.png and <path>.svg.",
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
        gate_start: DistanceSetting { ty: DIST, default: Some("0 m"), doc: "range gate start to mark" },
        gate_width: DistanceSetting { ty: DIST, default: Some("0 m"), doc: "range gate width (0 = no gate marked)" },
        average: u64 {
            ty: ParamType::Integer { min: 0, max: 1_000_000_000 },
            default: Some("0"),
            doc: "sweeps to average (0 = all; N = exponential average over about the last N)",
        },
        path: String {
            ty: ParamType::OutputPath,
            default: Some("range-trace"),
            doc: "base name: writes <path>.png and <path>.svg",
        },
    }
}

crate::block_ports! {
    inputs pub enum RangeTraceIn { Sweeps = required("sweeps", ItemKind::Sweep, "sweeps to average") }
}

const WIDTH: u32 = 1200;
const HEIGHT: u32 = 640;

pub struct RangeTrace {
    settings: RangeTraceSettings,
    averages: LobeAverages,
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
            files: ctx.files.clone(),
            dropped_noticed: false,
        })
    }

    fn process(&mut self, _port: RangeTraceIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let Item::Sweep(sweep) = item else {
            return Ok(());
        };
        let (name, order): (&str, usize) = match (&sweep.lobe, self.settings.lobes) {
            (Some(tag), LobeTraces::Separate) => (&tag.name, tag.lobe),
            (None, LobeTraces::Separate) => ("untagged", usize::MAX),
            (_, LobeTraces::Together) => ("all lobes", 0),
        };
        let s = &self.settings;
        let kept =
            self.averages.add(name, order, &sweep, |sw| BinWindow::from_settings(&s.range_start, &s.range_end, sw))?;
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

    fn finish(&mut self, _out: &mut Outputs) -> Result<(), BlockError> {
        let gate = match self.averages.window() {
            Some(w) => {
                let width = self.settings.gate_width.bins(w.rate)? * w.bin_m();
                let start = self.settings.gate_start.bins(w.rate)? * w.bin_m();
                (width > 0.0).then_some((start, start + width))
            }
            None => None,
        };
        let traces = self
            .averages
            .groups
            .iter()
            .enumerate()
            .map(|(i, (name, _, avg))| {
                let w = avg.window;
                let pts: Vec<(f64, f64)> =
                    avg.amplitude_db().iter().enumerate().map(|(k, &db)| (w.range_m(k as f64) / 1e3, db)).collect();
                (palette::lobe(i), format!("{name} ({} sweeps)", avg.sweeps), decimate_min_max(&pts, 4000))
            })
            .collect();
        let window = self.averages.window();
        let picture = TracePicture { traces, gate, window, dropped: self.averages.dropped };
        write_picture(&picture, &self.settings.path, &self.files)?;
        Ok(())
    }
}

/// Colour, legend label and decimated (km, dB) points of one trace.
type Trace = (RGBColor, String, Vec<(f64, f64)>);

struct TracePicture {
    traces: Vec<Trace>,
    gate: Option<(f64, f64)>,
    window: Option<BinWindow>,
    dropped: u64,
}

impl Picture for TracePicture {
    fn size(&self) -> (u32, u32) {
        (WIDTH, HEIGHT)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let sub = match self.window {
            Some(w) => format!(
                "RMS amplitude of the averaged sweeps, {:.2} to {:.2} km, range bin {:.2} m{}",
                w.start_m() / 1e3,
                w.end_m() / 1e3,
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
        let (x0, x1) = self.window.map(|w| (w.start_m() / 1e3, w.end_m() / 1e3)).unwrap_or((0.0, 1.0));
        let all = self.traces.iter().flat_map(|t| t.2.iter().map(|p| p.1));
        let hi = all.clone().fold(f64::NEG_INFINITY, f64::max);
        // Show at most 90 dB below the strongest point, so blanked bins do not flatten the trace.
        let lo = all.fold(f64::INFINITY, f64::min).max(hi - 90.0);
        let (y0, y1) = padded(lo, hi, 0.06, 6.0);
        let mut ch = chart(&area, "", x0..x1, y0..y1)?;
        if let Some((g0, g1)) = self.gate {
            ch.draw_series(std::iter::once(Rectangle::new(
                [(g0 / 1e3, y0), (g1 / 1e3, y1)],
                palette::GATE.mix(0.45).filled(),
            )))
            .map_err(draw_err)?;
        }
        draw_mesh(&mut ch, "range (km)", "amplitude (dB, RMS)")?;
        for (colour, _, pts) in &self.traces {
            let clipped = pts.iter().map(|&(x, y)| (x, y.max(y0)));
            ch.draw_series(LineSeries::new(clipped, colour.stroke_width(2))).map_err(draw_err)?;
        }
        if let Some((g0, g1)) = self.gate {
            ch.draw_series(std::iter::once(Text::new(
                format!("gate {:.3}–{:.3} km", g0 / 1e3, g1 / 1e3),
                (g0 / 1e3, y1),
                super::text_style(13.0, palette::INK),
            )))
            .map_err(draw_err)?;
        }
        let mut entries: Vec<(RGBColor, String)> = self.traces.iter().map(|t| (t.0, t.1.clone())).collect();
        if entries.is_empty() {
            entries.push((palette::MUTED, "no sweeps".into()));
        }
        legend(&area, 20, &entries)?;
        Ok(())
    }
}
