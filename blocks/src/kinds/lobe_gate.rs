//! `lobe_gate`: cuts a sample stream into per-lobe dwell segments, from the
//! recorded sync channel or a known switch schedule, leaving out a guard
//! time after every switch instant.

use super::gate_common::{GateConfig, NoticeRouter, gate_params};
use crate::block::{Block, BlockError, BlockSpec, BuildContext, Outputs, PortSpec};
use crate::dsp::switch_sync::{SwitchEvent, SwitchSync};
use crate::item::{Item, ItemKind, LobeSegment, LobeTag, SampleChunk, Stamp};
use crate::param::{ParamSpec, Params};
use std::collections::VecDeque;
use std::sync::Arc;

const PARAMS: [ParamSpec; 9] = gate_params(false);

pub const SPEC: BlockSpec = BlockSpec {
    kind: "lobe_gate",
    doc: "Labels samples with the active lobe (from the sync staircase or a schedule) and hands them on as \
          per-dwell segments without the guard time after each switch; reports irregular dwells, stuck or \
          stray sync and lobes out of order.",
    inputs: &[PortSpec::required("samples", ItemKind::Samples, "capture chunks (with a sync channel for sync timing)")],
    outputs: &[
        PortSpec::optional("segments", ItemKind::Segment, "lobe segments; the last of each dwell is marked"),
        PortSpec::optional("notices", ItemKind::Notice, "switch instants and irregularities, for timelines"),
    ],
    params: &PARAMS,
    build,
};

fn build(p: &Params, ctx: &BuildContext) -> Result<Box<dyn Block>, crate::error::BuildError> {
    Ok(Box::new(LobeGate {
        cfg: GateConfig::from_params(p)?,
        router: NoticeRouter::new(&ctx.name, 1),
        source: None,
        guard: 0,
        learn_buf: Vec::new(),
        pending: VecDeque::new(),
        fed_end: 0,
        switches: VecDeque::new(),
        tag: None,
        guard_until: 0,
        held: None,
        last_stamp: None,
        switches_seen: 0,
        segments_out: 0,
    }))
}

struct LobeGate {
    cfg: GateConfig,
    router: NoticeRouter,
    source: Option<SwitchSync>,
    guard: u64,
    /// Chunks of the learning window, replayed once the levels are known.
    learn_buf: Vec<SampleChunk>,
    /// Chunks whose lobe is not decided yet (bounded by the tracker's hold).
    pending: VecDeque<SampleChunk>,
    fed_end: u64,
    switches: VecDeque<(u64, usize)>,
    tag: Option<LobeTag>,
    guard_until: u64,
    /// The latest segment, held until we know whether it ends its dwell.
    held: Option<LobeSegment>,
    last_stamp: Option<Stamp>,
    /// Switches passed and segments handed on after the first switch: a run
    /// of switches with no segment means the guard swallows every dwell
    /// (an error, not an empty table).
    switches_seen: u64,
    segments_out: u64,
}

impl LobeGate {
    fn end_learning(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        let first = self.learn_buf.first().map(|c| c.stamp);
        let Some(source) = self.source.as_mut() else {
            return Ok(());
        };
        source.end_learning().map_err(|e| BlockError::at(e, first.map_or(0, |s| s.index)))?;
        if let (Some(levels), Some(stamp)) = (source.levels(), first) {
            let list: Vec<String> = levels.iter().zip(&self.cfg.names).map(|(l, n)| format!("{n} {l:.3}")).collect();
            out.notice(stamp, format!("learned sync levels: {}", list.join(", ")));
        }
        for chunk in std::mem::take(&mut self.learn_buf) {
            self.run(chunk, out)?;
        }
        Ok(())
    }

    fn run(&mut self, chunk: SampleChunk, out: &mut Outputs) -> Result<(), BlockError> {
        let Some(source) = self.source.as_mut() else {
            return Ok(());
        };
        let index = chunk.stamp.index;
        source.feed(index, chunk.sync.as_deref(), chunk.len()).map_err(|e| BlockError::at(e, index))?;
        self.fed_end = self.fed_end.max(index + chunk.len() as u64);
        self.pending.push_back(chunk);
        self.take_events(out);
        let upto = self.source.as_ref().map_or(self.fed_end, |s| s.settled(self.fed_end));
        self.release(upto, out);
        Ok(())
    }

    fn take_events(&mut self, out: &mut Outputs) {
        let Some(source) = self.source.as_mut() else {
            return;
        };
        let rate = self.pending.back().map_or(1.0, |c| c.stamp.rate);
        while let Some(event) = source.pop_event() {
            self.router.report(out, &event, &self.cfg.names, rate);
            match event {
                SwitchEvent::Begin { at, lobe, switch_at } => {
                    let start = switch_at.map_or(at, |s| s.max(0) as u64);
                    self.tag =
                        Some(LobeTag { lobe, name: Arc::clone(&self.cfg.names[lobe]), dwell: 0, dwell_start: start });
                    self.guard_until = switch_at.map_or(0, |s| (s + self.guard as i64).max(0) as u64);
                }
                SwitchEvent::Switch { at, lobe } => self.switches.push_back((at, lobe)),
                SwitchEvent::Irregular { .. } => {}
            }
        }
    }

    /// Hand on every pending sample before `upto`.
    fn release(&mut self, upto: u64, out: &mut Outputs) {
        while let Some(front) = self.pending.front_mut() {
            let (start, len) = (front.stamp.index, front.len());
            if start >= upto {
                break;
            }
            let take = ((upto - start) as usize).min(len);
            let piece = if take == len {
                self.pending.pop_front().expect("front exists")
            } else {
                let piece = front.slice(0..take);
                *front = front.slice(take..len);
                piece
            };
            self.label(piece, out);
        }
    }

    fn label(&mut self, piece: SampleChunk, out: &mut Outputs) {
        let end = piece.stamp.index + piece.len() as u64;
        let mut from = piece.stamp.index;
        while let Some(&(at, lobe)) = self.switches.front() {
            if at >= end {
                break;
            }
            let at = at.max(from);
            self.emit(&piece, from, at, out);
            self.switches.pop_front();
            self.flush(true, out);
            self.switches_seen += 1;
            let dwell = self.tag.as_ref().map_or(0, |t| t.dwell + 1);
            self.tag = Some(LobeTag { lobe, name: Arc::clone(&self.cfg.names[lobe]), dwell, dwell_start: at });
            self.guard_until = at + self.guard;
            from = at;
        }
        self.emit(&piece, from, end, out);
    }

    /// Emit samples `[from, to)` of `piece` (absolute indices) minus the guard.
    fn emit(&mut self, piece: &SampleChunk, from: u64, to: u64, out: &mut Outputs) {
        let start = from.max(self.guard_until);
        let Some(tag) = self.tag.clone() else { return };
        if start >= to {
            return;
        }
        let base = piece.stamp.index;
        let chunk = piece.slice((start - base) as usize..(to - base) as usize);
        self.flush(false, out);
        self.held = Some(LobeSegment { tag, chunk, dwell_end: false });
    }

    fn flush(&mut self, dwell_end: bool, out: &mut Outputs) {
        if let Some(mut seg) = self.held.take() {
            // The dwell before the first switch seen is not cut by a guard.
            self.segments_out += u64::from(self.switches_seen > 0);
            seg.dwell_end = dwell_end;
            out.push(0, Item::Segment(Box::new(seg)));
        }
    }
}

impl Block for LobeGate {
    fn process(&mut self, _port: usize, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let Item::Samples(chunk) = item else {
            return Ok(());
        };
        if chunk.is_empty() {
            return Ok(());
        }
        self.last_stamp = Some(chunk.stamp.after(chunk.len()));
        if self.source.is_none() {
            let (source, guard) = self.cfg.source(chunk.stamp.rate, None).map_err(BlockError::new)?;
            self.source = Some(source);
            self.guard = guard;
        }
        let learning = self.source.as_ref().is_some_and(|s| s.learning());
        if !learning {
            return self.run(chunk, out);
        }
        let Some(sync) = chunk.sync.clone() else {
            return Err(BlockError::at(
                "timing is 'sync' but the capture has no sync channel; map one, or use timing: schedule",
                chunk.stamp.index,
            ));
        };
        self.learn_buf.push(chunk);
        let enough = self.source.as_mut().is_some_and(|s| s.learn_from(&sync));
        if enough { self.end_learning(out) } else { Ok(()) }
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        if !self.learn_buf.is_empty() {
            self.end_learning(out)?;
        }
        self.take_events(out);
        self.release(u64::MAX, out);
        self.flush(true, out);
        if self.segments_out == 0 && self.switches_seen >= 2 {
            return Err(BlockError::at(
                format!(
                    "all {} dwells lay inside the guard of {} samples after their switch: no samples were handed on; make 'guard' shorter than a dwell",
                    self.switches_seen, self.guard
                ),
                self.last_stamp.map_or(0, |s| s.index),
            ));
        }
        if let Some(stamp) = self.last_stamp {
            self.router.summarise(out, stamp);
        }
        Ok(())
    }
}
