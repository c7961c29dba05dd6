//! The leading edge of a transmit leakage pulse, followed to its top.

/// Longest leading edge followed, samples.
pub(super) const RISE_MAX: usize = 64;

/// The samples of a leakage pulse from its threshold crossing on. The
/// transmit instant is the first sample within 3 dB of the pulse's top: the
/// crossing itself would move with the leakage level, and a pulse-compressed
/// leakage rises over a pulse length before its peak.
pub(super) struct Rise {
    samples: Vec<(u64, f32)>,
    top: f32,
}

impl Rise {
    /// A rise from sample `n`, kept in `buf` (a buffer of an earlier rise,
    /// so following a pulse allocates nothing).
    pub(super) fn new(mut buf: Vec<(u64, f32)>, n: u64, p: f32) -> Rise {
        buf.clear();
        buf.push((n, p));
        Rise { samples: buf, top: p }
    }
    pub(super) fn push(&mut self, n: u64, p: f32) {
        self.samples.push((n, p));
        self.top = self.top.max(p);
    }
    /// The samples buffer, for the next rise.
    pub(super) fn into_buffer(self) -> Vec<(u64, f32)> {
        self.samples
    }
    pub(super) fn len(&self) -> usize {
        self.samples.len()
    }
    pub(super) fn instant(&self, at_peak: bool) -> u64 {
        if at_peak {
            return self.samples.iter().find(|(_, p)| *p >= self.top).map_or(self.samples[0].0, |(n, _)| *n);
        }
        let half = 0.5 * self.top;
        self.samples.iter().find(|(_, p)| *p >= half).map_or(self.samples[0].0, |(n, _)| *n)
    }
}
