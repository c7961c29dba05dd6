//! What both benchmarks measure the same way: the plain-read baseline and
//! the peak resident set.

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
