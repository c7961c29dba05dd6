//! The scheduler: same bytes for any thread count, a failing block stops
//! everything cleanly, cancellation (flag, dropped stream). Backpressure has
//! its own test file.

use lobeflow::graph::{Overrides, resolve};
use lobeflow::runtime::{RunOptions, run};
use lobeflow::{Error, Session};
use lobeflow_blocks::prelude::*;
use lobeflow_blocks::{FileStager, OutputFile};
use std::io::Write;
use std::path::PathBuf;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Duration;

fn dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-rt-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

block_ports! { inputs enum SamplesIn { Samples = required("samples", ItemKind::Samples, "anything") } }

/// The output file of a test block.
fn create(path: PathBuf) -> Result<OutputFile, BuildError> {
    OutputFile::create(&path).map_err(|source| BuildError::File { path, source })
}

block_settings! {
    struct DigestSettings {
        path: PathBuf { ty: ParamType::OutputPath, default: Some("digest.txt"), doc: "where" },
        fail_at: i64 { ty: ParamType::Integer { min: -1, max: 1 << 40 }, default: Some("-1"), doc: "item to fail at" },
    }
}

/// Writes a running checksum of every sample it sees to a file.
struct Digest {
    file: Option<OutputFile>,
    files: FileStager,
    fail_at: i64,
    seen: i64,
}
const DIGEST: BlockSpec = BlockSpec::typed::<Digest>("digest", "test: checksum per chunk to a file");
impl TypedBlock for Digest {
    type Settings = DigestSettings;
    type In = SamplesIn;
    type Out = NoPorts;
    fn build(s: DigestSettings, ctx: &BuildContext) -> Result<Self, BuildError> {
        let f = create(s.path)?;
        Ok(Digest { file: Some(f), files: ctx.files.clone(), fail_at: s.fail_at, seen: 0 })
    }
    fn process(&mut self, _: SamplesIn, item: Item, _: &mut Outputs) -> Result<(), BlockError> {
        if self.seen == self.fail_at {
            return Err(BlockError::at("deliberate failure", item.stamp().index));
        }
        self.seen += 1;
        if let Item::Samples(c) = item {
            let mut h: u64 = 0xcbf29ce484222325;
            for x in c.iq.iter() {
                for b in x.re.to_le_bytes().iter().chain(x.im.to_le_bytes().iter()) {
                    h = (h ^ *b as u64).wrapping_mul(0x100000001b3);
                }
            }
            writeln!(self.file.as_mut().expect("open"), "{} {} {h:016x}", c.stamp.index, c.len())?;
        }
        Ok(())
    }
    fn finish(&mut self, _: &mut Outputs) -> Result<(), BlockError> {
        self.file.take().expect("open").finish(&self.files)?;
        Ok(())
    }
}

block_settings! {
    struct FirstFewSettings {
        path: PathBuf { ty: ParamType::OutputPath, default: Some("first.txt"), doc: "where" },
    }
}

/// Keeps the indices of the first `keep` chunks, then wants no more input.
struct FirstFew {
    file: Option<OutputFile>,
    files: FileStager,
    keep: usize,
    seen: Vec<u64>,
}
const FIRST_FEW: BlockSpec = BlockSpec::typed::<FirstFew>("first_few", "test: reads only the first chunks");
impl TypedBlock for FirstFew {
    type Settings = FirstFewSettings;
    type In = SamplesIn;
    type Out = NoPorts;
    fn build(s: FirstFewSettings, ctx: &BuildContext) -> Result<Self, BuildError> {
        let f = create(s.path)?;
        Ok(FirstFew { file: Some(f), files: ctx.files.clone(), keep: 5, seen: Vec::new() })
    }
    fn wants_input(&self) -> bool {
        self.seen.len() < self.keep
    }
    fn process(&mut self, _: SamplesIn, item: Item, _: &mut Outputs) -> Result<(), BlockError> {
        if self.wants_input() {
            self.seen.push(item.stamp().index);
        }
        Ok(())
    }
    fn finish(&mut self, _: &mut Outputs) -> Result<(), BlockError> {
        let mut f = self.file.take().expect("open");
        writeln!(f, "{:?}", self.seen)?;
        f.finish(&self.files)?;
        Ok(())
    }
}

fn registry() -> Registry {
    let mut r = lobeflow::registry();
    r.register(DIGEST);
    r.register(FIRST_FEW);
    r
}

#[test]
fn a_block_that_has_enough_stops_receiving_and_outputs_stay_the_same() {
    let d = dir("enough");
    let g = d.join("g.yaml");
    std::fs::write(
        &g,
        "blocks:\n  tone: {kind: test_tone, set: {samples: 2000000, chunk: 1000}}\n  few: {kind: first_few}\n  all: {kind: digest}\nwiring:\n  - tone -> few\n  - tone -> all\n",
    )
    .unwrap();
    for threads in [1, 2, 4] {
        let out = d.join(format!("out{threads}"));
        let mut s = Session::with_registry(&g, registry()).unwrap();
        s.out_dir(&out).threads(threads);
        let report = s.run().unwrap();
        assert_eq!(std::fs::read_to_string(out.join("first.txt")).unwrap(), "[0, 1000, 2000, 3000, 4000]\n");
        let few = report.stats.iter().find(|b| b.name == "few").unwrap();
        assert!(few.items_in < 1000, "threads {threads}: {} of 2000 chunks delivered", few.items_in);
        let all = report.stats.iter().find(|b| b.name == "all").unwrap();
        assert_eq!(all.items_in, 2000);
    }
}

const BRANCHY: &str = "\
blocks:
  tone: {kind: test_tone, set: {samples: 300000, chunk: 777, frequency: 1234 Hz}}
  a: {kind: pass}
  b: {kind: pass}
  left: {kind: digest, set: {path: left.txt}}
  right: {kind: digest, set: {path: right.txt}}
wiring:
  - tone -> a -> left
  - tone -> b -> right
";

#[test]
fn outputs_are_identical_for_any_thread_count() {
    let d = dir("determinism");
    let g = d.join("g.yaml");
    std::fs::write(&g, BRANCHY).unwrap();
    let mut first: Option<(Vec<u8>, Vec<u8>)> = None;
    for threads in [1, 2, 3, 8, 1, 8] {
        let out = d.join(format!("out{threads}"));
        let mut s = Session::with_registry(&g, registry()).unwrap();
        s.out_dir(&out).threads(threads);
        s.run().unwrap();
        let got = (std::fs::read(out.join("left.txt")).unwrap(), std::fs::read(out.join("right.txt")).unwrap());
        assert_eq!(got.0, got.1);
        assert_eq!(got.0.iter().filter(|&&b| b == b'\n').count(), 300000_usize.div_ceil(777));
        match &first {
            None => first = Some(got),
            Some(f) => assert_eq!(f, &got, "threads = {threads}"),
        }
    }
}

#[test]
fn a_failing_block_stops_the_graph_and_leaves_no_output() {
    let d = dir("failure");
    let g = d.join("g.yaml");
    std::fs::write(&g, BRANCHY.replace("{path: right.txt}", "{path: right.txt, fail_at: 50}")).unwrap();
    for threads in [1, 2] {
        let out = d.join(format!("out{threads}"));
        let mut s = Session::with_registry(&g, registry()).unwrap();
        s.out_dir(&out).threads(threads);
        let e = s.run().unwrap_err();
        match &e {
            Error::Block { block, kind, message } => {
                assert_eq!((block.as_str(), kind.as_str()), ("right", "digest"));
                assert!(message.contains("deliberate failure (at sample 38850)"), "{message}");
            }
            other => panic!("{other:?}"),
        }
        assert_eq!(e.exit_code(), 2);
        // Neither the failing sink's file nor the healthy one's appears, and no temporary is left.
        let left: Vec<_> = std::fs::read_dir(&out).unwrap().collect();
        assert!(left.is_empty(), "{left:?}");
    }
}

#[test]
fn cancelling_stops_cleanly() {
    let d = dir("cancel");
    let g = d.join("g.yaml");
    std::fs::write(&g, BRANCHY.replace("samples: 300000", "samples: 1000000000000")).unwrap();
    let graph = resolve(&g, &Overrides::default(), &registry()).unwrap();
    let cancel = Arc::new(AtomicBool::new(false));
    let opts = RunOptions { threads: 2, out_dir: d.join("out"), cancel: Arc::clone(&cancel), ..RunOptions::default() };
    let c = Arc::clone(&cancel);
    let stopper = std::thread::spawn(move || {
        std::thread::sleep(Duration::from_millis(200));
        c.store(true, Ordering::SeqCst);
    });
    let e = run(&graph, &opts, Vec::new()).unwrap_err();
    stopper.join().unwrap();
    assert!(matches!(e, Error::Cancelled), "{e:?}");
    assert_eq!(std::fs::read_dir(d.join("out")).unwrap().count(), 0);
}

#[test]
fn dropping_a_stream_cancels_the_run() {
    use futures::StreamExt;
    let d = dir("stream");
    let g = d.join("g.yaml");
    std::fs::write(&g, BRANCHY.replace("samples: 300000", "samples: 1000000000000")).unwrap();
    let mut s = Session::with_registry(&g, registry()).unwrap();
    s.out_dir(d.join("out"));
    let mut stream = s.stream("a.samples").unwrap();
    let first = futures::executor::block_on(async {
        let mut n = 0;
        while let Some(item) = stream.next().await {
            n += item.unwrap().sample_count();
            if n > 10_000 {
                break;
            }
        }
        n
    });
    assert!(first > 10_000);
    drop(stream); // stops the background run; nothing must hang
}
