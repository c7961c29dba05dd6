//! What the benchmarks share: the plain-read baseline, the peak resident
//! set and the reference graph without its pictures. Not every bench uses
//! every helper.
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

/// The reference graph without its picture blocks and their wires, its
/// relative paths made absolute so the copy runs from another folder.
pub fn without_pictures(text: &str, repo: &Path) -> String {
    // The picture blocks, and `thin`, which feeds only pictures.
    let pictures = ["angle_plot", "curve", "circle", "split", "trace", "timeline", "thin"];
    text.lines()
        .filter(|l| {
            let t = l.trim_start();
            let picture_block = pictures.iter().any(|p| t.starts_with(&format!("{p}:")));
            let picture_wire = t.starts_with("- ")
                && pictures.iter().any(|p| t.ends_with(&format!("> {p}")) || t.contains(&format!("> {p}.")));
            !picture_block && !picture_wire
        })
        .map(|l| {
            l.replace("../samples/", &format!("{}/samples/", repo.display()))
                .replace("parts/", &format!("{}/graphs/parts/", repo.display()))
        })
        .collect::<Vec<_>>()
        .join("\n")
}
