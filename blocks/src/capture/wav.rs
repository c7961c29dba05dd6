//! WAV (RIFF) captures: the header (including WAVE_FORMAT_EXTENSIBLE) is
//! read front to back without seeking, so a FIFO streams like a file; the
//! data is then read in large blocks and decoded here.

use super::datatype::{DataType, SampleFormat};
use super::error::{CaptureError, Place};
use super::raw::check_whole_frames;
use super::reader::{CaptureInfo, CaptureReader, Encoding, Format, OpenOptions, agree_channels, agree_rate};
use std::fs::File;
use std::io::{BufReader, Read};

/// Most channels a WAV capture may have (I, Q, sync, trigger and spares).
pub const MAX_WAV_CHANNELS: usize = 8;

pub fn open_wav(path: &str, opts: &OpenOptions) -> Result<Box<dyn CaptureReader>, CaptureError> {
    let file = File::open(path).map_err(CaptureError::io(path, "cannot open the WAV file"))?;
    // A FIFO or a device has no length: its header is read as it comes and
    // the data runs to the end of the stream.
    let file_len = file.metadata().ok().filter(|m| m.is_file()).map(|m| m.len());
    let mut input = BufReader::with_capacity(1 << 16, file);
    let header = read_header(&mut input, path, file_len)?;
    let (encoding, text) = header.encoding(path)?;
    let channels = usize::from(header.channels);
    if channels > MAX_WAV_CHANNELS {
        return Err(CaptureError::unsupported(
            path,
            format!("{channels} channels; lobeflow reads WAV captures of 1 to {MAX_WAV_CHANNELS} channels"),
        ));
    }
    let data_offset = header.data_offset;
    let data_bytes = match (header.data_bytes, file_len) {
        (Some(n), _) => Some(n),
        // The streaming placeholder: the data runs to the end of the file.
        (None, Some(len)) => Some(len.saturating_sub(data_offset)),
        (None, None) => None,
    };
    if let (Some(n), Some(file_len)) = (data_bytes, file_len) {
        let end = data_offset + n;
        if file_len < end {
            let frame_bytes = (encoding.component_bytes() * channels) as u64;
            return Err(CaptureError::Truncated {
                path: path.to_string(),
                offset: file_len,
                sample: file_len.saturating_sub(data_offset) / frame_bytes.max(1),
                problem: format!(
                    "truncated: the header says the data runs from byte offset {data_offset} to {end}, but the file ends at byte offset {file_len} ({} bytes missing)",
                    end - file_len
                ),
            });
        }
    }
    let rate = agree_rate(path, opts.rate, Some(f64::from(header.rate)), "the WAV header")?;
    agree_channels(path, opts.channels, channels, "the WAV header")?;
    if let Some(dt) = &opts.datatype {
        return Err(CaptureError::setting(
            path,
            format!(
                "datatype '{dt}' was given, but a WAV file states its own sample format ({text}); leave datatype unset"
            ),
        ));
    }
    let info = CaptureInfo {
        path: path.to_string(),
        meta_path: None,
        format: Format::Wav,
        encoding_text: text,
        encoding,
        complex: false,
        channels,
        rate,
        data_offset,
        data_bytes,
        frequency: None,
        sigmf: None,
    };
    if let Some(n) = data_bytes {
        check_whole_frames(&info, n)?;
    }
    Ok(super::mapped::file_frames(info, input))
}

/// What the RIFF header of a WAV file says, read front to back without
/// seeking (so a FIFO works too).
#[derive(Clone, Debug, PartialEq)]
pub struct WavHeader {
    /// The format tag, the sub-format's for WAVE_FORMAT_EXTENSIBLE.
    pub tag: u16,
    pub channels: u16,
    pub rate: u32,
    pub block_align: u16,
    /// Bits per sample of the container (`wBitsPerSample`).
    pub container_bits: u16,
    /// Valid bits per sample (fewer than the container's in extensible files).
    pub valid_bits: u16,
    /// Byte offset of the first sample.
    pub data_offset: u64,
    /// Bytes of sample data; None for the streaming placeholder 0xFFFFFFFF
    /// (a file still being written, or a pipe): the data runs to the end.
    pub data_bytes: Option<u64>,
}

/// Most bytes a `fmt ` chunk may take (the extensible form needs 40).
const MAX_FMT_BYTES: u32 = 1024;
const TAG_PCM: u16 = 0x0001;
const TAG_FLOAT: u16 = 0x0003;
const TAG_EXTENSIBLE: u16 = 0xfffe;

/// Reads a header front to back, counting the byte offset for messages.
struct HeaderBytes<'a, R> {
    r: &'a mut R,
    path: &'a str,
    /// The file's length when known, to explain a header cut short.
    file_len: Option<u64>,
    at: u64,
}

impl<R: Read> HeaderBytes<'_, R> {
    fn cut_short(&self) -> CaptureError {
        let len = self.file_len.map(|l| format!(" (file of {l} bytes)")).unwrap_or_default();
        CaptureError::Truncated {
            path: self.path.to_string(),
            offset: self.at,
            sample: 0,
            problem: format!("the WAV header is cut short at byte offset {}{len}", self.at),
        }
    }

    fn read(&mut self, buf: &mut [u8]) -> Result<(), CaptureError> {
        self.r.read_exact(buf).map_err(|source| match source.kind() {
            std::io::ErrorKind::UnexpectedEof => self.cut_short(),
            _ => CaptureError::Io {
                path: self.path.to_string(),
                doing: "cannot read the WAV header",
                offset: Some(self.at),
                source,
            },
        })?;
        self.at += buf.len() as u64;
        Ok(())
    }

    /// Skip `n` bytes; returns how many there were.
    fn skip(&mut self, n: u64) -> Result<u64, CaptureError> {
        let skipped =
            std::io::copy(&mut self.r.by_ref().take(n), &mut std::io::sink()).map_err(|source| CaptureError::Io {
                path: self.path.to_string(),
                doing: "cannot read the WAV file",
                offset: Some(self.at),
                source,
            })?;
        self.at += skipped;
        Ok(skipped)
    }
}

/// The 12-byte RIFF preamble: a little-endian RIFF file of form WAVE.
fn check_riff(riff: &[u8; 12], path: &str) -> Result<(), CaptureError> {
    match &riff[0..4] {
        b"RIFF" => {}
        b"RIFX" => {
            return Err(CaptureError::unsupported(
                path,
                "a big-endian RIFX file; lobeflow reads little-endian RIFF WAV files (convert it, e.g. to 16-bit or float PCM WAV)",
            ));
        }
        b"RF64" | b"BW64" => {
            return Err(CaptureError::unsupported(
                path,
                "an RF64/BW64 file (WAV with 64-bit sizes, for data over 4 GiB); lobeflow reads RIFF WAV files: split it, or convert it to SigMF or raw samples",
            ));
        }
        other => {
            return Err(CaptureError::whole(
                path,
                format!("not a WAV file: it starts with {:?}, not 'RIFF'", String::from_utf8_lossy(other)),
            ));
        }
    }
    if &riff[8..12] != b"WAVE" {
        return Err(CaptureError::whole(
            path,
            format!("a RIFF file of form {:?}, not 'WAVE'", String::from_utf8_lossy(&riff[8..12])),
        ));
    }
    Ok(())
}

/// Read the RIFF header up to the first byte of the `data` chunk. Chunks
/// other than `fmt ` are skipped, each with its pad byte when its size is
/// odd (RIFF aligns chunks to 2 bytes). `file_len`, when known, explains a
/// header cut short.
pub fn read_header<R: Read>(r: &mut R, path: &str, file_len: Option<u64>) -> Result<WavHeader, CaptureError> {
    let mut bytes = HeaderBytes { r, path, file_len, at: 0 };
    let mut riff = [0u8; 12];
    bytes.read(&mut riff)?;
    check_riff(&riff, path)?;
    let mut fmt: Option<WavHeader> = None;
    loop {
        let mut head = [0u8; 8];
        if let Err(e) = bytes.read(&mut head) {
            return Err(match fmt {
                None => e,
                Some(_) => CaptureError::whole(path, "no 'data' chunk in the WAV file"),
            });
        }
        let id = [head[0], head[1], head[2], head[3]];
        let size = u32::from_le_bytes([head[4], head[5], head[6], head[7]]);
        let chunk = |part: &str| Place::Bytes { part: part.to_string(), offset: bytes.at - 8 };
        match &id {
            b"fmt " => {
                let place = chunk("the 'fmt ' chunk");
                if !(16..=MAX_FMT_BYTES).contains(&size) {
                    let problem = format!("has {size} bytes; it must have 16 to {MAX_FMT_BYTES}");
                    return Err(CaptureError::header(path, place, problem));
                }
                let mut body = vec![0u8; (size + (size & 1)) as usize];
                bytes.read(&mut body)?;
                fmt = Some(parse_fmt(&body[..size as usize], path, place)?);
            }
            b"data" => {
                let Some(mut h) = fmt else {
                    let place = chunk("the 'data' chunk");
                    return Err(CaptureError::header(path, place, "comes before any 'fmt ' chunk"));
                };
                h.data_offset = bytes.at;
                h.data_bytes = (size != u32::MAX).then_some(u64::from(size));
                return Ok(h);
            }
            _ => {
                let name = format!("the '{}' chunk", String::from_utf8_lossy(&id).escape_debug());
                let place = chunk(&name);
                let skip = u64::from(size) + u64::from(size & 1);
                if bytes.skip(skip)? < skip {
                    let problem = format!(
                        "claims {size} bytes but the file ends at byte offset {}, before any 'data' chunk",
                        bytes.at
                    );
                    return Err(CaptureError::header(path, place, problem));
                }
            }
        }
    }
}

/// The fields of a `fmt ` chunk body.
fn parse_fmt(b: &[u8], path: &str, place: Place) -> Result<WavHeader, CaptureError> {
    let u16_at = |i: usize| u16::from_le_bytes([b[i], b[i + 1]]);
    let u32_at = |i: usize| u32::from_le_bytes([b[i], b[i + 1], b[i + 2], b[i + 3]]);
    let mut h = WavHeader {
        tag: u16_at(0),
        channels: u16_at(2),
        rate: u32_at(4),
        block_align: u16_at(12),
        container_bits: u16_at(14),
        valid_bits: u16_at(14),
        data_offset: 0,
        data_bytes: None,
    };
    let bad = |problem: String| Err(CaptureError::header(path, place.clone(), problem));
    if h.tag == TAG_EXTENSIBLE {
        if b.len() < 40 {
            return bad(format!("says WAVE_FORMAT_EXTENSIBLE but has {} bytes, not 40", b.len()));
        }
        let valid = u16_at(18);
        if valid != 0 {
            h.valid_bits = valid;
        }
        h.tag = u16_at(24);
    }
    if h.channels == 0 {
        return bad("has 0 channels".into());
    }
    if h.rate == 0 {
        return bad("has a sample rate of 0".into());
    }
    if h.valid_bits == 0 || h.valid_bits > h.container_bits {
        return bad(format!("has {} valid bits in {}-bit samples", h.valid_bits, h.container_bits));
    }
    Ok(h)
}

impl WavHeader {
    /// The sample encoding and its description; the combinations lobeflow
    /// decodes, others named with their format tag.
    pub fn encoding(&self, path: &str) -> Result<(Encoding, String), CaptureError> {
        // The container is what a frame gives each channel: 24 valid bits may
        // sit in 4 bytes, with or without the extensible form saying so.
        let container = usize::from(self.block_align) / usize::from(self.channels.max(1));
        let bits = self.valid_bits;
        let supported = "supported: PCM integer 8, 16, 24 or 32-bit, IEEE float 32-bit, also as WAVE_FORMAT_EXTENSIBLE";
        let unsupported = || {
            CaptureError::unsupported(
                path,
                format!(
                    "unsupported WAV sample format (format tag 0x{:04x} {}, {bits} bits per sample in {container}-byte containers); {supported}",
                    self.tag,
                    tag_name(self.tag)
                ),
            )
        };
        let encoding = match (self.tag, container, bits) {
            (TAG_FLOAT, 4, 32) => (Encoding::Type(real(SampleFormat::F32)), "IEEE float 32-bit".to_string()),
            (TAG_PCM, 1, 8) => (Encoding::Type(real(SampleFormat::U8)), "PCM unsigned 8-bit".to_string()),
            (TAG_PCM, 2, 16) => (Encoding::Type(real(SampleFormat::I16)), "PCM integer 16-bit".to_string()),
            (TAG_PCM, 3, 24) | (TAG_PCM, 4, 24 | 32) => {
                (Encoding::IntLe { bytes: container, bits: u32::from(bits) }, container_text(bits, container))
            }
            _ => return Err(unsupported()),
        };
        if usize::from(self.block_align) % usize::from(self.channels) != 0 {
            return Err(CaptureError::field(
                path,
                "the WAV header's block align",
                format!("{} bytes do not split into {} channel(s)", self.block_align, self.channels),
            ));
        }
        Ok(encoding)
    }
}

fn real(format: SampleFormat) -> DataType {
    DataType { complex: false, format, big_endian: false }
}

fn container_text(bits: u16, container: usize) -> String {
    if usize::from(bits) == container * 8 {
        format!("PCM integer {bits}-bit")
    } else {
        format!("PCM integer {bits}-bit in {container}-byte containers")
    }
}

fn tag_name(tag: u16) -> &'static str {
    match tag {
        0x0001 => "PCM",
        0x0002 => "ADPCM",
        0x0003 => "IEEE float",
        0x0006 => "A-law",
        0x0007 => "mu-law",
        0x0011 => "IMA ADPCM",
        0x0055 => "MPEG layer 3",
        0xfffe => "extensible",
        _ => "unknown",
    }
}
