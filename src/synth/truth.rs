//! The truth file of a synthesized capture: one row per dwell whose middle
//! lies inside the capture, `time_s,lobe,az_deg,el_deg,range_m`, with the
//! time in seconds from the first sample and the target at mid-dwell
//! (range empty for beacons).

use super::model::{Model, Signal};
use lobeflow_blocks::FileStager;
use std::io::Write;
use std::path::Path;

/// The header line of a truth file.
pub const TRUTH_HEADER: &str = "time_s,lobe,az_deg,el_deg,range_m";

/// One dwell of the truth file.
#[derive(Clone, Debug, PartialEq)]
pub struct TruthRow {
    /// Mid-dwell, seconds from the capture's first sample.
    pub time_s: f64,
    pub lobe: usize,
    pub az_deg: f64,
    pub el_deg: f64,
    pub range_m: Option<f64>,
}

/// The dwells of `model` in time order, computed lazily (constant memory).
pub fn truth_rows(model: &Model) -> impl Iterator<Item = TruthRow> + '_ {
    let end = model.time_of(model.samples as f64);
    let mut d = model.dwell_at(model.start);
    let mut start = model.switch_time(d);
    std::iter::from_fn(move || {
        loop {
            let next = model.switch_time(d + 1);
            let mid = 0.5 * (start + next);
            let dwell = d;
            d += 1;
            start = next;
            if mid >= end {
                return None;
            }
            if mid < model.start {
                continue;
            }
            let range_m = match &model.signal {
                Signal::Pulsed(p) => Some(p.range.at_time(mid)),
                Signal::Beacon(_) => None,
            };
            return Some(TruthRow {
                time_s: mid - model.start,
                lobe: model.lobe_of_dwell(dwell),
                az_deg: model.az.at_time(mid),
                el_deg: model.el.at_time(mid),
                range_m,
            });
        }
    })
}

/// Write the truth CSV to `path` through `stager`; returns the row count.
pub fn write_truth(model: &Model, path: &Path, stager: &FileStager) -> Result<u64, String> {
    let io = |e: std::io::Error| format!("writing {}: {e}", path.display());
    let mut f = stager.create(path).map_err(io)?;
    writeln!(f, "{TRUTH_HEADER}").map_err(io)?;
    let mut rows = 0;
    for r in truth_rows(model) {
        let range = r.range_m.map_or(String::new(), |v| format!("{v:.3}"));
        writeln!(f, "{:.9},{},{:.6},{:.6},{range}", r.time_s, model.lobes[r.lobe].name, r.az_deg, r.el_deg)
            .map_err(io)?;
        rows += 1;
    }
    f.finish(stager).map_err(io)?;
    Ok(rows)
}
