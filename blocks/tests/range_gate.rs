//! `range_gate` on synthesized sweeps: sub-bin range, the derived spread
//! formula against a Monte Carlo of the same estimator, coherent bias,
//! acquisition, following and the noise-floor check.

#[path = "common/integrators.rs"]
mod common;

use common::*;
use lobeflow_blocks::dsp::rng::Rng;
use lobeflow_blocks::kinds::range_gate::SPEC;
use lobeflow_blocks::{Cell, DwellRecord, Item, Stamp, Sweep, range_bin_m};
use num_complex::Complex32;

const RATE: f64 = 4e6;

/// One echo per sweep: `echo(dwell, pulse)` gives (delay in bins, box length, amplitude, phase).
struct Scene {
    sweep_len: usize,
    pulses: usize,
    dwells: u64,
    noise: [f64; 2],
}

fn sweeps(scene: &Scene, seed: u64, mut echo: impl FnMut(u64, usize, &mut Rng) -> (f64, f64, f64, f64)) -> Vec<Item> {
    let mut rng = Rng::new(seed);
    let mut items = Vec::new();
    for d in 0..scene.dwells {
        let lobe = (d % 2) as usize;
        let dwell_start = d * (scene.pulses * scene.sweep_len) as u64;
        for p in 0..scene.pulses {
            let (delay, len, amp, phase) = echo(d, p, &mut rng);
            let mut iq = noise(&mut rng, scene.sweep_len, scene.noise[lobe]);
            let first = delay.floor().max(0.0) as usize;
            for (n, x) in iq.iter_mut().enumerate().skip(first).take(len.ceil() as usize + 1) {
                let w = box_weight(n, delay, len) * amp;
                *x += Complex32::from_polar(w as f32, phase as f32);
            }
            let index = dwell_start + (p * scene.sweep_len) as u64;
            items.push(Item::Sweep(Sweep {
                stamp: Stamp::new(index, RATE),
                pulse: d * scene.pulses as u64 + p as u64,
                iq: iq.into(),
                sync: None,
                blanked: 0,
                predicted: false,
                lobe: Some(tag(lobe, d, dwell_start)),
            }));
        }
    }
    items
}

fn dwells(run: &Run) -> Vec<DwellRecord> {
    run.items.iter().filter_map(|i| if let Item::Dwell(d) = i { Some(d.clone()) } else { None }).collect()
}

fn variance(v: &[f64]) -> f64 {
    let m = v.iter().sum::<f64>() / v.len() as f64;
    v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (v.len() - 1) as f64
}

#[test]
fn centroid_range_of_fractional_box_echoes_within_0_15_bin_rms() {
    // 4-sample box echoes at 100.0..101.0 bins, per-sample SNR 10 dB, 8 pulses per dwell.
    let scene = Scene { sweep_len: 300, pulses: 8, dwells: 60, noise: [1.0, 1.0] };
    let delays: Vec<f64> = (0..60).map(|d| 100.0 + (d as f64 * 0.618_034).fract()).collect();
    let items =
        sweeps(&scene, 11, |d, _, rng| (delays[d as usize], 4.0, 10f64.sqrt(), rng.uniform() * std::f64::consts::TAU));
    let mut block = build(&SPEC, &[("gate_start", "100 bins"), ("gate_width", "5 bins"), ("pulse", "4 samples")]);
    let out = dwells(&run(block.as_mut(), items));
    assert_eq!(out.len(), 60);
    let bin = range_bin_m(RATE);
    let sq: f64 = out.iter().zip(&delays).map(|(r, d)| (r.range_m.expect("range") / bin - d).powi(2)).sum();
    let rms = (sq / out.len() as f64).sqrt();
    eprintln!("measured: range rms {rms:.4} bins");
    assert!(rms < 0.15, "range rms {rms} bins");
    // The mid stamp is the middle of the used gate samples; used counts pulses.
    assert_eq!(out[0].used, 8);
    assert_eq!(out[0].mid.index, (100 + 7 * 300 + 104) / 2);
    assert!((out[0].noise_power - 1.0).abs() < 0.15);
}

#[test]
fn noncoherent_spread_matches_the_first_order_formula_by_monte_carlo() {
    // One-bin gate, E = 16 per pulse, N = 4; docs/derivations.md §4: var(ln A) = (G/E^2 + 2/E)/(4N).
    // A wide noise region keeps the noise estimate's own spread negligible.
    let scene = Scene { sweep_len: 700, pulses: 4, dwells: 1500, noise: [1.0, 1.0] };
    let items = sweeps(&scene, 5, |_, _, rng| (150.0, 1.0, 4.0, rng.uniform() * std::f64::consts::TAU));
    let mut block = build(&SPEC, &[("gate_start", "150 bins"), ("gate_width", "1 bins"), ("noise_width", "512 bins")]);
    let out = dwells(&run(block.as_mut(), items));
    let ln: Vec<f64> = out.iter().map(|r| r.amplitude.ln()).collect();
    assert!(ln.iter().all(|x| x.is_finite()));
    let measured = variance(&ln);
    let formula = (1.0 / 256.0 + 2.0 / 16.0) / 16.0;
    let reported = out.iter().map(|r| r.var_ln_amp).sum::<f64>() / out.len() as f64;
    assert!((measured / formula - 1.0).abs() < 0.10, "measured {measured} formula {formula}");
    assert!((reported / formula - 1.0).abs() < 0.05, "reported {reported} formula {formula}");
    eprintln!("measured: noncoherent var(ln A) {measured:.5}, formula {formula:.5}, reported {reported:.5}");
    let snr = out.iter().map(|r| r.snr).sum::<f64>() / out.len() as f64;
    assert!((snr - 16.0).abs() < 0.5, "snr {snr}");
}

#[test]
fn coherent_amplitude_is_unbiased_and_spread_as_derived() {
    // Phase-stable echo, amplitude 1, noise power 1 per sample, 16 pulses: N s = 16.
    let scene = Scene { sweep_len: 600, pulses: 16, dwells: 800, noise: [1.0, 1.0] };
    let items = sweeps(&scene, 9, |d, _, _| (120.0, 1.0, 1.0, d as f64 * 0.7));
    let mut block = build(
        &SPEC,
        &[
            ("gate_start", "120 bins"),
            ("gate_width", "1 bins"),
            ("noise_width", "256 bins"),
            ("integration", "coherent"),
        ],
    );
    let out = dwells(&run(block.as_mut(), items));
    let amps: Vec<f64> = out.iter().map(|r| r.amplitude).collect();
    let mean = amps.iter().sum::<f64>() / amps.len() as f64;
    assert!((mean - 1.0).abs() < 0.02, "mean amplitude {mean}");
    eprintln!("measured: coherent mean amplitude {mean:.4}");
    // docs/derivations.md §4 coherent: var(ln A) ~= 1/(2 N s) = 1/32 to first order.
    let measured = variance(&amps.iter().map(|a| a.ln()).collect::<Vec<_>>());
    let reported = out.iter().map(|r| r.var_ln_amp).sum::<f64>() / out.len() as f64;
    eprintln!("measured: coherent var(ln A) {measured:.5}, 1/(2Ns) {:.5}, reported {reported:.5}", 1.0 / 32.0);
    assert!((measured * 32.0 - 1.0).abs() < 0.15, "measured {measured}");
    assert!((reported / measured - 1.0).abs() < 0.15, "reported {reported} measured {measured}");
}

#[test]
fn acquire_finds_a_planted_echo_and_follow_tracks_it() {
    for follow in ["none", "centroid", "early_late"] {
        // A 3-sample echo at bin 230 that walks out to 236 over the capture.
        let scene = Scene { sweep_len: 500, pulses: 6, dwells: 40, noise: [1.0, 1.0] };
        let delay = |d: u64| {
            if d < 10 { 230.25 } else { 230.25 + (d - 10) as f64 * 0.2 }
        };
        let items = sweeps(&scene, 21, |d, _, rng| (delay(d), 3.0, 5.0, rng.uniform() * std::f64::consts::TAU));
        let mut block = build(
            &SPEC,
            &[
                ("acquire", "true"),
                ("search_start", "20 bins"),
                ("search_end", "400 bins"),
                ("gate_width", "4 bins"),
                ("pulse", "3 samples"),
                ("follow", follow),
            ],
        );
        let r = run(block.as_mut(), items);
        assert!(
            r.notices.iter().any(|n| n.contains("acquired") && n.contains("230..234")),
            "{follow}: {:?}",
            r.notices
        );
        let out = dwells(&r);
        assert_eq!(out.len(), 36, "{follow}: the first four dwells only acquire");
        let bin = range_bin_m(RATE);
        let first = out[0].range_m.unwrap() / bin;
        assert!((first - 230.25).abs() < 0.3, "{follow}: {first}");
        let last = out.last().unwrap();
        let err = last.range_m.unwrap() / bin - delay(last.tag.dwell);
        if follow == "none" {
            assert!(err < -1.5, "a fixed gate loses the walking echo: {err}");
        } else {
            assert!(err.abs() < 0.5, "{follow}: range error {err} bins at the end");
        }
        // Both lobes of each pair used the same gate: their mid stamps sit the
        // same distance into their dwells.
        for pair in out.chunks(2) {
            if let [a, b] = pair
                && a.tag.dwell % 2 == 0
            {
                assert_eq!(a.mid.index - a.tag.dwell_start, b.mid.index - b.tag.dwell_start, "{follow}");
            }
        }
        gate_rows_come_each_cycle_and_follow_the_gate(&r, &scene, follow);
    }
}

/// The `gates` rows of an acquire-and-follow run (sweeps of one length, two
/// lobes a cycle): one at the first dwell of every cycle from the acquisition
/// on, none in between (nothing changed there), the acquired gate first and
/// a followed gate at the echo's end.
fn gate_rows_come_each_cycle_and_follow_the_gate(r: &Run, scene: &Scene, follow: &str) {
    let dwell_len = (scene.pulses * scene.sweep_len) as u64;
    let rows: Vec<(u64, f64)> = r
        .items
        .iter()
        .filter_map(|i| match i {
            Item::Row(row) => match row.cell("gate_start_m") {
                Some(Cell::Num(m)) => Some((row.stamp.index / dwell_len, m / range_bin_m(RATE))),
                _ => None,
            },
            _ => None,
        })
        .collect();
    let dwells: Vec<u64> = rows.iter().map(|r| r.0).collect();
    assert_eq!(dwells, (4..scene.dwells).step_by(2).collect::<Vec<_>>(), "{follow}");
    assert!((rows[0].1 - 230.0).abs() < 1e-9, "{follow}: acquired gate {}", rows[0].1);
    let last = rows.last().map_or(0.0, |r| r.1);
    if follow == "none" {
        assert!(rows.iter().all(|r| r.1 == rows[0].1), "{follow}: a fixed gate stays");
    } else {
        assert!(last >= 233.0, "{follow}: the gate followed the echo to bin {last}");
    }
}

#[test]
fn noise_floor_mismatch_is_reported_once_with_values() {
    let scene = Scene { sweep_len: 300, pulses: 4, dwells: 12, noise: [1.0, 4.0] };
    let items = sweeps(&scene, 3, |_, _, _| (80.0, 1.0, 3.0, 0.0));
    let mut block = build(&SPEC, &[("gate_start", "80 bins"), ("gate_width", "1 bins"), ("noise_width", "64 bins")]);
    let r = run(block.as_mut(), items);
    let hits: Vec<_> = r.notices.iter().filter(|n| n.contains("noise floors differ")).collect();
    assert_eq!(hits.len(), 1, "{:?}", r.notices);
    // Lobe noise powers 1 and 4: about 0 dB and 6 dB, 6.02 dB apart.
    let apart: f64 =
        hits[0].split('(').nth(1).and_then(|t| t.split(" dB").next()).and_then(|t| t.parse().ok()).expect("value");
    assert!(hits[0].contains("'left' 6.") || hits[0].contains("'left' 5.9"), "{}", hits[0]);
    assert!((apart - 6.02).abs() < 0.6, "{}", hits[0]);

    let same = Scene { noise: [1.0, 1.0], ..scene };
    let items = sweeps(&same, 3, |_, _, _| (80.0, 1.0, 3.0, 0.0));
    let mut block = build(&SPEC, &[("gate_start", "80 bins"), ("gate_width", "1 bins"), ("noise_width", "64 bins")]);
    let r = run(block.as_mut(), items);
    assert!(!r.notices.iter().any(|n| n.contains("noise floors differ")), "{:?}", r.notices);
}

#[test]
fn short_and_unlabelled_sweeps_are_skipped_with_notices() {
    let scene = Scene { sweep_len: 100, pulses: 3, dwells: 2, noise: [1.0, 1.0] };
    let mut items = sweeps(&scene, 1, |_, _, _| (50.0, 1.0, 3.0, 0.0));
    if let Item::Sweep(s) = &mut items[1] {
        s.iq = s.iq.slice(0..40); // truncated at a switch instant, before the gate
    }
    if let Item::Sweep(s) = &mut items[2] {
        s.lobe = None;
    }
    let mut block = build(&SPEC, &[("gate_start", "50 bins"), ("gate_width", "2 bins"), ("noise_width", "20 bins")]);
    let r = run(block.as_mut(), items);
    let out = dwells(&r);
    assert_eq!(out.iter().map(|d| d.used).collect::<Vec<_>>(), vec![1, 3]);
    assert!(r.notices.iter().any(|n| n.contains("shorter than the gate")), "{:?}", r.notices);
    assert!(r.notices.iter().any(|n| n.contains("without a lobe label")), "{:?}", r.notices);
}

#[test]
fn missing_gate_is_a_build_error() {
    let p = params(&SPEC, &[]);
    let err = (SPEC.build)(&p, &Default::default()).err().expect("needs a gate").to_string();
    assert!(err.contains("gate_start"), "{err}");
}

#[test]
fn centroid_range_after_a_matched_filter_uses_a_one_sample_pulse() {
    // 8-sample box echoes, compressed by correlation with the box: a triangle
    // centred on the echo start (pulse = 1 sample). The noise after the filter
    // is smooth and moves the whole triangle, so this needs more echo energy
    // than the raw box test for the same spread; power weights over the wide gate.
    use lobeflow_blocks::dsp::spectrum::correlate_direct;
    let scene = Scene { sweep_len: 300, pulses: 8, dwells: 40, noise: [1.0, 1.0] };
    let delays: Vec<f64> = (0..40).map(|d| 140.0 + (d as f64 * 0.37).fract()).collect();
    let raw = sweeps(&scene, 31, |d, _, rng| (delays[d as usize], 8.0, 4.0, rng.uniform() * std::f64::consts::TAU));
    let reference = vec![Complex32::new(1.0, 0.0); 8];
    let scale = 1.0 / 8f32.sqrt();
    let items: Vec<Item> = raw
        .into_iter()
        .map(|item| match item {
            Item::Sweep(mut s) => {
                let y: Vec<Complex32> = correlate_direct(&s.iq, &reference).into_iter().map(|v| v * scale).collect();
                s.iq = y.into();
                Item::Sweep(s)
            }
            other => other,
        })
        .collect();
    let mut block = build(
        &SPEC,
        &[("centroid", "power"), ("gate_start", "133 bins"), ("gate_width", "16 bins"), ("noise_width", "64 bins")],
    );
    let out = dwells(&run(block.as_mut(), items));
    assert_eq!(out.len(), 40);
    let bin = range_bin_m(RATE);
    let sq: f64 = out.iter().zip(&delays).map(|(r, d)| (r.range_m.expect("range") / bin - d).powi(2)).sum();
    let rms = (sq / out.len() as f64).sqrt();
    eprintln!("measured: range rms after matched filter {rms:.4} bins");
    assert!(rms < 0.15, "range rms {rms} bins");
    let bias = out.iter().zip(&delays).map(|(r, d)| r.range_m.unwrap() / bin - d).sum::<f64>() / out.len() as f64;
    assert!(bias.abs() < 0.05, "range bias {bias} bins");
}
