//! Live inputs: standard input, a FIFO, or samples an application pushes
//! from memory. Bytes arrive on a channel (a reader thread drains the pipe,
//! so a run can stop while the pipe is idle); the source takes whatever whole
//! frames have arrived instead of waiting for a full chunk, so results follow
//! the input closely.
//!
//! Lag: a pipe's reader thread marks each moment it finds the pipe empty
//! before a read (the system's count of waiting bytes is 0); pushed samples count a wait for
//! the application instead. At such a moment everything delivered was in
//! hand, and from then on, a real-time input has delivered as many capture
//! seconds as wall-clock seconds passed; the samples taken since fall short of
//! that by the lag.

use super::raw::raw_info;
use super::reader::{CaptureInfo, CaptureReader, OpenOptions};
use crate::BlockError;
use crossbeam_channel::{Receiver, RecvTimeoutError, Sender, TryRecvError, bounded};
use num_complex::Complex32;
use std::io::Read;
use std::sync::atomic::{AtomicU8, AtomicU64, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

/// One delivery of input.
pub enum Feed {
    /// Raw bytes in the input's datatype (any length; frames may be split).
    Bytes(Vec<u8>),
    /// Decoded components, channel-interleaved, whole frames.
    Frames(Vec<f32>),
    /// The input broke; the message says how.
    Failed(String),
    /// The pipe held nothing more at this moment: everything the producer
    /// had written by then came before this mark.
    Drained(Instant),
}

/// Deliveries waiting between the pipe's reader thread and the source (at
/// most 64 KiB each): enough to ride out a slow step, small enough to say
/// memory is bounded.
const QUEUED_FEEDS: usize = 16;
/// Pushed samples: a wait for them at least this long means the reader had
/// caught up with the application.
const CAUGHT_UP_WAIT: Duration = Duration::from_millis(10);
/// Bytes one pipe read takes.
const PIPE_READ: usize = 1 << 16;

/// How a live input is doing, shared by its source and the run.
#[derive(Default)]
pub struct LiveMonitor {
    /// Frames taken from the input so far.
    pub frames: AtomicU64,
    rate_bits: AtomicU64,
    lag_us: AtomicU64,
    max_lag_us: AtomicU64,
    ending: AtomicU8,
    end_sample: AtomicU64,
}

/// How a live input ended.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum LiveEnd {
    /// The pipe closed or the application closed its feeder.
    Closed,
    /// The run was asked to stop (a signal, or the embedding application).
    Stopped,
}

impl LiveMonitor {
    /// The sample rate of the input (0 before it was opened).
    pub fn rate(&self) -> f64 {
        f64::from_bits(self.rate_bits.load(Ordering::Relaxed))
    }
    /// Capture seconds processing is behind a real-time input now.
    pub fn lag_s(&self) -> f64 {
        self.lag_us.load(Ordering::Relaxed) as f64 * 1e-6
    }
    /// The largest lag seen.
    pub fn max_lag_s(&self) -> f64 {
        self.max_lag_us.load(Ordering::Relaxed) as f64 * 1e-6
    }
    /// How the input ended and the sample it ended at, once it has.
    pub fn ended(&self) -> Option<(LiveEnd, u64)> {
        let at = self.end_sample.load(Ordering::SeqCst);
        match self.ending.load(Ordering::SeqCst) {
            1 => Some((LiveEnd::Closed, at)),
            2 => Some((LiveEnd::Stopped, at)),
            _ => None,
        }
    }
    pub(crate) fn end(&self, how: LiveEnd, at_sample: u64) {
        self.end_sample.store(at_sample, Ordering::SeqCst);
        self.ending.store(if how == LiveEnd::Closed { 1 } else { 2 }, Ordering::SeqCst);
    }
    fn set_lag(&self, lag: Duration) {
        let us = lag.as_micros().min(u64::MAX as u128) as u64;
        self.lag_us.store(us, Ordering::Relaxed);
        self.max_lag_us.fetch_max(us, Ordering::Relaxed);
    }
}

/// A capture reader over a channel of deliveries.
pub struct LiveReader {
    info: CaptureInfo,
    rx: Receiver<Feed>,
    /// Bytes of a frame not yet complete.
    partial: Vec<u8>,
    /// Decoded components not yet handed out, from `taken` on.
    ready: Vec<f32>,
    taken: usize,
    done_bytes: u64,
    done_frames: u64,
    closed: bool,
    /// The last moment the input was known to be all in hand, and the
    /// frames it had delivered by then.
    caught_up: Option<(Instant, u64)>,
    /// The input marks when its pipe ran empty ([`Feed::Drained`]); without
    /// marks (pushed samples), a wait for input is taken as being caught up.
    marked: bool,
    monitor: Arc<LiveMonitor>,
}

impl LiveReader {
    pub fn new(info: CaptureInfo, rx: Receiver<Feed>) -> LiveReader {
        LiveReader {
            info,
            rx,
            partial: Vec::new(),
            ready: Vec::new(),
            taken: 0,
            done_bytes: 0,
            done_frames: 0,
            closed: false,
            caught_up: None,
            marked: false,
            monitor: Arc::new(LiveMonitor::default()),
        }
    }

    /// Report progress and lag to `monitor` (the run's) from now on.
    pub fn watch(&mut self, monitor: Arc<LiveMonitor>) {
        monitor.rate_bits.store(self.info.rate.to_bits(), Ordering::Relaxed);
        self.monitor = monitor;
    }

    pub fn monitor(&self) -> &Arc<LiveMonitor> {
        &self.monitor
    }

    fn components_ready(&self) -> usize {
        self.ready.len() - self.taken
    }

    /// Frames delivered so far, handed out or not.
    fn frames_received(&self) -> u64 {
        self.done_frames + (self.components_ready() / self.info.components_per_frame().max(1)) as u64
    }

    /// Take in one delivery.
    fn accept(&mut self, feed: Feed) -> Result<(), BlockError> {
        if self.caught_up.is_none() {
            // The input's start: from here a real-time input delivers a
            // capture second per second.
            self.caught_up = Some((Instant::now(), 0));
        }
        match feed {
            Feed::Drained(at) => {
                self.marked = true;
                self.caught_up = Some((at, self.frames_received()));
                Ok(())
            }
            Feed::Bytes(bytes) => {
                self.done_bytes += bytes.len() as u64;
                self.partial.extend_from_slice(&bytes);
                let frame = self.info.frame_bytes().max(1);
                let whole = self.partial.len() / frame * frame;
                self.info.encoding.decode(&self.partial[..whole], &mut self.ready);
                self.partial.drain(..whole);
                Ok(())
            }
            Feed::Frames(components) => {
                if !self.partial.is_empty() {
                    return Err(BlockError::at(
                        format!("{}: decoded frames pushed after a partial frame of bytes", self.info.path),
                        self.done_frames,
                    ));
                }
                self.ready.extend_from_slice(&components);
                Ok(())
            }
            Feed::Failed(message) => Err(BlockError::at(
                format!("{}: reading the input failed after {} bytes: {message}", self.info.path, self.done_bytes),
                self.done_frames,
            )),
        }
    }

    /// Hand out up to `max` whole frames of what has arrived.
    fn hand_out(&mut self, max: usize, out: &mut Vec<f32>) -> usize {
        let per_frame = self.info.components_per_frame().max(1);
        let frames = (self.components_ready() / per_frame).min(max);
        out.clear();
        out.extend_from_slice(&self.ready[self.taken..self.taken + frames * per_frame]);
        self.taken += frames * per_frame;
        if self.taken * 2 >= self.ready.len() {
            self.ready.drain(..self.taken);
            self.taken = 0;
        }
        self.done_frames += frames as u64;
        self.monitor.frames.store(self.done_frames, Ordering::Relaxed);
        if let Some((since, frames_then)) = self.caught_up {
            // Input delivered since then at the real-time pace, less what
            // was taken since (negative while a backlog from before remains).
            let arrived = since.elapsed().as_secs_f64();
            let taken = (self.done_frames as f64 - frames_then as f64) / self.info.rate;
            self.monitor.set_lag(Duration::from_secs_f64((arrived - taken).max(0.0)));
        }
        frames
    }

    /// Frames that have arrived, waiting at most `wait` for the first:
    /// `Some(n)` with n > 0, `Some(0)` at the end of the input, `None` when
    /// nothing came in time.
    pub fn read_available(
        &mut self,
        max_frames: usize,
        out: &mut Vec<f32>,
        wait: Duration,
    ) -> Result<Option<usize>, BlockError> {
        let per_frame = self.info.components_per_frame().max(1);
        let want = max_frames.max(1) * per_frame;
        // Gather what is already queued, up to a chunk.
        while self.components_ready() < want && !self.closed {
            match self.rx.try_recv() {
                Ok(feed) => self.accept(feed)?,
                Err(TryRecvError::Disconnected) => self.closed = true,
                Err(TryRecvError::Empty) => {
                    if self.components_ready() >= per_frame {
                        break;
                    }
                    let asked = Instant::now();
                    match self.rx.recv_timeout(wait) {
                        Ok(feed) => {
                            // Pushed samples carry no marks: a wait this long
                            // was for the application, so it was caught up.
                            if !self.marked && asked.elapsed() >= CAUGHT_UP_WAIT {
                                self.caught_up = Some((Instant::now(), self.frames_received()));
                            }
                            self.accept(feed)?
                        }
                        Err(RecvTimeoutError::Disconnected) => self.closed = true,
                        Err(RecvTimeoutError::Timeout) => {
                            if !self.marked {
                                self.caught_up = Some((Instant::now(), self.frames_received()));
                            }
                            self.monitor.set_lag(Duration::ZERO);
                            return Ok(None);
                        }
                    }
                }
            }
        }
        Ok(Some(self.hand_out(max_frames, out)))
    }

    /// Bytes of an incomplete last frame, once the input has ended.
    pub fn trailing_bytes(&self) -> usize {
        self.partial.len()
    }
}

impl CaptureReader for LiveReader {
    fn info(&self) -> &CaptureInfo {
        &self.info
    }

    /// Blocks until frames arrive or the input ends. Readers of whole
    /// captures (`inspect`) are strict: an input ending inside a frame is an
    /// error here, while a live run only warns (see `trailing_bytes`).
    fn read_frames(&mut self, max_frames: usize, out: &mut Vec<f32>) -> Result<usize, BlockError> {
        loop {
            match self.read_available(max_frames, out, Duration::from_secs(1))? {
                Some(0) if !self.partial.is_empty() => {
                    let frame = self.info.frame_bytes();
                    return Err(BlockError::at(
                        format!(
                            "{}: the data ends inside a frame: {} byte(s) left over at byte offset {} (a frame is {frame} bytes)",
                            self.info.path,
                            self.partial.len(),
                            self.done_bytes - self.partial.len() as u64
                        ),
                        self.done_frames,
                    ));
                }
                Some(0) if self.done_bytes == 0 && max_frames > 0 => {
                    return Err(BlockError::at(
                        format!(
                            "{}: the capture holds no samples: the stream ended before its first sample",
                            self.info.path
                        ),
                        0,
                    ));
                }
                Some(n) => return Ok(n),
                None => {}
            }
        }
    }

    fn bytes_read(&self) -> u64 {
        self.done_bytes
    }

    fn as_live(&mut self) -> Option<&mut LiveReader> {
        Some(self)
    }
}

/// A pipe read on a thread of its own, so the run never waits on it.
/// `open` runs on that thread too (opening a FIFO waits for its writer).
pub fn read_on_thread<R, F>(open: F) -> Receiver<Feed>
where
    R: Read + PipeLevel,
    F: FnOnce() -> std::io::Result<R> + Send + 'static,
{
    let (tx, rx) = bounded(QUEUED_FEEDS);
    let spawned = std::thread::Builder::new().name("lobeflow-input".into()).spawn(move || pump(open, &tx));
    if let Err(e) = spawned {
        let (tx, rx) = bounded(1);
        let _ = tx.send(Feed::Failed(format!("cannot start the input thread: {e}")));
        return rx;
    }
    rx
}

/// Bytes waiting in a pipe, where the system can tell.
pub trait PipeLevel {
    fn waiting_bytes(&self) -> Option<usize>;
}

#[cfg(unix)]
impl<T: std::os::fd::AsRawFd> PipeLevel for T {
    #[allow(unsafe_code)] // no safe std call asks a pipe how full it is
    fn waiting_bytes(&self) -> Option<usize> {
        let mut n: libc::c_int = 0;
        // SAFETY: FIONREAD writes one int through the pointer we pass.
        let ok = unsafe { libc::ioctl(self.as_raw_fd(), libc::FIONREAD, &mut n) } == 0;
        ok.then_some(n.max(0) as usize)
    }
}

#[cfg(not(unix))]
impl<T> PipeLevel for T {
    fn waiting_bytes(&self) -> Option<usize> {
        None
    }
}

fn pump<R: Read + PipeLevel, F: FnOnce() -> std::io::Result<R>>(open: F, tx: &Sender<Feed>) {
    let mut input = match open() {
        Ok(r) => r,
        Err(e) => {
            let _ = tx.send(Feed::Failed(format!("cannot open: {e}")));
            return;
        }
    };
    let mut buf = vec![0u8; PIPE_READ];
    loop {
        // Checked before the read: right after one, a writer that was blocked
        // on the full pipe may not have refilled it yet. Here the thread has
        // just handed its last bytes on (waiting while the run was behind),
        // so an empty pipe means the producer had nothing more.
        if input.waiting_bytes() == Some(0) && tx.send(Feed::Drained(Instant::now())).is_err() {
            return;
        }
        match input.read(&mut buf) {
            Ok(0) => return,
            Ok(n) => {
                if tx.send(Feed::Bytes(buf[..n].to_vec())).is_err() {
                    return; // the run ended
                }
            }
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => {
                let _ = tx.send(Feed::Failed(e.to_string()));
                return;
            }
        }
    }
}

/// Standard input or a FIFO, read as raw data (`opts` gives the datatype,
/// rate and channels).
pub fn open_pipe(path: &str, opts: &OpenOptions) -> Result<LiveReader, super::CaptureError> {
    let info = raw_info(path, opts, None)?;
    let rx = if path == "-" {
        read_on_thread(|| Ok(std::io::stdin()))
    } else {
        let p = path.to_string();
        read_on_thread(move || std::fs::File::open(&p))
    };
    Ok(LiveReader::new(info, rx))
}

/// What pushed samples look like.
#[derive(Clone, Debug)]
pub struct PushFormat {
    /// Samples per second.
    pub rate: f64,
    /// SigMF datatype of the bytes given to [`SampleFeeder::push_bytes`]
    /// (frames pushed as floats ignore it, but its complex/real part counts).
    pub datatype: String,
    /// Channels per frame.
    pub channels: usize,
}

impl PushFormat {
    /// One channel of complex float samples at `rate`.
    pub fn iq(rate: f64) -> PushFormat {
        PushFormat { rate, datatype: "cf32_le".into(), channels: 1 }
    }
}

/// Samples an application pushes into a graph's capture reader.
#[derive(Clone)]
pub struct PushedInput {
    /// The capture reader block fed (its path is not read).
    pub block: String,
    pub format: PushFormat,
    rx: Arc<Mutex<Option<Receiver<Feed>>>>,
}

impl PushedInput {
    /// A reader over the pushed samples; only one run can take them.
    pub fn open(&self) -> Result<LiveReader, BlockError> {
        let rx = self.rx.lock().unwrap_or_else(|e| e.into_inner()).take().ok_or_else(|| {
            BlockError::new(format!("the samples pushed into '{}' were already used by another run", self.block))
        })?;
        let opts = OpenOptions {
            format: super::Format::Raw,
            datatype: Some(self.format.datatype.clone()),
            rate: Some(self.format.rate),
            channels: Some(self.format.channels),
        };
        let info = raw_info(&format!("samples pushed into '{}'", self.block), &opts, None)?;
        Ok(LiveReader::new(info, rx))
    }
}

/// The application's end of a pushed input. Dropping it (or `close`) ends
/// the input; the graph then finishes and writes its outputs.
pub struct SampleFeeder {
    tx: Sender<Feed>,
    components_per_frame: usize,
    complex: bool,
}

/// Pushes a run can hold before `push` waits for it.
const QUEUED_PUSHES: usize = 64;

/// A pushed input for capture reader `block`, and the feeder that fills it.
pub fn pushed_input(block: &str, format: PushFormat) -> Result<(PushedInput, SampleFeeder), String> {
    let datatype = super::DataType::parse(&format.datatype)?;
    if !(format.rate.is_finite() && format.rate > 0.0) {
        return Err(format!("pushed samples need a positive rate, not {}", format.rate));
    }
    let channels = format.channels.max(1);
    let (tx, rx) = bounded(QUEUED_PUSHES);
    let feeder = SampleFeeder {
        tx,
        components_per_frame: channels * if datatype.complex { 2 } else { 1 },
        complex: datatype.complex,
    };
    let input = PushedInput { block: block.to_string(), format, rx: Arc::new(Mutex::new(Some(rx))) };
    Ok((input, feeder))
}

impl SampleFeeder {
    fn send(&self, feed: Feed) -> Result<(), String> {
        self.tx.send(feed).map_err(|_| "the run has ended; samples can no longer be pushed".to_string())
    }

    /// Push bytes in the declared datatype (frames may be split across pushes).
    pub fn push_bytes(&self, bytes: Vec<u8>) -> Result<(), String> {
        self.send(Feed::Bytes(bytes))
    }

    /// Push whole frames of decoded components, channel-interleaved.
    pub fn push_frames(&self, components: Vec<f32>) -> Result<(), String> {
        if !components.len().is_multiple_of(self.components_per_frame) {
            return Err(format!(
                "{} values are not whole frames of {} component(s)",
                components.len(),
                self.components_per_frame
            ));
        }
        self.send(Feed::Frames(components))
    }

    /// Push complex samples of a one-channel complex input.
    pub fn push_iq(&self, samples: &[Complex32]) -> Result<(), String> {
        if !self.complex || self.components_per_frame != 2 {
            return Err("push_iq needs one channel of complex samples".into());
        }
        self.send(Feed::Frames(samples.iter().flat_map(|s| [s.re, s.im]).collect()))
    }

    /// End the input (as dropping the feeder does).
    pub fn close(self) {}
}
