//! `split_pair`: for each lobe pair, the two lobes' averaged sweeps around
//! the range gate on two traces a small, adjustable distance apart, with the
//! pair's balance in dB printed (balanced means on axis).

use super::accum::{BinWindow, LobeAverages, SweepAverage, decimate_min_max};
use super::{Picture, chart, draw_err, draw_mesh, frame, legend, padded, palette, text_style, write_picture};
use crate::dsp::discriminator::LobePair;
use crate::{
    BlockError, BlockSpec, BuildContext, DistanceSetting, FileStager, Item, ItemKind, NoPorts, Outputs, ParamError,
    ParamType, TypedBlock,
};
use plotters::coord::Shift;
use plotters::prelude::*;

pub const SPEC: BlockSpec = BlockSpec::typed::<SplitPair>(
    "split_pair",
    "Split pair picture: for each lobe pair, the two lobes' averaged sweeps around the range gate drawn on two traces \
     an adjustable distance apart, with the balance (positive lobe over negative, dB) printed; writes <path>.png and \
     <path>.svg. Needs sweeps labelled with their lobe.",
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
        separation: String {
            ty: ParamType::Text,
            default: Some("12 dB"),
            doc: "how far the positive lobe's trace is raised: in dB (e.g. '12 dB') or as a fraction of the plot height (e.g. '0.3')",
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
            doc: "base name: writes <path>.png and <path>.svg",
        },
    }
}

crate::block_ports! {
    inputs pub enum SplitPairIn { Sweeps = required("sweeps", ItemKind::Sweep, "sweeps labelled with their lobe") }
}

const WIDTH: u32 = 1200;
const HEIGHT: u32 = 640;

/// How far apart the two traces of a pair are drawn.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Separation {
    Decibels(f64),
    /// Fraction of the plot height.
    Fraction(f64),
}

pub fn parse_separation(text: &str) -> Result<Separation, String> {
    let t = text.trim();
    if let Some(n) = t.strip_suffix("dB") {
        let v: f64 = n.trim().parse().map_err(|_| format!("separation '{t}': expected a number of dB"))?;
        if !(0.0..=200.0).contains(&v) {
            return Err(format!("separation {v} dB is out of range (0 to 200 dB)"));
        }
        return Ok(Separation::Decibels(v));
    }
    let v: f64 = t
        .parse()
        .map_err(|_| format!("separation '{t}': expected dB (e.g. '12 dB') or a fraction of the plot (e.g. '0.3')"))?;
    if !(0.0..=0.9).contains(&v) {
        return Err(format!("separation {v} as a fraction of the plot must lie between 0 and 0.9"));
    }
    Ok(Separation::Fraction(v))
}

pub struct SplitPair {
    settings: SplitPairSettings,
    separation: Separation,
    averages: LobeAverages,
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

impl TypedBlock for SplitPair {
    type Settings = SplitPairSettings;
    type In = SplitPairIn;
    type Out = NoPorts;

    fn build(s: SplitPairSettings, ctx: &BuildContext) -> Result<Self, crate::BuildError> {
        let separation = parse_separation(&s.separation).map_err(|e| ParamError::invalid("separation", e))?;
        Ok(SplitPair {
            averages: LobeAverages::new(s.average),
            separation,
            settings: s,
            files: ctx.files.clone(),
            untagged: 0,
        })
    }

    fn process(&mut self, _port: SplitPairIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let Item::Sweep(sweep) = item else {
            return Ok(());
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
                Some(w) => {
                    let width = self.settings.gate_width.bins(w.rate)?;
                    let start = self.settings.gate_start.bins(w.rate)? - w.first as f64;
                    (width > 0.0)
                        .then_some((start.max(0.0).round() as usize, (start + width).max(0.0).round() as usize))
                }
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
        let picture = SplitPicture { panels, separation: self.separation, untagged: self.untagged };
        write_picture(&picture, &self.settings.path, &self.files)?;
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
    separation: Separation,
    untagged: u64,
}

impl Picture for SplitPicture {
    fn size(&self) -> (u32, u32) {
        (WIDTH, HEIGHT)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let sep_text = match self.separation {
            Separation::Decibels(d) => format!("positive lobe raised {d} dB"),
            Separation::Fraction(f) => {
                format!("positive lobe raised {:.0} % of the plot height", 100.0 * f)
            }
        };
        let mut sub =
            format!("Averaged sweeps of each lobe pair around the gate; {sep_text}; balance = positive over negative");
        if self.untagged > 0 {
            sub.push_str(&format!("; {} unlabelled sweeps ignored", self.untagged));
        }
        let area = frame(root, "Split pair", &sub)?;
        let cells = area.split_evenly((1, self.panels.len().max(1)));
        for (panel, cell) in self.panels.iter().zip(&cells) {
            draw_panel(panel, self.separation, cell)?;
        }
        Ok(())
    }
}

fn draw_panel<DB: DrawingBackend>(
    panel: &Panel,
    separation: Separation,
    cell: &DrawingArea<DB, Shift>,
) -> Result<(), String> {
    let p = &panel.pair;
    let values = panel.a.iter().chain(&panel.b).flat_map(|t| t.1.iter().map(|v| v.1));
    let hi = values.clone().fold(f64::NEG_INFINITY, f64::max);
    let lo = values.fold(f64::INFINITY, f64::min).max(hi - 80.0);
    let (lo, hi) = padded(lo, hi, 0.02, 6.0);
    let offset = match separation {
        Separation::Decibels(d) => d,
        Separation::Fraction(f) => f * (hi - lo),
    };
    let x = panel
        .a
        .iter()
        .chain(&panel.b)
        .flat_map(|t| t.1.iter().map(|v| v.0))
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v)));
    let (x0, x1) = if x.0 < x.1 { x } else { (0.0, 1.0) };
    let caption = match panel.balance {
        Some(b) => format!("{}: {} − {} = {:+.2} dB", p.axis, p.plus, p.minus, b),
        None => format!("{}: {} / {} — no balance", p.axis, p.plus, p.minus),
    };
    let (y0, y1) = (lo, hi + offset);
    let mut ch = chart(cell, &caption, x0..x1, y0..y1)?;
    if let Some((w, (g0, g1))) = panel.gate {
        let (a, b) = (w.range_m(g0 as f64) / 1e3, w.range_m(g1 as f64) / 1e3);
        ch.draw_series(std::iter::once(Rectangle::new([(a, y0), (b, y1)], palette::GATE.mix(0.4).filled())))
            .map_err(draw_err)?;
    }
    draw_mesh(&mut ch, "range (km)", "amplitude (dB)")?;
    let mut entries = Vec::new();
    let clip = move |v: f64| v.max(lo);
    if let Some((n, pts)) = &panel.a {
        ch.draw_series(LineSeries::new(
            pts.iter().map(|&(x, y)| (x, clip(y) + offset)),
            palette::lobe(0).stroke_width(2),
        ))
        .map_err(draw_err)?;
        entries.push((palette::lobe(0), format!("{} +{:.1} dB ({n})", p.plus, offset)));
    }
    if let Some((n, pts)) = &panel.b {
        ch.draw_series(LineSeries::new(pts.iter().map(|&(x, y)| (x, clip(y))), palette::lobe(1).stroke_width(2)))
            .map_err(draw_err)?;
        entries.push((palette::lobe(1), format!("{} ({n})", p.minus)));
    }
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn separation_in_db_or_fraction() {
        assert_eq!(parse_separation("12 dB"), Ok(Separation::Decibels(12.0)));
        assert_eq!(parse_separation("0.25"), Ok(Separation::Fraction(0.25)));
        assert!(parse_separation("2").is_err());
        assert!(parse_separation("x dB").is_err());
    }
}
