//! WAV (RIFF) captures: hound parses and validates the header, including
//! WAVE_FORMAT_EXTENSIBLE; the data is then read in large blocks and decoded
//! here (hound's per-sample iterator is much slower).

use super::datatype::{DataType, SampleFormat};
use super::reader::{
    CaptureInfo, CaptureReader, Encoding, Format, FrameStream, OpenOptions, agree_channels, agree_rate,
};
use lobeflow_blocks::BlockError;
use std::fs::File;
use std::io::{BufReader, Read, Seek, SeekFrom};

/// Most channels a WAV capture may have (I, Q, sync, trigger and spares).
pub const MAX_WAV_CHANNELS: usize = 8;

pub fn open_wav(path: &str, opts: &OpenOptions) -> Result<Box<dyn CaptureReader>, BlockError> {
    let file = File::open(path).map_err(|e| BlockError::new(format!("{path}: cannot open the WAV file: {e}")))?;
    let file_len = file.metadata().map(|m| m.len()).unwrap_or(0);
    let mut input = BufReader::with_capacity(1 << 16, file);
    let spec = match hound::WavReader::new(&mut input) {
        Ok(r) => (r.spec(), u64::from(r.len())),
        Err(e) => return Err(BlockError::new(explain_header_error(path, e))),
    };
    let (spec, values) = spec;
    let data_offset = input.stream_position().map_err(|e| BlockError::new(format!("{path}: {e}")))?;
    // hound knows, but does not tell, the container size of a sample (24 valid
    // bits may sit in 4 bytes); the data chunk's length field just before the
    // data gives it.
    let data_bytes = u64::from(
        read_u32_at(&mut input, data_offset.saturating_sub(4)).map_err(|e| BlockError::new(format!("{path}: {e}")))?,
    );
    input.seek(SeekFrom::Start(data_offset)).map_err(|e| BlockError::new(format!("{path}: {e}")))?;
    let container = data_bytes
        .checked_div(values)
        .map(|b| b as usize)
        .unwrap_or_else(|| usize::from(spec.bits_per_sample).div_ceil(8));

    let channels = usize::from(spec.channels);
    if channels > MAX_WAV_CHANNELS {
        return Err(BlockError::new(format!(
            "{path}: {channels} channels; lobeflow reads WAV captures of 1 to {MAX_WAV_CHANNELS} channels"
        )));
    }
    let bits = spec.bits_per_sample;
    // The combinations hound itself decodes.
    let (encoding, text) = match (spec.sample_format, container, bits) {
        (hound::SampleFormat::Float, 4, 32) => {
            (Encoding::Type(real(SampleFormat::F32)), "IEEE float 32-bit".to_string())
        }
        (hound::SampleFormat::Int, 1, 8) => (Encoding::Type(real(SampleFormat::U8)), "PCM unsigned 8-bit".to_string()),
        (hound::SampleFormat::Int, 2, 16) => {
            (Encoding::Type(real(SampleFormat::I16)), "PCM integer 16-bit".to_string())
        }
        (hound::SampleFormat::Int, 3, 24) | (hound::SampleFormat::Int, 4, 24 | 32) => {
            (Encoding::IntLe { bytes: container, bits: u32::from(bits) }, container_text(bits, container))
        }
        (fmt, _, _) => {
            return Err(BlockError::new(format!(
                "{path}: unsupported WAV sample format: {} {bits}-bit in {container}-byte containers (supported: PCM integer 8, 16, 24 or 32-bit, IEEE float 32-bit)",
                if fmt == hound::SampleFormat::Float { "IEEE float" } else { "integer" }
            )));
        }
    };
    let end = data_offset + data_bytes;
    if file_len < end {
        let frame_bytes = (container * channels) as u64;
        return Err(BlockError::at(
            format!(
                "{path}: truncated: the header says the data runs from byte offset {data_offset} to {end}, but the file ends at byte offset {file_len} ({} bytes missing)",
                end - file_len
            ),
            file_len.saturating_sub(data_offset) / frame_bytes.max(1),
        ));
    }
    let rate = agree_rate(path, opts.rate, Some(f64::from(spec.sample_rate)), "the WAV header")?;
    agree_channels(path, opts.channels, channels, "the WAV header")?;
    if let Some(dt) = &opts.datatype {
        return Err(BlockError::new(format!(
            "{path}: datatype '{dt}' was given, but a WAV file states its own sample format ({text}); leave datatype unset"
        )));
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
        data_bytes: Some(data_bytes),
        frequency: None,
        sigmf: None,
    };
    Ok(Box::new(FrameStream::new(info, input)))
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

fn read_u32_at<R: Read + Seek>(r: &mut R, at: u64) -> std::io::Result<u32> {
    r.seek(SeekFrom::Start(at))?;
    let mut b = [0u8; 4];
    r.read_exact(&mut b)?;
    Ok(u32::from_le_bytes(b))
}

/// hound's header errors, with the format tag spelled out when it is one we
/// do not read (the usual case: A-law, mu-law, 64-bit float, ADPCM).
fn explain_header_error(path: &str, e: hound::Error) -> String {
    let tag = format_tag(path);
    let tag_text = tag
        .map(|(t, bits)| format!(" (format tag 0x{t:04x} {}, {bits} bits per sample)", tag_name(t)))
        .unwrap_or_default();
    let supported = "supported: PCM integer 8, 16, 24 or 32-bit, IEEE float 32-bit, also as WAVE_FORMAT_EXTENSIBLE";
    match e {
        hound::Error::Unsupported => {
            format!("{path}: unsupported WAV sample format{tag_text}; {supported}")
        }
        hound::Error::FormatError(m) if tag.is_some_and(|(t, bits)| t == 3 && bits != 32) => {
            format!("{path}: unsupported WAV sample format{tag_text}: {m}; {supported}")
        }
        hound::Error::FormatError(m) => format!("{path}: not a readable WAV file: {m}{tag_text}"),
        hound::Error::IoError(io) if io.kind() == std::io::ErrorKind::UnexpectedEof => {
            format!(
                "{path}: the WAV header is cut short (file of {} bytes): {io}",
                std::fs::metadata(path).map(|m| m.len()).unwrap_or(0)
            )
        }
        other => format!("{path}: cannot read the WAV header: {other}"),
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

/// The fmt chunk's format tag and bits per sample, found by walking the RIFF
/// chunks of the first few kilobytes (only used to explain an error).
fn format_tag(path: &str) -> Option<(u16, u16)> {
    let mut head = Vec::new();
    File::open(path).ok()?.take(1 << 16).read_to_end(&mut head).ok()?;
    if head.get(0..4)? != b"RIFF" || head.get(8..12)? != b"WAVE" {
        return None;
    }
    let mut at = 12usize;
    while at + 8 <= head.len() {
        let id = &head[at..at + 4];
        let len = u32::from_le_bytes(head[at + 4..at + 8].try_into().ok()?) as usize;
        if id == b"fmt " {
            let body = head.get(at + 8..at + 8 + 16)?;
            let tag = u16::from_le_bytes([body[0], body[1]]);
            let bits = u16::from_le_bytes([body[14], body[15]]);
            return Some((tag, bits));
        }
        at = at.checked_add(8 + len + (len & 1))?;
    }
    None
}
