//! Raw interleaved sample files: no header, the layout is a SigMF datatype
//! name plus a channel count, and the sample rate comes from the parameters.

use super::datatype::DataType;
use super::error::CaptureError;
use super::reader::{CaptureInfo, CaptureReader, Encoding, Format, OpenOptions};
use crate::MAX_SAMPLE_RATE;
use crate::param::num_text;
use std::fs::File;
use std::io::BufReader;
use std::path::Path;

/// The datatype of a raw capture: given, or the file's extension when that is
/// a datatype name (`capture.cu8`).
pub(crate) fn raw_datatype(path: &str, opts: &OpenOptions) -> Result<DataType, CaptureError> {
    let ext = Path::new(path).extension().and_then(|e| e.to_str()).unwrap_or("");
    match &opts.datatype {
        Some(name) => DataType::parse(name).map_err(|e| e.in_file(path)),
        None => DataType::parse(&ext.to_ascii_lowercase()).map_err(|_| {
            CaptureError::setting(path, "raw data needs a datatype (a SigMF name such as cf32_le, ci16_le, ci8 or cu8)")
        }),
    }
}

/// The rate of a raw capture, which only the caller can know.
pub(crate) fn raw_rate(path: &str, opts: &OpenOptions) -> Result<f64, CaptureError> {
    match opts.rate {
        Some(r) if r.is_finite() && r > 0.0 => check_rate(path, r, "the given rate"),
        _ => Err(CaptureError::setting(path, "raw data carries no sample rate; set rate (e.g. 2.4 MS/s)")),
    }
}

pub fn raw_info(path: &str, opts: &OpenOptions, data_bytes: Option<u64>) -> Result<CaptureInfo, CaptureError> {
    let datatype = raw_datatype(path, opts)?;
    let rate = raw_rate(path, opts)?;
    let channels = check_channels(path, opts.channels.unwrap_or(1).max(1) as u64, "channels")?;
    Ok(CaptureInfo {
        path: path.to_string(),
        meta_path: None,
        format: Format::Raw,
        encoding_text: datatype.to_string(),
        encoding: Encoding::Type(datatype),
        complex: datatype.complex,
        channels,
        rate,
        data_offset: 0,
        data_bytes,
        frequency: None,
        sigmf: None,
    })
}

pub fn open_raw(path: &str, opts: &OpenOptions) -> Result<Box<dyn CaptureReader>, CaptureError> {
    let file = File::open(path).map_err(CaptureError::io(path, "cannot open the raw capture"))?;
    let len = regular_file_len(&file, path)?;
    let info = raw_info(path, opts, len)?;
    if let Some(len) = len {
        check_whole_frames(&info, len)?;
    }
    Ok(super::mapped::file_frames(info, BufReader::with_capacity(1 << 16, file)))
}

/// The length of a regular file; None for a FIFO, socket or character
/// device, which is read as a stream to its end like standard input.
pub(crate) fn regular_file_len(file: &File, path: &str) -> Result<Option<u64>, CaptureError> {
    let meta = file.metadata().map_err(CaptureError::io(path, "cannot look at the file"))?;
    if meta.is_dir() {
        return Err(CaptureError::whole(path, "is a folder, not a capture file"));
    }
    Ok(meta.is_file().then_some(meta.len()))
}

/// Most channels a raw or SigMF capture may interleave (the `channels`
/// parameter's limit too).
pub const MAX_CHANNELS: u64 = 64;

pub(crate) fn check_channels(path: &str, n: u64, what: &str) -> Result<usize, CaptureError> {
    if n > MAX_CHANNELS {
        return Err(CaptureError::unsupported(
            path,
            format!("{what} {n} is more than lobeflow reads (at most {MAX_CHANNELS} interleaved channels)"),
        ));
    }
    Ok(n as usize)
}

/// A sample rate lobeflow can work with: finite, positive and at most
/// [`MAX_SAMPLE_RATE`] (beyond it sample counts and times lose their meaning).
pub(crate) fn check_rate(path: &str, rate: f64, what: &str) -> Result<f64, CaptureError> {
    if !(rate.is_finite() && rate > 0.0 && rate <= MAX_SAMPLE_RATE) {
        return Err(CaptureError::unsupported(
            path,
            format!(
                "{what} {} S/s is unusable; a sample rate must be above 0 and at most {MAX_SAMPLE_RATE:e} S/s",
                num_text(rate)
            ),
        ));
    }
    Ok(rate)
}

/// A data file must hold whole frames; say where the partial one starts.
pub(crate) fn check_whole_frames(info: &CaptureInfo, data_bytes: u64) -> Result<(), CaptureError> {
    let frame = info.frame_bytes() as u64;
    let rest = data_bytes % frame;
    if rest != 0 {
        let whole = data_bytes - rest;
        let offset = info.data_offset + whole;
        return Err(CaptureError::Truncated {
            path: info.path.clone(),
            offset,
            sample: whole / frame,
            problem: format!(
                "{data_bytes} bytes of data is not a whole number of frames ({} channel(s) of {} = {frame} bytes each): {rest} byte(s) left over at byte offset {offset}",
                info.channels, info.encoding_text,
            ),
        });
    }
    Ok(())
}
