//! `lobeflow batch`: one graph over many synthesized captures, sharded as a
//! cluster scheduler's job array would run it, merged back byte for byte;
//! failures kept to their own rows; stopped runs resumed.

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

fn repo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn lobeflow(dir: &Path) -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_lobeflow"));
    c.current_dir(dir);
    c
}

fn run(dir: &Path, args: &[&str]) -> Output {
    lobeflow(dir).args(args).output().unwrap()
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

/// `n` short four-lobe captures with different seeds, made by `lobeflow synth`.
fn captures(name: &str, n: usize) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-batch-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(d.join("archive")).unwrap();
    let scenario = std::fs::read_to_string(repo().join("samples/four-lobe-pulsed.scenario.yaml")).unwrap();
    assert!(scenario.contains("seed: 41") && scenario.contains("duration: 300 ms"));
    for i in 0..n {
        let s = d.join(format!("archive/pass-{i:02}.scenario.yaml"));
        let short =
            scenario.replace("seed: 41", &format!("seed: {}", 100 + i)).replace("duration: 300 ms", "duration: 80 ms");
        std::fs::write(&s, short).unwrap();
        let out = run(&d, &["synth", s.to_str().unwrap(), "--out", &format!("archive/pass-{i:02}")]);
        assert!(out.status.success(), "{}", text(&out.stderr));
    }
    d
}

fn graph() -> String {
    repo().join("graphs/four-lobe-pulsed.yaml").to_string_lossy().into_owned()
}

#[test]
fn shards_run_in_parallel_and_merge_into_the_unsharded_summary_byte_for_byte() {
    let d = captures("shards", 6);
    let list: String = (0..6).map(|i| format!("archive/pass-{i:02}.wav\n")).collect();
    std::fs::write(d.join("list.txt"), format!("# six passes\n{list}\n")).unwrap();
    let g = graph();

    let whole = run(&d, &["batch", &g, "--list", "list.txt", "--out", "whole", "--jobs", "2"]);
    assert!(whole.status.success(), "{}", text(&whole.stderr));

    // Three jobs of an array, each its own process and folder, all at once.
    let shards: Vec<_> = (0..3)
        .map(|k| {
            lobeflow(&d)
                .args(["batch", &g, "--list", "list.txt", "--out", &format!("shard-{k}"), "--jobs", "1"])
                .args(["--shard", &format!("{k}/3")])
                .stdout(Stdio::null())
                .stderr(Stdio::piped())
                .spawn()
                .unwrap()
        })
        .collect();
    let mut shards = shards;
    assert!(shards.iter_mut().all(|c| c.try_wait().unwrap().is_none()), "all three shards are running together");
    for c in shards {
        let out = c.wait_with_output().unwrap();
        assert!(out.status.success(), "{}", text(&out.stderr));
    }
    // Each shard ran its own share: captures k, k+3.
    let shard1 = std::fs::read_to_string(d.join("shard-1/summary.csv")).unwrap();
    let rows1: Vec<&str> = shard1.lines().skip(1).map(|l| l.split(',').next().unwrap()).collect();
    assert_eq!(rows1, ["archive/pass-01.wav", "archive/pass-04.wav"]);

    let merged = run(&d, &["batch", "merge", "shard-2", "shard-0", "shard-1", "--out", "merged"]);
    assert!(merged.status.success(), "{}", text(&merged.stderr));
    let a = std::fs::read(d.join("whole/summary.csv")).unwrap();
    let b = std::fs::read(d.join("merged/summary.csv")).unwrap();
    assert_eq!(text(&a), text(&b));
    assert_eq!(a, b, "byte for byte");

    let summary = text(&a);
    let header: Vec<&str> = summary.lines().next().unwrap().split(',').collect();
    assert!(header.starts_with(&["capture", "output", "status", "estimates", "az_ok"]), "{header:?}");
    assert!(header.contains(&"notices") && header.contains(&"no_signal") && header.contains(&"error"));
    assert!(!summary.contains("second"), "no timings in the summary");
    assert_eq!(summary.lines().count(), 7);
    for (i, line) in summary.lines().skip(1).enumerate() {
        let cells: Vec<&str> = line.split(',').collect();
        assert_eq!(cells[..3], [format!("archive/pass-{i:02}.wav").as_str(), &format!("pass-{i:02}"), "ok"]);
        assert!(cells[4].parse::<usize>().unwrap() > 10, "{line}");
        assert!(d.join("whole").join(cells[1]).join("angles.csv").is_file());
    }
    let timings = std::fs::read_to_string(d.join("merged/timings.csv")).unwrap();
    assert_eq!(timings.lines().next(), Some("capture,seconds,resumed"));
    assert_eq!(timings.lines().count(), 7);
}

#[test]
fn a_failing_capture_is_its_own_row_and_a_rerun_resumes_the_complete_ones() {
    let d = captures("resume", 2);
    std::fs::write(d.join("archive/garbled.wav"), b"RIFF this is not a capture").unwrap();
    std::fs::write(d.join("list.txt"), "pass-00.wav\nmissing.wav\ngarbled.wav\npass-01.wav\n").unwrap();
    // The list sits in the archive: its paths are read from its folder.
    std::fs::rename(d.join("list.txt"), d.join("archive/list.txt")).unwrap();
    let g = graph();
    let first = run(&d, &["batch", &g, "--list", "archive/list.txt", "--out", "out"]);
    assert_eq!(first.status.code(), Some(2), "{}", text(&first.stderr));
    let summary = std::fs::read_to_string(d.join("out/summary.csv")).unwrap();
    let status: Vec<&str> = summary.lines().skip(1).map(|l| l.split(',').nth(2).unwrap()).collect();
    assert_eq!(status, ["ok", "error", "error", "ok"], "{summary}");
    let missing = summary.lines().nth(2).unwrap();
    assert!(missing.contains("missing.wav") && missing.split(',').next_back().unwrap().len() > 10, "{missing}");

    let again = run(&d, &["batch", &g, "--list", "archive/list.txt", "--out", "out"]);
    assert_eq!(again.status.code(), Some(2));
    assert!(
        text(&again.stderr).contains("0 captures ran, 2 complete from an earlier run, 2 failed"),
        "{}",
        text(&again.stderr)
    );
    assert_eq!(std::fs::read_to_string(d.join("out/summary.csv")).unwrap(), summary);
    let timings = std::fs::read_to_string(d.join("out/timings.csv")).unwrap();
    assert_eq!(timings.lines().filter(|l| l.ends_with(",yes")).count(), 2, "{timings}");

    // An output gone: that capture runs again; the other stays skipped.
    std::fs::remove_file(d.join("out/pass-01/angles.png")).unwrap();
    let third = run(&d, &["batch", &g, "--list", "archive/list.txt", "--out", "out"]);
    assert!(text(&third.stderr).contains("1 captures ran, 1 complete from an earlier run"), "{}", text(&third.stderr));
    assert!(d.join("out/pass-01/angles.png").is_file());
    // Other settings: nothing earlier counts.
    let fourth = run(&d, &["batch", &g, "--list", "archive/list.txt", "--out", "out", "--set", "guard=12us"]);
    assert!(text(&fourth.stderr).contains("2 captures ran, 0 complete"), "{}", text(&fourth.stderr));
}

#[test]
fn shards_keep_to_their_own_folders_and_merge_refuses_an_incomplete_set() {
    let d = captures("mixups", 3);
    let g = graph();
    let caps = ["archive/pass-00.wav", "archive/pass-01.wav", "archive/pass-02.wav"];
    let args = |shard: &str, out: &str| {
        let mut a = vec!["batch", g.as_str()];
        a.extend(caps);
        a.extend(["--out", out, "--shard", shard]);
        a.into_iter().map(String::from).collect::<Vec<String>>()
    };
    let ok = lobeflow(&d).args(args("0/2", "a")).output().unwrap();
    assert!(ok.status.success(), "{}", text(&ok.stderr));
    let clash = lobeflow(&d).args(args("1/2", "a")).output().unwrap();
    assert_eq!(clash.status.code(), Some(2));
    assert!(text(&clash.stderr).contains("give each shard"), "{}", text(&clash.stderr));
    let merge = run(&d, &["batch", "merge", "a", "--out", "m"]);
    assert_eq!(merge.status.code(), Some(2));
    assert!(text(&merge.stderr).contains("shards missing: 1/2"), "{}", text(&merge.stderr));
    for bad in ["2/2", "1/0", "one/2"] {
        let out = lobeflow(&d).args(args(bad, "b")).output().unwrap();
        assert_eq!(out.status.code(), Some(2), "{bad}");
        assert!(text(&out.stderr).contains("--shard"), "{}", text(&out.stderr));
    }
}
