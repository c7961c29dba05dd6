//! Capture writers read back independently (hound's reader, our own JSON
//! parse plus datatype decoding, byte fixtures from numpy and Python's
//! `wave`), and synthesizer output checked against its scenario and the
//! check values computed by hand from the beam formulas.

use lobeflow::capture::datatype::DataType;
use lobeflow::capture::sigmf_meta::Annotation;
use lobeflow::capture::write::{AuxRole, CaptureWriter, WriteFormat, WriterConfig};
use lobeflow::synth::generate::{Frames, Generator};
use lobeflow::synth::model::Model;
use lobeflow::synth::scenario::ScenarioFile;
use lobeflow::synth::synthesize;
use num_complex::Complex32;
use std::path::{Path, PathBuf};

const C: f64 = 299_792_458.0;

fn temp_dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-synth-writers-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn fixture(name: &str) -> Vec<u8> {
    std::fs::read(Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures").join(name)).unwrap()
}

/// The fixture input: (iq, sync) from `writer_input.f32`.
fn fixture_input() -> (Vec<Complex32>, Vec<f32>) {
    let raw = fixture("writer_input.f32");
    let v: Vec<f32> = raw.chunks_exact(4).map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]])).collect();
    let iq = v.chunks_exact(3).map(|f| Complex32::new(f[0], f[1])).collect();
    let sync = v.chunks_exact(3).map(|f| f[2]).collect();
    (iq, sync)
}

/// The payload of a RIFF/WAVE file's `data` chunk.
fn wav_data_chunk(bytes: &[u8]) -> &[u8] {
    let mut pos = 12;
    while pos + 8 <= bytes.len() {
        let len = u32::from_le_bytes([bytes[pos + 4], bytes[pos + 5], bytes[pos + 6], bytes[pos + 7]]) as usize;
        if &bytes[pos..pos + 4] == b"data" {
            return &bytes[pos + 8..pos + 8 + len];
        }
        pos += 8 + len + (len & 1);
    }
    panic!("no data chunk");
}

// ---------------------------------------------------------------- writers

#[test]
fn wav_f32_round_trips_through_hounds_reader() {
    let dir = temp_dir("wavf32");
    let path = dir.join("x.wav");
    let (iq, sync) = fixture_input();
    let trigger: Vec<f32> = (0..iq.len()).map(|k| if k % 10 < 2 { 1.0 } else { 0.0 }).collect();
    let mut cfg = WriterConfig::new(WriteFormat::WavF32, 250_000.0);
    cfg.aux = vec![AuxRole::Sync, AuxRole::Trigger];
    cfg.scale = 0.5;
    let mut w = CaptureWriter::create(&path, cfg).unwrap();
    // Two writes: frames must continue across calls.
    w.write(&iq[..20], &[&sync[..20], &trigger[..20]]).unwrap();
    w.write(&iq[20..], &[&sync[20..], &trigger[20..]]).unwrap();
    assert!(!path.exists(), "file must appear only at commit");
    assert_eq!(w.commit().unwrap(), vec![path.clone()]);

    let mut r = hound::WavReader::open(&path).unwrap();
    let spec = r.spec();
    assert_eq!((spec.channels, spec.sample_rate, spec.bits_per_sample), (4, 250_000, 32));
    assert_eq!(spec.sample_format, hound::SampleFormat::Float);
    let s: Vec<f32> = r.samples::<f32>().map(|x| x.unwrap()).collect();
    assert_eq!(s.len(), iq.len() * 4);
    for (k, f) in s.chunks_exact(4).enumerate() {
        assert_eq!(f, [iq[k].re * 0.5, iq[k].im * 0.5, sync[k], trigger[k]], "frame {k}");
    }
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn wav_i16_data_matches_pythons_wave_module_and_hound_reads_it() {
    let dir = temp_dir("wavi16");
    let path = dir.join("x.wav");
    let (iq, _) = fixture_input();
    let mut w = CaptureWriter::create(&path, WriterConfig::new(WriteFormat::WavI16, 48_000.0)).unwrap();
    w.write(&iq, &[]).unwrap();
    w.commit().unwrap();
    let ours = std::fs::read(&path).unwrap();
    let reference = fixture("writer_ref_i16.wav");
    assert_eq!(wav_data_chunk(&ours), wav_data_chunk(&reference), "PCM data differs from Python's wave output");
    let mut r = hound::WavReader::open(&path).unwrap();
    assert_eq!((r.spec().channels, r.spec().bits_per_sample), (2, 16));
    let s: Vec<i16> = r.samples::<i16>().map(|x| x.unwrap()).collect();
    assert_eq!(s[2 * 5], 32767, "1.5 clips to full scale");
    assert_eq!(s[2 * 9 + 1], -32768, "-1.7 clips to negative full scale");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn sigmf_bytes_match_numpy_and_meta_parses() {
    let dir = temp_dir("sigmf");
    let (iq, sync) = fixture_input();
    for (fmt, dt, reference) in [
        ("sigmf_cf32_le", "cf32_le", "writer_ref_cf32_le.bin"),
        ("sigmf_ci16_le", "ci16_le", "writer_ref_ci16_le.bin"),
        ("sigmf_cu8", "cu8", "writer_ref_cu8.bin"),
    ] {
        let path = dir.join(format!("{dt}.sigmf-data"));
        let mut cfg = WriterConfig::new(WriteFormat::parse(fmt).unwrap(), 2.4e6);
        cfg.aux = vec![AuxRole::Sync];
        cfg.frequency = Some(9.375e9);
        cfg.annotations = vec![Annotation {
            sample_start: 10,
            sample_count: Some(5),
            label: Some("carried".into()),
            comment: None,
            other: Default::default(),
        }];
        let mut w = CaptureWriter::create(&path, cfg).unwrap();
        w.write(&iq[..7], &[&sync[..7]]).unwrap();
        w.write(&iq[7..], &[&sync[7..]]).unwrap();
        w.annotate(Annotation {
            sample_start: 2,
            sample_count: Some(3),
            label: Some("later".into()),
            comment: None,
            other: Default::default(),
        });
        let written = w.commit().unwrap();
        assert_eq!(written, vec![path.clone(), dir.join(format!("{dt}.sigmf-meta"))]);

        let data = std::fs::read(&path).unwrap();
        assert_eq!(data, fixture(reference), "{fmt}: bytes differ from the numpy reference");

        // Meta read as plain JSON (not through our own types).
        let meta: serde_json::Value = serde_json::from_slice(&std::fs::read(&written[1]).unwrap()).unwrap();
        let g = &meta["global"];
        assert_eq!(g["core:datatype"], dt);
        assert_eq!(g["core:version"], "1.2.0");
        assert_eq!(g["core:sample_rate"].as_f64(), Some(2.4e6));
        assert_eq!(g["core:num_channels"].as_u64(), Some(2));
        assert_eq!(meta["captures"][0]["core:sample_start"].as_u64(), Some(0));
        assert_eq!(meta["captures"][0]["core:frequency"].as_f64(), Some(9.375e9));
        let ann = meta["annotations"].as_array().unwrap();
        assert_eq!(ann.len(), 2);
        assert_eq!((ann[0]["core:label"].as_str(), ann[0]["core:sample_start"].as_u64()), (Some("later"), Some(2)));
        assert_eq!(ann[1]["core:label"], "carried");

        // Decode with datatype.rs: channel 0 is the IQ, channel 1 (sync, 0).
        let dtype = DataType::parse(dt).unwrap();
        let mut v = Vec::new();
        dtype.decode(&data, &mut v);
        assert_eq!(v.len(), iq.len() * 4);
        let tol = match dt {
            "cf32_le" => 0.0,
            "ci16_le" => 0.5 / 32768.0,
            _ => 0.5 / 128.0,
        };
        for (k, f) in v.chunks_exact(4).enumerate() {
            let clip = |x: f32| {
                if tol == 0.0 { x } else { x.clamp(-1.0, 1.0 - 2.0 * tol) }
            };
            assert!((f[0] - clip(iq[k].re)).abs() <= tol + 1e-7, "{fmt} frame {k} i");
            assert!((f[1] - clip(iq[k].im)).abs() <= tol + 1e-7, "{fmt} frame {k} q");
            assert!((f[2] - sync[k]).abs() <= tol + 1e-7 && f[3] == 0.0, "{fmt} frame {k} sync");
        }
    }
    let _ = std::fs::remove_dir_all(&dir);
}

// ------------------------------------------------------------ synthesizer

fn model(yaml: &str) -> Model {
    let f = ScenarioFile::parse(Path::new("inline.scenario.yaml"), yaml.to_string()).unwrap();
    Model::from_file(&f).unwrap()
}

/// The whole (small) capture: iq, sync, trigger.
fn generate_all(m: Model) -> (Vec<Complex32>, Vec<f32>, Vec<f32>) {
    let mut g = Generator::new(m);
    let mut f = Frames::default();
    let (mut iq, mut sync, mut trig) = (Vec::new(), Vec::new(), Vec::new());
    while g.next_chunk(&mut f) {
        assert_eq!(f.index as usize, iq.len());
        iq.extend_from_slice(&f.iq);
        sync.extend_from_slice(&f.sync);
        trig.extend_from_slice(&f.trigger);
    }
    (iq, sync, trig)
}

/// A two-lobe pulsed scenario at 1 MS/s, 1 kHz PRF, 5 pulses per dwell,
/// first transmit at sample 200, noise power 1 in the output.
fn pulsed(snr_db: f64, az_deg: f64, range_m: f64, extra: &str) -> String {
    format!(
        "name: bench two-lobe\nseed: 11\n\
capture: {{sample_rate: 1 MS/s, duration: 100 ms, format: sigmf_cf32_le, scale: 1, sync: channel, trigger: true}}\n\
antenna: {{beam: gaussian, beamwidth: 6 deg, squint: 2.4 deg, way: two}}\n\
lobes: [{{name: right, toward: right}}, {{name: left, toward: left}}]\n\
signal:\n  pulsed: {{prf: 1 kHz, pulse: 3 us, pulses_per_dwell: 5, first_transmit: 0.2 ms, snr: {snr_db} dB{extra}}}\n\
target: {{az: {{at: {az_deg} deg}}, range: {{at: {range_m} m}}}}\n"
    )
}

/// Range whose echo delay is `samples` at 1 MS/s.
fn range_for_delay(samples: f64) -> f64 {
    C * samples * 1e-6 / 2.0
}

/// One-way Gaussian voltage, docs/derivations.md section 2 (Skolnik, Introduction
/// to Radar Systems, tracking-radar chapter, from memory).
fn gaussian(x: f64, bw: f64) -> f64 {
    (-2.0 * std::f64::consts::LN_2 * x * x / (bw * bw)).exp()
}

#[test]
fn echo_power_at_the_true_delay_matches_the_snr() {
    let (iq, _, _) = generate_all(model(&pulsed(20.0, 0.0, range_for_delay(10.0), "")));
    // Boresight target: each lobe sees the two-way crossover g(SQ)^2.
    let expected = 100.0 * gaussian(2.4, 6.0).powi(4);
    let (mut echo, mut ne, mut noise, mut nn) = (0.0, 0, 0.0, 0);
    for k in 0..100 {
        let tx = 200 + 1000 * k;
        for x in &iq[tx + 10..tx + 13] {
            echo += x.norm_sqr() as f64;
            ne += 1;
        }
        for x in &iq[tx + 400..(tx + 900).min(iq.len())] {
            noise += x.norm_sqr() as f64;
            nn += 1;
        }
    }
    let noise = noise / nn as f64;
    let echo = echo / ne as f64 - noise;
    assert!((noise - 1.0).abs() < 0.03, "noise power {noise}");
    assert!((echo / expected - 1.0).abs() < 0.05, "echo power {echo}, expected {expected}");
    // Just before the echo there is only noise.
    let before: f64 = (0..100).map(|k| iq[200 + 1000 * k + 9].norm_sqr() as f64).sum::<f64>() / 100.0;
    assert!(before < 1.5, "power before the echo {before}");
}

#[test]
fn fractional_delay_spreads_the_pulse_by_coverage() {
    let (iq, _, _) = generate_all(model(&pulsed(120.0, 0.0, range_for_delay(10.25), "")));
    for k in [0usize, 7, 42] {
        let tx = 200 + 1000 * k;
        let full = iq[tx + 11].norm() as f64;
        assert!((iq[tx + 12].norm() as f64 / full - 1.0).abs() < 1e-5);
        assert!((iq[tx + 10].norm() as f64 / full - 0.75).abs() < 1e-5, "covers [10.25, 11)");
        assert!((iq[tx + 13].norm() as f64 / full - 0.25).abs() < 1e-5, "covers [13, 13.25)");
        assert!((iq[tx + 9].norm() as f64) < 1e-4 * full && (iq[tx + 14].norm() as f64) < 1e-4 * full);
    }
}

#[test]
fn two_lobe_ratio_matches_the_hand_computed_check_value() {
    // Gaussian BW 6 deg, SQ 2.4 deg, two-way, theta 0.5 deg: A/B = 1.447269,
    // 3.2110 dB (computed by hand from the two-way Gaussian ratio, docs/derivations.md
    // section 3).
    let (iq, _, _) = generate_all(model(&pulsed(120.0, 0.5, range_for_delay(30.0), ", phase: per_dwell")));
    // Dwell d covers pulses 5d..5d+4; even dwells are `right` (A), odd `left` (B).
    for d in [0usize, 4, 10] {
        let a = iq[200 + 1000 * (5 * d + 2) + 31].norm() as f64;
        let b = iq[200 + 1000 * (5 * d + 7) + 31].norm() as f64;
        assert!((a / b - 1.447269).abs() < 2e-5, "A/B = {}", a / b);
        assert!((20.0 * (a / b).log10() - 3.2110).abs() < 1e-3);
    }
}

#[test]
fn sync_staircase_switch_instants_and_transmit_spacing() {
    let yaml = pulsed(10.0, 0.0, range_for_delay(50.0), ", prf_jitter: 0 us, leakage: 50 dB")
        .replace(
            "lobes: [{name: right, toward: right}, {name: left, toward: left}]",
            "lobes: [{name: right, toward: right}, {name: up, toward: up}, {name: left, toward: left}, {name: down, toward: down}]",
        );
    let (iq, sync, trig) = generate_all(model(&yaml));
    assert_eq!((sync.len(), trig.len()), (iq.len(), iq.len()));
    // Trigger: 3 samples of 1.0 from each transmit instant, PRI = 1000 samples.
    let rises: Vec<usize> = (1..trig.len()).filter(|&n| trig[n] == 1.0 && trig[n - 1] == 0.0).collect();
    assert_eq!(rises.len(), 100);
    assert_eq!(rises[0], 200);
    assert!(rises.windows(2).all(|w| w[1] - w[0] == 1000), "transmit spacing must equal the PRI");
    assert_eq!(trig.iter().filter(|&&t| t == 1.0).count(), 300);
    // Leakage (50 dB) at the transmit instants, spaced by the PRI as well.
    let leaks: Vec<usize> = (1..iq.len()).filter(|&n| iq[n].norm_sqr() > 1e4 && iq[n - 1].norm_sqr() <= 1e4).collect();
    assert_eq!(leaks, rises);
    // Staircase levels -0.8 + 1.6 i / 3, noise 0.01 rms, dwell of 5 PRI; the
    // switch is 10 % of the PRI (100 samples) before a dwell's first transmit.
    for d in 0..19usize {
        let switch = 100 + 5000 * d;
        let lobe = d % 4;
        let level = -0.8 + 1.6 * lobe as f64 / 3.0;
        let body = &sync[switch + 10..switch + 4990];
        let mean = body.iter().map(|&v| v as f64).sum::<f64>() / body.len() as f64;
        let rms = (body.iter().map(|&v| (v as f64 - mean).powi(2)).sum::<f64>() / body.len() as f64).sqrt();
        assert!((mean - level).abs() < 2e-3, "dwell {d}: level {mean}, expected {level}");
        assert!((rms - 0.01).abs() < 1.5e-3, "dwell {d}: sync noise {rms}");
        if d > 0 {
            let prev = -0.8 + 1.6 * ((d - 1) % 4) as f64 / 3.0;
            let mid = 0.5 * (prev + level);
            let up = level > prev;
            let cross = (switch - 20..switch + 20).find(|&n| (sync[n] as f64 > mid) == up).unwrap();
            assert!(
                (switch + 1..=switch + 3).contains(&cross),
                "dwell {d}: ramp midpoint at {cross}, switch at {switch}"
            );
        }
    }
}

#[test]
fn jittered_transmit_instants_average_to_the_pri() {
    let (_, _, trig) = generate_all(model(&pulsed(10.0, 0.0, range_for_delay(50.0), ", prf_jitter: 2 us")));
    let rises: Vec<f64> = (1..trig.len()).filter(|&n| trig[n] == 1.0 && trig[n - 1] == 0.0).map(|n| n as f64).collect();
    assert_eq!(rises.len(), 100);
    let dev: Vec<f64> = rises.iter().enumerate().map(|(k, &r)| r - (200.0 + 1000.0 * k as f64)).collect();
    let mean = dev.iter().sum::<f64>() / dev.len() as f64;
    let rms = (dev.iter().map(|d| (d - mean).powi(2)).sum::<f64>() / dev.len() as f64).sqrt();
    // Rising edges sit at ceil(instant): rms of 2 us jitter plus 1/12 sample^2 of rounding.
    let expected = (4.0f64 + 1.0 / 12.0).sqrt();
    assert!(mean.abs() < 1.0 && (rms / expected - 1.0).abs() < 0.25, "mean {mean} rms {rms}");
}

#[test]
fn beacon_one_way_ratio_matches_the_hand_computed_check_value() {
    // BW 10 deg, SQ 5 deg, one-way, theta 1 deg: A/B = 1.319508
    // (computed by hand from the one-way Gaussian ratio, docs/derivations.md
    // section 3).
    let yaml = "name: mast beacon\nseed: 3\n\
capture: {sample_rate: 1 MS/s, duration: 8 ms, format: sigmf_cf32_le, scale: 1, sync: schedule}\n\
antenna: {beam: gaussian, beamwidth: 10 deg, squint: 5 deg}\n\
lobes: [{name: right, toward: right}, {name: left, toward: left}]\n\
signal:\n  beacon: {tone: 12.5 kHz, snr: 100 dB, dwell: 1 ms, first_start: 0.5 ms}\n\
target: {az: {at: 1 deg}}\n";
    let (iq, sync, trig) = generate_all(model(yaml));
    assert!(sync.is_empty() && trig.is_empty());
    let tone = |from: usize| -> f64 {
        let s: num_complex::Complex64 = (from + 50..from + 950)
            .map(|n| {
                let ph = -2.0 * std::f64::consts::PI * 12_500.0 * n as f64 / 1e6;
                num_complex::Complex64::new(iq[n].re as f64, iq[n].im as f64)
                    * num_complex::Complex64::from_polar(1.0, ph)
            })
            .sum();
        s.norm() / 900.0
    };
    for d in [0usize, 2, 4] {
        // Dwell d starts at sample 500 + 1000 d; even dwells are `right`.
        let (a, b) = (tone(500 + 1000 * d), tone(1500 + 1000 * d));
        assert!((a / b - 1.319508).abs() < 2e-5, "A/B = {}", a / b);
        assert!((a / 1e5 - gaussian(4.0, 10.0)).abs() < 1e-5, "one-way gain of the right lobe");
    }
    // Samples before first_start belong to the previous (left) dwell.
    let early: num_complex::Complex64 = (0..400)
        .map(|n| {
            let ph = -2.0 * std::f64::consts::PI * 12_500.0 * n as f64 / 1e6;
            num_complex::Complex64::new(iq[n].re as f64, iq[n].im as f64) * num_complex::Complex64::from_polar(1.0, ph)
        })
        .sum();
    assert!((early.norm() / 400.0 / 1e5 - gaussian(6.0, 10.0)).abs() < 1e-5);
}

/// Bytes of every file a synth run wrote.
fn synth_bytes(yaml: &str, dir: &Path, name: &str) -> Vec<Vec<u8>> {
    let f = ScenarioFile::parse(&dir.join("s.scenario.yaml"), yaml.to_string()).unwrap();
    let report = synthesize(&f, &dir.join(name)).unwrap();
    report.written.iter().map(|p| std::fs::read(p).unwrap()).collect()
}

#[test]
fn same_seed_same_bytes_whatever_the_chunk_size() {
    let dir = temp_dir("determinism");
    let base = pulsed(15.0, 0.3, 9000.0, ", prf_jitter: 1 us, leakage: 30 dB, fluctuation: per_dwell")
        .replace("duration: 100 ms", "duration: 12 ms, start: 0.37 ms")
        + "switch_transient: {level: 20 dB, length: 10 us}\n";
    let a = synth_bytes(&base, &dir, "a");
    let b = synth_bytes(&base, &dir, "b");
    assert_eq!(a, b, "same scenario, same bytes");
    let chunked = base.replace("trigger: true}", "trigger: true, chunk: 777}");
    assert_eq!(synth_bytes(&chunked, &dir, "c"), a, "chunk size must not change the output");
    let reseeded = base.replace("seed: 11", "seed: 12");
    let d = synth_bytes(&reseeded, &dir, "d");
    // Jitter moves the dwell boundaries, so the truth times follow the seed; the dwells stay.
    assert_eq!(String::from_utf8_lossy(&a[0]).lines().count(), String::from_utf8_lossy(&d[0]).lines().count());
    assert_ne!(a[1], d[1], "a new seed gives new noise");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn truth_has_one_row_per_dwell_with_mid_dwell_values() {
    let dir = temp_dir("truth");
    // Dwell d spans [0.1 + 5d, 5.1 + 5d) ms; the mids 2.6 + 5d ms inside 40 ms: d = 0..=7.
    let yaml = pulsed(10.0, 0.25, 12_000.0, "")
        .replace("duration: 100 ms", "duration: 40 ms")
        .replace("range: {at: 12000 m}", "range: {at: 12000 m, per_second: -100 m}");
    let files = synth_bytes(&yaml, &dir, "t");
    let truth = String::from_utf8(files[0].clone()).unwrap();
    let lines: Vec<&str> = truth.lines().collect();
    assert_eq!(lines[0], "time_s,lobe,az_deg,el_deg,range_m");
    assert_eq!(lines.len() - 1, 8);
    for (d, line) in lines[1..].iter().enumerate() {
        let f: Vec<&str> = line.split(',').collect();
        let t: f64 = f[0].parse().unwrap();
        assert!((t - (2.6e-3 + 5e-3 * d as f64)).abs() < 1e-9, "{line}");
        assert_eq!(f[1], if d % 2 == 0 { "right" } else { "left" });
        assert_eq!((f[2], f[3]), ("0.250000", "0.000000"));
        let r: f64 = f[4].parse().unwrap();
        assert!((r - (12_000.0 - 100.0 * t)).abs() < 1e-3, "{line}");
    }
    // A start mid-dwell moves the times: the first mid after 1.3 ms is at 1.3 ms.
    let shifted = yaml.replace("duration: 40 ms", "duration: 40 ms, start: 1.3 ms");
    let files = synth_bytes(&shifted, &dir, "s");
    let truth = String::from_utf8(files[0].clone()).unwrap();
    let first: f64 = truth.lines().nth(1).unwrap().split(',').next().unwrap().parse().unwrap();
    assert!((first - 1.3e-3).abs() < 1e-9, "{first}");
    assert_eq!(truth.lines().count() - 1, 8, "mids 2.6..37.6 ms minus 1.3 ms all fall inside");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn sample_scenario_writes_unclipped_ci16_with_the_scale_in_the_meta() {
    let dir = temp_dir("sample");
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("samples/off-axis-excursion.scenario.yaml");
    let f = ScenarioFile::load(&path).unwrap();
    let report = synthesize(&f, &dir.join("ridge")).unwrap();
    assert_eq!(report.samples, 250_000);
    let truth = std::fs::read_to_string(dir.join("ridge.truth.csv")).unwrap();
    assert_eq!(report.dwells as usize, truth.lines().count() - 1);
    assert!((249..=250).contains(&report.dwells), "{}", report.dwells);
    let data = std::fs::read(dir.join("ridge.sigmf-data")).unwrap();
    assert!(data.len() <= 4 << 20, "sample capture must stay under 4 MB");
    let meta: serde_json::Value =
        serde_json::from_slice(&std::fs::read(dir.join("ridge.sigmf-meta")).unwrap()).unwrap();
    assert_eq!(meta["global"]["core:num_channels"].as_u64(), Some(2));
    let desc = meta["global"]["core:description"].as_str().unwrap();
    assert!(desc.contains(&format!("{:e}", report.scale)), "{desc}");
    let mut v = Vec::new();
    DataType::parse("ci16_le").unwrap().decode(&data, &mut v);
    let peak = v.chunks_exact(4).flat_map(|c| [c[0].abs(), c[1].abs()]).fold(0.0f32, f32::max);
    assert!(peak < 0.999, "IQ clipped (peak {peak})");
    assert!(peak > 0.3, "scale wastes the range (peak {peak})");
    // Noise power in the file is scale^2: check in the quiet part of PRIs.
    // 1 MS/s, first transmit at 0.1 ms, PRI 0.25 ms, echo at 50 us, switch 40 us before a transmit.
    let rate = 1e6;
    let quiet: Vec<f64> = v
        .chunks_exact(4)
        .enumerate()
        .filter(|(n, _)| {
            let t = (*n as f64 / rate - 0.1e-3).rem_euclid(0.25e-3);
            (0.07e-3..0.2e-3).contains(&t)
        })
        .map(|(_, c)| (c[0] as f64).powi(2) + (c[1] as f64).powi(2))
        .collect();
    let p = quiet.iter().sum::<f64>() / quiet.len() as f64 / (report.scale * report.scale);
    assert!((p - 1.0).abs() < 0.03, "noise power {p}");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn bad_scenarios_are_refused_with_positions() {
    let cases = [
        (pulsed(10.0, 0.0, 9000.0, "").replace("range: {at: 9000 m}", "el: {at: 0 deg}"), "needs `range`", ":8:"),
        (
            pulsed(10.0, 0.0, 9000.0, "").replace("format: sigmf_cf32_le", "format: sigmf_cf64"),
            "unknown capture format",
            ":3:",
        ),
        (
            pulsed(10.0, 0.0, 9000.0, "").replace("{name: left, toward: left}", "{name: right, toward: left}"),
            "used twice",
            ":5:",
        ),
        (pulsed(10.0, 0.0, 9000.0, "").replace("pulse: 3 us", "pulse: 3 ms"), "shorter than the PRI", ":7:"),
        (
            pulsed(10.0, 0.0, 9000.0, "").replace("range: {at: 9000 m}", "range: {at: 9000 m, per_second: -100 km}"),
            "must stay positive",
            ":8:",
        ),
        (
            pulsed(10.0, 0.0, 9000.0, "")
                .replace("az: {at: 0 deg}", "az: {at: 0 deg, swing: {amplitude: 1 deg, period: 0 s}}"),
            "period",
            ":8:",
        ),
    ];
    for (yaml, what, line) in cases {
        let f = ScenarioFile::parse(Path::new("bad.yaml"), yaml).unwrap();
        let e = Model::from_file(&f).unwrap_err();
        assert!(e.contains(what) && e.starts_with(&format!("bad.yaml{line}")), "{e}");
    }
}

#[test]
fn per_dwell_fluctuation_is_rayleigh_across_dwells_and_steady_within() {
    // Two pulses per dwell at 60 dB: both pulses of a dwell share one draw;
    // across dwells the power is exponential (Swerling-1-like) with mean SNR.
    let yaml = pulsed(60.0, 0.0, range_for_delay(20.0), ", fluctuation: per_dwell")
        .replace("pulses_per_dwell: 5", "pulses_per_dwell: 2")
        .replace("duration: 100 ms", "duration: 800 ms");
    let (iq, _, _) = generate_all(model(&yaml));
    let mean_power = 1e6 * gaussian(2.4, 6.0).powi(4);
    let powers: Vec<f64> = (0..400)
        .map(|d| {
            let p0 = iq[200 + 2000 * d + 21].norm_sqr() as f64;
            let p1 = iq[1200 + 2000 * d + 21].norm_sqr() as f64;
            // Same draw: amplitudes differ only by noise (about 1 rms).
            assert!((p0.sqrt() - p1.sqrt()).abs() < 5.0, "dwell {d}: {p0} vs {p1}");
            p0 / mean_power
        })
        .collect();
    let m = powers.iter().sum::<f64>() / powers.len() as f64;
    let var = powers.iter().map(|p| (p - m).powi(2)).sum::<f64>() / powers.len() as f64;
    // Exponential: mean 1, variance 1 (400 draws: about 5 % and 10 % spread).
    assert!((m - 1.0).abs() < 0.15, "mean power {m}");
    assert!((var / (m * m) - 1.0).abs() < 0.35, "normalised variance {}", var / (m * m));
    let below = powers.iter().filter(|&&p| p < std::f64::consts::LN_2).count();
    assert!((150..=250).contains(&below), "median of an exponential is ln 2: {below} of 400 below");
}

#[test]
fn beacon_truth_has_no_range_and_schedule_sync_writes_one_channel() {
    let dir = temp_dir("beacon-files");
    let yaml = "name: mast beacon\nseed: 3\n\
capture: {sample_rate: 1 MS/s, duration: 8 ms, format: sigmf_cu8, sync: schedule}\n\
antenna: {beam: cosine, beamwidth: 10 deg, squint: 5 deg}\n\
lobes: [{name: e, toward: right}, {name: w, toward: left}, {name: n, toward: up}]\n\
signal:\n  beacon: {tone: 12.5 kHz, snr: 10 dB, dwell: 1 ms}\n\
target: {az: {at: 1 deg}}\n";
    let files = synth_bytes(yaml, &dir, "b");
    let truth = String::from_utf8(files[0].clone()).unwrap();
    let rows: Vec<&str> = truth.lines().skip(1).collect();
    assert_eq!(rows.len(), 8);
    assert!(rows.iter().all(|r| r.ends_with(',')), "range must be empty for a beacon");
    assert!(rows[0].starts_with("0.000500000,e,") && rows[4].starts_with("0.004500000,w,"), "{truth}");
    assert_eq!(files[1].len(), 8000 * 2, "cu8, one complex channel");
    let meta: serde_json::Value = serde_json::from_slice(&files[2]).unwrap();
    assert_eq!(meta["global"]["core:num_channels"].as_u64(), Some(1));
    assert_eq!(meta["global"]["core:datatype"], "cu8");
    let _ = std::fs::remove_dir_all(&dir);
}
