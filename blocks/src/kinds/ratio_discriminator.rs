//! `ratio_discriminator`: pairs the dwells of opposite lobes and turns their
//! amplitude ratio into an angle error in degrees through a beam model
//! (docs/derivations.md §3-4).

use crate::block::{Block, BlockError, BlockSpec, BuildContext, Outputs, PortSpec};
use crate::dsp::beam::{Beam, BeamShape, PairModel, parse_pattern_csv};
use crate::dsp::discriminator::{ErrorSignal, LobePair, parse_key_values, parse_pairs, read_pair};
use crate::item::{AngleEstimate, DwellRecord, Flag, Item, ItemKind, Severity, Stamp};
use crate::param::{ParamSpec, ParamType, Params, Unit, Value};
use std::collections::BTreeSet;

pub const SPEC: BlockSpec = BlockSpec {
    kind: "ratio_discriminator",
    doc: "Pairs each lobe dwell with the nearest unused dwell of its opposite lobe and turns the amplitude \
          ratio into an angle error (degrees) through a beam model, with its expected spread and a flag \
          for missing signal or ratios outside the model's monotonic region.",
    inputs: &[PortSpec::required("dwells", ItemKind::Dwell, "integrated lobe dwells")],
    outputs: &[PortSpec::optional("estimates", ItemKind::Estimate, "one angle estimate per paired dwells")],
    params: &[
        ParamSpec {
            name: "pairs",
            ty: ParamType::LobePairs,
            default: Some("az=right/left, el=up/down"),
            doc: "axis=plus/minus lobe names; the plus lobe sits at +squint; a leading - flips the sign",
        },
        ParamSpec {
            name: "lobe_gain_db",
            ty: ParamType::LobeGains,
            default: Some(""),
            doc: "per-lobe path gain to remove, e.g. right=0.4, left=-0.2 (dB)",
        },
        ParamSpec {
            name: "signal",
            ty: ParamType::Choice(&["log_ratio", "diff_sum"]),
            default: Some("log_ratio"),
            doc: "error signal: ln(A/B) or (A-B)/(A+B); either is inverted through the beam model",
        },
        ParamSpec {
            name: "beam",
            ty: ParamType::Choice(&["gaussian", "uniform", "cosine", "table"]),
            default: Some("gaussian"),
            doc: "lobe pattern model (table: measured pattern from the pattern file)",
        },
        ParamSpec {
            name: "beamwidth",
            ty: ParamType::Number { unit: Unit::Degrees, min: 0.01, max: 179.0 },
            default: Some("6 deg"),
            doc: "one-way 3 dB beamwidth of one lobe (ignored for table)",
        },
        ParamSpec {
            name: "squint",
            ty: ParamType::Number { unit: Unit::Degrees, min: 0.001, max: 89.0 },
            default: Some("2.4 deg"),
            doc: "angle of each lobe's axis from boresight",
        },
        ParamSpec {
            name: "way",
            ty: ParamType::Choice(&["one", "two"]),
            default: Some("two"),
            doc: "two: the lobe transmits and receives (pattern squared); one: receive only",
        },
        ParamSpec {
            name: "pattern",
            ty: ParamType::InputPath,
            default: Some(""),
            doc: "CSV of angle_deg,gain_db from the lobe's own axis (beam: table only)",
        },
        ParamSpec {
            name: "max_gap",
            ty: ParamType::Time { min_s: 0.0, max_s: f64::INFINITY, pulses: false },
            default: Some("0 s"),
            doc: "pair only dwells whose mid times differ by at most this (0: no limit)",
        },
        ParamSpec {
            name: "floor",
            ty: ParamType::Number { unit: Unit::Decibels, min: -120.0, max: -1.0 },
            default: Some("-20 dB"),
            doc: "usable region ends where the far lobe's one-way gain falls to this (its echo sinks into the noise, its nulls make the ratio ambiguous)",
        },
        ParamSpec {
            name: "edge_sigmas",
            ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 10.0 },
            default: Some("2"),
            doc: "flag out of range a ratio within this many of its own sigmas of the region's edge (0: only past the edge)",
        },
        ParamSpec {
            name: "min_snr",
            ty: ParamType::Number { unit: Unit::Decibels, min: -100.0, max: 100.0 },
            default: Some("0 dB"),
            doc: "weaker dwell's energy over noise below which a pair gives no number (flag no_signal)",
        },
        ParamSpec {
            name: "unbias",
            ty: ParamType::Bool,
            default: Some("true"),
            doc: "remove the second-order bias of ln(amplitude) (it reads low by its own variance) before the ratio",
        },
    ],
    build,
};

fn build(p: &Params, _: &BuildContext) -> Result<Box<dyn Block>, String> {
    let pairs = parse_pairs(p.text("pairs")?)?;
    let mut gains = Vec::new();
    for (lobe, text) in parse_key_values(p.text("lobe_gain_db")?, "lobe_gain_db")? {
        if !pairs.iter().any(|pr| pr.plus == lobe || pr.minus == lobe) {
            return Err(format!("lobe_gain_db: lobe '{lobe}' is not in any pair of 'pairs'"));
        }
        let db: f64 = text
            .trim_end_matches("dB")
            .trim()
            .parse()
            .ok()
            .filter(|g: &f64| g.is_finite())
            .ok_or_else(|| format!("lobe_gain_db: '{lobe}={text}' is not a gain in dB"))?;
        gains.push((lobe, 10f64.powf(db / 20.0)));
    }
    let model = pair_model(p)?.with_floor(p.num("floor")?);
    let signal = ErrorSignal::parse(p.text("signal")?)?;
    let max_gap = match p.get("max_gap") {
        Some(Value::Seconds(s)) => Gap::Seconds(*s),
        Some(Value::Samples(n)) => Gap::Samples(*n),
        _ => Gap::Seconds(p.num("max_gap")?),
    };
    let slots = pairs
        .into_iter()
        .map(|pair| {
            let gain_of = |lobe: &str| gains.iter().find(|(l, _)| l == lobe).map_or(1.0, |g| g.1);
            PairSlot {
                plus_gain: gain_of(&pair.plus),
                minus_gain: gain_of(&pair.minus),
                pair,
                waiting: None,
                seen: [false, false],
            }
        })
        .collect();
    Ok(Box::new(RatioDiscriminator {
        slots,
        model,
        signal,
        max_gap,
        edge_sigmas: p.num("edge_sigmas")?,
        min_snr_db: p.num("min_snr")?,
        unbias: p.flag("unbias")?,
        unknown_lobes: BTreeSet::new(),
        unpaired: 0,
        last_stamp: None,
    }))
}

/// The beam model of every pair, from `beam`, `beamwidth`, `squint`, `way`, `pattern`.
fn pair_model(p: &Params) -> Result<PairModel, String> {
    let pattern = p.text("pattern")?.trim();
    let shape = match p.text("beam")? {
        "gaussian" => BeamShape::Gaussian,
        "uniform" => BeamShape::Uniform,
        "cosine" => BeamShape::Cosine,
        "table" => {
            if pattern.is_empty() {
                return Err("beam 'table' needs a pattern file (parameter 'pattern')".into());
            }
            let text =
                std::fs::read_to_string(pattern).map_err(|e| format!("cannot read pattern file {pattern}: {e}"))?;
            BeamShape::Table(parse_pattern_csv(&text).map_err(|e| format!("pattern file {pattern}: {e}"))?)
        }
        other => return Err(format!("unknown beam model '{other}'")),
    };
    if !pattern.is_empty() && !matches!(shape, BeamShape::Table(_)) {
        return Err(format!("parameter 'pattern' is set ({pattern}) but beam is not 'table'"));
    }
    let from_table = matches!(shape, BeamShape::Table(_));
    let beam = Beam::new(shape, p.num("beamwidth")?)
        .map_err(|e| if from_table { format!("pattern file {pattern}: {e}") } else { e })?;
    let way = if p.text("way")? == "one" { 1 } else { 2 };
    PairModel::new(beam, p.num("squint")?, way)
}

#[derive(Clone, Copy, Debug)]
enum Gap {
    Seconds(f64),
    Samples(f64),
}

impl Gap {
    fn allows(&self, a: Stamp, b: Stamp) -> bool {
        let samples = a.index.abs_diff(b.index) as f64;
        match *self {
            Gap::Seconds(s) => s <= 0.0 || samples <= s * a.rate,
            Gap::Samples(n) => n <= 0.0 || samples <= n,
        }
    }
}

struct PairSlot {
    pair: LobePair,
    plus_gain: f64,
    minus_gain: f64,
    /// The latest unused dwell, and whether it is of the plus lobe.
    waiting: Option<(DwellRecord, bool)>,
    /// Whether a dwell of [plus, minus] has arrived at all.
    seen: [bool; 2],
}

struct RatioDiscriminator {
    slots: Vec<PairSlot>,
    model: PairModel,
    signal: ErrorSignal,
    max_gap: Gap,
    edge_sigmas: f64,
    min_snr_db: f64,
    unbias: bool,
    unknown_lobes: BTreeSet<String>,
    unpaired: u64,
    last_stamp: Option<Stamp>,
}

/// How many distinct unknown lobe names are reported (and remembered).
const UNKNOWN_LOBES_REPORTED: usize = 16;

/// Midpoint of two stamps of the same rate, without overflow.
fn mid_stamp(a: Stamp, b: Stamp) -> Stamp {
    let index = a.index / 2 + b.index / 2 + (a.index % 2 + b.index % 2) / 2;
    Stamp::new(index, a.rate)
}

impl RatioDiscriminator {
    fn estimate(&self, slot: &PairSlot, plus: &DwellRecord, minus: &DwellRecord) -> AngleEstimate {
        // To second order E[ln A_hat] = ln A - var(ln A_hat) for a noise-corrected
        // amplitude (expand ln P_hat around P), so the weaker lobe's log reads
        // low by more than the stronger's: put the expected shortfall back.
        let unbias = |d: &DwellRecord| if self.unbias && d.var_ln_amp.is_finite() { d.var_ln_amp.exp() } else { 1.0 };
        let a = plus.amplitude / slot.plus_gain * unbias(plus);
        let b = minus.amplitude / slot.minus_gain * unbias(minus);
        let reading = read_pair(&self.model, self.signal, a, b, plus.var_ln_amp, minus.var_ln_amp, self.edge_sigmas);
        let range_m = match (plus.range_m, minus.range_m) {
            (Some(ra), Some(rb)) => Some(0.5 * (ra + rb)),
            _ => None,
        };
        let snr_db = 10.0 * plus.snr.min(minus.snr).log10();
        // Too weak a lobe gives a biased, noise-dominated ratio: no number.
        let weak = reading.flag == Flag::Ok && (snr_db.is_nan() || snr_db < self.min_snr_db);
        let (error_deg, sigma_deg, flag) =
            if weak { (None, f64::NAN, Flag::NoSignal) } else { (reading.error_deg, reading.sigma_deg, reading.flag) };
        AngleEstimate {
            stamp: mid_stamp(plus.mid, minus.mid),
            axis: slot.pair.axis.clone(),
            error_deg,
            sigma_deg,
            snr_db,
            ratio_db: reading.ratio_db,
            range_m,
            flag,
            tracked_deg: None,
            tracked_sigma_deg: None,
            absolute_deg: None,
        }
    }
}

impl Block for RatioDiscriminator {
    fn process(&mut self, _port: usize, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let Item::Dwell(dwell) = item else {
            return Ok(());
        };
        self.last_stamp = Some(dwell.mid);
        let name: &str = &dwell.tag.name;
        let found = self.slots.iter().position(|s| s.pair.plus == name || s.pair.minus == name);
        let Some(k) = found else {
            if self.unknown_lobes.len() < UNKNOWN_LOBES_REPORTED && self.unknown_lobes.insert(name.to_string()) {
                out.warn(
                    dwell.mid,
                    format!("dwells of lobe '{name}' (first at sample {}) belong to no pair; ignored", dwell.mid.index),
                );
            }
            return Ok(());
        };
        let is_plus = self.slots[k].pair.plus == name;
        self.slots[k].seen[usize::from(!is_plus)] = true;
        let partner = match self.slots[k].waiting.take() {
            Some((w, w_plus)) if w_plus != is_plus && self.max_gap.allows(w.mid, dwell.mid) => Some(w),
            Some(_) => {
                // Same lobe again, or the partner is too old: the older dwell stays unused.
                self.unpaired += 1;
                None
            }
            None => None,
        };
        let Some(partner) = partner else {
            self.slots[k].waiting = Some((dwell, is_plus));
            return Ok(());
        };
        if partner.mid.rate != dwell.mid.rate {
            return Err(BlockError::at(
                format!(
                    "dwells of '{}' and '{}' have different sample rates ({} and {} S/s)",
                    partner.tag.name, dwell.tag.name, partner.mid.rate, dwell.mid.rate
                ),
                dwell.mid.index,
            ));
        }
        let (plus, minus) = if is_plus { (&dwell, &partner) } else { (&partner, &dwell) };
        let estimate = self.estimate(&self.slots[k], plus, minus);
        out.push(0, Item::Estimate(Box::new(estimate)));
        Ok(())
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        let at = self.last_stamp.unwrap_or(Stamp::new(0, 1.0));
        let left_waiting = self.slots.iter().filter(|s| s.waiting.is_some()).count() as u64;
        let unpaired = self.unpaired + left_waiting;
        if unpaired > 0 {
            // Dwells still waiting when the capture ends are routine; a partner missing mid-run is not.
            let severity = if self.unpaired > 0 { Severity::Warning } else { Severity::Information };
            out.raise(at, format!("{unpaired} dwell(s) found no partner dwell and gave no estimate"), severity);
        }
        for slot in &self.slots {
            for (lobe, seen) in [(&slot.pair.plus, slot.seen[0]), (&slot.pair.minus, slot.seen[1])] {
                if !seen {
                    out.warn(at, format!("lobe '{lobe}' of pair '{}' never appeared in the dwells", slot.pair.axis));
                }
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gap_and_midpoint() {
        let a = Stamp::new(u64::MAX - 1, 1000.0);
        assert_eq!(mid_stamp(a, a).index, u64::MAX - 1);
        assert_eq!(mid_stamp(Stamp::new(3, 1.0), Stamp::new(6, 1.0)).index, 4);
        assert!(Gap::Seconds(0.0).allows(Stamp::new(0, 10.0), Stamp::new(1_000_000, 10.0)));
        assert!(!Gap::Seconds(1.0).allows(Stamp::new(0, 10.0), Stamp::new(11, 10.0)));
        assert!(Gap::Samples(11.0).allows(Stamp::new(0, 10.0), Stamp::new(11, 10.0)));
    }
}
