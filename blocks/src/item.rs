//! Stream items: what flows along the wires of a graph.
//!
//! Every item knows exactly when it happened: the absolute sample index of its
//! first sample (counted from the capture's first sample) and the sample rate.
//! Sample data sits behind [`Span`], a cheap shared view, so fanning a chunk
//! out to several blocks or cutting a sweep out of a chunk copies no samples.

use num_complex::Complex32;
use std::fmt;
use std::ops::{Deref, Range};
use std::sync::{Arc, Mutex};

/// A shared, immutable view of part of a sample buffer. Cloning is O(1).
#[derive(Clone)]
pub struct Span<T> {
    data: Arc<Buffer<T>>,
    range: Range<usize>,
}

/// The buffer behind spans, and the pool it goes back to when the last view
/// of it is dropped.
struct Buffer<T> {
    vec: Vec<T>,
    home: Option<Arc<BufferPool<T>>>,
}

impl<T> Drop for Buffer<T> {
    fn drop(&mut self) {
        if let Some(home) = self.home.take() {
            home.put(std::mem::take(&mut self.vec));
        }
    }
}

/// Buffers a producer hands out in spans and gets back for refilling once
/// every block is done with them, so a long capture runs on a few buffers
/// (no allocation, and memory the cache has seen).
pub struct BufferPool<T> {
    free: Mutex<Vec<Vec<T>>>,
    keep: usize,
}

impl<T> BufferPool<T> {
    /// A pool holding at most `keep` idle buffers (more are freed).
    pub fn new(keep: usize) -> Arc<Self> {
        Arc::new(BufferPool { free: Mutex::new(Vec::with_capacity(keep)), keep })
    }

    /// An idle buffer, emptied (a new one when none is idle).
    pub fn take(&self) -> Vec<T> {
        let mut v = self.take_as_left();
        v.clear();
        v
    }

    /// An idle buffer with whatever its last user left in it (a new, empty
    /// one when none is idle): for a producer that overwrites it anyway.
    pub fn take_as_left(&self) -> Vec<T> {
        self.free.lock().unwrap_or_else(|e| e.into_inner()).pop().unwrap_or_default()
    }

    fn put(&self, v: Vec<T>) {
        if v.capacity() == 0 {
            return;
        }
        let mut free = self.free.lock().unwrap_or_else(|e| e.into_inner());
        if free.len() < self.keep {
            free.push(v);
        }
    }
}

impl<T> Span<T> {
    /// Take ownership of a buffer without copying it.
    pub fn new(data: Vec<T>) -> Self {
        Self::with_home(data, None)
    }

    /// Like [`Span::new`], and the buffer goes back to `pool` when the last
    /// view of it is dropped.
    pub fn pooled(data: Vec<T>, pool: &Arc<BufferPool<T>>) -> Self {
        Self::with_home(data, Some(Arc::clone(pool)))
    }

    fn with_home(vec: Vec<T>, home: Option<Arc<BufferPool<T>>>) -> Self {
        let len = vec.len();
        Span { data: Arc::new(Buffer { vec, home }), range: 0..len }
    }

    /// The viewed samples for writing, when this is the only view of the
    /// buffer (a block that is the sole reader of a chunk may then change it
    /// in place instead of copying it).
    pub fn get_mut(&mut self) -> Option<&mut [T]> {
        let range = self.range.clone();
        Arc::get_mut(&mut self.data).map(|b| &mut b.vec[range])
    }

    /// A sub-view, relative to this view. Panics if out of bounds, like slicing.
    pub fn slice(&self, r: Range<usize>) -> Self {
        assert!(r.start <= r.end && r.end <= self.range.len(), "span slice out of bounds");
        Span { data: Arc::clone(&self.data), range: self.range.start + r.start..self.range.start + r.end }
    }
}

impl<T> Deref for Span<T> {
    type Target = [T];
    fn deref(&self) -> &[T] {
        &self.data.vec[self.range.clone()]
    }
}

impl<T> From<Vec<T>> for Span<T> {
    fn from(v: Vec<T>) -> Self {
        Span::new(v)
    }
}

impl<T: fmt::Debug> fmt::Debug for Span<T> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "Span(len {})", self.len())
    }
}

/// Where an item sits in time: first sample index and sample rate.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Stamp {
    /// Absolute index of the first sample, from the capture's first sample.
    pub index: u64,
    /// Samples per second of the stream the index counts.
    pub rate: f64,
}

impl Stamp {
    pub fn new(index: u64, rate: f64) -> Self {
        Stamp { index, rate }
    }
    /// Seconds from the capture's first sample.
    #[inline]
    pub fn seconds(&self) -> f64 {
        self.index as f64 / self.rate
    }
    /// The sample rate, or an error naming the block when it is not a
    /// positive finite number (every rate-dependent block needs one).
    pub fn checked_rate(&self, block: &str) -> Result<f64, crate::block::BlockError> {
        if self.rate.is_finite() && self.rate > 0.0 {
            Ok(self.rate)
        } else {
            Err(crate::block::BlockError::at(
                format!("{block}: items carry a sample rate of {} S/s", self.rate),
                self.index,
            ))
        }
    }

    /// The stamp `n` samples later.
    pub fn after(&self, n: usize) -> Stamp {
        Stamp { index: self.index + n as u64, rate: self.rate }
    }
}

/// A run of consecutive complex baseband samples, with the capture's auxiliary
/// real channels (switch sync, transmit trigger) aligned sample for sample.
#[derive(Clone, Debug)]
pub struct SampleChunk {
    pub stamp: Stamp,
    pub iq: Span<Complex32>,
    pub sync: Option<Span<f32>>,
    pub trigger: Option<Span<f32>>,
}

impl SampleChunk {
    #[inline]
    pub fn len(&self) -> usize {
        self.iq.len()
    }
    pub fn is_empty(&self) -> bool {
        self.iq.is_empty()
    }
    /// A sub-chunk of samples `r`, sharing the buffers.
    pub fn slice(&self, r: Range<usize>) -> SampleChunk {
        SampleChunk {
            stamp: self.stamp.after(r.start),
            iq: self.iq.slice(r.clone()),
            sync: self.sync.as_ref().map(|s| s.slice(r.clone())),
            trigger: self.trigger.as_ref().map(|s| s.slice(r)),
        }
    }
}

/// Which lobe an item belongs to, and which dwell of the switch cycle.
#[derive(Clone, Debug, PartialEq)]
pub struct LobeTag {
    /// Position of the lobe in the configured lobe order.
    pub lobe: usize,
    /// The lobe's user name (e.g. "right").
    pub name: Arc<str>,
    /// Running count of dwells since the capture start (0 for the first seen).
    pub dwell: u64,
    /// Sample index where this dwell's switch instant was found (or scheduled).
    pub dwell_start: u64,
}

/// One pulse repetition interval, starting at its transmit instant.
#[derive(Clone, Debug)]
pub struct Sweep {
    /// Stamp of the transmit instant (range bin 0).
    pub stamp: Stamp,
    /// Pulse count since the capture start, including pulses found missing.
    pub pulse: u64,
    /// Samples from the transmit instant up to the next one (leakage blanked).
    pub iq: Span<Complex32>,
    /// The sync channel over the same samples, when the capture has one.
    pub sync: Option<Span<f32>>,
    /// Samples blanked at the start for transmit leakage (32 bits keep the
    /// item small enough to be moved without a call to `memcpy`).
    pub blanked: u32,
    /// True when no transmit instant was seen and this one was predicted.
    pub predicted: bool,
    /// Set by a switch-sync gate.
    pub lobe: Option<LobeTag>,
}

/// Samples of one lobe within one dwell, with the switch guard left out.
#[derive(Clone, Debug)]
pub struct LobeSegment {
    pub tag: LobeTag,
    pub chunk: SampleChunk,
    /// True for the last segment of the dwell (the next segment starts a new dwell).
    pub dwell_end: bool,
}

/// The integrated result of one lobe dwell.
#[derive(Clone, Debug, PartialEq)]
pub struct DwellRecord {
    pub tag: LobeTag,
    /// Stamp of the middle of the samples used.
    pub mid: Stamp,
    /// Amplitude estimate (voltage-like; noise power removed). NaN when the
    /// noise-corrected power came out at or below zero.
    pub amplitude: f64,
    /// Noise power per sample, in the same units as |x|^2.
    pub noise_power: f64,
    /// Per-pulse (or per-dwell, for beacons) signal energy over noise power, linear.
    pub snr: f64,
    /// Expected variance of ln(amplitude) (docs/derivations.md §4).
    pub var_ln_amp: f64,
    /// Target range in metres, where the integrator measured one.
    pub range_m: Option<f64>,
    /// Pulses (or, for beacons, samples) integrated.
    pub used: u64,
}

/// Why an estimate is not an ordinary number.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Flag {
    Ok,
    /// The ratio lies outside the beam model's monotonic region.
    OutOfRange,
    /// A lobe's noise-corrected power was not positive.
    NoSignal,
    /// Rejected by the tracker's gate.
    Outlier,
}

impl Flag {
    pub fn as_str(&self) -> &'static str {
        match self {
            Flag::Ok => "ok",
            Flag::OutOfRange => "out_of_range",
            Flag::NoSignal => "no_signal",
            Flag::Outlier => "outlier",
        }
    }
}

/// An angle error from one pair of dwells.
#[derive(Clone, Debug, PartialEq)]
pub struct AngleEstimate {
    /// Mid time of the pair (mean of the two dwells' mid stamps).
    pub stamp: Stamp,
    /// Axis (pair) name, e.g. "az".
    pub axis: Arc<str>,
    /// Angle off boresight in degrees; `None` unless `flag` is Ok or Outlier.
    pub error_deg: Option<f64>,
    /// Expected one-sigma spread of `error_deg`, degrees.
    pub sigma_deg: f64,
    /// SNR of the weaker dwell, dB.
    pub snr_db: f64,
    /// 20 log10 of the amplitude ratio (positive lobe over negative), dB.
    pub ratio_db: f64,
    pub range_m: Option<f64>,
    pub flag: Flag,
    /// Smoothed error from a tracker, degrees.
    pub tracked_deg: Option<f64>,
    /// Expected one-sigma spread of `tracked_deg`, degrees.
    pub tracked_sigma_deg: Option<f64>,
    /// Absolute target angle (pointing + tracked error), degrees.
    pub absolute_deg: Option<f64>,
}

/// A labelled row for table outputs and pictures (free-form numeric columns).
///
/// The named cells are shared: a row fanned out to several blocks, or
/// repeated unchanged by its producer, is one allocation however many hold
/// it. A row is never changed once made (build a new one instead).
#[derive(Clone, Debug, PartialEq)]
pub struct TableRow {
    pub stamp: Stamp,
    pub fields: RowCells,
}

/// The named cells of a [`TableRow`], shared.
pub type RowCells = Arc<[(Arc<str>, Cell)]>;

impl TableRow {
    /// The cell of the column `name`, if the row has one.
    pub fn cell(&self, name: &str) -> Option<&Cell> {
        self.fields.iter().find(|(n, _)| &**n == name).map(|(_, c)| c)
    }
}

/// One cell of a [`TableRow`].
#[derive(Clone, Debug, PartialEq)]
pub enum Cell {
    Num(f64),
    Int(i64),
    Text(Arc<str>),
    Empty,
}

/// Something a block noticed that a person should know about (an irregular
/// dwell, a missing pulse, a noise-floor mismatch). Also drawn on timelines.
#[derive(Clone, Debug, PartialEq)]
pub struct Notice {
    pub stamp: Stamp,
    pub block: Arc<str>,
    pub what: String,
    pub severity: Severity,
}

impl Notice {
    /// A notice whose severity is told from its text (see [`Severity::of_text`]).
    pub fn new(stamp: Stamp, block: Arc<str>, what: impl Into<String>) -> Notice {
        let what = what.into();
        Notice { stamp, block, severity: Severity::of_text(&what), what }
    }
}

/// Whether a notice only informs (what was learned or done as planned) or
/// warns (the data or the settings disagree with what the run assumes).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Severity {
    #[default]
    Information,
    Warning,
}

/// Words by which a notice raised without a severity names an irregularity.
const IRREGULAR_WORDS: [&str; 14] = [
    "irregular",
    "stuck",
    "stray",
    "out of order",
    "missing",
    "skipped",
    "dropped",
    "left out",
    "not written",
    "mismatch",
    "differ",
    "jumps",
    "alias",
    "ignored",
];

impl Severity {
    /// The severity of a notice raised without one (blocks written before
    /// severities existed, and external programs' lines): a warning when its
    /// text names an irregularity, else information. Information is the
    /// default because a clean capture must run without warnings, so only
    /// what names a fault may count against it.
    pub fn of_text(what: &str) -> Severity {
        let lower = what.to_ascii_lowercase();
        if IRREGULAR_WORDS.iter().any(|w| lower.contains(w)) { Severity::Warning } else { Severity::Information }
    }

    /// The name in external blocks' framing.
    pub fn name(self) -> &'static str {
        match self {
            Severity::Information => "information",
            Severity::Warning => "warning",
        }
    }

    pub fn from_name(name: &str) -> Option<Severity> {
        [Severity::Information, Severity::Warning].into_iter().find(|s| s.name() == name)
    }

    /// How a run's summary prints it.
    pub fn label(self) -> &'static str {
        match self {
            Severity::Information => "notice",
            Severity::Warning => "warning",
        }
    }
}

/// Everything that can travel along a wire.
///
/// Items are moved through queues millions of times a run; the rarer large
/// kinds are boxed so an item stays within 128 bytes, which the compiler
/// moves inline instead of calling `memcpy`. Estimates are shared rather
/// than boxed: several blocks usually read each one (a table, pictures, the
/// run's page), and a block that changes one (a tracker) copies it only
/// while another still holds it (`Arc::make_mut`).
#[derive(Clone, Debug)]
pub enum Item {
    Samples(SampleChunk),
    Sweep(Sweep),
    Segment(Box<LobeSegment>),
    Dwell(DwellRecord),
    Estimate(Arc<AngleEstimate>),
    Row(TableRow),
    Notice(Notice),
    /// An item of a kind defined outside this crate.
    Extension(ExtensionItem),
}

const _: () = assert!(std::mem::size_of::<Item>() <= 128, "an item no longer moves inline");

/// The kind of item a port carries; ports only connect to the same kind.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum ItemKind {
    Samples,
    Sweep,
    Segment,
    Dwell,
    Estimate,
    Row,
    Notice,
    /// A kind defined outside this crate; ports of the same type connect.
    Extension(&'static ItemType),
}

/// A kind of item defined by a block writer outside this crate: its name
/// (shown by wiring errors and the catalog) and what it carries. Kinds are
/// told apart by name, so declare each once as a `static`.
#[derive(Clone, Copy, Debug)]
pub struct ItemType {
    pub name: &'static str,
    pub doc: &'static str,
}

impl PartialEq for ItemType {
    fn eq(&self, other: &Self) -> bool {
        self.name == other.name
    }
}

impl Eq for ItemType {}

impl std::hash::Hash for ItemType {
    fn hash<H: std::hash::Hasher>(&self, state: &mut H) {
        self.name.hash(state);
    }
}

/// An item of an [`ItemType`]: a stamp and a shared payload of the type the
/// kind's writer chose. Cloning (fan-out to several blocks) shares the payload.
#[derive(Clone, Debug)]
pub struct ExtensionItem {
    kind: &'static ItemType,
    stamp: Stamp,
    payload: Arc<dyn std::any::Any + Send + Sync>,
}

impl ExtensionItem {
    pub fn new<T: std::any::Any + Send + Sync>(kind: &'static ItemType, stamp: Stamp, payload: T) -> Self {
        ExtensionItem { kind, stamp, payload: Arc::new(payload) }
    }
    pub fn kind(&self) -> &'static ItemType {
        self.kind
    }
    pub fn stamp(&self) -> Stamp {
        self.stamp
    }
    /// The payload, when it is a `T`.
    pub fn get<T: std::any::Any>(&self) -> Option<&T> {
        self.payload.downcast_ref::<T>()
    }
}

impl ItemKind {
    pub fn name(&self) -> &'static str {
        match self {
            ItemKind::Samples => "samples",
            ItemKind::Sweep => "sweeps",
            ItemKind::Segment => "lobe segments",
            ItemKind::Dwell => "dwell records",
            ItemKind::Estimate => "angle estimates",
            ItemKind::Row => "table rows",
            ItemKind::Notice => "notices",
            ItemKind::Extension(t) => t.name,
        }
    }
}

impl Item {
    #[inline]
    pub fn kind(&self) -> ItemKind {
        match self {
            Item::Samples(_) => ItemKind::Samples,
            Item::Sweep(_) => ItemKind::Sweep,
            Item::Segment(_) => ItemKind::Segment,
            Item::Dwell(_) => ItemKind::Dwell,
            Item::Estimate(_) => ItemKind::Estimate,
            Item::Row(_) => ItemKind::Row,
            Item::Notice(_) => ItemKind::Notice,
            Item::Extension(x) => ItemKind::Extension(x.kind),
        }
    }

    /// When the item happened; the scheduler merges multiple inputs by it.
    #[inline]
    pub fn stamp(&self) -> Stamp {
        match self {
            Item::Samples(c) => c.stamp,
            Item::Sweep(s) => s.stamp,
            Item::Segment(s) => s.chunk.stamp,
            Item::Dwell(d) => d.mid,
            Item::Estimate(e) => e.stamp,
            Item::Row(r) => r.stamp,
            Item::Notice(n) => n.stamp,
            Item::Extension(x) => x.stamp,
        }
    }

    /// Number of raw samples the item carries (for statistics).
    #[inline]
    pub fn sample_count(&self) -> usize {
        match self {
            Item::Samples(c) => c.len(),
            Item::Sweep(s) => s.iq.len(),
            Item::Segment(s) => s.chunk.len(),
            _ => 0,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_buffer_goes_back_to_its_pool_after_its_last_view() {
        let pool = BufferPool::new(2);
        let mut v = pool.take();
        v.extend([1.0f32, 2.0, 3.0]);
        let ptr = v.as_ptr();
        let mut span = Span::pooled(v, &pool);
        span.get_mut().expect("the only view")[0] = 5.0;
        let part = span.slice(1..3);
        assert!(span.get_mut().is_none(), "a second view exists");
        drop(span);
        assert_eq!(&part[..], &[2.0, 3.0]);
        drop(part);
        let again = pool.take();
        assert_eq!((again.as_ptr(), again.len()), (ptr, 0), "the same buffer, emptied");
        // Without a pool a buffer is simply freed.
        let plain = Span::new(vec![1u8]);
        drop(plain);
    }
}

#[cfg(test)]
mod severity_tests {
    use super::*;

    #[test]
    fn a_notice_without_a_severity_warns_only_when_it_names_an_irregularity() {
        let of = Severity::of_text;
        assert_eq!(of("learned sync levels: up 0.100, down 0.900"), Severity::Information);
        assert_eq!(of("acquired the strongest echo: gate at bins 10..15"), Severity::Information);
        assert_eq!(of("Irregular dwell length: 512 samples"), Severity::Warning);
        assert_eq!(of("3 missing pulse(s) from sample 100"), Severity::Warning);
        assert_eq!(of("stuck sync for 4 dwells"), Severity::Warning);
        let n = Notice::new(Stamp::new(0, 1.0), Arc::from("b"), "12 sweeps were dropped");
        assert_eq!((n.severity, Severity::from_name("warning")), (Severity::Warning, Some(Severity::Warning)));
        assert_eq!(Severity::from_name("loud"), None);
    }
}
