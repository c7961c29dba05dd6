//! `lobeflow synth`: synthetic captures with known truth, from a scenario
//! file (see [`scenario`] for the syntax, [`model`] for the signal model, [`generate`] for its samples).

pub mod generate;
pub mod model;
pub(crate) mod scan;
pub mod scenario;
pub(crate) mod truth;

use crate::capture::write::{CaptureWriter, WriterConfig, commit_staged};
use crate::runtime::staging;
use generate::{Frames, Generator};
use lobeflow_blocks::{DeliveryPolicy, FileStager};
use model::Model;
use scenario::ScenarioFile;
use std::path::{Path, PathBuf};

/// What a synth run wrote.
#[derive(Debug)]
pub struct SynthReport {
    pub written: Vec<PathBuf>,
    pub samples: u64,
    pub dwells: u64,
    /// Factor applied to IQ before encoding (noise power in the file is scale^2).
    pub scale: f64,
    /// Noise rms per component in quantisation steps, for integer formats.
    pub noise_steps: Option<f64>,
    /// Staging folders of earlier runs that did not finish, removed.
    pub remarks: Vec<String>,
}

/// `PREFIX` plus `suffix`, keeping any dots already in the prefix.
pub fn with_suffix(prefix: &Path, suffix: &str) -> PathBuf {
    let mut s = prefix.as_os_str().to_os_string();
    s.push(suffix);
    PathBuf::from(s)
}

/// Write the capture and `PREFIX.truth.csv` (and for scans
/// `PREFIX.pointing.csv`); all files appear together at
/// the end, or none on error.
pub fn synthesize(file: &ScenarioFile, prefix: &Path) -> Result<SynthReport, String> {
    let model = Model::from_file(file)?;
    let paths = model.format.paths_for_prefix(prefix);
    let mut cfg = WriterConfig::new(model.format, model.rate);
    cfg.aux = model.aux();
    cfg.scale = model.scale as f32;
    cfg.frequency = model.frequency;
    cfg.description = Some(format!(
        "synthesized by lobeflow from scenario '{}' (seed {}); IQ scaled by {:e} (noise power per sample {:e})",
        model.name,
        model.seed,
        model.scale,
        model.scale * model.scale
    ));
    // Files are staged in a private folder beside the prefix, as a run's are
    // inside its output folder, and committed together.
    let folder = match prefix.parent().filter(|p| !p.as_os_str().is_empty()) {
        Some(p) => p.to_path_buf(),
        None => PathBuf::from("."),
    };
    std::fs::create_dir_all(&folder).map_err(|e| format!("cannot create {}: {e}", folder.display()))?;
    let remarks = staging::remove_stale(&folder);
    let staged = staging::Staging::create(&folder).map_err(|e| format!("cannot stage the outputs: {e}"))?;
    let stager = FileStager::in_folder(staged.dir().to_path_buf(), DeliveryPolicy::default());
    let mut writer = CaptureWriter::create_staged(&paths[0], cfg, &stager)?;
    let result = (|| {
        let dwells = truth::write_truth(&model, &with_suffix(prefix, ".truth.csv"), &stager)?;
        if let Some(scan) = &file.scenario.scan {
            scan::write_pointing(&model, scan, &with_suffix(prefix, ".pointing.csv"), &stager)?;
        }
        let mut generator = Generator::new(model.clone());
        let mut frames = Frames::default();
        while generator.next_chunk(&mut frames) {
            let mut aux: Vec<&[f32]> = Vec::new();
            if model.sync_channel {
                aux.push(&frames.sync);
            }
            if model.trigger_channel {
                aux.push(&frames.trigger);
            }
            writer.write(&frames.iq, &aux)?;
        }
        let samples = writer.frames();
        writer.finish(&stager)?;
        Ok((dwells, samples))
    })();
    let (dwells, samples) = match result {
        Ok(v) => v,
        Err(e) => {
            stager.discard();
            return Err(e);
        }
    };
    let written = commit_staged(&stager)?;
    let step = model.format.step();
    let noise_steps = (step > 0.0).then(|| model.scale * std::f64::consts::FRAC_1_SQRT_2 / step);
    drop(staged);
    Ok(SynthReport { written, samples, dwells, scale: model.scale, noise_steps, remarks })
}
