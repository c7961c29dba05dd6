//! The embedding API: load a graph, set settings, run it, or listen to its
//! ports as a `futures::Stream` while it runs; push samples from memory.
//!
//! Every error reaches the caller: errors found before samples flow (a
//! missing capture, a misspelled port) come back from [`Session::stream`]
//! itself, errors during the run as the stream's last item, and the stream
//! ends when the run ends, whatever the reason.

use crate::capture::live::{PushFormat, SampleFeeder, pushed_input};
use crate::error::Error;
use crate::graph::{Overrides, ResolvedGraph, resolve};
use crate::runtime::{RunOptions, RunReport, Tap, prepare, run};
use crossbeam_channel::{Receiver, TryRecvError, bounded};
use futures::Stream;
use futures::task::AtomicWaker;
use lobeflow_blocks::{Item, RawValue, Registry};
use std::path::{Path, PathBuf};
use std::pin::Pin;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::task::{Context, Poll};

/// A graph file with its knob overrides, ready to check or run.
#[derive(Clone)]
pub struct Session {
    path: PathBuf,
    overrides: Overrides,
    registry: Registry,
    options: RunOptions,
}

impl Session {
    /// Open a graph file with the full registry ([`crate::registry`]).
    /// The graph is checked here, so a bad file fails early.
    pub fn open(path: impl AsRef<Path>) -> Result<Session, Error> {
        Self::with_registry(path, crate::registry())
    }

    /// Open with a registry of your own (e.g. with extra block kinds).
    pub fn with_registry(path: impl AsRef<Path>, registry: Registry) -> Result<Session, Error> {
        let s = Session {
            path: path.as_ref().to_path_buf(),
            overrides: Overrides::default(),
            registry,
            options: RunOptions { write_files: false, ..RunOptions::default() },
        };
        s.resolve()?;
        Ok(s)
    }

    /// Override a knob, as `--set name=value` does (checked at the next run).
    pub fn set(&mut self, name: &str, value: &str) -> &mut Self {
        self.overrides.set(name, RawValue::from_text(value));
        self
    }

    /// Apply a params file, as `--params FILE` does.
    pub fn params_file(&mut self, path: impl AsRef<Path>) -> Result<&mut Self, Error> {
        self.overrides.add_params_file(path.as_ref())?;
        Ok(self)
    }

    /// Write output files into `dir`. Without it a run writes no files
    /// (tables and pictures are made and dropped; listen to ports instead).
    pub fn out_dir(&mut self, dir: impl AsRef<Path>) -> &mut Self {
        self.options.out_dir = dir.as_ref().to_path_buf();
        self.options.write_files = true;
        self
    }

    /// Feed capture reader `block` from memory instead of its file: the
    /// returned feeder takes chunks of samples as the application gets them,
    /// and dropping it ends the input. Used by the next run or stream.
    pub fn push_input(&mut self, block: &str, format: PushFormat) -> Result<SampleFeeder, Error> {
        let (input, feeder) = pushed_input(block, format).map_err(Error::Usage)?;
        self.options.pushed.retain(|p| p.block != block);
        self.options.pushed.push(input);
        Ok(feeder)
    }

    /// Worker threads; results do not depend on it.
    pub fn threads(&mut self, n: usize) -> &mut Self {
        self.options.threads = n.max(1);
        self
    }

    /// Replace all run options.
    pub fn options(&mut self, options: RunOptions) -> &mut Self {
        self.options = options;
        self
    }

    /// The checked, flattened graph with every knob settled.
    pub fn resolve(&self) -> Result<ResolvedGraph, Error> {
        Ok(resolve(&self.path, &self.overrides, &self.registry)?)
    }

    /// Run to the end, blocking.
    pub fn run(&self) -> Result<RunReport, Error> {
        let g = self.resolve()?;
        run(&g, &self.options, Vec::new())
    }

    /// Run in the background and stream the items leaving output `port`
    /// (`block.port`, or `block` for its first output). Dropping the stream
    /// stops the run. Errors found before the run starts come back here.
    ///
    /// ```
    /// use futures::StreamExt;
    /// # let dir = std::env::temp_dir().join(format!("lobeflow-doc-{}", std::process::id()));
    /// # std::fs::create_dir_all(&dir).unwrap();
    /// # let graph = dir.join("g.yaml");
    /// # std::fs::write(&graph, "blocks:\n  tone: {kind: test_tone, set: {samples: 5000}}\n  keep: {kind: pass}\nwiring:\n  - tone -> keep\n").unwrap();
    /// let session = lobeflow::Session::open(&graph)?;
    /// let mut stream = session.stream("keep.samples")?;
    /// let mut samples = 0;
    /// futures::executor::block_on(async {
    ///     while let Some(item) = stream.next().await {
    ///         samples += item?.sample_count();
    ///     }
    ///     Ok::<(), lobeflow::Error>(())
    /// })?;
    /// assert_eq!(samples, 5000);
    /// assert!(stream.report().is_some());
    /// # Ok::<(), lobeflow::Error>(())
    /// ```
    pub fn stream(&self, port: &str) -> Result<ItemStream, Error> {
        Ok(ItemStream { inner: self.start(&[port])? })
    }

    /// Listen to several ports at once: items come as (index of the port in
    /// `ports`, item), each port's in order.
    pub fn listen(&self, ports: &[&str]) -> Result<PortStream, Error> {
        Ok(PortStream { inner: self.start(ports)? })
    }

    fn start(&self, ports: &[&str]) -> Result<Listener, Error> {
        let g = self.resolve()?;
        let (tx, rx) = bounded(self.options.capacity.max(1) * 4 * ports.len().max(1));
        let waker = Arc::new(AtomicWaker::new());
        let taps = ports
            .iter()
            .enumerate()
            .map(|(index, port)| Tap {
                port: port.to_string(),
                sender: tx.clone(),
                index,
                waker: Some(Arc::clone(&waker)),
            })
            .collect();
        let prepared = prepare(&g, &self.options, taps)?;
        let ended: Arc<Mutex<Option<Result<RunReport, Error>>>> = Arc::default();
        let (slot, wake) = (Arc::clone(&ended), Arc::clone(&waker));
        std::thread::Builder::new()
            .name("lobeflow-run".into())
            .spawn(move || {
                let result = prepared.execute();
                *slot.lock().unwrap_or_else(|e| e.into_inner()) = Some(result);
                // Only now may the listener see the channel closed: the
                // result is in place when it looks.
                drop(tx);
                wake.wake();
            })
            .map_err(|e| Error::Output(format!("cannot start the run thread: {e}")))?;
        Ok(Listener {
            rx,
            waker,
            ended,
            report: None,
            finished: false,
            cancel: Arc::clone(&self.options.cancel),
            end_input: Arc::clone(&self.options.end_input),
        })
    }
}

/// The listening end of a running graph.
struct Listener {
    rx: Receiver<(usize, Item)>,
    waker: Arc<AtomicWaker>,
    ended: Arc<Mutex<Option<Result<RunReport, Error>>>>,
    report: Option<RunReport>,
    finished: bool,
    cancel: Arc<AtomicBool>,
    end_input: Arc<AtomicBool>,
}

impl Listener {
    fn poll_item(&mut self, cx: &mut Context<'_>) -> Poll<Option<Result<(usize, Item), Error>>> {
        if self.finished {
            return Poll::Ready(None);
        }
        for attempt in 0..2 {
            match self.rx.try_recv() {
                Ok(item) => return Poll::Ready(Some(Ok(item))),
                Err(TryRecvError::Disconnected) => {
                    // The run ended: report its error once, then end.
                    self.finished = true;
                    let result = self.ended.lock().unwrap_or_else(|e| e.into_inner()).take();
                    return match result {
                        Some(Ok(report)) => {
                            self.report = Some(report);
                            Poll::Ready(None)
                        }
                        Some(Err(e)) => Poll::Ready(Some(Err(e))),
                        None => Poll::Ready(Some(Err(Error::Output("the run thread failed".into())))),
                    };
                }
                Err(TryRecvError::Empty) if attempt == 0 => self.waker.register(cx.waker()),
                Err(TryRecvError::Empty) => {}
            }
        }
        Poll::Pending
    }
}

impl Drop for Listener {
    fn drop(&mut self) {
        self.cancel.store(true, Ordering::SeqCst);
    }
}

/// Items from one port of a running graph; ends with the run's error, if any.
pub struct ItemStream {
    inner: Listener,
}

/// Items from several ports of a running graph, as (port index, item).
pub struct PortStream {
    inner: Listener,
}

macro_rules! stream_ends {
    ($t:ty) => {
        impl $t {
            /// The run's report (notices, files written, how it ended), once
            /// the stream has ended without an error.
            pub fn report(&self) -> Option<&RunReport> {
                self.inner.report.as_ref()
            }
            /// End the live inputs as if they had closed: the graph finishes
            /// with what it has, writes its outputs, and the stream ends.
            pub fn end_input(&self) {
                self.inner.end_input.store(true, Ordering::SeqCst);
            }
        }
    };
}
stream_ends!(ItemStream);
stream_ends!(PortStream);

impl Stream for ItemStream {
    type Item = Result<Item, Error>;

    fn poll_next(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<Option<Self::Item>> {
        self.inner.poll_item(cx).map(|o| o.map(|r| r.map(|(_, item)| item)))
    }
}

impl Stream for PortStream {
    type Item = Result<(usize, Item), Error>;

    fn poll_next(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<Option<Self::Item>> {
        self.inner.poll_item(cx)
    }
}
