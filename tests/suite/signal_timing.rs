//! Gate timing 'signal' (switch instants found from amplitude steps and
//! switch transients, neither sync channel nor schedule) on captures
//! lobeflow did not make (`tests/independent/make_inspect_captures.py`,
//! numpy only): the dwell and switch instant it reports must hold the
//! truth within the confidence it states, the angles must match those of
//! a run with the true schedule within 3 % in RMS, and a clean capture
//! gives no warning. Also the schedule's drift check on a switch clock
//! 0.08 % slow, the sync channel's labels checked against the echoes, and
//! the error when nothing says which lobe is which.

use super::inspect_captures::{capture, compare, n, repo, run_reporting, truth};
use lobeflow_blocks::{Notice, Severity};

/// (dwell, ± within, switch instant, ± within) in ms from the gate's notice.
fn found_train(notices: &[Notice]) -> [f64; 4] {
    let text = &notices.iter().find(|n| n.what.contains("switch train found")).expect("the train notice").what;
    let numbers: Vec<f64> =
        text.split(|c: char| !(c.is_ascii_digit() || c == '.' || c == '-')).filter_map(|w| w.parse().ok()).collect();
    // "dwell D ms ± E ms, a switch at T ms ± W ms ..."
    [numbers[0], numbers[1], numbers[2], numbers[3]]
}

/// The found train holds the true dwell and a true switch instant (modulo the dwell).
fn holds_truth(name: &str, notices: &[Notice], dwell_ms: f64, switch_ms: f64) {
    let [dwell, dwell_within, at, at_within] = found_train(notices);
    eprintln!(
        "{name}: dwell {dwell} ± {dwell_within} ms (truth {dwell_ms}), switch {at} ± {at_within} ms (truth {switch_ms} + k dwell)"
    );
    assert!((dwell - dwell_ms).abs() <= dwell_within, "{name}: dwell {dwell} ± {dwell_within} against {dwell_ms}");
    let off = (at - switch_ms).rem_euclid(dwell_ms);
    assert!(off.min(dwell_ms - off) <= at_within, "{name}: switch {at} ± {at_within} against {switch_ms}");
    // the confidence says something: well under a dwell
    assert!(at_within < dwell_ms / 4.0, "{name}: {at_within}");
}

fn warnings_of<'a>(notices: &'a [Notice], block: &str) -> Vec<&'a Notice> {
    notices.iter().filter(|n| n.severity == Severity::Warning && n.block.as_ref() == block).collect()
}

#[test]
fn blind_beacons_give_the_angles_of_their_true_schedules() {
    let graph = "graphs/two-lobe-beacon.yaml";
    // 400 Hz switching made of short transients (harmonics as strong as the fundamental)
    let name = "beacon-blind";
    let t = truth(name);
    let (dwell, first) = (n(&t, "dwell_s") * 1e3, n(&t, "first_start_s") * 1e3);
    let common = [("tone", "-6432.1 Hz"), ("guard", "0.3 ms")];
    let (truth_angles, _, _) =
        run_reporting(name, graph, &[common[0], common[1], ("dwell", "2.5 ms"), ("first_start", "0.9 ms")], "true");
    // the left lobe's dwells begin at 0.9 ms + k 5 ms: it is active at 1 ms
    let blind = [common[0], common[1], ("timing", "signal"), ("known_lobe", "left"), ("known_at", "1 ms")];
    let (found, _, notices) = run_reporting(name, graph, &blind, "signal");
    holds_truth(name, &notices, dwell, first);
    assert!(warnings_of(&notices, "gate").is_empty(), "{notices:#?}");
    compare(name, "az", &truth_angles, &found);
    // no statement: the capture's one SigMF annotation labels a dwell 'left'
    let labelled = [common[0], common[1], ("timing", "signal")];
    let (found, _, notices) = run_reporting(name, graph, &labelled, "label");
    holds_truth(name, &notices, dwell, first);
    assert!(
        notices.iter().any(|n| n.what.contains("the capture's label 'left'")),
        "the lobe's identity should come from the annotation: {notices:#?}"
    );
    compare(name, "az", &truth_angles, &found);
    // a 20 ms dwell, weak transients: the amplitude steps carry it
    let name = "beacon-schedule";
    let t = truth(name);
    let (dwell, first) = (n(&t, "dwell_s") * 1e3, n(&t, "first_start_s") * 1e3);
    let (truth_angles, _, _) =
        run_reporting(name, graph, &[("tone", "9876.5 Hz"), ("dwell", "20 ms"), ("first_start", "-7 ms")], "true");
    let blind = [("tone", "9876.5 Hz"), ("timing", "signal"), ("known_lobe", "left")];
    let (found, _, notices) = run_reporting(name, graph, &blind, "signal");
    holds_truth(name, &notices, dwell, first);
    assert!(warnings_of(&notices, "gate").is_empty(), "{notices:#?}");
    compare(name, "az", &truth_angles, &found);
}

#[test]
fn pulsed_without_sync_gives_the_angles_of_its_true_schedule() {
    let name = "pulsed-blind-4k1";
    let graph = "graphs/four-lobe-pulsed.yaml";
    let t = truth(name);
    let dwell = n(&t, "dwell_pulses") / n(&t, "prf_hz") * 1e3;
    let first_switch = n(&t, "first_switch_s") * 1e3;
    let regions = [
        ("prf", "4100 Hz"),
        ("pulse", "7.5 us"),
        ("search_start", "7 km"),
        ("search_end", "25 km"),
        ("noise_start", "17 km"),
        ("noise_width", "8 km"),
    ];
    let dwell_text = format!("{dwell} ms");
    let first_text = format!("{} ms", first_switch - dwell);
    let mut known = regions.to_vec();
    known.extend([("timing", "schedule"), ("dwell", dwell_text.as_str()), ("first_start", first_text.as_str())]);
    let (truth_angles, _, truth_notices) = run_reporting(name, graph, &known, "true");
    // the true schedule agrees with the echoes
    assert!(warnings_of(&truth_notices, "front/gate").is_empty(), "{truth_notices:#?}");
    // three sweeps late: named, with the first_start that fits
    let late = format!("{} ms", first_switch - dwell + 3.0 / n(&t, "prf_hz") * 1e3);
    let mut off = regions.to_vec();
    off.extend([("timing", "schedule"), ("dwell", dwell_text.as_str()), ("first_start", late.as_str())]);
    let (_, _, off_notices) = run_reporting(name, graph, &off, "late");
    let warned = warnings_of(&off_notices, "front/gate");
    assert_eq!(warned.len(), 1, "{off_notices:#?}");
    let fit: f64 =
        warned[0].what.split("first_start ≈ ").nth(1).and_then(|v| v.split(" ms").next()?.parse().ok()).unwrap();
    assert!((fit - (first_switch - dwell)).abs() <= 0.01, "{}", warned[0].what);
    assert!(warned[0].what.contains("3 sweep(s) before the scheduled switches"), "{}", warned[0].what);
    let mut blind = regions.to_vec();
    // the first lobe of the order is active at the first sample
    blind.extend([("timing", "signal"), ("known_lobe", "right")]);
    let (found, _, notices) = run_reporting(name, graph, &blind, "signal");
    holds_truth(name, &notices, dwell, first_switch);
    assert!(warnings_of(&notices, "front/gate").is_empty(), "{notices:#?}");
    compare(name, "az", &truth_angles, &found);
    compare(name, "el", &truth_angles, &found);
}

#[test]
fn without_a_lobe_label_or_statement_check_and_run_say_both_ways_to_give_one() {
    let graph = repo("graphs/two-lobe-beacon.yaml");
    let gate_line =
        std::fs::read_to_string(&graph).unwrap().lines().position(|l| l.contains("kind: lobe_gate")).unwrap() + 1;
    for command in ["check", "run"] {
        let out_dir = std::env::temp_dir().join(format!("lobeflow-signal-identity-{}-{command}", std::process::id()));
        let mut args = vec![command, graph.to_str().unwrap()];
        let cap = capture("beacon-schedule");
        args.extend(["--input", cap.to_str().unwrap(), "--set", "timing=signal"]);
        if command == "run" {
            args.extend(["--out", out_dir.to_str().unwrap()]);
        }
        let out = std::process::Command::new(env!("CARGO_BIN_EXE_lobeflow")).args(&args).output().unwrap();
        let text = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{command}: {text}");
        assert!(text.contains(&format!("two-lobe-beacon.yaml:{gate_line}:")), "{command}: {text}");
        for phrase in ["no lobe label", "known_lobe, the first lobe", "known_lobe and known_at"] {
            assert!(text.contains(phrase), "{command}: '{phrase}' missing from {text}");
        }
        assert!(!out_dir.join("angles.csv").exists());
        let _ = std::fs::remove_dir_all(&out_dir);
    }
}

#[test]
fn a_schedule_that_drifts_against_the_switches_is_named_with_the_dwell_that_fits() {
    let name = "beacon-drift";
    let t = truth(name);
    let real_ms = n(&t, "dwell_s") * 1e3;
    let set = [("tone", "4321 Hz"), ("guard", "0.3 ms"), ("dwell", "5 ms"), ("first_start", "1.2 ms")];
    let (_, _, notices) = run_reporting(name, "graphs/two-lobe-beacon.yaml", &set, "drift");
    let warnings = warnings_of(&notices, "gate");
    assert_eq!(warnings.len(), 1, "{notices:#?}");
    let what = &warnings[0].what;
    assert!(what.contains("drift against the scheduled switches"), "{what}");
    let fit: f64 = what.split("dwell ≈ ").nth(1).and_then(|v| v.split(" ms").next()?.parse().ok()).unwrap();
    eprintln!("{name}: dwell that fits {fit} ms, truth {real_ms} ms");
    // the drift is 4 us per dwell; the fit is good to a tenth of it
    assert!((fit - real_ms).abs() <= 0.0004, "{what}");
    // the right dwell raises nothing
    let right = [set[0], set[1], ("dwell", "5.004 ms"), ("first_start", "1.2 ms")];
    let (_, _, notices) = run_reporting(name, "graphs/two-lobe-beacon.yaml", &right, "right");
    assert!(warnings_of(&notices, "gate").is_empty(), "{notices:#?}");
}

#[test]
fn a_sync_channel_lagging_the_switches_by_a_sweep_is_named_and_a_right_one_is_not() {
    // make_captures.py's pulsed rig (250 kS/s, 5 kHz PRF, 8 pulses per dwell): its timing and gate
    let set = &super::end_to_end::INDEPENDENT_PULSED[..11];
    let graph = "graphs/four-lobe-pulsed.yaml";
    let gate = |w: &[Notice]| w.iter().filter(|n| n.block.as_ref() == "front/gate").cloned().collect::<Vec<_>>();
    let right = super::schedule_check::warnings("sync-right", graph, "pulsed-switch-at-transmit.wav", set);
    assert!(gate(&right).is_empty(), "{right:#?}");
    // the staircase 50 samples (one pulse interval) behind the switches
    let late = super::schedule_check::warnings("sync-late", graph, "pulsed-sync-late.wav", set);
    let late = gate(&late);
    assert_eq!(late.len(), 1, "{late:#?}");
    let what = &late[0].what;
    assert!(what.contains("change lobe 1 sweep(s) before the sync channel's switches"), "{what}");
    assert!(what.contains("lag the lobe switches by about 200 us"), "{what}");
}

#[test]
fn a_beacon_sync_channel_lagging_the_antenna_is_named_and_an_on_time_one_is_not() {
    // a two-lobe beacon whose third channel is the switch's sync staircase (two-sample ramp)
    let graph = "graphs/two-lobe-beacon.yaml";
    let set = [("tone", "3456 Hz"), ("guard", "0.3 ms"), ("timing", "sync"), ("dwell", "5 ms"), ("learn", "0.2 s")];
    let (_, _, notices) = run_reporting("on-time-sync-beacon", graph, &set, "on-time");
    assert!(warnings_of(&notices, "gate").is_empty(), "{notices:#?}");
    let name = "lagging-sync-beacon";
    let lag_ms = n(&truth(name), "sync_lag_s") * 1e3;
    let (_, _, notices) = run_reporting(name, graph, &set, "lagging");
    let warnings = warnings_of(&notices, "gate");
    assert_eq!(warnings.len(), 1, "{notices:#?}");
    let what = &warnings[0].what;
    eprintln!("{name}: {what} (truth: lag {lag_ms} ms)");
    assert!(what.contains("before the sync channel's switches"), "{what}");
    let found: f64 =
        what.split("lags the antenna by about ").nth(1).and_then(|v| v.split(" ms").next()?.parse().ok()).unwrap();
    // two fold bins (under 0.1 ms here) and the staircase's one-sample ramp
    assert!((found - lag_ms).abs() <= 0.1, "{what}");
}
