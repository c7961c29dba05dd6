//! SigMF recordings (spec 1.2.x): `X.sigmf-meta` (JSON) beside `X.sigmf-data`.
//! Either file or the base name `X` opens the pair. Channels are interleaved
//! sample by sample; see `sigmf_meta.rs` for how sample indices are counted.

use super::datatype::DataType;
use super::raw::{check_channels, check_whole_frames, regular_file_len};
use super::reader::{
    CaptureInfo, CaptureReader, Encoding, Format, FrameStream, OpenOptions, agree_channels, agree_rate,
};
use super::sigmf_meta::SigmfMeta;
use crate::BlockError;
use serde_json::Value;
use std::fs::File;
use std::io::{BufReader, Read};
use std::path::{Path, PathBuf};

const META_EXT: &str = ".sigmf-meta";
const DATA_EXT: &str = ".sigmf-data";
/// Metadata files beyond this are refused rather than read into memory: the
/// parsed JSON takes about 17 times the file's size, so 8 MiB stays well
/// inside the memory ceiling (README, "Limits").
pub const MAX_META_BYTES: u64 = 8 << 20;

fn base_of(path: &str) -> &str {
    path.strip_suffix(META_EXT).or_else(|| path.strip_suffix(DATA_EXT)).unwrap_or(path)
}

/// The metadata file of the recording `path` names (meta, data or base name).
pub fn meta_path_for(path: &str) -> PathBuf {
    PathBuf::from(format!("{}{META_EXT}", base_of(path)))
}

/// The data file of the recording `path` names.
pub fn data_path_for(path: &str) -> PathBuf {
    PathBuf::from(format!("{}{DATA_EXT}", base_of(path)))
}

/// Read and check a `.sigmf-meta` file; errors name the file and the field.
pub fn read_meta(meta_path: &Path) -> Result<SigmfMeta, BlockError> {
    let m = meta_path.display();
    let len = std::fs::metadata(meta_path)
        .map_err(|e| BlockError::new(format!("{m}: cannot read the SigMF metadata: {e}")))?
        .len();
    if len > MAX_META_BYTES {
        return Err(BlockError::new(format!(
            "{m}: metadata file of {len} bytes is too large (lobeflow reads SigMF metadata of at most {MAX_META_BYTES} bytes, 8 MiB)"
        )));
    }
    // Read through a limit too: a FIFO has no length to check beforehand.
    let mut text = String::new();
    std::fs::File::open(meta_path)
        .and_then(|f| f.take(MAX_META_BYTES + 1).read_to_string(&mut text))
        .map_err(|e| BlockError::new(format!("{m}: cannot read the SigMF metadata: {e}")))?;
    if text.len() as u64 > MAX_META_BYTES {
        return Err(BlockError::new(format!(
            "{m}: the metadata is longer than {MAX_META_BYTES} bytes, more than lobeflow reads"
        )));
    }
    parse_meta(&m.to_string(), &text)
}

/// Check the text of a `.sigmf-meta` file; errors name `m` and the field.
pub fn parse_meta(m: &str, text: &str) -> Result<SigmfMeta, BlockError> {
    let json: Value = serde_json::from_str(text).map_err(|e| {
        BlockError::new(format!("{m}: not valid JSON at line {}, column {}: {e}", e.line(), e.column()))
    })?;
    let Some(top) = json.as_object() else {
        return Err(BlockError::new(format!(
            "{m}: the metadata must be a JSON object with global, captures and annotations"
        )));
    };
    for key in ["global", "captures", "annotations"] {
        if !top.contains_key(key) {
            return Err(BlockError::new(format!(
                "{m}: no '{key}' section (SigMF requires global, captures and annotations)"
            )));
        }
    }
    let global =
        top["global"].as_object().ok_or_else(|| BlockError::new(format!("{m}: 'global' must be an object")))?;
    for key in ["core:datatype", "core:version"] {
        match global.get(key) {
            Some(Value::String(_)) => {}
            Some(other) => {
                return Err(BlockError::new(format!("{m}: global {key} must be text, found {other}")));
            }
            None => {
                return Err(BlockError::new(format!("{m}: global has no {key} (required by SigMF)")));
            }
        }
    }
    serde_json::from_value(json).map_err(|e| BlockError::new(format!("{m}: malformed SigMF metadata: {e}")))
}

pub fn open_sigmf(path: &str, opts: &OpenOptions) -> Result<Box<dyn CaptureReader>, BlockError> {
    if path.ends_with(".sigmf") {
        return Err(BlockError::new(format!(
            "{path}: SigMF archives are not read directly; unpack the .sigmf-meta and .sigmf-data files"
        )));
    }
    let meta_path = meta_path_for(path);
    let m = meta_path.display().to_string();
    if !meta_path.exists() {
        return Err(BlockError::new(format!("{m}: no such SigMF metadata file (for capture {path})")));
    }
    let meta = read_meta(&meta_path)?;
    let g = &meta.global;
    if !g.version.starts_with("1.") {
        return Err(BlockError::new(format!("{m}: SigMF version '{}' is not supported (1.x is)", g.version)));
    }
    if g.other.get("core:metadata_only").and_then(Value::as_bool) == Some(true) {
        return Err(BlockError::new(format!("{m}: a metadata-only recording has no samples to read")));
    }
    let datatype =
        DataType::parse(&g.datatype).map_err(|e| BlockError::new(format!("{m}: global core:datatype: {e}")))?;
    if let Some(given) = &opts.datatype {
        match DataType::parse(given) {
            Ok(d) if d == datatype => {}
            _ => {
                return Err(BlockError::new(format!(
                    "{m}: datatype '{given}' was given but core:datatype says '{}'; leave datatype unset",
                    g.datatype
                )));
            }
        }
    }
    let channels = match g.num_channels {
        None => 1,
        Some(0) => {
            return Err(BlockError::new(format!("{m}: global core:num_channels is 0")));
        }
        Some(n) => check_channels(&m, n, "global core:num_channels")?,
    };
    let channels = agree_channels(&m, opts.channels, channels, "global core:num_channels")?;
    let rate = agree_rate(&m, opts.rate, g.sample_rate, "global core:sample_rate")?;
    for (k, pair) in meta.captures.windows(2).enumerate() {
        if pair[1].sample_start < pair[0].sample_start {
            return Err(BlockError::new(format!(
                "{m}: captures[{}] core:sample_start {} comes before captures[{k}]'s {}; captures must be in order",
                k + 1,
                pair[1].sample_start,
                pair[0].sample_start
            )));
        }
    }
    let header_bytes =
        |c: &super::sigmf_meta::Capture| c.other.get("core:header_bytes").and_then(Value::as_u64).unwrap_or(0);
    if let Some((k, _)) = meta.captures.iter().enumerate().skip(1).find(|(_, c)| header_bytes(c) > 0) {
        return Err(BlockError::new(format!(
            "{m}: captures[{k}] has core:header_bytes; header bytes between segments are not supported"
        )));
    }
    let data_offset = meta.captures.first().map(header_bytes).unwrap_or(0);
    let trailing = g.other.get("core:trailing_bytes").and_then(Value::as_u64).unwrap_or(0);

    let data_path = match g.other.get("core:dataset").and_then(Value::as_str) {
        Some(name) => meta_path.parent().unwrap_or(Path::new("")).join(name),
        None => data_path_for(path),
    };
    let d = data_path.display().to_string();
    let file = File::open(&data_path)
        .map_err(|e| BlockError::new(format!("{d}: cannot open the data file of the recording {m}: {e}")))?;
    let data_bytes = match regular_file_len(&file, &d)? {
        Some(len) => match len.checked_sub(data_offset.saturating_add(trailing)) {
            Some(n) => Some(n),
            None => {
                return Err(BlockError::new(format!(
                    "{d}: the file has {len} bytes, fewer than the {data_offset} header and {trailing} trailing bytes the metadata declares"
                )));
            }
        },
        // A FIFO streams to its end; trailing bytes cannot be told apart.
        None if trailing > 0 => {
            return Err(BlockError::new(format!(
                "{d}: is not a regular file, so the {trailing} trailing bytes the metadata declares cannot be found; read it from a file"
            )));
        }
        None => None,
    };
    let info = CaptureInfo {
        path: d,
        meta_path: Some(m),
        format: Format::Sigmf,
        encoding_text: datatype.to_string(),
        encoding: Encoding::Type(datatype),
        complex: datatype.complex,
        channels,
        rate,
        data_offset,
        data_bytes,
        frequency: meta.captures.first().and_then(|c| c.frequency),
        sigmf: Some(meta),
    };
    if let Some(n) = data_bytes {
        check_whole_frames(&info, n)?;
    }
    // Skip the header by reading, not seeking, so a FIFO works too.
    let mut input = BufReader::with_capacity(1 << 16, file);
    let skipped = std::io::copy(&mut (&mut input).take(data_offset), &mut std::io::sink())
        .map_err(|e| BlockError::new(format!("{}: {e}", info.path)))?;
    if skipped < data_offset {
        return Err(BlockError::new(format!(
            "{}: the stream ended at byte offset {skipped}, inside the {data_offset} header bytes the metadata declares",
            info.path
        )));
    }
    Ok(Box::new(FrameStream::new(info, input)))
}
