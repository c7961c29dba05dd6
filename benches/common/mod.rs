//! What the benchmarks share: the plain-read baseline, the peak resident
//! set and the reference graph without its pictures or with SVG ones
//! only. Not every bench uses every helper.
#![allow(dead_code)]

use std::io::Read;
use std::path::Path;

/// The baseline: read the file sequentially in 1 MiB blocks and touch the bytes.
pub fn plain_read(path: &Path) -> u64 {
    let mut f = std::fs::File::open(path).expect("open");
    let mut buf = vec![0u8; 1 << 20];
    let mut acc = 0u64;
    loop {
        let n = f.read(&mut buf).expect("read");
        if n == 0 {
            break;
        }
        acc = acc.wrapping_add(buf[..n].iter().step_by(4096).map(|&b| b as u64).sum::<u64>());
    }
    std::hint::black_box(acc)
}

/// Linux: writing 5 to clear_refs resets the peak resident set (VmHWM).
pub fn reset_peak_rss() {
    let _ = std::fs::write("/proc/self/clear_refs", "5");
}

/// Peak resident set since the last reset, KiB.
pub fn peak_rss_kib() -> u64 {
    std::fs::read_to_string("/proc/self/status")
        .unwrap_or_default()
        .lines()
        .find(|l| l.starts_with("VmHWM:"))
        .and_then(|l| l.split_whitespace().nth(1))
        .and_then(|v| v.parse().ok())
        .unwrap_or(0)
}

/// The picture blocks of the reference graph (`thin` feeds only them).
const PICTURE_BLOCKS: [&str; 6] = ["angle_plot", "curve", "circle", "split", "trace", "timeline"];

/// The reference graph without its picture blocks and their wires, its
/// relative paths made absolute so the copy runs from another folder.
pub fn without_pictures(text: &str, repo: &Path) -> String {
    let dropped: Vec<&str> = PICTURE_BLOCKS.iter().copied().chain(["thin"]).collect();
    let kept = text.lines().filter(|l| {
        let t = l.trim_start();
        let picture_block = dropped.iter().any(|p| t.starts_with(&format!("{p}:")));
        let picture_wire = t.starts_with("- ")
            && dropped.iter().any(|p| t.ends_with(&format!("> {p}")) || t.contains(&format!("> {p}.")));
        !picture_block && !picture_wire
    });
    absolute_paths(kept, repo)
}

/// The reference graph with every picture written as SVG only
/// (`formats: svg`), its relative paths made absolute.
pub fn svg_pictures(text: &str, repo: &Path) -> String {
    let lines = text.lines().map(|l| {
        let t = l.trim_start();
        if PICTURE_BLOCKS.iter().any(|p| t.starts_with(&format!("{p}:"))) {
            l.replacen("set: {", "set: {formats: svg, ", 1)
        } else {
            l.to_string()
        }
    });
    absolute_paths(lines.collect::<Vec<_>>().iter().map(String::as_str), repo)
}

fn absolute_paths<'a>(lines: impl Iterator<Item = &'a str>, repo: &Path) -> String {
    lines
        .map(|l| {
            l.replace("../samples/", &format!("{}/samples/", repo.display()))
                .replace("parts/", &format!("{}/graphs/parts/", repo.display()))
        })
        .collect::<Vec<_>>()
        .join("\n")
}
