//! Pass-through benchmark: a cf32_le capture of at least 1 GiB read by
//! `capture_reader`, handed through `pass`, dropped by `discard`, against a
//! plain sequential read of the same file in the same run.
//!
//! `cargo bench --bench passthrough` (set LOBEFLOW_BENCH_GIB to change the
//! size). Prints MS/s of both, their ratio, and the peak resident set.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::Instant;

mod common;
use common::{peak_rss_kib, plain_read, reset_peak_rss};

fn main() {
    let gib: f64 = std::env::var("LOBEFLOW_BENCH_GIB").ok().and_then(|v| v.parse().ok()).unwrap_or(1.0);
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("bench");
    std::fs::create_dir_all(&dir).expect("bench folder");
    let data = dir.join("passthrough.cf32");
    let bytes = (gib * (1u64 << 30) as f64) as u64 / 8 * 8;
    make_capture(&data, bytes);
    let samples = bytes / 8;
    let graph = dir.join("passthrough.yaml");
    std::fs::write(
        &graph,
        format!(
            "title: pass-through benchmark\nblocks:\n  read: {{kind: capture_reader, set: {{path: {}, format: raw, datatype: cf32_le, rate: 10 MS/s}}}}\n  hand: {{kind: pass}}\n  drop: {{kind: discard}}\nwiring:\n  - read -> hand -> drop\n",
            data.display()
        ),
    )
    .expect("graph");

    let mut best_read = f64::MAX;
    for _ in 0..3 {
        let t = Instant::now();
        plain_read(&data);
        best_read = best_read.min(t.elapsed().as_secs_f64());
    }
    let ms = |secs: f64| samples as f64 / secs / 1e6;
    println!("capture: {} ({:.2} GiB, {samples} samples cf32_le)", data.display(), bytes as f64 / (1u64 << 30) as f64);
    println!("plain read:              {:8.1} MS/s  ({:.3} s)", ms(best_read), best_read);
    for threads in [1, 2] {
        let mut best = f64::MAX;
        let mut rss = 0;
        for round in 0..3 {
            reset_peak_rss();
            let t = Instant::now();
            let mut s = lobeflow::Session::open(&graph).expect("graph loads");
            s.out_dir(dir.join("out")).threads(threads);
            let report = s.run().expect("graph runs");
            best = best.min(t.elapsed().as_secs_f64());
            rss = rss.max(peak_rss_kib());
            assert_eq!(report.stats[2].samples_in, samples, "every sample arrives (round {round})");
        }
        println!(
            "pass-through, {threads} thread{}: {:8.1} MS/s  ratio {:.3}  peak RSS {:.1} MiB",
            if threads == 1 { " " } else { "s" },
            ms(best),
            best_read / best,
            rss as f64 / 1024.0
        );
    }
}

fn make_capture(path: &Path, bytes: u64) {
    if std::fs::metadata(path).map(|m| m.len() == bytes).unwrap_or(false) {
        return;
    }
    let mut f = std::io::BufWriter::new(std::fs::File::create(path).expect("create capture"));
    let mut buf = Vec::with_capacity(1 << 20);
    let mut written = 0u64;
    let mut k = 0u32;
    while written < bytes {
        buf.clear();
        while buf.len() < (1 << 20) && written + (buf.len() as u64) < bytes {
            let ph = k as f32 * 0.001;
            buf.extend_from_slice(&ph.cos().to_le_bytes());
            buf.extend_from_slice(&ph.sin().to_le_bytes());
            k = k.wrapping_add(1);
        }
        f.write_all(&buf).expect("write capture");
        written += buf.len() as u64;
    }
    f.flush().expect("flush");
}
