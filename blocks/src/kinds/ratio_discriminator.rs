//! `ratio_discriminator`: pairs the dwells of opposite lobes and turns their
//! amplitude ratio into an angle error in degrees through a beam model
//! (docs/derivations.md §3-4).

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::dsp::beam::{Beam, BeamShape, PairModel, parse_pattern_csv};
use crate::dsp::discriminator::{ErrorSignal, LobePair, parse_key_values, parse_pairs, read_pair};
use crate::error::{BuildError, ParamError};
use crate::facts::{Facts, StreamFacts};
use crate::item::{AngleEstimate, DwellRecord, Flag, Item, ItemKind, Severity, Stamp};
use crate::param::{ParamType, Unit, Value};
use crate::typed::{TimeSetting, TypedBlock};
use std::collections::BTreeSet;
use std::path::PathBuf;

pub const SPEC: BlockSpec = BlockSpec::typed::<RatioDiscriminator>(
    "ratio_discriminator",
    "Pairs each lobe dwell with the nearest unused dwell of its opposite lobe and turns the amplitude \
     ratio into an angle error (degrees) through a beam model, with its expected spread and a flag \
     for missing signal or ratios outside the model's monotonic region.",
);

crate::block_ports! {
    inputs pub enum DiscriminatorIn { Dwells = required("dwells", ItemKind::Dwell, "integrated lobe dwells") }
}

crate::block_ports! {
    outputs pub enum DiscriminatorOut {
        Estimates = optional("estimates", ItemKind::Estimate, "one angle estimate per paired dwells"),
    }
}

crate::block_choice! {
    /// The lobe pattern model.
    pub enum BeamModel { Gaussian = "gaussian", Uniform = "uniform", Cosine = "cosine", Table = "table" }
}

crate::block_choice! {
    /// Whether a lobe shapes the echo once (receive only) or twice.
    pub enum Way { One = "one", Two = "two" }
}

impl Way {
    /// How many times the lobe's pattern shapes the echo.
    pub fn passes(self) -> u32 {
        match self {
            Way::One => 1,
            Way::Two => 2,
        }
    }
}

crate::block_settings! {
    /// Settings of `ratio_discriminator`.
    pub struct RatioDiscriminatorSettings {
        pairs: String {
            ty: ParamType::LobePairs,
            default: Some("az=right/left, el=up/down"),
            doc: "axis=plus/minus lobe names; the plus lobe sits at +squint; a leading - flips the sign",
        },
        lobe_gain_db: String {
            ty: ParamType::LobeGains,
            default: Some(""),
            doc: "per-lobe path gain to remove, e.g. right=0.4, left=-0.2 (dB)",
        },
        signal: ErrorSignal {
            ty: ParamType::Choice(ErrorSignal::WORDS),
            default: Some("log_ratio"),
            doc: "error signal: ln(A/B) or (A-B)/(A+B); either is inverted through the beam model",
        },
        beam: BeamModel {
            ty: ParamType::Choice(BeamModel::WORDS),
            default: Some("gaussian"),
            doc: "lobe pattern model (table: measured pattern from the pattern file)",
        },
        beamwidth: f64 {
            ty: ParamType::Number { unit: Unit::Degrees, min: 0.01, max: 179.0 },
            default: Some("6 deg"),
            doc: "one-way 3 dB beamwidth of one lobe (ignored for table)",
        },
        squint: f64 {
            ty: ParamType::Number { unit: Unit::Degrees, min: 0.001, max: 89.0 },
            default: Some("2.4 deg"),
            doc: "angle of each lobe's axis from boresight",
        },
        way: Way {
            ty: ParamType::Choice(Way::WORDS),
            default: Some("two"),
            doc: "two: the lobe transmits and receives (pattern squared); one: receive only",
        },
        pattern: PathBuf {
            ty: ParamType::InputPath,
            default: Some(""),
            doc: "CSV of angle_deg,gain_db from the lobe's own axis (beam: table only)",
        },
        max_gap: TimeSetting {
            ty: ParamType::Time { min_s: 0.0, max_s: f64::INFINITY, pulses: false },
            default: Some("0 s"),
            doc: "pair only dwells whose mid times differ by at most this (0: no limit)",
        },
        floor: f64 {
            ty: ParamType::Number { unit: Unit::Decibels, min: -120.0, max: -1.0 },
            default: Some("-20 dB"),
            doc: "usable region ends where the far lobe's one-way gain falls to this (its echo sinks into the noise, its nulls make the ratio ambiguous)",
        },
        edge_sigmas: f64 {
            ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 10.0 },
            default: Some("2"),
            doc: "flag out of range a ratio within this many of its own sigmas of the region's edge (0: only past the edge)",
        },
        min_snr: f64 {
            ty: ParamType::Number { unit: Unit::Decibels, min: -100.0, max: 100.0 },
            default: Some("0 dB"),
            doc: "weaker dwell's energy over noise below which a pair gives no number (flag no_signal)",
        },
        unbias: bool {
            ty: ParamType::Bool,
            default: Some("true"),
            doc: "remove the second-order bias of ln(amplitude) (it reads low by its own variance) before the ratio",
        },
    }
}

impl TypedBlock for RatioDiscriminator {
    type Settings = RatioDiscriminatorSettings;
    type In = DiscriminatorIn;
    type Out = DiscriminatorOut;

    fn build(s: RatioDiscriminatorSettings, _: &BuildContext) -> Result<Self, BuildError> {
        let pairs = parse_pairs(&s.pairs).map_err(|e| ParamError::invalid("pairs", e))?;
        let gains = lobe_gains(&s.lobe_gain_db, &pairs)?;
        let model = pair_model(&s)?.with_floor(s.floor);
        let max_gap = match s.max_gap.value() {
            Value::Samples(n) => Gap::Samples(*n),
            Value::Seconds(x) | Value::Number(x) => Gap::Seconds(*x),
            other => {
                return Err(ParamError::WrongType {
                    name: "max_gap".into(),
                    value: other.to_string(),
                    expected: "a time",
                }
                .into());
            }
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
        Ok(RatioDiscriminator {
            slots,
            model,
            signal: s.signal,
            max_gap,
            edge_sigmas: s.edge_sigmas,
            min_snr_db: s.min_snr,
            unbias: s.unbias,
            unknown_lobes: BTreeSet::new(),
            unpaired: 0,
            last_stamp: None,
        })
    }

    /// With the lobes known, every lobe of a pair must be one of them.
    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError> {
        let facts = facts.merged();
        if let Some(lobes) = &facts.lobes {
            for slot in &self.slots {
                for lobe in [&slot.pair.plus, &slot.pair.minus] {
                    if !lobes.iter().any(|l| **l == **lobe) {
                        let known: Vec<&str> = lobes.iter().map(|l| &**l).collect();
                        return Err(ParamError::invalid(
                            "pairs",
                            format!(
                                "lobe '{lobe}' of pair '{}' is not a lobe of the stream ({})",
                                slot.pair.axis,
                                known.join(", ")
                            ),
                        )
                        .into());
                    }
                }
            }
        }
        Ok(facts)
    }

    fn process(&mut self, port: DiscriminatorIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match (port, item) {
            (DiscriminatorIn::Dwells, Item::Dwell(dwell)) => self.take(dwell, out),
            (DiscriminatorIn::Dwells, _) => Ok(()),
        }
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.report_unpaired(out);
        Ok(())
    }
}

/// The per-lobe gains of `lobe_gain_db`, as amplitude factors.
fn lobe_gains(text: &str, pairs: &[LobePair]) -> Result<Vec<(String, f64)>, ParamError> {
    let invalid = |why: String| ParamError::invalid("lobe_gain_db", why);
    let mut gains = Vec::new();
    for (lobe, text) in parse_key_values(text, "lobe_gain_db").map_err(invalid)? {
        if !pairs.iter().any(|pr| pr.plus == lobe || pr.minus == lobe) {
            return Err(invalid(format!("lobe '{lobe}' is not in any pair of 'pairs'")));
        }
        let db: f64 = text
            .trim_end_matches("dB")
            .trim()
            .parse()
            .ok()
            .filter(|g: &f64| g.is_finite())
            .ok_or_else(|| invalid(format!("'{lobe}={text}' is not a gain in dB")))?;
        gains.push((lobe, 10f64.powf(db / 20.0)));
    }
    Ok(gains)
}

/// The beam model of every pair, from `beam`, `beamwidth`, `squint`, `way`, `pattern`.
fn pair_model(s: &RatioDiscriminatorSettings) -> Result<PairModel, BuildError> {
    beam_pair_model(s.beam, s.beamwidth, s.squint, s.way, &s.pattern)
}

/// The pair model the settings `beam`, `beamwidth`, `squint`, `way` and
/// `pattern` describe; errors name those settings (the discriminator and
/// the picture of its curve both take them).
pub fn beam_pair_model(
    model: BeamModel,
    beamwidth: f64,
    squint: f64,
    way: Way,
    pattern: &std::path::Path,
) -> Result<PairModel, BuildError> {
    let set = !pattern.as_os_str().is_empty();
    let shape = match model {
        BeamModel::Gaussian => BeamShape::Gaussian,
        BeamModel::Uniform => BeamShape::Uniform,
        BeamModel::Cosine => BeamShape::Cosine,
        BeamModel::Table => {
            if !set {
                return Err(ParamError::invalid("beam", "'table' needs a pattern file (parameter 'pattern')").into());
            }
            let text = std::fs::read_to_string(pattern)
                .map_err(|e| BuildError::failed(format!("cannot read pattern file {}", pattern.display()), e))?;
            BeamShape::Table(
                parse_pattern_csv(&text)
                    .map_err(|e| BuildError::failed(format!("pattern file {}", pattern.display()), e))?,
            )
        }
    };
    if set && model != BeamModel::Table {
        return Err(
            ParamError::invalid("pattern", format!("is set ({}) but beam is not 'table'", pattern.display())).into()
        );
    }
    let beam = Beam::new(shape, beamwidth).map_err(|e| match model {
        BeamModel::Table => BuildError::failed(format!("pattern file {}", pattern.display()), e),
        BeamModel::Gaussian | BeamModel::Uniform | BeamModel::Cosine => BuildError::Refused(e),
    })?;
    Ok(PairModel::new(beam, squint, way.passes())?)
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

pub struct RatioDiscriminator {
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

impl RatioDiscriminator {
    fn take(&mut self, dwell: DwellRecord, out: &mut Outputs) -> Result<(), BlockError> {
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
        out.push(DiscriminatorOut::Estimates, Item::Estimate(std::sync::Arc::new(estimate)));
        Ok(())
    }

    fn report_unpaired(&mut self, out: &mut Outputs) {
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
