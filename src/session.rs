//! The embedding API: load a graph, set settings, run it, or listen to one of
//! its ports as a `futures::Stream` while it runs.

use crate::error::Error;
use crate::graph::{Overrides, ResolvedGraph, resolve};
use crate::runtime::{RunOptions, RunReport, Tap, run};
use crossbeam_channel::{Receiver, TryRecvError, bounded};
use futures::Stream;
use futures::task::AtomicWaker;
use lobeflow_blocks::{Item, RawValue, Registry};
use std::path::{Path, PathBuf};
use std::pin::Pin;
use std::sync::Arc;
use std::sync::atomic::Ordering;
use std::task::{Context, Poll};
use std::thread::JoinHandle;

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
            options: RunOptions::default(),
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

    /// Where output files go (default: the current directory).
    pub fn out_dir(&mut self, dir: impl AsRef<Path>) -> &mut Self {
        self.options.out_dir = dir.as_ref().to_path_buf();
        self
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
    /// stops the run.
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
    /// # Ok::<(), lobeflow::Error>(())
    /// ```
    pub fn stream(&self, port: &str) -> Result<ItemStream, Error> {
        let g = self.resolve()?;
        let (tx, rx) = bounded(self.options.capacity.max(1) * 4);
        let waker = Arc::new(AtomicWaker::new());
        let tap = Tap { port: port.to_string(), sender: tx, waker: Some(Arc::clone(&waker)) };
        let opts = self.options.clone();
        let cancel = Arc::clone(&opts.cancel);
        let handle = std::thread::spawn(move || run(&g, &opts, vec![tap]));
        Ok(ItemStream { rx, waker, handle: Some(handle), cancel })
    }
}

/// Items from a running graph; ends with the run's error, if any.
pub struct ItemStream {
    rx: Receiver<Item>,
    waker: Arc<AtomicWaker>,
    handle: Option<JoinHandle<Result<RunReport, Error>>>,
    cancel: Arc<std::sync::atomic::AtomicBool>,
}

impl Stream for ItemStream {
    type Item = Result<Item, Error>;

    fn poll_next(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<Option<Self::Item>> {
        let this = &mut *self;
        for attempt in 0..2 {
            match this.rx.try_recv() {
                Ok(item) => return Poll::Ready(Some(Ok(item))),
                Err(TryRecvError::Disconnected) => {
                    // The run ended; report its error once, then end.
                    return match this.handle.take().map(|h| h.join()) {
                        Some(Ok(Err(e))) => Poll::Ready(Some(Err(e))),
                        Some(Err(_)) => Poll::Ready(Some(Err(Error::Output("the run thread failed".into())))),
                        _ => Poll::Ready(None),
                    };
                }
                Err(TryRecvError::Empty) if attempt == 0 => this.waker.register(cx.waker()),
                Err(TryRecvError::Empty) => {}
            }
        }
        Poll::Pending
    }
}

impl Drop for ItemStream {
    fn drop(&mut self) {
        self.cancel.store(true, Ordering::SeqCst);
    }
}
