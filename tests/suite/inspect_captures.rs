//! `inspect` and `auto` settings on captures lobeflow did not make:
//! `tests/independent/make_inspect_captures.py` (numpy only, no code shared
//! with lobeflow) wrote them with their installation numbers in
//! `tests/independent/inspect/truth.json`. Every number measured must lie
//! within the confidence the measurement states, and the angles from the
//! measured numbers must match those from the true numbers within 3 % in RMS.

use lobeflow::Session;
use lobeflow::inspect::{Installation, Source, measure};
use std::path::{Path, PathBuf};
use std::process::Command;

pub(super) fn repo(p: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(p)
}

pub(super) fn capture(name: &str) -> PathBuf {
    let stem = repo("tests/independent/inspect").join(name);
    if name.starts_with("beacon") { stem.with_extension("sigmf-meta") } else { stem.with_extension("wav") }
}

pub(super) fn truth(name: &str) -> serde_json::Value {
    let text = std::fs::read_to_string(repo("tests/independent/inspect/truth.json")).unwrap();
    serde_json::from_str::<serde_json::Value>(&text).unwrap()[name].clone()
}

fn measured(name: &str, lobes: &str) -> Installation {
    let source = Source {
        path: capture(name).to_string_lossy().into_owned(),
        options: Default::default(),
        roles: Vec::new(),
        seconds: lobeflow::inspect::DEFAULT_SECONDS,
        lobe_order: lobes.split(',').map(String::from).collect(),
    };
    measure(&source).unwrap()
}

/// The figure `what` holds `truth` within its stated confidence (and that
/// confidence is not vacuous: below `loosest`).
fn holds(inst: &Installation, what: &str, truth: f64, loosest: f64) -> f64 {
    let f = inst.figure(what).unwrap_or_else(|| panic!("no figure '{what}' in\n{}", inst.render("")));
    assert!(f.within <= loosest, "{what}: confidence ±{} looser than {loosest}\n{}", f.within, inst.render(""));
    assert!(
        (f.value - truth).abs() <= f.within.max(1e-12 * truth.abs()),
        "{what}: measured {} ± {}, truth {truth}\n{}",
        f.value,
        f.within,
        inst.render("")
    );
    eprintln!("{what}: measured {} ± {} {}, truth {truth}", f.value, f.within, f.unit);
    f.value
}

/// `value` and `truth` are the same phase of a period, within `within`.
fn same_phase(value: f64, truth: f64, period: f64, within: f64) {
    let d = (value - truth).rem_euclid(period);
    let d = d.min(period - d);
    assert!(d <= within, "phase {value} against truth {truth} (period {period}): off by {d}, stated ±{within}");
}

pub(super) fn n(v: &serde_json::Value, key: &str) -> f64 {
    v[key].as_f64().unwrap_or_else(|| panic!("truth has no {key}"))
}

#[test]
fn pulsed_with_sync_at_a_prf_that_aliases_under_decimation() {
    let t = truth("pulsed-sync-6k25");
    let inst = measured("pulsed-sync-6k25", "right,up,left,down");
    // 6.25 kHz would read as its 1.75 kHz alias from an 8 kS/s envelope
    holds(&inst, "PRF", n(&t, "prf_hz"), 0.5);
    holds(&inst, "pulse length", n(&t, "pulse_s"), 2e-6);
    holds(&inst, "dwell (pulses)", n(&t, "dwell_pulses"), 0.0);
    holds(&inst, "dwell", n(&t, "dwell_pulses") / n(&t, "prf_hz"), 1e-5);
    holds(&inst, "sync levels (count)", 4.0, 0.0);
    for (k, level) in t["sync_levels"].as_array().unwrap().iter().enumerate() {
        holds(&inst, &format!("sync level {}", k + 1), level.as_f64().unwrap(), 0.05);
    }
    let echo = t["echo_range_m"].as_array().unwrap();
    holds(&inst, "echo window start", echo[0].as_f64().unwrap(), 400.0);
    holds(&inst, "echo window end", echo[1].as_f64().unwrap(), 400.0);
    assert_eq!(inst.kind, lobeflow::inspect::SignalKind::Pulsed);
}

#[test]
fn pulsed_without_sync_finds_the_switches_from_transients_and_steps() {
    let t = truth("pulsed-blind-4k1");
    let inst = measured("pulsed-blind-4k1", "right,up,left,down");
    let prf = holds(&inst, "PRF", n(&t, "prf_hz"), 0.5);
    holds(&inst, "pulse length", n(&t, "pulse_s"), 2e-6);
    holds(&inst, "dwell (pulses)", n(&t, "dwell_pulses"), 0.0);
    let jitter = inst.figure("PRI jitter (rms)").unwrap();
    // uniform +-1 us plus rounding to 2.5 us samples: about 0.94 us rms
    assert!(jitter.value > 0.5e-6 && jitter.value < 1.5e-6, "{jitter:?}");
    let dwell = n(&t, "dwell_pulses") / prf;
    let f = inst.figure("switch instant").unwrap();
    // the dwell starts at the transmit instant after the switch
    same_phase(f.value, n(&t, "first_switch_s"), dwell, f.within);
    let echo = t["echo_range_m"].as_array().unwrap();
    holds(&inst, "echo window start", echo[0].as_f64().unwrap(), 400.0);
    holds(&inst, "echo window end", echo[1].as_f64().unwrap(), 400.0);
}

#[test]
fn beacon_with_schedule_gives_tone_dwell_and_switch_phase() {
    let t = truth("beacon-schedule");
    let inst = measured("beacon-schedule", "left,right");
    holds(&inst, "tone frequency", n(&t, "tone_hz"), 2.0);
    let dwell = holds(&inst, "dwell", n(&t, "dwell_s"), 1e-4);
    let f = inst.figure("switch instant").unwrap();
    same_phase(f.value, n(&t, "first_start_s"), dwell, f.within);
    // no lobe labels: which lobe is first is not claimed
    assert!(inst.figure("first lobe's dwell start").is_none());
    let snr = inst.figure("tone SNR per sample").unwrap();
    // the tone is 6 dB over the noise on a lobe axis, less off it
    assert!(snr.value > 0.0 && snr.value < 6.0, "{snr:?}");
}

#[test]
fn blind_beacon_with_a_switch_train_whose_harmonics_dominate() {
    let t = truth("beacon-blind");
    let inst = measured("beacon-blind", "left,right");
    holds(&inst, "tone frequency", n(&t, "tone_hz"), 2.0);
    // switch every 2.5 ms (400 Hz): short transients, harmonics as strong as the fundamental
    let dwell = holds(&inst, "dwell", n(&t, "dwell_s"), 1e-5);
    let f = inst.figure("first lobe's dwell start").unwrap();
    same_phase(f.value, n(&t, "first_start_s"), 2.0 * dwell, f.within);
    let left = inst.figure("tone SNR, lobe left").unwrap();
    let right = inst.figure("tone SNR, lobe right").unwrap();
    // the target sits right of boresight on average: the right lobe is stronger
    assert!(right.value > left.value, "{left:?} {right:?}");
}

// ----------------------------------------------------------------- angles

pub(super) struct Angles {
    rows: Vec<(f64, String, f64)>,
}

fn run(name: &str, graph: &str, settings: &[(&str, &str)], tag: &str) -> (Angles, String) {
    let (angles, described, _) = run_reporting(name, graph, settings, tag);
    (angles, described)
}

/// A run of `graph` on the independent capture `name`: its angles, its
/// settings as `check` describes them, and its notices.
pub(super) fn run_reporting(
    name: &str,
    graph: &str,
    settings: &[(&str, &str)],
    tag: &str,
) -> (Angles, String, Vec<lobeflow_blocks::Notice>) {
    let d = std::env::temp_dir().join(format!("lobeflow-inspect-{}-{name}-{tag}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    let mut s = Session::open(repo(graph)).unwrap();
    s.set("input", capture(name).to_str().unwrap());
    for (k, v) in settings {
        s.set(k, v);
    }
    let described = lobeflow::commands::check::describe(&s.resolve().unwrap());
    s.out_dir(d.join("out")).threads(2);
    let report = s.run().unwrap();
    let text = std::fs::read_to_string(d.join("out/angles.csv")).unwrap();
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let col = |n: &str| header.iter().position(|h| *h == n).unwrap();
    let (tc, ac, ec, fc) = (col("time_s"), col("axis"), col("error_deg"), col("flag"));
    let rows = lines
        .map(|l| l.split(',').collect::<Vec<_>>())
        .filter(|r| r[fc] == "ok")
        .map(|r| (r[tc].parse().unwrap(), r[ac].to_string(), r[ec].parse().unwrap()))
        .collect();
    let _ = std::fs::remove_dir_all(&d);
    (Angles { rows }, described, report.notices)
}

/// RMS error against the truth file, per axis.
fn rms(a: &Angles, name: &str, axis: &str) -> (f64, usize) {
    let text = std::fs::read_to_string(repo("tests/independent/inspect").join(format!("{name}.truth.csv"))).unwrap();
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let vc = header.iter().position(|h| *h == format!("{axis}_deg")).unwrap();
    let pts: Vec<(f64, f64)> = lines
        .map(|l| {
            let r: Vec<&str> = l.split(',').collect();
            (r[0].parse().unwrap(), r[vc].parse().unwrap())
        })
        .collect();
    let at = |t: f64| {
        let i = pts.partition_point(|p| p.0 < t).clamp(1, pts.len() - 1);
        let ((t0, v0), (t1, v1)) = (pts[i - 1], pts[i]);
        v0 + (v1 - v0) * (t - t0) / (t1 - t0)
    };
    let errs: Vec<f64> = a.rows.iter().filter(|r| r.1 == axis).map(|r| r.2 - at(r.0)).collect();
    ((errs.iter().map(|e| e * e).sum::<f64>() / errs.len().max(1) as f64).sqrt(), errs.len())
}

pub(super) fn compare(name: &str, axis: &str, truth: &Angles, auto: &Angles) {
    let (want, n_true) = rms(truth, name, axis);
    let (got, n_auto) = rms(auto, name, axis);
    eprintln!(
        "{name} {axis}: RMS {got} deg with auto settings ({n_auto} estimates), {want} deg with the true numbers ({n_true})"
    );
    assert!(n_true > 50 && n_auto as f64 >= 0.95 * n_true as f64, "{name} {axis}: {n_auto} against {n_true} estimates");
    assert!((got / want - 1.0).abs() <= 0.03, "{name} {axis}: RMS {got} with auto against {want} with the truth");
}

#[test]
fn auto_settings_give_the_angles_of_the_true_numbers_pulsed() {
    let name = "pulsed-sync-6k25";
    let graph = "graphs/four-lobe-pulsed.yaml";
    // the true numbers, the range regions placed by hand from the truth
    let true_settings = [
        ("prf", "6250 Hz"),
        ("dwell", "4 pulses"),
        ("pulse", "5 us"),
        ("search_start", "7 km"),
        ("search_end", "20 km"),
        ("noise_start", "12 km"),
        ("noise_width", "8 km"),
    ];
    let auto: Vec<(&str, &str)> = true_settings.iter().map(|(k, _)| (*k, "auto")).collect();
    let (truth, _) = run(name, graph, &true_settings, "true");
    let (measured, described) = run(name, graph, &auto, "auto");
    assert!(described.contains("prf = 6250") && described.contains("measured from"), "{described}");
    compare(name, "az", &truth, &measured);
    compare(name, "el", &truth, &measured);
}

#[test]
fn auto_settings_give_the_angles_of_the_true_numbers_beacons() {
    let graph = "graphs/two-lobe-beacon.yaml";
    // with its schedule known, only the tone is measured
    let name = "beacon-schedule";
    let (truth, _) = run(name, graph, &[("tone", "9876.5 Hz"), ("dwell", "20 ms"), ("first_start", "-7 ms")], "true");
    let (measured, described) =
        run(name, graph, &[("tone", "auto"), ("dwell", "auto"), ("first_start", "-7 ms")], "auto");
    assert!(described.contains("tone = 98"), "{described}");
    compare(name, "az", &truth, &measured);
    // blind: tone, dwell and the schedule's phase (lobe from the annotation)
    let name = "beacon-blind";
    let true_settings = [("tone", "-6432.1 Hz"), ("dwell", "2.5 ms"), ("first_start", "0.9 ms"), ("guard", "0.3 ms")];
    let (truth, _) = run(name, graph, &true_settings, "true");
    let auto = [("tone", "auto"), ("dwell", "auto"), ("first_start", "auto"), ("guard", "0.3 ms")];
    let (measured, _) = run(name, graph, &auto, "auto");
    compare(name, "az", &truth, &measured);
}

#[test]
fn first_start_auto_without_lobe_labels_says_what_is_missing() {
    let mut s = Session::open(repo("graphs/two-lobe-beacon.yaml")).unwrap();
    s.set("input", capture("beacon-schedule").to_str().unwrap());
    s.set("first_start", "auto");
    let err = s.resolve().unwrap_err().to_string();
    assert!(err.contains("first_start=auto") && err.contains("cannot be told from the signal"), "{err}");
}

#[test]
fn params_for_prints_a_params_file_that_run_takes_unchanged() {
    let exe = env!("CARGO_BIN_EXE_lobeflow");
    let d = std::env::temp_dir().join(format!("lobeflow-inspect-params-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    let cap = capture("pulsed-sync-6k25");
    let graph = repo("graphs/four-lobe-pulsed.yaml");
    let out = Command::new(exe)
        .args(["inspect", cap.to_str().unwrap(), "--params-for", graph.to_str().unwrap()])
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let text = String::from_utf8(out.stdout).unwrap();
    // only comments and settings of the graph
    let keys: Vec<&str> = text
        .lines()
        .filter(|l| !l.starts_with('#') && !l.trim().is_empty())
        .map(|l| l.split(':').next().unwrap())
        .collect();
    assert!(keys.contains(&"prf") && keys.contains(&"dwell") && keys.contains(&"search_end"), "{text}");
    for k in &keys {
        assert!(lobeflow::inspect::AUTO_SETTINGS.contains(k), "{k} in\n{text}");
    }
    assert!(text.contains("# ") && text.contains("PRF"), "{text}");
    let params = d.join("site.yaml");
    std::fs::write(&params, &text).unwrap();
    let run = Command::new(exe)
        .args(["run", graph.to_str().unwrap(), "--input", cap.to_str().unwrap(), "--params"])
        .arg(&params)
        .arg("--out")
        .arg(d.join("out"))
        .output()
        .unwrap();
    assert!(run.status.success(), "{}", String::from_utf8_lossy(&run.stderr));
    assert!(d.join("out/angles.csv").exists());
    // `run` with auto settings says what it measured and where from
    let run = Command::new(exe)
        .args(["run", graph.to_str().unwrap(), "--input", cap.to_str().unwrap(), "--set", "prf=auto", "--out"])
        .arg(d.join("out2"))
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&run.stderr);
    assert!(run.status.success() && err.contains("auto: prf = 62") && err.contains("measured from"), "{err}");
    let _ = std::fs::remove_dir_all(&d);
}
