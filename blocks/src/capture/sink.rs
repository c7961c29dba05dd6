//! `capture_writer`: writes a derived stream (e.g. one lobe's samples) to a
//! WAV or SigMF capture, through the run's file stager.

use super::sigmf_meta::Annotation;
use super::write::{AuxRole, CaptureFormat, CaptureWriter, WriteFormat, WriterConfig};
use crate::{
    BlockError, BlockSpec, BuildContext, BuildError, FileStager, Item, ItemKind, LobeSegment, NoPorts, Outputs,
    ParamError, ParamType, SampleChunk, Stamp, TypedBlock, block_ports, block_settings,
};
use serde_json::Map;
use std::path::PathBuf;

pub const SPEC: BlockSpec = BlockSpec::typed::<CaptureSink>(
    "capture_writer",
    "Writes the samples it receives (a whole stream, or the lobe segments of one lobe) to a WAV or SigMF capture, \
     in arrival order and without gaps; the sync and trigger channels are kept when the first item has them. \
     The file appears only when the run succeeds.",
);

block_ports! {
    inputs pub enum SinkIn {
        Samples = optional("samples", ItemKind::Samples, "sample chunks to write"),
        Segments = optional("segments", ItemKind::Segment, "lobe segments to write (filtered by `lobe`)"),
    }
}

block_settings! {
    /// Settings of `capture_writer`.
    pub struct CaptureSinkSettings {
        path: PathBuf {
            ty: ParamType::OutputPath,
            default: None,
            doc: "file to write (SigMF: the .sigmf-data path; the .sigmf-meta goes beside it)",
        },
        format: CaptureFormat {
            ty: ParamType::Choice(CaptureFormat::WORDS),
            default: Some("sigmf_cf32_le"),
            doc: "encoding of the written capture",
        },
        lobe: String {
            ty: ParamType::Text,
            default: Some(""),
            doc: "keep only segments of this lobe name (empty: all lobes)",
        },
        annotate_dwells: bool {
            ty: ParamType::Bool,
            default: Some("false"),
            doc: "SigMF: one annotation per dwell, labelled with the lobe name",
        },
    }
}

impl TypedBlock for CaptureSink {
    type Settings = CaptureSinkSettings;
    type In = SinkIn;
    type Out = NoPorts;

    fn build(s: CaptureSinkSettings, ctx: &BuildContext) -> Result<Self, BuildError> {
        let format = WriteFormat::from(s.format);
        if s.annotate_dwells && !format.is_sigmf() {
            return Err(ParamError::invalid(
                "annotate_dwells",
                "needs a SigMF format (WAV has no place for annotations)",
            )
            .into());
        }
        if s.path.as_os_str().is_empty() {
            return Err(ParamError::invalid("path", "is empty").into());
        }
        Ok(CaptureSink {
            path: s.path,
            format,
            lobe: s.lobe.trim().to_string(),
            annotate: s.annotate_dwells,
            files: ctx.files.clone(),
            writer: None,
            aux: Vec::new(),
            open_dwell: None,
            missing_aux_noticed: false,
            extra_aux_noticed: false,
            zeros: Vec::new(),
        })
    }

    fn process(&mut self, port: SinkIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match (port, item) {
            (SinkIn::Samples, Item::Samples(chunk)) => {
                self.close_dwell();
                self.write_chunk(&chunk, out)
            }
            (SinkIn::Segments, Item::Segment(seg)) => self.write_segment(&seg, out),
            (SinkIn::Samples | SinkIn::Segments, _) => Ok(()),
        }
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.finish_file(out)
    }
}

/// The dwell being written, for its annotation.
struct OpenDwell {
    dwell: u64,
    lobe: String,
    /// Index in the written file where the dwell's first kept sample went.
    file_start: u64,
    /// Index of that sample in the source capture.
    source_start: u64,
}

pub struct CaptureSink {
    path: PathBuf,
    format: WriteFormat,
    lobe: String,
    annotate: bool,
    files: FileStager,
    writer: Option<CaptureWriter>,
    aux: Vec<AuxRole>,
    open_dwell: Option<OpenDwell>,
    missing_aux_noticed: bool,
    extra_aux_noticed: bool,
    /// Stand-in for an aux channel an item lacks.
    zeros: Vec<f32>,
}

impl CaptureSink {
    fn write_chunk(&mut self, chunk: &SampleChunk, out: &mut Outputs) -> Result<(), BlockError> {
        if chunk.is_empty() {
            return Ok(());
        }
        let stamp = chunk.stamp;
        if self.writer.is_none() {
            self.aux = [(AuxRole::Sync, chunk.sync.is_some()), (AuxRole::Trigger, chunk.trigger.is_some())]
                .into_iter()
                .filter_map(|(r, present)| present.then_some(r))
                .collect();
            let mut cfg = WriterConfig::new(self.format, stamp.rate);
            cfg.aux = self.aux.clone();
            cfg.description = Some("derived stream written by lobeflow capture_writer".into());
            let w = CaptureWriter::create_staged(&self.path, cfg, &self.files)
                .map_err(|e| BlockError::at(e, stamp.index))?;
            self.writer = Some(w);
        }
        let Some(writer) = self.writer.as_mut() else {
            return Ok(());
        };
        let rate = writer.config().rate;
        if stamp.rate != rate {
            return Err(BlockError::at(
                format!("sample rate changed from {rate} to {} S/s; one capture holds one rate", stamp.rate),
                stamp.index,
            ));
        }
        let extra = (chunk.sync.is_some() && !self.aux.contains(&AuxRole::Sync))
            || (chunk.trigger.is_some() && !self.aux.contains(&AuxRole::Trigger));
        if extra && !self.extra_aux_noticed {
            self.extra_aux_noticed = true;
            out.warn(
                stamp,
                "an aux channel appeared after the first item; it is not written (further cases not reported)",
            );
        }
        if self.zeros.len() < chunk.len() {
            self.zeros.resize(chunk.len(), 0.0);
        }
        let mut missing = false;
        let mut aux: Vec<&[f32]> = Vec::with_capacity(self.aux.len());
        for role in &self.aux {
            let ch = match role {
                AuxRole::Sync => chunk.sync.as_deref(),
                AuxRole::Trigger => chunk.trigger.as_deref(),
            };
            aux.push(ch.unwrap_or_else(|| {
                missing = true;
                &self.zeros[..chunk.len()]
            }));
        }
        if missing && !self.missing_aux_noticed {
            self.missing_aux_noticed = true;
            out.warn(
                stamp,
                "an item lacks an aux channel the first item had; zeros written (further cases not reported)",
            );
        }
        writer.write(&chunk.iq, &aux).map_err(|e| BlockError::at(e, stamp.index))
    }

    fn close_dwell(&mut self) {
        let (Some(d), Some(w)) = (self.open_dwell.take(), self.writer.as_mut()) else {
            return;
        };
        let count = w.frames() - d.file_start;
        if count == 0 {
            return;
        }
        w.annotate(Annotation {
            sample_start: d.file_start,
            sample_count: Some(count),
            label: Some(d.lobe),
            comment: Some(format!("dwell {} from capture sample {}", d.dwell, d.source_start)),
            other: Map::new(),
        });
    }
}

impl CaptureSink {
    fn write_segment(&mut self, seg: &LobeSegment, out: &mut Outputs) -> Result<(), BlockError> {
        if !self.lobe.is_empty() && *seg.tag.name != *self.lobe {
            return Ok(());
        }
        if self.annotate && self.open_dwell.as_ref().is_none_or(|d| d.dwell != seg.tag.dwell) {
            self.close_dwell();
            self.open_dwell = Some(OpenDwell {
                dwell: seg.tag.dwell,
                lobe: seg.tag.name.to_string(),
                file_start: self.writer.as_ref().map_or(0, |w| w.frames()),
                source_start: seg.chunk.stamp.index,
            });
        }
        self.write_chunk(&seg.chunk, out)?;
        if seg.dwell_end {
            self.close_dwell();
        }
        Ok(())
    }

    fn finish_file(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.close_dwell();
        match self.writer.take() {
            Some(w) => {
                w.finish(&self.files).map_err(|e| BlockError::new(e.to_string()))?;
            }
            None => out.warn(Stamp::new(0, 1.0), format!("no samples arrived; {} not written", self.path.display())),
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::{LobeTag, Params, Value};
    use num_complex::Complex32;
    use std::sync::Arc;

    fn segment(lobe: &str, dwell: u64, index: u64, n: usize, rate: f64, end: bool) -> Item {
        let iq: Vec<Complex32> = (0..n).map(|k| Complex32::new((index + k as u64) as f32 * 1e-3, 0.25)).collect();
        Item::Segment(Box::new(LobeSegment {
            tag: LobeTag { lobe: 0, name: Arc::from(lobe), dwell, dwell_start: index },
            chunk: SampleChunk {
                stamp: Stamp::new(index, rate),
                iq: iq.into(),
                sync: Some(vec![0.5; n].into()),
                trigger: None,
            },
            dwell_end: end,
        }))
    }

    fn params(path: &std::path::Path, format: &str, lobe: &str, annotate: bool) -> Params {
        let mut p = Params::new();
        p.insert("path", Value::Text(path.to_string_lossy().into_owned()));
        p.insert("format", Value::Text(format.into()));
        p.insert("lobe", Value::Text(lobe.into()));
        p.insert("annotate_dwells", Value::Bool(annotate));
        p
    }

    #[test]
    fn keeps_one_lobe_annotates_dwells_and_refuses_a_rate_change() {
        let dir = std::env::temp_dir().join(format!("lobeflow-sink-unit-{}", std::process::id()));
        let path = dir.join("left.sigmf-data");
        let ctx = BuildContext::default();
        let mut b = (SPEC.build)(&params(&path, "sigmf_cf32_le", "left", true), &ctx).unwrap();
        let mut out = Outputs::new(0);
        b.process(1, segment("left", 0, 0, 10, 1000.0, false), &mut out).unwrap();
        b.process(1, segment("left", 0, 10, 5, 1000.0, true), &mut out).unwrap();
        b.process(1, segment("right", 1, 15, 7, 1000.0, true), &mut out).unwrap();
        b.process(1, segment("left", 2, 22, 6, 1000.0, true), &mut out).unwrap();
        let e = b.process(1, segment("left", 4, 40, 6, 2000.0, true), &mut out).unwrap_err();
        assert!(e.message.contains("sample rate changed") && e.at_sample == Some(40), "{e}");
        b.finish(&mut out).unwrap();
        ctx.files.commit().unwrap();
        let meta: serde_json::Value =
            serde_json::from_slice(&std::fs::read(path.with_extension("sigmf-meta")).unwrap()).unwrap();
        assert_eq!(meta["global"]["core:num_channels"], 2);
        let ann = meta["annotations"].as_array().unwrap();
        assert_eq!(ann.len(), 2);
        assert_eq!((ann[0]["core:sample_start"].as_u64(), ann[0]["core:sample_count"].as_u64()), (Some(0), Some(15)));
        assert_eq!((ann[1]["core:sample_start"].as_u64(), ann[1]["core:sample_count"].as_u64()), (Some(15), Some(6)));
        assert_eq!(ann[1]["core:label"], "left");
        // 21 frames of 2 complex f32 channels.
        assert_eq!(std::fs::metadata(&path).unwrap().len(), 21 * 2 * 8);
        let _ = std::fs::remove_dir_all(&dir);
    }

    #[test]
    fn annotations_need_sigmf() {
        let e = (SPEC.build)(&params(std::path::Path::new("x.wav"), "wav_f32", "", true), &BuildContext::default())
            .err()
            .unwrap()
            .to_string();
        assert!(e.contains("SigMF"), "{e}");
    }
}
