//! `lobeflow calibrate` against captures lobeflow did not make: the scans
//! and the tracking capture in tests/calibration/ come from
//! tests/calibration/make_scans.py (numpy only, no lobeflow code), a
//! two-lobe beacon installation with lobe path gains of -0.30 and +0.35 dB
//! and a beam that is none of the models (a Gaussian main lobe on a broad
//! pedestal). Its true numbers are in tests/calibration/beacon-truth.yaml,
//! written by the same script from the pattern itself.

use lobeflow::calibrate::{CalibrateArgs, Calibration, calibrate};
use lobeflow::commands::overrides;
use std::path::{Path, PathBuf};

fn repo(p: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(p)
}

fn dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-cal-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// A number from a truth file of make_scans.py (`key: value` lines).
fn truth_in(file: &str, key: &str) -> f64 {
    let text = std::fs::read_to_string(repo(&format!("tests/calibration/{file}"))).unwrap();
    text.lines()
        .find_map(|l| l.strip_prefix(&format!("{key}: ")))
        .and_then(|v| v.trim().parse().ok())
        .unwrap_or_else(|| panic!("no number '{key}' in {file}"))
}

fn truth(key: &str) -> f64 {
    truth_in("beacon-truth.yaml", key)
}

fn beacon_args(seed: usize, out: &Path) -> CalibrateArgs {
    let scan = repo(&format!("tests/calibration/beacon-scan-s{seed:02}.sigmf-meta"));
    CalibrateArgs {
        graph: repo("graphs/two-lobe-beacon.yaml"),
        overrides: overrides(Some(&repo("tests/calibration/beacon-site.yaml")), &[], Some(&scan)).unwrap(),
        pointing: repo(&format!("tests/calibration/beacon-scan-s{seed:02}.pointing.csv")),
        source: (131.4, 23.0),
        // The script's telemetry clock runs 0.25 s ahead of the capture's.
        clock_offset_s: -0.25,
        cross_limit_deg: None,
        out_dir: out.to_path_buf(),
        threads: Some(1),
    }
}

fn beacon(seed: usize, out: &Path) -> Calibration {
    calibrate(&beacon_args(seed, out)).unwrap().0
}

#[test]
fn beacon_scan_recovers_the_imbalance_slope_and_pattern() {
    let out = dir("beacon");
    let cal = beacon(0, &out);
    let p = &cal.pairs[0];
    let l = &p.local;
    let imbalance = truth("imbalance_db");
    assert!((l.ratio0_db - imbalance).abs() < 0.05, "imbalance {} vs {imbalance} dB", l.ratio0_db);
    let [(plus, gp), (minus, gm)] = cal.lobe_gains_db(0);
    assert_eq!((plus.as_str(), minus.as_str()), ("right", "left"));
    assert!((gp - gm - imbalance).abs() < 0.05);
    let (ti, _) = p.table_imbalance_db();
    assert!((ti - imbalance).abs() < 0.05, "table imbalance {ti}");
    let slope = truth("slope_db_per_deg");
    assert!((l.slope_db_per_deg / slope - 1.0).abs() < 0.02, "slope {} vs {slope}", l.slope_db_per_deg);
    let crossover = truth("crossover_deg");
    assert!((l.crossover_deg - crossover).abs() < 0.03, "crossover {} vs {crossover}", l.crossover_deg);
    let t = &cal.joint.fit;
    assert!((t.squint - truth("squint_deg")).abs() < 0.05, "squint {}", t.squint);
    assert!((t.beam.beamwidth_deg - truth("beamwidth_deg")).abs() < 0.15, "beamwidth {}", t.beam.beamwidth_deg);
    // The measured table reads the scan back better than any model: the
    // beam is none of them.
    let best = &p.models[p.best];
    assert!(
        cal.joint.residual_rms_deg < 0.6 * best.residual_rms_deg,
        "{} vs {}",
        cal.joint.residual_rms_deg,
        best.residual_rms_deg
    );
    for name in
        ["calibration.yaml", "pattern.csv", "scan-points.csv", "fits.csv", "discriminator.png", "discriminator.svg"]
    {
        assert!(out.join(name).is_file(), "{name} missing");
    }
    assert!(out.join("scan-run/dwells.csv").is_file());
    let pattern = std::fs::read_to_string(out.join("pattern.csv")).unwrap();
    let rows = lobeflow::blocks::dsp::beam::parse_pattern_csv(&pattern).unwrap();
    let reach = rows.last().unwrap().0;
    assert!(reach >= cal.joint.usable_deg + t.squint, "table reaches {reach} deg only");
    let _ = std::fs::remove_dir_all(&out);
}

/// Mean and standard deviation of (estimate - truth) of the ok estimates
/// of `axis`, the truth in column `column` of `truth_file`.
fn bias_and_spread(angles: &Path, truth_file: &str, axis: &str, column: usize) -> (f64, f64, usize) {
    let truth_text = std::fs::read_to_string(repo(truth_file)).unwrap();
    let truth: Vec<(f64, f64)> = truth_text
        .lines()
        .skip(1)
        .map(|l| {
            let f: Vec<f64> = l.split(',').map(|x| x.parse().unwrap()).collect();
            (f[0], f[column])
        })
        .collect();
    let at = |t: f64| {
        let i = truth.partition_point(|r| r.0 < t).clamp(1, truth.len() - 1);
        let (a, b) = (truth[i - 1], truth[i]);
        a.1 + (b.1 - a.1) * (t - a.0) / (b.0 - a.0)
    };
    let text = std::fs::read_to_string(angles).unwrap();
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let col = |n: &str| header.iter().position(|h| *h == n).unwrap();
    let (t, e, f, a) = (col("time_s"), col("error_deg"), col("flag"), col("axis"));
    let errors: Vec<f64> = lines
        .map(|l| l.split(',').collect::<Vec<_>>())
        .filter(|r| r[f] == "ok" && r[a] == axis)
        .map(|r| r[e].parse::<f64>().unwrap() - at(r[t].parse().unwrap()))
        .collect();
    let n = errors.len() as f64;
    let mean = errors.iter().sum::<f64>() / n;
    let sd = (errors.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    (mean, sd, errors.len())
}

fn run_graph(graph: &str, input: &str, params: &Path, out: &Path) {
    let mut s = lobeflow::Session::open(repo(graph)).unwrap();
    s.params_file(params).unwrap();
    s.set("input", repo(input).to_str().unwrap());
    s.out_dir(out).threads(1);
    s.run().unwrap();
}

fn run_track(params: &Path, out: &Path) -> (f64, f64, usize) {
    run_graph("graphs/two-lobe-beacon.yaml", "tests/calibration/beacon-track.sigmf-meta", params, out);
    bias_and_spread(&out.join("angles.csv"), "tests/calibration/beacon-track.truth.csv", "az", 1)
}

#[test]
fn the_calibration_removes_the_bias_on_a_separate_tracking_capture() {
    let d = dir("track");
    beacon(0, &d.join("cal"));
    // The params file is used exactly as written.
    let (bias, sigma, n) = run_track(&d.join("cal/calibration.yaml"), &d.join("calibrated"));
    let (raw_bias, raw_sigma, _) = run_track(&repo("tests/calibration/beacon-site.yaml"), &d.join("textbook"));
    assert!(n > 400, "{n} estimates");
    assert!(raw_bias.abs() > 3.0 * raw_sigma, "textbook numbers: bias {raw_bias} deg, sigma {raw_sigma} deg");
    assert!(bias.abs() <= 0.1 * sigma, "calibrated: bias {bias} deg, sigma {sigma} deg");
    let _ = std::fs::remove_dir_all(&d);
}

/// A fitted value and its standard uncertainty, read from a calibration.
type Measured = fn(&Calibration) -> (f64, f64);

#[test]
fn each_sigma_matches_the_spread_over_seeds() {
    let d = dir("seeds");
    let cals: Vec<Calibration> = (0..24).map(|s| beacon(s, &d.join(format!("s{s}")))).collect();
    let quantities: [(&str, Measured); 6] = [
        ("ratio at boresight", |c| (c.pairs[0].local.ratio0_db, c.pairs[0].local.ratio0_sigma_db)),
        ("slope", |c| (c.pairs[0].local.slope_db_per_deg, c.pairs[0].local.slope_sigma)),
        ("crossover", |c| (c.pairs[0].local.crossover_deg, c.pairs[0].local.crossover_sigma)),
        ("table squint", |c| (c.joint.fit.squint, c.joint.fit.squint_sigma)),
        ("table beamwidth", |c| (c.joint.fit.beam.beamwidth_deg, c.joint.fit.beamwidth_sigma)),
        ("table imbalance", |c| c.pairs[0].table_imbalance_db()),
    ];
    for (name, get) in quantities {
        let v: Vec<(f64, f64)> = cals.iter().map(get).collect();
        let n = v.len() as f64;
        let mean = v.iter().map(|x| x.0).sum::<f64>() / n;
        let spread = (v.iter().map(|x| (x.0 - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
        let sigma = (v.iter().map(|x| x.1 * x.1).sum::<f64>() / n).sqrt();
        let ratio = spread / sigma;
        assert!((0.7..=1.3).contains(&ratio), "{name}: spread {spread} over {n} seeds, sigma {sigma} (ratio {ratio})");
    }
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn a_scan_short_of_the_usable_region_says_what_is_missing() {
    let d = dir("short");
    // Keep only the telemetry of the middle of the scan: the dwells outside
    // it have no pointing.
    let text = std::fs::read_to_string(repo("tests/calibration/beacon-scan-s00.pointing.csv")).unwrap();
    let kept: Vec<&str> =
        text.lines().enumerate().filter(|(i, _)| *i == 0 || (40..150).contains(i)).map(|x| x.1).collect();
    let short = d.join("short.csv");
    std::fs::write(&short, kept.join("\n")).unwrap();
    let mut args = beacon_args(0, &d.join("out"));
    args.pointing = short;
    let e = calibrate(&args).err().unwrap().to_string();
    assert!(e.contains("does not cover the usable region") && e.contains("missing"), "{e}");
    assert!(!d.join("out/calibration.yaml").exists() && !d.join("out/scan-run").exists());
    assert_eq!(std::fs::read_dir(d.join("out")).unwrap().count(), 0, "nothing left behind");
    // One side of boresight only: the crossover is not covered.
    let one_side: Vec<&str> =
        text.lines().enumerate().filter(|(i, _)| *i == 0 || (2..70).contains(i)).map(|x| x.1).collect();
    let side = d.join("side.csv");
    std::fs::write(&side, one_side.join("\n")).unwrap();
    args.pointing = side;
    let e = calibrate(&args).err().unwrap().to_string();
    assert!(e.contains("does not reach across boresight"), "{e}");
    // A gap in the telemetry (here beyond the usable region, where it
    // leaves no hole that matters) is reported, and the dwells inside it
    // are left out rather than given interpolated angles.
    let mut gap = String::new();
    for (i, l) in text.lines().enumerate() {
        if !(3..9).contains(&i) {
            gap.push_str(l);
            gap.push('\n');
        }
    }
    let gapped = d.join("gap.csv");
    std::fs::write(&gapped, gap).unwrap();
    args.pointing = gapped;
    args.out_dir = d.join("gap-out");
    let cal = calibrate(&args).unwrap().0;
    assert!(
        cal.telemetry_notes.iter().any(|n| n.contains("gap of 0.700 s") && n.contains("lines 3 and 4")),
        "{:?}",
        cal.telemetry_notes
    );
    assert!(cal.dropped.no_pointing >= 25, "{:?}", cal.dropped);
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn a_synthesized_scan_with_telemetry_calibrates_to_its_scenario() {
    // The bundled sample: lobeflow's own synthesizer, lobe gains of +0.4 and
    // -0.2 dB on a measured (table) pattern; see samples/beacon-scan.scenario.yaml.
    let d = dir("synth");
    let file = lobeflow::synth::scenario::ScenarioFile::load(&repo("samples/beacon-scan.scenario.yaml")).unwrap();
    lobeflow::synth::synthesize(&file, &d.join("scan")).unwrap();
    let committed = std::fs::read_to_string(repo("samples/beacon-scan.pointing.csv")).unwrap();
    assert_eq!(std::fs::read_to_string(d.join("scan.pointing.csv")).unwrap(), committed, "sample telemetry is stale");
    let args = CalibrateArgs {
        graph: repo("graphs/two-lobe-beacon.yaml"),
        overrides: overrides(Some(&repo("samples/beacon-scan.site.yaml")), &[], Some(&d.join("scan.sigmf-meta")))
            .unwrap(),
        pointing: d.join("scan.pointing.csv"),
        source: (212.0, 38.5),
        clock_offset_s: 0.0,
        cross_limit_deg: None,
        out_dir: d.join("out"),
        threads: Some(1),
    };
    let cal = calibrate(&args).unwrap().0;
    let l = &cal.pairs[0].local;
    assert!((l.ratio0_db - 0.6).abs() < 0.05, "{}", l.ratio0_db);
    assert!((cal.joint.fit.squint - 5.0).abs() < 0.05, "{}", cal.joint.fit.squint);
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn pulsed_four_lobe_scan_calibrates_both_axes() {
    // Four-lobe pulsed installation (WAV I, Q, sync; two-way): an azimuth
    // leg, a slew (a telemetry jump), an elevation leg; lobe paths right
    // +0.40, up +0.30, left -0.35, down -0.35 dB.
    let d = dir("pulsed");
    let site = repo("tests/calibration/pulsed-site.yaml");
    let scan = repo("tests/calibration/pulsed-scan-s00.wav");
    let args = CalibrateArgs {
        graph: repo("graphs/four-lobe-pulsed.yaml"),
        overrides: overrides(Some(&site), &[], Some(&scan)).unwrap(),
        pointing: repo("tests/calibration/pulsed-scan-s00.pointing.csv"),
        source: (74.0, 8.0),
        clock_offset_s: 0.0,
        cross_limit_deg: None,
        out_dir: d.join("cal"),
        threads: Some(1),
    };
    let cal = calibrate(&args).unwrap().0;
    assert!(cal.telemetry_notes.iter().any(|n| n.contains("jump")), "{:?}", cal.telemetry_notes);
    let t = |k: &str| truth_in("pulsed-truth.yaml", k);
    for (k, axis) in ["az", "el"].iter().enumerate() {
        let p = &cal.pairs[k];
        assert_eq!(&p.axis, axis);
        let imbalance = t(&format!("{axis}_imbalance_db"));
        let [(_, gp), (_, gm)] = cal.lobe_gains_db(k);
        assert!((gp - gm - imbalance).abs() < 0.05, "{axis}: written imbalance {} vs {imbalance}", gp - gm);
        assert!((p.local.ratio0_db - imbalance).abs() < 0.05, "{axis}: ratio at boresight {}", p.local.ratio0_db);
        let slope = t(&format!("{axis}_slope_db_per_deg"));
        assert!(
            (p.local.slope_db_per_deg / slope - 1.0).abs() < 0.02,
            "{axis}: slope {} vs {slope}",
            p.local.slope_db_per_deg
        );
    }
    assert!((cal.joint.fit.squint - t("squint_deg")).abs() < 0.02, "{}", cal.joint.fit.squint);
    assert!((cal.joint.fit.beam.beamwidth_deg - t("beamwidth_deg")).abs() < 0.1);
    // The separate tracking capture, through the params file as written.
    let track = "tests/calibration/pulsed-track.wav";
    run_graph("graphs/four-lobe-pulsed.yaml", track, &d.join("cal/calibration.yaml"), &d.join("calibrated"));
    run_graph("graphs/four-lobe-pulsed.yaml", track, &site, &d.join("textbook"));
    for (axis, column) in [("az", 1), ("el", 2)] {
        let truth = "tests/calibration/pulsed-track.truth.csv";
        let (bias, sigma, n) = bias_and_spread(&d.join("calibrated/angles.csv"), truth, axis, column);
        let (raw, raw_sigma, _) = bias_and_spread(&d.join("textbook/angles.csv"), truth, axis, column);
        assert!(n > 500, "{axis}: {n} estimates");
        assert!(raw.abs() > 3.0 * raw_sigma, "{axis} textbook: bias {raw}, sigma {raw_sigma}");
        assert!(bias.abs() <= 0.1 * sigma, "{axis} calibrated: bias {bias}, sigma {sigma}");
    }
    let _ = std::fs::remove_dir_all(&d);
}
