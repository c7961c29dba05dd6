//! `tracker`: smooths angle estimates per axis, flags outliers, and adds the
//! antenna's pointing angle from telemetry to give absolute target angles.
//! On a recording the whole capture is known, so a fixed-interval smoother
//! ([`crate::dsp::smoother`]) gives the tracked value; live input (standard
//! input) keeps a causal filter, whose output does not wait for the end.
//! What the smoother can do before the end it does as the estimates come
//! (each axis's measurements and its search for the process noise), so
//! the end of a long recording, when only this block and its consumers are
//! left to run, is short.

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::dsp::discriminator::parse_key_values;
use crate::dsp::smoother::{Measurement, Model, QSearch, Smoothed, smooth};
use crate::dsp::tracking::{AxisFilter, FilterMethod, Telemetry};
use crate::error::{BuildError, ParamError};
use crate::item::{AngleEstimate, Flag, Item, ItemKind, Stamp};
use crate::param::{ParamType, Unit};
use crate::typed::TypedBlock;
use std::sync::Arc;

pub const SPEC: BlockSpec = BlockSpec::typed::<Tracker>(
    "tracker",
    "Smooths the angle errors of each axis (a fixed-interval Kalman + Rauch-Tung-Striebel smoother on \
     recordings, a causal alpha-beta or Kalman filter on live input), gives each tracked angle its \
     sigma, flags estimates that fall outside the innovation gate as outliers (not used), and with \
     pointing telemetry adds the antenna angle to give absolute target angles.",
);

crate::block_ports! {
    inputs pub enum TrackerIn { Estimates = required("estimates", ItemKind::Estimate, "angle estimates") }
}

crate::block_ports! {
    outputs pub enum TrackerOut {
        Estimates = optional("estimates", ItemKind::Estimate, "the same estimates with tracked (and absolute) angles"),
    }
}

crate::block_choice! {
    /// How the angles of an axis are tracked.
    pub enum TrackMethod { AlphaBeta = "alpha_beta", Kalman = "kalman", Smoother = "smoother", Auto = "auto" }
}

crate::block_settings! {
    /// Settings of `tracker`.
    pub struct TrackerSettings {
        method: TrackMethod {
            ty: ParamType::Choice(TrackMethod::WORDS),
            default: Some("alpha_beta"),
            doc: "causal: fixed-gain alpha_beta, or kalman weighting each estimate by its sigma; smoother: fixed-interval (output at the end of input); auto: smoother on recordings; on live input (capture '-', a FIFO, pushed samples) alpha_beta",
        },
        capture: String {
            ty: ParamType::Text,
            default: Some(""),
            doc: "auto: the capture being read; '-' (standard input) means live input and a causal filter",
        },
        model: Model {
            ty: ParamType::Choice(Model::WORDS),
            default: Some("constant_velocity"),
            doc: "smoother: motion model of the angle",
        },
        smoother_noise: f64 {
            ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 1e12 },
            default: Some("0"),
            doc: "smoother: process noise density per axis (deg^2/s^3 constant velocity, deg^2/s^5 constant acceleration); 0 = the most likely value for the data",
        },
        alpha: f64 {
            ty: ParamType::Number { unit: Unit::None, min: 0.001, max: 1.0 },
            default: Some("0.4"),
            doc: "alpha_beta: angle gain",
        },
        beta: f64 {
            ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 2.0 },
            default: Some("0.1"),
            doc: "alpha_beta: rate gain (stable while beta < 4 - 2 alpha)",
        },
        process_noise: f64 {
            ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 1e6 },
            default: Some("0.1"),
            doc: "kalman: standard deviation of the target's angular acceleration, deg/s^2",
        },
        gate_sigmas: f64 {
            ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 1000.0 },
            default: Some("4"),
            doc: "reject an estimate whose innovation exceeds this many predicted sigmas (0: no gate)",
        },
        reset_after: u64 {
            ty: ParamType::Integer { min: 1, max: 1_000_000 },
            default: Some("5"),
            doc: "restart an axis's track after this many outliers in a row",
        },
        fallback_sigma: f64 {
            ty: ParamType::Number { unit: Unit::Degrees, min: 1e-9, max: 180.0 },
            default: Some("0.1 deg"),
            doc: "spread assumed for estimates that carry no usable sigma",
        },
        pointing: String {
            ty: ParamType::InputPath,
            default: Some(""),
            doc: "CSV time_s,az_deg,el_deg of antenna pointing (seconds from the capture start); empty: none",
        },
        axis_columns: String {
            ty: ParamType::Text,
            default: Some("az=az_deg, el=el_deg"),
            doc: "which pointing column belongs to which axis",
        },
    }
}

impl TypedBlock for Tracker {
    type Settings = TrackerSettings;
    type In = TrackerIn;
    type Out = TrackerOut;

    fn build(s: TrackerSettings, ctx: &BuildContext) -> Result<Self, BuildError> {
        // Live: standard input named in the graph, or a run the engine knows is
        // fed as it goes (a FIFO, `--input -`, samples pushed from memory).
        let live = s.capture.trim() == "-" || ctx.files.policy().live;
        let smoothing = match s.method {
            TrackMethod::Smoother => true,
            TrackMethod::Auto => !live,
            TrackMethod::AlphaBeta | TrackMethod::Kalman => false,
        };
        let q = (s.smoother_noise > 0.0).then_some(s.smoother_noise);
        let smoother = smoothing.then(|| SmootherSetup::new(s.model, q, s.gate_sigmas, s.fallback_sigma));
        let method = match s.method {
            TrackMethod::Kalman => FilterMethod::Kalman { accel_sigma: s.process_noise },
            TrackMethod::AlphaBeta | TrackMethod::Smoother | TrackMethod::Auto => {
                let (alpha, beta) = (s.alpha, s.beta);
                if beta >= 4.0 - 2.0 * alpha {
                    return Err(ParamError::invalid(
                        "beta",
                        format!("alpha {alpha} with beta {beta} is unstable (needs beta < 4 - 2 alpha)"),
                    )
                    .into());
                }
                FilterMethod::AlphaBeta { alpha, beta }
            }
        };
        let path = s.pointing.trim().to_string();
        let (telemetry, axis_columns) = if path.is_empty() {
            (None, Vec::new())
        } else {
            let (t, columns) = pointing(&path, &s.axis_columns)?;
            (Some(t), columns)
        };
        Ok(Tracker {
            smoother,
            method,
            gate_sigmas: s.gate_sigmas,
            reset_after: u32::try_from(s.reset_after).unwrap_or(u32::MAX),
            fallback_sigma: s.fallback_sigma,
            telemetry,
            pointing_path: path,
            axis_columns,
            axes: Vec::new(),
            outside_telemetry: 0,
            warned_sigma: false,
            last_stamp: None,
        })
    }

    fn process(&mut self, port: TrackerIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match (port, item) {
            (TrackerIn::Estimates, Item::Estimate(e)) => self.take(e, out),
            (TrackerIn::Estimates, _) => Ok(()),
        }
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.flush_smoother(out)?;
        self.report(out);
        Ok(())
    }
}

/// The pointing telemetry file, and the column of each axis it names.
fn pointing(path: &str, axis_columns: &str) -> Result<(Telemetry, Vec<(String, usize)>), BuildError> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| BuildError::failed(format!("cannot read pointing file {path}"), e))?;
    let t = Telemetry::parse(&text, path)?;
    let mut columns = Vec::new();
    let invalid = |why: String| ParamError::invalid("axis_columns", why);
    for (axis, column) in parse_key_values(axis_columns, "axis_columns").map_err(invalid)? {
        let col = t.column(&column).ok_or_else(|| {
            invalid(format!(
                "pointing file {path} has no column '{column}' (for axis '{axis}'); its columns: {}",
                t.columns().join(", ")
            ))
        })?;
        columns.push((axis, col));
    }
    Ok((t, columns))
}

/// Most axes one tracker keeps (each axis holds a few numbers).
const MAX_AXES: usize = 64;

struct AxisTrack {
    axis: Arc<str>,
    filter: AxisFilter,
    /// Pointing column, or None (noticed once) when no telemetry maps this axis.
    column: Option<usize>,
}

/// Estimates held for the fixed-interval smoother, with what the end of
/// input needs of them worked out as they came: the end of a long recording
/// is a serial tail of the run (nothing else is left to do on the other
/// worker), so it keeps only the kept and backward passes and one walk over
/// the held estimates.
struct SmootherSetup {
    model: Model,
    /// None: the most likely value.
    q: Option<f64>,
    gate_sigmas: f64,
    fallback_sigma: f64,
    /// Kept as they came, shared, and handed on as they are: a long
    /// recording's estimates then live once, not also as copies at the end.
    held: Vec<Arc<AngleEstimate>>,
    /// Each held estimate's axis, an index into `axes`.
    axis_of: Vec<u8>,
    /// The axes of the held estimates, in the order they first came.
    axes: Vec<HeldAxis>,
    /// The held estimate of the first axis past [`MAX_AXES`], which the
    /// flush reports as the error (where it would have found it).
    too_many: Option<usize>,
    /// The first held estimate that takes the fallback sigma.
    first_fallback: Option<usize>,
    /// Pieces smoothed so far (more than one only past [`MAX_HELD`]).
    pieces: u64,
}

/// One axis's held estimates as the smoother takes them.
struct HeldAxis {
    axis: Arc<str>,
    /// Its first held estimate.
    first: usize,
    data: Vec<Measurement>,
    /// With `q` to be found: the search, stepped as the estimates come (see
    /// [`QSearch`]).
    search: Option<QSearch>,
}

impl SmootherSetup {
    fn new(model: Model, q: Option<f64>, gate_sigmas: f64, fallback_sigma: f64) -> SmootherSetup {
        SmootherSetup {
            model,
            q,
            gate_sigmas,
            fallback_sigma,
            held: Vec::new(),
            axis_of: Vec::new(),
            axes: Vec::new(),
            too_many: None,
            first_fallback: None,
            pieces: 0,
        }
    }

    /// Hold `e`, and give its measurement to its axis (and the axis's search).
    fn hold(&mut self, e: Arc<AngleEstimate>) {
        let i = self.held.len();
        // The same axis as the one before is the common case.
        let last = self.axis_of.last().map(|&a| usize::from(a));
        let last = last.filter(|&a| self.axes.get(a).is_some_and(|a| Arc::ptr_eq(&a.axis, &e.axis)));
        let at = match last.or_else(|| self.axes.iter().position(|a| a.axis == e.axis)) {
            Some(at) => Some(at),
            None if self.axes.len() < MAX_AXES => {
                let search = self.q.is_none().then(|| QSearch::new(self.model, self.gate_sigmas));
                self.axes.push(HeldAxis { axis: e.axis.clone(), first: i, data: Vec::new(), search });
                Some(self.axes.len() - 1)
            }
            None => None,
        };
        match at {
            Some(at) => {
                let m = usable(&e, self.fallback_sigma);
                if m.is_some_and(|m| m.2) && self.first_fallback.is_none() {
                    self.first_fallback = Some(i);
                }
                let m = to_measurement(&e, m.map(|(z, sigma, _)| (z, sigma)));
                let axis = &mut self.axes[at];
                axis.data.push(m);
                if let Some(search) = axis.search.as_mut() {
                    search.push(m);
                }
                self.axis_of.push(at as u8);
            }
            None => {
                self.too_many.get_or_insert(i);
                self.axis_of.push(u8::MAX);
            }
        }
        self.held.push(e);
    }
}

/// The estimate's angle and sigma when it is usable, and whether the sigma
/// is `fallback_sigma` (the estimate's own is missing).
fn usable(e: &AngleEstimate, fallback_sigma: f64) -> Option<(f64, f64, bool)> {
    let z = e.error_deg.filter(|z| e.flag == Flag::Ok && z.is_finite())?;
    if e.sigma_deg.is_finite() && e.sigma_deg > 0.0 {
        return Some((z, e.sigma_deg, false));
    }
    Some((z, fallback_sigma, true))
}

/// What the smoother is given for estimate `e` with its usable angle and sigma.
fn to_measurement(e: &AngleEstimate, usable: Option<(f64, f64)>) -> Measurement {
    Measurement { t: e.stamp.seconds(), z: usable.map(|m| m.0), r: usable.map_or(1.0, |m| m.1 * m.1) }
}

/// Most estimates held for smoothing at once (about 25 MB); a longer run is
/// smoothed in pieces of this many, so memory stays bounded.
const MAX_HELD: usize = 100_000;

pub struct Tracker {
    smoother: Option<SmootherSetup>,
    method: FilterMethod,
    gate_sigmas: f64,
    reset_after: u32,
    fallback_sigma: f64,
    telemetry: Option<Telemetry>,
    pointing_path: String,
    axis_columns: Vec<(String, usize)>,
    axes: Vec<AxisTrack>,
    outside_telemetry: u64,
    warned_sigma: bool,
    last_stamp: Option<Stamp>,
}

impl Tracker {
    fn axis_index(&mut self, e: &AngleEstimate, out: &mut Outputs) -> Result<usize, BlockError> {
        if let Some(i) = self.axes.iter().position(|a| a.axis == e.axis) {
            return Ok(i);
        }
        if self.axes.len() >= MAX_AXES {
            return Err(BlockError::at(format!("more than {MAX_AXES} axes (new axis '{}')", e.axis), e.stamp.index));
        }
        let column = self.axis_columns.iter().find(|(a, _)| **a == *e.axis).map(|(_, c)| *c);
        if self.telemetry.is_some() && column.is_none() {
            out.warn(
                e.stamp,
                format!("axis '{}' has no pointing column (see axis_columns); no absolute angles", e.axis),
            );
        }
        self.axes.push(AxisTrack {
            axis: e.axis.clone(),
            filter: AxisFilter::new(self.method, self.gate_sigmas, self.reset_after),
            column,
        });
        Ok(self.axes.len() - 1)
    }
}

impl Tracker {
    /// The estimate's angle and sigma when it is usable (a notice once when
    /// the sigma is missing and the fallback is used).
    fn measurement(&mut self, e: &AngleEstimate, out: &mut Outputs) -> Option<(f64, f64)> {
        let (z, sigma, fallback) = usable(e, self.fallback_sigma)?;
        if fallback && !self.warned_sigma {
            self.warned_sigma = true;
            out.warn(
                e.stamp,
                format!(
                    "estimates without a usable sigma (first at sample {}); assuming {} deg",
                    e.stamp.index, self.fallback_sigma
                ),
            );
        }
        Some((z, sigma))
    }

    /// Add the antenna's pointing (when telemetry maps axis `k`) to the tracked angle.
    fn point(&mut self, e: &mut AngleEstimate, k: usize, out: &mut Outputs) {
        let (Some(tel), Some(col), Some(tracked)) = (&self.telemetry, self.axes[k].column, e.tracked_deg) else {
            return;
        };
        let t = e.stamp.seconds();
        match tel.at(col, t) {
            Some(pointing) => e.absolute_deg = Some(pointing + tracked),
            None => {
                if self.outside_telemetry == 0 {
                    let (a, b) = tel.span();
                    out.warn(
                        e.stamp,
                        format!(
                            "estimate at {t:.3} s lies outside the pointing table ({a} to {b} s); no absolute angle"
                        ),
                    );
                }
                self.outside_telemetry += 1;
            }
        }
    }

    /// Smooth the held estimates axis by axis and hand them on in their order.
    fn flush_smoother(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        let Some(setup) = self.smoother.as_mut().filter(|s| !s.held.is_empty()) else {
            return Ok(());
        };
        let (model, setup_q, gate) = (setup.model, setup.q, setup.gate_sigmas);
        let mut held = std::mem::take(&mut setup.held);
        let axis_of = std::mem::take(&mut setup.axis_of);
        let mut axes = std::mem::take(&mut setup.axes);
        let (too_many, first_fallback) = (setup.too_many.take(), setup.first_fallback.take());
        setup.pieces += 1;
        // The notices (and the error) of a walk over the held estimates, at
        // the estimates that give them.
        let mut track_of = Vec::with_capacity(axes.len());
        for axis in &axes {
            track_of.push(self.axis_index(&held[axis.first], out)?);
        }
        if let Some(i) = too_many {
            self.axis_index(&held[i], out)?;
        }
        if let Some(i) = first_fallback {
            self.measurement(&held[i], out);
        }
        let mut smoothed: Vec<Option<std::vec::IntoIter<Smoothed>>> = axes.iter().map(|_| None).collect();
        for k in 0..self.axes.len() {
            let Some(at) = track_of.iter().position(|&t| t == k) else { continue };
            let axis = &mut axes[at];
            if axis.data.iter().all(|m| m.z.is_none()) {
                continue;
            }
            let q = setup_q.or_else(|| axis.search.take().map(QSearch::most_likely_q));
            let (results, q_used) = smooth(&axis.data, model, q, gate);
            if setup_q.is_none() {
                out.inform(
                    held[axis.first].stamp,
                    format!("smoother for axis '{}': process noise {q_used:.3e} (most likely for the data)", axis.axis),
                );
            }
            smoothed[at] = Some(results.into_iter());
        }
        for (mut e, at) in held.drain(..).zip(axis_of) {
            let at = usize::from(at);
            let est = Arc::make_mut(&mut e);
            if let Some(s) = smoothed[at].as_mut().and_then(Iterator::next) {
                if s.outlier {
                    est.flag = Flag::Outlier;
                }
                est.tracked_deg = Some(s.angle);
                est.tracked_sigma_deg = Some(s.variance.sqrt());
            }
            self.point(est, track_of[at], out);
            out.push(TrackerOut::Estimates, Item::Estimate(e));
        }
        Ok(())
    }
}

impl Tracker {
    fn take(&mut self, mut e: Arc<AngleEstimate>, out: &mut Outputs) -> Result<(), BlockError> {
        self.last_stamp = Some(e.stamp);
        if let Some(setup) = self.smoother.as_mut() {
            setup.hold(e);
            if setup.held.len() >= MAX_HELD {
                self.flush_smoother(out)?;
            }
            return Ok(());
        }
        let Some((z, sigma)) = self.measurement(&e, out) else {
            out.push(TrackerOut::Estimates, Item::Estimate(e));
            return Ok(());
        };
        let k = self.axis_index(&e, out)?;
        let step = self.axes[k].filter.step(e.stamp.seconds(), z, sigma);
        let tracked = Arc::make_mut(&mut e);
        if step.outlier {
            tracked.flag = Flag::Outlier;
        }
        tracked.tracked_deg = Some(step.tracked);
        tracked.tracked_sigma_deg = Some(step.variance.max(0.0).sqrt());
        self.point(tracked, k, out);
        out.push(TrackerOut::Estimates, Item::Estimate(e));
        Ok(())
    }

    /// The notices counted over the run, at the end.
    fn report(&self, out: &mut Outputs) {
        if let Some(setup) = &self.smoother
            && setup.pieces > 1
        {
            let at = self.last_stamp.unwrap_or(Stamp::new(0, 1.0));
            out.inform(at, format!("smoothed in {} pieces of up to {MAX_HELD} estimates (memory bound)", setup.pieces));
        }
        if self.outside_telemetry > 1 {
            let at = self.last_stamp.unwrap_or(Stamp::new(0, 1.0));
            out.warn(
                at,
                format!("{} estimates lay outside the time span of {}", self.outside_telemetry, self.pointing_path),
            );
        }
    }
}
