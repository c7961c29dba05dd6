//! Writing captures: complex IQ plus optional real aux channels (switch sync,
//! transmit trigger), streamed frame by frame to WAV (float32 or int16, via
//! hound) or SigMF (`cf32_le`, `ci16_le`, `cu8` data plus `.sigmf-meta`).
//!
//! Layouts:
//! - WAV: one channel per signal, in the order i, q, then the aux channels.
//! - SigMF: `core:num_channels` = 1 + aux count; every channel is complex and
//!   channels interleave sample by sample. An aux channel carries its value
//!   in the real part (imaginary part 0).
//!
//! IQ is multiplied by [`WriterConfig::scale`] before encoding; aux values
//! are written as they are (sync levels and trigger stay within [-1, 1]).
//! Integer encodings round and clip as [`DataType::encode`] does.
//!
//! Every file goes to a temporary name first ([`OutputFile`]) and is renamed
//! into place by the run's [`FileStager`], so a failed run leaves nothing
//! that looks complete. Outside a graph run use [`CaptureWriter::commit`].

use super::datatype::{DataType, SampleFormat};
use super::error::CaptureError;
use super::sigmf_meta::{Annotation, Capture, Global, SIGMF_VERSION, SigmfMeta};
use crate::{Choice, FileStager, OutputFile};
use num_complex::Complex32;
use serde_json::Map;
use std::io::{Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

/// Output encodings, by the names used in graph and scenario files.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum WriteFormat {
    WavF32,
    WavI16,
    /// SigMF with this (complex) datatype.
    Sigmf(DataType),
}

crate::block_choice! {
    /// The names of the output encodings, in catalog order (the
    /// `capture_writer` choice and the synthesizer's `format`).
    pub enum CaptureFormat {
        WavF32 = "wav_f32",
        WavI16 = "wav_i16",
        SigmfCf32 = "sigmf_cf32_le",
        SigmfCi16 = "sigmf_ci16_le",
        SigmfCu8 = "sigmf_cu8",
    }
}

/// Names accepted by [`WriteFormat::parse`], in catalog order.
pub const WRITE_FORMAT_NAMES: &[&str] = CaptureFormat::WORDS;

impl From<CaptureFormat> for WriteFormat {
    fn from(f: CaptureFormat) -> WriteFormat {
        let sigmf = |format| WriteFormat::Sigmf(DataType { complex: true, format, big_endian: false });
        match f {
            CaptureFormat::WavF32 => WriteFormat::WavF32,
            CaptureFormat::WavI16 => WriteFormat::WavI16,
            CaptureFormat::SigmfCf32 => sigmf(SampleFormat::F32),
            CaptureFormat::SigmfCi16 => sigmf(SampleFormat::I16),
            CaptureFormat::SigmfCu8 => sigmf(SampleFormat::U8),
        }
    }
}

impl WriteFormat {
    pub fn parse(name: &str) -> Result<WriteFormat, CaptureError> {
        CaptureFormat::from_word(name).map(WriteFormat::from).ok_or_else(|| {
            CaptureError::unsupported(
                "",
                format!("unknown capture format '{name}' (one of {})", WRITE_FORMAT_NAMES.join(", ")),
            )
        })
    }

    pub fn is_sigmf(&self) -> bool {
        matches!(self, WriteFormat::Sigmf(_))
    }

    /// True when samples are stored as integers (and can clip).
    pub fn is_integer(&self) -> bool {
        match self {
            WriteFormat::WavF32 => false,
            WriteFormat::WavI16 => true,
            WriteFormat::Sigmf(dt) => dt.format != SampleFormat::F32,
        }
    }

    /// Size of one quantisation step of a component in [-1, 1) (0 for floats).
    pub fn step(&self) -> f64 {
        match self {
            WriteFormat::WavF32 => 0.0,
            WriteFormat::WavI16 => 1.0 / 32768.0,
            WriteFormat::Sigmf(dt) => match dt.format {
                SampleFormat::F32 => 0.0,
                SampleFormat::I16 => 1.0 / 32768.0,
                SampleFormat::I8 | SampleFormat::U8 => 1.0 / 128.0,
            },
        }
    }

    /// The files written for `prefix`: WAV gets `.wav`, SigMF gets
    /// `.sigmf-data` and `.sigmf-meta` (data first).
    pub fn paths_for_prefix(&self, prefix: &Path) -> Vec<PathBuf> {
        let with = |ext: &str| {
            let mut s = prefix.as_os_str().to_os_string();
            s.push(ext);
            PathBuf::from(s)
        };
        match self {
            WriteFormat::WavF32 | WriteFormat::WavI16 => vec![with(".wav")],
            WriteFormat::Sigmf(_) => vec![with(".sigmf-data"), with(".sigmf-meta")],
        }
    }
}

/// What an aux channel holds (for the channel count and messages).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum AuxRole {
    Sync,
    Trigger,
}

impl AuxRole {
    pub fn name(&self) -> &'static str {
        match self {
            AuxRole::Sync => "sync",
            AuxRole::Trigger => "trigger",
        }
    }
}

/// Everything fixed for the life of one written capture.
#[derive(Clone, Debug)]
pub struct WriterConfig {
    pub format: WriteFormat,
    /// Samples per second.
    pub rate: f64,
    /// Aux channels, in the order they are written after the IQ.
    pub aux: Vec<AuxRole>,
    /// Factor applied to IQ before encoding.
    pub scale: f32,
    /// SigMF: centre frequency of the capture segment, Hz.
    pub frequency: Option<f64>,
    /// SigMF: `core:description`.
    pub description: Option<String>,
    /// SigMF: annotations carried on from the source (sample indices of this file).
    pub annotations: Vec<Annotation>,
}

impl WriterConfig {
    pub fn new(format: WriteFormat, rate: f64) -> WriterConfig {
        WriterConfig {
            format,
            rate,
            aux: Vec::new(),
            scale: 1.0,
            frequency: None,
            description: None,
            annotations: Vec::new(),
        }
    }
}

/// An [`OutputFile`] that hound can seek in. When hound's writer is dropped
/// (after `finalize`), the file goes back into `slot` so it can be staged.
struct SeekableOutput {
    file: Option<OutputFile>,
    slot: Arc<Mutex<Option<OutputFile>>>,
}

impl SeekableOutput {
    fn inner(&mut self) -> std::io::Result<&mut OutputFile> {
        self.file.as_mut().ok_or_else(|| std::io::Error::other("output already closed"))
    }
}

impl Write for SeekableOutput {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        self.inner()?.write(buf)
    }
    fn flush(&mut self) -> std::io::Result<()> {
        self.inner()?.flush()
    }
}

impl Seek for SeekableOutput {
    fn seek(&mut self, pos: SeekFrom) -> std::io::Result<u64> {
        self.inner()?.writer().seek(pos)
    }
}

impl Drop for SeekableOutput {
    fn drop(&mut self) {
        if let Some(f) = self.file.take() {
            *self.slot.lock().unwrap_or_else(|e| e.into_inner()) = Some(f);
        }
    }
}

/// hound counts data bytes in a u32: stop well before it wraps.
const WAV_MAX_DATA_BYTES: u64 = u32::MAX as u64 - 4096;

enum Sink {
    Wav { writer: hound::WavWriter<SeekableOutput>, slot: Arc<Mutex<Option<OutputFile>>>, int16: bool },
    Sigmf { data: OutputFile, meta_path: PathBuf, datatype: DataType },
}

/// Streams frames to one capture. See the module docs for the layouts.
pub struct CaptureWriter {
    sink: Sink,
    config: WriterConfig,
    frames: u64,
    /// Reused per write: interleaved components, then their encoding.
    components: Vec<f32>,
    bytes: Vec<u8>,
    path: PathBuf,
}

fn io_error<'a>(doing: &'static str, path: &'a Path) -> impl Fn(std::io::Error) -> CaptureError + 'a {
    move |source| CaptureError::Io { path: path.display().to_string(), doing, offset: None, source }
}

fn wav_error<'a>(doing: &'static str, path: &'a Path) -> impl Fn(hound::Error) -> CaptureError + 'a {
    move |source| CaptureError::WavEncoder { path: path.to_path_buf(), doing, source }
}

/// Writer settings that do not fit the format or the data given.
fn setting_error(path: &Path, problem: impl Into<String>) -> CaptureError {
    CaptureError::setting(&path.display().to_string(), problem)
}

impl CaptureWriter {
    /// Start writing to `path` (for SigMF: the `.sigmf-data` path; the meta
    /// file goes beside it with the `.sigmf-meta` extension).
    pub fn create(path: &Path, config: WriterConfig) -> Result<CaptureWriter, CaptureError> {
        Self::create_staged(path, config, &FileStager::default())
    }

    /// As [`CaptureWriter::create`], the files kept by `stager` until its commit.
    pub fn create_staged(
        path: &Path,
        config: WriterConfig,
        stager: &FileStager,
    ) -> Result<CaptureWriter, CaptureError> {
        if !(config.rate.is_finite() && config.rate > 0.0) {
            return Err(setting_error(path, format!("sample rate {} is not a positive number", config.rate)));
        }
        if !(config.scale.is_finite() && config.scale > 0.0) {
            return Err(setting_error(path, format!("IQ scale {} is not a positive number", config.scale)));
        }
        let open = |p: &Path| stager.create(p).map_err(io_error("cannot write", p));
        let sink = match config.format {
            WriteFormat::WavF32 | WriteFormat::WavI16 => {
                let rate = config.rate.round();
                if (rate - config.rate).abs() > 1e-6 * config.rate || rate > u32::MAX as f64 {
                    return Err(setting_error(
                        path,
                        format!("WAV needs a whole sample rate below 2^32 S/s, not {}", config.rate),
                    ));
                }
                let int16 = config.format == WriteFormat::WavI16;
                let spec = hound::WavSpec {
                    channels: 2 + config.aux.len() as u16,
                    sample_rate: rate as u32,
                    bits_per_sample: if int16 { 16 } else { 32 },
                    sample_format: if int16 { hound::SampleFormat::Int } else { hound::SampleFormat::Float },
                };
                let slot = Arc::new(Mutex::new(None));
                let out = SeekableOutput { file: Some(open(path)?), slot: Arc::clone(&slot) };
                let writer = hound::WavWriter::new(out, spec).map_err(wav_error("cannot start WAV", path))?;
                Sink::Wav { writer, slot, int16 }
            }
            WriteFormat::Sigmf(datatype) => {
                if !datatype.complex {
                    return Err(setting_error(path, format!("SigMF output needs a complex datatype, not {datatype}")));
                }
                Sink::Sigmf { data: open(path)?, meta_path: path.with_extension("sigmf-meta"), datatype }
            }
        };
        Ok(CaptureWriter {
            sink,
            config,
            frames: 0,
            components: Vec::new(),
            bytes: Vec::new(),
            path: path.to_path_buf(),
        })
    }

    /// Frames (samples per channel) written so far.
    pub fn frames(&self) -> u64 {
        self.frames
    }

    pub fn config(&self) -> &WriterConfig {
        &self.config
    }

    /// Add a SigMF annotation (ignored for WAV, which has no place for it).
    pub fn annotate(&mut self, a: Annotation) {
        self.config.annotations.push(a);
    }

    /// Append frames: `iq` and one slice per configured aux channel, each as
    /// long as `iq`.
    pub fn write(&mut self, iq: &[Complex32], aux: &[&[f32]]) -> Result<(), CaptureError> {
        if aux.len() != self.config.aux.len() {
            return Err(setting_error(
                &self.path,
                format!("{} aux channels given, {} configured", aux.len(), self.config.aux.len()),
            ));
        }
        if let Some((i, a)) = aux.iter().enumerate().find(|(_, a)| a.len() != iq.len()) {
            return Err(setting_error(
                &self.path,
                format!("{} channel has {} samples where the IQ has {}", self.config.aux[i].name(), a.len(), iq.len()),
            ));
        }
        let scale = self.config.scale;
        let n_aux = aux.len();
        self.components.clear();
        match &mut self.sink {
            Sink::Wav { writer, int16, .. } => {
                let width = (2 + n_aux) as u64 * if *int16 { 2 } else { 4 };
                if (self.frames + iq.len() as u64) * width > WAV_MAX_DATA_BYTES {
                    return Err(setting_error(
                        &self.path,
                        "a WAV file holds at most 4 GiB of samples; use a SigMF format for longer captures",
                    ));
                }
                for (k, x) in iq.iter().enumerate() {
                    self.components.push(x.re * scale);
                    self.components.push(x.im * scale);
                    self.components.extend(aux.iter().map(|a| a[k]));
                }
                let wav_err = wav_error("writing", &self.path);
                if *int16 {
                    self.bytes.clear();
                    I16_LE.encode(&self.components, &mut self.bytes);
                    for b in self.bytes.chunks_exact(2) {
                        writer.write_sample(i16::from_le_bytes([b[0], b[1]])).map_err(&wav_err)?;
                    }
                } else {
                    for &v in &self.components {
                        writer.write_sample(v).map_err(&wav_err)?;
                    }
                }
            }
            Sink::Sigmf { data, datatype, .. } => {
                for (k, x) in iq.iter().enumerate() {
                    self.components.push(x.re * scale);
                    self.components.push(x.im * scale);
                    for a in aux {
                        self.components.push(a[k]);
                        self.components.push(0.0);
                    }
                }
                self.bytes.clear();
                datatype.encode(&self.components, &mut self.bytes);
                data.write_all(&self.bytes).map_err(io_error("writing", &self.path))?;
            }
        }
        self.frames += iq.len() as u64;
        Ok(())
    }

    /// The SigMF metadata this writer would write now.
    pub fn sigmf_meta(&self) -> Option<SigmfMeta> {
        let Sink::Sigmf { datatype, .. } = &self.sink else {
            return None;
        };
        let global = Global {
            datatype: datatype.to_string(),
            version: SIGMF_VERSION.to_string(),
            sample_rate: Some(self.config.rate),
            num_channels: Some(1 + self.config.aux.len() as u64),
            offset: None,
            description: self.config.description.clone(),
            other: Map::new(),
        };
        let capture = Capture { sample_start: 0, frequency: self.config.frequency, datetime: None, other: Map::new() };
        let mut annotations = self.config.annotations.clone();
        annotations.sort_by_key(|a| a.sample_start);
        Some(SigmfMeta { global, captures: vec![capture], annotations })
    }

    /// Close every file and hand it to `stager` for the final rename.
    /// Returns the final paths.
    pub fn finish(self, stager: &FileStager) -> Result<Vec<PathBuf>, CaptureError> {
        let meta = self.sigmf_meta();
        let path = self.path;
        match self.sink {
            Sink::Wav { writer, slot, .. } => {
                writer.finalize().map_err(wav_error("finishing", &path))?;
                let file = slot.lock().unwrap_or_else(|e| e.into_inner()).take();
                let lost = || std::io::Error::other("the file was lost");
                let file = file.ok_or_else(lost).map_err(io_error("finishing", &path))?;
                file.finish(stager).map_err(io_error("finishing", &path))?;
                Ok(vec![path])
            }
            Sink::Sigmf { data, meta_path, .. } => {
                data.finish(stager).map_err(io_error("finishing", &path))?;
                let mut meta_file = stager.create(&meta_path).map_err(io_error("cannot write", &meta_path))?;
                let json = serde_json::to_string_pretty(&meta)
                    .map_err(|source| CaptureError::MetaEncoding { path: meta_path.clone(), source })?;
                meta_file
                    .write_all(json.as_bytes())
                    .and_then(|_| meta_file.write_all(b"\n"))
                    .and_then(|_| meta_file.finish(stager))
                    .map_err(io_error("finishing", &meta_path))?;
                Ok(vec![path, meta_path])
            }
        }
    }

    /// Outside a graph run: finish and rename into place at once.
    pub fn commit(self) -> Result<Vec<PathBuf>, CaptureError> {
        let stager = FileStager::default();
        let paths = self.finish(&stager)?;
        commit_staged(&stager)?;
        Ok(paths)
    }
}

/// Rename everything `stager` holds into place (outside a graph run); on
/// failure the remaining temporary files are deleted.
pub fn commit_staged(stager: &FileStager) -> Result<Vec<PathBuf>, CaptureError> {
    stager.commit().map_err(|source| {
        stager.discard();
        // The commit's error names the file it stopped at.
        CaptureError::Io { path: String::new(), doing: "cannot move outputs into place", offset: None, source }
    })
}

const I16_LE: DataType = DataType { complex: false, format: SampleFormat::I16, big_endian: false };

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn format_names_parse_and_unknown_is_explained() {
        for n in WRITE_FORMAT_NAMES {
            assert!(WriteFormat::parse(n).is_ok(), "{n}");
        }
        let e = WriteFormat::parse("wav_f64").unwrap_err().to_string();
        assert!(e.contains("wav_f32") && e.contains("sigmf_cu8"), "{e}");
        assert!(WriteFormat::parse("sigmf_cu8").unwrap().is_integer());
        assert!(!WriteFormat::parse("sigmf_cf32_le").unwrap().is_integer());
    }

    #[test]
    fn mismatched_aux_is_an_error_and_dropped_writer_leaves_no_file() {
        let dir = std::env::temp_dir().join(format!("lobeflow-write-unit-{}", std::process::id()));
        let path = dir.join("x.wav");
        let mut cfg = WriterConfig::new(WriteFormat::WavF32, 1000.0);
        cfg.aux = vec![AuxRole::Sync];
        let mut w = CaptureWriter::create(&path, cfg).unwrap();
        let iq = [Complex32::new(0.1, 0.2); 4];
        assert!(w.write(&iq, &[]).unwrap_err().to_string().contains("aux"));
        assert!(w.write(&iq, &[&[0.0; 3]]).unwrap_err().to_string().contains("sync channel has 3"));
        w.write(&iq, &[&[0.5; 4]]).unwrap();
        drop(w);
        assert!(!path.exists());
        let leftovers = std::fs::read_dir(&dir).map(|d| d.count()).unwrap_or(0);
        assert_eq!(leftovers, 0, "temporary file left behind");
        let _ = std::fs::remove_dir_all(&dir);
    }
}
