//! The pulsed front end (framer and sweep gate) on a capture numpy wrote
//! (tests/independent/make_front_end_surprises.py): after a hundred regular
//! pulses (the framer settled on a regular train), a missing pulse, an
//! early pulse, a switch off schedule and a PRF change. Every transmit
//! instant and every sweep's lobe must come out as the script wrote them,
//! however the capture is cut into chunks.

use lobeflow::capture::reader::{OpenOptions, open};
use lobeflow::capture::roles::{NonFinite, RoleMap};
use lobeflow::capture::source::CaptureSource;
use lobeflow_blocks::kinds::{pulse_framer, sweep_gate};
use lobeflow_blocks::{BlockSpec, BuildContext, Item, Notice, Outputs, Params, Sweep, TypedBlock};
use std::path::PathBuf;

const CAPTURE: &str = "tests/independent/captures/front-end-surprises";
/// The nominal pulse interval (4 kHz at 1 MS/s), as the script has it.
const PRI: u64 = 250;

fn repo(p: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(p)
}

struct Truth {
    /// (transmit instant, sent)
    tx: Vec<(u64, bool)>,
    /// (midpoint crossing, lobe after it)
    switches: Vec<(u64, usize)>,
}

fn truth() -> Truth {
    let text = std::fs::read_to_string(repo(&format!("{CAPTURE}.truth.txt"))).unwrap();
    let mut t = Truth { tx: Vec::new(), switches: Vec::new() };
    for line in text.lines().filter(|l| !l.starts_with('#')) {
        let f: Vec<&str> = line.split_whitespace().collect();
        match f[0] {
            "tx" => t.tx.push((f[1].parse().unwrap(), f[2] == "sent")),
            "switch" => t.switches.push((f[1].parse().unwrap(), f[2].parse().unwrap())),
            "level" => {}
            other => panic!("unknown truth line {other}"),
        }
    }
    t
}

impl Truth {
    fn lobe_at(&self, n: u64) -> usize {
        self.switches.iter().take_while(|s| s.0 <= n).last().map_or(0, |s| s.1)
    }
}

/// The capture as the capture reader hands it on, in chunks of `chunk` samples.
fn chunks(chunk: usize) -> Vec<Item> {
    let path = repo(&format!("{CAPTURE}.wav"));
    let reader = open(path.to_str().unwrap(), &OpenOptions::default()).unwrap();
    let roles = RoleMap::new(&["i".into(), "q".into(), "sync".into()], reader.info()).unwrap();
    let mut source = CaptureSource::new(reader, roles, chunk, NonFinite::Error);
    let mut out = Outputs::new(1);
    let mut items = Vec::new();
    while source.generate(&mut out).unwrap() {
        items.extend(out.drain().map(|(_, item)| item));
    }
    items.extend(out.drain().map(|(_, item)| item));
    items
}

fn params(spec: &BlockSpec, set: &[(&str, &str)]) -> Params {
    spec.params_from_text(set).unwrap_or_else(|e| panic!("test parameters: {e}"))
}

/// Run one block over `items`: its sweeps, and its notices from either way out.
fn run(spec: &BlockSpec, set: &[(&str, &str)], items: Vec<Item>) -> (Vec<Sweep>, Vec<Notice>) {
    let mut block = (spec.build)(&params(spec, set), &BuildContext::default()).expect("builds");
    let mut out = Outputs::new(spec.outputs.len());
    let (mut sweeps, mut notices) = (Vec::new(), Vec::new());
    let mut collect = |out: &mut Outputs| {
        for (_, item) in out.drain() {
            match item {
                Item::Sweep(s) => sweeps.push(s),
                Item::Notice(n) => notices.push(n),
                _ => {}
            }
        }
        notices.extend(out.drain_notices());
    };
    for item in items {
        block.process(0, item, &mut out).expect("runs");
        collect(&mut out);
    }
    block.finish(&mut out).expect("finishes");
    collect(&mut out);
    (sweeps, notices)
}

const FRAMER: [(&str, &str); 4] =
    [("prf", "4 kHz"), ("timing", "leakage"), ("threshold_db", "30 dB"), ("blank", "6 us")];

#[test]
fn the_framer_finds_every_surprise_after_a_regular_train() {
    let t = truth();
    // A missing pulse is predicted one nominal interval after the one before.
    let want: Vec<(u64, bool)> =
        t.tx.iter()
            .enumerate()
            .map(|(k, &(n, sent))| if sent { (n, false) } else { (t.tx[k - 1].0 + PRI, true) })
            .collect();
    for chunk in [1000, 4096, 65536] {
        let (sweeps, notices) = run(&pulse_framer::SPEC, &FRAMER, chunks(chunk));
        let got: Vec<(u64, bool)> = sweeps.iter().map(|s| (s.stamp.index, s.predicted)).collect();
        // The surprises by name first, for a readable failure.
        assert!(got.contains(&(25137, true)), "chunk {chunk}: the missing pulse is predicted");
        assert!(got.contains(&(45327, false)), "chunk {chunk}: the early pulse (0.76 interval) is found");
        assert!(got.windows(2).any(|w| w == [(74827, false), (75027, false)]), "chunk {chunk}: the PRF change");
        assert_eq!(got, want, "chunk {chunk}");
        let missing: Vec<&str> = notices.iter().map(|n| n.what.as_str()).collect();
        assert_eq!(
            missing,
            ["1 missing pulse(s) from sample 25137: predicted transmit instants inserted"],
            "chunk {chunk}"
        );
    }
}

#[test]
fn the_sweep_gate_follows_a_switch_off_schedule() {
    let t = truth();
    let (framed, _) = run(&pulse_framer::SPEC, &FRAMER, chunks(4096));
    let n_framed = framed.len();
    let set = [
        ("lobes", "a,b,c,d"),
        ("learn", "20 ms"),
        ("guard", "15 us"),
        ("lead", "3 us"),
        ("window_start", "1 km"),
        ("window_end", "25 km"),
    ];
    let (labelled, notices) = run(&sweep_gate::SPEC, &set, framed.into_iter().map(Item::Sweep).collect());
    // Each switch comes 25 samples before a transmit instant: no transient
    // reaches a range window, so every sweep is labelled.
    assert_eq!(labelled.len(), n_framed, "{notices:#?}");
    for s in &labelled {
        let a = s.stamp.index;
        assert_eq!(s.lobe.as_ref().unwrap().lobe, t.lobe_at(a), "sweep at {a}");
    }
    // The two-pulse dwell opened by the switch before the one off schedule.
    let off = t.switches.iter().position(|s| s.0 == 56553).expect("the off-schedule switch is in the truth");
    let short_from = format!("from sample {}:", t.switches[off - 1].0);
    assert!(
        notices.iter().any(|n| n.what.starts_with("short dwell") && n.what.contains(&short_from)),
        "no short dwell {short_from} in {notices:#?}"
    );
}
