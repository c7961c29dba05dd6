//! `sweep_gate`: labels each sweep (one PRI from the framer) with the lobe
//! active over its range window. A switch's transient (from `lead` before the
//! switch instant to `guard` after it) is blanked where it covers the head of
//! a sweep and cut off where it covers the tail, like the transmit blanking;
//! only a transient that reaches into the range window the integrator uses
//! drops the sweep, and every such drop is counted with its reason.

use super::gate_common::{GateConfig, NoticeRouter, gate_params};
use crate::block::{Block, BlockError, BlockSpec, BuildContext, Outputs, PortSpec};
use crate::dsp::switch_sync::{SwitchEvent, SwitchSync};
use crate::item::{Item, ItemKind, LobeTag, Stamp, Sweep};
use crate::param::{ParamSpec, ParamType, Params};
use std::collections::VecDeque;
use std::sync::Arc;

/// The gates' parameters plus the cut before a switch, which only sweeps need.
const PARAMS: [ParamSpec; 12] = {
    let g = gate_params(true);
    [
        g[0],
        g[1],
        g[2],
        g[3],
        g[4],
        g[5],
        g[6],
        g[7],
        g[8],
        ParamSpec {
            name: "lead",
            ty: ParamType::Time { min_s: 0.0, max_s: 1.0, pulses: false },
            default: Some("0 s"),
            doc: "also cut this much before each switch instant: the sync edge's midpoint lags the switch, whose transient starts at once",
        },
        ParamSpec {
            name: "window_start",
            ty: WINDOW,
            default: Some("0 bins"),
            doc: "start of the range window the integrator uses (search or gate window and noise region); a switch transient before it is blanked",
        },
        ParamSpec {
            name: "window_end",
            ty: WINDOW,
            default: Some("0 bins"),
            doc: "end of that range window; a switch transient after it is cut off (0: no window end, every switch in the tail cuts)",
        },
    ]
};

const WINDOW: ParamType = ParamType::Distance { min_m: 0.0, max_m: 1e9 };

/// Sweeps used to measure the pulse interval when a time is given in pulses.
const PRI_SWEEPS: usize = 9;

pub const SPEC: BlockSpec = BlockSpec {
    kind: "sweep_gate",
    doc: "Labels sweeps with the lobe active over their range window (sync staircase or schedule; times \
          may be given in pulses); a switch transient (lead before to guard after the switch instant) is \
          blanked at a sweep's head or cut off its tail, and drops the sweep only when it reaches into the \
          range window.",
    inputs: &[PortSpec::required("sweeps", ItemKind::Sweep, "sweeps from a framer (with sync spans for sync timing)")],
    outputs: &[
        PortSpec::optional("sweeps", ItemKind::Sweep, "the sweeps, labelled with their lobe and dwell"),
        PortSpec::optional("notices", ItemKind::Notice, "switch instants and irregularities, for timelines"),
    ],
    params: &PARAMS,
    build,
};

fn build(p: &Params, ctx: &BuildContext) -> Result<Box<dyn Block>, crate::error::BuildError> {
    Ok(Box::new(SweepGate {
        cfg: GateConfig::from_params(p)?,
        router: NoticeRouter::new(&ctx.name, 1),
        source: None,
        guard: 0,
        lead_param: p.clone(),
        lead: 0,
        window: (0, None),
        startup: Vec::new(),
        learned: 0,
        pending: VecDeque::new(),
        fed_end: 0,
        switches: VecDeque::new(),
        current: None,
        emitted_dwell: None,
        dwell: 0,
        counts: Counts::default(),
        last_stamp: None,
    }))
}

/// The lobe in force: (lobe, dwell start, switch instant that began it).
type Current = (usize, u64, Option<i64>);

struct SweepGate {
    cfg: GateConfig,
    router: NoticeRouter,
    source: Option<SwitchSync>,
    guard: u64,
    /// Holds the `lead` time until the sample rate is known.
    lead_param: Params,
    /// Samples cut before each switch instant.
    lead: u64,
    /// The integrator's range window in bins from the transmit instant (end None: no end).
    window: (u64, Option<u64>),
    /// Sweeps held while the pulse interval or the sync levels are learned.
    startup: Vec<Sweep>,
    /// How many of `startup` went into the level learning.
    learned: usize,
    /// Sweeps whose samples are not all decided yet.
    pending: VecDeque<Sweep>,
    fed_end: u64,
    switches: VecDeque<(u64, usize)>,
    current: Option<Current>,
    /// Dwell start of the last sweep handed on.
    emitted_dwell: Option<u64>,
    dwell: u64,
    counts: Counts,
    last_stamp: Option<Stamp>,
}

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

/// Median spacing of consecutive transmit instants, in samples.
fn pulse_interval(sweeps: &[Sweep]) -> Option<f64> {
    let mut gaps: Vec<u64> =
        sweeps.windows(2).map(|w| w[1].stamp.index.saturating_sub(w[0].stamp.index)).filter(|&g| g > 0).collect();
    if gaps.is_empty() {
        return None;
    }
    gaps.sort_unstable();
    Some(gaps[gaps.len() / 2] as f64)
}

impl SweepGate {
    /// Build the switch source and learn what is needed, then replay the held sweeps.
    fn advance(&mut self, finishing: bool, out: &mut Outputs) -> Result<(), BlockError> {
        let Some(first) = self.startup.first().map(|s| s.stamp) else {
            return Ok(());
        };
        if self.source.is_none() {
            let pri = if self.cfg.needs_pri() {
                if self.startup.len() < PRI_SWEEPS && !finishing {
                    return Ok(());
                }
                Some(pulse_interval(&self.startup).ok_or_else(|| {
                    BlockError::at(
                        "a time is given in pulses, but fewer than two sweeps arrived to measure the pulse interval",
                        first.index,
                    )
                })?)
            } else {
                None
            };
            let (source, guard) = self.cfg.source(first.rate, pri).map_err(|e| BlockError::at(e, first.index))?;
            self.source = Some(source);
            self.guard = guard;
            let p = &self.lead_param;
            let at = |e: String| BlockError::at(e, first.index);
            self.lead = p.samples_at("lead", first.rate, None).map_err(|e| at(e.to_string()))?.round() as u64;
            let start = p.bins_at("window_start", first.rate).map_err(|e| at(e.to_string()))?.round() as u64;
            let end = p.bins_at("window_end", first.rate).map_err(|e| at(e.to_string()))?.round() as u64;
            if end > 0 && end <= start {
                return Err(at(format!("window_end ({end} bins) must lie after window_start ({start} bins)")));
            }
            self.window = (start, (end > 0).then_some(end));
        }
        let Some(source) = self.source.as_mut() else {
            return Ok(());
        };
        if source.learning() {
            let mut enough = false;
            while self.learned < self.startup.len() && !enough {
                let sweep = &self.startup[self.learned];
                let Some(sync) = sweep.sync.as_deref() else {
                    return Err(BlockError::at(
                        "timing is 'sync' but the sweeps carry no sync channel; map one, or use timing: schedule",
                        sweep.stamp.index,
                    ));
                };
                enough = source.learn_from(sync);
                self.learned += 1;
            }
            if !enough && !finishing {
                return Ok(());
            }
            source.end_learning().map_err(|e| BlockError::at(e, first.index))?;
            if let Some(levels) = source.levels() {
                let list: Vec<String> =
                    levels.iter().zip(&self.cfg.names).map(|(l, n)| format!("{n} {l:.3}")).collect();
                out.notice(first, format!("learned sync levels: {}", list.join(", ")));
            }
        }
        self.learned = 0;
        for sweep in std::mem::take(&mut self.startup) {
            self.run(sweep, out)?;
        }
        Ok(())
    }

    fn run(&mut self, sweep: Sweep, out: &mut Outputs) -> Result<(), BlockError> {
        let Some(source) = self.source.as_mut() else {
            return Ok(());
        };
        let index = sweep.stamp.index;
        source.feed(index, sweep.sync.as_deref(), sweep.iq.len()).map_err(|e| BlockError::at(e, index))?;
        self.fed_end = self.fed_end.max(sweep_end(&sweep));
        self.pending.push_back(sweep);
        self.take_events(out);
        let upto = self.source.as_ref().map_or(self.fed_end, |s| s.settled(self.fed_end));
        self.release(upto, out);
        Ok(())
    }

    fn take_events(&mut self, out: &mut Outputs) {
        let Some(source) = self.source.as_mut() else {
            return;
        };
        let rate = self.pending.back().map_or(1.0, |s| s.stamp.rate);
        while let Some(event) = source.pop_event() {
            self.router.report(out, &event, &self.cfg.names, rate);
            match event {
                SwitchEvent::Begin { at, lobe, switch_at } => {
                    self.current = Some((lobe, switch_at.map_or(at, |s| s.max(0) as u64), switch_at));
                }
                SwitchEvent::Switch { at, lobe } => self.switches.push_back((at, lobe)),
                SwitchEvent::Irregular { .. } => {}
            }
        }
    }

    /// Hand on every pending sweep that ends at or before `upto`.
    fn release(&mut self, upto: u64, out: &mut Outputs) {
        let lead = self.lead;
        while self.pending.front().is_some_and(|s| sweep_end(s).saturating_add(lead) <= upto) {
            if let Some(sweep) = self.pending.pop_front() {
                self.label(sweep, out);
            }
        }
    }

    fn label(&mut self, mut sweep: Sweep, out: &mut Outputs) {
        let start = sweep.stamp.index;
        let end = sweep_end(&sweep);
        let window_start = start + self.window.0;
        let window_end = self.window.1.map(|w| start + w);
        // Switches whose transient begins before the window decide the lobe.
        while let Some(&(at, lobe)) = self.switches.front() {
            if at.saturating_sub(self.lead) >= window_start.max(start + 1) {
                break;
            }
            self.switches.pop_front();
            self.current = Some((lobe, at, Some(at as i64)));
        }
        let Some((lobe, dwell_start, switch_at)) = self.current else {
            self.counts.unlabelled += 1;
            return;
        };
        let guard_end = switch_at.map_or(0, |s| (s + self.guard as i64).max(0) as u64);
        let next_cut = self.switches.front().map(|&(at, _)| at.saturating_sub(self.lead));
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
        if self.emitted_dwell != Some(dwell_start) {
            if self.emitted_dwell.is_some() {
                self.dwell += 1;
            }
            self.emitted_dwell = Some(dwell_start);
        }
        sweep.lobe = Some(LobeTag { lobe, name: Arc::clone(&self.cfg.names[lobe]), dwell: self.dwell, dwell_start });
        out.push(0, Item::Sweep(sweep));
    }

    /// The end-of-run account of what switch transients did to sweeps.
    /// Drops go to the run report; routine blanking and cutting to the notices port only.
    fn report_counts(&mut self, out: &mut Outputs, stamp: Stamp) {
        let c = &self.counts;
        let (lead, guard) = (self.lead, self.guard);
        let window = match self.window {
            (s, Some(e)) => format!("bins {s}..{e}"),
            (s, None) => format!("bins {s} to the sweep end"),
        };
        if c.in_window > 0 {
            out.notice(
                stamp,
                format!(
                    "dropped {} sweeps: a switch transient ({lead} samples before to {guard} after the switch instant) \
                     reached into the range window ({window})",
                    c.in_window
                ),
            );
        }
        if c.unlabelled > 0 {
            out.notice(stamp, format!("dropped {} sweeps before the first lobe was known", c.unlabelled));
        }
        let (blanked, cut) = (c.blanked, c.cut);
        if blanked > 0 {
            self.router.timeline(out, stamp, format!("blanked the switch guard at the head of {blanked} sweeps"));
        }
        if cut > 0 {
            self.router.timeline(out, stamp, format!("cut {cut} sweeps short of a switch instant in their tail"));
        }
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

impl Block for SweepGate {
    fn process(&mut self, _port: usize, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let Item::Sweep(sweep) = item else {
            return Ok(());
        };
        if sweep.iq.is_empty() {
            return Ok(());
        }
        self.last_stamp = Some(sweep.stamp);
        if self.source.as_ref().is_some_and(|s| !s.learning()) {
            return self.run(sweep, out);
        }
        self.startup.push(sweep);
        self.advance(false, out)
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.advance(true, out)?;
        self.take_events(out);
        self.release(u64::MAX, out);
        if let Some(stamp) = self.last_stamp {
            self.report_counts(out, stamp);
            self.router.summarise(out, stamp);
        }
        Ok(())
    }
}
