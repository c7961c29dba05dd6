//! The speed budget as a user meets it: the release `lobeflow` binary run as
//! a whole process on the four-lobe reference graph, on a short capture
//! (4 s at 4 MS/s, 192 MB) and a long one (at least 1 GiB at 1 MS/s), with
//! the yardsticks measured in the same run:
//!
//! - plain read: `cat FILE > /dev/null` as a process (the ratios' base), and
//!   the bench itself reading the file into a buffer;
//! - the graph with its pictures and without the picture blocks, on 1 and 2
//!   worker threads, each with its peak resident set and CPU time (wait4);
//!   the graph with SVG pictures only (`formats: svg`), and a graph that
//!   only reads the capture (the floor of any graph), on 2 threads;
//! - fixed costs: the graph on a 10 ms capture, without pictures, with
//!   them and with SVG ones only;
//! - short capture only: `benches/numpy_chain.py`, a straightforward
//!   numpy/scipy chain, as a whole process (skipped with a message when
//!   python3 has no numpy).
//!
//! Every figure is the best of 3 (LOBEFLOW_BENCH_RUNS), the variants taken in
//! turn within each round so that load from elsewhere falls on all of them.
//! `cargo bench --bench budget`; LOBEFLOW_BENCH_ONLY=short or =long runs one
//! capture; LOBEFLOW_BENCH_BIN=PATH measures another build of `lobeflow`
//! (an earlier one, for a before/after table) on the same captures. The
//! budget it checks is stated in DEVELOPERS.md.

// wait4 (the child's own peak resident set and CPU time) has no safe wrapper.
#![allow(unsafe_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

mod common;
use common::{plain_read, svg_pictures, without_pictures};

/// The binary measured: this build's, or LOBEFLOW_BENCH_BIN's.
fn lobeflow_binary() -> PathBuf {
    std::env::var_os("LOBEFLOW_BENCH_BIN").map_or_else(|| PathBuf::from(env!("CARGO_BIN_EXE_lobeflow")), PathBuf::from)
}

/// One capture to measure: the scenario's rate, length and file.
struct Capture {
    name: &'static str,
    rate_ms: u32,
    seconds: f64,
}

fn main() {
    let runs: usize = std::env::var("LOBEFLOW_BENCH_RUNS").ok().and_then(|v| v.parse().ok()).unwrap_or(3);
    let only = std::env::var("LOBEFLOW_BENCH_ONLY").unwrap_or_default();
    let repo = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("bench");
    std::fs::create_dir_all(&dir).expect("bench folder");
    let full = repo.join("graphs/four-lobe-pulsed.yaml");
    let bare = dir.join("four-lobe-no-pictures.yaml");
    std::fs::write(&bare, without_pictures(&std::fs::read_to_string(&full).expect("graph"), &repo))
        .expect("graph copy");
    let svg = dir.join("four-lobe-svg-pictures.yaml");
    let svg_text = svg_pictures(&std::fs::read_to_string(&full).expect("graph"), &repo);
    assert_eq!(svg_text.matches("formats: svg").count(), 6, "every picture block set to SVG");
    std::fs::write(&svg, svg_text).expect("graph copy");
    let read_only = dir.join("read-only.yaml");
    std::fs::write(&read_only, READ_ONLY).expect("graph file");
    println!("lobeflow: {}", lobeflow_binary().display());
    println!("load average at start: {}", load_average());

    let tiny = synthesize(&repo, &dir, &Capture { name: "budget-10ms", rate_ms: 4, seconds: 0.01 });
    // Without pictures: start-up, resolve, a few sweeps, commit. With them,
    // also the font load and the drawing of every (nearly empty) picture.
    let fixed_bare = best_of(runs, || run_graph(&bare, &tiny, &dir.join("out-fixed"), 2).wall);
    let fixed = best_of(runs, || run_graph(&full, &tiny, &dir.join("out-fixed"), 2).wall);
    let fixed_svg = best_of(runs, || run_graph(&svg, &tiny, &dir.join("out-fixed"), 2).wall);
    println!(
        "fixed costs, graph on a 10 ms capture: {:.1} ms without pictures, {:.1} ms with, {:.1} ms with SVG ones only",
        fixed_bare * 1e3,
        fixed * 1e3,
        fixed_svg * 1e3
    );

    let gib: f64 = std::env::var("LOBEFLOW_BENCH_GIB").ok().and_then(|v| v.parse().ok()).unwrap_or(1.0);
    let long_seconds = (gib * (1u64 << 30) as f64 / 12.0 / 1e6).ceil();
    let captures = [
        (Capture { name: "budget-short", rate_ms: 4, seconds: 4.0 }, true),
        (Capture { name: "budget-long", rate_ms: 1, seconds: long_seconds }, false),
    ];
    for (capture, with_numpy) in captures {
        if !only.is_empty() && !capture.name.ends_with(&only) {
            continue;
        }
        let wav = synthesize(&repo, &dir, &capture);
        measure(
            &wav,
            [&full, &bare, &svg, &read_only],
            &dir,
            runs,
            with_numpy.then(|| repo.join("benches/numpy_chain.py")),
        );
    }
    println!("load average at end: {}", load_average());
}

/// What one child process cost.
#[derive(Clone, Copy, Default)]
struct Cost {
    wall: f64,
    cpu: f64,
    peak_rss_kib: u64,
}

/// All variants on one capture, `runs` rounds; prints the table and ratios.
fn measure(wav: &Path, [full, bare, svg, read_only]: [&Path; 4], dir: &Path, runs: usize, numpy: Option<PathBuf>) {
    let bytes = std::fs::metadata(wav).expect("capture").len();
    println!("\n== {} ({:.0} MB, {:.3} GiB)", wav.display(), bytes as f64 / 1e6, bytes as f64 / (1u64 << 30) as f64);
    let numpy = numpy.filter(|_| {
        let ok = Command::new("python3").args(["-c", "import numpy"]).status().is_ok_and(|s| s.success());
        if !ok {
            println!("numpy chain skipped: python3 with numpy not found");
        }
        ok
    });
    let out = dir.join("out");
    let variants: [(&str, &Path, usize); 6] = [
        ("pictures, 2 threads", full, 2),
        ("pictures, 1 thread", full, 1),
        ("no pictures, 2 threads", bare, 2),
        ("no pictures, 1 thread", bare, 1),
        ("SVG pictures, 2 threads", svg, 2),
        ("read only, 2 threads", read_only, 2),
    ];
    let mut best = [Cost { wall: f64::MAX, ..Cost::default() }; 6];
    let (mut cat, mut read, mut np) = (f64::MAX, f64::MAX, f64::MAX);
    for _ in 0..runs {
        let t = Instant::now();
        plain_read(wav);
        read = read.min(t.elapsed().as_secs_f64());
        cat = cat.min(child_cost(Command::new("cat").arg(wav)).wall);
        for (slot, (_, graph, threads)) in best.iter_mut().zip(&variants) {
            let c = run_graph(graph, wav, &out, *threads);
            slot.wall = slot.wall.min(c.wall);
            slot.cpu = if c.wall <= slot.wall { c.cpu } else { slot.cpu };
            slot.peak_rss_kib = slot.peak_rss_kib.max(c.peak_rss_kib);
        }
        if let Some(script) = &numpy {
            let mut cmd = Command::new("python3");
            cmd.arg(script).arg(wav).arg(dir.join("numpy-angles.csv"));
            np = np.min(child_cost(&mut cmd).wall);
        }
    }
    println!("plain read, cat > /dev/null:   {:8.3} s  {:6.2} GB/s", cat, bytes as f64 / cat / 1e9);
    println!("plain read, in the bench:      {:8.3} s  {:6.2} GB/s", read, bytes as f64 / read / 1e9);
    for ((name, _, _), c) in variants.iter().zip(&best) {
        println!(
            "{name:<24} {:8.3} s  vs read {:5.1} %  CPU {:6.3} s  peak RSS {:6.1} MiB",
            c.wall,
            cat / c.wall * 100.0,
            c.cpu,
            c.peak_rss_kib as f64 / 1024.0
        );
    }
    let [pic2, pic1, bare2, _, svg2, _] = best;
    let share = |with: Cost| (with.wall - bare2.wall).max(0.0) / with.wall * 100.0;
    println!("pictures' share of the wall time (2 threads): {:.1} % (SVG only: {:.1} %)", share(pic2), share(svg2));
    println!("2 threads vs 1, with pictures: {:.2} x", pic1.wall / pic2.wall);
    println!("2 threads vs 1, no pictures:   {:.2} x", best[3].wall / bare2.wall);
    if numpy.is_some() {
        println!("numpy chain (whole process):   {:8.3} s", np);
        println!("graph with pictures vs numpy chain: {:.1} x faster", np / pic2.wall);
        println!("graph with SVG pictures vs numpy chain: {:.1} x faster", np / svg2.wall);
        println!("graph without pictures vs numpy chain: {:.1} x faster", np / bare2.wall);
    }
}

/// A graph that reads the capture and drops it: what any graph costs at least.
const READ_ONLY: &str = "title: read only
about: the capture read and dropped, the floor of any graph on it
settings:
  input: {default: capture.wav, doc: the capture}
blocks:
  read: {kind: capture_reader, set: {path: $input}}
  drop: {kind: discard}
wiring:
  - read -> drop
";

/// The graph as a user runs it: `lobeflow run GRAPH --input WAV --out DIR`.
fn run_graph(graph: &Path, wav: &Path, out: &Path, threads: usize) -> Cost {
    let mut cmd = Command::new(lobeflow_binary());
    cmd.arg("run").arg(graph).arg("--input").arg(wav).arg("--out").arg(out);
    cmd.args(["--quiet", "--threads", &threads.to_string()]);
    child_cost(&mut cmd)
}

/// Run a child to its end: wall time, CPU time and peak resident set (its own, from wait4).
// Reaped by wait4 rather than `Child::wait`, which gives no resource usage.
#[allow(clippy::zombie_processes)]
fn child_cost(cmd: &mut Command) -> Cost {
    // Standard error to a file: a pipe nobody reads could fill and block the child.
    let err_path = std::env::temp_dir().join(format!("lobeflow-budget-{}.stderr", std::process::id()));
    let err_file = std::fs::File::create(&err_path).expect("stderr file");
    let t = Instant::now();
    let child = cmd.stdin(Stdio::null()).stdout(Stdio::null()).stderr(err_file).spawn().expect("spawn");
    let pid = child.id() as libc::pid_t;
    let mut status = 0;
    // SAFETY: zeroed rusage is a valid value; wait4 writes only into the two out-pointers.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    let got = unsafe { libc::wait4(pid, &mut status, 0, &mut usage) };
    let wall = t.elapsed().as_secs_f64();
    assert_eq!(got, pid, "wait4 failed");
    let err = std::fs::read_to_string(&err_path).unwrap_or_default();
    let _ = std::fs::remove_file(&err_path);
    assert!(libc::WIFEXITED(status) && libc::WEXITSTATUS(status) == 0, "{cmd:?} failed: {err}");
    let secs = |t: libc::timeval| Duration::new(t.tv_sec as u64, t.tv_usec as u32 * 1000).as_secs_f64();
    Cost { wall, cpu: secs(usage.ru_utime) + secs(usage.ru_stime), peak_rss_kib: usage.ru_maxrss as u64 }
}

/// The four-lobe sample's scenario at the capture's rate and length (the
/// target held in azimuth so it stays in the beam), synthesized once.
fn synthesize(repo: &Path, dir: &Path, c: &Capture) -> PathBuf {
    let wav = dir.join(format!("{}.wav", c.name));
    let samples = (c.seconds * c.rate_ms as f64 * 1e6).round() as u64;
    if std::fs::metadata(&wav).map(|m| m.len()).ok() == Some(samples * 12 + 68) {
        return wav;
    }
    let scenario = std::fs::read_to_string(repo.join("samples/four-lobe-pulsed.scenario.yaml"))
        .expect("scenario")
        .replace("sample_rate: 1 MS/s", &format!("sample_rate: {} MS/s", c.rate_ms))
        .replace("duration: 300 ms", &format!("duration: {} ms", c.seconds * 1e3))
        .replace("per_second: -1.0 deg, swing", "per_second: 0 deg, swing");
    let sc = dir.join(format!("{}.scenario.yaml", c.name));
    std::fs::write(&sc, scenario).expect("scenario copy");
    let t = Instant::now();
    let cost = child_cost(
        Command::new(env!("CARGO_BIN_EXE_lobeflow")).arg("synth").arg(&sc).arg("--out").arg(dir.join(c.name)),
    );
    let len = std::fs::metadata(&wav).map(|m| m.len()).unwrap_or(0);
    assert_eq!(len, samples * 12 + 68, "synthesized {} has an unexpected length", wav.display());
    println!("synthesized {} in {:.1} s ({:.1} s wall)", wav.display(), t.elapsed().as_secs_f64(), cost.wall);
    wav
}

fn best_of(n: usize, mut f: impl FnMut() -> f64) -> f64 {
    (0..n).map(|_| f()).fold(f64::MAX, f64::min)
}

fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .unwrap_or_default()
        .split_whitespace()
        .take(3)
        .collect::<Vec<_>>()
        .join(" ")
}
