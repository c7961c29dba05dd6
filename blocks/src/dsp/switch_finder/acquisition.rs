//! Acquisition: the switch train's period and phase in the first stretch of
//! cells (the feature's autocorrelation fundamental, then a line through
//! the switches located near it).

use super::Acquired;
use super::cells::{Cell, Feature, locate, position, reach};
use crate::dsp::event_period::{find_events, line_fit};

/// Step windows tried at acquisition, in cells each side of a candidate switch.
const STEP_CELLS: [usize; 6] = [1, 2, 4, 8, 16, 32];
/// Dwells the acquisition stretch must hold for a window to be tried.
pub(super) const MIN_DWELLS: f64 = 12.0;
/// A switch is seen when the feature's peak near the prediction stands this
/// many of its deviations over the window's median.
pub(super) const DETECT_SD: f64 = 4.0;

/// Find the switch train in the acquisition cells.
pub(super) fn acquire(cells: &[Cell], whole_cells: bool) -> Option<(Acquired, Feature)> {
    if cells.len() < 16 {
        return None;
    }
    let mut best: Option<(Acquired, Feature)> = None;
    for k in STEP_CELLS {
        // a dwell of at least four step windows must fit MIN_DWELLS times
        if (cells.len() as f64) < MIN_DWELLS * 4.0 * k as f64 {
            break;
        }
        let feature = Feature::learn(cells, k, whole_cells);
        let values: Vec<f32> = (0..cells.len()).map(|j| feature.at(cells, j) as f32).collect();
        let Some((fit, significance)) = find_events(&values, k) else { continue };
        if best.as_ref().is_some_and(|b| b.0.significance >= significance) {
            continue;
        }
        let spacing = (cells[cells.len() - 1].start - cells[0].start) as f64 / (cells.len() - 1) as f64;
        let coarse = (fit.slope * spacing, position(cells, fit.intercept));
        let Some(found) = refine(cells, &feature, coarse, k, significance) else { continue };
        best = Some((found, feature));
    }
    best
}

/// Each switch of the coarse train (dwell, a switch instant) located in the
/// acquisition cells, and a line through them: the dwell and a switch
/// instant with standard errors from the scatter (twice: the first line
/// from the first quarter, where a coarse dwell has not strayed yet).
fn refine(cells: &[Cell], feature: &Feature, coarse: (f64, f64), k: usize, significance: f64) -> Option<Acquired> {
    let (mut dwell, mut origin) = coarse;
    let end = (cells[cells.len() - 1].start + u64::from(cells[cells.len() - 1].count)) as f64;
    let spacing = (end - cells[0].start as f64) / cells.len() as f64;
    let mut fit = None;
    let mut heights: Vec<f64> = Vec::new();
    // the first line through the first MIN_DWELLS switches (or a quarter, when more)
    let first_share = (MIN_DWELLS * dwell / (end - cells[0].start as f64)).clamp(0.25, 1.0);
    for share in [first_share, 1.0] {
        let first = cells[0].start as f64 + (k + 1) as f64 * spacing;
        let last = cells[0].start as f64 + share * (end - cells[0].start as f64) - (k + 1) as f64 * spacing;
        let mut points = Vec::new();
        heights.clear();
        let mut n = ((first - origin) / dwell).ceil() as i64;
        while origin + n as f64 * dwell <= last {
            let centre = origin + n as f64 * dwell;
            let half = reach(dwell, spacing);
            let (lo, hi) = (centre - half, centre + half);
            let window: Vec<(usize, f64)> = (0..cells.len())
                .filter(|&j| (lo..=hi).contains(&(cells[j].start as f64)))
                .map(|j| (j, feature.at(cells, j)))
                .collect();
            if let Some((at, height)) = locate(cells, &window, feature.whole_cells, DETECT_SD) {
                points.push((n as f64, at));
                heights.push(height);
            }
            n += 1;
        }
        let line = line_fit(&points, 2.0 * spacing)?;
        (dwell, origin) = (line.slope, line.intercept);
        fit = Some(line);
    }
    let fit = fit?;
    if (fit.used as f64) < MIN_DWELLS / 2.0 {
        return None;
    }
    // the instant of the first switch in the stretch, and its error there
    let n0 = ((cells[0].start as f64 - fit.intercept) / fit.slope).ceil();
    heights.sort_by(f64::total_cmp);
    Some(Acquired {
        dwell: fit.slope,
        dwell_within: 4.0 * fit.slope_se,
        switch_at: fit.intercept + n0 * fit.slope,
        switch_within: 4.0 * (fit.intercept_se.powi(2) + (n0 * fit.slope_se).powi(2)).sqrt() + spacing,
        events: fit.used,
        step_cells: k,
        significance,
        spacing,
        height: heights[heights.len() / 2],
    })
}
