//! The discriminator curve of a calibration scan: for each lobe pair, the
//! measured ratio against the source's off-axis angle with the fitted
//! pattern and the best beam model over it, the usable region shaded, and
//! below it the angle residuals of the fitted pattern.

use super::{Chart, Picture, chart, draw_err, draw_mesh, frame, legend, padded, palette};
use plotters::coord::Shift;
use plotters::prelude::*;

/// One lobe pair's curve.
pub struct CurvePanel {
    pub axis: String,
    /// (off-axis angle deg, ratio dB) of each measured ratio.
    pub points: Vec<(f64, f64)>,
    /// The fitted pattern's curve, with the imbalance, (deg, dB).
    pub table: Vec<(f64, f64)>,
    /// The best beam model's curve, (deg, dB).
    pub model: Vec<(f64, f64)>,
    pub model_name: String,
    pub usable_deg: f64,
    pub crossover_deg: f64,
    /// (angle deg, read-back minus telemetry deg) inside the usable region.
    pub residuals: Vec<(f64, f64)>,
    pub residual_rms_deg: f64,
}

pub struct DiscriminatorCurve {
    pub panels: Vec<CurvePanel>,
}

const WIDTH: u32 = 1200;
const PANEL_HEIGHT: u32 = 560;

impl Picture for DiscriminatorCurve {
    fn size(&self) -> (u32, u32) {
        (WIDTH, 70 + PANEL_HEIGHT * self.panels.len().max(1) as u32)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let body = frame(
            root,
            "Discriminator curve from the calibration scan",
            "lobe ratio against the source's off-axis angle: measured ratios, fitted pattern, best beam model; residuals below",
        )?;
        let areas = body.split_evenly((self.panels.len().max(1), 1));
        for (panel, area) in self.panels.iter().zip(&areas) {
            let (top, bottom) = area.split_vertically((PANEL_HEIGHT as f64 * 0.64) as u32);
            draw_curve(panel, &top)?;
            draw_residuals(panel, &bottom)?;
        }
        Ok(())
    }
}

fn x_range(p: &CurvePanel) -> (f64, f64) {
    let lo = p.points.iter().map(|q| q.0).fold(f64::INFINITY, f64::min);
    let hi = p.points.iter().map(|q| q.0).fold(f64::NEG_INFINITY, f64::max);
    padded(lo, hi, 0.02, 1.0)
}

fn shade_usable<DB: DrawingBackend>(c: &mut Chart<'_, DB>, p: &CurvePanel, y: (f64, f64)) -> Result<(), String> {
    c.draw_series(std::iter::once(Rectangle::new(
        [(-p.usable_deg, y.0), (p.usable_deg, y.1)],
        palette::BAND.mix(0.35).filled(),
    )))
    .map_err(draw_err)?;
    Ok(())
}

fn draw_curve<DB: DrawingBackend>(p: &CurvePanel, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
    let (x0, x1) = x_range(p);
    let ys = p.points.iter().map(|q| q.1);
    let (lo, hi) = (ys.clone().fold(f64::INFINITY, f64::min), ys.fold(f64::NEG_INFINITY, f64::max));
    let (y0, y1) = padded(lo, hi, 0.05, 1.0);
    let mut c = chart(area, &format!("pair {}", p.axis), x0..x1, y0..y1)?;
    shade_usable(&mut c, p, (y0, y1))?;
    draw_mesh(&mut c, "source off-axis angle (deg)", "ratio (dB)")?;
    c.draw_series(p.points.iter().map(|&(x, y)| Circle::new((x, y), 2, palette::MUTED.mix(0.6).filled())))
        .map_err(draw_err)?;
    let in_view = |v: &Vec<(f64, f64)>| v.iter().copied().filter(|q| q.1 >= y0 && q.1 <= y1).collect::<Vec<_>>();
    c.draw_series(LineSeries::new(in_view(&p.model), palette::lobe(1).stroke_width(2))).map_err(draw_err)?;
    c.draw_series(LineSeries::new(in_view(&p.table), palette::TRACE.stroke_width(3))).map_err(draw_err)?;
    c.draw_series(std::iter::once(PathElement::new(
        vec![(p.crossover_deg, y0), (p.crossover_deg, y1)],
        palette::ALERT.stroke_width(1),
    )))
    .map_err(draw_err)?;
    legend(
        area,
        30,
        &[
            (palette::MUTED, "measured ratios".to_string()),
            (palette::TRACE, "fitted pattern (table)".to_string()),
            (palette::lobe(1), format!("best model: {}", p.model_name)),
            (palette::BAND, format!("usable region +-{:.2} deg", p.usable_deg)),
            (palette::ALERT, format!("crossover {:.3} deg", p.crossover_deg)),
        ],
    )
}

fn draw_residuals<DB: DrawingBackend>(p: &CurvePanel, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
    let (x0, x1) = x_range(p);
    let m = p.residuals.iter().map(|q| q.1.abs()).fold(0.0, f64::max).max(1e-3);
    let (y0, y1) = (-1.1 * m, 1.1 * m);
    let mut c = chart(area, "", x0..x1, y0..y1)?;
    shade_usable(&mut c, p, (y0, y1))?;
    draw_mesh(
        &mut c,
        &format!("source off-axis angle (deg); residual rms {:.4} deg", p.residual_rms_deg),
        "residual (deg)",
    )?;
    c.draw_series(std::iter::once(PathElement::new(vec![(x0, 0.0), (x1, 0.0)], palette::INK.stroke_width(1))))
        .map_err(draw_err)?;
    c.draw_series(p.residuals.iter().map(|&(x, y)| Circle::new((x, y), 2, palette::TRACE.filled())))
        .map_err(draw_err)?;
    Ok(())
}
