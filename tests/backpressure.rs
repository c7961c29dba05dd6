//! Backpressure: a deliberately slow sink keeps the resident set flat while
//! a fast source pushes 75 MiB through. Alone in its own test binary so no
//! other test's allocations blur the measurement.

use lobeflow::graph::{Overrides, resolve};
use lobeflow::runtime::{RunOptions, run};
use lobeflow_blocks::prelude::*;
use num_complex::Complex32;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicI64, Ordering};
use std::time::Duration;

block_settings! {
    struct BigSourceSettings {
        chunks: u64 { ty: ParamType::Integer { min: 1, max: 1 << 30 }, default: Some("200"), doc: "chunks to emit" },
    }
}

block_ports! { outputs enum BigSourceOut { Samples = optional("samples", ItemKind::Samples, "big chunks") } }

/// Emits `chunks` chunks of 512 KiB as fast as it can.
struct BigSource {
    left: u64,
    next: u64,
}

const SOURCE: BlockSpec = BlockSpec::typed::<BigSource>("big_source", "test: big chunks, fast");

const CHUNK: usize = 1 << 16;

impl TypedBlock for BigSource {
    type Settings = BigSourceSettings;
    type In = NoPorts;
    type Out = BigSourceOut;

    fn build(s: BigSourceSettings, _: &BuildContext) -> Result<Self, BuildError> {
        Ok(BigSource { left: s.chunks, next: 0 })
    }

    fn generate(&mut self, out: &mut Outputs) -> Result<bool, BlockError> {
        // Touch every byte so the pages are really resident.
        let data: Vec<Complex32> = (0..CHUNK).map(|k| Complex32::new((self.next as usize + k) as f32, 1.0)).collect();
        let chunk = SampleChunk { stamp: Stamp::new(self.next, 1e6), iq: data.into(), sync: None, trigger: None };
        out.push(BigSourceOut::Samples, Item::Samples(chunk));
        self.next += CHUNK as u64;
        self.left -= 1;
        Ok(self.left > 0)
    }
}

block_ports! { inputs enum SlowSinkIn { Samples = required("samples", ItemKind::Samples, "anything") } }

/// Sleeps per item: a deliberately slow consumer.
struct SlowSink;
const SLOW: BlockSpec = BlockSpec::typed::<SlowSink>("slow_sink", "test: slow consumer");
impl TypedBlock for SlowSink {
    type Settings = ();
    type In = SlowSinkIn;
    type Out = NoPorts;

    fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
        Ok(SlowSink)
    }

    fn process(&mut self, _: SlowSinkIn, item: Item, _: &mut Outputs) -> Result<(), BlockError> {
        std::thread::sleep(Duration::from_millis(2));
        drop(item);
        Ok(())
    }
}

fn registry() -> Registry {
    let mut r = lobeflow::registry();
    r.register(SOURCE);
    r.register(SLOW);
    r
}

#[test]
fn a_slow_consumer_keeps_memory_bounded() {
    let d = std::env::temp_dir().join(format!("lobeflow-bp-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    let g = d.join("g.yaml");
    std::fs::write(&g, "blocks:\n  src: {kind: big_source, set: {chunks: 150}}\n  mid: {kind: pass}\n  slow: {kind: slow_sink}\nwiring:\n  - src -> mid -> slow\n").unwrap();
    let graph = resolve(&g, &Overrides::default(), &registry()).unwrap();
    let opts = RunOptions { threads: 2, capacity: 4, out_dir: d.clone(), ..RunOptions::default() };
    // Measure the resident set instead of guessing at ownership: 150 chunks of
    // 512 KiB (75 MiB in all) pass through; with two queues of 4 the run holds
    // only a few MiB at once.
    let before = rss_kib();
    let peak_watch = Arc::new(AtomicBool::new(false));
    let peak = Arc::new(AtomicI64::new(0));
    let (w, p) = (Arc::clone(&peak_watch), Arc::clone(&peak));
    let watcher = std::thread::spawn(move || {
        while !w.load(Ordering::SeqCst) {
            p.fetch_max(rss_kib(), Ordering::SeqCst);
            std::thread::sleep(Duration::from_millis(2));
        }
    });
    let report = run(&graph, &opts, Vec::new()).unwrap();
    peak_watch.store(true, Ordering::SeqCst);
    watcher.join().unwrap();
    assert_eq!(report.stats[2].items_in, 150);
    let grown_mib = (peak.load(Ordering::SeqCst) - before) as f64 / 1024.0;
    // 2 queues x 4 items + 2 in hand + the source's chunk = 11 chunks (5.5 MiB);
    // allow allocator slack, but far below the 75 MiB an unbounded queue holds.
    assert!(grown_mib < 24.0, "resident set grew by {grown_mib:.1} MiB");
}

fn rss_kib() -> i64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    status
        .lines()
        .find(|l| l.starts_with("VmRSS:"))
        .and_then(|l| l.split_whitespace().nth(1))
        .and_then(|v| v.parse().ok())
        .unwrap_or(0)
}
