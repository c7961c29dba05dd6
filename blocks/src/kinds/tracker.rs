//! `tracker`: smooths angle estimates per axis, flags outliers, and adds the
//! antenna's pointing angle from telemetry to give absolute target angles.

use crate::block::{Block, BlockError, BlockSpec, BuildContext, Outputs, PortSpec};
use crate::dsp::discriminator::parse_key_values;
use crate::dsp::tracking::{AxisFilter, FilterMethod, Telemetry};
use crate::item::{AngleEstimate, Flag, Item, ItemKind, Stamp};
use crate::param::{ParamSpec, ParamType, Params, Unit};
use std::sync::Arc;

pub const SPEC: BlockSpec = BlockSpec {
    kind: "tracker",
    doc: "Smooths the angle errors of each axis with an alpha-beta or Kalman filter, flags estimates that \
          fall outside the innovation gate as outliers (not used), and with pointing telemetry adds the \
          antenna angle to give absolute target angles.",
    inputs: &[PortSpec::required("estimates", ItemKind::Estimate, "angle estimates")],
    outputs: &[PortSpec::optional(
        "estimates",
        ItemKind::Estimate,
        "the same estimates with tracked (and absolute) angles",
    )],
    params: &[
        ParamSpec {
            name: "method",
            ty: ParamType::Choice(&["alpha_beta", "kalman"]),
            default: Some("alpha_beta"),
            doc: "fixed-gain alpha-beta filter, or a Kalman filter weighting each estimate by its sigma",
        },
        ParamSpec {
            name: "alpha",
            ty: ParamType::Number { unit: Unit::None, min: 0.001, max: 1.0 },
            default: Some("0.4"),
            doc: "alpha_beta: angle gain",
        },
        ParamSpec {
            name: "beta",
            ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 2.0 },
            default: Some("0.1"),
            doc: "alpha_beta: rate gain (stable while beta < 4 - 2 alpha)",
        },
        ParamSpec {
            name: "process_noise",
            ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 1e6 },
            default: Some("0.1"),
            doc: "kalman: standard deviation of the target's angular acceleration, deg/s^2",
        },
        ParamSpec {
            name: "gate_sigmas",
            ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 1000.0 },
            default: Some("4"),
            doc: "reject an estimate whose innovation exceeds this many predicted sigmas (0: no gate)",
        },
        ParamSpec {
            name: "reset_after",
            ty: ParamType::Integer { min: 1, max: 1_000_000 },
            default: Some("5"),
            doc: "restart an axis's track after this many outliers in a row",
        },
        ParamSpec {
            name: "fallback_sigma",
            ty: ParamType::Number { unit: Unit::Degrees, min: 1e-9, max: 180.0 },
            default: Some("0.1 deg"),
            doc: "spread assumed for estimates that carry no usable sigma",
        },
        ParamSpec {
            name: "pointing",
            ty: ParamType::InputPath,
            default: Some(""),
            doc: "CSV time_s,az_deg,el_deg of antenna pointing (seconds from the capture start); empty: none",
        },
        ParamSpec {
            name: "axis_columns",
            ty: ParamType::Text,
            default: Some("az=az_deg, el=el_deg"),
            doc: "which pointing column belongs to which axis",
        },
    ],
    build,
};

fn build(p: &Params, _: &BuildContext) -> Result<Box<dyn Block>, String> {
    let method = match p.text("method")? {
        "kalman" => FilterMethod::Kalman { accel_sigma: p.num("process_noise")? },
        _ => {
            let (alpha, beta) = (p.num("alpha")?, p.num("beta")?);
            if beta >= 4.0 - 2.0 * alpha {
                return Err(format!("alpha {alpha} with beta {beta} is unstable (needs beta < 4 - 2 alpha)"));
            }
            FilterMethod::AlphaBeta { alpha, beta }
        }
    };
    let path = p.text("pointing")?.trim().to_string();
    let mut axis_columns = Vec::new();
    let telemetry = if path.is_empty() {
        None
    } else {
        let text = std::fs::read_to_string(&path).map_err(|e| format!("cannot read pointing file {path}: {e}"))?;
        let t = Telemetry::parse(&text, &path)?;
        for (axis, column) in parse_key_values(p.text("axis_columns")?, "axis_columns")? {
            let col = t.column(&column).ok_or_else(|| {
                format!(
                    "pointing file {path} has no column '{column}' (for axis '{axis}'); its columns: {}",
                    t.columns().join(", ")
                )
            })?;
            axis_columns.push((axis, col));
        }
        Some(t)
    };
    Ok(Box::new(Tracker {
        method,
        gate_sigmas: p.num("gate_sigmas")?,
        reset_after: u32::try_from(p.int("reset_after")?).unwrap_or(u32::MAX),
        fallback_sigma: p.num("fallback_sigma")?,
        telemetry,
        pointing_path: path,
        axis_columns,
        axes: Vec::new(),
        outside_telemetry: 0,
        warned_sigma: false,
        last_stamp: None,
    }))
}

/// Most axes one tracker keeps (each axis holds a few numbers).
const MAX_AXES: usize = 64;

struct AxisTrack {
    axis: Arc<str>,
    filter: AxisFilter,
    /// Pointing column, or None (noticed once) when no telemetry maps this axis.
    column: Option<usize>,
}

struct Tracker {
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
            out.notice(
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

impl Block for Tracker {
    fn process(&mut self, _port: usize, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let Item::Estimate(mut e) = item else {
            return Ok(());
        };
        self.last_stamp = Some(e.stamp);
        let Some(z) = e.error_deg.filter(|z| e.flag == Flag::Ok && z.is_finite()) else {
            out.push(0, Item::Estimate(e));
            return Ok(());
        };
        let sigma = if e.sigma_deg.is_finite() && e.sigma_deg > 0.0 {
            e.sigma_deg
        } else {
            if !self.warned_sigma {
                self.warned_sigma = true;
                out.notice(
                    e.stamp,
                    format!(
                        "estimates without a usable sigma (first at sample {}); assuming {} deg",
                        e.stamp.index, self.fallback_sigma
                    ),
                );
            }
            self.fallback_sigma
        };
        let k = self.axis_index(&e, out)?;
        let t = e.stamp.seconds();
        let step = self.axes[k].filter.step(t, z, sigma);
        if step.outlier {
            e.flag = Flag::Outlier;
        }
        e.tracked_deg = Some(step.tracked);
        if let (Some(tel), Some(col)) = (&self.telemetry, self.axes[k].column) {
            match tel.at(col, t) {
                Some(pointing) => e.absolute_deg = Some(pointing + step.tracked),
                None => {
                    if self.outside_telemetry == 0 {
                        let (a, b) = tel.span();
                        out.notice(
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
        out.push(0, Item::Estimate(e));
        Ok(())
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        if self.outside_telemetry > 1 {
            let at = self.last_stamp.unwrap_or(Stamp::new(0, 1.0));
            out.notice(
                at,
                format!("{} estimates lay outside the time span of {}", self.outside_telemetry, self.pointing_path),
            );
        }
        Ok(())
    }
}
