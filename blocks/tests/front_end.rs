//! Front-end blocks: matched filter, DC removal, frequency shift, low-pass
//! decimation. Each against direct computation or an analytic response.

#[path = "common/integrators.rs"]
mod common;

use common::*;
use lobeflow_blocks::dsp::rng::Rng;
use lobeflow_blocks::dsp::spectrum::{correlate_direct, linear_chirp, weighted_dtft};
use lobeflow_blocks::kinds::{dc_remove, frequency_shift, lowpass_decimate, matched_filter};
use lobeflow_blocks::{Item, SampleChunk};
use num_complex::Complex32;
use std::f64::consts::PI;

fn split(x: &[Complex32], start: u64, rate: f64, sizes: &[usize], with_aux: bool) -> Vec<Item> {
    let mut items = Vec::new();
    let (mut at, mut k) = (0usize, 0usize);
    while at < x.len() {
        let n = sizes[k % sizes.len()].min(x.len() - at);
        let idx = start + at as u64;
        // Aux channels carry their own absolute index, so alignment is checkable.
        let ramp: Vec<f32> = (0..n).map(|i| (idx + i as u64) as f32).collect();
        let mut c = chunk(idx, rate, x[at..at + n].to_vec());
        if with_aux {
            c.sync = Some(ramp.clone().into());
            c.trigger = Some(ramp.iter().map(|v| -v).collect::<Vec<_>>().into());
        }
        items.push(Item::Samples(c));
        at += n;
        k += 1;
    }
    items
}

fn chunks(r: &Run) -> Vec<SampleChunk> {
    r.items.iter().filter_map(|i| if let Item::Samples(c) = i { Some(c.clone()) } else { None }).collect()
}

fn joined(cs: &[SampleChunk]) -> Vec<Complex32> {
    cs.iter().flat_map(|c| c.iq.iter().copied()).collect()
}

fn tone(n: usize, start: u64, freq: f64, rate: f64, amp: f32) -> Vec<Complex32> {
    (0..n).map(|k| Complex32::from_polar(amp, (2.0 * PI * freq * (start + k as u64) as f64 / rate) as f32)).collect()
}

#[test]
fn matched_filter_equals_direct_correlation_with_aligned_aux_over_splits() {
    let mut rng = Rng::new(4);
    let x = noise(&mut rng, 6000, 1.0);
    let h = linear_chirp(40, 0.5);
    let energy: f32 = h.iter().map(|v| v.norm_sqr()).sum();
    let direct: Vec<Complex32> = correlate_direct(&x, &h).into_iter().map(|v| v / energy.sqrt()).collect();
    for sizes in [vec![6000], vec![1, 7, 500], vec![2048, 3]] {
        let mut block =
            build(&matched_filter::SPEC, &[("code", "chirp"), ("pulse", "40 samples"), ("bandwidth", "500 kHz")]);
        let r = run(block.as_mut(), split(&x, 123_456, 1e6, &sizes, true));
        let cs = chunks(&r);
        let mut next = 123_456;
        for c in &cs {
            assert_eq!(c.stamp.index, next);
            let sync = c.sync.as_ref().unwrap();
            let trig = c.trigger.as_ref().unwrap();
            assert_eq!(sync.len(), c.len());
            for (i, (s, t)) in sync.iter().zip(trig.iter()).enumerate() {
                assert_eq!(*s, (next + i as u64) as f32);
                assert_eq!(*t, -*s);
            }
            next += c.len() as u64;
        }
        let y = joined(&cs);
        assert_eq!(y.len(), x.len());
        let worst = y.iter().zip(&direct).map(|(a, b)| (a - b).norm()).fold(0.0, f32::max);
        assert!(worst < 1e-4, "{sizes:?}: {worst}");
        // Normalised by sqrt(energy): white noise keeps its power per sample.
        let p = y[..5900].iter().map(|v| v.norm_sqr() as f64).sum::<f64>() / 5900.0;
        assert!((p - 1.0).abs() < 0.06, "noise power {p}");
    }
}

#[test]
fn rect_echo_peaks_where_it_starts_and_bad_taps_are_reported() {
    let mut x = vec![Complex32::new(0.0, 0.0); 400];
    for v in &mut x[150..160] {
        *v = Complex32::new(0.0, 2.0);
    }
    let mut block = build(&matched_filter::SPEC, &[("pulse", "10 us")]);
    let y = joined(&chunks(&run(block.as_mut(), split(&x, 0, 1e6, &[64], false))));
    let peak = (0..y.len()).max_by(|&a, &b| y[a].norm().total_cmp(&y[b].norm())).unwrap();
    assert_eq!(peak, 150);
    // Peak of a 10-sample box of amplitude 2: 2 * 10 / sqrt(10).
    assert!((y[150].norm() - 2.0 * 10f32.sqrt()).abs() < 1e-4);

    let dir = std::env::temp_dir().join(format!("lobeflow-taps-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let bad = dir.join("bad.csv");
    std::fs::write(&bad, "# a test code\n1,0\n0.5,oops\n").unwrap();
    let p = params(&matched_filter::SPEC, &[("code", "taps"), ("taps", bad.to_str().unwrap())]);
    let err = (matched_filter::SPEC.build)(&p, &Default::default()).err().expect("bad line").to_string();
    assert!(err.contains("line 3") && err.contains("bad.csv"), "{err}");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn dc_remove_takes_off_the_offset_and_passes_tones() {
    let rate = 100_000.0;
    let corner = 50.0;
    let offset = Complex32::new(0.3, -0.2);
    let n = 40_000;
    for freq in [0.0, 50.0, 2000.0] {
        let x: Vec<Complex32> =
            tone(n, 0, freq, rate, if freq == 0.0 { 0.0 } else { 1.0 }).iter().map(|v| v + offset).collect();
        let mut block = build(&dc_remove::SPEC, &[("corner", "50 Hz")]);
        let y = joined(&chunks(&run(block.as_mut(), split(&x, 0, rate, &[999, 10], false))));
        // Settled: after about 10 time constants (1 / (2 pi 50 Hz) = 3.2 ms = 320 samples).
        let tail = &y[n / 2..];
        let mean = tail.iter().sum::<Complex32>() / tail.len() as f32;
        let gain = (tail.iter().map(|v| v.norm_sqr() as f64).sum::<f64>() / tail.len() as f64).sqrt();
        // Analytic response of H(z) = (1 - z^-1)/(1 - (1-a) z^-1) at the tone.
        let a = dc_remove::alpha(corner, rate);
        let z = num_complex::Complex64::from_polar(1.0, -2.0 * PI * freq / rate);
        let expect = ((1.0 - z) / (1.0 - (1.0 - a) * z)).norm();
        if freq == 0.0 {
            assert!(mean.norm() < 1e-5, "residual DC {mean}");
        } else {
            assert!((gain - expect).abs() < 2e-3, "{freq} Hz: gain {gain} expected {expect}");
        }
        if freq == 50.0 {
            assert!((20.0 * gain.log10() + 3.0).abs() < 0.1, "corner gain {} dB", 20.0 * gain.log10());
        }
    }
}

#[test]
fn frequency_shift_moves_a_tone_phase_continuously() {
    let rate = 48_000.0;
    let x = tone(50_000, 777, 1000.0, rate, 1.0);
    let expect = tone(50_000, 777, 3500.0, rate, 1.0);
    for sizes in [vec![50_000], vec![1, 333, 4096]] {
        let mut block = build(&frequency_shift::SPEC, &[("shift", "2.5 kHz")]);
        let y = joined(&chunks(&run(block.as_mut(), split(&x, 777, rate, &sizes, false))));
        let worst = y.iter().zip(&expect).map(|(a, b)| (a - b).norm()).fold(0.0, f32::max);
        assert!(worst < 2e-3, "{sizes:?}: {worst}");
    }
    // After a jump the phase still follows the absolute index.
    let mut block = build(&frequency_shift::SPEC, &[("shift", "-1 kHz")]);
    let items = vec![
        Item::Samples(chunk(777, rate, x[..100].to_vec())),
        Item::Samples(chunk(10_777, rate, tone(100, 10_777, 1000.0, rate, 1.0))),
    ];
    let y = joined(&chunks(&run(block.as_mut(), items)));
    assert!(y.iter().all(|v| (v - Complex32::new(1.0, 0.0)).norm() < 1e-3));
}

#[test]
fn decimator_stamps_pass_and_stop_bands() {
    let rate = 1e6;
    let n = 20_000;
    let start = 1001u64;
    let set: &[(&str, &str)] = &[("cutoff", "100 kHz"), ("taps", "63"), ("factor", "4")];
    let mut rng = Rng::new(8);
    let x = noise(&mut rng, n, 1.0);
    // Direct FIR at the kept centres (zeros outside the input).
    let taps = lobeflow_blocks::dsp::spectrum::lowpass_taps(63, 0.1);
    let first_out = (start as usize).div_ceil(4);
    let last_centre = start as usize + n - 1;
    let direct: Vec<Complex32> = (first_out..=last_centre / 4)
        .map(|m| {
            let c = (4 * m - start as usize) as i64;
            taps.iter().enumerate().fold(Complex32::new(0.0, 0.0), |acc, (k, t)| {
                match x.get((c + 31 - k as i64) as usize) {
                    Some(v) if c + 31 - k as i64 >= 0 => acc + v * *t as f32,
                    _ => acc,
                }
            })
        })
        .collect();
    for sizes in [vec![n], vec![1, 2, 3, 1000], vec![4096, 5]] {
        let mut block = build(&lowpass_decimate::SPEC, set);
        let cs = chunks(&run(block.as_mut(), split(&x, start, rate, &sizes, true)));
        let mut next = first_out as u64;
        for c in &cs {
            assert_eq!(c.stamp.index, next, "{sizes:?}");
            assert_eq!(c.stamp.rate, 250_000.0);
            for (i, s) in c.sync.as_ref().unwrap().iter().enumerate() {
                assert_eq!(*s, (4 * (next + i as u64)) as f32, "aux picked at the kept input sample");
            }
            next += c.len() as u64;
        }
        let y = joined(&cs);
        assert_eq!(y.len(), direct.len());
        let worst = y.iter().zip(&direct).map(|(a, b)| (a - b).norm()).fold(0.0, f32::max);
        assert!(worst < 1e-5, "{sizes:?}: {worst}");
    }
    // Passband: 20 kHz within 0.05 dB; stopband: 200 kHz down by more than 60 dB
    // (a Blackman window's sidelobes are near -74 dB).
    for (freq, check) in [(20e3, 0), (200e3, 1)] {
        let x = tone(n, 0, freq, rate, 1.0);
        let mut block = build(&lowpass_decimate::SPEC, set);
        let y = joined(&chunks(&run(block.as_mut(), split(&x, 0, rate, &[1000], false))));
        let body = &y[100..y.len() - 100];
        let w = vec![1.0; body.len()];
        let alias = (freq / 250e3).fract() * 250e3;
        let (re, im) = weighted_dtft(body, &w, alias / 250e3);
        let db = 20.0 * (re.hypot(im) / body.len() as f64).log10();
        if check == 0 {
            assert!(db.abs() < 0.05, "passband {db} dB");
        } else {
            assert!(db < -60.0, "stopband {db} dB");
        }
    }
    assert!(
        (lowpass_decimate::SPEC.build)(
            &params(&lowpass_decimate::SPEC, &[("cutoff", "1 kHz"), ("taps", "64")]),
            &Default::default()
        )
        .is_err()
    );
}

#[test]
fn bad_rates_and_odd_chunks_give_errors_not_panics() {
    use lobeflow_blocks::{Block, Outputs};
    let kinds: [(&lobeflow_blocks::BlockSpec, &[(&str, &str)]); 4] = [
        (&matched_filter::SPEC, &[]),
        (&dc_remove::SPEC, &[]),
        (&frequency_shift::SPEC, &[("shift", "1 kHz")]),
        (&lowpass_decimate::SPEC, &[("cutoff", "1 kHz")]),
    ];
    for (spec, set) in kinds {
        for rate in [0.0, -1.0, f64::NAN] {
            let mut block: Box<dyn Block> = build(spec, set);
            let mut out = Outputs::new(1);
            let r = block.process(0, Item::Samples(chunk(5, rate, vec![Complex32::new(1.0, 0.0); 8])), &mut out);
            assert!(r.is_err_and(|e| e.message.contains("rate")), "{} at {rate}", spec.kind);
        }
        // Empty chunks and NaN samples pass without a panic.
        let mut block = build(spec, set);
        let items = vec![
            Item::Samples(chunk(0, 48_000.0, vec![])),
            Item::Samples(chunk(0, 48_000.0, vec![Complex32::new(f32::NAN, 0.0); 100])),
        ];
        run(block.as_mut(), items);
    }
}
