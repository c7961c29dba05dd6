//! `pulse_framer` against synthetic pulse trains whose transmit instants are
//! known: trigger, leakage and schedule timing, PRF jitter, a missing pulse,
//! blanking, chunking.

use lobeflow_blocks::dsp::rng::Rng;
use lobeflow_blocks::kinds::pulse_framer;
use lobeflow_blocks::{BlockError, BuildContext, Item, Notice, Outputs, Params, RawValue, SampleChunk, Stamp, Sweep};
use num_complex::Complex32;

const RATE: f64 = 1e6;
const PRI: u64 = 500; // 2 kHz at 1 MS/s
const PULSE_LEN: usize = 4;

fn params(set: &[(&str, &str)]) -> Params {
    let mut p = Params::new();
    for ps in pulse_framer::SPEC.params {
        let text = set.iter().rev().find(|(n, _)| *n == ps.name).map(|(_, v)| *v).or(ps.default);
        if let Some(t) = text {
            p.insert(ps.name, ps.parse(&RawValue::from_text(t)).expect("test parameter parses"));
        }
    }
    p
}

/// Transmit instants from `first`, PRI 500 with +-`jitter` samples, up to `total`.
fn instants(first: u64, jitter: f64, total: u64, seed: u64) -> Vec<u64> {
    let mut rng = Rng::new(seed);
    let mut t = Vec::new();
    let mut at = first;
    while at < total {
        t.push(at);
        at = (at as f64 + PRI as f64 + jitter * (2.0 * rng.uniform() - 1.0)).round() as u64;
    }
    t
}

/// Unit-power noise, a 40 dB leakage pulse and a weak echo at each transmitted
/// instant, a trigger channel high during the pulse, a sync channel = index.
fn capture(transmitted: &[u64], total: u64, seed: u64) -> SampleChunk {
    let mut rng = Rng::new(seed);
    let mut iq: Vec<Complex32> = (0..total).map(|_| rng.complex_gaussian(1.0)).collect();
    let mut trigger = vec![0.0f32; total as usize];
    for &t in transmitted {
        for k in 0..PULSE_LEN {
            let n = t as usize + k;
            if n < iq.len() {
                iq[n] += Complex32::new(100.0, 0.0);
                trigger[n] = 1.0;
            }
            if n + 120 < iq.len() {
                iq[n + 120] += Complex32::new(0.0, 3.0);
            }
        }
    }
    let sync: Vec<f32> = (0..total).map(|n| n as f32).collect();
    SampleChunk { stamp: Stamp::new(0, RATE), iq: iq.into(), sync: Some(sync.into()), trigger: Some(trigger.into()) }
}

fn run(set: &[(&str, &str)], whole: &SampleChunk, sizes: &[usize]) -> Result<(Vec<Sweep>, Vec<Notice>), BlockError> {
    run_chunks(set, whole, sizes, |c| c)
}

/// A copy of `c` in buffers of its own: the framer is then its only reader.
fn owned(c: SampleChunk) -> SampleChunk {
    SampleChunk {
        stamp: c.stamp,
        iq: c.iq.to_vec().into(),
        sync: c.sync.map(|s| s.to_vec().into()),
        trigger: c.trigger.map(|s| s.to_vec().into()),
    }
}

/// Feed `whole` in chunks of `sizes` (cycled), each passed through `prepare`.
fn run_chunks(
    set: &[(&str, &str)],
    whole: &SampleChunk,
    sizes: &[usize],
    prepare: impl Fn(SampleChunk) -> SampleChunk,
) -> Result<(Vec<Sweep>, Vec<Notice>), BlockError> {
    let mut block = (pulse_framer::SPEC.build)(&params(set), &BuildContext::default()).expect("builds");
    let mut out = Outputs::new(1);
    let (mut sweeps, mut notices) = (Vec::new(), Vec::new());
    let mut collect = |out: &mut Outputs| {
        for (_, item) in out.drain() {
            match item {
                Item::Sweep(s) => sweeps.push(s),
                other => panic!("unexpected {other:?}"),
            }
        }
        notices.extend(out.drain_notices());
    };
    let (mut at, mut k) = (0, 0);
    while at < whole.len() {
        let n = sizes[k % sizes.len()].min(whole.len() - at);
        block.process(0, Item::Samples(prepare(whole.slice(at..at + n))), &mut out)?;
        collect(&mut out);
        at += n;
        k += 1;
    }
    block.finish(&mut out)?;
    collect(&mut out);
    Ok((sweeps, notices))
}

/// Sweeps must tile the capture from the first instant on, with the right samples.
fn check_tiling(sweeps: &[Sweep], whole: &SampleChunk, blank: usize) {
    for (i, s) in sweeps.iter().enumerate() {
        let a = s.stamp.index as usize;
        let end = sweeps.get(i + 1).map_or(whole.len(), |n| n.stamp.index as usize);
        assert_eq!(s.iq.len(), end - a, "sweep {i} runs to the next instant");
        let blanked = s.blanked as usize;
        assert_eq!(blanked, blank.min(s.iq.len()));
        assert!(s.iq[..blanked].iter().all(|x| x.norm_sqr() == 0.0), "sweep {i} blanked");
        assert_eq!(&s.iq[blanked..], &whole.iq[a + blanked..end], "sweep {i} samples");
        let sync = s.sync.as_ref().expect("sync span carried");
        assert_eq!(&sync[..], &whole.sync.as_ref().unwrap()[a..end], "sweep {i} sync span");
        assert_eq!(s.pulse, i as u64);
    }
}

#[test]
fn leakage_with_jitter_and_a_missing_pulse() {
    let total = 30_000;
    let truth = instants(137, 6.0, total, 1);
    let mut sent = truth.clone();
    let missing = sent.remove(20);
    let whole = capture(&sent, total, 2);
    let (sweeps, notices) = run(&[("prf", "2 kHz"), ("blank", "4 us")], &whole, &[4096]).unwrap();
    let stamps: Vec<u64> = sweeps.iter().map(|s| s.stamp.index).collect();
    let predicted = truth[19] + PRI;
    let want: Vec<u64> = truth.iter().map(|&t| if t == missing { predicted } else { t }).collect();
    assert_eq!(stamps, want);
    let flagged: Vec<u64> = sweeps.iter().filter(|s| s.predicted).map(|s| s.pulse).collect();
    assert_eq!(flagged, vec![20]);
    check_tiling(&sweeps, &whole, 4);
    assert_eq!(notices.len(), 1, "{notices:?}");
    assert_eq!(notices[0].stamp.index, predicted);
    assert!(notices[0].what.contains(&format!("1 missing pulse(s) from sample {predicted}")), "{}", notices[0].what);
}

#[test]
fn trigger_channel_with_jitter() {
    let total = 20_000;
    let truth = instants(41, 10.0, total, 3);
    let whole = capture(&truth, total, 4);
    let (sweeps, notices) = run(&[("prf", "2 kHz"), ("timing", "trigger"), ("blank", "0 s")], &whole, &[1000]).unwrap();
    assert_eq!(sweeps.iter().map(|s| s.stamp.index).collect::<Vec<_>>(), truth);
    check_tiling(&sweeps, &whole, 0);
    assert!(notices.is_empty(), "{notices:?}");
    assert!(sweeps.iter().all(|s| !s.predicted));
}

#[test]
fn schedule_from_prf_and_offset() {
    let total = 10_000;
    // Instants at 0.3 ms + k/2 kHz: samples 300, 800, ...; the first before the
    // capture start (-200) is not a sweep.
    let truth: Vec<u64> = (0..).map(|k| 300 + k * PRI).take_while(|&t| t < total).collect();
    let whole = capture(&truth, total, 5);
    let (sweeps, _) =
        run(&[("prf", "2 kHz"), ("timing", "schedule"), ("offset", "-0.2 ms"), ("blank", "2 samples")], &whole, &[333])
            .unwrap();
    assert_eq!(sweeps.iter().map(|s| s.stamp.index).collect::<Vec<_>>(), truth);
    check_tiling(&sweeps, &whole, 2);
}

#[test]
fn chunking_does_not_change_sweeps_and_one_chunk_is_zero_copy() {
    let total = 15_000;
    let truth = instants(260, 4.0, total, 7);
    let whole = capture(&truth, total, 8);
    let set = [("prf", "2 kHz"), ("blank", "0 s")];
    let (a, _) = run(&set, &whole, &[total as usize]).unwrap();
    for s in &a {
        let a0 = s.stamp.index as usize;
        assert!(std::ptr::eq(s.iq.as_ptr(), whole.iq[a0..].as_ptr()), "sweep at {a0} shares the capture buffer");
    }
    for sizes in [&[1usize, 499, 501][..], &[64], &[4095, 3]] {
        let (b, _) = run(&set, &whole, sizes).unwrap();
        assert_eq!(a.len(), b.len());
        for (x, y) in a.iter().zip(&b) {
            assert_eq!((x.stamp, x.pulse, x.predicted, x.blanked), (y.stamp, y.pulse, y.predicted, y.blanked));
            assert_eq!(&x.iq[..], &y.iq[..]);
        }
    }
    assert_eq!(a.iter().map(|s| s.stamp.index).collect::<Vec<_>>(), truth);
}

#[test]
fn leakage_blanked_in_place_matches_blanked_copies() {
    // A chunk the framer alone reads is blanked in place; one shared with
    // another reader is copied first. Both give the same sweeps, and the
    // shared capture is left as it was.
    let total = 30_000;
    let mut sent = instants(90, 6.0, total, 11);
    sent.remove(31); // a predicted instant too
    let whole = capture(&sent, total, 12);
    let before = whole.iq.to_vec();
    let set = [("prf", "2 kHz"), ("blank", "6 us")];
    for sizes in [&[4096usize][..], &[1, 499, 501], &[250, 7, 4000]] {
        let (copied, _) = run_chunks(&set, &whole, sizes, |c| c).unwrap();
        let buffers = std::cell::RefCell::new(Vec::new());
        let (in_place, _) = run_chunks(&set, &whole, sizes, |c| {
            let c = owned(c);
            buffers.borrow_mut().push(c.iq.as_ptr_range());
            c
        })
        .unwrap();
        if sizes == [4096] {
            // No copy for sweeps inside one chunk.
            let buffers = buffers.borrow();
            let shared = in_place.iter().filter(|s| buffers.iter().any(|b| b.contains(&s.iq.as_ptr()))).count();
            assert!(shared * 10 > in_place.len() * 8, "{shared} of {} sweeps in the chunks' buffers", in_place.len());
        }
        assert_eq!(copied.len(), in_place.len());
        for (x, y) in copied.iter().zip(&in_place) {
            assert_eq!((x.stamp, x.pulse, x.predicted, x.blanked), (y.stamp, y.pulse, y.predicted, y.blanked));
            assert_eq!(&x.iq[..], &y.iq[..], "sweep {}", x.pulse);
        }
        check_tiling(&in_place, &whole, 6);
    }
    assert_eq!(&whole.iq[..], &before[..], "a shared chunk is never written");
}

#[test]
fn no_pulses_or_no_trigger_is_a_clear_error() {
    let whole = capture(&[], 40_000, 9);
    let e = run(&[("prf", "2 kHz")], &whole, &[4096]).unwrap_err();
    assert!(e.message.contains("no transmit instants found in the first"), "{e}");
    let short = capture(&[], 3000, 10);
    let e = run(&[("prf", "2 kHz")], &short, &[4096]).unwrap_err();
    assert!(e.message.contains("no transmit instants found in the first 3000 samples"), "{e}");
    let mut no_trigger = capture(&[100, 600], 2000, 11);
    no_trigger.trigger = None;
    let e = run(&[("prf", "2 kHz"), ("timing", "trigger")], &no_trigger, &[4096]).unwrap_err();
    assert!(e.message.contains("no trigger channel"), "{e}");
}
