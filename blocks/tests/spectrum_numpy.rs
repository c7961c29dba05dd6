//! Comparisons against fixtures made by numpy and scipy
//! (`tests/fixtures/make_spectrum_fixtures.py` regenerates them).

#[path = "common/integrators.rs"]
mod common;

use lobeflow_blocks::dsp::spectrum::{FftCache, OverlapSave, Window, lowpass_taps};
use lobeflow_blocks::kinds::matched_filter;
use lobeflow_blocks::{Item, SampleChunk, Stamp};
use num_complex::Complex32;
use std::path::PathBuf;

fn fixture(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/spectrum").join(name)
}

/// Columns of a fixture CSV (header line skipped).
fn columns(name: &str) -> Vec<Vec<f64>> {
    let text = std::fs::read_to_string(fixture(name)).expect("fixture present");
    let mut cols: Vec<Vec<f64>> = Vec::new();
    for line in text.lines().skip(1) {
        for (i, v) in line.split(',').enumerate() {
            if cols.len() <= i {
                cols.push(Vec::new());
            }
            cols[i].push(v.parse().expect("number"));
        }
    }
    cols
}

fn complex(re: &[f64], im: &[f64]) -> Vec<Complex32> {
    re.iter().zip(im).map(|(&r, &i)| Complex32::new(r as f32, i as f32)).collect()
}

#[test]
fn windowed_fft_matches_numpy_hanning_and_blackman() {
    // numpy: np.fft.fft(x * np.hanning(200), 256) and the same with np.blackman.
    let input = columns("tone_in.csv");
    let x = complex(&input[0], &input[1]);
    let reference = columns("tone_fft.csv");
    let mut fft = FftCache::new();
    for (window, col) in [(Window::Hann, 0), (Window::Blackman, 2)] {
        let mut w = vec![0.0; x.len()];
        window.fill(&mut w);
        let mut buf: Vec<Complex32> = x.iter().zip(&w).map(|(v, w)| v * *w as f32).collect();
        buf.resize(256, Complex32::new(0.0, 0.0));
        fft.forward(&mut buf);
        let peak = reference[col].iter().zip(&reference[col + 1]).map(|(r, i)| r.hypot(*i)).fold(0.0, f64::max);
        for (k, y) in buf.iter().enumerate() {
            let err = (y.re as f64 - reference[col][k]).hypot(y.im as f64 - reference[col + 1][k]);
            assert!(err < 1e-5 * peak, "{window:?} bin {k}: {err}");
        }
    }
}

#[test]
fn matched_filter_matches_numpy_correlate_of_a_chirp() {
    // numpy: np.correlate(x, h, "full")[L-1:] (equal to np.convolve(x, conj(h[::-1]))).
    let h_cols = columns("chirp_ref.csv");
    let h = complex(&h_cols[0], &h_cols[1]);
    let cols = columns("chirp_corr.csv");
    let x = complex(&cols[0], &cols[1]);
    let expect = complex(&cols[2], &cols[3]);
    let peak = expect.iter().map(|v| v.norm()).fold(0.0, f32::max);

    // The engine itself.
    let mut ols = OverlapSave::new(&h, 1.0).unwrap();
    let mut y = Vec::new();
    for piece in x.chunks(333) {
        ols.push(piece, &mut y);
    }
    ols.flush(&mut y);
    assert_eq!(y.len(), expect.len());
    for (n, (a, b)) in y.iter().zip(&expect).enumerate() {
        assert!((a - b).norm() < 1e-5 * peak, "sample {n}: {a} vs {b}");
    }

    // The block, reading the same reference as a taps file (its header line is skipped);
    // its output is scaled by 1/sqrt(reference energy).
    let taps = fixture("chirp_ref.csv");
    let taps = taps.to_str().unwrap();
    let mut block = common::build(&matched_filter::SPEC, &[("code", "taps"), ("taps", taps)]);
    let energy: f32 = h.iter().map(|v| v.norm_sqr()).sum();
    let items = x.chunks(500).enumerate().map(|(i, c)| {
        Item::Samples(SampleChunk {
            stamp: Stamp::new(7000 + 500 * i as u64, 1e6),
            iq: c.to_vec().into(),
            sync: None,
            trigger: None,
        })
    });
    let r = common::run(block.as_mut(), items.collect::<Vec<_>>());
    let mut got = Vec::new();
    for item in r.items {
        if let Item::Samples(c) = item {
            assert_eq!(c.stamp.index, 7000 + got.len() as u64);
            got.extend(c.iq.iter().map(|v| v * energy.sqrt()));
        }
    }
    assert_eq!(got.len(), expect.len());
    let worst = got.iter().zip(&expect).map(|(a, b)| (a - b).norm()).fold(0.0, f32::max);
    assert!(worst < 1e-5 * peak, "{worst}");
    // The planted echoes (at samples 300 and 900) peak where they start.
    let argmax = |r: std::ops::Range<usize>| r.max_by(|&a, &b| got[a].norm().total_cmp(&got[b].norm())).unwrap();
    assert_eq!(argmax(0..600), 300);
    assert_eq!(argmax(600..1200), 900);
}

#[test]
fn lowpass_taps_match_scipy_firwin() {
    // scipy.signal.firwin(63, 0.1, window="blackman", fs=1.0).
    let expect = &columns("firwin_63_0.1.csv")[0];
    let taps = lowpass_taps(63, 0.1);
    assert_eq!(taps.len(), expect.len());
    for (a, b) in taps.iter().zip(expect) {
        assert!((a - b).abs() < 1e-12, "{a} vs {b}");
    }
}
