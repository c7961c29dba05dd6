//! `split_pair`: for each lobe pair, the two lobes' averaged sweeps around
//! the range gate on one scale, the gate shaded (from a `range_gate`'s
//! `gates` output, else the gate settings) and the pair's balance written:
//! the mean power of the positive lobe over the negative one in the gate,
//! in dB (balanced means on axis).

use super::accum::{BinWindow, GateReport, LobeAverages, SweepAverage, decimate_min_max};
use super::{
    Picture, PictureFormats, chart, draw_err, draw_mesh, frame, legend, padded, palette, text_style, write_picture,
};
use crate::dsp::discriminator::LobePair;
use crate::{
    BlockError, BlockSpec, BuildContext, DistanceSetting, FileStager, Item, ItemKind, NoPorts, Outputs, ParamType,
    TypedBlock,
};
use plotters::coord::Shift;
use plotters::prelude::*;

pub const SPEC: BlockSpec = BlockSpec::typed::<SplitPair>(
    "split_pair",
    "Split pair picture: for each lobe pair, the two lobes' averaged sweeps around the range gate on one scale, the \
     gate shaded (from a range_gate's gates output, else the gate settings) and the balance (positive lobe over \
     negative, mean power in the gate, dB) written; writes <path>.png and <path>.svg. Needs sweeps labelled with \
     their lobe.",
);

const DIST: ParamType = ParamType::Distance { min_m: 0.0, max_m: 1e8 };

crate::block_settings! {
    /// Settings of `split_pair`.
    pub struct SplitPairSettings {
        pairs: Vec<LobePair> {
            ty: ParamType::LobePairs,
            default: Some("az=right/left, el=up/down"),
            doc: "lobe pairs: axis=positive/negative, comma-separated",
        },
        gate_start: DistanceSetting { ty: DIST, default: Some("0 m"), doc: "range gate start" },
        gate_width: DistanceSetting {
            ty: DIST,
            default: Some("0 m"),
            doc: "range gate width (0 = no gate: whole sweep, balance at the strongest echo)",
        },
        margin: DistanceSetting { ty: DIST, default: Some("1500 m"), doc: "range shown either side of the gate" },
        average: u64 {
            ty: ParamType::Integer { min: 0, max: 1_000_000_000 },
            default: Some("0"),
            doc: "sweeps to average per lobe (0 = all; N = exponential average over about the last N)",
        },
        path: String {
            ty: ParamType::OutputPath,
            default: Some("split-pair"),
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
    inputs pub enum SplitPairIn {
        Sweeps = required("sweeps", ItemKind::Sweep, "sweeps labelled with their lobe"),
        Gates = optional("gates", ItemKind::Row, "a range_gate's gates output: the gate the balance is read in"),
    }
}

const WIDTH: u32 = 1200;
const HEIGHT: u32 = 640;

pub struct SplitPair {
    settings: SplitPairSettings,
    averages: LobeAverages,
    gate: GateReport,
    files: FileStager,
    untagged: u64,
}

impl SplitPair {
    fn window(s: &SplitPairSettings, sweep: &crate::Sweep) -> Result<BinWindow, BlockError> {
        let rate = sweep.stamp.rate;
        let width = s.gate_width.bins(rate)?;
        let (first, last) = if width > 0.0 {
            let start = s.gate_start.bins(rate)?;
            let margin = s.margin.bins(rate)?;
            (start - margin, start + width + margin)
        } else {
            (0.0, sweep.iq.len() as f64)
        };
        BinWindow::from_bins(first, last, sweep)
            .map_err(|e| BlockError::at(format!("gate and margin: {e}"), sweep.stamp.index))
    }
}

impl SplitPair {
    /// The gate in window bins: every position a `range_gate` reported
    /// (the span a following gate covered), else the gate settings.
    fn gate_bins(&self, w: &BinWindow) -> Result<Option<(usize, usize)>, BlockError> {
        let (start, width) = match self.gate.span {
            Some((a, b)) => (a / w.bin_m(), (b - a) / w.bin_m()),
            None => (self.settings.gate_start.bins(w.rate)?, self.settings.gate_width.bins(w.rate)?),
        };
        let start = start - w.first as f64;
        Ok((width > 0.0).then_some((start.max(0.0).round() as usize, (start + width).max(0.0).round() as usize)))
    }
}

impl TypedBlock for SplitPair {
    type Settings = SplitPairSettings;
    type In = SplitPairIn;
    type Out = NoPorts;

    fn build(s: SplitPairSettings, ctx: &BuildContext) -> Result<Self, crate::BuildError> {
        Ok(SplitPair {
            averages: LobeAverages::new(s.average),
            gate: GateReport::default(),
            settings: s,
            files: ctx.files.clone(),
            untagged: 0,
        })
    }

    fn process(&mut self, port: SplitPairIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let sweep = match (port, item) {
            (SplitPairIn::Sweeps, Item::Sweep(sweep)) => sweep,
            (SplitPairIn::Gates, Item::Row(row)) => return self.gate.take(&row),
            _ => return Ok(()),
        };
        let Some(tag) = &sweep.lobe else {
            if self.untagged == 0 {
                out.warn(
                    sweep.stamp,
                    "sweeps carry no lobe label; split_pair needs them labelled by a switch-sync gate",
                );
            }
            self.untagged += 1;
            return Ok(());
        };
        let name: &str = &tag.name;
        if self.settings.pairs.iter().any(|p| p.plus == name || p.minus == name) {
            let settings = &self.settings;
            self.averages.add(name, tag.lobe, &sweep, |s| SplitPair::window(settings, s))?;
        }
        Ok(())
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        let mut panels = Vec::new();
        for pair in &self.settings.pairs {
            let a = self.averages.get(&pair.plus);
            let b = self.averages.get(&pair.minus);
            let gate = match self.averages.window() {
                Some(w) => self.gate_bins(&w)?,
                None => None,
            };
            let balance = balance_db(a, b, gate);
            if balance.is_none() && (a.is_some() || b.is_some()) {
                out.warn(
                    self.averages.groups.first().map(|g| g.2.first_stamp).unwrap_or(crate::Stamp::new(0, 1.0)),
                    format!("pair {}: no balance (a lobe is missing or has no power in the gate)", pair.axis),
                );
            }
            panels.push(Panel {
                pair: pair.clone(),
                a: a.map(trace),
                b: b.map(trace),
                balance,
                gate: self.averages.window().zip(gate),
            });
        }
        let margin_km = match self.averages.window() {
            Some(w) => self.settings.margin.bins(w.rate)? * w.bin_m() / 1e3,
            None => 0.0,
        };
        let picture = SplitPicture { panels, margin_km, followed: self.gate.gates_in_use > 1, untagged: self.untagged };
        write_picture(&picture, &self.settings.path, self.settings.formats, &self.files)?;
        Ok(())
    }
}

/// Balance of a pair in dB: mean power over the gate (or a few bins around
/// the strongest echo of the two) of the positive lobe over the negative one.
pub fn balance_db(a: Option<&SweepAverage>, b: Option<&SweepAverage>, gate: Option<(usize, usize)>) -> Option<f64> {
    let (a, b) = (a?, b?);
    let (lo, hi) = match gate {
        Some(g) => g,
        None => {
            let both: Vec<f64> =
                a.amplitude().iter().zip(b.amplitude()).map(|(x, y)| x.max(0.0) + y.max(0.0)).collect();
            let k = both.iter().enumerate().filter(|v| v.1.is_finite()).max_by(|x, y| x.1.total_cmp(y.1))?.0;
            (k.saturating_sub(2), k + 3)
        }
    };
    let (pa, pb) = (a.mean_power(lo, hi)?, b.mean_power(lo, hi)?);
    (pa > 0.0 && pb > 0.0).then(|| 10.0 * (pa / pb).log10())
}

/// Decimated (range km, dB) points of an averaged sweep.
fn trace(avg: &SweepAverage) -> (u64, Vec<(f64, f64)>) {
    let w = avg.window;
    let pts: Vec<(f64, f64)> =
        avg.amplitude_db().iter().enumerate().map(|(k, &db)| (w.range_m(k as f64) / 1e3, db)).collect();
    (avg.sweeps, decimate_min_max(&pts, 3000))
}

struct Panel {
    pair: LobePair,
    a: Option<(u64, Vec<(f64, f64)>)>,
    b: Option<(u64, Vec<(f64, f64)>)>,
    balance: Option<f64>,
    /// Window, and the gate in window bins.
    gate: Option<(BinWindow, (usize, usize))>,
}

struct SplitPicture {
    panels: Vec<Panel>,
    /// Range shown either side of the gate.
    margin_km: f64,
    /// Whether the gate followed the echo (the shaded gate is its span).
    followed: bool,
    untagged: u64,
}

impl Picture for SplitPicture {
    fn size(&self) -> (u32, u32) {
        (WIDTH, HEIGHT)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let gate = if self.followed { "the span the following gate covered" } else { "the gate" };
        let mut sub = format!(
            "each pair's two lobes on one scale around the gate; balance = mean power of the positive lobe over the \
             negative one in {gate}"
        );
        if self.untagged > 0 {
            sub.push_str(&format!("; {} unlabelled sweeps ignored", self.untagged));
        }
        let area = frame(root, "Split pair", &sub)?;
        let cells = area.split_evenly((1, self.panels.len().max(1)));
        for (panel, cell) in self.panels.iter().zip(&cells) {
            draw_panel(panel, self.margin_km, cell)?;
        }
        Ok(())
    }
}

/// The range shown: the gate and `margin_km` either side, else all of the traces.
fn shown_km(panel: &Panel, margin_km: f64) -> (f64, f64) {
    if let Some((w, (g0, g1))) = panel.gate {
        let (a, b) = (w.range_m(g0 as f64) / 1e3, w.range_m(g1 as f64) / 1e3);
        let m = margin_km.max(5.0 * w.bin_m() / 1e3);
        return ((a - m).max(w.start_m() / 1e3), (b + m).min(w.end_m() / 1e3));
    }
    let x = panel
        .a
        .iter()
        .chain(&panel.b)
        .flat_map(|t| t.1.iter().map(|v| v.0))
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v)));
    if x.0 < x.1 { x } else { (0.0, 1.0) }
}

fn draw_panel<DB: DrawingBackend>(panel: &Panel, margin_km: f64, cell: &DrawingArea<DB, Shift>) -> Result<(), String> {
    let p = &panel.pair;
    let (x0, x1) = shown_km(panel, margin_km);
    let inside = |v: &&(f64, f64)| v.0 >= x0 && v.0 <= x1 && v.1.is_finite();
    let values = panel.a.iter().chain(&panel.b).flat_map(|t| t.1.iter().filter(inside).map(|v| v.1));
    let hi = values.clone().fold(f64::NEG_INFINITY, f64::max);
    let lo = values.fold(f64::INFINITY, f64::min).max(hi - 80.0);
    let (y0, y1) = padded(lo, hi, 0.04, 6.0);
    // Headroom above the echo for the balance and the legend.
    let y1 = y1 + 0.45 * (y1 - y0);
    let mut ch = chart(cell, &format!("{}: {} and {}", p.axis, p.plus, p.minus), x0..x1, y0..y1)?;
    if let Some((w, (g0, g1))) = panel.gate {
        let (a, b) = (w.range_m(g0 as f64) / 1e3, w.range_m(g1 as f64) / 1e3);
        ch.draw_series(std::iter::once(Rectangle::new([(a, y0), (b, y1)], palette::GATE.mix(0.5).filled())))
            .map_err(draw_err)?;
    }
    draw_mesh(&mut ch, "range (km)", "amplitude (dB, RMS)")?;
    let mut entries = Vec::new();
    for (trace, name, colour) in [(&panel.a, &p.plus, palette::lobe(0)), (&panel.b, &p.minus, palette::lobe(1))] {
        if let Some((n, pts)) = trace {
            let shown = pts.iter().filter(inside).map(|&(x, y)| (x, y.max(y0)));
            ch.draw_series(LineSeries::new(shown, colour.stroke_width(2))).map_err(draw_err)?;
            entries.push((colour, format!("{name}: {n} sweeps averaged")));
        }
    }
    if let Some((w, (g0, g1))) = panel.gate {
        entries.push((
            palette::GATE,
            format!("gate {:.2}–{:.2} km", w.range_m(g0 as f64) / 1e3, w.range_m(g1 as f64) / 1e3),
        ));
    }
    let balance = match panel.balance {
        Some(b) => format!("balance {} over {}: {b:+.2} dB", p.plus, p.minus),
        None => "no balance: a lobe is missing or has no power in the gate".to_string(),
    };
    ch.draw_series(std::iter::once(Text::new(
        balance,
        (x0 + 0.03 * (x1 - x0), y1 - 0.03 * (y1 - y0)),
        text_style(18.0, palette::ALERT),
    )))
    .map_err(draw_err)?;
    if entries.is_empty() {
        ch.draw_series(std::iter::once(Text::new(
            format!("no sweeps of {} or {}", p.plus, p.minus),
            (x0 + 0.05 * (x1 - x0), y0 + 0.5 * (y1 - y0)),
            text_style(15.0, palette::MUTED),
        )))
        .map_err(draw_err)?;
    } else {
        legend(cell, 44, &entries)?;
    }
    Ok(())
}
