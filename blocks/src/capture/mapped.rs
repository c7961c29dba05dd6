//! Regular capture files read through a memory mapping of the page cache,
//! which saves the kernel's copy of every byte into a read buffer (about a
//! fifth of a plain read's CPU, issue 16). Little-endian float32 frames are
//! lent to the capture source as they lie in the mapping; other encodings
//! are decoded from it. Standard input, FIFOs and pushed inputs keep the
//! read path.
//!
//! A file cut short while mapped would raise SIGBUS when a page past its
//! new end is touched, so every range is populated first with
//! `MADV_POPULATE_READ` (Linux 5.14), which fails instead. On any failure
//! (mapping, populating; or the call is unknown to an older kernel) the
//! rest is read with `pread`, which reports a file cut short with the read
//! path's usual error (file, byte offset, sample).
//!
//! What remains: a file truncated *between* populating a range and reading
//! it (a few microseconds for one chunk) still raises SIGBUS and ends the
//! process. Guarding that too would take a process-wide signal handler.

use super::reader::{CaptureInfo, CaptureReader, FrameStream};
use std::fs::File;
use std::io::{BufReader, Read};

/// The reader for the data of a regular file: mapped where the system
/// allows it, read otherwise.
pub(crate) fn file_frames(info: CaptureInfo, input: BufReader<File>) -> Box<dyn CaptureReader> {
    #[cfg(target_os = "linux")]
    if linux::can_map(&info, input.get_ref()) {
        return Box::new(linux::MappedStream::new(info, input.into_inner()));
    }
    Box::new(FrameStream::new(info, input))
}

/// A file read at an explicit position (`pread`): the reads a mapping does
/// not serve, wherever the file's own offset is.
struct FileAt {
    file: File,
    at: u64,
}

impl Read for FileAt {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        #[cfg(unix)]
        let n = std::os::unix::fs::FileExt::read_at(&self.file, buf, self.at)?;
        #[cfg(not(unix))]
        let n = {
            use std::io::{Seek, SeekFrom};
            self.file.seek(SeekFrom::Start(self.at))?;
            self.file.read(buf)?
        };
        self.at += n as u64;
        Ok(n)
    }
}

#[cfg(target_os = "linux")]
mod linux {
    use super::FileAt;
    use crate::BlockError;
    use crate::capture::reader::{CaptureInfo, CaptureReader, FrameStream, is_native_f32};
    use std::fs::File;
    use std::io;
    use std::ops::Range;
    use std::os::fd::AsRawFd;
    use std::ptr::NonNull;

    /// Bytes mapped at once (more when one read needs more). A window is
    /// unmapped when the reading leaves it: its pages count toward the
    /// resident set while mapped.
    const WINDOW_BYTES: usize = 512 << 10;
    /// Windows start, and populated ranges are rounded down, to multiples of
    /// this: a multiple of every usual page size (mmap offsets and madvise
    /// addresses must be page-aligned; a larger page makes mmap fail, and
    /// the file is read instead).
    const ALIGN: u64 = 64 << 10;

    /// Whether `file` can be mapped and populated here: a regular file with
    /// data, and a kernel that knows `MADV_POPULATE_READ`.
    pub(super) fn can_map(info: &CaptureInfo, file: &File) -> bool {
        let regular = file.metadata().is_ok_and(|m| m.is_file());
        let data = info.data_bytes.is_some_and(|n| n > 0);
        // An empty range checks that the advice is known (EINVAL otherwise)
        // without touching a page.
        regular && data && Window::map(file, 0, 1).is_ok_and(|w| w.populate(0..0).is_ok())
    }

    /// A capture's data read from windows mapped in turn.
    pub(super) struct MappedStream {
        /// Counts the bytes done, and reads where the mapping cannot serve.
        stream: FrameStream<FileAt>,
        window: Option<Window>,
        /// False once mapping or populating failed: the rest is read.
        mapping: bool,
        /// The data's floats may be viewed in place (aligned native float32).
        lendable: bool,
        /// The bytes of `window` the last lend handed out.
        lent: Range<usize>,
    }

    impl MappedStream {
        pub(super) fn new(info: CaptureInfo, file: File) -> Self {
            // Windows start at aligned offsets, and frames of floats are
            // whole floats, so the data start decides the floats' alignment.
            let lendable = is_native_f32(&info.encoding) && info.data_offset.is_multiple_of(4);
            let at = info.data_offset;
            MappedStream { stream: FrameStream::new(info, FileAt { file, at }), window: None, mapping: true, lendable, lent: 0..0 }
        }

        /// The next `want` bytes of data (1 or more), mapped and populated:
        /// their range in the window. None when the mapping cannot serve
        /// them; the stream then reads them (a file cut short since it was
        /// opened gives the read path's error there).
        fn next_bytes(&mut self, want: usize) -> Option<Range<usize>> {
            if !self.mapping {
                return None;
            }
            let info = self.stream.info();
            let pos = info.data_offset + self.stream.done_bytes;
            let end = info.data_offset + info.data_bytes.unwrap_or(0);
            let fits = |w: &Window| w.start <= pos && pos + want as u64 <= w.start + w.len as u64;
            if !self.window.as_ref().is_some_and(fits) {
                // The old window goes first, so at most one is mapped.
                self.window = None;
                let start = pos - pos % ALIGN;
                let need = (pos - start) as usize + want;
                let len = usize::try_from(end - start).unwrap_or(usize::MAX).min(need.max(WINDOW_BYTES));
                match Window::map(&self.stream.inner.file, start, len) {
                    Ok(w) => self.window = Some(w),
                    Err(_) => return self.give_up(),
                }
            }
            let w = self.window.as_ref()?;
            let from = (pos - w.start) as usize;
            if w.populate(from..from + want).is_err() {
                return self.give_up();
            }
            Some(from..from + want)
        }

        /// Read the rest of the data instead of mapping it.
        fn give_up(&mut self) -> Option<Range<usize>> {
            self.mapping = false;
            self.window = None;
            self.stream.inner.at = self.stream.info().data_offset + self.stream.done_bytes;
            None
        }

        fn window_bytes(&self, range: Range<usize>) -> &[u8] {
            self.window.as_ref().map_or(&[], |w| w.bytes(range))
        }
    }

    impl CaptureReader for MappedStream {
        fn info(&self) -> &CaptureInfo {
            self.stream.info()
        }

        fn bytes_read(&self) -> u64 {
            self.stream.bytes_read()
        }

        fn read_frames(&mut self, max_frames: usize, out: &mut Vec<f32>) -> Result<usize, BlockError> {
            let want = self.stream.want_bytes(max_frames);
            if want == 0 {
                out.clear();
                return self.stream.advance(0, max_frames);
            }
            let Some(range) = self.next_bytes(want) else {
                return self.stream.read_frames(max_frames, out);
            };
            let encoding = self.stream.info().encoding;
            let bytes = self.window_bytes(range);
            if is_native_f32(&encoding) {
                // As the read path: a reused buffer of the right length is
                // overwritten as it is.
                out.resize(want / 4, 0.0);
                let dest = bytemuck::cast_slice_mut::<f32, u8>(&mut out[..]);
                dest.copy_from_slice(bytes);
            } else {
                out.clear();
                encoding.decode(bytes, out);
            }
            self.stream.advance(want, max_frames)
        }

        fn lend_frames(&mut self, max_frames: usize) -> Result<Option<usize>, BlockError> {
            if !(self.lendable && self.mapping) {
                return Ok(None);
            }
            let want = self.stream.want_bytes(max_frames);
            let info = self.stream.info();
            let left = info.data_bytes.unwrap_or(0) - self.stream.done_bytes;
            if want < max_frames.saturating_mul(info.frame_bytes()) && (want as u64) < left {
                // A chunk larger than one read: it is filled from several.
                return Ok(None);
            }
            self.lent = 0..0;
            if want > 0 {
                let Some(range) = self.next_bytes(want) else {
                    return Ok(None);
                };
                self.lent = range;
            }
            self.stream.advance(want, max_frames).map(Some)
        }

        fn lent(&self) -> &[f32] {
            // Cannot fail: the window starts page-aligned and `lendable`
            // checked the data's offset; an empty view if it ever did.
            bytemuck::try_cast_slice(self.window_bytes(self.lent.clone())).unwrap_or(&[])
        }
    }

    /// A read-only mapping of `len` bytes of a file from byte offset `start`.
    struct Window {
        ptr: NonNull<u8>,
        len: usize,
        start: u64,
    }

    // SAFETY: the mapping belongs to this value alone (views of it borrow
    // it), so the thread that owns it may read or unmap it, whichever it is.
    #[allow(unsafe_code)]
    unsafe impl Send for Window {}

    impl Window {
        #[allow(unsafe_code)]
        fn map(file: &File, start: u64, len: usize) -> io::Result<Window> {
            let offset = libc::off_t::try_from(start).map_err(|_| io::Error::from(io::ErrorKind::InvalidInput))?;
            // SAFETY: a new read-only mapping at an address the kernel
            // chooses; no memory the program uses changes.
            let ptr = unsafe {
                libc::mmap(std::ptr::null_mut(), len, libc::PROT_READ, libc::MAP_SHARED, file.as_raw_fd(), offset)
            };
            if ptr == libc::MAP_FAILED {
                return Err(io::Error::last_os_error());
            }
            let ptr = NonNull::new(ptr.cast::<u8>()).ok_or_else(|| io::Error::from(io::ErrorKind::InvalidData))?;
            Ok(Window { ptr, len, start })
        }

        /// Fault in the pages of `range` now: an error (EFAULT) rather than
        /// SIGBUS where the file no longer backs them (or cannot be read).
        #[allow(unsafe_code)]
        fn populate(&self, range: Range<usize>) -> io::Result<()> {
            assert!(range.start <= range.end && range.end <= self.len, "populate outside the window");
            let from = range.start - range.start % ALIGN as usize;
            // SAFETY: the range lies inside this mapping and starts at a
            // page boundary (the mapping's start plus a multiple of ALIGN);
            // populating only reads the file's pages into it.
            let r = unsafe {
                libc::madvise(self.ptr.as_ptr().add(from).cast(), range.end - from, libc::MADV_POPULATE_READ)
            };
            if r == 0 { Ok(()) } else { Err(io::Error::last_os_error()) }
        }

        /// The bytes of `range`, which [`Window::populate`] has made present.
        #[allow(unsafe_code)]
        fn bytes(&self, range: Range<usize>) -> &[u8] {
            assert!(range.start <= range.end && range.end <= self.len, "view outside the window");
            // SAFETY: the range lies inside the mapping, which lives as long
            // as `&self` and is read-only (PROT_READ). Not guaranteed, as for
            // any file mapping: another process that rewrites the file
            // changes these bytes (any bit pattern is a valid float or
            // integer code), and one that truncates it between `populate`
            // and this read raises SIGBUS (the race the module notes).
            unsafe { std::slice::from_raw_parts(self.ptr.as_ptr().add(range.start), range.len()) }
        }
    }

    impl Drop for Window {
        #[allow(unsafe_code)]
        fn drop(&mut self) {
            // SAFETY: the mapping is this value's own, and no view of it
            // outlives the borrow of `self` it was made from.
            unsafe {
                libc::munmap(self.ptr.as_ptr().cast(), self.len);
            }
        }
    }
}
