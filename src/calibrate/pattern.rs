//! Fitting the lobe pattern to the scan's dwell amplitudes.
//!
//! Every dwell gives `y = ln(amplitude)` of one lobe at a known off-axis
//! angle `theta`. With the lobe's axis at `+squint` (plus lobe) or
//! `-squint` (minus lobe), the model is
//! `y = c_lobe + n ln V(theta -/+ squint)`, `n` = 1 (one-way) or 2
//! (two-way), `c_lobe` the lobe's path gain times the source strength, and
//! `V` the one-way voltage pattern: one of the beam models of
//! `lobeflow_blocks::dsp::beam` (parameter: its beamwidth), or a measured
//! table, piecewise linear in dB on nodes `|x| = k step`, symmetric about
//! the lobe's own axis and 0 dB on it.

use super::fit::{Solution, levenberg_marquardt};
use lobeflow_blocks::dsp::beam::{Beam, BeamShape, PairModel};
use std::f64::consts::LN_10;

/// One dwell of a paired lobe, located.
#[derive(Clone, Debug)]
pub struct AmpPoint {
    /// Source offset from boresight along the pair's axis, degrees.
    pub theta: f64,
    /// The plus lobe (axis at +squint) or the minus lobe.
    pub plus: bool,
    /// Index of the lobe among all calibrated lobes (its own path gain).
    pub lobe: usize,
    /// ln(amplitude), with the expected low bias of a noisy log put back.
    pub y: f64,
    /// Variance of `y`.
    pub var: f64,
}

impl AmpPoint {
    fn offset(&self, squint: f64) -> f64 {
        if self.plus { self.theta - squint } else { self.theta + squint }
    }
}

/// A fitted pattern with the lobe gains and squint.
#[derive(Clone, Debug)]
pub struct PatternFit {
    /// Beam model name (gaussian, uniform, cosine) or "table".
    pub name: &'static str,
    pub beam: Beam,
    pub squint: f64,
    pub squint_sigma: f64,
    pub beamwidth_sigma: f64,
    /// ln path gain of each lobe (plus the common source strength).
    pub gains: Vec<f64>,
    pub solution: Solution,
    /// Table fits: node step (deg) and nodes with data under them.
    pub table_step: f64,
    pub supported_nodes: usize,
}

impl PatternFit {
    /// Difference of two lobes' ln gains with its standard uncertainty.
    pub fn gain_difference(&self, a: usize, b: usize) -> (f64, f64) {
        let (ia, ib) = (2 + a, 2 + b);
        let c = &self.solution.cov;
        let var = c[ia][ia] + c[ib][ib] - 2.0 * c[ia][ib];
        (self.gains[a] - self.gains[b], var.max(0.0).sqrt())
    }

    /// The pair model this pattern gives, with the usable-region floor.
    pub fn pair_model(&self, way: u32, floor_db: f64) -> Result<PairModel, String> {
        Ok(PairModel::new(self.beam.clone(), self.squint, way)?.with_floor(floor_db))
    }

    /// The measured table as (angle from the lobe axis, one-way gain dB),
    /// over the nodes with data, mirrored to negative angles.
    pub fn table_rows(&self) -> Vec<(f64, f64)> {
        match &self.beam.shape {
            BeamShape::Table(t) => t.clone(),
            _ => Vec::new(),
        }
    }
}

/// Keep each lobe's main lobe: the points around its strongest dwells,
/// out to where its amplitude first stays below `floor_db` (negative,
/// one-way) under its peak; sidelobes beyond a null are left out, as the
/// discriminator does not use them.
pub fn main_lobe_points(points: &[AmpPoint], lobes: usize, way: u32, floor_db: f64) -> Vec<AmpPoint> {
    let drop = way as f64 * (-floor_db) * LN_10 / 20.0;
    let mut out = Vec::new();
    for l in 0..lobes {
        let mut lobe: Vec<&AmpPoint> = points.iter().filter(|p| p.lobe == l).collect();
        if lobe.is_empty() {
            continue;
        }
        lobe.sort_by(|a, b| a.theta.total_cmp(&b.theta));
        let mut ys: Vec<f64> = lobe.iter().map(|p| p.y).collect();
        ys.sort_by(|a, b| b.total_cmp(a));
        // The median of the five strongest, so one wild dwell does not set the peak.
        let peak = ys[ys.len().min(5) / 2];
        let level = peak - drop;
        let top = lobe.iter().position(|p| p.y >= peak).unwrap_or(0);
        let below = |p: &&AmpPoint| p.y < level;
        let end = edge(&lobe[top..], below).map_or(lobe.len(), |k| top + k);
        let start = edge(&lobe[..top].iter().rev().copied().collect::<Vec<_>>(), below).map_or(0, |k| top - k);
        out.extend(lobe[start..end].iter().filter(|p| p.y >= level).map(|p| (*p).clone()));
    }
    out
}

/// Points a run of [`EDGE_RUN`] consecutive `below` points starts at.
fn edge(points: &[&AmpPoint], below: impl Fn(&&AmpPoint) -> bool) -> Option<usize> {
    let mut run = 0;
    for (i, p) in points.iter().enumerate() {
        run = if below(p) { run + 1 } else { 0 };
        if run == EDGE_RUN {
            return Some(i + 1 - EDGE_RUN);
        }
    }
    None
}

/// Consecutive dwells under the floor that end a main lobe (one alone may be noise).
const EDGE_RUN: usize = 3;

/// Lowest ln V a model is taken at (-40 dB one-way), far below any dwell
/// kept: a trial beamwidth that puts a null among the dwells then costs a
/// finite residual, and the fit can walk out of it.
const MODEL_FLOOR: f64 = -40.0 / 20.0 * LN_10;

fn shape_of(name: &str) -> BeamShape {
    match name {
        "uniform" => BeamShape::Uniform,
        "cosine" => BeamShape::Cosine,
        _ => BeamShape::Gaussian,
    }
}

/// Fit a beam model (`gaussian`, `uniform` or `cosine`): beamwidth, squint
/// and the lobes' gains. Parameters: [beamwidth, squint, c_0, c_1, ...].
pub fn fit_model(
    name: &'static str,
    points: &[AmpPoint],
    lobes: usize,
    way: u32,
    beamwidth0: f64,
    squint0: f64,
) -> Option<PatternFit> {
    let n = way as f64;
    let c0 = initial_gains(points, lobes);
    let mut p0 = vec![beamwidth0, squint0];
    p0.extend(&c0);
    let mut steps = vec![1e-4 * beamwidth0, 1e-4 * squint0.abs().max(0.01)];
    steps.extend(std::iter::repeat_n(1e-5, lobes));
    let residuals = |p: &[f64]| -> Vec<f64> {
        let Ok(beam) = Beam::new(shape_of(name), p[0]) else {
            return vec![f64::NAN; points.len()];
        };
        points
            .iter()
            .map(|q| (q.y - p[2 + q.lobe] - n * beam.ln_voltage(q.offset(p[1])).max(MODEL_FLOOR)) / q.var.sqrt())
            .collect()
    };
    let solution = levenberg_marquardt(&p0, &steps, points.len(), residuals)?;
    let beam = Beam::new(shape_of(name), solution.params[0]).ok()?;
    Some(PatternFit {
        name,
        beam,
        squint: solution.params[1],
        squint_sigma: solution.sigma(1),
        beamwidth_sigma: solution.sigma(0),
        gains: solution.params[2..].to_vec(),
        solution,
        table_step: 0.0,
        supported_nodes: 0,
    })
}

/// Starting points for the other models from a Gaussian fit and the
/// installation's own numbers: a Gaussian fitted to a pattern with nulls
/// comes out narrow, and a start with a null among the dwells is a trap.
pub fn starts(gaussian: &PatternFit, beamwidth: f64, squint: f64) -> Vec<(f64, f64)> {
    let (bw, sq) = (gaussian.beam.beamwidth_deg, gaussian.squint);
    vec![(bw, sq), (beamwidth, squint), (1.2 * bw, sq), (1.4 * bw, sq)]
}

/// [`fit_model`] from each start; the smallest chi-square wins.
pub fn fit_model_from(
    name: &'static str,
    points: &[AmpPoint],
    lobes: usize,
    way: u32,
    starts: &[(f64, f64)],
) -> Option<PatternFit> {
    starts
        .iter()
        .filter_map(|&(bw, sq)| fit_model(name, points, lobes, way, bw, sq))
        .min_by(|a, b| a.solution.chi2.total_cmp(&b.solution.chi2))
}

fn initial_gains(points: &[AmpPoint], lobes: usize) -> Vec<f64> {
    (0..lobes)
        .map(|l| points.iter().filter(|p| p.lobe == l).map(|p| p.y).fold(f64::NEG_INFINITY, f64::max))
        .map(|m| if m.is_finite() { m } else { 0.0 })
        .collect()
}

/// Piecewise-linear symmetric ln V on nodes k step (node 0 fixed at 0).
fn table_ln_v(nodes: &[f64], step: f64, x: f64) -> f64 {
    let u = x.abs() / step;
    let k = u.floor() as usize;
    if k + 1 >= nodes.len() {
        return *nodes.last().unwrap_or(&0.0);
    }
    let f = u - k as f64;
    nodes[k] + f * (nodes[k + 1] - nodes[k])
}

/// Weight of the smoothness penalty on the table's second differences,
/// relative to the median dwell weight: enough to carry the table across
/// nodes no dwell reaches, far too little to bend it where dwells are.
const SMOOTHING: f64 = 0.01;
/// Dwells a node needs under its two segments to count as measured.
const NODE_SUPPORT: usize = 3;

/// Fit a measured table: squint, the lobes' gains and ln V at the nodes,
/// starting from the pattern `start` (a fitted model). Parameters:
/// [unused, squint, c_0.., H_1..H_K].
pub fn fit_table(points: &[AmpPoint], lobes: usize, way: u32, start: &PatternFit, step: f64) -> Option<PatternFit> {
    let n = way as f64;
    let reach = points.iter().map(|p| p.theta.abs()).fold(0.0, f64::max) + 1.5 * start.squint;
    let k_max = (reach / step).ceil() as usize + 1;
    let mut p0 = vec![0.0, start.squint];
    p0.extend(initial_gains(points, lobes));
    p0.extend((1..=k_max).map(|k| start.beam.ln_voltage(k as f64 * step)));
    let mut steps = vec![1e-3, 1e-4 * start.squint.abs().max(0.01)];
    steps.extend(std::iter::repeat_n(1e-5, lobes + k_max));
    let mut ws: Vec<f64> = points.iter().map(|p| 1.0 / p.var).collect();
    ws.sort_by(f64::total_cmp);
    let penalty = (SMOOTHING * ws.get(ws.len() / 2).copied().unwrap_or(1.0)).sqrt();
    let first_node = 2 + lobes;
    let residuals = |p: &[f64]| -> Vec<f64> {
        let mut nodes = Vec::with_capacity(k_max + 1);
        nodes.push(0.0);
        nodes.extend(&p[first_node..]);
        let mut r: Vec<f64> = points
            .iter()
            .map(|q| (q.y - p[2 + q.lobe] - n * table_ln_v(&nodes, step, q.offset(p[1]))) / q.var.sqrt())
            .collect();
        for k in 0..k_max {
            let before = if k == 0 { nodes[1] } else { nodes[k - 1] };
            r.push(penalty * (before - 2.0 * nodes[k] + nodes[k + 1]));
        }
        // Slot 0 (a model's beamwidth) has no meaning for a table: pin it,
        // so the parameter layout stays that of the models.
        r.push(p[0]);
        r
    };
    let solution = levenberg_marquardt(&p0, &steps, points.len(), residuals)?;
    let squint = solution.params[1];
    let mut count = vec![0usize; k_max + 1];
    for q in points {
        let u = q.offset(squint).abs() / step;
        let k = u.floor() as usize;
        for j in [k, k + 1] {
            if j <= k_max {
                count[j] += 1;
            }
        }
    }
    let supported = count.iter().take_while(|&&c| c >= NODE_SUPPORT).count();
    if supported < 3 {
        return None;
    }
    let nodes: Vec<f64> =
        std::iter::once(0.0).chain(solution.params[first_node..].iter().copied()).take(supported).collect();
    let rows = table_from_nodes(&nodes, step);
    let beam = Beam::new(BeamShape::Table(rows.clone()), 1.0).ok()?;
    let beamwidth_sigma = table_beamwidth_sigma(&solution, first_node, supported, step);
    Some(PatternFit {
        name: "table",
        beam,
        squint,
        squint_sigma: solution.sigma(1),
        beamwidth_sigma,
        gains: solution.params[2..first_node].to_vec(),
        solution,
        table_step: step,
        supported_nodes: supported,
    })
}

/// (angle, one-way dB) rows from -K step to +K step.
fn table_from_nodes(nodes: &[f64], step: f64) -> Vec<(f64, f64)> {
    let k = nodes.len() as i64 - 1;
    (-k..=k).map(|i| (i as f64 * step, 20.0 / LN_10 * nodes[i.unsigned_abs() as usize])).collect()
}

/// Standard uncertainty of the table's 3 dB width, by propagating the
/// nodes' covariance through a numerical gradient.
fn table_beamwidth_sigma(solution: &Solution, first: usize, supported: usize, step: f64) -> f64 {
    let nodes_of =
        |p: &[f64]| -> Vec<f64> { std::iter::once(0.0).chain(p[first..].iter().copied()).take(supported).collect() };
    let width = |p: &[f64]| {
        Beam::new(BeamShape::Table(table_from_nodes(&nodes_of(p), step)), 1.0).map_or(f64::NAN, |b| b.beamwidth_deg)
    };
    let mut p = solution.params.clone();
    let h = 1e-5;
    let grad: Vec<(usize, f64)> = (first..first + supported - 1)
        .map(|i| {
            let keep = p[i];
            p[i] = keep + h;
            let up = width(&p);
            p[i] = keep - h;
            let down = width(&p);
            p[i] = keep;
            (i, (up - down) / (2.0 * h))
        })
        .filter(|(_, g)| *g != 0.0)
        .collect();
    let mut var = 0.0;
    for &(i, gi) in &grad {
        for &(j, gj) in &grad {
            var += gi * gj * solution.cov[i][j];
        }
    }
    var.max(0.0).sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scan(beam: &Beam, squint: f64, way: u32, gains: [f64; 2]) -> Vec<AmpPoint> {
        let mut v = Vec::new();
        for i in -300..=300 {
            let theta = i as f64 * 0.05;
            for (lobe, plus) in [(0, true), (1, false)] {
                let x = if plus { theta - squint } else { theta + squint };
                let y = gains[lobe] + way as f64 * beam.ln_voltage(x);
                v.push(AmpPoint { theta, plus, lobe, y, var: 1e-4 });
            }
        }
        v
    }

    #[test]
    fn each_model_recovers_itself_and_the_table_follows_it() {
        for name in ["gaussian", "uniform", "cosine"] {
            let beam = Beam::new(shape_of(name), 8.0).unwrap();
            let pts = main_lobe_points(&scan(&beam, 3.0, 2, [0.1, -0.05]), 2, 2, -20.0);
            // As calibrate does: the Gaussian first, the others from it.
            let g = fit_model("gaussian", &pts, 2, 2, 7.0, 2.5).unwrap();
            let fit = fit_model_from(name, &pts, 2, 2, &starts(&g, 7.0, 2.5)).unwrap();
            assert!((fit.beam.beamwidth_deg - 8.0).abs() < 1e-4, "{name}: {}", fit.beam.beamwidth_deg);
            assert!((fit.squint - 3.0).abs() < 1e-4, "{name}: {}", fit.squint);
            assert!((fit.gain_difference(0, 1).0 - 0.15).abs() < 1e-5);
            let table = fit_table(&pts, 2, 2, &fit, 0.25).unwrap();
            assert!((table.squint - 3.0).abs() < 2e-3, "{name}: table squint {}", table.squint);
            assert!((table.beam.beamwidth_deg - 8.0).abs() < 0.05, "{name}: {}", table.beam.beamwidth_deg);
            let m = table.pair_model(2, -20.0).unwrap();
            let truth = PairModel::new(beam.clone(), 3.0, 2).unwrap();
            for theta in [-2.0, -0.7, 0.0, 0.4, 1.9] {
                let back = m.angle(truth.log_ratio(theta)).unwrap();
                assert!((back - theta).abs() < 0.01, "{name}: {theta} -> {back}");
            }
        }
    }
}
