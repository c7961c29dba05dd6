//! Cutting the stream into sweeps between the transmit instants found:
//! the samples stay in the capture's chunks and a sweep is a view of them,
//! except where a sweep spans two chunks or its leakage must be blanked in
//! samples another block also reads (then one buffer holds all of a step's
//! blanked copies).

use super::{FramerOut, PulseFramer};
use crate::block::Outputs;
use crate::item::{Item, SampleChunk, Span, Stamp, Sweep};
use num_complex::Complex32;
use std::ops::Range;

impl PulseFramer {
    /// Zero the transmit leakage after this step's instants in the chunk
    /// itself when this block is its only reader (no copy), then keep it.
    pub(super) fn blank_in_place(&mut self, mut chunk: SampleChunk) {
        self.blanked_in_place = 0..0;
        let blank = self.setup.as_ref().map_or(0, |s| s.plan.blank);
        let (start, end) = (chunk.stamp.index, chunk.stamp.index + chunk.len() as u64);
        if blank > 0
            && let Some(iq) = chunk.iq.get_mut()
        {
            for &(n, _) in self.found.iter().filter(|(n, _)| (start..end).contains(n)) {
                let a = (n - start) as usize;
                let b = (a + blank).min(iq.len());
                iq[a..b].fill(Complex32::new(0.0, 0.0));
            }
            self.blanked_in_place = start..end;
        }
        self.pending.push_back(chunk);
    }

    /// Cut the sweeps between the instants found so far.
    pub(super) fn cut_found(&mut self) {
        for (n, predicted) in std::mem::take(&mut self.found) {
            if let Some(open) = self.open {
                self.emit(open, n);
                self.pulse += 1;
            }
            self.open = Some(Opening { at: n, predicted, blanked: self.blanked_in_place.contains(&n) });
            self.trim(n);
        }
    }

    /// Drop the pending chunks that end before `n`. A chunk holding `n` is
    /// kept whole: sweeps are cut from chunks by their stamps, and slicing
    /// it at every instant cost reference counting per sweep.
    pub(super) fn trim(&mut self, n: u64) {
        while self.pending.front().is_some_and(|c| c.stamp.index + c.len() as u64 <= n) {
            self.pending.pop_front();
        }
    }

    /// Hand on the sweep from `open` to `to` from the pending samples (held
    /// until [`Self::release_held`], so blanked copies can share one buffer).
    pub(super) fn emit(&mut self, open: Opening, to: u64) {
        let Some(s) = self.setup.as_ref() else { return };
        let Opening { at: from, predicted, blanked: blanked_already } = open;
        let blank = s.plan.blank;
        let overlaps = |c: &&SampleChunk| c.stamp.index < to && c.stamp.index + c.len() as u64 > from;
        let mut parts = self.pending.iter().filter(overlaps);
        let Some(first) = parts.next() else { return };
        let whole = first.stamp.index <= from && first.stamp.index + first.len() as u64 >= to && parts.next().is_none();
        let zero = Complex32::new(0.0, 0.0);
        let (iq, sync) = if whole {
            let r = (from - first.stamp.index) as usize..(to - first.stamp.index) as usize;
            let iq = if blank > 0 && !blanked_already {
                // Blanking writes to the samples: the sweep needs its own copy,
                // made in the buffer shared by this step's blanked sweeps.
                if self.copies.capacity() == 0 {
                    self.copies.reserve(first.len());
                }
                let at = self.copies.len();
                self.copies.extend_from_slice(&first.iq[r.clone()]);
                let blanked = blank.min(r.len());
                self.copies[at..at + blanked].fill(zero);
                HeldIq::Copied(at..self.copies.len())
            } else {
                HeldIq::Ready(first.iq.slice(r.clone()))
            };
            (iq, first.sync.as_ref().map(|y| y.slice(r)))
        } else {
            let mut iq: Vec<Complex32> = Vec::with_capacity((to - from) as usize);
            let mut sync: Option<Vec<f32>> =
                self.pending.iter().filter(overlaps).all(|c| c.sync.is_some()).then(Vec::new);
            for c in self.pending.iter().filter(overlaps) {
                let a = from.max(c.stamp.index) - c.stamp.index;
                let b = to.min(c.stamp.index + c.len() as u64) - c.stamp.index;
                let r = a as usize..b as usize;
                iq.extend_from_slice(&c.iq[r.clone()]);
                if let (Some(v), Some(y)) = (sync.as_mut(), &c.sync) {
                    v.extend_from_slice(&y[r]);
                }
            }
            let blanked = blank.min(iq.len());
            iq[..blanked].fill(zero);
            (HeldIq::Ready(Span::new(iq)), sync.map(Span::new))
        };
        let blanked = blank.min((to - from) as usize);
        self.held.push(HeldSweep { from, pulse: self.pulse, iq, sync, blanked, predicted });
    }

    /// Hand on the sweeps emitted so far, in order.
    pub(super) fn release_held(&mut self, out: &mut Outputs) {
        let Some(rate) = self.setup.as_ref().map(|s| s.plan.rate) else { return };
        let mut copies: Option<Span<Complex32>> = None;
        for h in self.held.drain(..) {
            let iq = match h.iq {
                HeldIq::Ready(span) => span,
                HeldIq::Copied(r) => copies.get_or_insert_with(|| Span::new(std::mem::take(&mut self.copies))).slice(r),
            };
            out.push(
                FramerOut::Sweeps,
                Item::Sweep(Sweep {
                    stamp: Stamp::new(h.from, rate),
                    pulse: h.pulse,
                    iq,
                    sync: h.sync,
                    blanked: h.blanked.try_into().unwrap_or(u32::MAX),
                    predicted: h.predicted,
                    lobe: None,
                }),
            );
        }
    }
}

/// A transmit instant that opened a sweep.
#[derive(Clone, Copy)]
pub(super) struct Opening {
    pub(super) at: u64,
    pub(super) predicted: bool,
    /// Its leakage was zeroed in the capture chunk itself.
    pub(super) blanked: bool,
}

/// Where a held sweep's samples are.
pub(super) enum HeldIq {
    /// A range of the shared buffer of blanked copies.
    Copied(Range<usize>),
    Ready(Span<Complex32>),
}

/// A sweep cut but not yet handed on.
pub(super) struct HeldSweep {
    pub(super) from: u64,
    pub(super) pulse: u64,
    pub(super) iq: HeldIq,
    pub(super) sync: Option<Span<f32>>,
    pub(super) blanked: usize,
    pub(super) predicted: bool,
}
