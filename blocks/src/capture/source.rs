//! `capture_reader`: reads a capture (WAV, SigMF, raw file or standard input)
//! and emits its samples in chunks, stamped from sample 0 at the file's rate.

use super::live::{LiveEnd, LiveMonitor, PushedInput};
use super::reader::{CaptureReader, Format, OpenOptions, open};
use super::roles::{ChunkPools, NonFinite, Replaced, RoleMap, from_complex};
use super::sigmf_meta::SigmfMeta;
use crate::typed::boxed;
use crate::{
    Block, BlockError, BlockSpec, BuildContext, BuildError, Facts, Item, ItemKind, LabelledSpan, NoPorts, Outputs,
    ParamError, ParamType, Params, Settings, Stamp, StreamFacts, TypedBlock, Unit, block_ports, block_settings,
};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Duration;

pub const SPEC: BlockSpec = BlockSpec::typed::<CaptureSource>(
    "capture_reader",
    "Reads a recorded capture (WAV, SigMF recording, raw interleaved samples, or '-' for standard input) and emits its samples in chunks, with the sync and trigger channels the roles name.",
);

block_ports! {
    outputs pub enum ReaderOut {
        Samples = optional("samples", ItemKind::Samples, "the capture's samples, from sample 0"),
    }
}

block_settings! {
    /// Settings of `capture_reader`.
    pub struct CaptureReaderSettings {
        path: String {
            ty: ParamType::InputPath,
            default: None,
            doc: "capture file; a SigMF recording by either file or its base name; '-' reads standard input",
        },
        format: Format {
            ty: ParamType::Choice(Format::WORDS),
            default: Some("auto"),
            doc: "container; auto decides from the name or the first bytes (standard input needs raw)",
        },
        datatype: String {
            ty: ParamType::Text,
            default: Some("auto"),
            doc: "SigMF datatype name of raw data (cf32_le, ci16_le, ci8, cu8, rf32_le, ...); auto = from the file or its extension",
        },
        rate: f64 {
            ty: ParamType::Number { unit: Unit::SampleRate, min: 0.0, max: 1e11 },
            default: Some("0"),
            doc: "sample rate; 0 = from the file (raw data needs it); a value the file contradicts is an error",
        },
        channels: usize {
            ty: ParamType::Integer { min: 0, max: 64 },
            default: Some("0"),
            doc: "channels in the file; 0 = from the file (1 for raw data)",
        },
        roles: Vec<String> {
            ty: ParamType::Names,
            default: Some("auto"),
            doc: "role of each channel: i, q, sync, trigger or - for real channels; iq, sync, trigger or - for complex ones; auto = by channel count",
        },
        // 16384 samples: small enough that a chunk (read buffer, split
        // channels) stays in the core's cache while the first blocks read it.
        chunk: usize {
            ty: ParamType::Integer { min: 1, max: 1 << 22 },
            default: Some("16384"),
            doc: "samples per emitted chunk",
        },
        nonfinite: NonFinite {
            ty: ParamType::Choice(NonFinite::WORDS),
            default: Some("error"),
            doc: "NaN or infinite samples: stop with an error, or replace them by 0 and report the count",
        },
    }
}

impl CaptureReaderSettings {
    /// The reader options the settings describe; `auto` and 0 leave a value
    /// to the file.
    pub fn open_options(&self) -> OpenOptions {
        let datatype = self.datatype.trim();
        OpenOptions {
            format: self.format,
            datatype: (datatype != "auto" && !datatype.is_empty()).then(|| datatype.to_string()),
            rate: (self.rate > 0.0).then_some(self.rate),
            channels: (self.channels > 0).then_some(self.channels),
        }
    }
}

/// The reader options the parameters describe (shared with `lobeflow inspect`).
pub fn open_options(p: &Params) -> Result<OpenOptions, ParamError> {
    Ok(CaptureReaderSettings::from_params(p)?.open_options())
}

impl TypedBlock for CaptureSource {
    type Settings = CaptureReaderSettings;
    type In = NoPorts;
    type Out = ReaderOut;

    fn build(settings: CaptureReaderSettings, ctx: &BuildContext) -> Result<Self, BuildError> {
        CaptureSource::build_with(settings, ctx, &RunHooks::default())
    }

    /// The header read when the source was built gives the rate and channels.
    fn start(&mut self, _: &Facts) -> Result<StreamFacts, BlockError> {
        // Said here, before the blocks downstream judge their settings
        // against a rate that no sample will ever come with.
        if self.reader.info().data_bytes == Some(0) {
            return Err(BlockError::at(
                format!("{}: the capture holds no samples: its sample data is 0 bytes long", self.reader.info().path),
                0,
            ));
        }
        let rate = self.reader.info().rate;
        Ok(StreamFacts {
            rate: (rate.is_finite() && rate > 0.0).then_some(rate),
            channels: Some(self.roles.channels()),
            marks: labelled_spans(self.reader.info().sigmf.as_ref(), rate),
            ..StreamFacts::default()
        })
    }

    fn generate(&mut self, out: &mut Outputs) -> Result<bool, BlockError> {
        if self.reader.as_live().is_some() {
            return self.generate_live(out);
        }
        // A mapped file lends its frames to be split where they lie. Plain
        // (I, Q) chunks copy them into a chunk buffer through `read_frames`
        // instead: one copy either way, and a plain copy is the cheaper.
        if !self.roles.is_plain_iq()
            && let Some(n) = self.reader.lend_frames(self.chunk)?
        {
            if n == 0 {
                self.segment_notices(0, out);
                self.end_notices(out);
                return Ok(false);
            }
            self.emit(n, true, out)?;
            return Ok(true);
        }
        if self.frames.capacity() == 0 && self.roles.is_plain_iq() {
            // Plain (I, Q) chunks take the read buffer over: read into a returned one.
            self.frames = from_complex(self.pools.iq.take_as_left());
        }
        // A reader may return fewer frames than asked; fill the chunk.
        let mut n = self.reader.read_frames(self.chunk, &mut self.frames)?;
        while n > 0 && n < self.chunk {
            let more = self.reader.read_frames(self.chunk - n, &mut self.part)?;
            if more == 0 {
                break;
            }
            self.frames.extend_from_slice(&self.part);
            n += more;
        }
        if n == 0 {
            self.segment_notices(0, out);
            self.end_notices(out);
            return Ok(false);
        }
        self.emit(n, false, out)?;
        Ok(true)
    }

    fn progress(&self) -> Option<(u64, u64)> {
        let total = self.reader.info().data_bytes?;
        Some((self.reader.bytes_read(), total))
    }
}

/// What a run gives its capture readers besides the parameters.
#[derive(Clone, Default)]
pub struct RunHooks {
    /// Samples pushed from memory instead of the file the path names.
    pub pushed: Option<PushedInput>,
    /// Progress and lag of a live input.
    pub monitor: Option<Arc<LiveMonitor>>,
}

/// Build a capture reader for a run: a pushed input when there is one, the
/// path otherwise. A live input ends early when the run's `end_input` is raised.
pub fn build_in_run(p: &Params, ctx: &BuildContext, hooks: &RunHooks) -> Result<Box<dyn Block>, BuildError> {
    let settings = CaptureReaderSettings::from_params(p)?;
    Ok(boxed(CaptureSource::build_with(settings, ctx, hooks)?))
}

/// How long a live source waits for input before it lets the scheduler look
/// at a stop request.
const LIVE_WAIT: Duration = Duration::from_millis(20);

pub struct CaptureSource {
    reader: Box<dyn CaptureReader>,
    roles: RoleMap,
    chunk: usize,
    nonfinite: NonFinite,
    replaced: Replaced,
    next: u64,
    frames: Vec<f32>,
    part: Vec<f32>,
    /// Chunk buffers come back here once every block is done with them.
    pools: ChunkPools,
    /// SigMF capture segments after the first: (first sample, centre frequency).
    segments: Vec<(u64, Option<f64>)>,
    segments_seen: usize,
    /// Raised to end a live input early (Ctrl-C on a live run).
    end_input: Option<Arc<AtomicBool>>,
}

/// Segment-start notices shown one by one before the rest are only counted.
const SEGMENT_NOTICES: usize = 10;

fn later_segments(reader: &dyn CaptureReader) -> Vec<(u64, Option<f64>)> {
    let Some(meta) = &reader.info().sigmf else {
        return Vec::new();
    };
    meta.captures.iter().skip(1).map(|c| (c.sample_start, c.frequency)).collect()
}

impl CaptureSource {
    /// Open the capture (or the run's pushed input) and check the roles
    /// against its channels.
    fn build_with(s: CaptureReaderSettings, ctx: &BuildContext, hooks: &RunHooks) -> Result<Self, BuildError> {
        let mut reader: Box<dyn CaptureReader> = match &hooks.pushed {
            Some(pushed) => Box::new(pushed.open().map_err(|e| e.to_string())?),
            None => open(&s.path, &s.open_options())?,
        };
        if let (Some(live), Some(monitor)) = (reader.as_live(), &hooks.monitor) {
            live.watch(Arc::clone(monitor));
        }
        let roles = RoleMap::new(&s.roles, reader.info())?;
        let mut source = CaptureSource::new(reader, roles, s.chunk, s.nonfinite);
        source.end_input = Some(Arc::clone(&ctx.files.policy().end_input));
        Ok(source)
    }

    /// A source over an opened reader (for embedding and tests).
    pub fn new(reader: Box<dyn CaptureReader>, roles: RoleMap, chunk: usize, nonfinite: NonFinite) -> Self {
        CaptureSource {
            roles,
            chunk: chunk.max(1),
            nonfinite,
            replaced: Replaced::default(),
            next: 0,
            frames: Vec::new(),
            part: Vec::new(),
            pools: ChunkPools::default(),
            segments: later_segments(reader.as_ref()),
            segments_seen: 0,
            end_input: None,
            reader,
        }
    }

    /// Tell of SigMF capture segments (e.g. a retune) starting in the next `n` samples.
    fn segment_notices(&mut self, n: u64, out: &mut Outputs) {
        let info = self.reader.info();
        while let Some(&(start, freq)) = self.segments.get(self.segments_seen) {
            if start >= self.next + n {
                break;
            }
            self.segments_seen += 1;
            if self.segments_seen <= SEGMENT_NOTICES {
                let f = freq.map(|f| format!(", centre frequency {f} Hz")).unwrap_or_default();
                out.inform(
                    Stamp::new(start, info.rate),
                    format!(
                        "{}: capture segment {} starts at sample {start}{f}",
                        info.meta_path.as_deref().unwrap_or(&info.path),
                        self.segments_seen + 1
                    ),
                );
            }
        }
    }

    /// Non-finite samples replaced by 0 so far.
    pub fn replaced(&self) -> Replaced {
        self.replaced
    }
}

impl CaptureSource {
    /// Notices due when the data has ended.
    fn end_notices(&mut self, out: &mut Outputs) {
        let unseen = self.segments.len() - self.segments_seen;
        if self.segments_seen > SEGMENT_NOTICES || unseen > 0 {
            let info = self.reader.info();
            out.inform(
                Stamp::new(self.next, info.rate),
                format!(
                    "{}: {} capture segments after the first ({unseen} starting at or past the end of the data)",
                    info.meta_path.as_deref().unwrap_or(&info.path),
                    self.segments.len()
                ),
            );
        }
        if self.replaced.count > 0 {
            let info = self.reader.info();
            let first = self.replaced.first_sample.unwrap_or(0);
            out.warn(
                Stamp::new(first, info.rate),
                format!(
                    "{}: replaced {} non-finite value(s) by 0, the first at sample {first}",
                    info.path, self.replaced.count
                ),
            );
        }
    }

    /// Emit `n` frames as one chunk: those the reader lent, or those read
    /// into `self.frames`.
    fn emit(&mut self, n: usize, lent: bool, out: &mut Outputs) -> Result<(), BlockError> {
        self.segment_notices(n as u64, out);
        let (info, policy, replaced, pools) = (self.reader.info(), self.nonfinite, &mut self.replaced, &self.pools);
        let chunk = if lent {
            self.roles.split_chunk(self.reader.lent(), self.next, info, policy, replaced, pools)?
        } else {
            self.roles.chunk(&mut self.frames, self.next, info, policy, replaced, pools)?
        };
        self.next += n as u64;
        out.push(ReaderOut::Samples, Item::Samples(chunk));
        Ok(())
    }

    /// A live input: emit whatever whole frames have arrived.
    fn generate_live(&mut self, out: &mut Outputs) -> Result<bool, BlockError> {
        let stop = self.end_input.as_ref().is_some_and(|f| f.load(Ordering::SeqCst));
        let next = self.next;
        let live = self.reader.as_live().expect("a live reader");
        if stop {
            live.monitor().end(LiveEnd::Stopped, next);
            self.end_notices(out);
            return Ok(false);
        }
        match live.read_available(self.chunk, &mut self.frames, LIVE_WAIT)? {
            None => Ok(true),
            Some(0) => {
                let partial = live.trailing_bytes();
                live.monitor().end(LiveEnd::Closed, next);
                let info = self.reader.info();
                if partial > 0 {
                    out.warn(
                        Stamp::new(next, info.rate),
                        format!(
                            "{}: the input ended inside a frame: the last {partial} byte(s), after sample {next}, were left out (a frame is {} bytes)",
                            info.path,
                            info.frame_bytes()
                        ),
                    );
                }
                self.end_notices(out);
                Ok(false)
            }
            Some(n) => self.emit(n, false, out).map(|_| true),
        }
    }
}

/// The capture's labelled SigMF annotations, which may name the lobe active
/// over their stretch (a gate timed from the signal reads them).
fn labelled_spans(meta: Option<&SigmfMeta>, rate: f64) -> Option<Arc<[LabelledSpan]>> {
    if !(rate.is_finite() && rate > 0.0) {
        return None;
    }
    let spans: Vec<LabelledSpan> = meta?
        .annotations
        .iter()
        .filter_map(|a| {
            let label = a.label.as_deref()?.trim();
            (!label.is_empty()).then(|| LabelledSpan {
                start_s: a.sample_start as f64 / rate,
                length_s: a.sample_count.map(|n| n as f64 / rate),
                label: label.into(),
            })
        })
        .collect();
    (!spans.is_empty()).then(|| spans.into())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::capture::reader::{CaptureInfo, Encoding};
    use crate::capture::{DataType, Format};

    /// Hands out at most 7 real frames per read, like a slow pipe.
    struct Trickle {
        info: CaptureInfo,
        left: usize,
        next: f32,
    }

    impl CaptureReader for Trickle {
        fn info(&self) -> &CaptureInfo {
            &self.info
        }
        fn read_frames(&mut self, max: usize, out: &mut Vec<f32>) -> Result<usize, BlockError> {
            out.clear();
            let n = max.min(7).min(self.left);
            for _ in 0..n {
                out.push(self.next);
                self.next += 1.0;
            }
            self.left -= n;
            Ok(n)
        }
        fn bytes_read(&self) -> u64 {
            0
        }
    }

    #[test]
    fn short_reads_still_fill_whole_chunks() {
        let info = CaptureInfo {
            path: "pipe".into(),
            meta_path: None,
            format: Format::Raw,
            encoding_text: "rf32_le".into(),
            encoding: Encoding::Type(DataType { complex: false, ..DataType::CF32_LE }),
            complex: false,
            channels: 1,
            rate: 100.0,
            data_offset: 0,
            data_bytes: None,
            frequency: None,
            sigmf: None,
        };
        let roles = RoleMap::new(&[], &info).unwrap_or_else(|e| panic!("{e}"));
        let mut src = CaptureSource::new(Box::new(Trickle { info, left: 45, next: 0.0 }), roles, 20, NonFinite::Error);
        let mut out = Outputs::new(1);
        while src.generate(&mut out).unwrap_or(false) {}
        let chunks: Vec<_> =
            out.drain().filter_map(|(_, i)| if let Item::Samples(c) = i { Some(c) } else { None }).collect();
        let lens: Vec<usize> = chunks.iter().map(|c| c.len()).collect();
        assert_eq!(lens, [20, 20, 5]);
        assert_eq!(chunks[2].stamp.index, 40);
        assert_eq!(chunks[2].iq[4].re, 44.0);
        assert_eq!(src.progress(), None, "no length, no progress");
    }
}
