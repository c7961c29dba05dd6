//! The switch-sync driver both gates run on (`lobe_gate` cuts segments,
//! `sweep_gate` labels sweeps), with its parameters and notice routing.
//!
//! The driver owns everything the two gates share: building the switch
//! source once the sample rate (and, for times in pulses, the pulse interval)
//! is known, holding the first pieces while the sync levels are learned and
//! replaying them, feeding the source, holding pieces whose lobe is not
//! decided yet, turning switch events into the lobe in force and its guard,
//! and routing notices. A gate only says how it releases settled pieces
//! ([`GateKind`]); [`SwitchGate`] makes any gate kind a typed block.
//! [`GateSettings`] (`settings.rs`) holds the switch timing settings both
//! read once; [`NoticeRouter`] (`notices.rs`) routes their notices.

use crate::block::{BlockError, BuildContext, Outputs};
use crate::dsp::switch_sync::{Irregularity, SwitchEvent, SwitchSync};
use crate::dsp::sync_step_check::SyncStepCheck;
use crate::dsp::timing_check::ScheduleCheck;
use crate::error::BuildError;
use crate::facts::{Facts, LabelledSpan, StreamFacts};
use crate::item::{Item, SampleChunk, Stamp, Sweep};
use crate::typed::{OutputPort, PortSet, Settings, TypedBlock};
use num_complex::Complex32;
use std::collections::VecDeque;
use std::sync::Arc;

mod notices;
mod settings;

pub use notices::{NoticeRouter, is_switch_report};
pub use settings::{GateSettings, SwitchTiming};

/// What a gate feeds through the driver: a stretch of consecutive samples.
pub trait SwitchPiece: Send + Sized {
    /// The piece an input item carries, if it is of this kind.
    fn from_item(item: Item) -> Option<Self>;
    fn stamp(&self) -> Stamp;
    fn iq(&self) -> &[Complex32];
    fn sync(&self) -> Option<&[f32]>;
    /// Whether the switch finder sums each piece into one cell (a sweep)
    /// rather than into cells of a fixed length (a run of samples).
    const ONE_CELL: bool;
    /// The stamp end-of-run notices carry when this is the last piece.
    fn last_stamp(&self) -> Stamp;
    /// Index one past the last sample.
    fn end(&self) -> u64 {
        self.stamp().index + self.iq().len() as u64
    }
}

/// Both piece kinds carry their samples, sync and stamp under the same names.
macro_rules! switch_piece {
    ($kind:ty, $variant:path, $one_cell:expr, $last:expr) => {
        impl SwitchPiece for $kind {
            const ONE_CELL: bool = $one_cell;
            fn from_item(item: Item) -> Option<Self> {
                match item {
                    $variant(piece) => Some(piece),
                    _ => None,
                }
            }
            fn stamp(&self) -> Stamp {
                self.stamp
            }
            fn iq(&self) -> &[Complex32] {
                &self.iq
            }
            fn sync(&self) -> Option<&[f32]> {
                self.sync.as_deref()
            }
            fn last_stamp(&self) -> Stamp {
                $last(self)
            }
        }
    };
}

// A chunk's end-of-run notices carry the stamp after its last sample; a sweep's its transmit instant.
switch_piece!(SampleChunk, Item::Samples, false, |c: &SampleChunk| c.stamp.after(c.iq.len()));
switch_piece!(Sweep, Item::Sweep, true, |s: &Sweep| s.stamp);

/// The lobe in force and the switch that began it.
#[derive(Clone, Copy, Debug)]
pub struct LobeInForce {
    pub lobe: usize,
    /// Sample index the dwell began at (the switch instant, or the first sample).
    pub dwell_start: u64,
    /// The switch instant, when one was seen or scheduled (may precede the capture).
    pub switch_at: Option<i64>,
}

/// Pieces used to measure the pulse interval when a time is given in pulses.
const PRI_PIECES: usize = 9;

/// The state both gates share; see the module doc.
pub struct SwitchDriver<K: GateKind> {
    pub cfg: GateSettings,
    pub router: NoticeRouter<K::Out>,
    source: Option<SwitchSync>,
    /// Samples left out after each switch instant.
    pub guard: u64,
    /// Pieces held while the pulse interval or the sync levels are learned.
    startup: Vec<K::Piece>,
    /// How many of `startup` went into the level learning.
    learned: usize,
    /// Pieces whose lobe is not decided yet (bounded by the tracker's hold).
    pub pending: VecDeque<K::Piece>,
    fed_end: u64,
    /// Switch instants (sample, new lobe) not yet reached by the released pieces.
    pub switches: VecDeque<(u64, usize)>,
    pub current: Option<LobeInForce>,
    last_stamp: Option<Stamp>,
    /// Schedule timing: the cross-check of the schedule against the signal.
    check: Option<ScheduleCheck>,
    /// Sync timing on sample streams: the cross-check of the sync channel against the signal.
    sync_check: Option<SyncStepCheck>,
    /// The capture's labelled stretches (lobe identity for timing 'signal').
    marks: Option<Arc<[LabelledSpan]>>,
}

impl<K: GateKind> SwitchDriver<K> {
    pub fn new(cfg: GateSettings, block: &str) -> Self {
        SwitchDriver {
            cfg,
            router: NoticeRouter::new(block, K::NOTICES),
            source: None,
            guard: 0,
            startup: Vec::new(),
            learned: 0,
            pending: VecDeque::new(),
            fed_end: 0,
            switches: VecDeque::new(),
            current: None,
            last_stamp: None,
            check: None,
            sync_check: None,
            marks: None,
        }
    }

    /// The end of the guard after the switch that began the lobe in force.
    pub fn guard_end(&self) -> u64 {
        let switch_at = self.current.and_then(|c| c.switch_at);
        switch_at.map_or(0, |s| (s + self.guard as i64).max(0) as u64)
    }

    /// A switch instant reached: its lobe is now in force.
    pub fn switch_to(&mut self, at: u64, lobe: usize) {
        self.current = Some(LobeInForce { lobe, dwell_start: at, switch_at: Some(at as i64) });
    }

    /// Sync timing: fold the released samples `[from, to)` of `piece`
    /// (all of the lobe in force) into the sync channel's cross-check.
    pub fn check_released(&mut self, piece: &K::Piece, from: u64, to: u64) {
        let (Some(check), Some(current)) = (self.sync_check.as_mut(), self.current) else {
            return;
        };
        let Some(switch_at) = current.switch_at.and_then(|s| u64::try_from(s).ok()) else {
            return;
        };
        let base = piece.stamp().index;
        if let Some(iq) = piece.iq().get((from - base) as usize..(to - base) as usize) {
            check.add(from, iq, current.lobe, switch_at);
        }
    }

    pub fn lobe_name(&self, lobe: usize) -> Arc<str> {
        Arc::clone(&self.cfg.lobes[lobe])
    }

    fn running(&self) -> bool {
        self.source.as_ref().is_some_and(|s| !s.learning())
    }

    /// Build the switch source once what it needs is known; true when built now.
    fn build_source(&mut self, finishing: bool) -> Result<bool, BlockError> {
        let Some(first) = self.startup.first().map(|s| s.stamp()) else {
            return Ok(false);
        };
        if self.source.is_some() {
            return Ok(false);
        }
        let pri = if self.cfg.needs_pri() {
            if self.startup.len() < PRI_PIECES && !finishing {
                return Ok(false);
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
        let at = |e: String| BlockError::at(e, first.index);
        let (source, guard) =
            self.cfg.source(first.rate, pri, self.marks.as_deref(), K::Piece::ONE_CELL).map_err(at)?;
        self.source = Some(source);
        self.guard = guard;
        self.check = self.cfg.schedule_check(first.rate, pri, guard).map_err(at)?;
        // On sweeps the sweep gate checks the sync channel sweep by sweep.
        if self.cfg.timing == SwitchTiming::Sync && !K::Piece::ONE_CELL {
            self.sync_check = Some(SyncStepCheck::new(self.cfg.lobes.len(), guard as f64));
        }
        Ok(true)
    }

    /// Learn the sync levels (or find the switch train) from the held
    /// pieces, less `head` samples of each; true once they can be replayed.
    fn learn(
        &mut self,
        finishing: bool,
        out: &mut Outputs,
        head: impl Fn(&K::Piece) -> usize,
    ) -> Result<bool, BlockError> {
        let Some(first) = self.startup.first().map(|s| s.stamp()) else {
            return Ok(false);
        };
        let Some(source) = self.source.as_mut() else {
            return Ok(false);
        };
        if !source.learning() {
            return Ok(true);
        }
        let mut enough = false;
        while self.learned < self.startup.len() && !enough {
            let piece = &self.startup[self.learned];
            let (index, iq) = seen_part(piece, head(piece));
            let sync = piece.sync();
            enough = source.learn_from(index, sync, iq).map_err(|e| BlockError::at(e, piece.stamp().index))?;
            self.learned += 1;
        }
        if !enough && !finishing {
            return Ok(false);
        }
        if let Some(learned) =
            source.end_learning(first.index, first.rate).map_err(|e| BlockError::at(e, first.index))?
        {
            out.inform(first, learned);
        }
        Ok(true)
    }

    /// Feed one piece to the switch source and hold it; returns the index
    /// before which every sample's lobe is decided.
    fn feed(&mut self, piece: K::Piece, head: usize, out: &mut Outputs) -> Result<u64, BlockError> {
        let Some(source) = self.source.as_mut() else {
            return Ok(0);
        };
        let index = piece.stamp().index;
        let (seen_index, seen) = seen_part(&piece, head);
        if self.cfg.timing == SwitchTiming::Signal {
            source.feed(seen_index, None, seen)
        } else {
            source.feed(index, piece.sync(), piece.iq())
        }
        .map_err(|e| BlockError::at(e, index))?;
        if let Some(check) = self.check.as_mut() {
            check.add(index, piece.iq(), piece.sync());
        }
        self.fed_end = self.fed_end.max(piece.end());
        self.pending.push_back(piece);
        self.take_events(out);
        Ok(self.source.as_ref().map_or(self.fed_end, |s| s.settled(self.fed_end)))
    }

    /// Warn when the signal disagrees with the schedule, saying what would fit.
    fn cross_check(&mut self, out: &mut Outputs, stamp: Stamp) {
        self.sync_cross_check(out, stamp);
        let Some(found) = self.check.as_mut().and_then(ScheduleCheck::finish) else {
            return;
        };
        // On sweeps the echo's place in each pulse interval and the switch
        // transient make the per-sample fold step by chance; the sweep gate
        // checks the offset sweep by sweep, this check only the drift.
        if K::Piece::ONE_CELL && found.drift_dwell.is_none() {
            return;
        }
        let ms = |samples: f64| format_ms(samples / stamp.rate);
        if let Some(dwell) = found.drift_dwell {
            let scheduled = self.check.as_ref().map_or(dwell, ScheduleCheck::dwell);
            let per_dwell = (dwell - scheduled) / stamp.rate * 1e6;
            let what = format!(
                "the amplitude steps drift against the scheduled switches by {per_dwell:.2} us per dwell \
                 (standard score {:.0}): dwell ≈ {} ms and first_start ≈ {}?",
                found.score,
                fine_ms(dwell / stamp.rate),
                ms(found.first_start)
            );
            self.router.irregular(out, stamp, Irregularity::Schedule, what);
            return;
        }
        let whole = found.dwells.unwrap_or(0);
        if whole == 0 && found.offset.abs() <= self.guard as f64 {
            return; // inside the guard: those samples are left out anyway
        }
        let mut seen = Vec::new();
        if whole != 0 {
            seen.push(format!("the sync levels fit the lobe labels shifted by {whole} dwell(s)"));
        }
        if found.offset.abs() > self.guard as f64 {
            let side = if found.offset > 0.0 { "after" } else { "before" };
            let what = if found.dwells.is_some() { "sync and amplitude steps" } else { "amplitude steps" };
            seen.push(format!("the {what} sit {} {side} the scheduled switches", ms(found.offset.abs())));
        }
        let mut fit = format!("first_start ≈ {}?", ms(found.first_start));
        if let Some(alt) = found.alternative {
            fit.push_str(&format!(" (or {}: a half-dwell step does not tell which lobe comes first)", ms(alt)));
        }
        let what = format!("{} (standard score {:.0}): {fit}", seen.join(", and "), found.score);
        self.router.irregular(out, stamp, Irregularity::Schedule, what);
    }

    /// Warn when the amplitude steps sit away from the sync channel's switches.
    fn sync_cross_check(&mut self, out: &mut Outputs, stamp: Stamp) {
        let Some(found) = self.sync_check.as_mut().and_then(SyncStepCheck::finish) else {
            return;
        };
        let lag = format_ms(found.offset.abs() / stamp.rate);
        let (side, verb) = if found.offset < 0.0 { ("before", "lags") } else { ("after", "leads") };
        let what = format!(
            "the amplitude steps sit {lag} {side} the sync channel's switches (standard score {:.0}): \
             the sync channel {verb} the antenna by about {lag}",
            found.score
        );
        self.router.irregular(out, stamp, Irregularity::Schedule, what);
    }

    /// At the end of the stream: the source places the switches it still holds.
    fn finish_source(&mut self, out: &mut Outputs) {
        if let Some(source) = self.source.as_mut() {
            source.finish(self.fed_end);
        }
        self.take_events(out);
    }

    /// Route the source's events and note switches and the first lobe.
    fn take_events(&mut self, out: &mut Outputs) {
        let Some(source) = self.source.as_mut() else {
            return;
        };
        let rate = self.pending.back().map_or(1.0, |s| s.stamp().rate);
        while let Some(event) = source.pop_event() {
            self.router.report(out, &event, &self.cfg.lobes, rate);
            match event {
                SwitchEvent::Begin { at, lobe, switch_at } => {
                    let dwell_start = switch_at.map_or(at, |s| s.max(0) as u64);
                    self.current = Some(LobeInForce { lobe, dwell_start, switch_at });
                }
                SwitchEvent::Switch { at, lobe } => self.switches.push_back((at, lobe)),
                SwitchEvent::Irregular { .. } | SwitchEvent::Note { .. } => {}
            }
        }
    }
}

/// Seconds as milliseconds, without trailing zeros.
fn format_ms(seconds: f64) -> String {
    let text = format!("{:.3}", seconds * 1e3);
    let text = text.trim_end_matches('0').trim_end_matches('.');
    format!("{text} ms")
}

/// Seconds as milliseconds to the tenth of a microsecond (a dwell that drifts).
fn fine_ms(seconds: f64) -> String {
    format!("{:.4}", seconds * 1e3)
}

/// The samples of a piece the switch finder looks at: all but `head` at its
/// start (a sweep's transmit leakage), with the piece's own index (a sweep
/// is one cell of the finder, which switches at the sweep's start).
fn seen_part<P: SwitchPiece>(piece: &P, head: usize) -> (u64, &[Complex32]) {
    (piece.stamp().index, &piece.iq()[head.min(piece.iq().len())..])
}

/// Median spacing of consecutive piece starts (transmit instants), in samples.
fn pulse_interval<P: SwitchPiece>(pieces: &[P]) -> Option<f64> {
    let mut gaps: Vec<u64> =
        pieces.windows(2).map(|w| w[1].stamp().index.saturating_sub(w[0].stamp().index)).filter(|&g| g > 0).collect();
    if gaps.is_empty() {
        return None;
    }
    gaps.sort_unstable();
    Some(gaps[gaps.len() / 2] as f64)
}

/// What makes a gate itself: its settings and ports, which pieces it takes,
/// and how it hands on the pieces whose lobe is decided.
pub trait GateKind: Send + Sized + 'static {
    type Piece: SwitchPiece;
    /// The switch timing settings and the gate's own.
    type Settings: Settings;
    type In: PortSet;
    type Out: PortSet + OutputPort;
    /// The output that switch instants and irregularities go to.
    const NOTICES: Self::Out;
    /// Split the settings into the switch timing and the gate itself.
    fn build(settings: Self::Settings) -> Result<(GateSettings, Self), BuildError>;
    /// Once the stream's sample rate is known (before the run when the
    /// capture's header tells it, and again at the first piece).
    fn start(&mut self, _first: Stamp) -> Result<(), BlockError> {
        Ok(())
    }
    /// Samples at the head of a piece the switch finder leaves out (a
    /// sweep's transmit leakage, whose strength would hide the switches).
    fn finder_head(&self, _piece: &Self::Piece) -> usize {
        0
    }
    /// Hand on the pending pieces (or parts of them) before sample `upto`.
    fn release(&mut self, driver: &mut SwitchDriver<Self>, upto: u64, out: &mut Outputs);
    /// After the last release: the gate's own end-of-run checks and reports.
    fn finish(
        &mut self,
        driver: &mut SwitchDriver<Self>,
        last: Option<Stamp>,
        out: &mut Outputs,
    ) -> Result<(), BlockError>;
}

/// A gate: the shared driver plus what is specific to one kind.
pub struct SwitchGate<K: GateKind> {
    pub driver: SwitchDriver<K>,
    pub kind: K,
}

impl<K: GateKind> SwitchGate<K> {
    fn run(&mut self, piece: K::Piece, out: &mut Outputs) -> Result<(), BlockError> {
        let head = self.kind.finder_head(&piece);
        let upto = self.driver.feed(piece, head, out)?;
        self.kind.release(&mut self.driver, upto, out);
        Ok(())
    }

    /// Build the source and learn what is needed, then replay the held pieces.
    fn advance(&mut self, finishing: bool, out: &mut Outputs) -> Result<(), BlockError> {
        if self.driver.build_source(finishing)? {
            let first = self.driver.startup.first().map(|s| s.stamp()).unwrap_or(Stamp::new(0, 1.0));
            self.kind.start(first)?;
        }
        let kind = &self.kind;
        if !self.driver.learn(finishing, out, |p| kind.finder_head(p))? {
            return Ok(());
        }
        self.driver.learned = 0;
        for piece in std::mem::take(&mut self.driver.startup) {
            self.run(piece, out)?;
        }
        Ok(())
    }
}

impl<K: GateKind> TypedBlock for SwitchGate<K> {
    type Settings = K::Settings;
    type In = K::In;
    type Out = K::Out;

    fn build(settings: K::Settings, ctx: &BuildContext) -> Result<Self, BuildError> {
        let (timing, kind) = K::build(settings)?;
        Ok(SwitchGate { driver: SwitchDriver::new(timing, &ctx.name), kind })
    }

    /// The gate names the lobes of what it hands on. Refused before the
    /// run: sync timing on a capture without a sync channel, and times that
    /// do not fit the stream's rate (when the rate, and for times in pulses
    /// the pulse interval, are known).
    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError> {
        let mut facts = facts.merged();
        let cfg = &self.driver.cfg;
        if cfg.timing.needs_sync_channel() && facts.channels.is_some_and(|c| !c.sync) {
            return Err(BlockError::new(format!(
                "parameter 'timing' is '{}' but the capture has no sync channel; map one, or use timing: schedule",
                cfg.timing
            )));
        }
        self.driver.marks = facts.marks.clone();
        let cfg = &self.driver.cfg;
        if cfg.timing == SwitchTiming::Signal && cfg.known_lobe.is_none() {
            cfg.lobe_from_marks(facts.marks.as_deref(), 1.0).ok_or_else(|| BlockError::new(cfg.identity_missing()))?;
        }
        if let Some(rate) = facts.rate.filter(|r| *r > 0.0 && r.is_finite()) {
            let pri = facts.pri_samples;
            if !cfg.needs_pri() || pri.is_some() {
                let (_, guard) =
                    cfg.source(rate, pri, facts.marks.as_deref(), K::Piece::ONE_CELL).map_err(BlockError::new)?;
                cfg.schedule_check(rate, pri, guard).map_err(BlockError::new)?;
            }
            self.kind.start(Stamp::new(0, rate))?;
        }
        facts.lobes = Some(self.driver.cfg.lobes.iter().cloned().collect());
        Ok(facts)
    }

    fn process(&mut self, _port: K::In, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let Some(piece) = K::Piece::from_item(item) else {
            return Ok(());
        };
        if piece.iq().is_empty() {
            return Ok(());
        }
        self.driver.last_stamp = Some(piece.last_stamp());
        if self.driver.running() {
            return self.run(piece, out);
        }
        self.driver.startup.push(piece);
        self.advance(false, out)
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.advance(true, out)?;
        self.driver.finish_source(out);
        self.kind.release(&mut self.driver, u64::MAX, out);
        let last = self.driver.last_stamp;
        self.kind.finish(&mut self.driver, last, out)?;
        if let Some(stamp) = last {
            self.driver.cross_check(out, stamp);
            self.driver.router.summarise(out, stamp);
        }
        Ok(())
    }
}
