//! Entry points for the fuzz targets under `fuzz/` and their regression
//! tests (`tests/suite/hostile_fuzz_inputs.rs`, on stable): each takes arbitrary
//! bytes, feeds them to one parser the way a user's file would reach it,
//! and returns what it made of them. None may panic, hang or allocate
//! without bound; errors must say where (checked by [`error_has_place`]).
//!
//! Parsers that take a path get the bytes through a scratch file in a
//! folder private to the process and thread.

use crate::capture::{DataType, OpenOptions, open};
use std::path::{Path, PathBuf};

/// Frames read from one fuzzed capture at most, so a valid header with a
/// large data chunk stays fast.
const MAX_FRAMES: usize = 1 << 16;

/// A folder for scratch files, one per process and thread.
fn scratch() -> PathBuf {
    let id = format!("{:?}", std::thread::current().id()).replace(|c: char| !c.is_ascii_alphanumeric(), "");
    let dir = std::env::temp_dir().join(format!("lobeflow-fuzz-{}-{id}", std::process::id()));
    let _ = std::fs::create_dir_all(&dir);
    dir
}

fn write_scratch(name: &str, data: &[u8]) -> Option<PathBuf> {
    let path = scratch().join(name);
    std::fs::write(&path, data).ok().map(|_| path)
}

/// Read a capture through `open` to its end (or [`MAX_FRAMES`]).
fn read_capture(path: &str, opts: &OpenOptions) -> Result<u64, String> {
    let mut reader = open(path, opts).map_err(|e| e.to_string())?;
    let mut out = Vec::new();
    let mut frames = 0u64;
    while frames < MAX_FRAMES as u64 {
        let n = reader.read_frames(4096, &mut out).map_err(|e| e.to_string())?;
        if n == 0 {
            break;
        }
        frames += n as u64;
    }
    Ok(frames)
}

/// A WAV file: header, encoding and data.
pub fn wav_reader(data: &[u8]) -> Result<u64, String> {
    let path = write_scratch("capture.wav", data).ok_or("scratch file")?;
    read_capture(&path.to_string_lossy(), &OpenOptions::default())
}

/// A SigMF recording: the bytes are the metadata; the data file holds 256
/// bytes of a ramp, so datatype, channels, offsets and rates are exercised.
pub fn sigmf_meta(data: &[u8]) -> Result<u64, String> {
    let meta = write_scratch("rec.sigmf-meta", data).ok_or("scratch file")?;
    let ramp: Vec<u8> = (0..=255u8).collect();
    write_scratch("rec.sigmf-data", &ramp).ok_or("scratch file")?;
    read_capture(&meta.to_string_lossy(), &OpenOptions::default())
}

/// Raw interleaved samples: the first byte picks a datatype name (or the
/// text up to the first newline is taken as one), the second a channel
/// count; the rest is the data.
pub fn raw_datatypes(data: &[u8]) -> Result<u64, String> {
    const NAMES: [&str; 12] =
        ["cf32_le", "cf32_be", "rf32_le", "ci16_le", "ci16_be", "ri16_le", "ci8", "ri8", "cu8", "ru8", "cf64_le", "x"];
    let (name, rest) = match data.split_first() {
        None => return Err("empty".into()),
        Some((&b, rest)) if b & 0x80 == 0 => (NAMES[usize::from(b) % NAMES.len()].to_string(), rest),
        Some((_, rest)) => {
            let end = rest.iter().position(|&c| c == b'\n').unwrap_or(rest.len());
            (String::from_utf8_lossy(&rest[..end]).into_owned(), &rest[(end + 1).min(rest.len())..])
        }
    };
    let (channels, body) = match rest.split_first() {
        Some((&c, body)) => (usize::from(c), body),
        None => (1, rest),
    };
    if let Ok(dt) = DataType::parse(&name) {
        let mut out = Vec::new();
        dt.decode(body, &mut out);
    }
    let path = write_scratch("capture.raw", body).ok_or("scratch file")?;
    let opts = OpenOptions {
        format: crate::capture::Format::Raw,
        datatype: Some(name),
        rate: Some(1e6),
        channels: (channels > 0).then_some(channels),
    };
    read_capture(&path.to_string_lossy(), &opts)
}

/// Split `data` at the first line holding only `---8<---` (the rest is the
/// second part).
fn split_parts(data: &[u8]) -> (String, String) {
    let text = String::from_utf8_lossy(data).into_owned();
    match text.split_once("\n---8<---\n") {
        Some((a, b)) => (a.to_string(), b.to_string()),
        None => (text, String::new()),
    }
}

/// A graph file with overrides: the bytes hold the graph YAML, then after a
/// `---8<---` line any number of `--set` lines, and after a second such line
/// a params file. Composites (`use:`) resolve against the scratch folder,
/// which also holds `part.yaml`, a copy of the same graph.
pub fn graph_load(data: &[u8]) -> Result<usize, String> {
    let (graph, rest) = split_parts(data);
    let (sets, params) = match rest.split_once("\n---8<---\n") {
        Some((s, p)) => (s.to_string(), Some(p.to_string())),
        None => (rest, None),
    };
    let path = write_scratch("graph.yaml", graph.as_bytes()).ok_or("scratch file")?;
    write_scratch("part.yaml", graph.as_bytes()).ok_or("scratch file")?;
    let params_path = match &params {
        Some(p) => Some(write_scratch("params.yaml", p.as_bytes()).ok_or("scratch file")?),
        None => None,
    };
    let sets: Vec<String> = sets.lines().filter(|l| !l.is_empty()).take(64).map(str::to_string).collect();
    let overrides = crate::commands::overrides(params_path.as_deref(), &sets, None).map_err(|e| e.to_string())?;
    let g = crate::graph::resolve(&path, &overrides, &crate::registry()).map_err(|e| e.to_string())?;
    Ok(crate::commands::check::describe(&g).len())
}

/// A sample manifest (`*.check.yaml`).
pub fn manifest(data: &[u8]) -> Result<usize, String> {
    let path = write_scratch("sample.check.yaml", data).ok_or("scratch file")?;
    let m = crate::regress::manifest::Manifest::load(&path).map_err(|e| e.to_string())?;
    Ok(m.checks.len())
}

/// A synthesizer scenario: parsed, checked, and its first chunk generated.
pub fn scenario(data: &[u8]) -> Result<usize, String> {
    use crate::synth::generate::{Frames, Generator};
    use crate::synth::model::Model;
    let text = String::from_utf8_lossy(data).into_owned();
    let file = crate::synth::scenario::ScenarioFile::parse(&scratch().join("scenario.yaml"), text)?;
    let model = Model::from_file(&file)?;
    let mut generator = Generator::new(model);
    let mut frames = Frames::default();
    generator.next_chunk(&mut frames);
    Ok(frames.iq.len())
}

/// True when an error message says where: a file (with a line, a byte
/// offset or a field), a parameter or a sample.
pub fn error_has_place(message: &str) -> bool {
    let has_file = [".wav", ".sigmf-meta", ".sigmf-data", ".raw", ".yaml", "--set"].iter().any(|f| message.contains(f));
    has_file || message.contains("parameter '") || message.contains("knob '")
}

/// Remove this thread's scratch folder.
pub fn clean_scratch() {
    let _ = std::fs::remove_dir_all(scratch());
}

/// The committed inputs of one target: its seeds and the inputs fuzzing
/// found (`tests/bad_inputs/fuzz/<target>/`).
pub fn committed_inputs(root: &Path, target: &str) -> Vec<PathBuf> {
    let mut files: Vec<PathBuf> = std::fs::read_dir(root.join(target))
        .map(|d| d.filter_map(|e| e.ok().map(|e| e.path())).filter(|p| p.is_file()).collect())
        .unwrap_or_default();
    files.sort();
    files
}
