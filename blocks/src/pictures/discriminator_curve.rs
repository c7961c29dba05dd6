//! The discriminator curve: for each lobe pair, the ratio against the
//! angle off the pair's axis. Drawn by `calibrate` (the measured ratios of a
//! scan with the fitted pattern, the best beam model and the residuals
//! below) and by the `discriminator_curve` block of a run (the beam model
//! the discriminator inverts, its usable region and the run's operating
//! points on it).

use super::{
    Chart, Picture, PictureFormats, chart, draw_err, draw_mesh, frame, legend_top_left, padded, palette, picture_base,
    write_picture,
};
use crate::block::{BlockError, BlockSpec, BuildContext, FileStager, Outputs};
use crate::dsp::beam::PairModel;
use crate::error::BuildError;
use crate::item::{AngleEstimate, Item, ItemKind, Stamp};
use crate::kinds::ratio_discriminator::{BeamModel, Way, beam_pair_model};
use crate::param::{ParamType, Unit};
use crate::typed::{Choice, NoPorts, TypedBlock};
use plotters::coord::Shift;
use plotters::prelude::*;
use std::path::PathBuf;
use std::sync::Arc;

/// One lobe pair's curve.
pub struct CurvePanel {
    pub axis: String,
    /// (off-axis angle deg, ratio dB) of each measured ratio.
    pub points: Vec<(f64, f64)>,
    /// What the points are, for the legend.
    pub points_label: String,
    /// Ratios (dB) that gave no angle (outside the usable region), drawn as
    /// ticks at the side they fell off.
    pub beyond: Vec<f64>,
    /// The fitted pattern's curve, with the imbalance, (deg, dB); may be empty.
    pub table: Vec<(f64, f64)>,
    /// The best beam model's curve, (deg, dB).
    pub model: Vec<(f64, f64)>,
    pub model_name: String,
    pub usable_deg: f64,
    /// Where the measured curve crosses 0 dB, when measured.
    pub crossover_deg: Option<f64>,
    /// (angle deg, read-back minus telemetry deg) inside the usable region;
    /// no residual chart when empty.
    pub residuals: Vec<(f64, f64)>,
    pub residual_rms_deg: f64,
}

pub struct DiscriminatorCurve {
    pub title: String,
    pub subtitle: String,
    /// The horizontal axis' title.
    pub angle_axis: String,
    pub panels: Vec<CurvePanel>,
}

const WIDTH: u32 = 1200;
const PANEL_HEIGHT: u32 = 560;

impl Picture for DiscriminatorCurve {
    fn size(&self) -> (u32, u32) {
        (WIDTH, 70 + PANEL_HEIGHT * self.panels.len().max(1) as u32)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let body = frame(root, &self.title, &self.subtitle)?;
        let areas = body.split_evenly((self.panels.len().max(1), 1));
        for (panel, area) in self.panels.iter().zip(&areas) {
            if panel.residuals.is_empty() {
                draw_curve(panel, area, &self.angle_axis)?;
            } else {
                let (top, bottom) = area.split_vertically((PANEL_HEIGHT as f64 * 0.64) as u32);
                draw_curve(panel, &top, &self.angle_axis)?;
                draw_residuals(panel, &bottom, &self.angle_axis)?;
            }
        }
        Ok(())
    }
}

/// The points and the usable region with a margin beyond it.
fn x_range(p: &CurvePanel) -> (f64, f64) {
    let reach = 1.25 * p.usable_deg;
    let lo = p.points.iter().map(|q| q.0).fold(-reach, f64::min);
    let hi = p.points.iter().map(|q| q.0).fold(reach, f64::max);
    padded(lo, hi, 0.02, 1.0)
}

/// The points and the curves over the shown angles.
/// (Curves count only near the usable region: past it they may run to a null.)
fn y_range(p: &CurvePanel, x: (f64, f64)) -> (f64, f64) {
    let near = |q: &&(f64, f64)| q.0.abs() <= 1.25 * p.usable_deg && q.1.is_finite();
    let shown = |q: &&(f64, f64)| q.0 >= x.0 && q.0 <= x.1 && q.1.is_finite();
    let curves = p.model.iter().chain(&p.table).filter(near);
    let ys = p.points.iter().filter(shown).chain(curves).map(|q| q.1).chain(p.beyond.iter().copied());
    let (lo, hi) = ys.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), y| (lo.min(y), hi.max(y)));
    padded(lo, hi, 0.05, 1.0)
}

fn shade_usable<DB: DrawingBackend>(c: &mut Chart<'_, DB>, p: &CurvePanel, y: (f64, f64)) -> Result<(), String> {
    c.draw_series(std::iter::once(Rectangle::new(
        [(-p.usable_deg, y.0), (p.usable_deg, y.1)],
        palette::BAND.mix(0.35).filled(),
    )))
    .map_err(draw_err)?;
    Ok(())
}

fn draw_curve<DB: DrawingBackend>(p: &CurvePanel, area: &DrawingArea<DB, Shift>, x_desc: &str) -> Result<(), String> {
    let (x0, x1) = x_range(p);
    let (y0, y1) = y_range(p, (x0, x1));
    let mut c = chart(area, &format!("pair {}", p.axis), x0..x1, y0..y1)?;
    shade_usable(&mut c, p, (y0, y1))?;
    draw_mesh(&mut c, x_desc, "ratio (dB)")?;
    let in_view = |v: &Vec<(f64, f64)>| v.iter().copied().filter(|q| q.1 >= y0 && q.1 <= y1).collect::<Vec<_>>();
    c.draw_series(LineSeries::new(in_view(&p.model), palette::lobe(1).stroke_width(2))).map_err(draw_err)?;
    if !p.table.is_empty() {
        c.draw_series(LineSeries::new(in_view(&p.table), palette::TRACE.stroke_width(3))).map_err(draw_err)?;
    }
    c.draw_series(p.points.iter().map(|&(x, y)| Circle::new((x, y), 2, palette::INK.mix(0.55).filled())))
        .map_err(draw_err)?;
    // A rug of the operating angles along the bottom: where on the curve the run sat.
    let rug = 0.04 * (y1 - y0);
    c.draw_series(
        p.points
            .iter()
            .map(|&(x, _)| PathElement::new(vec![(x, y0), (x, y0 + rug)], palette::INK.mix(0.4).stroke_width(1))),
    )
    .map_err(draw_err)?;
    // Ratios without an angle: a tick on the side of the usable region they fell off.
    let tick = 0.012 * (x1 - x0);
    c.draw_series(p.beyond.iter().map(|&r| {
        let x = if r >= 0.0 { x1 - tick } else { x0 + tick };
        PathElement::new(vec![(x - tick, r), (x + tick, r)], palette::ALERT.stroke_width(2))
    }))
    .map_err(draw_err)?;
    if let Some(crossover) = p.crossover_deg {
        c.draw_series(std::iter::once(PathElement::new(
            vec![(crossover, y0), (crossover, y1)],
            palette::ALERT.stroke_width(1),
        )))
        .map_err(draw_err)?;
    }
    let mut entries = vec![(palette::INK, p.points_label.clone())];
    if !p.beyond.is_empty() {
        entries.push((palette::ALERT, format!("{} ratios beyond the usable region (ticks)", p.beyond.len())));
    }
    if !p.table.is_empty() {
        entries.push((palette::TRACE, "fitted pattern (table)".to_string()));
    }
    entries.push((palette::lobe(1), format!("beam model: {}", p.model_name)));
    entries.push((palette::BAND, format!("usable region ±{:.2} deg", p.usable_deg)));
    if let Some(crossover) = p.crossover_deg {
        entries.push((palette::ALERT, format!("crossover {crossover:.3} deg")));
    }
    // A rising curve leaves the top-left corner free.
    legend_top_left(area, 48, &entries)
}

fn draw_residuals<DB: DrawingBackend>(
    p: &CurvePanel,
    area: &DrawingArea<DB, Shift>,
    x_desc: &str,
) -> Result<(), String> {
    let (x0, x1) = x_range(p);
    let m = p.residuals.iter().map(|q| q.1.abs()).fold(0.0, f64::max).max(1e-3);
    let (y0, y1) = (-1.1 * m, 1.1 * m);
    let mut c = chart(area, "", x0..x1, y0..y1)?;
    shade_usable(&mut c, p, (y0, y1))?;
    draw_mesh(&mut c, &format!("{x_desc}; residual rms {:.4} deg", p.residual_rms_deg), "residual (deg)")?;
    c.draw_series(std::iter::once(PathElement::new(vec![(x0, 0.0), (x1, 0.0)], palette::INK.stroke_width(1))))
        .map_err(draw_err)?;
    c.draw_series(p.residuals.iter().map(|&(x, y)| Circle::new((x, y), 2, palette::TRACE.filled())))
        .map_err(draw_err)?;
    Ok(())
}

/// Decibels per neper of an amplitude ratio: 20 / ln 10.
pub const DB_PER_NEPER: f64 = 20.0 / std::f64::consts::LN_10;

pub const SPEC: BlockSpec = BlockSpec::typed::<CurveBlock>(
    "discriminator_curve",
    "Discriminator curve picture: per lobe pair, the beam model's ratio against angle with its usable region, and \
     the run's operating points (ratio, angle) on it; ratios beyond the region are ticks at its side. Set beam, \
     beamwidth, squint, way, pattern and floor as the ratio_discriminator has them (a point off the curve is \
     warned of); writes <path>.png and <path>.svg.",
);

crate::block_ports! {
    inputs pub enum CurveIn {
        Estimates = required("estimates", ItemKind::Estimate, "angle estimates of a ratio_discriminator (or a tracker after it)"),
    }
}

crate::block_settings! {
    /// Settings of `discriminator_curve`: the discriminator's beam model.
    pub struct DiscriminatorCurveSettings {
        beam: BeamModel {
            ty: ParamType::Choice(BeamModel::WORDS),
            default: Some("gaussian"),
            doc: "lobe pattern model, as the ratio_discriminator's",
        },
        beamwidth: f64 {
            ty: ParamType::Number { unit: Unit::Degrees, min: 0.01, max: 179.0 },
            default: Some("6 deg"),
            doc: "one-way 3 dB beamwidth, as the ratio_discriminator's",
        },
        squint: f64 {
            ty: ParamType::Number { unit: Unit::Degrees, min: 0.001, max: 89.0 },
            default: Some("2.4 deg"),
            doc: "lobe squint, as the ratio_discriminator's",
        },
        way: Way {
            ty: ParamType::Choice(Way::WORDS),
            default: Some("two"),
            doc: "one or two, as the ratio_discriminator's",
        },
        pattern: PathBuf {
            ty: ParamType::InputPath,
            default: Some(""),
            doc: "pattern CSV for beam table, as the ratio_discriminator's",
        },
        floor: f64 {
            ty: ParamType::Number { unit: Unit::Decibels, min: -120.0, max: -1.0 },
            default: Some("-20 dB"),
            doc: "far-lobe gain ending the usable region, as the ratio_discriminator's",
        },
        path: String {
            ty: ParamType::OutputPath,
            default: Some("discriminator-curve"),
            doc: "base name: writes <path>.png and <path>.svg (see formats)",
        },
        formats: PictureFormats {
            ty: ParamType::Choice(PictureFormats::WORDS),
            default: Some("both"),
            doc: "which files: both (<path>.png and <path>.svg), svg or png (svg alone skips the bitmap, most of the cost)",
        },
    }
}

/// Points kept per pair; past it every other one is dropped and the
/// stride doubles, so memory stays bounded on any capture.
const MAX_POINTS: usize = 20_000;
/// A point further than this from the model's curve was made by another model.
const OFF_CURVE_DB: f64 = 0.05;

/// Every `stride`-th of a stream of values, at most [`MAX_POINTS`].
struct Thinned<T> {
    kept: Vec<T>,
    stride: u64,
    seen: u64,
}

impl<T> Thinned<T> {
    fn new() -> Self {
        Thinned { kept: Vec::new(), stride: 1, seen: 0 }
    }
    fn push(&mut self, v: T) {
        if self.seen.is_multiple_of(self.stride) {
            if self.kept.len() == MAX_POINTS {
                let mut i = 0;
                self.kept.retain(|_| {
                    i += 1;
                    i % 2 == 1
                });
                self.stride *= 2;
            }
            if self.seen.is_multiple_of(self.stride) {
                self.kept.push(v);
            }
        }
        self.seen += 1;
    }
}

/// What one pair's estimates gave.
struct PairPoints {
    axis: Arc<str>,
    on_curve: Thinned<(f64, f64)>,
    beyond: Thinned<f64>,
    sum_deg: f64,
    no_signal: u64,
    off_curve: u64,
}

pub struct CurveBlock {
    model: PairModel,
    model_name: String,
    path: String,
    formats: PictureFormats,
    files: FileStager,
    pairs: Vec<PairPoints>,
    last_stamp: Option<Stamp>,
}

impl TypedBlock for CurveBlock {
    type Settings = DiscriminatorCurveSettings;
    type In = CurveIn;
    type Out = NoPorts;

    fn build(s: DiscriminatorCurveSettings, ctx: &BuildContext) -> Result<Self, BuildError> {
        let path = picture_base(&s.path)?;
        let model = beam_pair_model(s.beam, s.beamwidth, s.squint, s.way, &s.pattern)?.with_floor(s.floor);
        let model_name = match s.beam {
            BeamModel::Table => {
                format!("table {}, squint {} deg, {}-way", s.pattern.display(), s.squint, s.way.passes())
            }
            BeamModel::Gaussian | BeamModel::Uniform | BeamModel::Cosine => format!(
                "{}, beamwidth {} deg, squint {} deg, {}-way",
                s.beam.word(),
                s.beamwidth,
                s.squint,
                s.way.passes()
            ),
        };
        Ok(CurveBlock {
            model,
            model_name,
            path,
            formats: s.formats,
            files: ctx.files.clone(),
            pairs: Vec::new(),
            last_stamp: None,
        })
    }

    fn process(&mut self, port: CurveIn, item: Item, _out: &mut Outputs) -> Result<(), BlockError> {
        let (CurveIn::Estimates, Item::Estimate(e)) = (port, item) else { return Ok(()) };
        self.take(&e);
        Ok(())
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        let off: u64 = self.pairs.iter().map(|p| p.off_curve).sum();
        if off > 0
            && let Some(stamp) = self.last_stamp
        {
            out.warn(
                stamp,
                format!(
                    "{off} operating points lie more than {OFF_CURVE_DB} dB off this picture's beam model: set beam, \
                     beamwidth, squint, way and pattern as the ratio_discriminator has them"
                ),
            );
        }
        write_picture(&self.picture(), &self.path, self.formats, &self.files)?;
        Ok(())
    }
}

impl CurveBlock {
    fn take(&mut self, e: &AngleEstimate) {
        self.last_stamp = Some(e.stamp);
        let i = match self.pairs.iter().position(|p| p.axis == e.axis) {
            Some(i) => i,
            None => {
                self.pairs.push(PairPoints {
                    axis: e.axis.clone(),
                    on_curve: Thinned::new(),
                    beyond: Thinned::new(),
                    sum_deg: 0.0,
                    no_signal: 0,
                    off_curve: 0,
                });
                self.pairs.len() - 1
            }
        };
        let pair = &mut self.pairs[i];
        match (e.error_deg, e.ratio_db.is_finite()) {
            (Some(deg), true) => {
                if (self.model.log_ratio(deg) * DB_PER_NEPER - e.ratio_db).abs() > OFF_CURVE_DB {
                    pair.off_curve += 1;
                }
                pair.sum_deg += deg;
                pair.on_curve.push((deg, e.ratio_db));
            }
            (None, true) => pair.beyond.push(e.ratio_db),
            (_, false) => pair.no_signal += 1,
        }
    }

    fn picture(&self) -> DiscriminatorCurve {
        let usable = self.model.limit_deg;
        let panels = self
            .pairs
            .iter()
            .map(|p| {
                let n = p.on_curve.seen;
                let mean = if n > 0 { format!(", mean {:+.3} deg", p.sum_deg / n as f64) } else { String::new() };
                let thinned = if p.on_curve.stride > 1 {
                    format!(", every {}th drawn", p.on_curve.stride)
                } else {
                    String::new()
                };
                let no_signal =
                    if p.no_signal > 0 { format!("; {} without signal", p.no_signal) } else { String::new() };
                let mut panel = CurvePanel {
                    axis: p.axis.to_string(),
                    points: p.on_curve.kept.clone(),
                    points_label: format!("operating points: {n} estimates{mean}{thinned}{no_signal}"),
                    beyond: p.beyond.kept.clone(),
                    table: Vec::new(),
                    model: Vec::new(),
                    model_name: self.model_name.clone(),
                    usable_deg: usable,
                    crossover_deg: None,
                    residuals: Vec::new(),
                    residual_rms_deg: f64::NAN,
                };
                let (x0, x1) = x_range(&panel);
                panel.model = (0..=600)
                    .map(|i| x0 + (x1 - x0) * i as f64 / 600.0)
                    .map(|t| (t, self.model.log_ratio(t) * DB_PER_NEPER))
                    .filter(|q| q.1.is_finite())
                    .collect();
                panel
            })
            .collect();
        DiscriminatorCurve {
            title: "Discriminator curve and operating points".to_string(),
            subtitle:
                "per lobe pair: the beam model's ratio (positive lobe over negative) against the angle off the pair's \
                       axis; dots are the run's estimates, each (ratio, angle) read through the curve"
                    .to_string(),
            angle_axis: "angle off the pair's axis (deg)".to_string(),
            panels,
        }
    }
}
