//! SigMF recordings (spec 1.2.x): `X.sigmf-meta` (JSON) beside `X.sigmf-data`.
//! Either file or the base name `X` opens the pair. Channels are interleaved
//! sample by sample; see `sigmf_meta.rs` for how sample indices are counted.

use super::datatype::DataType;
use super::error::CaptureError;
use super::raw::{check_channels, check_whole_frames, regular_file_len};
use super::reader::{CaptureInfo, CaptureReader, Encoding, Format, OpenOptions, agree_channels, agree_rate};
use super::sigmf_meta::{Capture, SigmfMeta};
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
pub fn read_meta(meta_path: &Path) -> Result<SigmfMeta, CaptureError> {
    let m = meta_path.display().to_string();
    let len = std::fs::metadata(meta_path).map_err(CaptureError::io(&m, "cannot read the SigMF metadata"))?.len();
    if len > MAX_META_BYTES {
        return Err(CaptureError::unsupported(
            &m,
            format!(
                "metadata file of {len} bytes is too large (lobeflow reads SigMF metadata of at most {MAX_META_BYTES} bytes, 8 MiB)"
            ),
        ));
    }
    // Read through a limit too: a FIFO has no length to check beforehand.
    let mut text = String::new();
    std::fs::File::open(meta_path)
        .and_then(|f| f.take(MAX_META_BYTES + 1).read_to_string(&mut text))
        .map_err(CaptureError::io(&m, "cannot read the SigMF metadata"))?;
    if text.len() as u64 > MAX_META_BYTES {
        return Err(CaptureError::unsupported(
            &m,
            format!("the metadata is longer than {MAX_META_BYTES} bytes, more than lobeflow reads"),
        ));
    }
    parse_meta(&m, &text)
}

/// Check the text of a `.sigmf-meta` file; errors name `m` and the field.
pub fn parse_meta(m: &str, text: &str) -> Result<SigmfMeta, CaptureError> {
    let json: Value = serde_json::from_str(text).map_err(|source| CaptureError::BadMetadata {
        path: m.to_string(),
        problem: format!("not valid JSON at line {}, column {}: {source}", source.line(), source.column()),
        source,
    })?;
    let Some(top) = json.as_object() else {
        return Err(CaptureError::whole(m, "the metadata must be a JSON object with global, captures and annotations"));
    };
    for key in ["global", "captures", "annotations"] {
        if !top.contains_key(key) {
            return Err(CaptureError::whole(
                m,
                format!("no '{key}' section (SigMF requires global, captures and annotations)"),
            ));
        }
    }
    let global = top["global"].as_object().ok_or_else(|| CaptureError::field(m, "'global'", "must be an object"))?;
    for key in ["core:datatype", "core:version"] {
        match global.get(key) {
            Some(Value::String(_)) => {}
            Some(other) => {
                return Err(CaptureError::field(m, format!("global {key}"), format!("must be text, found {other}")));
            }
            None => return Err(CaptureError::whole(m, format!("global has no {key} (required by SigMF)"))),
        }
    }
    serde_json::from_value(json).map_err(|source| CaptureError::BadMetadata {
        path: m.to_string(),
        problem: format!("malformed SigMF metadata: {source}"),
        source,
    })
}

/// Open a SigMF recording named by its metadata file, data file or base name.
pub fn open_sigmf(path: &str, opts: &OpenOptions) -> Result<Box<dyn CaptureReader>, CaptureError> {
    if path.ends_with(".sigmf") {
        return Err(CaptureError::unsupported(
            path,
            "SigMF archives are not read directly; unpack the .sigmf-meta and .sigmf-data files",
        ));
    }
    let meta_path = meta_path_for(path);
    let m = meta_path.display().to_string();
    if !meta_path.exists() {
        return Err(CaptureError::NotFound {
            path: m,
            hint: format!("no such SigMF metadata file (for capture {path})"),
        });
    }
    let meta = read_meta(&meta_path)?;
    let layout = Layout::of(&meta, &m, opts)?;
    let data_path = match meta.global.other.get("core:dataset").and_then(Value::as_str) {
        Some(name) => meta_path.parent().unwrap_or(Path::new("")).join(name),
        None => data_path_for(path),
    };
    let d = data_path.display().to_string();
    let file = File::open(&data_path).map_err(CaptureError::io(&d, "cannot open the data file of the recording"))?;
    let data_bytes = layout.data_bytes(regular_file_len(&file, &d)?, &d)?;
    let info = CaptureInfo {
        path: d,
        meta_path: Some(m),
        format: Format::Sigmf,
        encoding_text: layout.datatype.to_string(),
        encoding: Encoding::Type(layout.datatype),
        complex: layout.datatype.complex,
        channels: layout.channels,
        rate: layout.rate,
        data_offset: layout.header_bytes,
        data_bytes,
        frequency: meta.captures.first().and_then(|c| c.frequency),
        sigmf: Some(meta),
    };
    if let Some(n) = data_bytes {
        check_whole_frames(&info, n)?;
    }
    // Skip the header by reading, not seeking, so a FIFO works too.
    let mut input = BufReader::with_capacity(1 << 16, file);
    let header_bytes = layout.header_bytes;
    let skipped = std::io::copy(&mut (&mut input).take(header_bytes), &mut std::io::sink())
        .map_err(CaptureError::io(&info.path, "cannot read the header bytes"))?;
    if skipped < header_bytes {
        return Err(CaptureError::Truncated {
            path: info.path.clone(),
            offset: skipped,
            sample: 0,
            problem: format!(
                "the stream ended at byte offset {skipped}, inside the {header_bytes} header bytes the metadata declares"
            ),
        });
    }
    Ok(super::mapped::file_frames(info, input))
}

/// How the metadata says the data file is laid out, checked against the
/// caller's options.
struct Layout {
    datatype: DataType,
    channels: usize,
    rate: f64,
    /// Bytes before the first sample (`core:header_bytes` of the first segment).
    header_bytes: u64,
    /// Bytes after the last sample (`core:trailing_bytes`).
    trailing_bytes: u64,
}

impl Layout {
    /// Read the layout from `meta` (file `m`).
    fn of(meta: &SigmfMeta, m: &str, opts: &OpenOptions) -> Result<Layout, CaptureError> {
        let g = &meta.global;
        if !g.version.starts_with("1.") {
            return Err(CaptureError::unsupported(
                m,
                format!("SigMF version '{}' is not supported (1.x is)", g.version),
            ));
        }
        if g.other.get("core:metadata_only").and_then(Value::as_bool) == Some(true) {
            return Err(CaptureError::field(
                m,
                "global core:metadata_only",
                "a metadata-only recording has no samples to read",
            ));
        }
        let datatype =
            DataType::parse(&g.datatype).map_err(|e| CaptureError::field(m, "global core:datatype", e.to_string()))?;
        if let Some(given) = &opts.datatype
            && DataType::parse(given).ok() != Some(datatype)
        {
            return Err(CaptureError::setting(
                m,
                format!("datatype '{given}' was given but core:datatype says '{}'; leave datatype unset", g.datatype),
            ));
        }
        let channels = match g.num_channels {
            None => 1,
            Some(0) => return Err(CaptureError::field(m, "global core:num_channels", "is 0")),
            Some(n) => check_channels(m, n, "global core:num_channels")?,
        };
        let channels = agree_channels(m, opts.channels, channels, "global core:num_channels")?;
        let rate = agree_rate(m, opts.rate, g.sample_rate, "global core:sample_rate")?;
        check_segments(&meta.captures, m)?;
        Ok(Layout {
            datatype,
            channels,
            rate,
            header_bytes: meta.captures.first().map(header_bytes).unwrap_or(0),
            trailing_bytes: g.other.get("core:trailing_bytes").and_then(Value::as_u64).unwrap_or(0),
        })
    }

    /// Bytes of samples in data file `d` of `file_len` bytes (None: a stream).
    fn data_bytes(&self, file_len: Option<u64>, d: &str) -> Result<Option<u64>, CaptureError> {
        let (header, trailing) = (self.header_bytes, self.trailing_bytes);
        match file_len {
            Some(len) => match len.checked_sub(header.saturating_add(trailing)) {
                Some(n) => Ok(Some(n)),
                None => Err(CaptureError::Truncated {
                    path: d.to_string(),
                    offset: len,
                    sample: 0,
                    problem: format!(
                        "the file has {len} bytes, fewer than the {header} header and {trailing} trailing bytes the metadata declares"
                    ),
                }),
            },
            // A FIFO streams to its end; trailing bytes cannot be told apart.
            None if trailing > 0 => Err(CaptureError::unsupported(
                d,
                format!(
                    "is not a regular file, so the {trailing} trailing bytes the metadata declares cannot be found; read it from a file"
                ),
            )),
            None => Ok(None),
        }
    }
}

fn header_bytes(c: &Capture) -> u64 {
    c.other.get("core:header_bytes").and_then(Value::as_u64).unwrap_or(0)
}

/// Capture segments in order, header bytes only before the first.
fn check_segments(captures: &[Capture], m: &str) -> Result<(), CaptureError> {
    for (k, pair) in captures.windows(2).enumerate() {
        if pair[1].sample_start < pair[0].sample_start {
            return Err(CaptureError::field(
                m,
                format!("captures[{}] core:sample_start", k + 1),
                format!(
                    "{} comes before captures[{k}]'s {}; captures must be in order",
                    pair[1].sample_start, pair[0].sample_start
                ),
            ));
        }
    }
    if let Some((k, _)) = captures.iter().enumerate().skip(1).find(|(_, c)| header_bytes(c) > 0) {
        return Err(CaptureError::field(
            m,
            format!("captures[{k}] core:header_bytes"),
            "header bytes between segments are not supported",
        ));
    }
    Ok(())
}
