//! The running program behind an external block: started when the block is
//! built, fed by a writer thread through its standard input, read by a
//! reader thread from its standard output, its standard error kept for
//! notices and for the message when it fails.
//!
//! Every queue between the block and the program is bounded (a few frames
//! towards it, a few items back, and the pipes themselves), so a slow
//! program holds the block, the block holds the scheduler's queue, and the
//! capture is read no faster than the program keeps up: memory stays flat.
//! The items the program writes go out in the order it wrote them, whatever
//! the timing, so outputs do not depend on the thread count.

use super::Launch;
use super::framing::{MAX_FRAME_SAMPLES, build_item, encode, kind_name, parse_header, read_channel, read_samples};
use crossbeam_channel::{Receiver, RecvTimeoutError, Select, Sender, bounded};
use lobeflow_blocks::{
    BlockError, BlockSpec, BuildContext, BuildError, InstancePort, Item, ItemKind, Outputs, Stamp, TypedBlock, Value,
};
use serde_json::{Map, json};
use std::collections::VecDeque;
use std::io::{BufRead, BufReader, BufWriter, Read, Write};
use std::process::{Child, ChildStdout, Command, ExitStatus, Stdio};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::thread::JoinHandle;
use std::time::{Duration, Instant};

/// Lines of the program's standard error quoted when it fails.
pub const STDERR_TAIL: usize = 12;
/// Frames queued for the writer thread (each at most one input item).
const FRAMES_QUEUED: usize = 4;
/// Items the reader thread may hold decoded before the block takes them.
const ITEMS_QUEUED: usize = 16;
/// Standard-error lines passed on as notices; the rest are counted.
const NOTICES_PASSED: u64 = 200;

/// What the reader thread hands the block.
enum FromChild {
    Item(usize, Item),
    Malformed(String),
    /// Standard output ended (the program closed it or exited).
    End,
}

/// The program's standard error: the last lines, and lines not yet passed on.
#[derive(Default)]
struct ErrorLog {
    tail: VecDeque<String>,
    pending: Vec<String>,
    seen: u64,
    done: bool,
}

/// The quoted tail of standard error, for messages.
pub fn tail_text(lines: &[&str]) -> String {
    if lines.is_empty() {
        return "; it wrote nothing on standard error".into();
    }
    let mut s = String::from("; last lines of its standard error:");
    for l in lines {
        s.push_str("\n    ");
        s.push_str(l);
    }
    s
}

pub struct ExternalBlock {
    launch: Launch,
    child: Child,
    /// Closed (taken) to end the program's input.
    to_child: Option<Sender<Vec<u8>>>,
    writer: Option<JoinHandle<()>>,
    /// Raised by the writer when the program stopped reading.
    input_broken: Arc<AtomicBool>,
    from_child: Receiver<FromChild>,
    errors: Arc<Mutex<ErrorLog>>,
    inputs: Vec<String>,
    last_stamp: Stamp,
    finishing: bool,
    ended: bool,
    concluded: bool,
}

/// A parameter value as the program receives it (canonical units).
fn param_json(v: &Value) -> serde_json::Value {
    match v {
        Value::Number(x) | Value::Seconds(x) | Value::Metres(x) => json!(x),
        Value::Samples(x) => json!({"samples": x}),
        Value::Pulses(x) => json!({"pulses": x}),
        Value::Bins(x) => json!({"bins": x}),
        Value::Int(i) => json!(i),
        Value::Bool(b) => json!(b),
        Value::Text(t) | Value::LobePairs { text: t, .. } | Value::LobeGains { text: t, .. } => json!(t),
        Value::Names(n) => json!(n),
    }
}

fn port_json(ports: &[lobeflow_blocks::PortSpec]) -> serde_json::Value {
    ports.iter().map(|p| json!({"name": p.name, "kind": kind_name(p.kind)})).collect()
}

impl ExternalBlock {
    /// Start the program and send it the start line (block name, parameters
    /// and ports).
    pub fn start(name: &str, launch: Launch, spec: &BlockSpec, params: &[(String, Value)]) -> Result<Self, String> {
        let mut cmd = Command::new(&launch.command);
        cmd.args(&launch.args)
            .current_dir(&launch.folder)
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped());
        // Its own process group: a Ctrl-C at the terminal reaches lobeflow
        // alone, which stops the run and ends the program in order.
        #[cfg(unix)]
        std::os::unix::process::CommandExt::process_group(&mut cmd, 0);
        let mut child = cmd.spawn().map_err(|e| launch.spawn_error(&e))?;
        let (Some(stdin), Some(stdout), Some(stderr)) = (child.stdin.take(), child.stdout.take(), child.stderr.take())
        else {
            let _ = child.kill();
            return Err("the program's standard streams could not be connected".into());
        };
        let (to_child, frames) = bounded::<Vec<u8>>(FRAMES_QUEUED);
        let (items, from_child) = bounded(ITEMS_QUEUED);
        let input_broken = Arc::new(AtomicBool::new(false));
        let errors = Arc::new(Mutex::new(ErrorLog::default()));
        let broken = Arc::clone(&input_broken);
        let writer = std::thread::spawn(move || write_frames(stdin, frames, &broken));
        let outputs: Vec<(String, ItemKind)> = spec.outputs.iter().map(|p| (p.name.to_string(), p.kind)).collect();
        std::thread::spawn(move || read_frames(stdout, &outputs, &items));
        let log = Arc::clone(&errors);
        std::thread::spawn(move || read_errors(stderr, &log));
        let start = json!({
            "kind": "start",
            "block": name,
            "params": params.iter().map(|(k, v)| (k.clone(), param_json(v))).collect::<Map<_, _>>(),
            "inputs": port_json(spec.inputs),
            "outputs": port_json(spec.outputs),
        });
        let mut line = start.to_string().into_bytes();
        line.push(b'\n');
        // The queue is empty: the start line always fits.
        let _ = to_child.try_send(line);
        Ok(ExternalBlock {
            launch,
            child,
            to_child: Some(to_child),
            writer: Some(writer),
            input_broken,
            from_child,
            errors,
            inputs: spec.inputs.iter().map(|p| p.name.to_string()).collect(),
            last_stamp: Stamp::new(0, 1.0),
            finishing: false,
            ended: false,
            concluded: false,
        })
    }

    /// Pass the program's new standard-error lines on as notices.
    fn pass_errors(&mut self, out: &mut Outputs) {
        let pending = std::mem::take(&mut self.errors.lock().unwrap_or_else(|e| e.into_inner()).pending);
        // The program says in words what it means: its severity is told from the text.
        for line in pending {
            out.notice(self.last_stamp, line);
        }
    }

    /// Handle one message of the reader thread.
    fn take(&mut self, msg: FromChild, out: &mut Outputs) -> Result<(), BlockError> {
        match msg {
            FromChild::Item(port, item) => out.push(InstancePort(port), item),
            FromChild::Malformed(what) => return Err(self.failure(&format!("wrote malformed output: {what}"))),
            FromChild::End if self.finishing => self.ended = true,
            FromChild::End => return Err(self.failure("closed its output before its input ended")),
        }
        Ok(())
    }

    /// Send one frame, taking the program's output while it is busy.
    fn send(&mut self, frame: Vec<u8>, out: &mut Outputs) -> Result<(), BlockError> {
        let Some(tx) = self.to_child.clone() else {
            return Err(BlockError::new("input after the end"));
        };
        loop {
            let mut sel = Select::new();
            let send_op = sel.send(&tx);
            let recv_op = sel.recv(&self.from_child);
            let Ok(op) = sel.select_timeout(self.launch.timeout) else {
                return Err(self.failure(&format!(
                    "took no input and wrote no output for {} s (parameter 'timeout')",
                    self.launch.timeout.as_secs_f64()
                )));
            };
            match op.index() {
                i if i == send_op => {
                    return match op.send(&tx, frame) {
                        Ok(()) => Ok(()),
                        Err(_) => Err(self.failure("stopped reading before its input ended")),
                    };
                }
                i if i == recv_op => match op.recv(&self.from_child) {
                    Ok(msg) => self.take(msg, out)?,
                    Err(_) => return Err(self.failure("stopped answering (its output reader ended)")),
                },
                _ => unreachable!("two operations were selected from"),
            }
        }
    }

    /// Take what the program has written so far, without waiting.
    fn take_ready(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        while let Ok(msg) = self.from_child.try_recv() {
            self.take(msg, out)?;
        }
        Ok(())
    }

    /// Wait up to `limit` for the program to exit.
    fn wait_exit(&mut self, limit: Duration) -> Option<ExitStatus> {
        let deadline = Instant::now() + limit;
        loop {
            match self.child.try_wait() {
                Ok(Some(s)) => return Some(s),
                Ok(None) if Instant::now() < deadline => std::thread::sleep(Duration::from_millis(2)),
                _ => return None,
            }
        }
    }

    /// The error for the program failing in `what` way, with its exit status
    /// and last lines of standard error. The program is ended first.
    fn failure(&mut self, what: &str) -> BlockError {
        self.to_child.take();
        let status = match self.wait_exit(Duration::from_millis(500)) {
            Some(s) => format!(" ({s})"),
            None => {
                let _ = self.child.kill();
                let _ = self.child.wait();
                " (ended by lobeflow)".into()
            }
        };
        // Standard error ends with the program; give its reader a moment.
        let deadline = Instant::now() + Duration::from_millis(500);
        while !self.errors.lock().unwrap_or_else(|e| e.into_inner()).done && Instant::now() < deadline {
            std::thread::sleep(Duration::from_millis(2));
        }
        let log = self.errors.lock().unwrap_or_else(|e| e.into_inner());
        let tail: Vec<&str> = log.tail.iter().map(String::as_str).collect();
        BlockError::at(
            format!("program `{}` {what}{status}{}", self.launch.command_line(), tail_text(&tail)),
            self.last_stamp.index,
        )
    }
}

/// Ports and parameters beyond the launch ones are the instance's, from its
/// program's description.
impl TypedBlock for ExternalBlock {
    type Settings = super::ExternalSettings;
    type In = InstancePort;
    type Out = InstancePort;

    fn build(settings: super::ExternalSettings, ctx: &BuildContext) -> Result<Self, BuildError> {
        super::start_program(settings, ctx)
    }

    fn process(&mut self, port: InstancePort, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        self.last_stamp = item.stamp();
        let Some(input) = self.inputs.get(port.0) else {
            return Err(BlockError::new(format!(
                "an item arrived on input {}, which the program does not declare",
                port.0
            )));
        };
        let mut frame = Vec::new();
        encode(input, &item, &mut frame);
        drop(item);
        self.send(frame, out)?;
        self.take_ready(out)?;
        self.pass_errors(out);
        Ok(())
    }

    fn generate(&mut self, out: &mut Outputs) -> Result<bool, BlockError> {
        // A program without inputs is a source: one item per call, until it ends.
        self.finishing = true;
        self.to_child.take();
        if !self.ended {
            let msg = self.from_child.recv_timeout(self.launch.timeout);
            self.receive(msg, out)?;
        }
        self.pass_errors(out);
        if self.ended {
            self.conclude(out)?;
        }
        Ok(!self.ended)
    }

    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.finishing = true;
        self.to_child.take();
        while !self.ended {
            let msg = self.from_child.recv_timeout(self.launch.timeout);
            self.receive(msg, out)?;
        }
        self.conclude(out)
    }
}

impl ExternalBlock {
    /// Handle what waiting for the program's output after its input ended gave.
    fn receive(&mut self, msg: Result<FromChild, RecvTimeoutError>, out: &mut Outputs) -> Result<(), BlockError> {
        match msg {
            Ok(msg) => self.take(msg, out),
            Err(RecvTimeoutError::Timeout) => Err(self.failure(&format!(
                "did not finish its output within {} s of its input ending (parameter 'timeout')",
                self.launch.timeout.as_secs_f64()
            ))),
            Err(RecvTimeoutError::Disconnected) => {
                self.ended = true;
                Ok(())
            }
        }
    }

    /// The program's output has ended: it must exit, successfully, having
    /// read all its input.
    fn conclude(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        if self.concluded {
            return Ok(());
        }
        self.concluded = true;
        let Some(status) = self.wait_exit(self.launch.timeout) else {
            return Err(self.failure("closed its output but did not exit"));
        };
        if let Some(w) = self.writer.take() {
            let _ = w.join();
        }
        if !status.success() {
            return Err(self.failure("failed"));
        }
        if self.input_broken.load(Ordering::SeqCst) {
            return Err(self.failure("stopped reading before its input ended"));
        }
        let deadline = Instant::now() + Duration::from_millis(500);
        while !self.errors.lock().unwrap_or_else(|e| e.into_inner()).done && Instant::now() < deadline {
            std::thread::sleep(Duration::from_millis(2));
        }
        self.pass_errors(out);
        let seen = self.errors.lock().unwrap_or_else(|e| e.into_inner()).seen;
        if seen > NOTICES_PASSED {
            out.notice(self.last_stamp, format!("{} more lines of standard error not shown", seen - NOTICES_PASSED));
        }
        Ok(())
    }
}

impl Drop for ExternalBlock {
    fn drop(&mut self) {
        // A stopped or failed run ends the program; a finished one has exited.
        self.to_child.take();
        if !matches!(self.child.try_wait(), Ok(Some(_))) {
            let _ = self.child.kill();
            let _ = self.child.wait();
        }
    }
}

/// The writer thread: frames to the program's standard input, flushed
/// whenever the queue runs dry; input ends when the block closes the queue.
fn write_frames(stdin: std::process::ChildStdin, frames: Receiver<Vec<u8>>, broken: &AtomicBool) {
    let mut w = BufWriter::with_capacity(1 << 16, stdin);
    for frame in frames.iter() {
        let ok = w.write_all(&frame).is_ok() && (!frames.is_empty() || w.flush().is_ok());
        if !ok {
            broken.store(true, Ordering::SeqCst);
            return;
        }
    }
    if w.flush().is_err() {
        broken.store(true, Ordering::SeqCst);
    }
}

/// The reader thread: frames from the program's standard output to items.
fn read_frames(stdout: ChildStdout, outputs: &[(String, ItemKind)], items: &Sender<FromChild>) {
    let mut input = BufReader::with_capacity(1 << 16, stdout);
    let mut line = Vec::new();
    let mut offset = 0u64;
    for frame in 1u64.. {
        line.clear();
        let read = match input.read_until(b'\n', &mut line) {
            Ok(n) => n,
            Err(e) => {
                let _ = items.send(FromChild::Malformed(format!("reading its output failed: {e}")));
                return;
            }
        };
        if read == 0 {
            let _ = items.send(FromChild::End);
            return;
        }
        let at = format!("frame {frame} (byte {offset} of its output)");
        offset += read as u64;
        let msg = match read_one(&line, &mut input, outputs, &mut offset) {
            Ok((port, item)) => FromChild::Item(port, item),
            Err(e) => {
                let shown = String::from_utf8_lossy(&line[..line.len().min(120)]).trim_end().to_string();
                let _ = items.send(FromChild::Malformed(format!("{at}: {e}; the line read: '{shown}'")));
                return;
            }
        };
        if items.send(msg).is_err() {
            return;
        }
    }
}

/// One frame whose header line is `line`: the item and its port.
fn read_one(
    line: &[u8],
    input: &mut impl BufRead,
    outputs: &[(String, ItemKind)],
    offset: &mut u64,
) -> Result<(usize, Item), String> {
    if !line.ends_with(b"\n") {
        return Err("the output ended in the middle of a line".into());
    }
    let header = parse_header(line, outputs)?;
    let port = header.port;
    let (iq, sync, trigger) = match header.samples {
        Some((n, has_sync, has_trigger)) => {
            debug_assert!(n as u64 <= MAX_FRAME_SAMPLES);
            let short = |e: std::io::Error| format!("{n} samples were announced but the output ended ({e})");
            let iq = read_samples(input, n).map_err(short)?;
            let sync = if has_sync { Some(read_channel(input, n).map_err(short)?) } else { None };
            let trigger = if has_trigger { Some(read_channel(input, n).map_err(short)?) } else { None };
            *offset += n as u64 * (8 + 4 * (u64::from(has_sync) + u64::from(has_trigger)));
            (iq, sync, trigger)
        }
        None => (Vec::new(), None, None),
    };
    Ok((port, build_item(header, iq, sync, trigger)?))
}

/// The standard-error thread: keeps the last lines, queues lines as notices.
fn read_errors(stderr: impl Read, log: &Mutex<ErrorLog>) {
    let mut input = BufReader::new(stderr);
    let mut line = Vec::new();
    loop {
        line.clear();
        match input.read_until(b'\n', &mut line) {
            Ok(0) | Err(_) => break,
            Ok(_) => {
                let text = String::from_utf8_lossy(&line).trim_end().to_string();
                let mut l = log.lock().unwrap_or_else(|e| e.into_inner());
                l.seen += 1;
                if l.seen <= NOTICES_PASSED {
                    l.pending.push(text.clone());
                }
                if l.tail.len() == STDERR_TAIL {
                    l.tail.pop_front();
                }
                l.tail.push_back(text);
            }
        }
    }
    log.lock().unwrap_or_else(|e| e.into_inner()).done = true;
}
