//! `sweep_gate`: labels each sweep (one PRI from the framer) with the lobe
//! active over its range window. A switch's transient (from `lead` before the
//! switch instant to `guard` after it) is blanked where it covers the head of
//! a sweep and cut off where it covers the tail, like the transmit blanking;
//! only a transient that reaches into the range window the integrator uses
//! drops the sweep, and every such drop is counted with its reason.

use super::gate_common::{GateKind, GateSettings, SwitchDriver, SwitchGate, SwitchTiming};
use crate::block::{BlockError, BlockSpec, Outputs};
use crate::dsp::sweep_label_check::{SweepLabelCheck, SweepStep, window_power_sum};
use crate::dsp::switch_sync::Irregularity;
use crate::error::{BuildError, ParamError};
use crate::item::{Item, ItemKind, LobeTag, Stamp, Sweep};
use crate::param::{ParamSpec, ParamType, Params};
use crate::typed::{DistanceSetting, Settings, TimeSetting, joined_params};

pub const SPEC: BlockSpec = BlockSpec::typed::<SwitchGate<SweepLabeller>>(
    "sweep_gate",
    "Labels sweeps with the lobe active over their range window (sync staircase or schedule; times \
     may be given in pulses); a switch transient (lead before to guard after the switch instant) is \
     blanked at a sweep's head or cut off its tail, and drops the sweep only when it reaches into the \
     range window.",
);

crate::block_ports! {
    inputs pub enum SweepGateIn {
        Sweeps = required("sweeps", ItemKind::Sweep, "sweeps from a framer (with sync spans for sync timing)"),
    }
}

crate::block_ports! {
    outputs pub enum SweepGateOut {
        Sweeps = optional("sweeps", ItemKind::Sweep, "the sweeps, labelled with their lobe and dwell"),
        Notices = optional("notices", ItemKind::Notice, "switch instants and irregularities, for timelines"),
    }
}

const WINDOW: ParamType = ParamType::Distance { min_m: 0.0, max_m: 1e9 };

crate::block_settings! {
    /// What only `sweep_gate` sets: the cut before a switch, and the range
    /// window whose switch transients drop a sweep.
    pub struct SweepCutSettings {
        lead: TimeSetting {
            ty: ParamType::Time { min_s: 0.0, max_s: 1.0, pulses: false },
            default: Some("0 s"),
            doc: "also cut this much before each switch instant: the sync edge's midpoint lags the switch, whose transient starts at once",
        },
        window_start: DistanceSetting {
            ty: WINDOW,
            default: Some("0 bins"),
            doc: "start of the range window the integrator uses (search or gate window and noise region); a switch transient before it is blanked",
        },
        window_end: DistanceSetting {
            ty: WINDOW,
            default: Some("0 bins"),
            doc: "end of that range window; a switch transient after it is cut off (0: no window end, every switch in the tail cuts)",
        },
    }
}

/// Settings of `sweep_gate`: the switch timing (times may be given in
/// pulses) and the cuts.
#[derive(Clone, Debug)]
pub struct SweepGateSettings {
    pub switching: GateSettings,
    pub cut: SweepCutSettings,
}

/// The gates' parameters, then the cuts only sweeps need.
const PARAMS: [ParamSpec; GateSettings::COUNT + SweepCutSettings::PARAMS.len()] =
    joined_params(&GateSettings::params(true), SweepCutSettings::PARAMS);

impl Settings for SweepGateSettings {
    const PARAMS: &'static [ParamSpec] = &PARAMS;
    fn from_params(p: &Params) -> Result<Self, ParamError> {
        Ok(SweepGateSettings { switching: GateSettings::read(p, true)?, cut: SweepCutSettings::from_params(p)? })
    }
}

/// What only `sweep_gate` does: label whole sweeps, blanking or cutting switch transients.
pub struct SweepLabeller {
    /// Turned into samples once the sample rate is known.
    cut: SweepCutSettings,
    /// Samples cut before each switch instant.
    lead: u64,
    /// The integrator's range window in bins from the transmit instant (end None: no end).
    window: (u64, Option<u64>),
    /// Dwell start of the last sweep handed on.
    emitted_dwell: Option<u64>,
    dwell: u64,
    counts: Counts,
    /// Sync timing: the sync channel's labels checked against the echoes.
    label_check: Option<SweepLabelCheck>,
    /// First and last sweep start and the sweeps between (their mean spacing).
    starts: Option<(u64, u64, u64)>,
}

type Driver = SwitchDriver<SweepLabeller>;

/// What the gate did to sweeps because of switch transients.
#[derive(Default)]
struct Counts {
    /// Dropped: a transient reached into the range window.
    in_window: u64,
    /// Dropped: before the first lobe was known.
    unlabelled: u64,
    /// Kept with the transient blanked at their head.
    blanked: u64,
    /// Kept with the transient cut off their tail.
    cut: u64,
}

fn sweep_end(s: &Sweep) -> u64 {
    s.stamp.index + s.iq.len() as u64
}

impl SweepLabeller {
    fn label(&mut self, d: &mut Driver, mut sweep: Sweep, out: &mut Outputs) {
        let start = sweep.stamp.index;
        self.starts = Some(self.starts.map_or((start, start, 0), |(first, _, n)| (first, start, n + 1)));
        let end = sweep_end(&sweep);
        let window_start = start + self.window.0;
        let window_end = self.window.1.map(|w| start + w);
        // Switches whose transient begins before the window decide the lobe.
        while let Some(&(at, lobe)) = d.switches.front() {
            if at.saturating_sub(self.lead) >= window_start.max(start + 1) {
                break;
            }
            d.switches.pop_front();
            d.switch_to(at, lobe);
        }
        let Some(current) = d.current else {
            self.counts.unlabelled += 1;
            return;
        };
        let guard_end = d.guard_end();
        let next_cut = d.switches.front().map(|&(at, _)| at.saturating_sub(self.lead));
        // The last switch's guard runs into the window, or the next switch's
        // transient starts inside it.
        let guard_in_window = guard_end > window_start;
        let next_in_window = next_cut.is_some_and(|c| c < end && window_end.is_some_and(|w| c < w));
        if guard_in_window || next_in_window {
            self.counts.in_window += 1;
            return;
        }
        if guard_end > start {
            blank_head(&mut sweep, (guard_end - start) as usize);
            self.counts.blanked += 1;
        }
        // Samples from `lead` before a switch instant in the tail on belong to no lobe.
        if let Some(cut) = next_cut.filter(|&c| c < end) {
            let keep = (cut - start) as usize;
            sweep.iq = sweep.iq.slice(0..keep);
            sweep.sync = sweep.sync.map(|s| s.slice(0..keep.min(s.len())));
            sweep.blanked = sweep.blanked.min(keep.try_into().unwrap_or(u32::MAX));
            self.counts.cut += 1;
        }
        let dwell_start = current.dwell_start;
        let lobe = current.lobe;
        if self.emitted_dwell != Some(dwell_start) {
            if self.emitted_dwell.is_some() {
                self.dwell += 1;
            }
            self.emitted_dwell = Some(dwell_start);
            if let Some(check) = self.label_check.as_mut() {
                check.switch(lobe);
            }
        }
        if let Some(check) = self.label_check.as_mut() {
            let end = self.window.1.map_or(sweep.iq.len(), |e| (e as usize).min(sweep.iq.len()));
            let window = &sweep.iq[(self.window.0 as usize).min(end)..end];
            check.sweep(window_power_sum(window) / window.len().max(1) as f64);
        }
        sweep.lobe = Some(LobeTag { lobe, name: d.lobe_name(lobe), dwell: self.dwell, dwell_start });
        out.push(SweepGateOut::Sweeps, Item::Sweep(sweep));
    }

    /// What the labels' check found, with what would fit.
    fn describe_step(&self, d: &Driver, step: &SweepStep, stamp: Stamp) -> String {
        let (count, side) = (step.sweeps.abs(), if step.sweeps > 0 { "after" } else { "before" });
        let shift = self.spacing() * step.sweeps as f64 / stamp.rate;
        let source = if d.cfg.timing == SwitchTiming::Sync { "the sync channel's" } else { "the scheduled" };
        let fit = match d.cfg.first_start.samples(stamp.rate, Some(self.spacing())) {
            Ok(first) if d.cfg.timing == SwitchTiming::Schedule => {
                format!("first_start ≈ {:.3} ms?", (first / stamp.rate + shift) * 1e3)
            }
            _ => format!(
                "the sync edges {} the lobe switches by about {} us",
                if step.sweeps > 0 { "lead" } else { "lag" },
                (shift.abs() * 1e6).round()
            ),
        };
        format!(
            "the echoes change lobe {count} sweep(s) {side} {source} switches (standard score {:.0}): {fit}",
            step.score
        )
    }

    /// Mean samples from one sweep's start to the next.
    fn spacing(&self) -> f64 {
        self.starts.map_or(0.0, |(first, last, n)| (last - first) as f64 / n.max(1) as f64)
    }

    /// The end-of-run account of what switch transients did to sweeps.
    /// Drops go to the run report; routine blanking and cutting to the notices port only.
    fn report_counts(&mut self, d: &mut Driver, out: &mut Outputs, stamp: Stamp) {
        let c = &self.counts;
        let (lead, guard) = (self.lead, d.guard);
        let window = match self.window {
            (s, Some(e)) => format!("bins {s}..{e}"),
            (s, None) => format!("bins {s} to the sweep end"),
        };
        if c.in_window > 0 {
            out.warn(
                stamp,
                format!(
                    "dropped {} sweeps: a switch transient ({lead} samples before to {guard} after the switch instant) \
                     reached into the range window ({window})",
                    c.in_window
                ),
            );
        }
        if c.unlabelled > 0 {
            out.inform(stamp, format!("dropped {} sweeps before the first lobe was known", c.unlabelled));
        }
        let (blanked, cut) = (c.blanked, c.cut);
        if blanked > 0 {
            d.router.timeline(out, stamp, format!("blanked the switch guard at the head of {blanked} sweeps"));
        }
        if cut > 0 {
            d.router.timeline(out, stamp, format!("cut {cut} sweeps short of a switch instant in their tail"));
        }
    }
}

impl GateKind for SweepLabeller {
    type Piece = Sweep;
    type Settings = SweepGateSettings;
    type In = SweepGateIn;
    type Out = SweepGateOut;
    const NOTICES: SweepGateOut = SweepGateOut::Notices;

    fn build(s: SweepGateSettings) -> Result<(GateSettings, Self), BuildError> {
        let labeller = SweepLabeller {
            cut: s.cut,
            lead: 0,
            window: (0, None),
            emitted_dwell: None,
            dwell: 0,
            counts: Counts::default(),
            // the switch finder's own instants need no check against the signal
            label_check: (s.switching.timing != SwitchTiming::Signal)
                .then(|| SweepLabelCheck::new(s.switching.lobes.len())),
            starts: None,
        };
        Ok((s.switching, labeller))
    }

    /// The switch finder starts at the range window (the leakage lies
    /// before it), or past twice the blanked leakage when there is none.
    fn finder_head(&self, sweep: &Sweep) -> usize {
        if self.window.0 > 0 { self.window.0 as usize } else { 2 * sweep.blanked as usize }
    }

    fn start(&mut self, first: Stamp) -> Result<(), BlockError> {
        let c = &self.cut;
        let at = |e: String| BlockError::at(e, first.index);
        self.lead = c.lead.samples(first.rate, None).map_err(|e| at(e.to_string()))?.round() as u64;
        let start = c.window_start.bins(first.rate).map_err(|e| at(e.to_string()))?.round() as u64;
        let end = c.window_end.bins(first.rate).map_err(|e| at(e.to_string()))?.round() as u64;
        if end > 0 && end <= start {
            return Err(at(format!("window_end ({end} bins) must lie after window_start ({start} bins)")));
        }
        self.window = (start, (end > 0).then_some(end));
        Ok(())
    }

    /// Hand on every pending sweep that ends at or before `upto`.
    fn release(&mut self, d: &mut Driver, upto: u64, out: &mut Outputs) {
        while d.pending.front().is_some_and(|s| sweep_end(s).saturating_add(self.lead) <= upto) {
            if let Some(sweep) = d.pending.pop_front() {
                self.label(d, sweep, out);
            }
        }
    }

    fn finish(&mut self, d: &mut Driver, last: Option<Stamp>, out: &mut Outputs) -> Result<(), BlockError> {
        if let Some(stamp) = last {
            self.report_counts(d, out, stamp);
            if let Some(step) = self.label_check.as_mut().and_then(SweepLabelCheck::finish) {
                let what = self.describe_step(d, &step, stamp);
                d.router.irregular(out, stamp, Irregularity::Schedule, what);
            }
        }
        Ok(())
    }
}

/// Zero the first `n` samples of a sweep (a copy unless this is the only
/// reader) and count them as blanked.
fn blank_head(sweep: &mut Sweep, n: usize) {
    let n = n.min(sweep.iq.len());
    let zero = num_complex::Complex32::new(0.0, 0.0);
    match sweep.iq.get_mut() {
        Some(iq) => iq[..n].fill(zero),
        None => {
            let mut copy = sweep.iq[..].to_vec();
            copy[..n].fill(zero);
            sweep.iq = copy.into();
        }
    }
    sweep.blanked = sweep.blanked.max(n.try_into().unwrap_or(u32::MAX));
}
