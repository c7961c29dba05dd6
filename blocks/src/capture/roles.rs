//! The channel-role map: which channel of a capture is the signal (I and Q,
//! or a complex `iq` channel), the switch sync and the transmit trigger, and
//! the assembly of decoded frames into [`SampleChunk`]s.

use super::error::CaptureError;
use super::reader::CaptureInfo;
use crate::{BlockError, BufferPool, Channels, SampleChunk, Span, Stamp};
use num_complex::Complex32;
use std::sync::Arc;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Role {
    /// In-phase part of the signal (real channels).
    I,
    /// Quadrature part of the signal (real channels).
    Q,
    /// The whole complex signal (complex channels).
    Iq,
    /// Switch sync; a complex channel gives its real part.
    Sync,
    /// Transmit trigger; a complex channel gives its real part.
    Trigger,
    Ignore,
}

impl Role {
    pub fn name(&self) -> &'static str {
        match self {
            Role::I => "i",
            Role::Q => "q",
            Role::Iq => "iq",
            Role::Sync => "sync",
            Role::Trigger => "trigger",
            Role::Ignore => "-",
        }
    }
}

crate::block_choice! {
    /// What to do with NaN or infinite samples.
    pub enum NonFinite {
        Error = "error",
        /// Replace by 0 and count.
        Zero = "zero",
    }
}

/// Non-finite samples replaced so far.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Replaced {
    pub count: u64,
    pub first_sample: Option<u64>,
}

/// Channel roles checked against a capture's channels.
#[derive(Clone, Debug)]
pub struct RoleMap {
    roles: Vec<Role>,
    /// Component index within a frame of each output.
    i: usize,
    q: Option<usize>,
    sync: Option<usize>,
    trigger: Option<usize>,
    stride: usize,
}

impl RoleMap {
    /// The auxiliary channels the chunks carry.
    pub fn channels(&self) -> Channels {
        Channels { sync: self.sync.is_some(), trigger: self.trigger.is_some() }
    }
}

/// The roles used when none are given, or None when the count needs them spelled out.
pub fn default_roles(channels: usize, complex: bool) -> Option<Vec<Role>> {
    use Role::*;
    let r: &[Role] = match (complex, channels) {
        (false, 1) => &[I],
        (false, 2) => &[I, Q],
        (false, 3) => &[I, Q, Sync],
        (false, 4) => &[I, Q, Sync, Trigger],
        (true, 1) => &[Iq],
        (true, 2) => &[Iq, Sync],
        (true, 3) => &[Iq, Sync, Trigger],
        _ => return None,
    };
    Some(r.to_vec())
}

impl RoleMap {
    /// Check `names` (empty or `auto` for the default) against `info`.
    pub fn new(names: &[String], info: &CaptureInfo) -> Result<RoleMap, CaptureError> {
        let channels = info.channels;
        let complex = info.complex;
        let kind = if complex { "complex" } else { "real" };
        let allowed = if complex { "iq, sync, trigger, -" } else { "i, q, sync, trigger, -" };
        let listing = channel_listing(channels, complex);
        let src = info.meta_path.as_deref().unwrap_or(&info.path);
        let bad = |problem: String| CaptureError::Roles { path: src.to_string(), problem };
        let auto = names.is_empty() || (names.len() == 1 && names[0] == "auto");
        let roles = if auto {
            default_roles(channels, complex).ok_or_else(|| {
                bad(format!("{channels} {kind} channels ({listing}) have no default roles; set roles, one of {allowed} per channel"))
            })?
        } else {
            if names.len() != channels {
                return Err(bad(format!(
                    "roles '{}' name {} channel(s) but the capture has {channels} {kind} channel(s): {listing}; give one of {allowed} per channel",
                    names.join(","),
                    names.len()
                )));
            }
            let mut v = Vec::with_capacity(names.len());
            for (k, n) in names.iter().enumerate() {
                let role = match (n.as_str(), complex) {
                    ("i", false) => Role::I,
                    ("q", false) => Role::Q,
                    ("iq", true) => Role::Iq,
                    ("sync", _) => Role::Sync,
                    ("trigger", _) => Role::Trigger,
                    ("-", _) => Role::Ignore,
                    _ => {
                        return Err(bad(format!(
                            "role '{n}' for channel {} does not fit {kind} channels (allowed: {allowed}); the capture has {listing}",
                            k + 1
                        )));
                    }
                };
                v.push(role);
            }
            v
        };
        let cpc = if complex { 2 } else { 1 };
        let find = |role: Role| -> Result<Option<usize>, CaptureError> {
            let at: Vec<usize> = roles.iter().enumerate().filter(|(_, r)| **r == role).map(|(k, _)| k).collect();
            if at.len() > 1 {
                let chans: Vec<String> = at.iter().map(|k| (k + 1).to_string()).collect();
                return Err(bad(format!(
                    "role '{}' is given to channels {}; each role may be used once",
                    role.name(),
                    chans.join(" and ")
                )));
            }
            Ok(at.first().map(|k| k * cpc))
        };
        let signal = if complex { Role::Iq } else { Role::I };
        let i = find(signal)?
            .ok_or_else(|| bad(format!("no channel has role '{}' ({listing}); the signal is needed", signal.name())))?;
        let q = if complex { Some(i + 1) } else { find(Role::Q)? };
        let sync = find(Role::Sync)?;
        let trigger = find(Role::Trigger)?;
        Ok(RoleMap { roles, i, q, sync, trigger, stride: channels * cpc })
    }

    pub fn roles(&self) -> &[Role] {
        &self.roles
    }

    pub fn has_sync(&self) -> bool {
        self.sync.is_some()
    }

    /// "ch1=i ch2=q ch3=sync".
    pub fn describe(&self) -> String {
        let parts: Vec<String> =
            self.roles.iter().enumerate().map(|(k, r)| format!("ch{}={}", k + 1, r.name())).collect();
        parts.join(" ")
    }

    /// True when a frame is exactly (I, Q) and nothing else: the decoded
    /// components are then already the complex samples.
    pub fn is_plain_iq(&self) -> bool {
        self.stride == 2 && self.i == 0 && self.q == Some(1) && self.sync.is_none() && self.trigger.is_none()
    }

    /// Build a chunk from `frames` (decoded, interleaved) starting at sample
    /// `first`. Non-finite values in used components follow `policy`. Plain
    /// (I, Q) frames are taken over without a copy; other layouts are split
    /// into buffers from `pools`.
    pub fn chunk(
        &self,
        frames: &mut Vec<f32>,
        first: u64,
        info: &CaptureInfo,
        policy: NonFinite,
        replaced: &mut Replaced,
        pools: &ChunkPools,
    ) -> Result<SampleChunk, BlockError> {
        // Fast path, taken almost always: every value finite (or integer data).
        if self.is_plain_iq()
            && frames.len().is_multiple_of(2)
            && frames.capacity().is_multiple_of(2)
            && (!info.encoding.is_float() || all_finite(frames))
        {
            let iq = Span::pooled(into_complex(std::mem::take(frames)), &pools.iq);
            return Ok(SampleChunk { stamp: Stamp::new(first, info.rate), iq, sync: None, trigger: None });
        }
        self.split_chunk(frames, first, info, policy, replaced, pools)
    }

    /// [`Self::chunk`] from frames it cannot take over (say, lent from a
    /// mapped file): every layout is split into buffers from `pools`.
    pub fn split_chunk(
        &self,
        frames: &[f32],
        first: u64,
        info: &CaptureInfo,
        policy: NonFinite,
        replaced: &mut Replaced,
        pools: &ChunkPools,
    ) -> Result<SampleChunk, BlockError> {
        let check = info.encoding.is_float();
        let mut iq = pools.iq.take_as_left();
        let mut sync = self.sync.map(|_| pools.real.take_as_left());
        let mut trigger = self.trigger.map(|_| pools.real.take_as_left());
        // The usual layouts get a loop of their own; any other the general one.
        let finite = match (self.stride, self.i, self.q, self.sync, self.trigger, sync.as_mut(), trigger.as_mut()) {
            (2, 0, Some(1), None, None, y, t) => Self::split::<2, 0, 1, NONE, NONE>(frames, &mut iq, y, t),
            (3, 0, Some(1), Some(2), None, Some(y), None) => split_iq_sync(frames, &mut iq, y),
            (4, 0, Some(1), Some(2), None, y, t) => Self::split::<4, 0, 1, 2, NONE>(frames, &mut iq, y, t),
            (4, 0, Some(1), Some(2), Some(3), y, t) => Self::split::<4, 0, 1, 2, 3>(frames, &mut iq, y, t),
            (6, 0, Some(1), Some(2), Some(4), y, t) => Self::split::<6, 0, 1, 2, 4>(frames, &mut iq, y, t),
            (.., y, t) => self.split_any(frames, &mut iq, y, t),
        };
        if check && !finite {
            self.replace_nonfinite(frames, first, info, policy, replaced, &mut iq, sync.as_mut(), trigger.as_mut())?;
        }
        Ok(SampleChunk {
            stamp: Stamp::new(first, info.rate),
            iq: Span::pooled(iq, &pools.iq),
            sync: sync.map(|v| Span::pooled(v, &pools.real)),
            trigger: trigger.map(|v| Span::pooled(v, &pools.real)),
        })
    }

    /// The signal, sync and trigger columns of frames of `S` components, with
    /// every position fixed at compile time (`NONE`: no such column), in one
    /// pass. Returns whether every value of the frames was finite.
    fn split<const S: usize, const I: usize, const Q: usize, const Y: usize, const T: usize>(
        frames: &[f32],
        iq: &mut Vec<Complex32>,
        sync: Option<&mut Vec<f32>>,
        trigger: Option<&mut Vec<f32>>,
    ) -> bool {
        let rows = frames.as_chunks::<S>().0;
        let n = rows.len();
        // Buffers come back from the pool at their last length: resizing
        // then writes nothing, and every element is overwritten below.
        iq.resize(n, Complex32::new(0.0, 0.0));
        let mut none_y = Vec::new();
        let mut none_t = Vec::new();
        let y = match sync {
            Some(v) if Y != NONE => {
                v.resize(n, 0.0);
                &mut v[..]
            }
            _ => &mut none_y[..],
        };
        let t = match trigger {
            Some(v) if T != NONE => {
                v.resize(n, 0.0);
                &mut v[..]
            }
            _ => &mut none_t[..],
        };
        for (k, (f, z)) in rows.iter().zip(iq.iter_mut()).enumerate() {
            *z = Complex32::new(f[I], if Q == NONE { 0.0 } else { f[Q] });
            if Y != NONE {
                y[k] = f[Y];
            }
            if T != NONE {
                t[k] = f[T];
            }
        }
        all_finite(frames)
    }

    /// [`Self::split`] for any frame width.
    fn split_any(
        &self,
        frames: &[f32],
        iq: &mut Vec<Complex32>,
        sync: Option<&mut Vec<f32>>,
        trigger: Option<&mut Vec<f32>>,
    ) -> bool {
        let rows = frames.chunks_exact(self.stride);
        iq.clear();
        iq.extend(rows.clone().map(|f| Complex32::new(f[self.i], self.q.map_or(0.0, |q| f[q]))));
        let mut finite = iq.iter().all(|z| z.re.is_finite() && z.im.is_finite());
        for (column, c) in [(sync, self.sync), (trigger, self.trigger)] {
            if let (Some(out), Some(c)) = (column, c) {
                out.clear();
                out.extend(rows.clone().map(|f| f[c]));
                finite &= out.iter().all(|v| v.is_finite());
            }
        }
        finite
    }

    /// The rare path: find the non-finite values of the split columns again,
    /// and replace them by 0 or stop with an error naming the first one.
    #[allow(clippy::too_many_arguments)]
    fn replace_nonfinite(
        &self,
        frames: &[f32],
        first: u64,
        info: &CaptureInfo,
        policy: NonFinite,
        replaced: &mut Replaced,
        iq: &mut [Complex32],
        mut sync: Option<&mut Vec<f32>>,
        mut trigger: Option<&mut Vec<f32>>,
    ) -> Result<(), BlockError> {
        for (k, f) in frames.chunks_exact(self.stride).enumerate() {
            let sample = first + k as u64;
            let mut fix = |c: usize, v: &mut f32| -> Result<(), BlockError> {
                if v.is_finite() {
                    return Ok(());
                }
                match policy {
                    NonFinite::Zero => {
                        replaced.count += 1;
                        replaced.first_sample.get_or_insert(sample);
                        *v = 0.0;
                        Ok(())
                    }
                    NonFinite::Error => Err(BlockError::at(
                        format!(
                            "{}: non-finite value ({}) at sample {sample}, channel {}, byte offset {}; set nonfinite: zero to replace such values by 0",
                            info.path,
                            f[c],
                            c / info.components_per_channel() + 1,
                            info.byte_offset(sample, c)
                        ),
                        sample,
                    )),
                }
            };
            fix(self.i, &mut iq[k].re)?;
            if let Some(q) = self.q {
                fix(q, &mut iq[k].im)?;
            }
            if let (Some(c), Some(s)) = (self.sync, sync.as_deref_mut()) {
                fix(c, &mut s[k])?;
            }
            if let (Some(c), Some(t)) = (self.trigger, trigger.as_deref_mut()) {
                fix(c, &mut t[k])?;
            }
        }
        Ok(())
    }
}

/// Where chunk buffers come from and go back to once no block holds them:
/// a long capture runs on a few buffers, refilled rather than allocated.
#[derive(Clone)]
pub struct ChunkPools {
    pub iq: Arc<BufferPool<Complex32>>,
    /// Sync and trigger columns.
    pub real: Arc<BufferPool<f32>>,
}

/// Idle buffers kept per pool: a few more than the queues hold.
const POOL_KEEP: usize = 32;

impl Default for ChunkPools {
    fn default() -> Self {
        ChunkPools { iq: BufferPool::new(POOL_KEEP), real: BufferPool::new(2 * POOL_KEEP) }
    }
}

/// The usual WAV layout, (I, Q, sync) frames, four at a time by vector
/// shuffles where the machine has them (it is most of a capture read's own
/// work). Returns whether every value of the frames was finite.
fn split_iq_sync(frames: &[f32], iq: &mut Vec<Complex32>, sync: &mut Vec<f32>) -> bool {
    let rows = frames.as_chunks::<3>().0;
    iq.resize(rows.len(), Complex32::new(0.0, 0.0));
    sync.resize(rows.len(), 0.0);
    let (done, finite) = split_iq_sync_by_fours(frames, iq, sync);
    for ((f, z), y) in rows[done..].iter().zip(&mut iq[done..]).zip(&mut sync[done..]) {
        *z = Complex32::new(f[0], f[1]);
        *y = f[2];
    }
    finite && all_finite(&frames[3 * done..])
}

/// Whole groups of four (I, Q, sync) frames: the frames done and whether
/// all their values are finite (checked on the loaded registers, which
/// saves a second pass over the frames).
#[cfg(target_arch = "x86_64")]
#[allow(unsafe_code)] // SSE shuffles
fn split_iq_sync_by_fours(frames: &[f32], iq: &mut [Complex32], sync: &mut [f32]) -> (usize, bool) {
    use std::arch::x86_64::{
        _MM_HINT_T0, _mm_add_ps, _mm_cmpord_ps, _mm_loadu_ps, _mm_movemask_ps, _mm_prefetch, _mm_setzero_ps,
        _mm_shuffle_ps, _mm_storeu_ps, _mm_sub_ps,
    };
    // Frames lent by a mapped file come from memory, not from a buffer the
    // kernel has just filled, and the hardware prefetcher stops at each
    // 4 KiB page: asking for the line 8 KiB ahead hides that stall (the
    // split's user time on the 1 GiB capture 0.12-0.14 s -> 0.08-0.10 s;
    // 4 to 32 KiB ahead measured alike).
    const PREFETCH_FLOATS: usize = 2048;
    let groups = frames.as_chunks::<12>().0;
    let iq4 = iq.as_chunks_mut::<4>().0;
    let sync4 = sync.as_chunks_mut::<4>().0;
    let mut done = 0;
    // x - x is 0 for a finite x and NaN for an infinity or NaN; the sum of
    // those stays 0 exactly when every value is finite.
    // SAFETY: SSE is part of every x86_64 machine.
    let mut not_finite = unsafe { _mm_setzero_ps() };
    for ((g, z), y) in groups.iter().zip(iq4.iter_mut()).zip(sync4.iter_mut()) {
        // SAFETY: SSE is part of every x86_64 machine. Each load reads four
        // of the group's twelve floats, each store writes four floats of a
        // [Complex32; 4] (eight floats, `Complex` is repr(C)) or of a [f32; 4].
        unsafe {
            // Never faults, wherever it points (the pointer is only a hint).
            _mm_prefetch::<_MM_HINT_T0>(g.as_ptr().wrapping_add(PREFETCH_FLOATS).cast());
            // a = i0 q0 s0 i1, b = q1 s1 i2 q2, c = s2 i3 q3 s3
            let a = _mm_loadu_ps(g.as_ptr());
            let b = _mm_loadu_ps(g.as_ptr().add(4));
            let c = _mm_loadu_ps(g.as_ptr().add(8));
            let i1q1 = _mm_shuffle_ps::<0b00_00_11_11>(a, b); // i1 i1 q1 q1
            let low = _mm_shuffle_ps::<0b10_00_01_00>(a, i1q1); // i0 q0 i1 q1
            let high = _mm_shuffle_ps::<0b10_01_11_10>(b, c); // i2 q2 i3 q3
            let s01 = _mm_shuffle_ps::<0b01_01_10_10>(a, b); // s0 s0 s1 s1
            let s23 = _mm_shuffle_ps::<0b11_11_00_00>(c, c); // s2 s2 s3 s3
            let s = _mm_shuffle_ps::<0b10_00_10_00>(s01, s23); // s0 s1 s2 s3
            let out = z.as_mut_ptr().cast::<f32>();
            _mm_storeu_ps(out, low);
            _mm_storeu_ps(out.add(4), high);
            _mm_storeu_ps(y.as_mut_ptr(), s);
            let sum = _mm_add_ps(_mm_add_ps(_mm_sub_ps(a, a), _mm_sub_ps(b, b)), _mm_sub_ps(c, c));
            not_finite = _mm_add_ps(not_finite, sum);
        }
        done += 4;
    }
    // SAFETY: as above.
    let finite = unsafe { _mm_movemask_ps(_mm_cmpord_ps(not_finite, not_finite)) } == 0b1111;
    (done, finite)
}

#[cfg(not(target_arch = "x86_64"))]
fn split_iq_sync_by_fours(_: &[f32], _: &mut [Complex32], _: &mut [f32]) -> (usize, bool) {
    (0, true)
}

/// Position of a column a layout does not have.
const NONE: usize = usize::MAX;

/// Whether every value is finite; blocks of 1024 without early exit inside,
/// so the test vectorises (a plain short-circuiting `all` does not).
fn all_finite(v: &[f32]) -> bool {
    v.chunks(1024).all(|c| c.iter().fold(true, |ok, x| ok & x.is_finite()))
}

/// Complex samples back to interleaved (re, im) floats, in place (the
/// inverse of `into_complex`, for reading into a returned chunk buffer).
pub fn from_complex(v: Vec<Complex32>) -> Vec<f32> {
    // Same alignment (4) and a byte length and capacity that always divide
    // by 4, so the checked cast cannot fail.
    bytemuck::allocation::cast_vec(v)
}

/// Reinterpret interleaved (re, im) floats as complex samples, in place.
fn into_complex(v: Vec<f32>) -> Vec<Complex32> {
    // The checked cast needs an even length and capacity (whole byte
    // multiples of a complex sample); the callers keep both even.
    bytemuck::allocation::cast_vec(v)
}

fn channel_listing(channels: usize, complex: bool) -> String {
    let kind = if complex { " (complex)" } else { "" };
    let parts: Vec<String> = (1..=channels).map(|k| format!("channel {k}{kind}")).collect();
    parts.join(", ")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn vector_split_matches_the_plain_loop() {
        // Distinct values, so any shuffle taking a wrong lane shows.
        for n in [0usize, 1, 3, 4, 5, 7, 8, 9, 64, 1001] {
            let frames: Vec<f32> = (0..3 * n).map(|k| k as f32 + 0.25).collect();
            let (mut iq, mut sync) = (Vec::new(), Vec::new());
            assert!(split_iq_sync(&frames, &mut iq, &mut sync));
            let (mut iq2, mut sync2) = (Vec::new(), Vec::new());
            RoleMap::split::<3, 0, 1, 2, NONE>(&frames, &mut iq2, Some(&mut sync2), None);
            assert_eq!((iq, sync), (iq2, sync2), "{n} frames");
        }
        // A bad value in the vector part (by fours) and in the tail, each kind.
        for (at, bad_value) in [(13, f32::NAN), (2, f32::INFINITY), (23, f32::NEG_INFINITY), (28, f32::NAN)] {
            let mut bad: Vec<f32> = (0..30).map(|k| k as f32).collect();
            bad[at] = bad_value;
            assert!(!split_iq_sync(&bad, &mut Vec::new(), &mut Vec::new()), "{bad_value} at {at}");
        }
    }
}
