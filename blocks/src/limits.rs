//! Limits no parameter or input can push past: the highest sample rate and
//! pulse repetition frequency (through which counts of samples, pulses and
//! bins are bounded), and the memory ceiling of a run.

/// The highest sample rate lobeflow accepts, S/s (capture files and
/// parameters alike): counts of samples are bounded through it.
pub const MAX_SAMPLE_RATE: f64 = 1e11;

/// The highest pulse repetition frequency a count of pulses is bounded by, Hz.
pub const MAX_PRF: f64 = 1e8;

/// The most memory a run may need, whatever its parameters: a block whose
/// parameters would make it buffer more is refused with the figure. Normal
/// runs need a few tens of MiB, so this leaves room for queues and pictures.
pub const MEMORY_CEILING: u64 = 256 << 20;

/// Most memory one block's buffers may take: a quarter of the ceiling, so
/// several such blocks and the queues between them still fit.
pub const BLOCK_MEMORY: u64 = MEMORY_CEILING / 4;

/// Refuse a buffer of `bytes` for `what` when it passes [`BLOCK_MEMORY`],
/// saying how much it would need.
pub fn check_memory(what: &str, bytes: f64) -> Result<(), String> {
    if bytes.is_finite() && bytes <= BLOCK_MEMORY as f64 {
        return Ok(());
    }
    Err(format!(
        "{what} would need {} of memory, more than the {} one block may use (memory ceiling {})",
        bytes_text(bytes),
        bytes_text(BLOCK_MEMORY as f64),
        bytes_text(MEMORY_CEILING as f64)
    ))
}

/// `1.9 GB`, `64 MiB`: binary units for round powers of two, decimal otherwise.
pub fn bytes_text(bytes: f64) -> String {
    if !bytes.is_finite() {
        return "unbounded memory".into();
    }
    let mib = bytes / (1u64 << 20) as f64;
    if mib.fract() == 0.0 && mib >= 1.0 {
        return format!("{mib} MiB");
    }
    match bytes {
        b if b >= 1e12 => format!("{:.1} TB", b / 1e12),
        b if b >= 1e9 => format!("{:.1} GB", b / 1e9),
        b if b >= 1e6 => format!("{:.1} MB", b / 1e6),
        b => format!("{b:.0} bytes"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn memory_over_a_block_share_is_refused_with_the_figure() {
        assert!(check_memory("x", 1e6).is_ok());
        let e = check_memory("2.5 pulse intervals of 8-byte samples", 1.92e9).unwrap_err();
        assert!(e.contains("1.9 GB") && e.contains("64 MiB") && e.contains("256 MiB"), "{e}");
        assert!(check_memory("x", f64::NAN).is_err());
    }
}
