//! The gates' cross-check of a switch schedule against the signal, on
//! captures lobeflow did not make (tests/independent/make_captures.py): a
//! schedule off by a quarter, a half or a whole dwell raises a warning
//! naming the first_start that fits; the right schedule raises none.
//!
//! The beacon capture (two lobes, no sync channel) has its first lobe's
//! dwells start at 2.5 ms + k 10 ms, dwell 5 ms; the pulsed one (four lobes,
//! sync channel, 250 kS/s) at sample 49 = 0.196 ms, dwell 400 samples =
//! 1.6 ms (captures.json, make_captures.py). A whole-dwell offset leaves no
//! trace in a two-lobe rig's amplitudes (it only swaps the labels), so it
//! is tested where a sync channel tells the lobes apart.

use lobeflow::Session;
use lobeflow_blocks::{Notice, Severity};
use std::path::PathBuf;

fn repo(p: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(p)
}

/// Warnings of a run of `graph` on an independent capture.
pub(super) fn warnings(name: &str, graph: &str, capture: &str, settings: &[(&str, &str)]) -> Vec<Notice> {
    let out = std::env::temp_dir().join(format!("lobeflow-schedule-check-{name}-{}", std::process::id()));
    let mut s = Session::open(repo(graph)).unwrap();
    s.set("input", repo("tests/independent/captures").join(capture).to_str().unwrap());
    for (k, v) in settings {
        s.set(k, v);
    }
    s.out_dir(&out).threads(2);
    let report = s.run().unwrap();
    let _ = std::fs::remove_dir_all(&out);
    report.notices.into_iter().filter(|n| n.severity == Severity::Warning).collect()
}

/// Every first_start (ms) a schedule warning suggests.
fn suggested_ms(notices: &[Notice]) -> Vec<f64> {
    let mut found = Vec::new();
    for n in notices.iter().filter(|n| n.what.contains("scheduled switches") || n.what.contains("lobe labels")) {
        for part in n.what.split("first_start ≈ ").skip(1).chain(n.what.split("(or ").skip(1)) {
            if let Some(v) = part.split(" ms").next().and_then(|v| v.trim().parse().ok()) {
                found.push(v);
            }
        }
    }
    found
}

/// One warning of the schedule check, suggesting `want_ms` within `tol_ms`
/// (modulo the lobe cycle `cycle_ms`).
fn assert_suggests(notices: &[Notice], want_ms: f64, tol_ms: f64, cycle_ms: f64) {
    let got = suggested_ms(notices);
    let near = |v: &f64| {
        let d = (v - want_ms).rem_euclid(cycle_ms);
        d.min(cycle_ms - d) <= tol_ms
    };
    assert!(got.iter().any(near), "want first_start ≈ {want_ms} ms, got {got:?} from {notices:#?}");
}

const BEACON_GRAPH: &str = "graphs/two-lobe-beacon.yaml";
const BEACON: &str = "beacon-off-grid.sigmf-meta";
const BEACON_SET: [(&str, &str); 3] = [("dwell", "5 ms"), ("guard", "0.3 ms"), ("tone", "3137.7 Hz")];

fn beacon(name: &str, first_start: &str) -> Vec<Notice> {
    let mut set = BEACON_SET.to_vec();
    set.push(("first_start", first_start));
    warnings(name, BEACON_GRAPH, BEACON, &set)
}

#[test]
fn the_right_schedule_raises_no_warning() {
    let w = beacon("beacon-right", "2.5 ms");
    assert!(w.is_empty(), "{w:#?}");
    let w = warnings("pulsed-right", "tests/schedule_check/gate-only.yaml", PULSED, &[("first_start", "0.196 ms")]);
    assert!(w.is_empty(), "{w:#?}");
}

#[test]
fn a_beacon_schedule_a_quarter_or_a_half_dwell_off_is_named_with_its_correction() {
    // A quarter late and a quarter early: the amplitude steps sit inside the dwells.
    for (name, given) in [("beacon-quarter-late", "3.75 ms"), ("beacon-quarter-early", "1.25 ms")] {
        let w = beacon(name, given);
        assert_suggests(&w, 2.5, 0.1, 10.0);
        assert!(w[0].what.contains("amplitude steps sit 1.25 ms"), "{w:#?}");
    }
    // Half a dwell: 2.5 ms and 7.5 ms fit the amplitudes alike; both are named.
    let w = beacon("beacon-half", "5 ms");
    assert_suggests(&w, 2.5, 0.1, 10.0);
}

const PULSED: &str = "pulsed-switch-in-echo.wav";

#[test]
fn a_pulsed_schedule_off_by_a_quarter_a_half_or_whole_dwells_is_named_with_its_correction() {
    // 0.196 ms is right; one bin of the fold is about 12 us.
    for (name, given) in [("quarter", "0.596 ms"), ("half", "0.996 ms"), ("one", "1.796 ms"), ("three", "4.996 ms")] {
        let w = warnings(name, "tests/schedule_check/gate-only.yaml", PULSED, &[("first_start", given)]);
        assert_eq!(w.len(), 1, "{w:#?}");
        assert_suggests(&w, 0.196, 0.03, 6.4);
    }
}

#[test]
fn a_manifest_bounds_warnings_apart_from_notices_and_a_run_prints_them_as_warnings() {
    // The bundled beacon sample with its schedule a quarter dwell (5 ms) off.
    let dir = std::env::temp_dir().join(format!("lobeflow-warnings-manifest-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let manifest = format!(
        "about: the beacon sample with its schedule a quarter dwell off\n\
         graph: {}\ncapture: {}\nsettings: {{first_start: -2 ms}}\nchecks:\n  \
         - {{measure: warnings, block: lobe_gate, min: 1, max: 1}}\n  \
         - {{measure: warnings, block: tracker, max: 0}}\n  \
         - {{measure: notices, min: 1}}\n",
        repo("graphs/two-lobe-beacon.yaml").display(),
        repo("samples/two-lobe-beacon.sigmf-meta").display()
    );
    std::fs::write(dir.join("quarter-off.check.yaml"), manifest).unwrap();
    let lobeflow =
        |args: &[&str]| std::process::Command::new(env!("CARGO_BIN_EXE_lobeflow")).args(args).output().unwrap();
    let out = lobeflow(&["regress", dir.to_str().unwrap(), "--out", dir.join("out").to_str().unwrap()]);
    let text = String::from_utf8_lossy(&out.stdout).to_string() + &String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{text}");
    assert!(text.contains("warnings lobe_gate") && text.contains("4 passed, 0 failed"), "{text}");
    let input = repo("samples/two-lobe-beacon.sigmf-meta");
    let run_out = dir.join("run");
    let out = lobeflow(&[
        "run",
        repo("graphs/two-lobe-beacon.yaml").to_str().unwrap(),
        "--input",
        input.to_str().unwrap(),
        "--set",
        "first_start=-2ms",
        "--out",
        run_out.to_str().unwrap(),
    ]);
    let text = String::from_utf8_lossy(&out.stderr).to_string() + &String::from_utf8_lossy(&out.stdout);
    let _ = std::fs::remove_dir_all(&dir);
    assert!(out.status.success(), "{text}");
    let warning = text.lines().find(|l| l.starts_with("warning: gate ")).unwrap_or_else(|| panic!("{text}"));
    // The sample's schedule starts at -7 ms; one bin of the fold is 0.15 ms.
    let fit: f64 = warning.split("first_start ≈ ").nth(1).and_then(|v| v.split(" ms").next()?.parse().ok()).unwrap();
    assert!((fit + 7.0).abs() <= 0.2, "{warning}");
    assert!(text.lines().any(|l| l.starts_with("notice: ")), "information stays a notice: {text}");
}
