//! A bus error (SIGBUS) told in words instead of a bare crash.
//!
//! Capture files are read through a memory mapping
//! (`blocks/src/capture/mapped.rs`), and every chunk is populated before
//! it is read, so a file cut short is normally reported as a truncated
//! capture. A file truncated in the microseconds between that check and the
//! read still raises SIGBUS. The handler cannot unwind to the run's own
//! error path, so it says what most likely happened and ends the process
//! with the input-error status, 2. No output is committed: the run's
//! staging folder is left locked by nobody, and the next run in that output
//! folder removes it (`runtime::staging`).

/// What the process says before it ends on a bus error.
const MESSAGE: &[u8] = b"error: stopped by a bus error (SIGBUS): most likely a capture file was truncated or replaced \
while it was being read; this run's outputs were not written\n";

#[cfg(unix)]
extern "C" fn on_bus_error(_: libc::c_int) {
    // SAFETY: write(2) and _exit(2) are async-signal-safe; MESSAGE is static.
    #[allow(unsafe_code)]
    unsafe {
        libc::write(2, MESSAGE.as_ptr().cast(), MESSAGE.len());
        libc::_exit(2);
    }
}

/// Install the handler for the whole process (the command-line tool only:
/// an embedding program keeps its own signal handling).
#[cfg(unix)]
#[allow(unsafe_code)] // sigaction
pub fn install() {
    // SAFETY: a zeroed sigaction is valid; the handler above only makes
    // async-signal-safe calls.
    unsafe {
        let mut action: libc::sigaction = std::mem::zeroed();
        action.sa_sigaction = on_bus_error as extern "C" fn(libc::c_int) as libc::sighandler_t;
        libc::sigemptyset(&mut action.sa_mask);
        libc::sigaction(libc::SIGBUS, &action, std::ptr::null_mut());
    }
}

/// Nothing maps files elsewhere.
#[cfg(not(unix))]
pub fn install() {}
