//! `lobe_gate` against synthetic sync staircases and schedules whose true
//! switch instants are known. Each IQ sample carries its own absolute index,
//! so the tests check exactly which samples came out under which lobe.
//!
//! Outside reference: the schedule tests compute the lobe of each sample
//! straight from the stated rule `floor((t - t0)/dwell) mod N` in seconds,
//! independently of the block's sample arithmetic.

use lobeflow_blocks::dsp::rng::Rng;
use lobeflow_blocks::kinds::lobe_gate;
use lobeflow_blocks::{BlockSpec, BuildContext, Item, Notice, Outputs, Params, SampleChunk, Stamp};
use num_complex::Complex32;

fn params(spec: &BlockSpec, set: &[(&str, &str)]) -> Params {
    spec.params_from_text(set).unwrap_or_else(|e| panic!("test parameters: {e}"))
}

/// A staircase sync: `switches[k]` is the exact instant where the value
/// crosses midway into `lobes_after[k]`; a 4-sample linear ramp around it.
struct Staircase {
    levels: Vec<f64>,
    first_lobe: usize,
    switches: Vec<(u64, usize)>,
}

impl Staircase {
    fn regular(
        n_lobes: usize,
        first_lobe: usize,
        first_switch: u64,
        dwell: u64,
        jitter: f64,
        total: u64,
        seed: u64,
    ) -> Staircase {
        let mut rng = Rng::new(seed);
        let levels = (0..n_lobes).map(|i| -0.8 + 1.6 * i as f64 / (n_lobes - 1) as f64).collect();
        let mut switches = Vec::new();
        let (mut at, mut lobe) = (first_switch, first_lobe);
        while at < total {
            lobe = (lobe + 1) % n_lobes;
            switches.push((at, lobe));
            at = (at as f64 + dwell as f64 + jitter * (2.0 * rng.uniform() - 1.0)).round() as u64;
        }
        Staircase { levels, first_lobe, switches }
    }

    fn lobe_at(&self, n: u64) -> usize {
        self.switches.iter().take_while(|s| s.0 <= n).last().map_or(self.first_lobe, |s| s.1)
    }

    fn values(&self, total: u64, seed: u64) -> Vec<f32> {
        let mut rng = Rng::new(seed);
        const RAMP: f64 = 4.0;
        (0..total)
            .map(|n| {
                let mut v = self.levels[self.first_lobe];
                let mut prev = self.first_lobe;
                for &(s, lobe) in &self.switches {
                    let frac = ((n as f64 - (s as f64 - 0.5)) / RAMP + 0.5).clamp(0.0, 1.0);
                    if frac <= 0.0 {
                        break;
                    }
                    v = self.levels[prev] + (self.levels[lobe] - self.levels[prev]) * frac;
                    prev = lobe;
                }
                (v + 0.01 * rng.gaussian()) as f32
            })
            .collect()
    }
}

fn stream(total: u64, rate: f64, sync: Option<&[f32]>) -> SampleChunk {
    let iq: Vec<Complex32> = (0..total).map(|n| Complex32::new(n as f32, 0.0)).collect();
    SampleChunk { stamp: Stamp::new(0, rate), iq: iq.into(), sync: sync.map(|s| s.to_vec().into()), trigger: None }
}

/// Every sample that came out: (index, lobe, dwell, dwell_start, last sample of a dwell_end segment).
type Labelled = Vec<(u64, usize, u64, u64, bool)>;

struct Run {
    labelled: Labelled,
    port_notices: Vec<Notice>,
    report: Vec<Notice>,
}

fn run(set: &[(&str, &str)], whole: &SampleChunk, chunk_sizes: &[usize]) -> Result<Run, lobeflow_blocks::BlockError> {
    let spec = lobe_gate::SPEC;
    let ctx = BuildContext { name: "gate".into(), ..Default::default() };
    let mut block = (spec.build)(&params(&spec, set), &ctx).expect("builds");
    let mut out = Outputs::new(2);
    let mut r = Run { labelled: Vec::new(), port_notices: Vec::new(), report: Vec::new() };
    let collect = |out: &mut Outputs, r: &mut Run| {
        for (port, item) in out.drain() {
            match (port, item) {
                (0, Item::Segment(seg)) => {
                    let n = seg.chunk.len();
                    assert!(n > 0, "empty segment");
                    for (k, x) in seg.chunk.iq.iter().enumerate() {
                        assert_eq!(x.re as u64, seg.chunk.stamp.index + k as u64, "stamp and samples agree");
                        let last = seg.dwell_end && k + 1 == n;
                        r.labelled.push((x.re as u64, seg.tag.lobe, seg.tag.dwell, seg.tag.dwell_start, last));
                    }
                }
                (1, Item::Notice(n)) => r.port_notices.push(n),
                other => panic!("unexpected output {other:?}"),
            }
        }
        r.report.extend(out.drain_notices());
    };
    let (mut at, mut k) = (0usize, 0usize);
    while at < whole.len() {
        let n = chunk_sizes[k % chunk_sizes.len()].min(whole.len() - at);
        block.process(0, Item::Samples(whole.slice(at..at + n)), &mut out)?;
        collect(&mut out, &mut r);
        at += n;
        k += 1;
    }
    block.finish(&mut out)?;
    collect(&mut out, &mut r);
    Ok(r)
}

/// What a correct gate outputs for known switches and a guard of `guard` samples.
fn expected(total: u64, first_lobe: usize, switches: &[(u64, usize)], guard: u64) -> Labelled {
    let mut want = Vec::new();
    let (mut lobe, mut dwell, mut start, mut guard_end) = (first_lobe, 0u64, 0u64, 0u64);
    let mut next = 0;
    for n in 0..total {
        if next < switches.len() && switches[next].0 == n {
            lobe = switches[next].1;
            dwell += 1;
            start = n;
            guard_end = n + guard;
            next += 1;
        }
        if n >= guard_end {
            want.push((n, lobe, dwell, start, false));
        }
    }
    // The last sample emitted in each dwell closes it.
    for i in 0..want.len() {
        if i + 1 == want.len() || want[i + 1].2 != want[i].2 {
            want[i].4 = true;
        }
    }
    want
}

/// Compare labellings, printing only the first difference.
fn assert_same(got: &Labelled, want: &Labelled) {
    if let Some(i) = (0..got.len().min(want.len())).find(|&i| got[i] != want[i]) {
        panic!("first difference at output {i}: got {:?}, want {:?}", got[i], want[i]);
    }
    assert_eq!(got.len(), want.len(), "same samples, different count");
}

const SYNC_SET: [(&str, &str); 5] = [
    ("guard", "20 samples"),
    ("min_dwell", "40 samples"),
    ("learn", "12000 samples"),
    ("hysteresis", "0.2"),
    ("tolerance", "0.25"),
];

fn irregular(r: &Run) -> Vec<&Notice> {
    r.report.iter().filter(|n| !n.what.starts_with("learned sync levels")).collect()
}

#[test]
fn four_lobe_staircase_starting_mid_dwell_with_jittered_edges() {
    let total = 40_000;
    let st = Staircase::regular(4, 2, 700, 2000, 30.0, total, 11);
    let whole = stream(total, 1e6, Some(&st.values(total, 12)));
    let r = run(&SYNC_SET, &whole, &[4096]).unwrap();
    assert_eq!(st.lobe_at(0), 2);
    let want = expected(total, 2, &st.switches, 20);
    assert_same(&r.labelled, &want);
    assert!(irregular(&r).is_empty(), "{:?}", r.report);
    let switches: Vec<u64> =
        r.port_notices.iter().filter(|n| n.what.starts_with("switch to")).map(|n| n.stamp.index).collect();
    assert_eq!(switches, st.switches.iter().map(|s| s.0).collect::<Vec<_>>());
}

#[test]
fn two_lobe_staircase() {
    let total = 30_000;
    let st = Staircase::regular(2, 0, 1234, 3000, 50.0, total, 21);
    let whole = stream(total, 1e6, Some(&st.values(total, 22)));
    let mut set = SYNC_SET.to_vec();
    set.push(("lobes", "right,left"));
    set.push(("guard", "7 samples"));
    let r = run(&set, &whole, &[5000]).unwrap();
    assert_same(&r.labelled, &expected(total, 0, &st.switches, 7));
}

#[test]
fn chunk_boundaries_do_not_change_the_output() {
    let total = 25_000;
    let st = Staircase::regular(4, 1, 333, 1500, 40.0, total, 31);
    let whole = stream(total, 1e6, Some(&st.values(total, 32)));
    let a = run(&SYNC_SET, &whole, &[25_000]).unwrap();
    for sizes in [&[1usize, 2, 3, 997][..], &[4096], &[19, 2000, 5]] {
        let b = run(&SYNC_SET, &whole, sizes).unwrap();
        assert_same(&a.labelled, &b.labelled);
        assert_eq!(a.port_notices, b.port_notices, "chunk sizes {sizes:?}");
    }
    assert_same(&a.labelled, &expected(total, 1, &st.switches, 20));
}

#[test]
fn missing_transition_is_reported_with_its_offset() {
    let total = 40_000;
    let mut st = Staircase::regular(4, 0, 1000, 2000, 0.0, total, 41);
    // Drop the switch into lobe 2 at 3000: lobe 1 holds on, then lobe 3 follows at 5000.
    let gone = st.switches.iter().position(|s| s.0 == 3000).unwrap();
    assert_eq!(st.switches[gone].1, 2);
    st.switches.remove(gone);
    let whole = stream(total, 1e6, Some(&st.values(total, 42)));
    let mut set = SYNC_SET.to_vec();
    set.push(("dwell", "2000 samples"));
    let r = run(&set, &whole, &[3000]).unwrap();
    assert_same(&r.labelled, &expected(total, 0, &st.switches, 20));
    let notes = irregular(&r);
    let order: Vec<_> = notes.iter().filter(|n| n.what.contains("lobe order broken")).collect();
    assert_eq!(order.len(), 1, "{notes:?}");
    assert_eq!(order[0].stamp.index, 5000);
    assert!(order[0].what.contains("sample 5000") && order[0].what.contains("skipped down"), "{}", order[0].what);
    let long: Vec<_> = notes.iter().filter(|n| n.what.starts_with("long dwell")).collect();
    assert_eq!(long.len(), 1, "{notes:?}");
    assert_eq!(long[0].stamp.index, 1000);
    assert!(long[0].what.contains("4000 samples"), "{}", long[0].what);
    // Same irregularities on the notices port, for timelines.
    assert!(r.port_notices.iter().any(|n| n.what == order[0].what));
}

#[test]
fn stuck_and_stray_sync_are_reported() {
    let total = 60_000;
    let st = Staircase::regular(4, 0, 1000, 2000, 0.0, total, 51);
    let mut sync = st.values(total, 52);
    // Stuck: from 21000 to 35000 the sync stays on lobe 2's level (lobe 2 from 19000; the
    // regular switch at 35000 is into lobe 2 again, so the next change is at 37000).
    let hold = sync[20_000];
    for v in &mut sync[21_000..35_000] {
        *v = hold;
    }
    // Stray: a value far above every level for 300 samples inside a dwell of lobe 3.
    for v in &mut sync[45_500..45_800] {
        *v = 1.5;
    }
    let whole = stream(total, 1e6, Some(&sync));
    let r = run(&SYNC_SET, &whole, &[4096]).unwrap();
    let notes = irregular(&r);
    let stuck: Vec<_> = notes.iter().filter(|n| n.what.starts_with("sync stuck")).collect();
    assert_eq!(stuck.len(), 1, "{notes:?}");
    assert_eq!(stuck[0].stamp.index, 19_000);
    let stray: Vec<_> = notes.iter().filter(|n| n.what.contains("matches no lobe")).collect();
    assert_eq!(stray.len(), 1, "{notes:?}");
    assert_eq!(stray[0].stamp.index, 45_500);
}

#[test]
fn flat_or_too_few_levels_is_a_clear_error() {
    let mut rng = Rng::new(61);
    let flat: Vec<f32> = (0..20_000).map(|_| (0.2 + 0.01 * rng.gaussian()) as f32).collect();
    let e = run(&SYNC_SET, &stream(20_000, 1e6, Some(&flat)), &[4096]).err().expect("flat sync fails");
    assert!(e.message.contains("sync channel is flat"), "{e}");
    let st = Staircase::regular(2, 0, 500, 1000, 0.0, 20_000, 62);
    let two = st.values(20_000, 63);
    let e = run(&SYNC_SET, &stream(20_000, 1e6, Some(&two)), &[4096]).err().expect("two levels for four lobes fails");
    assert!(e.message.contains("found 2 sync levels") && e.message.contains("expected 4"), "{e}");
    let e = run(&SYNC_SET, &stream(20_000, 1e6, None), &[4096]).err().expect("no sync channel fails");
    assert!(e.message.contains("no sync channel") && e.at_sample == Some(0), "{e}");
}

#[test]
fn short_capture_learns_from_what_there_is() {
    let total = 5000;
    let st = Staircase::regular(2, 1, 1500, 1000, 0.0, total, 71);
    let whole = stream(total, 1e6, Some(&st.values(total, 72)));
    let mut set = SYNC_SET.to_vec();
    set.push(("lobes", "a,b"));
    let r = run(&set, &whole, &[700]).unwrap();
    assert_same(&r.labelled, &expected(total, 1, &st.switches, 20));
}

/// Lobe of the sample at `n` from the schedule rule, in seconds.
fn scheduled_dwell(n: u64, rate: f64, t0: f64, dwell: f64) -> i64 {
    ((n as f64 / rate - t0) / dwell).floor() as i64
}

#[test]
fn schedule_with_offset_start_and_negative_times() {
    let (rate, t0, dwell, total) = (10_000.0, 0.01234, 0.00505, 3000u64);
    let set = [("timing", "schedule"), ("first_start", "12.34 ms"), ("dwell", "5.05 ms"), ("guard", "3 samples")];
    let whole = stream(total, rate, None);
    let r = run(&set, &whole, &[256, 1, 77]).unwrap();
    let first = scheduled_dwell(0, rate, t0, dwell);
    assert_eq!(first, -3, "sample 0 lies three dwells before the first lobe start");
    let mut switches = Vec::new();
    for n in 1..total {
        let m = scheduled_dwell(n, rate, t0, dwell);
        if m != scheduled_dwell(n - 1, rate, t0, dwell) {
            switches.push((n, m.rem_euclid(4) as usize));
        }
    }
    assert_eq!(switches.iter().find(|s| s.1 == 0), Some(&(124, 0)), "lobe 0 starts at the first sample after 12.34 ms");
    // Sample 0's dwell began at -28.1 samples: its guard has passed, dwell_start clamps to 0.
    let want = expected(total, first.rem_euclid(4) as usize, &switches, 3);
    assert_same(&r.labelled, &want);
}

#[test]
fn schedule_guard_reaching_past_the_capture_start() {
    // The dwell holding sample 0 began 2 samples before it; a 5-sample guard cuts samples 0..3.
    let set =
        [("timing", "schedule"), ("first_start", "-2 ms"), ("dwell", "10 ms"), ("guard", "5 ms"), ("lobes", "r,l")];
    let r = run(&set, &stream(40, 1000.0, None), &[8]).unwrap();
    assert_eq!(r.labelled.first().map(|l| (l.0, l.1, l.3)), Some((3, 0, 0)));
    assert_eq!(r.labelled.iter().filter(|l| l.1 == 1).map(|l| l.0).next(), Some(13));
    let e =
        (lobe_gate::SPEC.build)(&params(&lobe_gate::SPEC, &[("timing", "schedule")]), &BuildContext::default()).err();
    assert!(e.is_some_and(|e| e.to_string().contains("needs a 'dwell'")));
}

/// Before the run the gate names its lobes for the blocks downstream, and
/// refuses sync timing on a capture known to have no sync channel.
#[test]
fn start_reports_the_lobes_and_refuses_sync_timing_without_a_sync_channel() {
    use lobeflow_blocks::{Channels, Facts, StreamFacts};
    let spec = &lobe_gate::SPEC;
    let mut gate = (spec.build)(&params(spec, &[("lobes", "east,west")]), &BuildContext::default()).expect("builds");
    let with_sync =
        [StreamFacts { channels: Some(Channels { sync: true, trigger: false }), ..StreamFacts::at_rate(48_000.0) }];
    let out = gate.start(&Facts::new(&with_sync)).expect("sync channel present");
    let names: Vec<&str> = out.lobes.as_deref().unwrap_or(&[]).iter().map(|l| &**l).collect();
    assert_eq!(names, ["east", "west"]);
    assert_eq!(out.rate, Some(48_000.0));

    let without_sync = [StreamFacts { channels: Some(Channels::default()), ..StreamFacts::at_rate(48_000.0) }];
    let err = gate.start(&Facts::new(&without_sync)).expect_err("no sync channel").to_string();
    assert!(err.contains("'timing' is 'sync'"), "{err}");
}

/// Timing 'signal': the lobe names come from a capture label handed on in
/// the stream facts; without one (and without `known_lobe`) the gate
/// refuses to start, naming both ways to say which lobe is which.
#[test]
fn signal_timing_names_the_lobes_from_a_capture_label() {
    use lobeflow_blocks::{Facts, LabelledSpan, StreamFacts};
    let (rate, dwell, first) = (64_000.0, 160.0, 57.0);
    // west is 4 dB stronger than east; a 6-sample transient at each switch
    let dwell_of = |n: u64| ((n as f64 - first) / dwell).floor() as i64;
    let is_west = |n: u64| dwell_of(n).rem_euclid(2) == 1;
    let mut rng = Rng::new(31);
    let total = 96_000u64;
    let iq: Vec<Complex32> = (0..total)
        .map(|n| {
            let amp = if is_west(n) { 1.58 } else { 1.0 };
            let since = n as f64 - (first + dwell_of(n) as f64 * dwell);
            let spike = if since < 6.0 { 5.0 } else { 0.0 };
            let noise = 0.7 + spike;
            Complex32::new((amp + noise * rng.gaussian()) as f32, (noise * rng.gaussian()) as f32)
        })
        .collect();
    let chunk = SampleChunk { stamp: Stamp::new(0, rate), iq: iq.into(), sync: None, trigger: None };
    let spec = &lobe_gate::SPEC;
    let set = [("lobes", "east,west"), ("timing", "signal"), ("guard", "0.2 ms"), ("learn", "0.5 s")];
    let mut gate =
        (spec.build)(&params(spec, &set), &BuildContext { name: "gate".into(), ..Default::default() }).expect("builds");
    let unlabelled = [StreamFacts::at_rate(rate)];
    let err = gate.start(&Facts::new(&unlabelled)).expect_err("nothing names a lobe").to_string();
    assert!(err.contains("'timing' is signal") && err.contains("known_lobe and known_at"), "{err}");
    // a dwell of west labelled as a logger would mark it: dwell 3 starts at 57 + 3 * 160
    let label = LabelledSpan { start_s: 537.0 / rate, length_s: Some(160.0 / rate), label: "West".into() };
    let labelled = [StreamFacts { marks: Some(vec![label].into()), ..StreamFacts::at_rate(rate) }];
    gate.start(&Facts::new(&labelled)).expect("the label names a lobe");
    let mut out = Outputs::new(2);
    let (mut right, mut wrong) = (0u64, 0u64);
    let mut tally = |out: &mut Outputs| {
        for (_, item) in out.drain() {
            if let Item::Segment(seg) = item {
                let first = seg.chunk.stamp.index;
                for n in first..first + seg.chunk.len() as u64 {
                    if (seg.tag.lobe == 1) == is_west(n) { right += 1 } else { wrong += 1 }
                }
            }
        }
    };
    for at in (0..total as usize).step_by(4000) {
        gate.process(0, Item::Samples(chunk.slice(at..at + 4000)), &mut out).expect("runs");
        tally(&mut out);
    }
    gate.finish(&mut out).expect("finishes");
    tally(&mut out);
    // every sample handed on has its true lobe (a few at the switches at most)
    assert!(right > total * 8 / 10 && wrong * 1000 < right, "{right} right, {wrong} wrong");
}
