//! Capture readers against files written by general-purpose libraries
//! (Python's `wave`, `scipy.io.wavfile`, the `sigmf` package, numpy, hound),
//! and the bad-input corpus. Fixtures: `tests/fixtures/make_capture_fixtures.py`.

use lobeflow::capture::reader::{CaptureReader, Format, OpenOptions, open};
use lobeflow::capture::roles::{NonFinite, RoleMap};
use lobeflow::capture::source::{CaptureSource, SPEC};
use lobeflow::capture::{CaptureError, Place};
use lobeflow::commands::inspect::{InspectArgs, examine, inspect};
use lobeflow_blocks::{Block, BlockError, Item, Outputs, Params, RawValue, SampleChunk, TypedBlock};
use serde_json::Value;
use std::path::{Path, PathBuf};

fn fixtures() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures")
}

fn good(name: &str) -> String {
    fixtures().join("captures").join(name).to_string_lossy().into_owned()
}

fn bad(name: &str) -> String {
    fixtures().join("bad").join(name).to_string_lossy().into_owned()
}

fn expected() -> Value {
    let text = std::fs::read_to_string(fixtures().join("captures/expected.json")).expect("expected.json");
    serde_json::from_str(&text).expect("valid JSON")
}

/// The values the library was handed, decoded by the fixture's rule.
fn expected_values(e: &Value) -> Vec<f64> {
    let scale = e["scale"].as_f64().unwrap();
    let offset = e["offset"].as_f64().unwrap();
    e["codes"].as_array().unwrap().iter().map(|c| (c.as_f64().unwrap() - offset) / scale).collect()
}

fn opts(rate: Option<f64>) -> OpenOptions {
    OpenOptions { rate, ..OpenOptions::default() }
}

/// Read everything in odd-sized blocks (to cross block boundaries).
fn read_all(r: &mut dyn CaptureReader) -> Result<Vec<f32>, BlockError> {
    let mut all = Vec::new();
    let mut buf = Vec::new();
    loop {
        let n = r.read_frames(37, &mut buf)?;
        if n == 0 {
            return Ok(all);
        }
        assert_eq!(buf.len(), n * r.info().components_per_frame());
        all.extend_from_slice(&buf);
    }
}

fn assert_samples(name: &str, got: &[f32], want: &[f64]) {
    assert_eq!(got.len(), want.len(), "{name}: count");
    for (k, (&g, &w)) in got.iter().zip(want).enumerate() {
        // Exact for 8/16/24-bit codes and float32; 32-bit codes round to f32.
        let tol = w.abs() * f64::from(f32::EPSILON) * 0.5;
        assert!((f64::from(g) - w).abs() <= tol, "{name}: component {k}: read {g}, written {w}");
    }
}

/// Read one fixture and compare it value by value with what was written.
fn check_fixture(key: &str, opts: OpenOptions) {
    let all = expected();
    let e = &all[key];
    let path = good(e["path"].as_str().unwrap());
    let before = std::fs::metadata(fixtures().join("captures").join(e["path"].as_str().unwrap()))
        .or_else(|_| std::fs::metadata(format!("{path}.sigmf-data")))
        .unwrap();
    let mut r = open(&path, &opts).unwrap_or_else(|e| panic!("{key}: {e}"));
    assert_eq!(r.info().rate, e["rate"].as_f64().unwrap(), "{key}: rate");
    assert_eq!(r.info().channels as u64, e["channels"].as_u64().unwrap(), "{key}: channels");
    assert_eq!(r.info().complex, e["complex"].as_bool().unwrap(), "{key}: complex");
    let got = read_all(r.as_mut()).unwrap();
    assert_samples(key, &got, &expected_values(e));
    assert_eq!(r.bytes_read(), r.info().data_bytes.unwrap());
    // Reading never changes the input.
    let after = std::fs::metadata(fixtures().join("captures").join(e["path"].as_str().unwrap()))
        .or_else(|_| std::fs::metadata(format!("{path}.sigmf-data")))
        .unwrap();
    assert_eq!(before.len(), after.len());
    assert_eq!(before.modified().unwrap(), after.modified().unwrap());
}

#[test]
fn wav_int16_written_by_python_wave() {
    // written by Python's wave module
    check_fixture("wave_i16_iq", opts(None));
}

#[test]
fn wav_unsigned_8bit_written_by_python_wave() {
    // written by Python's wave module (8-bit WAV is offset binary)
    check_fixture("wave_u8_mono", opts(None));
}

#[test]
fn wav_int24_written_by_python_wave() {
    // written by Python's wave module
    check_fixture("wave_i24_iqs", opts(None));
}

#[test]
fn wav_float32_written_by_scipy() {
    // written by scipy.io.wavfile
    check_fixture("scipy_f32_iqst", opts(None));
}

#[test]
fn wav_int32_written_by_scipy() {
    // written by scipy.io.wavfile
    check_fixture("scipy_i32_iq", opts(None));
}

#[test]
fn sigmf_ci16_written_by_the_sigmf_package() {
    // written by the sigmf package from PyPI (metadata) and numpy (data)
    check_fixture("kestrel_ci16", opts(None));
    check_fixture("kestrel_ci16", opts(Some(1e6)));
    let all = expected();
    let e = &all["kestrel_ci16"];
    for name in ["kestrel_ci16", "kestrel_ci16.sigmf-meta", "kestrel_ci16.sigmf-data"] {
        let r = open(&good(name), &OpenOptions::default()).unwrap();
        let info = r.info();
        assert_eq!(info.format, Format::Sigmf);
        assert_eq!(info.frequency, e["frequency"].as_f64());
        let meta = info.sigmf.as_ref().unwrap();
        let a = &meta.annotations[0];
        let want = e["annotation"].as_array().unwrap();
        assert_eq!(a.sample_start, want[0].as_u64().unwrap());
        assert_eq!(a.sample_count, want[1].as_u64());
        assert_eq!(a.label.as_deref(), want[2].as_str());
        assert_eq!(a.comment.as_deref(), Some("sync high"), "unknown fields kept");
    }
}

#[test]
fn raw_cu8_written_by_numpy() {
    // written by numpy's tofile; the datatype comes from the extension or the option
    check_fixture("dongle_cu8", opts(Some(2.4e6)));
    check_fixture(
        "dongle_cu8",
        OpenOptions { format: Format::Raw, datatype: Some("cu8".into()), rate: Some(2.4e6), channels: None },
    );
    let e = open(&good("dongle.cu8"), &OpenOptions::default()).err().unwrap();
    assert!(matches!(e, CaptureError::Setting { .. }), "{e:?}");
    let e = e.to_string();
    assert!(e.contains("dongle.cu8") && e.contains("set rate"), "{e}");
}

fn params(pairs: &[(&str, &str)]) -> Params {
    let mut p = Params::new();
    for spec in SPEC.params {
        let text = pairs.iter().find(|(n, _)| *n == spec.name).map(|(_, v)| *v).or(spec.default);
        if let Some(t) = text {
            p.insert(spec.name, spec.parse(&RawValue::from_text(t)).unwrap_or_else(|e| panic!("{}: {e}", spec.name)));
        }
    }
    p
}

fn build(pairs: &[(&str, &str)]) -> Result<Box<dyn Block>, String> {
    (SPEC.build)(&params(pairs), &Default::default()).map_err(|e| e.to_string())
}

/// Chunks, notice texts and the final progress of a source run to its end.
type Run = (Vec<SampleChunk>, Vec<String>, Option<(u64, u64)>);

fn run(block: &mut dyn Block) -> Result<Run, BlockError> {
    let mut out = Outputs::new(1);
    let mut chunks = Vec::new();
    let mut notices = Vec::new();
    while block.generate(&mut out)? {
        for (_, item) in out.drain() {
            if let Item::Samples(c) = item {
                chunks.push(c);
            }
        }
    }
    chunks.extend(out.drain().filter_map(|(_, i)| if let Item::Samples(c) = i { Some(c) } else { None }));
    notices.extend(out.drain_notices().map(|n| n.what));
    Ok((chunks, notices, block.progress()))
}

#[test]
fn source_block_emits_roles_with_exact_stamps() {
    // float32 I, Q, sync, trigger written by scipy.io.wavfile
    let all = expected();
    let e = &all["scipy_f32_iqst"];
    let want = expected_values(e);
    let mut b = build(&[("path", &good("scipy_f32_iqst.wav")), ("chunk", "100")]).unwrap();
    let (chunks, _, progress) = run(b.as_mut()).unwrap();
    assert_eq!(chunks.len(), 3);
    let mut next = 0;
    for c in &chunks {
        assert_eq!(c.stamp.index, next);
        assert_eq!(c.stamp.rate, 44100.0);
        let (sync, trig) = (c.sync.as_ref().unwrap(), c.trigger.as_ref().unwrap());
        for k in 0..c.len() {
            let f = &want[(next as usize + k) * 4..][..4];
            assert_eq!(
                [c.iq[k].re, c.iq[k].im, sync[k], trig[k]],
                [f[0] as f32, f[1] as f32, f[2] as f32, f[3] as f32]
            );
        }
        next += c.len() as u64;
    }
    assert_eq!(next, 256);
    assert_eq!(progress, Some((4096, 4096)));

    // Swapped roles, an ignored channel, a single real channel.
    let mut b = build(&[("path", &good("scipy_f32_iqst.wav")), ("roles", "q,i,-,sync")]).unwrap();
    let (chunks, _, _) = run(b.as_mut()).unwrap();
    let c = &chunks[0];
    assert_eq!((c.iq[9].re, c.iq[9].im), (want[9 * 4 + 1] as f32, want[9 * 4] as f32));
    assert_eq!(c.sync.as_ref().unwrap()[0], want[3] as f32);
    assert!(c.trigger.is_none());
    let mut b = build(&[("path", &good("wave_u8_mono.wav"))]).unwrap();
    let (chunks, _, _) = run(b.as_mut()).unwrap();
    assert!(chunks[0].iq.iter().all(|z| z.im == 0.0) && chunks[0].sync.is_none());

    // SigMF: channel 2 is the sync (its real part).
    let s = &all["kestrel_ci16"];
    let want = expected_values(s);
    let mut b = build(&[("path", &good("kestrel_ci16"))]).unwrap();
    let (chunks, _, _) = run(b.as_mut()).unwrap();
    assert_eq!(chunks[0].sync.as_ref().unwrap()[7], want[7 * 4 + 2] as f32);
    assert_eq!(chunks[0].iq[7].im, want[7 * 4 + 1] as f32);
}

#[test]
fn hound_extensible_24_bit_and_24_in_32() {
    // written by hound (WAVE_FORMAT_EXTENSIBLE above 16 bits or 2 channels)
    let dir = std::env::temp_dir().join(format!("lobeflow-captures-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    for container in [3u16, 4] {
        let path = dir.join(format!("ext{container}.wav"));
        let spec = hound::WavSpec {
            channels: 3,
            sample_rate: 32000,
            bits_per_sample: 24,
            sample_format: hound::SampleFormat::Int,
        };
        let mut w = hound::WavWriter::new_with_spec_ex(
            std::io::BufWriter::new(std::fs::File::create(&path).unwrap()),
            hound::WavSpecEx { spec, bytes_per_sample: container },
        )
        .unwrap();
        let codes: Vec<i32> = (0..300).map(|k: i32| ((k * 7919) % (1 << 24)) - (1 << 23)).collect();
        for &c in &codes {
            w.write_sample(c).unwrap();
        }
        w.finalize().unwrap();
        let mut r = open(path.to_str().unwrap(), &OpenOptions::default()).unwrap();
        let got = read_all(r.as_mut()).unwrap();
        let want: Vec<f64> = codes.iter().map(|&c| f64::from(c) / 8388608.0).collect();
        assert_samples(&format!("hound 24-bit in {container} bytes"), &got, &want);
    }
    let _ = std::fs::remove_dir_all(&dir);
}

fn open_err(path: &str, o: OpenOptions) -> String {
    match open(path, &o) {
        Ok(mut r) => match read_all(r.as_mut()) {
            Ok(_) => panic!("{path} read without error"),
            Err(e) => e.to_string(),
        },
        Err(e) => e.to_string(),
    }
}

#[test]
fn truncated_wav_names_file_and_offsets() {
    let e = open_err(&bad("truncated.wav"), OpenOptions::default());
    assert!(e.contains("truncated.wav") && e.contains("truncated"), "{e}");
    // header 44 bytes + 400 data bytes claimed, 150 present
    assert!(e.contains("byte offset 44 to 444") && e.contains("byte offset 194"), "{e}");
    assert!(e.contains("at sample 37"), "{e}");
}

#[test]
fn odd_raw_ci16_is_refused_with_offset() {
    let o = OpenOptions { format: Format::Raw, datatype: Some("ci16_le".into()), rate: Some(1e6), channels: None };
    let e = open_err(&bad("odd.ci16"), o);
    assert!(e.contains("odd.ci16") && e.contains("1 byte(s) left over at byte offset 400"), "{e}");
}

#[test]
fn unsupported_wav_formats_are_named() {
    let e = open_err(&bad("float64.wav"), OpenOptions::default());
    assert!(e.contains("float64.wav") && e.contains("unsupported") && e.contains("64 bits"), "{e}");
    let e = open_err(&bad("alaw.wav"), OpenOptions::default());
    assert!(e.contains("alaw.wav") && e.contains("A-law") && e.contains("0x0006"), "{e}");
}

#[test]
fn roles_that_do_not_fit_list_the_channels() {
    let e = build(&[("path", &good("wave_i16_iq.wav")), ("roles", "i,q,sync")]).err().unwrap().to_string();
    assert!(
        e.contains("wave_i16_iq.wav") && e.contains("name 3 channel(s)") && e.contains("channel 1, channel 2"),
        "{e}"
    );
    let e = build(&[("path", &good("kestrel_ci16")), ("roles", "i,q")]).err().unwrap().to_string();
    assert!(e.contains("role 'i' for channel 1") && e.contains("channel 1 (complex), channel 2 (complex)"), "{e}");
    let e = build(&[("path", &good("wave_i24_iqs.wav")), ("roles", "i,sync,sync")]).err().unwrap().to_string();
    assert!(e.contains("channels 2 and 3"), "{e}");
    let e = build(&[("path", &good("wave_i16_iq.wav")), ("roles", "q,sync")]).err().unwrap().to_string();
    assert!(e.contains("no channel has role 'i'"), "{e}");
}

#[test]
fn sigmf_metadata_faults_are_explained() {
    let e = open_err(&bad("no_datatype.sigmf-meta"), OpenOptions::default());
    assert!(e.contains("no_datatype.sigmf-meta") && e.contains("no core:datatype"), "{e}");
    let e = open_err(&bad("unordered_captures"), OpenOptions::default());
    assert!(e.contains("unordered_captures.sigmf-meta") && e.contains("captures[1]"), "{e}");
    let e = open_err(&bad("no_data_file"), OpenOptions::default());
    assert!(e.contains("no_data_file.sigmf-data") && e.contains("cannot open the data file"), "{e}");
    let e = open_err(&bad("rate_48k.sigmf-data"), opts(Some(96000.0)));
    assert!(e.contains("rate_48k.sigmf-meta") && e.contains("96000") && e.contains("48000"), "{e}");
    // A rate within 1e-9 relative is the same rate.
    assert!(open(&bad("rate_48k"), &opts(Some(48000.0 * (1.0 + 1e-12)))).is_ok());
    let e = open_err(&good("kestrel_ci16"), OpenOptions { channels: Some(3), ..OpenOptions::default() });
    assert!(e.contains("channels 3") && e.contains("says 2"), "{e}");
}

/// The error of opening `path` and reading it to the end, as opened.
fn open_error(path: &str, o: OpenOptions) -> CaptureError {
    match open(path, &o) {
        Ok(_) => panic!("{path} opened without error"),
        Err(e) => e,
    }
}

#[test]
fn capture_errors_come_by_kind_with_file_and_place() {
    match open_error(&bad("truncated.wav"), OpenOptions::default()) {
        CaptureError::Truncated { path, offset: 194, sample: 37, .. } => assert!(path.ends_with("truncated.wav")),
        e => panic!("{e:?}"),
    }
    match open_error(&bad("float64.wav"), OpenOptions::default()) {
        CaptureError::Unsupported { what, .. } => assert!(what.contains("64 bits"), "{what}"),
        e => panic!("{e:?}"),
    }
    let e = open_error(&bad("nothing_here.wav"), OpenOptions::default());
    let io = std::error::Error::source(&e).and_then(|s| s.downcast_ref::<std::io::Error>());
    assert_eq!(io.map(std::io::Error::kind), Some(std::io::ErrorKind::NotFound), "{e:?}");
    assert!(matches!(open_error(&bad("nothing_here"), OpenOptions::default()), CaptureError::NotFound { .. }));
    match open_error(&bad("unordered_captures"), OpenOptions::default()) {
        CaptureError::BadHeader { path, place: Place::Field(field), .. } => {
            assert!(path.ends_with("unordered_captures.sigmf-meta") && field.starts_with("captures[1]"), "{field}");
        }
        e => panic!("{e:?}"),
    }
    let e = open_error(&bad("rate_48k"), opts(Some(96000.0)));
    assert!(matches!(e, CaptureError::Setting { .. }), "{e:?}");
    let info = open(&good("wave_i16_iq.wav"), &OpenOptions::default()).unwrap().info().clone();
    let e = RoleMap::new(&["i".into(), "q".into(), "sync".into()], &info).unwrap_err();
    assert!(matches!(&e, CaptureError::Roles { path, .. } if path.ends_with("wave_i16_iq.wav")), "{e:?}");
}

#[test]
fn nan_samples_error_or_are_zeroed_and_counted() {
    let path = bad("nan.cf32_le");
    let e = build(&[("path", &path), ("rate", "1 MS/s")])
        .and_then(|mut b| run(b.as_mut()).map(|_| ()).map_err(|e| e.to_string()));
    let e = e.err().unwrap();
    // sample 37, I part: byte offset 37 * 8
    assert!(e.contains("nan.cf32_le") && e.contains("at sample 37") && e.contains("byte offset 296"), "{e}");
    let mut b = build(&[("path", &path), ("rate", "1 MS/s"), ("nonfinite", "zero")]).unwrap();
    let (chunks, notices, _) = run(b.as_mut()).unwrap();
    assert_eq!(chunks[0].iq[37].re, 0.0);
    assert_eq!(chunks[0].iq[50].im, 0.0);
    assert!(chunks.iter().all(|c| c.iq.iter().all(|z| z.re.is_finite() && z.im.is_finite())));
    assert_eq!(notices.len(), 1);
    assert!(notices[0].contains("replaced 2 non-finite") && notices[0].contains("sample 37"), "{notices:?}");
}

#[test]
fn missing_files_and_unguessable_formats() {
    let e = open_err(&bad("nothing_here.wav"), OpenOptions::default());
    assert!(e.contains("nothing_here.wav") && e.contains("cannot open"), "{e}");
    let e = open_err(&bad("nothing_here"), OpenOptions::default());
    assert!(e.contains("nothing_here") && e.contains("no such capture"), "{e}");
    let e = open_err("-", OpenOptions::default());
    assert!(e.contains("standard input") && e.contains("format raw"), "{e}");
}

#[test]
fn a_reader_chunk_survives_the_role_map_directly() {
    // numpy-written cu8 through the reader and role map, without the block
    let mut r = open(&good("dongle.cu8"), &opts(Some(2.4e6))).unwrap();
    let roles = RoleMap::new(&[], r.info()).unwrap();
    let mut src = CaptureSource::new(r, roles, 1000, NonFinite::Error);
    let mut out = Outputs::new(1);
    assert!(src.generate(&mut out).unwrap());
    assert!(!src.generate(&mut out).unwrap());
    assert_eq!(src.replaced().count, 0);
    r = open(&good("dongle.cu8"), &opts(Some(2.4e6))).unwrap();
    assert_eq!(r.info().frames(), Some(256));
}

#[test]
fn inspect_levels_match_numpy() {
    let all = expected();
    for key in ["wave_i16_iq", "wave_i24_iqs", "scipy_f32_iqst", "kestrel_ci16", "dongle_cu8"] {
        let e = &all[key];
        let rate = (e["path"].as_str().unwrap().ends_with(".cu8")).then(|| e["rate"].as_f64().unwrap());
        let args = InspectArgs {
            path: good(e["path"].as_str().unwrap()),
            options: opts(rate),
            roles: vec![],
            max_seconds: 60.0,
        };
        let ins = examine(&args).unwrap();
        assert!(!ins.limited);
        let numpy = e["stats"].as_array().unwrap();
        assert_eq!(ins.stats.len(), numpy.len(), "{key}");
        for (s, n) in ins.stats.iter().zip(numpy) {
            // numpy's min, max, mean and RMS of the decoded values
            for (got, field) in [(s.min, "min"), (s.max, "max"), (s.mean, "mean"), (s.rms, "rms")] {
                let want = n[field].as_f64().unwrap();
                assert!(
                    (got - want).abs() <= 1e-6 * (1.0 + want.abs()),
                    "{key} {} {field}: {got} vs numpy {want}",
                    s.label
                );
            }
        }
        // The fixture script puts both integer extremes in the first channel.
        if key != "scipy_f32_iqst" {
            assert_eq!(ins.stats[0].clipped, 2, "{key}");
        }
    }
}

#[test]
fn inspect_finds_the_switch_rate_and_says_when_it_stops_early() {
    // A two-lobe beacon at 48 kS/s, written by hound: lobe amplitudes switch
    // at 125 Hz (a 62.5 Hz square wave of amplitude: lobe A, lobe B), sync on channel 3.
    let dir = std::env::temp_dir().join(format!("lobeflow-inspect-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("switch.wav");
    let rate = 48000u32;
    let spec =
        hound::WavSpec { channels: 3, sample_rate: rate, bits_per_sample: 16, sample_format: hound::SampleFormat::Int };
    let mut w = hound::WavWriter::create(&path, spec).unwrap();
    let dwell = (rate / 125) as usize; // 384 samples per dwell
    for k in 0..(rate as usize * 2) {
        let lobe_b = (k / dwell) % 2 == 1;
        let amp = if lobe_b { 0.6 } else { 0.3 };
        let ph = 2.0 * std::f64::consts::PI * 3000.0 * k as f64 / f64::from(rate);
        w.write_sample((amp * ph.cos() * 32767.0) as i16).unwrap();
        w.write_sample((amp * ph.sin() * 32767.0) as i16).unwrap();
        w.write_sample(if lobe_b { 16000i16 } else { -16000 }).unwrap();
    }
    w.finalize().unwrap();
    let p = path.to_string_lossy().into_owned();
    let ins =
        examine(&InspectArgs { path: p.clone(), options: OpenOptions::default(), roles: vec![], max_seconds: 60.0 })
            .unwrap();
    assert_eq!(ins.envelopes.len(), 2);
    for env in &ins.envelopes {
        // The amplitude square wave has its fundamental at 62.5 Hz (period of two dwells).
        let f = env.peaks[0].frequency_hz;
        assert!((f - 62.5).abs() < 0.5, "{}: {f}", env.source);
        // and odd harmonics only: the second peak near 187.5 Hz
        assert!((env.peaks[1].frequency_hz - 187.5).abs() < 0.5, "{:?}", env.peaks);
    }
    let text =
        inspect(&InspectArgs { path: p.clone(), options: OpenOptions::default(), roles: vec![], max_seconds: 0.5 })
            .unwrap();
    assert!(text.contains("only the first 500 ms") && text.contains("24000 samples"), "{text}");
    assert!(text.contains("ch3 sync") && text.contains("48 kS/s"), "{text}");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn standard_input_is_read_through_the_command() {
    // numpy-written cu8 piped in, as from a live receiver
    let exe = env!("CARGO_BIN_EXE_lobeflow");
    let data = std::fs::read(good("dongle.cu8")).unwrap();
    let mut child = std::process::Command::new(exe)
        .args(["inspect", "-", "--format", "raw", "--datatype", "cu8", "--rate", "2.4 MS/s"])
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    use std::io::Write;
    child.stdin.take().unwrap().write_all(&data).unwrap();
    let out = child.wait_with_output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    assert!(text.contains("standard input") && text.contains("examined     all 256 samples"), "{text}");
    // numpy's figures for the same file
    let all = expected();
    let rms = all["dongle_cu8"]["stats"][0]["rms"].as_f64().unwrap();
    assert!(text.contains(&format!("{rms:.6}")), "{text}");

    // A pipe ending mid-frame is an error with the byte offset.
    let mut child = std::process::Command::new(exe)
        .args(["inspect", "-", "--format", "raw", "--datatype", "cu8", "--rate", "1e6"])
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    child.stdin.take().unwrap().write_all(&data[..101]).unwrap();
    let out = child.wait_with_output().unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2));
    assert!(err.contains("1 byte(s) left over at byte offset 100"), "{err}");
}

#[test]
fn capture_reader_runs_in_a_graph() {
    // scipy-written float32 capture through the registered kind, a graph file and the scheduler
    let dir = std::env::temp_dir().join(format!("lobeflow-graph-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let graph = dir.join("read.yaml");
    let yaml = format!(
        "title: read a capture\nsettings:\n  input: {{default: {}, doc: capture}}\nblocks:\n  read: {{kind: capture_reader, set: {{path: $input, chunk: 50}}}}\n  sink: {{kind: discard}}\nwiring:\n  - read -> sink\n",
        good("scipy_f32_iqst.wav")
    );
    std::fs::write(&graph, yaml).unwrap();
    let mut session = lobeflow::Session::open(&graph).unwrap();
    session.out_dir(dir.join("out"));
    let report = session.run().unwrap();
    let sink = report.stats.iter().find(|s| s.name.ends_with("sink")).unwrap();
    assert_eq!((sink.samples_in, sink.items_in), (256, 6));
    // A bad capture stops the run with the file named.
    session.set("input", &bad("alaw.wav"));
    let e = session.run().err().unwrap().to_string();
    assert!(e.contains("alaw.wav") && e.contains("A-law"), "{e}");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn sigmf_retune_is_read_and_reported() {
    // written by the sigmf package: cf32_le with a second capture segment at sample 100
    check_fixture("retune_cf32", OpenOptions::default());
    let mut b = build(&[("path", &good("retune_cf32.sigmf-meta")), ("chunk", "64")]).unwrap();
    let mut out = Outputs::new(1);
    let mut notices = Vec::new();
    while b.generate(&mut out).unwrap() {
        notices.extend(out.drain_notices());
    }
    notices.extend(out.drain_notices());
    assert_eq!(notices.len(), 1, "{notices:?}");
    assert_eq!(notices[0].stamp.index, 100);
    assert!(
        notices[0].what.contains("retune_cf32.sigmf-meta")
            && notices[0].what.contains("segment 2 starts at sample 100, centre frequency 2420000000 Hz"),
        "{:?}",
        notices[0]
    );
}
