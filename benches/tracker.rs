//! Four-lobe pulsed chain benchmark: a synthesized capture of at least
//! 1 GiB (WAV float32: I, Q, sync) through `graphs/four-lobe-pulsed.yaml`,
//! with and without its pictures, on 1 and 2 worker threads, against a plain
//! sequential read of the same file in the same run.
//!
//! `cargo bench --bench tracker` (LOBEFLOW_BENCH_GIB changes the size).
//! Prints MS/s, the ratio to the plain read and the peak resident set of
//! each run (the peak is reset between runs).

use std::path::PathBuf;
use std::time::Instant;

mod common;
use common::{peak_rss_kib, plain_read, reset_peak_rss, without_pictures};

fn main() {
    let gib: f64 = std::env::var("LOBEFLOW_BENCH_GIB").ok().and_then(|v| v.parse().ok()).unwrap_or(1.0);
    let repo = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("bench");
    std::fs::create_dir_all(&dir).expect("bench folder");
    // 12 bytes per sample (three float32 channels) at 1 MS/s.
    let seconds = (gib * (1u64 << 30) as f64 / 12.0 / 1e6).ceil();
    let capture = dir.join("tracker.wav");
    let scenario = std::fs::read_to_string(repo.join("samples/four-lobe-pulsed.scenario.yaml"))
        .expect("scenario")
        .replace("duration: 300 ms", &format!("duration: {seconds} s"))
        .replace("per_second: -1.0 deg, swing", "per_second: 0 deg, swing");
    let expected = (seconds * 1e6) as u64 * 12 + 68;
    if std::fs::metadata(&capture).map(|m| m.len()).ok() != Some(expected) {
        let sc = dir.join("tracker.scenario.yaml");
        std::fs::write(&sc, scenario).expect("scenario copy");
        let t = Instant::now();
        let file = lobeflow::synth::scenario::ScenarioFile::load(&sc).expect("scenario loads");
        lobeflow::synth::synthesize(&file, &dir.join("tracker")).expect("synthesis");
        println!("synthesized {} in {:.1} s", capture.display(), t.elapsed().as_secs_f64());
    }
    let bytes = std::fs::metadata(&capture).expect("capture").len();
    let samples = (bytes - 68) / 12;

    let full = repo.join("graphs/four-lobe-pulsed.yaml");
    let bare = dir.join("four-lobe-no-pictures.yaml");
    std::fs::write(&bare, without_pictures(&std::fs::read_to_string(&full).expect("graph"), &repo))
        .expect("graph copy");

    let read = best_of(2, || {
        plain_read(&capture);
    });
    println!("capture: {} ({:.2} GiB, {samples} samples)", capture.display(), bytes as f64 / (1u64 << 30) as f64);
    let ms = |s: f64| samples as f64 / s / 1e6;
    println!("plain read:                 {:8.1} MS/s", ms(read.0));
    for (name, graph, threads) in [
        ("chain + pictures, 2 threads", &full, 2),
        ("chain + pictures, 1 thread ", &full, 1),
        ("chain only,       2 threads", &bare, 2),
        ("chain only,       1 thread ", &bare, 1),
    ] {
        let out = dir.join("out");
        let (secs, rss) = best_of(2, || {
            let mut s = lobeflow::Session::open(graph).expect("graph loads");
            s.set("input", capture.to_str().expect("utf-8 path")).out_dir(&out).threads(threads);
            s.run().expect("graph runs");
        });
        println!("{name}: {:8.1} MS/s  ratio {:.3}  peak RSS {:6.1} MiB", ms(secs), read.0 / secs, rss as f64 / 1024.0);
    }
}

/// Best wall time of `n` runs and the largest peak resident set (KiB).
fn best_of(n: usize, mut f: impl FnMut()) -> (f64, u64) {
    let mut best = f64::MAX;
    let mut rss = 0;
    for _ in 0..n {
        reset_peak_rss();
        let t = Instant::now();
        f();
        best = best.min(t.elapsed().as_secs_f64());
        rss = rss.max(peak_rss_kib());
    }
    (best, rss)
}
