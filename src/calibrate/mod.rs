//! `lobeflow calibrate`: measure an installation's discriminator from a
//! scan across a source at a known position, and write the numbers as a
//! params file for the same graph (docs/calibration.md has the method).
//!
//! The graph's chain runs on the scan capture up to its per-dwell records;
//! each dwell gets the source's off-axis angle from the pointing telemetry;
//! per lobe pair the dwell amplitudes are fitted with each beam model and
//! with a measured table, and the ratio near boresight gives the ratio at
//! boresight (the lobes' gain imbalance), the slope and the crossover.

pub(crate) mod fit;
pub(crate) mod output;
pub(crate) mod pattern;
pub(crate) mod ratio;
pub(crate) mod scan;
pub(crate) mod telemetry;

use crate::error::Error;
use crate::graph::{Overrides, resolve};
use crate::runtime::RunOptions;
use pattern::{PatternFit, fit_model, fit_model_from, fit_table, main_lobe_points, starts};
use ratio::{DB_PER_NEPER, LocalFit, coverage_gaps, local_fit, residual_rms};
use scan::{Discriminator, Dropped, RatioPoint, amp_points, check_axes, collect_dwells, locate, ratios};
use std::path::PathBuf;
use telemetry::Pointing;

/// What `lobeflow calibrate` was asked to do.
pub struct CalibrateArgs {
    pub graph: PathBuf,
    /// Knob overrides (params file, --set, --input), as for `run`.
    pub overrides: Overrides,
    pub pointing: PathBuf,
    /// Source azimuth and elevation, degrees.
    pub source: (f64, f64),
    /// Added to the telemetry's time_s to put it on the capture's clock, s.
    pub clock_offset_s: f64,
    /// Dwells further than this off the pair's axis across it are left out,
    /// deg (None: a tenth of the graph's beamwidth setting).
    pub cross_limit_deg: Option<f64>,
    pub out_dir: PathBuf,
    pub threads: Option<usize>,
}

/// Beam models tried, in this order.
pub const MODELS: [&str; 3] = ["gaussian", "uniform", "cosine"];
/// Window of the local fit, as a fraction of the usable region.
const LOCAL_WINDOW: f64 = 0.4;
/// Table node step, as a fraction of the fitted beamwidth.
const TABLE_STEP: f64 = 1.0 / 24.0;
/// Default limit of the offset across a pair's axis, as a fraction of the
/// graph's beamwidth: there both lobes lose under 0.3 dB alike.
const CROSS_LIMIT: f64 = 0.1;
/// A hole in the scan wider than this fraction of the squint is missing coverage.
const MAX_HOLE: f64 = 0.1;

/// One fitted pattern with its angle residuals.
#[derive(Clone, Debug)]
pub struct FittedPattern {
    pub fit: PatternFit,
    /// Usable region of the pair model it gives, degrees.
    pub usable_deg: f64,
    /// ln(plus/minus) path-gain imbalance and its sigma.
    pub imbalance: (f64, f64),
    pub residual_rms_deg: f64,
    pub residual_count: usize,
}

impl FittedPattern {
    /// One line for a person: beamwidth and squint with their sigmas, and
    /// the angle residual (shared by the console summary and the params
    /// file's comments).
    pub fn summary_line(&self, best: bool) -> String {
        format!(
            "{:<8} beamwidth {:7.3} +- {:.3} deg  squint {:6.3} +- {:.3} deg  residual {:.4} deg rms{}",
            self.fit.name,
            self.fit.beam.beamwidth_deg,
            self.fit.beamwidth_sigma,
            self.fit.squint,
            self.fit.squint_sigma,
            self.residual_rms_deg,
            if best { "  (best model)" } else { "" }
        )
    }
}

/// Everything measured for one lobe pair.
#[derive(Clone, Debug)]
pub struct PairCalibration {
    pub axis: String,
    pub plus: String,
    pub minus: String,
    pub models: Vec<FittedPattern>,
    /// Index into `models` of the smallest angle residual.
    pub best: usize,
    pub table: FittedPattern,
    pub local: LocalFit,
    pub ratios: Vec<RatioPoint>,
    /// Off-axis angles the scan reached, degrees.
    pub reach: (f64, f64),
}

/// The whole calibration.
pub struct Calibration {
    pub pairs: Vec<PairCalibration>,
    /// The pattern written to the params file: one for all pairs.
    pub joint: FittedPattern,
    pub way: u32,
    /// The discriminator's usable-region floor, dB.
    pub floor_db: f64,
    pub dropped: Dropped,
    pub telemetry_notes: Vec<String>,
    pub dwells: usize,
    pub graph_settings: Vec<String>,
}

/// Run the scan, fit, and write everything into `args.out_dir`.
pub fn calibrate(args: &CalibrateArgs) -> Result<(Calibration, Vec<PathBuf>), Error> {
    let graph = resolve(&args.graph, &args.overrides, &crate::registry())?;
    let disc = Discriminator::find(&graph)?;
    check_axes(&disc)?;
    let text = std::fs::read_to_string(&args.pointing)
        .map_err(|e| Error::Input(format!("cannot read pointing file {}: {e}", args.pointing.display())))?;
    let pointing =
        Pointing::parse(&text, &args.pointing.display().to_string(), args.clock_offset_s).map_err(Error::Input)?;
    std::fs::create_dir_all(&args.out_dir)
        .map_err(|e| Error::Output(format!("cannot create {}: {e}", args.out_dir.display())))?;
    let partial = args.out_dir.join(format!(".scan-run-partial-{}", std::process::id()));
    let mut opts = RunOptions { out_dir: partial.clone(), ..RunOptions::default() };
    if let Some(t) = args.threads {
        opts.threads = t.max(1);
    }
    let result = (|| {
        let (dwells, _report) = collect_dwells(&graph, &disc, &opts)?;
        let cal = analyse(&dwells, &disc, &pointing, args)?;
        let cal = Calibration { graph_settings: graph.settings.iter().map(|k| k.name.clone()).collect(), ..cal };
        let written = output::write_all(&cal, args, &partial)?;
        Ok((cal, written))
    })();
    if result.is_err() {
        let _ = std::fs::remove_dir_all(&partial);
    }
    result
}

/// Fit every pair and the joint pattern from the located dwells.
pub fn analyse(
    dwells: &[lobeflow_blocks::DwellRecord],
    disc: &Discriminator,
    pointing: &Pointing,
    args: &CalibrateArgs,
) -> Result<Calibration, Error> {
    let cross_limit = args.cross_limit_deg.unwrap_or(CROSS_LIMIT * disc.beamwidth);
    let (located, dropped) = locate(dwells, disc, pointing, args.source, cross_limit);
    let (t0, t1) = pointing.span();
    if located.is_empty() {
        return Err(Error::Input(format!(
            "no dwell of a paired lobe could be located: {} dwells, {} without signal, {} outside the pointing table's time span ({t0:.3} to {t1:.3} s on the capture clock; check --clock-offset), {} further than {} deg off the pair's axis across it",
            dwells.len(),
            dropped.no_signal,
            dropped.no_pointing,
            dropped.off_cross_axis,
            cross_limit
        )));
    }
    let all_ratios = ratios(&located, disc, pointing, args.source);
    let mut pairs = Vec::new();
    for (k, pair) in disc.pairs.iter().enumerate() {
        let pts = amp_points(&located, &[k]);
        let rs: Vec<RatioPoint> = all_ratios.iter().filter(|r| r.pair == k).cloned().collect();
        pairs.push(
            calibrate_pair(pair, &pts, rs, disc)
                .map_err(|e| Error::Input(format!("pair '{}' ({}/{}): {e}", pair.axis, pair.plus, pair.minus)))?,
        );
    }
    let joint = if pairs.len() == 1 {
        pairs[0].table.clone()
    } else {
        let which: Vec<usize> = (0..pairs.len()).collect();
        let pts = main_lobe_points(&amp_points(&located, &which), 2 * pairs.len(), disc.way, disc.floor_db);
        let start = &pairs[0].models[pairs[0].best].fit;
        let fit = fit_table(&pts, 2 * pairs.len(), disc.way, start, start.beam.beamwidth_deg * TABLE_STEP)
            .ok_or_else(|| Error::Input("the pattern shared by all pairs could not be fitted".into()))?;
        let by_pair: Vec<(Vec<RatioPoint>, (usize, usize))> = (0..pairs.len())
            .map(|k| (all_ratios.iter().filter(|r| r.pair == k).cloned().collect(), (2 * k, 2 * k + 1)))
            .collect();
        judged(fit, disc, &by_pair).map_err(Error::Input)?
    };
    Ok(Calibration {
        pairs,
        joint,
        way: disc.way,
        floor_db: disc.floor_db,
        dropped,
        telemetry_notes: pointing.irregularities.clone(),
        dwells: dwells.len(),
        graph_settings: Vec::new(),
    })
}

/// A fitted pattern with its usable region and angle residuals, pooled
/// over pairs of (ratios, (plus, minus) gain slots); the imbalance is
/// that of the first pair.
fn judged(
    fit: PatternFit,
    disc: &Discriminator,
    pairs: &[(Vec<RatioPoint>, (usize, usize))],
) -> Result<FittedPattern, String> {
    let model = fit.pair_model(disc.way, disc.floor_db).map_err(|e| format!("{} pattern: {e}", fit.name))?;
    let (mut sum, mut count) = (0.0, 0);
    for (ratios, lobes) in pairs {
        let (rms, n) = residual_rms(&model, fit.gain_difference(lobes.0, lobes.1).0, ratios);
        if n > 0 {
            sum += rms * rms * n as f64;
            count += n;
        }
    }
    let (a, b) = pairs.first().map_or((0, 1), |p| p.1);
    Ok(FittedPattern {
        usable_deg: model.limit_deg,
        imbalance: fit.gain_difference(a, b),
        residual_rms_deg: if count > 0 { (sum / count as f64).sqrt() } else { f64::NAN },
        residual_count: count,
        fit,
    })
}

fn calibrate_pair(
    pair: &lobeflow_blocks::dsp::discriminator::LobePair,
    points: &[pattern::AmpPoint],
    ratios: Vec<RatioPoint>,
    disc: &Discriminator,
) -> Result<PairCalibration, String> {
    let one = [(ratios, (0, 1))];
    let ratios = &one[0].0;
    let lo = ratios.iter().map(|r| r.theta).fold(f64::INFINITY, f64::min);
    let hi = ratios.iter().map(|r| r.theta).fold(f64::NEG_INFINITY, f64::max);
    if ratios.len() < 12 || !(lo < 0.0 && hi > 0.0) {
        return Err(format!(
            "the scan does not reach across boresight: {} ratios, off-axis angles {lo:.2} to {hi:.2} deg; it must cover the crossover and the usable region on both sides",
            ratios.len()
        ));
    }
    let main = main_lobe_points(points, 2, disc.way, disc.floor_db);
    let gaussian = fit_model("gaussian", &main, 2, disc.way, disc.beamwidth, disc.squint)
        .ok_or("the Gaussian beam model could not be fitted to the dwell amplitudes")?;
    let sq = gaussian.squint;
    let from = starts(&gaussian, disc.beamwidth, disc.squint);
    let mut models = Vec::new();
    for name in MODELS {
        let fit =
            if name == "gaussian" { Some(gaussian.clone()) } else { fit_model_from(name, &main, 2, disc.way, &from) };
        if let Some(f) = fit
            && let Ok(j) = judged(f, disc, &one)
            && j.residual_rms_deg.is_finite()
        {
            models.push(j);
        }
    }
    let best = (0..models.len())
        .min_by(|&a, &b| models[a].residual_rms_deg.total_cmp(&models[b].residual_rms_deg))
        .ok_or("no beam model fits the dwell amplitudes")?;
    let need = models[best].usable_deg;
    let gaps = coverage_gaps(&ratios.iter().map(|r| r.theta).collect::<Vec<_>>(), need, MAX_HOLE * sq.abs());
    if !gaps.is_empty() {
        let list: Vec<String> = gaps.iter().map(|(a, b)| format!("{a:.2} to {b:.2} deg")).collect();
        return Err(format!(
            "the scan does not cover the usable region of the fitted beam ({} beam: -{need:.2} to {need:.2} deg off axis); missing: {}; the scan reached {lo:.2} to {hi:.2} deg",
            models[best].fit.name,
            list.join(", ")
        ));
    }
    let start = &models[best].fit;
    let table = fit_table(&main, 2, disc.way, start, start.beam.beamwidth_deg * TABLE_STEP)
        .ok_or("the measured pattern table could not be fitted")?;
    let table = judged(table, disc, &one)?;
    let local = local_fit(ratios, LOCAL_WINDOW * table.usable_deg)?;
    let below = ratios.iter().any(|r| r.theta < local.crossover_deg);
    let above = ratios.iter().any(|r| r.theta > local.crossover_deg);
    if !(below && above) {
        return Err(format!("the scan does not cover the crossover at {:.3} deg", local.crossover_deg));
    }
    Ok(PairCalibration {
        axis: pair.axis.to_string(),
        plus: pair.plus.clone(),
        minus: pair.minus.clone(),
        models,
        best,
        table,
        local,
        ratios: ratios.clone(),
        reach: (lo, hi),
    })
}

impl Calibration {
    /// Per-lobe gains (dB) of pair `k` for the params file: the difference
    /// of the two lobes' gains in the pattern written (the same imbalance
    /// as the ratio at boresight for mirror-image lobes, but measured from
    /// every main-lobe dwell, not only those near boresight), split evenly:
    /// only the difference is measurable.
    pub fn lobe_gains_db(&self, k: usize) -> [(String, f64); 2] {
        let p = &self.pairs[k];
        let half = 0.5 * self.joint.fit.gain_difference(2 * k, 2 * k + 1).0 * DB_PER_NEPER;
        [(p.plus.clone(), half), (p.minus.clone(), -half)]
    }
}

impl PairCalibration {
    /// Imbalance of the table fit in dB with its sigma.
    pub fn table_imbalance_db(&self) -> (f64, f64) {
        (self.table.imbalance.0 * DB_PER_NEPER, self.table.imbalance.1 * DB_PER_NEPER)
    }
}
