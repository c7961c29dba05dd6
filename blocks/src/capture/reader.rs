//! Capture readers: one interface over WAV files, raw interleaved files,
//! SigMF recordings and standard input, reading a capture in blocks of frames
//! with constant memory whatever its length.
//!
//! A *frame* is one sample instant of every channel. Readers hand out frames
//! decoded to `f32` components, channel-interleaved (complex channels as I
//! then Q); [`crate::capture::roles::RoleMap`] turns them into sample chunks.

use super::datatype::{DataType, SampleFormat};
use super::error::CaptureError;
use super::sigmf_meta::SigmfMeta;
use crate::{BlockError, Choice};
use std::io::Read;
use std::path::Path;

crate::block_choice! {
    /// Which container a capture comes in.
    pub enum Format {
        /// Decide from the path: `.wav`, `.sigmf-*`, a datatype extension or the first bytes.
        Auto = "auto",
        Wav = "wav",
        Sigmf = "sigmf",
        Raw = "raw",
    }
}

impl Format {
    /// Parse the names used by the `format` parameter and `--format`.
    pub fn parse(name: &str) -> Result<Format, CaptureError> {
        match name {
            "" => Ok(Format::Auto),
            word => Format::from_word(word).ok_or_else(|| {
                CaptureError::unsupported(
                    "",
                    format!("unknown capture format '{word}' (known: {})", Format::WORDS.join(", ")),
                )
            }),
        }
    }

    pub fn name(&self) -> &'static str {
        self.word()
    }
}

/// What the caller knows besides the path; `None` means "from the file".
#[derive(Clone, Debug)]
pub struct OpenOptions {
    pub format: Format,
    /// SigMF datatype name, for raw files and standard input.
    pub datatype: Option<String>,
    /// Samples per second; required for raw data, checked against the file otherwise.
    pub rate: Option<f64>,
    /// Channels in the file; required for multi-channel raw data, checked otherwise.
    pub channels: Option<usize>,
}

impl Default for OpenOptions {
    fn default() -> Self {
        OpenOptions { format: Format::Auto, datatype: None, rate: None, channels: None }
    }
}

/// How the bytes of one component are turned into a float.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Encoding {
    /// A SigMF datatype (also used for 8-bit unsigned, 16-bit and float WAV).
    Type(DataType),
    /// Little-endian signed integer of `bits` valid bits in a container of 3
    /// or 4 bytes (WAV 24 and 32-bit), scaled by 2^(bits-1). A 24-bit sample
    /// in a 4-byte container sits in the low three bytes, as hound reads it.
    IntLe { bytes: usize, bits: u32 },
}

impl Encoding {
    /// Bytes one component occupies.
    pub fn component_bytes(&self) -> usize {
        match self {
            Encoding::Type(t) => t.component_bytes(),
            Encoding::IntLe { bytes, .. } => *bytes,
        }
    }

    /// Only floats can hold NaN or infinity.
    pub fn is_float(&self) -> bool {
        matches!(self, Encoding::Type(t) if t.format == SampleFormat::F32)
    }

    /// The largest positive value a sample can take; at or beyond it (or at
    /// -1) an integer sample is clipped. Floats have no hard limit, so 1.0.
    pub fn full_scale_positive(&self) -> f32 {
        let bits = match self {
            Encoding::Type(t) => match t.format {
                SampleFormat::F32 => return 1.0,
                SampleFormat::I16 => 16,
                SampleFormat::I8 | SampleFormat::U8 => 8,
            },
            Encoding::IntLe { bits, .. } => *bits as i32,
        };
        1.0 - 2f32.powi(1 - bits)
    }

    /// Decode whole components of `bytes`, appending to `out`.
    pub fn decode(&self, bytes: &[u8], out: &mut Vec<f32>) {
        match self {
            Encoding::Type(t) => t.decode(bytes, out),
            // A 24-bit code shifted into the top of an i32 is sign-extended;
            // dividing by 2^31 is then exact, as for 32-bit codes up to the
            // usual f32 rounding.
            Encoding::IntLe { bytes: 3, .. } => out
                .extend(bytes.chunks_exact(3).map(|b| i32::from_le_bytes([0, b[0], b[1], b[2]]) as f32 / 2147483648.0)),
            Encoding::IntLe { bits: 24, .. } => out
                .extend(bytes.chunks_exact(4).map(|b| i32::from_le_bytes([0, b[0], b[1], b[2]]) as f32 / 2147483648.0)),
            Encoding::IntLe { .. } => out.extend(
                bytes.chunks_exact(4).map(|b| i32::from_le_bytes([b[0], b[1], b[2], b[3]]) as f32 / 2147483648.0),
            ),
        }
    }
}

/// Everything known about an opened capture.
#[derive(Clone, Debug)]
pub struct CaptureInfo {
    /// The data file as given (or `-` for standard input), for messages.
    pub path: String,
    /// The metadata file of a SigMF recording.
    pub meta_path: Option<String>,
    pub format: Format,
    /// A short human description of the sample encoding, e.g. "PCM integer 24-bit".
    pub encoding_text: String,
    pub encoding: Encoding,
    /// Each channel's components are complex (I, Q) rather than one real value.
    pub complex: bool,
    pub channels: usize,
    pub rate: f64,
    /// Byte offset of the first sample in the data file.
    pub data_offset: u64,
    /// Bytes of sample data, when known (not for standard input).
    pub data_bytes: Option<u64>,
    /// Centre frequency of the first capture segment (SigMF), Hz.
    pub frequency: Option<f64>,
    /// The SigMF metadata as read, annotations included, so a derived
    /// recording can carry it on.
    pub sigmf: Option<SigmfMeta>,
}

impl CaptureInfo {
    /// Components of one channel per frame: 2 for complex data, 1 for real.
    pub fn components_per_channel(&self) -> usize {
        if self.complex { 2 } else { 1 }
    }
    /// Components of all channels per frame.
    pub fn components_per_frame(&self) -> usize {
        self.channels * self.components_per_channel()
    }
    /// Bytes of one frame.
    pub fn frame_bytes(&self) -> usize {
        self.components_per_frame() * self.encoding.component_bytes()
    }
    /// Frames in the capture, when the length is known.
    pub fn frames(&self) -> Option<u64> {
        let fb = self.frame_bytes() as u64;
        self.data_bytes.map(|b| b.checked_div(fb).unwrap_or(0))
    }
    /// Byte offset in the data file of component `component` of frame `frame`.
    pub fn byte_offset(&self, frame: u64, component: usize) -> u64 {
        self.data_offset + frame * self.frame_bytes() as u64 + (component * self.encoding.component_bytes()) as u64
    }
}

/// A capture opened for reading.
pub trait CaptureReader: Send {
    fn info(&self) -> &CaptureInfo;
    /// Read up to `max_frames` frames into `out` (cleared first), decoded and
    /// channel-interleaved. Returns the number of frames, which may be fewer
    /// than asked for (reads are capped at [`MAX_READ_BYTES`]); 0 at the end.
    fn read_frames(&mut self, max_frames: usize, out: &mut Vec<f32>) -> Result<usize, BlockError>;
    /// Bytes of sample data read so far.
    fn bytes_read(&self) -> u64;
    /// Lend up to `max_frames` frames straight from the reader's own memory
    /// (a mapped file's page cache) instead of copying them: their number,
    /// then [`CaptureReader::lent`] views them. Fewer than asked only at the
    /// end of the data. `None` when this reader cannot lend them (not a
    /// mapped file, not little-endian float32, or more than one read
    /// takes): use [`CaptureReader::read_frames`].
    fn lend_frames(&mut self, _max_frames: usize) -> Result<Option<usize>, BlockError> {
        Ok(None)
    }
    /// The frames of the last [`CaptureReader::lend_frames`].
    fn lent(&self) -> &[f32] {
        &[]
    }
    /// A live input (a pipe, a FIFO, pushed samples): read without waiting
    /// for whole chunks.
    fn as_live(&mut self) -> Option<&mut super::live::LiveReader> {
        None
    }
}

/// Most bytes one read takes in, so wide frames with a large `max_frames`
/// cannot make a huge buffer.
pub const MAX_READ_BYTES: usize = 16 << 20;

/// Frames from any byte stream positioned at the first sample: the one
/// reading loop behind every format.
pub struct FrameStream<R> {
    info: CaptureInfo,
    pub(super) inner: R,
    pub(super) done_bytes: u64,
    buf: Vec<u8>,
}

impl<R: Read + Send> FrameStream<R> {
    pub fn new(info: CaptureInfo, inner: R) -> Self {
        FrameStream { info, inner, done_bytes: 0, buf: Vec::new() }
    }
}

impl<R> FrameStream<R> {
    /// Bytes the next read of up to `max_frames` frames takes: whole
    /// frames, at most [`MAX_READ_BYTES`] (one frame at least) and what is
    /// left of the data.
    pub(super) fn want_bytes(&self, max_frames: usize) -> usize {
        let frame_bytes = self.info.frame_bytes();
        let want = max_frames.min((MAX_READ_BYTES / frame_bytes.max(1)).max(1)).saturating_mul(frame_bytes);
        match self.info.data_bytes {
            Some(total) => want.min(usize::try_from(total - self.done_bytes).unwrap_or(usize::MAX)),
            None => want,
        }
    }

    /// Count `whole` bytes of whole frames as read: their number of frames.
    /// Nothing at all where a sample was asked for is an error.
    pub(super) fn advance(&mut self, whole: usize, max_frames: usize) -> Result<usize, BlockError> {
        if whole == 0 && self.done_bytes == 0 && max_frames > 0 {
            let found = match self.info.data_bytes {
                Some(_) => "its sample data is 0 bytes long",
                None => "the stream ended before its first sample",
            };
            return Err(BlockError::at(format!("{}: the capture holds no samples: {found}", self.info.path), 0));
        }
        self.done_bytes += whole as u64;
        Ok(whole / self.info.frame_bytes().max(1))
    }
}

/// Little-endian float32 on a little-endian machine is already in its
/// final form: no decoding, and it may be viewed as floats where it lies.
pub(super) fn is_native_f32(encoding: &Encoding) -> bool {
    matches!(encoding, Encoding::Type(t) if t.format == SampleFormat::F32 && !t.big_endian)
        && cfg!(target_endian = "little")
}

impl<R: Read + Send> CaptureReader for FrameStream<R> {
    fn info(&self) -> &CaptureInfo {
        &self.info
    }

    fn bytes_read(&self) -> u64 {
        self.done_bytes
    }

    fn read_frames(&mut self, max_frames: usize, out: &mut Vec<f32>) -> Result<usize, BlockError> {
        let frame_bytes = self.info.frame_bytes();
        let want = self.want_bytes(max_frames);
        // Native floats are read straight into `out`, which skips a copy and
        // a decode (the common case for large captures).
        let whole = if is_native_f32(&self.info.encoding) {
            // A reused buffer of the right length is overwritten as it is:
            // only growth pays for zero-filling.
            out.resize(want / 4, 0.0);
            let bytes: &mut [u8] = bytemuck::cast_slice_mut(&mut out[..]);
            let whole = self.fill(bytes, frame_bytes)?;
            out.truncate(whole / 4);
            whole
        } else {
            out.clear();
            let mut buf = std::mem::take(&mut self.buf);
            buf.resize(want, 0);
            let whole = self.fill(&mut buf, frame_bytes);
            if let Ok(w) = whole {
                self.info.encoding.decode(&buf[..w], out);
            }
            self.buf = buf;
            whole?
        };
        self.advance(whole, max_frames)
    }
}

impl<R: Read + Send> FrameStream<R> {
    /// Fill `dest` with whole frames; returns the bytes of whole frames read.
    /// Errors name the file and byte offset of a cut-short or broken stream.
    fn fill(&mut self, dest: &mut [u8], frame_bytes: usize) -> Result<usize, BlockError> {
        let want = dest.len();
        let mut got = 0;
        while got < want {
            match self.inner.read(&mut dest[got..want]) {
                Ok(0) => break,
                Ok(n) => got += n,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(source) => {
                    let at = self.info.data_offset + self.done_bytes + got as u64;
                    let path = self.info.path.clone();
                    return Err(CaptureError::Io { path, doing: "read failed", offset: Some(at), source }.into());
                }
            }
        }
        let frames = got / frame_bytes.max(1);
        let whole = frames * frame_bytes;
        if got < want {
            // The stream ended early: either the file was cut short of its
            // stated length, or a stream without a length ended mid-frame.
            let at = self.info.data_offset + self.done_bytes + got as u64;
            let whole_end = self.info.data_offset + self.done_bytes + whole as u64;
            let truncated = |offset, problem| CaptureError::Truncated {
                path: self.info.path.clone(),
                offset,
                sample: (self.done_bytes + whole as u64) / frame_bytes as u64,
                problem,
            };
            if let Some(total) = self.info.data_bytes {
                let end = self.info.data_offset + total;
                let problem =
                    format!("truncated: the data should run to byte offset {end} but ends at byte offset {at}");
                return Err(truncated(at, problem).into());
            }
            if whole != got {
                let problem = format!(
                    "the data ends inside a frame: {} byte(s) left over at byte offset {whole_end} (a frame is {frame_bytes} bytes)",
                    got - whole
                );
                return Err(truncated(whole_end, problem).into());
            }
        }
        Ok(whole)
    }
}

/// Open a capture: `-` is standard input (raw only), otherwise the format is
/// taken from `opts.format` or guessed from the path.
pub fn open(path: &str, opts: &OpenOptions) -> Result<Box<dyn CaptureReader>, CaptureError> {
    let format = match opts.format {
        Format::Auto => guess_format(path, opts)?,
        f => f,
    };
    // A named FIFO may carry WAV (its header is read front to back); any
    // other stream is raw data.
    let wav_fifo = format == Format::Wav && path != "-";
    if is_pipe(path) && format != Format::Raw && !wav_fifo {
        // Standard input has no name worth showing.
        let (file, what) = if path == "-" { ("", "standard input") } else { (path, "a FIFO or device") };
        return Err(CaptureError::unsupported(
            file,
            format!(
                "{what} can only be read as a stream of raw data (format raw with a datatype and a rate){}, not as {}",
                if path == "-" { "" } else { " or WAV" },
                format.name()
            ),
        ));
    }
    match format {
        Format::Wav => super::wav::open_wav(path, opts),
        Format::Sigmf => super::sigmf::open_sigmf(path, opts),
        Format::Raw if is_pipe(path) => Ok(Box::new(super::live::open_pipe(path, opts)?)),
        Format::Raw | Format::Auto => super::raw::open_raw(path, opts),
    }
}

/// Standard input, a FIFO or a character device: read as a live stream
/// (no length, no seeking, nothing read ahead to guess a format).
pub fn is_pipe(path: &str) -> bool {
    if path == "-" {
        return true;
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        std::fs::metadata(path).is_ok_and(|m| m.file_type().is_fifo() || m.file_type().is_char_device())
    }
    #[cfg(not(unix))]
    false
}

fn guess_format(path: &str, opts: &OpenOptions) -> Result<Format, CaptureError> {
    if is_pipe(path) {
        let ext = Path::new(path).extension().and_then(|e| e.to_str()).unwrap_or("").to_ascii_lowercase();
        if opts.datatype.is_some() || DataType::parse(&ext).is_ok() {
            return Ok(Format::Raw);
        }
        if path != "-" && matches!(ext.as_str(), "wav" | "wave") {
            return Ok(Format::Wav);
        }
        let (file, what) = if path == "-" { ("", "standard input ('-')") } else { (path, "a FIFO or device") };
        return Err(CaptureError::setting(
            file,
            format!(
                "{what} needs format raw, a datatype (e.g. cu8) and a rate; the format cannot be guessed from a stream"
            ),
        ));
    }
    let p = Path::new(path);
    let ext = p.extension().and_then(|e| e.to_str()).unwrap_or("").to_ascii_lowercase();
    match ext.as_str() {
        "wav" | "wave" => return Ok(Format::Wav),
        "sigmf-meta" | "sigmf-data" => return Ok(Format::Sigmf),
        _ => {}
    }
    if opts.datatype.is_some() || DataType::parse(&ext).is_ok() {
        return Ok(Format::Raw);
    }
    if super::sigmf::meta_path_for(path).exists() {
        return Ok(Format::Sigmf);
    }
    let mut head = [0u8; 4];
    let riff = std::fs::File::open(p).and_then(|mut f| f.read_exact(&mut head)).is_ok() && &head == b"RIFF";
    if riff {
        return Ok(Format::Wav);
    }
    if !p.exists() {
        return Err(CaptureError::NotFound {
            path: path.to_string(),
            hint: "no such capture file (nor a SigMF recording of that base name)".into(),
        });
    }
    Err(CaptureError::setting(
        path,
        "cannot tell the capture format from the name or the first bytes; set format (wav, sigmf or raw with a datatype)",
    ))
}

/// Check a rate given by the user against the file's own, if both exist.
pub(crate) fn agree_rate(
    path: &str,
    given: Option<f64>,
    from_file: Option<f64>,
    what: &str,
) -> Result<f64, CaptureError> {
    match (given, from_file) {
        (Some(g), Some(f)) if (g - f).abs() > 1e-9 * f.abs().max(g.abs()) => Err(CaptureError::setting(
            path,
            format!(
                "rate {g} S/s was given but {what} says {f} S/s; leave rate at 0 to use the file's, or fix the file"
            ),
        )),
        (_, Some(f)) => super::raw::check_rate(path, f, what),
        (Some(g), None) => super::raw::check_rate(path, g, "the given rate"),
        (None, None) => Err(CaptureError::setting(path, "the sample rate is not in the file; set rate")),
    }
}

/// Check a channel count given by the user against the file's own.
pub(crate) fn agree_channels(
    path: &str,
    given: Option<usize>,
    from_file: usize,
    what: &str,
) -> Result<usize, CaptureError> {
    match given {
        Some(g) if g != from_file => Err(CaptureError::setting(
            path,
            format!("channels {g} was given but {what} says {from_file}; leave channels at 0 to use the file's"),
        )),
        _ => Ok(from_file),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Cursor;

    fn info(data_bytes: Option<u64>) -> CaptureInfo {
        CaptureInfo {
            path: "mem.ci16".into(),
            meta_path: None,
            format: Format::Raw,
            encoding_text: "ci16_le".into(),
            encoding: Encoding::Type(DataType::parse("ci16_le").unwrap_or(DataType::CF32_LE)),
            complex: true,
            channels: 1,
            rate: 1e3,
            data_offset: 0,
            data_bytes,
            frequency: None,
            sigmf: None,
        }
    }

    fn bytes(codes: &[i16]) -> Vec<u8> {
        codes.iter().flat_map(|c| c.to_le_bytes()).collect()
    }

    #[test]
    fn frames_come_in_blocks_across_reads() {
        let codes: Vec<i16> = (0..20).map(|k| k * 1000 - 10000).collect();
        let mut s = FrameStream::new(info(Some(40)), Cursor::new(bytes(&codes)));
        let mut out = Vec::new();
        let mut all = Vec::new();
        while s.read_frames(3, &mut out).unwrap_or(0) > 0 {
            all.extend_from_slice(&out);
        }
        let want: Vec<f32> = codes.iter().map(|&c| f32::from(c) / 32768.0).collect();
        assert_eq!(all, want);
        assert_eq!(s.bytes_read(), 40);
    }

    #[test]
    fn short_data_is_truncated_and_a_partial_frame_is_refused() {
        let data = bytes(&[1, 2, 3, 4, 5]);
        let mut s = FrameStream::new(info(Some(16)), Cursor::new(data.clone()));
        let e = s.read_frames(10, &mut Vec::new()).unwrap_err();
        assert!(e.message.contains("truncated") && e.message.contains("byte offset 10"), "{e}");
        assert_eq!(e.at_sample, Some(2));
        let mut s = FrameStream::new(info(None), Cursor::new(data));
        let mut out = Vec::new();
        let e = s.read_frames(10, &mut out).unwrap_err();
        assert!(e.message.contains("2 byte(s) left over at byte offset 8"), "{e}");
    }

    #[test]
    fn full_scale_of_each_encoding() {
        assert_eq!(Encoding::IntLe { bytes: 3, bits: 24 }.full_scale_positive(), 1.0 - 1.0 / 8388608.0);
        assert_eq!(
            Encoding::Type(DataType::parse("cu8").unwrap_or(DataType::CF32_LE)).full_scale_positive(),
            127.0 / 128.0
        );
        assert_eq!(Encoding::Type(DataType::CF32_LE).full_scale_positive(), 1.0);
    }
}
