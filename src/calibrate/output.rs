//! The files of a calibration: the params file, the pattern table, the
//! scan points, the fitted values and the picture of the discriminator
//! curve. All appear together at the end, or none.

use super::ratio::{DB_PER_NEPER, angle_residual};
use super::{CalibrateArgs, Calibration, FittedPattern};
use crate::error::Error;
use lobeflow_blocks::pictures::discriminator_curve::{CurvePanel, DiscriminatorCurve};
use lobeflow_blocks::pictures::{PictureFormats, write_picture};
use lobeflow_blocks::{FileStager, OutputFile, RawValue};
use std::fmt::Write as _;
use std::io::Write as _;
use std::path::{Path, PathBuf};

pub const PARAMS_FILE: &str = "calibration.yaml";
pub const PATTERN_FILE: &str = "pattern.csv";
pub const POINTS_FILE: &str = "scan-points.csv";
pub const FITS_FILE: &str = "fits.csv";
pub const PICTURE: &str = "discriminator";
pub const SCAN_RUN: &str = "scan-run";

fn write_text(path: &Path, text: &str, stager: &FileStager) -> Result<(), Error> {
    let io = |e: std::io::Error| Error::Output(format!("cannot write {}: {e}", path.display()));
    let mut f = OutputFile::create(path).map_err(io)?;
    f.write_all(text.as_bytes()).map_err(io)?;
    f.finish(stager).map_err(io)
}

/// Write every file; `scan_run` holds the graph's own outputs of the scan
/// run and becomes `DIR/scan-run`.
pub fn write_all(cal: &Calibration, args: &CalibrateArgs, scan_run: &Path) -> Result<Vec<PathBuf>, Error> {
    let dir = &args.out_dir;
    let stager = FileStager::default();
    let result = (|| {
        write_text(&dir.join(PARAMS_FILE), &params_yaml(cal, args), &stager)?;
        write_text(&dir.join(PATTERN_FILE), &pattern_csv(&cal.joint), &stager)?;
        write_text(&dir.join(POINTS_FILE), &points_csv(cal), &stager)?;
        write_text(&dir.join(FITS_FILE), &fits_csv(cal), &stager)?;
        let base = dir.join(PICTURE).display().to_string();
        write_picture(&picture(cal), &base, PictureFormats::Both, &stager).map_err(|e| Error::Output(e.to_string()))?;
        Ok(())
    })();
    if let Err(e) = result {
        stager.discard();
        return Err(e);
    }
    let mut written = stager.commit().map_err(|e| {
        stager.discard();
        Error::Output(format!("cannot move outputs into place: {e}"))
    })?;
    let run_dir = dir.join(SCAN_RUN);
    if run_dir.is_dir() {
        std::fs::remove_dir_all(&run_dir)
            .map_err(|e| Error::Output(format!("cannot replace {}: {e}", run_dir.display())))?;
    }
    if scan_run.is_dir() {
        std::fs::rename(scan_run, &run_dir)
            .map_err(|e| Error::Output(format!("cannot move the scan run's outputs to {}: {e}", run_dir.display())))?;
        written.push(run_dir);
    }
    Ok(written)
}

/// The params file: only settings the graph has are written as values;
/// the rest of the measurement is in the comments and in fits.csv.
pub fn params_yaml(cal: &Calibration, args: &CalibrateArgs) -> String {
    let has = |name: &str| cal.graph_settings.iter().any(|s| s == name);
    let j = &cal.joint;
    let mut s = String::new();
    let _ = writeln!(
        s,
        "# Calibration of {} from a scan across the source at az {} deg, el {} deg.",
        args.graph.display(),
        args.source.0,
        args.source.1
    );
    let _ = writeln!(s, "# Use it as it stands: lobeflow run {} --params {PARAMS_FILE}", args.graph.display());
    for p in &cal.pairs {
        let l = &p.local;
        let _ = writeln!(s, "# pair {} ({}/{}):", p.axis, p.plus, p.minus);
        let _ = writeln!(
            s,
            "#   ratio at boresight {:.3} +- {:.3} dB (the lobes' gain imbalance)",
            l.ratio0_db, l.ratio0_sigma_db
        );
        let _ = writeln!(s, "#   slope at boresight {:.4} +- {:.4} dB/deg", l.slope_db_per_deg, l.slope_sigma);
        let _ = writeln!(
            s,
            "#   crossover {:.4} +- {:.4} deg off the telemetry's boresight",
            l.crossover_deg, l.crossover_sigma
        );
        for (i, m) in p.models.iter().enumerate() {
            let _ = writeln!(s, "#   {}", m.summary_line(i == p.best));
        }
        let t = &p.table;
        let _ = writeln!(
            s,
            "#   table    beamwidth {:.3} +- {:.3} deg, squint {:.3} +- {:.3} deg, residual {:.4} deg rms, usable +-{:.2} deg",
            t.fit.beam.beamwidth_deg,
            t.fit.beamwidth_sigma,
            t.fit.squint,
            t.fit.squint_sigma,
            t.residual_rms_deg,
            t.usable_deg
        );
    }
    let calibrated = ["lobe_gain_db", "beam", "pattern", "squint", "beamwidth"];
    let carried = carried_settings(args, &calibrated);
    if !carried.is_empty() {
        let _ = writeln!(s, "# The installation's other settings, as given to calibrate:");
        for (name, value) in carried {
            let _ = writeln!(s, "{name}: {value}");
        }
        let _ = writeln!(s, "# Measured:");
    }
    let gains: Vec<String> =
        (0..cal.pairs.len()).flat_map(|k| cal.lobe_gains_db(k)).map(|(lobe, db)| format!("{lobe}={db:.3}")).collect();
    let mut missing = Vec::new();
    let mut value = |name: &str, v: String, s: &mut String| {
        if has(name) {
            let _ = writeln!(s, "{name}: {v}");
        } else {
            missing.push(name.to_string());
        }
    };
    value("lobe_gain_db", format!("\"{}\"", gains.join(", ")), &mut s);
    value("beam", "table".into(), &mut s);
    value("pattern", PATTERN_FILE.into(), &mut s);
    value("squint", format!("{:.4} deg", j.fit.squint), &mut s);
    let best = &cal.pairs[0].models[cal.pairs[0].best];
    value("beamwidth", format!("{:.4} deg", best.fit.beam.beamwidth_deg), &mut s);
    if !missing.is_empty() {
        let _ =
            writeln!(s, "# The graph has no setting for: {} (values above and in {FITS_FILE}).", missing.join(", "));
    }
    s
}

/// The settings given by params file or `--set` (not `input`, not the
/// measured ones), last value of each, as YAML; relative paths that name
/// a file beside the params file become absolute, as the new params file
/// lives elsewhere.
fn carried_settings(args: &CalibrateArgs, calibrated: &[&str]) -> Vec<(String, String)> {
    let mut out: Vec<(String, String)> = Vec::new();
    for o in &args.overrides.items {
        if o.name == "input" || calibrated.contains(&o.name.as_str()) {
            continue;
        }
        let text = yaml_value(&o.value, &o.base);
        out.retain(|(n, _)| n != &o.name);
        out.push((o.name.clone(), text));
    }
    out
}

fn yaml_value(v: &RawValue, base: &Path) -> String {
    match v {
        RawValue::Number(n) => format!("{n}"),
        RawValue::Bool(b) => format!("{b}"),
        RawValue::Text(t) => {
            let beside = base.join(t);
            let t = if !t.is_empty() && !base.as_os_str().is_empty() && Path::new(t).is_relative() && beside.is_file() {
                std::fs::canonicalize(&beside).map_or(t.clone(), |p| p.display().to_string())
            } else {
                t.clone()
            };
            serde_json::to_string(&t).unwrap_or_default()
        }
        RawValue::List(l) => format!("[{}]", l.iter().map(|x| yaml_value(x, base)).collect::<Vec<_>>().join(", ")),
    }
}

pub fn pattern_csv(j: &FittedPattern) -> String {
    let mut s = String::from("angle_deg,gain_db\n");
    for (a, g) in j.fit.table_rows() {
        let _ = writeln!(s, "{a:.4},{g:.4}");
    }
    s
}

/// One row per located ratio: the telemetry's angle, the ratio, and the
/// angle the written pattern reads back from it.
pub fn points_csv(cal: &Calibration) -> String {
    let mut s = String::from("time_s,axis,offaxis_deg,ratio_db,sigma_db,plus_db,minus_db,pattern_deg,residual_deg\n");
    for (k, p) in cal.pairs.iter().enumerate() {
        let model = cal.joint.fit.pair_model(cal.way, cal.floor_db).ok();
        let imbalance = if cal.pairs.len() == 1 {
            cal.joint.imbalance.0
        } else {
            cal.joint.fit.gain_difference(2 * k, 2 * k + 1).0
        };
        for r in &p.ratios {
            let res = model.as_ref().and_then(|m| angle_residual(m, imbalance, r));
            let fmt = |v: Option<f64>| v.map_or(String::new(), |x| format!("{x:.5}"));
            let _ = writeln!(
                s,
                "{:.6},{},{:.5},{:.5},{:.5},{:.4},{:.4},{},{}",
                r.time_s,
                p.axis,
                r.theta,
                r.r * DB_PER_NEPER,
                r.var.sqrt() * DB_PER_NEPER,
                r.plus_y * DB_PER_NEPER,
                r.minus_y * DB_PER_NEPER,
                fmt(res.map(|e| e + r.theta)),
                fmt(res)
            );
        }
    }
    s
}

/// Every fitted value with its standard uncertainty.
pub fn fits_csv(cal: &Calibration) -> String {
    let mut s = String::from("axis,fit,quantity,value,sigma,unit\n");
    let mut row = |axis: &str, fit: &str, q: &str, v: f64, sd: f64, unit: &str| {
        let _ = writeln!(s, "{axis},{fit},{q},{v:.6},{sd:.6},{unit}");
    };
    for p in &cal.pairs {
        let l = &p.local;
        row(&p.axis, "curve", "ratio_at_boresight", l.ratio0_db, l.ratio0_sigma_db, "dB");
        row(&p.axis, "curve", "slope", l.slope_db_per_deg, l.slope_sigma, "dB/deg");
        row(&p.axis, "curve", "crossover", l.crossover_deg, l.crossover_sigma, "deg");
        row(&p.axis, "curve", "reduced_chi2", l.solution.reduced_chi2(), f64::NAN, "");
        for m in p.models.iter().chain(std::iter::once(&p.table)) {
            let f = &m.fit;
            row(&p.axis, f.name, "beamwidth", f.beam.beamwidth_deg, f.beamwidth_sigma, "deg");
            row(&p.axis, f.name, "squint", f.squint, f.squint_sigma, "deg");
            row(&p.axis, f.name, "imbalance", m.imbalance.0 * DB_PER_NEPER, m.imbalance.1 * DB_PER_NEPER, "dB");
            row(&p.axis, f.name, "residual_rms", m.residual_rms_deg, f64::NAN, "deg");
            row(&p.axis, f.name, "usable", m.usable_deg, f64::NAN, "deg");
            row(&p.axis, f.name, "reduced_chi2", f.solution.reduced_chi2(), f64::NAN, "");
        }
    }
    if cal.pairs.len() > 1 {
        let f = &cal.joint.fit;
        row("all", "table", "squint", f.squint, f.squint_sigma, "deg");
        row("all", "table", "beamwidth", f.beam.beamwidth_deg, f.beamwidth_sigma, "deg");
        row("all", "table", "residual_rms", cal.joint.residual_rms_deg, f64::NAN, "deg");
    }
    s
}

fn picture(cal: &Calibration) -> DiscriminatorCurve {
    let panels = cal
        .pairs
        .iter()
        .enumerate()
        .map(|(k, p)| {
            let imbalance = if cal.pairs.len() == 1 {
                cal.joint.imbalance.0
            } else {
                cal.joint.fit.gain_difference(2 * k, 2 * k + 1).0
            };
            let table = cal.joint.fit.pair_model(cal.way, -120.0).ok();
            let best = &p.models[p.best];
            let best_model = best.fit.pair_model(cal.way, -120.0).ok();
            let (lo, hi) = p.reach;
            let curve = |m: &Option<lobeflow_blocks::dsp::beam::PairModel>, d: f64| -> Vec<(f64, f64)> {
                let Some(m) = m else { return Vec::new() };
                (0..=400)
                    .map(|i| lo + (hi - lo) * i as f64 / 400.0)
                    .map(|t| (t, (m.log_ratio(t) + d) * DB_PER_NEPER))
                    .collect()
            };
            let usable = cal.joint.usable_deg;
            let residuals = p
                .ratios
                .iter()
                .filter_map(|r| {
                    let m = table.as_ref()?;
                    if r.theta.abs() > usable {
                        return None;
                    }
                    m.angle(r.r - imbalance).map(|a| (r.theta, a - r.theta))
                })
                .collect();
            CurvePanel {
                axis: format!("{} ({}/{})", p.axis, p.plus, p.minus),
                points: p.ratios.iter().map(|r| (r.theta, r.r * DB_PER_NEPER)).collect(),
                points_label: "measured ratios".to_string(),
                beyond: Vec::new(),
                table: curve(&table, imbalance),
                model: curve(&best_model, best.imbalance.0),
                model_name: best.fit.name.to_string(),
                usable_deg: usable,
                crossover_deg: Some(p.local.crossover_deg),
                residuals,
                residual_rms_deg: cal.joint.residual_rms_deg,
            }
        })
        .collect();
    DiscriminatorCurve {
        title: "Discriminator curve from the calibration scan".to_string(),
        subtitle: "lobe ratio against the source's off-axis angle: measured ratios, fitted pattern, best beam model; \
                   residuals below"
            .to_string(),
        angle_axis: "source off-axis angle (deg)".to_string(),
        panels,
    }
}
