//! `range_gate`: integrates the echo inside a range gate over each lobe dwell
//! of a pulsed tracker, with a fixed gate or one that acquires and follows the
//! strongest echo. Formulas: docs/derivations.md §4-5; the per-dwell
//! arithmetic lives in [`crate::dsp::gate`].

use crate::block::{BlockError, BlockSpec, BuildContext, Outputs};
use crate::dsp::gate::{AmplitudeFrom, DwellSums, Follow, GateSummary, Integration, Weighting, best_gate_start};
use crate::error::{BuildError, ParamError};
use crate::facts::{Facts, StreamFacts};
use crate::item::{Cell, DwellRecord, Item, ItemKind, LobeTag, RowCells, Stamp, Sweep, TableRow};
use crate::param::{ParamType, Unit, range_bin_m};
use crate::typed::{DistanceSetting, TimeSetting, TypedBlock};
use geometry::Geometry;
use std::collections::BTreeMap;
use std::sync::Arc;

mod geometry;

const DIST: ParamType = ParamType::Distance { min_m: 0.0, max_m: 1e9 };

pub const SPEC: BlockSpec = BlockSpec::typed::<RangeGate>(
    "range_gate",
    "Integrates a range gate over each lobe dwell of labelled sweeps (noncoherent power or coherent mean), \
     with noise from a reference region, sub-bin range from the gate's amplitude centroid, an optional \
     acquire-and-follow gate, and a check that the lobes share one noise floor.",
);

crate::block_ports! {
    inputs pub enum RangeGateIn {
        Sweeps = required("sweeps", ItemKind::Sweep, "sweeps labelled with their lobe and dwell"),
    }
}

crate::block_ports! {
    outputs pub enum RangeGateOut {
        Dwells = optional("dwells", ItemKind::Dwell, "one record per lobe dwell"),
        Gates = optional(
            "gates",
            ItemKind::Row,
            "the gate in use, a row at the first dwell of each lobe cycle and at any dwell where it changed: gate_start_m, gate_end_m, noise_start_m, noise_end_m, echo_length_m (for pictures)"
        ),
    }
}

crate::block_settings! {
    /// Settings of `range_gate`.
    pub struct RangeGateSettings {
        gate_start: DistanceSetting {
            ty: DIST,
            default: Some("0 bins"),
            doc: "first range bin of the gate (m or bins); required unless acquire is on",
        },
        gate_width: DistanceSetting {
            ty: DIST,
            default: Some("2 bins"),
            doc: "gate width; keep it near the echo length plus one bin",
        },
        acquire: bool {
            ty: ParamType::Bool,
            default: Some("false"),
            doc: "find the strongest echo in the search window and centre the gate on it",
        },
        search_start: DistanceSetting {
            ty: DIST,
            default: Some("0 bins"),
            doc: "start of the acquisition search window",
        },
        search_end: DistanceSetting {
            ty: DIST,
            default: Some("0 bins"),
            doc: "end of the search window; 0 = up to the noise region / sweep end",
        },
        acquire_dwells: u64 {
            ty: ParamType::Integer { min: 1, max: 10_000 },
            default: Some("4"),
            doc: "dwells (all lobes) summed to acquire; they are not reported",
        },
        follow: Follow {
            ty: ParamType::Choice(Follow::WORDS),
            default: Some("none"),
            doc: "re-centre the gate each lobe cycle: none, centroid, or early_late split gate",
        },
        pulse: TimeSetting {
            ty: ParamType::Time { min_s: 0.0, max_s: 1.0, pulses: false },
            default: Some("1 samples"),
            doc: "echo length (1 sample after a matched filter); its centre offset is taken off the range",
        },
        integration: Integration {
            ty: ParamType::Choice(Integration::WORDS),
            default: Some("noncoherent"),
            doc: "noncoherent (sum of power) or coherent (complex mean per gate bin, then power)",
        },
        centroid: Weighting {
            ty: ParamType::Choice(Weighting::WORDS),
            default: Some("amplitude"),
            doc: "range centroid weights: amplitude (exact for any box echo) or power (less spread in wide gates, e.g. after a matched filter)",
        },
        amplitude_from: AmplitudeFrom {
            ty: ParamType::Choice(AmplitudeFrom::WORDS),
            default: Some("gate"),
            doc: "gate: echo energy summed over the gate; after a matched filter: peak (the centre bin alone), interpolated (the output at the echo's fitted fractional delay: the single-sample limit at any delay, and the range) or compressed_gate (summed, spread from the correlated bins); the last two need noncoherent integration",
        },
        noise_start: DistanceSetting {
            ty: DIST,
            default: Some("0 bins"),
            doc: "start of the noise reference region; 0 = the last noise_width bins of each sweep",
        },
        noise_width: DistanceSetting {
            ty: DIST,
            default: Some("32 bins"),
            doc: "width of the noise reference region",
        },
        detect: f64 {
            ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 100.0 },
            default: Some("0"),
            doc: "echo energy must exceed this many standard deviations of noise alone in the gate, else the dwell has no signal (0: only a positive energy; 3-4 where a lobe may sit in its null, at the price of a bias near the threshold)",
        },
        noise_margin: f64 {
            ty: ParamType::Number { unit: Unit::Decibels, min: 0.0, max: 60.0 },
            default: Some("3 dB"),
            doc: "report lobes whose noise floors differ by more than this",
        },
    }
}

impl TypedBlock for RangeGate {
    type Settings = RangeGateSettings;
    type In = RangeGateIn;
    type Out = RangeGateOut;

    fn build(s: RangeGateSettings, _: &BuildContext) -> Result<Self, BuildError> {
        if s.amplitude_from.compressed() && s.integration != Integration::Noncoherent {
            return Err(ParamError::invalid(
                "amplitude_from",
                format!("'{}' needs integration 'noncoherent' (it is '{}')", s.amplitude_from, s.integration),
            )
            .into());
        }
        if !s.acquire && s.gate_start.is_zero() {
            return Err(ParamError::invalid(
                "gate_start",
                "set it (bin 0 is the transmit instant) or turn on 'acquire'",
            )
            .into());
        }
        Ok(RangeGate {
            acquire: s.acquire,
            acquire_dwells: s.acquire_dwells.max(1),
            follow: s.follow,
            integration: s.integration,
            weighting: s.centroid,
            amplitude_from: s.amplitude_from,
            noise_margin_db: s.noise_margin,
            detect_sigmas: s.detect,
            settings: s,
            geometry: None,
            gate_start: None,
            acq: None,
            cycle: Follow::accumulator(),
            last_lobe: None,
            current: None,
            skipped_short: 0,
            untagged: 0,
            no_noise: 0,
            before_transmit: 0,
            noise_floor: BTreeMap::new(),
            mismatch_reported: false,
            blank_reported: false,
            last_stamp: Stamp::new(0, 1.0),
            gate_fields: None,
            last_gate_row: None,
        })
    }

    /// A known rate turns the distances into bins now, so a bad one is
    /// refused before the run.
    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError> {
        let facts = facts.merged();
        if let Some(rate) = facts.rate {
            self.geometry(rate, 0)?;
        }
        Ok(facts)
    }

    fn process(&mut self, port: RangeGateIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match (port, item) {
            (RangeGateIn::Sweeps, Item::Sweep(sweep)) => self.take(sweep, out),
            (RangeGateIn::Sweeps, _) => Ok(()),
        }
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.close_dwell(out);
        self.report(out);
        Ok(())
    }
}

/// Acquisition: power per bin of the search window, summed over all lobes.
struct Acquisition {
    start: usize,
    power: Vec<f64>,
    dwells: u64,
}

/// The dwell being integrated.
struct Current {
    tag: LobeTag,
    /// None while acquiring.
    sums: Option<DwellSums>,
}

pub struct RangeGate {
    settings: RangeGateSettings,
    acquire: bool,
    acquire_dwells: u64,
    follow: Follow,
    integration: Integration,
    weighting: Weighting,
    amplitude_from: AmplitudeFrom,
    noise_margin_db: f64,
    detect_sigmas: f64,
    geometry: Option<Geometry>,
    /// The gate in use; None while acquiring.
    gate_start: Option<usize>,
    acq: Option<Acquisition>,
    /// Follow measurements of the running lobe cycle.
    cycle: crate::dsp::gate::FollowAccumulator,
    last_lobe: Option<usize>,
    current: Option<Current>,
    skipped_short: u64,
    untagged: u64,
    no_noise: u64,
    /// Dwells whose range came out negative (see `close_dwell`).
    before_transmit: u64,
    /// Running noise power per lobe: (name, smoothed power, dwells seen).
    noise_floor: BTreeMap<usize, (Arc<str>, f64, u64)>,
    mismatch_reported: bool,
    blank_reported: bool,
    last_stamp: Stamp,
    /// [`GATE_FIELDS`] as shared names, once the first row is made.
    gate_fields: Option<[Arc<str>; 5]>,
    /// The cells of the last `gates` row: an unchanged gate (most dwells)
    /// hands on the same shared cells instead of new ones.
    last_gate_row: Option<RowCells>,
}

impl RangeGate {
    fn geometry(&mut self, rate: f64, at: u64) -> Result<Geometry, BlockError> {
        match &self.geometry {
            Some(g) if g.rate == rate => Ok(g.clone()),
            Some(g) => {
                Err(BlockError::at(format!("range_gate: sample rate changed from {} to {rate} S/s", g.rate), at))
            }
            None => {
                let g = Geometry::resolve(&self.settings, rate)?;
                if !self.acquire {
                    self.gate_start = Some(g.gate_start);
                }
                self.geometry = Some(g.clone());
                Ok(g)
            }
        }
    }

    /// A new dwell begins with `tag`: apply acquisition / follow results at
    /// the start of a lobe cycle so both lobes of a pair share one gate.
    /// Returns whether the dwell begins a lobe cycle.
    fn open_dwell(&mut self, tag: &LobeTag, geo: &Geometry, at: Stamp, out: &mut Outputs) -> bool {
        let cycle_start = self.last_lobe.is_none_or(|l| tag.lobe <= l);
        self.last_lobe = Some(tag.lobe);
        if cycle_start {
            if self.gate_start.is_none() {
                if let Some(acq) = &self.acq
                    && acq.dwells >= self.acquire_dwells
                    && let Some(best) = best_gate_start(&acq.power, geo.gate_width)
                {
                    let start = acq.start + best;
                    self.gate_start = Some(start);
                    out.inform(
                        at,
                        format!(
                            "acquired the strongest echo: gate at bins {}..{} ({:.1} to {:.1} m) after {} dwells; \
                             ranges given are the echo's leading edge inside it",
                            start,
                            start + geo.gate_width,
                            start as f64 * range_bin_m(geo.rate),
                            (start + geo.gate_width) as f64 * range_bin_m(geo.rate),
                            acq.dwells
                        ),
                    );
                    self.acq = None;
                }
            } else if let Some(old) = self.gate_start
                && let Some(new) = self.cycle.proposal(self.follow, old, geo.gate_width)
            {
                let floor = if self.acquire { geo.search_start } else { 0 };
                self.gate_start = Some(new.max(floor).max(1));
            }
            self.cycle = Follow::accumulator();
        }
        let sums = self
            .gate_start
            .map(|s| DwellSums::new(s, geo.gate_width, self.integration).with_amplitude_from(self.amplitude_from));
        if sums.is_none() && self.acq.is_none() {
            self.acq = Some(Acquisition { start: geo.search_start, power: Vec::new(), dwells: 0 });
        }
        if sums.is_none()
            && let Some(acq) = &mut self.acq
        {
            acq.dwells += 1;
        }
        self.current = Some(Current { tag: tag.clone(), sums });
        cycle_start
    }

    fn add_sweep(&mut self, sweep: &Sweep, geo: &Geometry, out: &mut Outputs) {
        let Some(cur) = &mut self.current else { return };
        let iq = &sweep.iq[..];
        match &mut cur.sums {
            None => {
                let Some(acq) = &mut self.acq else { return };
                if acq.power.is_empty() {
                    // Size the window from the first sweep seen: constant from then on.
                    let end = if geo.search_end > 0 { geo.search_end } else { geo.noise_range(iq.len()).start };
                    acq.power = vec![0.0; end.saturating_sub(acq.start).max(geo.gate_width)];
                }
                for (k, p) in acq.power.iter_mut().enumerate() {
                    match iq.get(acq.start + k) {
                        Some(x) => *p += x.norm_sqr() as f64,
                        None => break,
                    }
                }
            }
            Some(sums) => {
                let gate = sums.start..sums.start + sums.width();
                if iq.len() < gate.end {
                    self.skipped_short += 1;
                    if self.skipped_short == 1 {
                        out.warn(
                            sweep.stamp,
                            format!(
                                "sweep of {} samples is shorter than the gate (ends at bin {}); skipped",
                                iq.len(),
                                gate.end
                            ),
                        );
                    }
                    return;
                }
                if sweep.blanked as usize > gate.start && !self.blank_reported {
                    self.blank_reported = true;
                    out.warn(
                        sweep.stamp,
                        format!(
                            "the gate (from bin {}) overlaps the blanked leakage ({} bins)",
                            gate.start, sweep.blanked
                        ),
                    );
                }
                // The noise region, less any part the gate covers.
                let noise = geo.noise_range(iq.len());
                let before = noise.start..noise.end.min(gate.start).max(noise.start);
                let after = noise.start.max(gate.end).min(noise.end)..noise.end;
                sums.add(&iq[gate.clone()], &[&iq[before], &iq[after]], sweep.stamp.index);
            }
        }
    }

    fn close_dwell(&mut self, out: &mut Outputs) {
        let Some(cur) = self.current.take() else {
            return;
        };
        let Some(sums) = cur.sums else { return };
        let Some(geo) = self.geometry.clone() else {
            return;
        };
        if sums.pulses() == 0 {
            return;
        }
        let noise = match sums.noise_power() {
            Some(n) => n,
            None => match self.noise_floor.get(&cur.tag.lobe) {
                Some(&(_, n, _)) => n,
                None => {
                    self.no_noise += 1;
                    if self.no_noise == 1 {
                        out.warn(
                            Stamp::new(cur.tag.dwell_start, geo.rate),
                            "no noise reference samples in this dwell (region past the sweep end?); dwell skipped",
                        );
                    }
                    return;
                }
            },
        };
        let summary: GateSummary = sums.summarise(noise, geo.pulse_samples, self.weighting, self.detect_sigmas);
        self.cycle.add(&summary, sums.start);
        let mid = Stamp::new(sums.mid_index(), geo.rate);
        self.check_noise_floor(&cur.tag, noise, mid, out);
        // A centroid less than half a pulse past the transmit instant means
        // the echo cannot be as long as `pulse` says: no range is given
        // rather than a negative one.
        let mut range_m = summary.range_bin.map(|b| b * range_bin_m(geo.rate));
        if range_m.is_some_and(|r| r < 0.0) {
            self.before_transmit += 1;
            if self.before_transmit == 1 {
                out.warn(
                    mid,
                    format!(
                        "the echo's range comes out at {:.0} m, before the transmit instant: 'pulse' ({} samples) is longer than the echo; ranges like this are left empty",
                        range_m.unwrap_or(0.0),
                        geo.pulse_samples
                    ),
                );
            }
            range_m = None;
        }
        out.push(
            RangeGateOut::Dwells,
            Item::Dwell(DwellRecord {
                tag: cur.tag,
                mid,
                amplitude: summary.amplitude,
                noise_power: noise,
                snr: summary.energy_ratio,
                var_ln_amp: summary.var_ln_amp,
                range_m,
                used: sums.pulses(),
            }),
        );
    }

    fn check_noise_floor(&mut self, tag: &LobeTag, noise: f64, at: Stamp, out: &mut Outputs) {
        if !(noise.is_finite() && noise > 0.0) {
            return;
        }
        let entry = self.noise_floor.entry(tag.lobe).or_insert((Arc::clone(&tag.name), noise, 0));
        // Smooth over a few dwells so one noisy dwell does not trip the check.
        entry.1 += 0.25 * (noise - entry.1);
        entry.2 += 1;
        if self.mismatch_reported || self.noise_floor.len() < 2 || self.noise_floor.values().any(|e| e.2 < 3) {
            return;
        }
        let (lo, hi) = self.noise_floor.values().fold(
            (None::<&(Arc<str>, f64, u64)>, None::<&(Arc<str>, f64, u64)>),
            |(lo, hi), e| {
                (
                    Some(lo.map_or(e, |l| if e.1 < l.1 { e } else { l })),
                    Some(hi.map_or(e, |h| if e.1 > h.1 { e } else { h })),
                )
            },
        );
        if let (Some(lo), Some(hi)) = (lo, hi) {
            let diff_db = 10.0 * (hi.1 / lo.1).log10();
            if diff_db > self.noise_margin_db {
                self.mismatch_reported = true;
                out.warn(
                    at,
                    format!(
                        "noise floors differ between lobes: '{}' {:.2} dB, '{}' {:.2} dB ({:.2} dB apart, margin {} dB); \
                         receiver gain control or a lobe imbalance?",
                        hi.0,
                        10.0 * hi.1.log10(),
                        lo.0,
                        10.0 * lo.1.log10(),
                        diff_db,
                        self.noise_margin_db
                    ),
                );
            }
        }
    }
}

/// The columns of a `gates` row (named once: rows go out every lobe cycle).
const GATE_FIELDS: [&str; 5] = ["gate_start_m", "gate_end_m", "noise_start_m", "noise_end_m", "echo_length_m"];

impl RangeGate {
    /// Put the gate and noise region in use on the `gates` port, in metres
    /// from the transmit instant: at the first dwell of each lobe cycle
    /// (where a gate may move) and at any other dwell where a cell changed
    /// (the noise region follows the sweep length), so every change is told
    /// and consecutive rows repeat only once a cycle. Not only when the gate
    /// moves: a picture merges these rows by time with sweeps, and a merge
    /// waits for every open input, so rows that rarely come stalled the
    /// whole graph (the short budget capture ran 2x slower).
    fn tell_gate(&mut self, geo: &Geometry, sweep_len: usize, at: Stamp, cycle_start: bool, out: &mut Outputs) {
        let Some(start) = self.gate_start else { return };
        let noise = geo.noise_range(sweep_len);
        let bin_m = range_bin_m(geo.rate);
        let metres = |bins: f64| Cell::Num(bins * bin_m);
        let cells = [
            metres(start as f64),
            metres((start + geo.gate_width) as f64),
            metres(noise.start as f64),
            metres(noise.end as f64),
            metres(geo.pulse_samples),
        ];
        // Bit for bit, so a row is shared only where a new one would be the same.
        let same = |a: &Cell, b: &Cell| matches!((a, b), (Cell::Num(x), Cell::Num(y)) if x.to_bits() == y.to_bits());
        let unchanged = self
            .last_gate_row
            .as_ref()
            .filter(|last| last.len() == cells.len() && last.iter().zip(&cells).all(|((_, a), b)| same(a, b)));
        let fields = match unchanged {
            Some(_) if !cycle_start => return,
            Some(last) => Arc::clone(last),
            None => {
                let names = self.gate_fields.get_or_insert_with(|| GATE_FIELDS.map(Arc::from));
                let fields: RowCells = names.iter().cloned().zip(cells).collect();
                self.last_gate_row = Some(Arc::clone(&fields));
                fields
            }
        };
        out.push(RangeGateOut::Gates, Item::Row(TableRow { stamp: at, fields }));
    }

    fn take(&mut self, sweep: Sweep, out: &mut Outputs) -> Result<(), BlockError> {
        let Some(tag) = sweep.lobe.as_ref() else {
            self.untagged += 1;
            if self.untagged == 1 {
                out.warn(sweep.stamp, "sweep without a lobe label (no switch-sync gate upstream?); skipped");
            }
            return Ok(());
        };
        let geo = self.geometry(sweep.stamp.rate, sweep.stamp.index)?;
        self.last_stamp = sweep.stamp;
        let same_dwell = self.current.as_ref().is_some_and(|c| c.tag.dwell == tag.dwell && c.tag.lobe == tag.lobe);
        if !same_dwell {
            self.close_dwell(out);
            let cycle_start = self.open_dwell(tag, &geo, sweep.stamp, out);
            self.tell_gate(&geo, sweep.iq.len(), sweep.stamp, cycle_start, out);
        }
        self.add_sweep(&sweep, &geo, out);
        Ok(())
    }

    /// The counts of skipped sweeps and dwells, at the end.
    fn report(&self, out: &mut Outputs) {
        let end = self.last_stamp;
        if self.skipped_short > 0 {
            out.warn(end, format!("{} sweeps were shorter than the range gate and were skipped", self.skipped_short));
        }
        if self.untagged > 1 {
            out.warn(end, format!("{} sweeps had no lobe label and were skipped", self.untagged));
        }
        if self.no_noise > 1 {
            out.warn(end, format!("{} dwells had no noise reference samples and were skipped", self.no_noise));
        }
        if self.before_transmit > 1 {
            out.warn(
                end,
                format!("{} dwells gave a range before the transmit instant; left empty", self.before_transmit),
            );
        }
        if self.acquire && self.gate_start.is_none() && self.acq.is_some() {
            out.warn(
                end,
                format!("acquisition did not finish: fewer than {} dwells and a cycle start", self.acquire_dwells),
            );
        }
    }
}
