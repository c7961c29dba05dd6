//! `sweep_gate` on synthetic sweeps following the pulsed convention: dwells
//! of 4 pulses, each switch instant 10 % of a PRI before the first transmit
//! instant of the new dwell. Sync and schedule timing must agree.

use lobeflow_blocks::dsp::rng::Rng;
use lobeflow_blocks::kinds::{pulse_framer, sweep_gate};
use lobeflow_blocks::{BlockError, BuildContext, Item, Notice, Outputs, Params, SampleChunk, Stamp, Sweep};
use num_complex::Complex32;

const RATE: f64 = 1e6;
const PRI: u64 = 500;
const LEAD: u64 = 50;
const PULSES_PER_DWELL: u64 = 4;
const FIRST_TX: u64 = 200;
/// The first sweep is the third pulse of its dwell; that dwell is lobe 1's.
const PHASE: u64 = 2;
const FIRST_LOBE: u64 = 1;

fn params(spec: &lobeflow_blocks::BlockSpec, set: &[(&str, &str)]) -> Params {
    spec.params_from_text(set).unwrap_or_else(|e| panic!("test parameters: {e}"))
}

fn tx(k: u64) -> u64 {
    FIRST_TX + k * PRI
}
fn dwell_of(k: u64) -> u64 {
    (k + PHASE) / PULSES_PER_DWELL
}
fn lobe_of_dwell(d: u64) -> usize {
    ((d + FIRST_LOBE) % 4) as usize
}
/// Switch instant starting dwell `d >= 1`.
fn switch_of(d: u64) -> u64 {
    tx(d * PULSES_PER_DWELL - PHASE) - LEAD
}

/// The capture: IQ = sample index, sync staircase with 4-sample ramps at switches.
fn capture(total: u64) -> SampleChunk {
    let levels = [-0.8, -0.8 + 1.6 / 3.0, -0.8 + 3.2 / 3.0, 0.8];
    let mut rng = Rng::new(17);
    let sync: Vec<f32> = (0..total)
        .map(|n| {
            let mut v = levels[lobe_of_dwell(0)];
            for d in 1.. {
                let s = switch_of(d) as f64;
                let frac = ((n as f64 - (s - 0.5)) / 4.0 + 0.5).clamp(0.0, 1.0);
                if frac <= 0.0 {
                    break;
                }
                v = levels[lobe_of_dwell(d - 1)] + (levels[lobe_of_dwell(d)] - levels[lobe_of_dwell(d - 1)]) * frac;
            }
            (v + 0.01 * rng.gaussian()) as f32
        })
        .collect();
    let iq: Vec<Complex32> = (0..total).map(|n| Complex32::new(n as f32, 0.0)).collect();
    SampleChunk { stamp: Stamp::new(0, RATE), iq: iq.into(), sync: Some(sync.into()), trigger: None }
}

fn sweeps_of(whole: &SampleChunk) -> Vec<Sweep> {
    let total = whole.len() as u64;
    (0..)
        .take_while(|&k| tx(k) < total)
        .map(|k| {
            let r = tx(k) as usize..tx(k + 1).min(total) as usize;
            let c = whole.slice(r);
            Sweep { stamp: c.stamp, pulse: k, iq: c.iq, sync: c.sync, blanked: 0, predicted: false, lobe: None }
        })
        .collect()
}

/// Labelled sweeps, notices-port items, report notices.
type Gated = (Vec<Sweep>, Vec<Notice>, Vec<Notice>);

fn run(set: &[(&str, &str)], sweeps: Vec<Sweep>) -> Result<Gated, BlockError> {
    let spec = sweep_gate::SPEC;
    let mut block = (spec.build)(&params(&spec, set), &BuildContext::default()).expect("builds");
    let mut out = Outputs::new(2);
    let (mut got, mut port, mut report) = (Vec::new(), Vec::new(), Vec::new());
    let mut collect = |out: &mut Outputs| {
        for (p, item) in out.drain() {
            match (p, item) {
                (0, Item::Sweep(s)) => got.push(s),
                (1, Item::Notice(n)) => port.push(n),
                other => panic!("unexpected {other:?}"),
            }
        }
        report.extend(out.drain_notices());
    };
    for s in sweeps {
        block.process(0, Item::Sweep(s), &mut out)?;
        collect(&mut out);
    }
    block.finish(&mut out)?;
    collect(&mut out);
    Ok((got, port, report))
}

/// What a correct gate hands on, for a guard below the switch lead.
fn expected(total: u64, first_dwell_start: u64) -> Vec<(u64, usize, usize, u64, u64)> {
    (0..)
        .take_while(|&k| tx(k) < total)
        .map(|k| {
            let d = dwell_of(k);
            let mut end = tx(k + 1).min(total);
            if dwell_of(k + 1) != d && switch_of(d + 1) < end {
                end = switch_of(d + 1);
            }
            let start = if d == 0 { first_dwell_start } else { switch_of(d) };
            (tx(k), (end - tx(k)) as usize, lobe_of_dwell(d), d, start)
        })
        .collect()
}

fn summary(got: &[Sweep]) -> Vec<(u64, usize, usize, u64, u64)> {
    got.iter()
        .map(|s| {
            let t = s.lobe.as_ref().expect("labelled");
            assert_eq!(s.iq[0].re as u64, s.stamp.index, "samples follow the stamp");
            assert_eq!(&*t.name, ["up", "right", "down", "left"][t.lobe]);
            (s.stamp.index, s.iq.len(), t.lobe, t.dwell, t.dwell_start)
        })
        .collect()
}

const SYNC_SET: [(&str, &str); 3] = [("guard", "30 us"), ("learn", "20000 samples"), ("min_dwell", "50 us")];

#[test]
fn sync_labels_truncates_at_switches_and_starts_mid_dwell() {
    let total = 40_000;
    let whole = capture(total);
    let (got, port, report) = run(&SYNC_SET, sweeps_of(&whole)).unwrap();
    let want = expected(total, FIRST_TX);
    assert_eq!(summary(&got), want);
    // The last sweep of a dwell is cut 50 samples before the next transmit instant.
    assert_eq!(got[1].iq.len(), (PRI - LEAD) as usize);
    assert_eq!(got[1].sync.as_ref().map(|s| s.len()), Some((PRI - LEAD) as usize));
    let switches: Vec<u64> = port.iter().filter(|n| n.what.starts_with("switch to")).map(|n| n.stamp.index).collect();
    assert_eq!(switches, (1..).map(switch_of).take_while(|&s| s < total).collect::<Vec<_>>());
    assert!(report.iter().all(|n| n.what.starts_with("learned sync levels")), "{report:?}");
}

#[test]
fn a_lead_cuts_that_much_more_before_each_switch() {
    let total = 40_000;
    let whole = capture(total);
    let set = [SYNC_SET[0], SYNC_SET[1], SYNC_SET[2], ("lead", "7 samples")];
    let (got, _, _) = run(&set, sweeps_of(&whole)).unwrap();
    let (plain, _, _) = run(&SYNC_SET, sweeps_of(&whole)).unwrap();
    assert_eq!(got.len(), plain.len());
    for (a, b) in got.iter().zip(&plain) {
        let cut_at_switch = b.iq.len() < (PRI as usize) && b.stamp.index + (b.iq.len() as u64) < total;
        let want = if cut_at_switch { b.iq.len() - 7 } else { b.iq.len() };
        assert_eq!(a.iq.len(), want, "sweep at {}", a.stamp.index);
    }
    assert_eq!(got[1].iq.len(), (PRI - LEAD - 7) as usize);
}

#[test]
fn schedule_in_pulses_agrees_with_sync() {
    let total = 40_000;
    let whole = capture(total);
    // Lobe 0 ("up") is dwell 3; its switch instant is at sample 5150.
    assert_eq!((lobe_of_dwell(3), switch_of(3)), (0, 5150));
    let set = [("timing", "schedule"), ("dwell", "4 pulses"), ("first_start", "5150 samples"), ("guard", "30 us")];
    let (got, _, report) = run(&set, sweeps_of(&whole)).unwrap();
    // The schedule puts the first dwell's start at 5150 - 3 * 2000 < 0: clamped to 0.
    assert_eq!(summary(&got), expected(total, 0));
    assert!(report.is_empty(), "{report:?}");
}

#[test]
fn sweeps_starting_inside_the_guard_are_dropped_and_counted() {
    let total = 40_000;
    let whole = capture(total);
    let mut set = SYNC_SET.to_vec();
    set.push(("guard", "60 us"));
    let (got, _, report) = run(&set, sweeps_of(&whole)).unwrap();
    let want: Vec<_> =
        expected(total, FIRST_TX).into_iter().filter(|w| !(w.3 > 0 && w.0 == switch_of(w.3) + LEAD)).collect();
    assert_eq!(summary(&got), want);
    let dropped = (1..).take_while(|&d| switch_of(d) + LEAD < total).count();
    let note = report.iter().find(|n| n.what.starts_with("dropped")).expect("summary notice");
    assert!(note.what.starts_with(&format!("dropped {dropped} sweeps")), "{}", note.what);
}

#[test]
fn framer_then_gate_with_a_trigger_channel() {
    let total = 30_000u64;
    let mut whole = capture(total);
    let mut trigger = vec![0.0f32; total as usize];
    for k in (0..).take_while(|&k| tx(k) < total) {
        trigger[tx(k) as usize..tx(k) as usize + 3].fill(1.0);
    }
    whole.trigger = Some(trigger.into());
    let fspec = pulse_framer::SPEC;
    let mut framer = (fspec.build)(
        &params(&fspec, &[("prf", "2 kHz"), ("timing", "trigger"), ("blank", "0 s")]),
        &BuildContext::default(),
    )
    .unwrap();
    let mut out = Outputs::new(1);
    let mut sweeps = Vec::new();
    for at in (0..total as usize).step_by(3000) {
        framer.process(0, Item::Samples(whole.slice(at..(at + 3000).min(total as usize))), &mut out).unwrap();
        sweeps.extend(out.drain().filter_map(|(_, i)| if let Item::Sweep(s) = i { Some(s) } else { None }));
    }
    framer.finish(&mut out).unwrap();
    sweeps.extend(out.drain().filter_map(|(_, i)| if let Item::Sweep(s) = i { Some(s) } else { None }));
    // Expected dwell given in pulses: the gate measures the PRI from the sweeps.
    let set = [("guard", "30 us"), ("learn", "20000 samples"), ("min_dwell", "0.1 pulses"), ("dwell", "4 pulses")];
    let (got, _, report) = run(&set, sweeps).unwrap();
    assert_eq!(summary(&got), expected(total, FIRST_TX));
    assert!(report.iter().all(|n| n.what.starts_with("learned sync levels")), "{report:?}");
}

#[test]
fn a_guard_before_the_range_window_blanks_the_head_instead_of_dropping() {
    // Guard 60 us after a switch 50 samples before the transmit instant: it
    // covers the first 10 samples of the dwell's first sweep, short of the
    // window starting at bin 100, so that sweep is kept with its head blanked.
    let total = 40_000;
    let whole = capture(total);
    let mut set = SYNC_SET.to_vec();
    set.extend([("guard", "60 us"), ("window_start", "100 bins"), ("window_end", "440 bins")]);
    let (got, _, report) = run(&set, sweeps_of(&whole)).unwrap();
    let want = expected(total, FIRST_TX);
    assert_eq!(got.len(), want.len(), "every sweep is kept: {report:?}");
    for (s, w) in got.iter().zip(&want) {
        let t = s.lobe.as_ref().unwrap();
        assert_eq!((s.stamp.index, s.iq.len(), t.lobe, t.dwell, t.dwell_start), *w);
        let first_of_dwell = t.dwell > 0 && s.stamp.index == switch_of(t.dwell) + LEAD;
        let blanked = if first_of_dwell { 10 } else { 0 };
        assert_eq!(s.blanked, blanked, "sweep at {}", s.stamp.index);
        assert!(s.iq[..blanked as usize].iter().all(|z| z.re == 0.0));
        assert_eq!(s.iq[blanked as usize].re as u64, s.stamp.index + blanked as u64);
    }
    assert!(!report.iter().any(|n| n.what.starts_with("dropped")), "{report:?}");
}

#[test]
fn a_switch_inside_the_range_window_drops_the_sweep_and_says_why() {
    // The window reaches bin 480; switches sit at bin 450 of the last sweep of
    // each dwell, so exactly those sweeps go, one per switch.
    let total = 40_000;
    let whole = capture(total);
    let mut set = SYNC_SET.to_vec();
    set.extend([("window_start", "20 bins"), ("window_end", "480 bins")]);
    let (got, _, report) = run(&set, sweeps_of(&whole)).unwrap();
    let want: Vec<_> =
        expected(total, FIRST_TX).into_iter().filter(|w| w.1 == PRI as usize || w.0 + w.1 as u64 >= total).collect();
    assert_eq!(summary(&got), want);
    let dropped = (1..).take_while(|&d| switch_of(d) < total).count();
    let note = report.iter().find(|n| n.what.starts_with("dropped")).expect("summary notice");
    assert!(
        note.what.starts_with(&format!("dropped {dropped} sweeps: a switch transient"))
            && note.what.contains("range window"),
        "{}",
        note.what
    );
}

/// Settings the stream makes impossible are refused before the run once
/// its rate (and, for times in pulses, its pulse interval) is known.
#[test]
fn start_refuses_times_the_stream_makes_impossible() {
    use lobeflow_blocks::{Facts, StreamFacts};
    let spec = &sweep_gate::SPEC;
    let build = |set: &[(&str, &str)]| {
        let mut all = vec![("timing", "schedule"), ("dwell", "2 ms")];
        all.extend_from_slice(set);
        (spec.build)(&params(spec, &all), &BuildContext::default()).expect("builds")
    };
    let rate_only = [StreamFacts::at_rate(RATE)];
    let with_pri = [StreamFacts { pri_samples: Some(PRI as f64), ..StreamFacts::at_rate(RATE) }];

    let mut fine = build(&[("window_start", "100 bins"), ("window_end", "300 bins")]);
    assert!(fine.start(&Facts::new(&rate_only)).is_ok());

    let mut backwards = build(&[("window_start", "300 bins"), ("window_end", "100 bins")]);
    let err = backwards.start(&Facts::new(&rate_only)).expect_err("window ends before it starts").to_string();
    assert!(err.contains("window_end (100 bins) must lie after window_start (300 bins)"), "{err}");

    // 2 ms is 2000 samples at 1 MS/s: a guard that long leaves nothing of the dwell.
    let mut swallowed = build(&[("guard", "2 ms")]);
    let err = swallowed.start(&Facts::new(&rate_only)).expect_err("guard as long as the dwell").to_string();
    assert!(err.contains("not shorter than the dwell"), "{err}");

    // Times in pulses are judged only once the pulse interval is known.
    let mut in_pulses = build(&[("dwell", "4 pulses"), ("guard", "4 pulses")]);
    assert!(in_pulses.start(&Facts::new(&rate_only)).is_ok());
    let err = in_pulses.start(&Facts::new(&with_pri)).expect_err("guard of a whole dwell").to_string();
    assert!(err.contains("not shorter than the dwell"), "{err}");
}
