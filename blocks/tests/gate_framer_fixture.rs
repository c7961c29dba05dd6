//! Gates and framer on a capture made by numpy/scipy (fixtures/gate_framer/
//! make_fixture.py): uneven sync voltages with an RC-like settle, PRF jitter,
//! a missing pulse. The truth (transmit instants, midpoint crossings found
//! with numpy, k-means levels from scipy.cluster.vq.kmeans2) comes from that
//! script, not from this project's code.

use lobeflow_blocks::dsp::switch_sync::learn_levels;
use lobeflow_blocks::kinds::{lobe_gate, pulse_framer, sweep_gate};
use lobeflow_blocks::{BlockSpec, BuildContext, Item, Notice, Outputs, Params, SampleChunk, Stamp, Sweep};
use num_complex::Complex32;

const CAPTURE: &[u8] = include_bytes!("fixtures/gate_framer/capture.f32");
const TRUTH: &str = include_str!("fixtures/gate_framer/truth.txt");
const PRI: u64 = 200;

struct Truth {
    kmeans_levels: Vec<f64>,
    first_lobe: usize,
    /// (instant, sent)
    tx: Vec<(u64, bool)>,
    /// (instant, lobe)
    switches: Vec<(u64, usize)>,
}

fn truth() -> Truth {
    let mut t = Truth { kmeans_levels: Vec::new(), first_lobe: 0, tx: Vec::new(), switches: Vec::new() };
    for line in TRUTH.lines().filter(|l| !l.starts_with('#')) {
        let f: Vec<&str> = line.split_whitespace().collect();
        match f[0] {
            "kmeans_level" => t.kmeans_levels.push(f[1].parse().unwrap()),
            "first_lobe" => t.first_lobe = f[1].parse().unwrap(),
            "tx" => t.tx.push((f[1].parse().unwrap(), f[2] == "sent")),
            "switch" => t.switches.push((f[1].parse().unwrap(), f[2].parse().unwrap())),
            other => panic!("unknown truth line {other}"),
        }
    }
    t
}

impl Truth {
    fn lobe_at(&self, n: u64) -> usize {
        self.switches.iter().take_while(|s| s.0 <= n).last().map_or(self.first_lobe, |s| s.1)
    }
}

fn capture() -> SampleChunk {
    let v: Vec<f32> = CAPTURE.chunks_exact(4).map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]])).collect();
    let iq: Vec<Complex32> = v.chunks_exact(4).map(|s| Complex32::new(s[0], s[1])).collect();
    let sync: Vec<f32> = v.chunks_exact(4).map(|s| s[2]).collect();
    let trigger: Vec<f32> = v.chunks_exact(4).map(|s| s[3]).collect();
    SampleChunk { stamp: Stamp::new(0, 1e6), iq: iq.into(), sync: Some(sync.into()), trigger: Some(trigger.into()) }
}

fn params(spec: &BlockSpec, set: &[(&str, &str)]) -> Params {
    spec.params_from_text(set).unwrap_or_else(|e| panic!("test parameters: {e}"))
}

/// Run one block over `items`; returns (port, item) outputs and report notices.
fn run(spec: &BlockSpec, set: &[(&str, &str)], items: Vec<Item>) -> (Vec<(usize, Item)>, Vec<Notice>) {
    let mut block = (spec.build)(&params(spec, set), &BuildContext::default()).expect("builds");
    let mut out = Outputs::new(spec.outputs.len());
    let (mut items_out, mut notices) = (Vec::new(), Vec::new());
    for it in items {
        block.process(0, it, &mut out).expect("runs");
        items_out.extend(out.drain());
        notices.extend(out.drain_notices());
    }
    block.finish(&mut out).expect("finishes");
    items_out.extend(out.drain());
    notices.extend(out.drain_notices());
    (items_out, notices)
}

fn chunks(c: &SampleChunk, size: usize) -> Vec<Item> {
    (0..c.len()).step_by(size).map(|a| Item::Samples(c.slice(a..(a + size).min(c.len())))).collect()
}

fn sweeps(items: Vec<(usize, Item)>) -> Vec<Sweep> {
    items.into_iter().filter_map(|(_, i)| if let Item::Sweep(s) = i { Some(s) } else { None }).collect()
}

#[test]
fn learned_levels_match_scipy_kmeans() {
    let t = truth();
    let c = capture();
    let levels = learn_levels(c.sync.as_ref().unwrap(), 4).unwrap();
    for (ours, theirs) in levels.iter().zip(&t.kmeans_levels) {
        assert!((ours - theirs).abs() < 0.005, "ours {levels:?}, scipy {:?}", t.kmeans_levels);
    }
}

#[test]
fn lobe_gate_finds_the_numpy_midpoint_crossings() {
    let t = truth();
    let c = capture();
    let set = [("lobes", "a,b,c,d"), ("learn", "4 ms"), ("min_dwell", "20 us"), ("guard", "5 us")];
    let (items, report) = run(&lobe_gate::SPEC, &set, chunks(&c, 1500));
    let switches: Vec<u64> = items
        .iter()
        .filter_map(|(p, i)| match i {
            Item::Notice(n) if *p == 1 && n.what.starts_with("switch to") => Some(n.stamp.index),
            _ => None,
        })
        .collect();
    assert_eq!(switches, t.switches.iter().map(|s| s.0).collect::<Vec<_>>());
    let mut count = 0;
    for (_, item) in &items {
        if let Item::Segment(seg) = item {
            for k in 0..seg.chunk.len() as u64 {
                let n = seg.chunk.stamp.index + k;
                assert_eq!(seg.tag.lobe, t.lobe_at(n), "sample {n}");
                assert!(!t.switches.iter().any(|s| n >= s.0 && n < s.0 + 5), "sample {n} is in a guard");
                count += 1;
            }
        }
    }
    assert_eq!(count, c.len() - 5 * t.switches.len());
    assert!(report.iter().all(|n| n.what.starts_with("learned")), "{report:?}");
}

fn expected_instants(t: &Truth) -> Vec<(u64, bool)> {
    let mut want = Vec::new();
    for (k, &(n, sent)) in t.tx.iter().enumerate() {
        // A missing pulse is predicted one nominal PRI after the previous instant.
        want.push(if sent { (n, false) } else { (t.tx[k - 1].0 + PRI, true) });
    }
    want
}

#[test]
fn framer_leakage_and_trigger_find_the_numpy_instants() {
    let t = truth();
    let c = capture();
    for timing in ["leakage", "trigger"] {
        let (items, report) = run(&pulse_framer::SPEC, &[("prf", "5 kHz"), ("timing", timing)], chunks(&c, 1024));
        let got: Vec<(u64, bool)> = sweeps(items).iter().map(|s| (s.stamp.index, s.predicted)).collect();
        assert_eq!(got, expected_instants(&t), "timing {timing}");
        assert_eq!(report.len(), 1, "{report:?}");
        assert!(report[0].what.starts_with("1 missing pulse(s)"), "{}", report[0].what);
    }
}

#[test]
fn sweep_gate_after_the_framer_labels_by_transmit_instant() {
    let t = truth();
    let c = capture();
    let (items, _) = run(&pulse_framer::SPEC, &[("prf", "5 kHz")], chunks(&c, 4096));
    let framed: Vec<Item> = sweeps(items).into_iter().map(Item::Sweep).collect();
    let n_framed = framed.len();
    let set = [("lobes", "a,b,c,d"), ("learn", "4 ms"), ("min_dwell", "20 us"), ("guard", "10 us")];
    let (items, report) = run(&sweep_gate::SPEC, &set, framed);
    let labelled = sweeps(items);
    assert_eq!(labelled.len(), n_framed, "no sweep starts inside a 10 us guard");
    for s in &labelled {
        let a = s.stamp.index;
        let tag = s.lobe.as_ref().unwrap();
        assert_eq!(tag.lobe, t.lobe_at(a), "sweep at {a}");
        let end = a + s.iq.len() as u64;
        if let Some(sw) = t.switches.iter().find(|sw| sw.0 > a && sw.0 < a + PRI + 10) {
            assert!(end <= sw.0, "sweep at {a} cut at the switch {}", sw.0);
            if end < sw.0 {
                assert!(labelled.iter().any(|x| x.stamp.index == end), "sweep at {a} ends at the next instant");
            }
        }
    }
    assert!(report.iter().all(|n| n.what.starts_with("learned")), "{report:?}");
}
