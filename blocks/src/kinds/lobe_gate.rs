//! `lobe_gate`: cuts a sample stream into per-lobe dwell segments, from the
//! recorded sync channel or a known switch schedule, leaving out a guard
//! time after every switch instant.

use super::gate_common::{GateKind, GateSettings, SwitchDriver, SwitchGate};
use crate::block::{BlockError, BlockSpec, Outputs};
use crate::error::{BuildError, ParamError};
use crate::item::{Item, ItemKind, LobeSegment, LobeTag, SampleChunk, Stamp};
use crate::param::{ParamSpec, Params};
use crate::typed::Settings;

pub const SPEC: BlockSpec = BlockSpec::typed::<SwitchGate<SegmentCutter>>(
    "lobe_gate",
    "Labels samples with the active lobe (from the sync staircase or a schedule) and hands them on as \
     per-dwell segments without the guard time after each switch; reports irregular dwells, stuck or \
     stray sync and lobes out of order.",
);

crate::block_ports! {
    inputs pub enum LobeGateIn {
        Samples = required("samples", ItemKind::Samples, "capture chunks (with a sync channel for sync timing)"),
    }
}

crate::block_ports! {
    outputs pub enum LobeGateOut {
        Segments = optional("segments", ItemKind::Segment, "lobe segments; the last of each dwell is marked"),
        Notices = optional("notices", ItemKind::Notice, "switch instants and irregularities, for timelines"),
    }
}

/// Settings of `lobe_gate`: the switch timing alone (times in seconds or
/// samples; a sample stream has no pulse interval).
#[derive(Clone, Debug)]
pub struct LobeGateSettings {
    pub switching: GateSettings,
}

impl Settings for LobeGateSettings {
    const PARAMS: &'static [ParamSpec] = &GateSettings::params(false);
    fn from_params(p: &Params) -> Result<Self, ParamError> {
        Ok(LobeGateSettings { switching: GateSettings::read(p, false)? })
    }
}

/// What only `lobe_gate` does: cut the settled samples into per-dwell segments.
pub struct SegmentCutter {
    /// Dwells begun since the first lobe was known.
    dwell: u64,
    /// The latest segment, held until we know whether it ends its dwell.
    held: Option<LobeSegment>,
    /// Switches passed and segments handed on after the first switch: a run
    /// of switches with no segment means the guard swallows every dwell
    /// (an error, not an empty table).
    switches_seen: u64,
    segments_out: u64,
}

type Driver = SwitchDriver<SegmentCutter>;

impl SegmentCutter {
    fn label(&mut self, d: &mut Driver, piece: SampleChunk, out: &mut Outputs) {
        let end = piece.stamp.index + piece.len() as u64;
        let mut from = piece.stamp.index;
        while let Some(&(at, lobe)) = d.switches.front() {
            if at >= end {
                break;
            }
            let at = at.max(from);
            d.check_released(&piece, from, at);
            self.emit(d, &piece, from, at, out);
            d.switches.pop_front();
            self.flush(true, out);
            self.switches_seen += 1;
            self.dwell += u64::from(d.current.is_some());
            d.switch_to(at, lobe);
            from = at;
        }
        d.check_released(&piece, from, end);
        self.emit(d, &piece, from, end, out);
    }

    /// Emit samples `[from, to)` of `piece` (absolute indices) minus the guard.
    fn emit(&mut self, d: &Driver, piece: &SampleChunk, from: u64, to: u64, out: &mut Outputs) {
        let start = from.max(d.guard_end());
        let Some(current) = d.current else { return };
        if start >= to {
            return;
        }
        let tag = LobeTag {
            lobe: current.lobe,
            name: d.lobe_name(current.lobe),
            dwell: self.dwell,
            dwell_start: current.dwell_start,
        };
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
            out.push(LobeGateOut::Segments, Item::Segment(Box::new(seg)));
        }
    }
}

impl GateKind for SegmentCutter {
    type Piece = SampleChunk;
    type Settings = LobeGateSettings;
    type In = LobeGateIn;
    type Out = LobeGateOut;
    const NOTICES: LobeGateOut = LobeGateOut::Notices;

    fn build(s: LobeGateSettings) -> Result<(GateSettings, Self), BuildError> {
        Ok((s.switching, SegmentCutter { dwell: 0, held: None, switches_seen: 0, segments_out: 0 }))
    }

    /// Hand on every pending sample before `upto`.
    fn release(&mut self, d: &mut Driver, upto: u64, out: &mut Outputs) {
        while let Some(front) = d.pending.front_mut() {
            let (start, len) = (front.stamp.index, front.len());
            if start >= upto {
                break;
            }
            let take = ((upto - start) as usize).min(len);
            let piece = if take == len {
                d.pending.pop_front().expect("front exists")
            } else {
                let piece = front.slice(0..take);
                *front = front.slice(take..len);
                piece
            };
            self.label(d, piece, out);
        }
    }

    fn finish(&mut self, d: &mut Driver, last: Option<Stamp>, out: &mut Outputs) -> Result<(), BlockError> {
        self.flush(true, out);
        if self.segments_out == 0 && self.switches_seen >= 2 {
            return Err(BlockError::at(
                format!(
                    "all {} dwells lay inside the guard of {} samples after their switch: no samples were handed on; make 'guard' shorter than a dwell",
                    self.switches_seen, d.guard
                ),
                last.map_or(0, |s| s.index),
            ));
        }
        Ok(())
    }
}
