//! Telemetry of a synthesized calibration scan: the antenna pointing that
//! puts the fixed source at the scenario's target offsets, written as
//! `PREFIX.pointing.csv` (`time_s,az_deg,el_deg`).

use super::model::Model;
use super::scenario::ScanSpec;
use crate::calibrate::telemetry::antenna_frame_offset;
use lobeflow_blocks::{FileStager, OutputFile};
use std::io::Write;
use std::path::Path;

/// Pointing (az, el) that sees `source` at `offset` (traverse, elevation)
/// in the antenna frame, by Newton steps on the frame's own geometry.
pub fn pointing_for(source: (f64, f64), offset: (f64, f64)) -> (f64, f64) {
    let cos_el = source.1.to_radians().cos().max(1e-6);
    let mut p = (source.0 - offset.0 / cos_el, source.1 - offset.1);
    for _ in 0..20 {
        let f = antenna_frame_offset(p, source);
        let (ex, ey) = (f.0 - offset.0, f.1 - offset.1);
        if ex.abs().max(ey.abs()) < 1e-12 {
            break;
        }
        let h = 1e-6;
        let fa = antenna_frame_offset((p.0 + h, p.1), source);
        let fe = antenna_frame_offset((p.0, p.1 + h), source);
        let (j00, j10) = ((fa.0 - f.0) / h, (fa.1 - f.1) / h);
        let (j01, j11) = ((fe.0 - f.0) / h, (fe.1 - f.1) / h);
        let det = j00 * j11 - j01 * j10;
        if det.abs() < 1e-15 {
            break;
        }
        p.0 -= (j11 * ex - j01 * ey) / det;
        p.1 -= (-j10 * ex + j00 * ey) / det;
    }
    p
}

/// Write the pointing telemetry over the capture's span; returns rows.
pub fn write_pointing(model: &Model, scan: &ScanSpec, path: &Path, stager: &FileStager) -> Result<u64, String> {
    let io = |e: std::io::Error| format!("writing {}: {e}", path.display());
    if scan.interval.0.is_nan() || scan.interval.0 <= 0.0 {
        return Err("scan: interval must be positive".into());
    }
    let mut f = OutputFile::create(path).map_err(io)?;
    writeln!(f, "time_s,az_deg,el_deg").map_err(io)?;
    let duration = model.samples as f64 / model.rate;
    let rows = (duration / scan.interval.0).floor() as u64 + 1;
    let source = (scan.source_az.0, scan.source_el.0);
    for k in 0..rows {
        let t = k as f64 * scan.interval.0;
        let scenario_t = model.start + t;
        let (az, el) = pointing_for(source, (model.az.at_time(scenario_t), model.el.at_time(scenario_t)));
        writeln!(f, "{:.6},{az:.6},{el:.6}", t + scan.clock_lead.0).map_err(io)?;
    }
    f.finish(stager).map_err(io)?;
    Ok(rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pointing_puts_the_source_where_asked() {
        for (src, off) in [((131.4, 23.0), (4.0, 0.0)), ((10.0, 60.0), (-3.0, 1.5)), ((359.0, 5.0), (2.0, -2.0))] {
            let p = pointing_for(src, off);
            let back = antenna_frame_offset(p, src);
            assert!((back.0 - off.0).abs() < 1e-9 && (back.1 - off.1).abs() < 1e-9, "{src:?} {off:?} -> {back:?}");
        }
    }
}
