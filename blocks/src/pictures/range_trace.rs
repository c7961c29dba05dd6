//! `range_trace`: averaged amplitude (dB) against range (km), all lobes
//! together or one colour per lobe, with the range gate marked.

use super::accum::{BinWindow, LobeAverages, decimate_min_max};
use super::{Picture, chart, draw_err, draw_mesh, frame, legend, padded, palette, write_picture};
use crate::{
    Block, BlockError, BlockSpec, BuildContext, FileStager, Item, ItemKind, Outputs, ParamSpec, ParamType, Params,
    PortSpec,
};
use plotters::coord::Shift;
use plotters::prelude::*;

pub const SPEC: BlockSpec = BlockSpec {
    kind: "range_trace",
    doc: "Range trace picture: averaged echo amplitude in dB against range in km, for all lobes together or one colour \
          per lobe, with the range gate shaded; writes <path>.png and <path>.svg.",
    inputs: &[PortSpec::required("sweeps", ItemKind::Sweep, "sweeps to average")],
    outputs: &[],
    params: &[
        ParamSpec {
            name: "range_start",
            ty: ParamType::Distance { min_m: 0.0, max_m: 1e8 },
            default: Some("0 m"),
            doc: "start of the range axis",
        },
        ParamSpec {
            name: "range_end",
            ty: ParamType::Distance { min_m: 0.0, max_m: 1e8 },
            default: Some("0 m"),
            doc: "end of the range axis (0 = to the end of the first sweep)",
        },
        ParamSpec {
            name: "lobes",
            ty: ParamType::Choice(&["separate", "together"]),
            default: Some("separate"),
            doc: "one trace per lobe (by the sweeps' lobe tags) or one for all",
        },
        ParamSpec {
            name: "gate_start",
            ty: ParamType::Distance { min_m: 0.0, max_m: 1e8 },
            default: Some("0 m"),
            doc: "range gate start to mark",
        },
        ParamSpec {
            name: "gate_width",
            ty: ParamType::Distance { min_m: 0.0, max_m: 1e8 },
            default: Some("0 m"),
            doc: "range gate width (0 = no gate marked)",
        },
        ParamSpec {
            name: "average",
            ty: ParamType::Integer { min: 0, max: 1_000_000_000 },
            default: Some("0"),
            doc: "sweeps to average (0 = all; N = exponential average over about the last N)",
        },
        ParamSpec {
            name: "path",
            ty: ParamType::OutputPath,
            default: Some("range-trace"),
            doc: "base name: writes <path>.png and <path>.svg",
        },
    ],
    build,
};

const WIDTH: u32 = 1200;
const HEIGHT: u32 = 640;

fn build(p: &Params, ctx: &BuildContext) -> Result<Box<dyn Block>, crate::BuildError> {
    Ok(Box::new(RangeTrace {
        params: p.clone(),
        separate: p.text("lobes")? == "separate",
        averages: LobeAverages::new(p.int("average")?.max(0) as u64),
        path: p.text("path")?.to_string(),
        files: ctx.files.clone(),
        dropped_noticed: false,
    }))
}

struct RangeTrace {
    params: Params,
    separate: bool,
    averages: LobeAverages,
    path: String,
    files: FileStager,
    dropped_noticed: bool,
}

impl Block for RangeTrace {
    fn process(&mut self, _port: usize, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let Item::Sweep(sweep) = item else {
            return Ok(());
        };
        let (name, order): (&str, usize) = match (&sweep.lobe, self.separate) {
            (Some(tag), true) => (&tag.name, tag.lobe),
            (None, true) => ("untagged", usize::MAX),
            (_, false) => ("all lobes", 0),
        };
        let params = &self.params;
        let kept = self
            .averages
            .add(name, order, &sweep, |s| BinWindow::from_params(params, "range_start", "range_end", s))?;
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
                let width = self.params.bins_at("gate_width", w.rate)? * w.bin_m();
                let start = self.params.bins_at("gate_start", w.rate)? * w.bin_m();
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
        write_picture(&picture, &self.path, &self.files)?;
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
