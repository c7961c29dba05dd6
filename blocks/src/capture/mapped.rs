//! Regular capture files read through a memory mapping of the page cache,
//! which saves the kernel's copy of every byte into a read buffer (about a
//! fifth of a plain read's CPU, issue 16): aligned little-endian float32
//! frames are lent to the capture source, which splits them where they lie.
//! Copies (plain I/Q chunks, chunks larger than one read) are still read,
//! and so are other encodings, standard input, FIFOs and pushed inputs.
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
//! process. The command-line tool's handler (`src/commands/bus_error.rs`)
//! then says so and exits with status 2; an embedding program has its own.

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
    /// resident set while mapped. Unmapping interrupts every other core the
    /// process's threads ran on, to drop the window from its address cache
    /// (an expensive exit on a virtual machine): with 512 KiB windows that
    /// was 7 % of a two-worker run on 1 GiB, and wall time 10 % longer than
    /// with these 8 MiB ones, which keep 6 MiB more resident (issue 16).
    const WINDOW_BYTES: usize = 8 << 20;
    /// Windows start, and populated ranges are rounded down, to multiples of
    /// this: a multiple of every usual page size (mmap offsets and madvise
    /// addresses must be page-aligned; a larger page makes mmap fail, and
    /// the file is read instead).
    const ALIGN: u64 = 64 << 10;

    /// Frames of aligned little-endian float32: windows start at aligned
    /// offsets and frames of floats are whole floats, so the data's start
    /// decides the floats' alignment.
    fn lendable(info: &CaptureInfo) -> bool {
        is_native_f32(&info.encoding) && info.data_offset.is_multiple_of(4)
    }

    /// Whether `file` can be mapped and its frames lent: a regular file with
    /// data of aligned little-endian float32, and a kernel that knows
    /// `MADV_POPULATE_READ`.
    pub(super) fn can_map(info: &CaptureInfo, file: &File) -> bool {
        let regular = file.metadata().is_ok_and(|m| m.is_file());
        let data = info.data_bytes.is_some_and(|n| n > 0);
        // An empty range checks that the advice is known (EINVAL otherwise)
        // without touching a page.
        regular && data && lendable(info) && Window::map(file, 0, 1).is_ok_and(|w| w.populate(0..0).is_ok())
    }

    /// A capture's data read from windows mapped in turn.
    pub(super) struct MappedStream {
        /// Counts the bytes done, and reads where the mapping cannot serve.
        stream: FrameStream<FileAt>,
        window: Option<Window>,
        /// False for data that cannot be lent, and once mapping or
        /// populating failed: the rest is read.
        mapping: bool,
        /// The bytes of `window` the last lend handed out.
        lent: Range<usize>,
        /// Bytes a new window maps at least.
        window_bytes: usize,
    }

    impl MappedStream {
        /// A stream over the data of `file`; only data [`can_map`] accepts
        /// is mapped.
        pub(super) fn new(info: CaptureInfo, file: File) -> Self {
            let at = info.data_offset;
            // Other data is only read.
            let mapping = lendable(&info);
            let stream = FrameStream::new(info, FileAt { file, at });
            MappedStream { stream, window: None, mapping, lent: 0..0, window_bytes: WINDOW_BYTES }
        }

        /// [`Self::new`] mapping `window_bytes` at a time (tests cross
        /// windows on small files).
        #[cfg(test)]
        pub(super) fn with_windows(info: CaptureInfo, file: File, window_bytes: usize) -> Self {
            MappedStream { window_bytes, ..Self::new(info, file) }
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
                let len = usize::try_from(end - start).unwrap_or(usize::MAX).min(need.max(self.window_bytes));
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

        /// Copies are read (`pread`), not taken from the mapping: a copy or
        /// a decode out of mapped pages cost more than the kernel's copy
        /// (plain I/Q cf32 0.114 s against 0.101 s of CPU per 720 MB, 16-bit
        /// WAV 0.068 against 0.063 s per 270 MB).
        fn read_frames(&mut self, max_frames: usize, out: &mut Vec<f32>) -> Result<usize, BlockError> {
            self.stream.inner.at = self.stream.info().data_offset + self.stream.done_bytes;
            self.stream.read_frames(max_frames, out)
        }

        fn lend_frames(&mut self, max_frames: usize) -> Result<Option<usize>, BlockError> {
            if !self.mapping {
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
            // Cannot fail: the window starts page-aligned and `can_map`
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
            // changes these bytes (any bit pattern is a valid float), and
            // one that truncates it between `populate` and this read raises
            // SIGBUS (the race the module notes).
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

#[cfg(all(test, target_os = "linux"))]
mod tests {
    use super::linux::MappedStream;
    use crate::capture::reader::{CaptureInfo, CaptureReader, Format, FrameStream, OpenOptions, open};
    use crate::capture::roles::{NonFinite, RoleMap};
    use crate::capture::source::CaptureSource;
    use crate::{Item, TypedBlock};
    use num_complex::Complex32;
    use std::fs::File;
    use std::io::{BufReader, Seek, SeekFrom, Write};
    use std::path::{Path, PathBuf};

    fn scratch(name: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!("lobeflow-mapped-unit-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap_or_else(|e| panic!("{e}"));
        dir.join(name)
    }

    /// What a capture source made of a capture: chunks (first sample, I/Q,
    /// sync), the progress after each, the notices and the error, if any.
    #[derive(Debug, PartialEq)]
    struct Made {
        chunks: Vec<(u64, Vec<Complex32>, Option<Vec<f32>>)>,
        progress: Vec<Option<(u64, u64)>>,
        notices: Vec<String>,
        error: Option<(String, Option<u64>)>,
    }

    /// Run a source over `reader` in chunks of `chunk`; `between(k)` runs
    /// before the k-th step.
    fn make(reader: Box<dyn CaptureReader>, chunk: usize, mut between: impl FnMut(usize)) -> Made {
        let roles = RoleMap::new(&[], reader.info()).unwrap_or_else(|e| panic!("{e}"));
        let mut src = CaptureSource::new(reader, roles, chunk, NonFinite::Error);
        let mut out = crate::Outputs::new(1);
        let mut made = Made { chunks: Vec::new(), progress: Vec::new(), notices: Vec::new(), error: None };
        for k in 0.. {
            between(k);
            let more = src.generate(&mut out);
            made.notices.extend(out.drain_notices().map(|n| format!("{} {}", n.stamp.index, n.what)));
            for (_, item) in out.drain() {
                if let Item::Samples(c) = item {
                    made.chunks.push((c.stamp.index, c.iq.to_vec(), c.sync.as_ref().map(|s| s.to_vec())));
                }
            }
            made.progress.push(src.progress());
            match more {
                Ok(true) => {}
                Ok(false) => break,
                Err(e) => {
                    made.error = Some((e.message, e.at_sample));
                    break;
                }
            }
        }
        made
    }

    /// The present read path over the data of the capture `info` describes.
    fn read_path(info: &CaptureInfo) -> Box<dyn CaptureReader> {
        let mut file = File::open(&info.path).unwrap_or_else(|e| panic!("{e}"));
        file.seek(SeekFrom::Start(info.data_offset)).unwrap_or_else(|e| panic!("{e}"));
        Box::new(FrameStream::new(info.clone(), BufReader::new(file)))
    }

    /// The mapped path over `info`'s data, in windows of 512 KiB so the
    /// tests' files of a megabyte or so cross several.
    fn mapped(info: &CaptureInfo) -> Box<dyn CaptureReader> {
        let file = File::open(&info.path).unwrap_or_else(|e| panic!("{e}"));
        Box::new(MappedStream::with_windows(info.clone(), file, 512 << 10))
    }

    /// Whether this process maps (part of) `path` now.
    fn is_mapped_here(path: &str) -> bool {
        let maps = std::fs::read_to_string("/proc/self/maps").unwrap_or_default();
        let name = std::fs::canonicalize(path).unwrap_or_else(|e| panic!("{e}"));
        maps.lines().any(|l| l.ends_with(&*name.to_string_lossy()))
    }

    /// The mapped and the read path give the same chunks, progress, notices
    /// and errors for `path`, in chunks of each size; the reader `open`
    /// gives lends frames from a mapping, or not, as `lends` says.
    fn same_both_ways(path: &Path, opts: &OpenOptions, chunks: &[usize], lends: bool) -> Made {
        let p = path.to_string_lossy();
        let mut by_open = open(&p, opts).unwrap_or_else(|e| panic!("{e}"));
        let info = by_open.info().clone();
        let lent = by_open.lend_frames(1).unwrap_or_else(|e| panic!("{e}"));
        assert_eq!((lent, is_mapped_here(&info.path)), (lends.then_some(1), lends), "{p}");
        let mut first = None;
        for &chunk in chunks {
            let (m, r) = (make(mapped(&info), chunk, |_| {}), make(read_path(&info), chunk, |_| {}));
            assert_eq!(m, r, "{p} in chunks of {chunk}");
            assert!(m.error.is_none() && !m.chunks.is_empty(), "{p}: {:?}", m.error);
            assert!(m.chunks.iter().rev().skip(1).all(|c| c.1.len() == chunk), "{p}: whole chunks but the last");
            first.get_or_insert(m);
        }
        first.unwrap_or_else(|| panic!("no chunk sizes"))
    }

    fn write_wav(path: &Path, frames: usize, float: bool) {
        let spec = hound::WavSpec {
            channels: 3,
            sample_rate: 1000,
            bits_per_sample: if float { 32 } else { 16 },
            sample_format: if float { hound::SampleFormat::Float } else { hound::SampleFormat::Int },
        };
        let mut w = hound::WavWriter::create(path, spec).unwrap_or_else(|e| panic!("{e}"));
        for k in 0..frames {
            for (c, v) in wav_frame(k).into_iter().enumerate() {
                let r = if float { w.write_sample(v) } else { w.write_sample(int_code(k, c)) };
                r.unwrap_or_else(|e| panic!("{e}"));
            }
        }
        w.finalize().unwrap_or_else(|e| panic!("{e}"));
    }

    /// Component `c` of frame `k` of the 16-bit WAV captures.
    fn int_code(k: usize, c: usize) -> i16 {
        (((k * 3 + c) % 60000) as i32 - 30000) as i16
    }

    /// Frame `k` of the float WAV captures: I, Q, sync.
    fn wav_frame(k: usize) -> [f32; 3] {
        [k as f32 * 0.5, -(k as f32), (k % 7) as f32]
    }

    #[test]
    fn float_wav_is_lent_from_the_mapping_as_read() {
        let path = scratch("f32.wav");
        write_wav(&path, 100_003, true);
        // 16384 frames take 196608 bytes: windows hold two chunks and a
        // part; 100000 frames need a window larger than the usual one.
        let made = same_both_ways(&path, &OpenOptions::default(), &[16384, 100_000, 7, 1], true);
        let iq: Vec<Complex32> = made.chunks.iter().flat_map(|c| c.1.clone()).collect();
        let sync: Vec<f32> = made.chunks.iter().flat_map(|c| c.2.clone().unwrap_or_default()).collect();
        assert_eq!(iq.len(), 100_003);
        for k in [0, 1, 16383, 16384, 50_000, 100_002] {
            let [i, q, s] = wav_frame(k);
            assert_eq!((iq[k], sync[k]), (Complex32::new(i, q), s), "frame {k}");
        }
        assert_eq!(made.progress.last(), Some(&Some((1_200_036, 1_200_036))));
        let mut reader = open(&path.to_string_lossy(), &OpenOptions::default()).unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(reader.lend_frames(10).ok(), Some(Some(10)), "lent, not copied");
        assert_eq!(reader.lent()[3..6], wav_frame(1));
    }

    #[test]
    fn int16_wav_is_read_as_before() {
        let path = scratch("i16.wav");
        write_wav(&path, 70_001, false);
        let made = same_both_ways(&path, &OpenOptions::default(), &[16384, 5000], false);
        let code = |k: usize, c: usize| f32::from(int_code(k, c)) / 32768.0;
        let last = made.chunks.last().map(|c| (c.0 as usize + c.1.len() - 1, c.1[c.1.len() - 1]));
        assert_eq!(last, Some((70_000, Complex32::new(code(70_000, 0), code(70_000, 1)))));
    }

    /// Plain I/Q chunks are copies, which are read even from a mapped stream.
    #[test]
    fn cf32_raw_file_reads_as_before() {
        let path = scratch("iq.cf32_le");
        let values: Vec<f32> = (0..2 * 150_001).map(|k| k as f32 - 0.25).collect();
        std::fs::write(&path, bytemuck::cast_slice::<f32, u8>(&values)).unwrap_or_else(|e| panic!("{e}"));
        let opts = OpenOptions { format: Format::Raw, rate: Some(1e3), ..OpenOptions::default() };
        let made = same_both_ways(&path, &opts, &[16384, 65536, 3], true);
        let iq: Vec<Complex32> = made.chunks.iter().flat_map(|c| c.1.clone()).collect();
        assert_eq!(iq.len(), 150_001);
        assert_eq!(iq[150_000], Complex32::new(299_999.75, 300_000.75));
    }

    #[test]
    fn sigmf_recording_reads_the_same_with_segments_and_header_bytes() {
        // Header bytes of 6 put the floats off their alignment: read, not lent.
        for header in [0usize, 6] {
            let base = scratch(&format!("rec{header}"));
            let meta = format!(
                r#"{{"global": {{"core:datatype": "cf32_le", "core:version": "1.2.0", "core:sample_rate": 1000, "core:num_channels": 2}},
                "captures": [{{"core:sample_start": 0, "core:header_bytes": {header}}}, {{"core:sample_start": 40000, "core:frequency": 1e6}}],
                "annotations": []}}"#
            );
            std::fs::write(base.with_extension("sigmf-meta"), meta).unwrap_or_else(|e| panic!("{e}"));
            let mut data = vec![7u8; header];
            let frames: Vec<f32> = (0..4 * 70_001).map(|k| (k % 1000) as f32).collect();
            data.extend_from_slice(bytemuck::cast_slice(&frames));
            std::fs::write(base.with_extension("sigmf-data"), data).unwrap_or_else(|e| panic!("{e}"));
            let meta = base.with_extension("sigmf-meta");
            let made = same_both_ways(&meta, &OpenOptions::default(), &[16384, 999], header == 0);
            assert!(
                made.notices.iter().any(|n| n.starts_with("40000 ") && n.contains("segment 2")),
                "{:?}",
                made.notices
            );
            let c = &made.chunks[1];
            assert_eq!((c.0, c.1[0], c.2.as_ref().map(|s| s[0])), (16384, Complex32::new(536.0, 537.0), Some(538.0)));
        }
    }

    #[test]
    fn a_file_cut_short_after_opening_gives_the_read_paths_error() {
        // Cut inside a later chunk, and before the part already read.
        for (cut_frames, cut_extra) in [(50_000u64, 5u64), (10_000, 0)] {
            let mut made = Vec::new();
            for how in ["mapped", "read"] {
                let path = scratch(&format!("cut-{cut_frames}-{how}.wav"));
                write_wav(&path, 100_000, true);
                let p = path.to_string_lossy().to_string();
                let reader = open(&p, &OpenOptions::default()).unwrap_or_else(|e| panic!("{e}"));
                let info = reader.info().clone();
                let reader = if how == "mapped" { reader } else { read_path(&info) };
                let cut = info.data_offset + 12 * cut_frames + cut_extra;
                let m = make(reader, 16384, |k| {
                    if k == 2 {
                        let f = std::fs::OpenOptions::new().write(true).open(&path);
                        f.and_then(|f| f.set_len(cut)).unwrap_or_else(|e| panic!("{e}"));
                    }
                });
                let (message, at) = m.error.clone().unwrap_or_else(|| panic!("{how}: no error"));
                let end = info.data_offset + 1_200_000;
                let read_to = cut.max(info.data_offset + 2 * 16384 * 12);
                let want =
                    format!("truncated: the data should run to byte offset {end} but ends at byte offset {read_to}");
                assert!(message.contains(&p) && message.contains(&want), "{how}: {message}");
                assert_eq!(at, Some((read_to - info.data_offset) / 12), "{how}");
                made.push((m.chunks, m.error.map(|(e, at)| (e.replace(&p, "PATH"), at))));
            }
            assert_eq!(made[0], made[1], "cut at frame {cut_frames}");
        }
    }

    #[test]
    fn a_fifo_keeps_the_read_path() {
        let path = scratch("pipe.wav");
        let _ = std::fs::remove_file(&path);
        let made = std::process::Command::new("mkfifo").arg(&path).status();
        if !made.is_ok_and(|s| s.success()) {
            return; // no mkfifo here: nothing to check
        }
        let writer = std::thread::spawn({
            let (src, path) = (scratch("for-pipe.wav"), path.clone());
            move || {
                write_wav(&src, 1000, true);
                let bytes = std::fs::read(&src).unwrap_or_else(|e| panic!("{e}"));
                File::create(&path).and_then(|mut f| f.write_all(&bytes)).unwrap_or_else(|e| panic!("{e}"));
            }
        });
        let mut reader = open(&path.to_string_lossy(), &OpenOptions::default()).unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(reader.lend_frames(10).ok(), Some(None), "a FIFO is not mapped");
        let made = make(reader, 300, |_| {});
        assert_eq!(made.chunks.iter().map(|c| c.1.len()).sum::<usize>(), 1000);
        writer.join().unwrap_or_else(|_| panic!("writer"));
    }
}
