//! The bad-input corpus (`tests/bad_inputs/`): every case runs the real
//! `lobeflow` command as a hostile user would, each under a timeout, and
//! must end with a clear error (or, for inputs that are valid, a result),
//! never a panic (exit 101) or a signal. Afterwards no input may have
//! changed (hashes before and after), and no case may have passed the
//! memory ceiling (peak resident set of the child, from `wait4`).
//!
//! One test per defect class, so a failure names what regressed; the case
//! table of each test is its part of the corpus.

// wait4 (a child's peak memory) and mkfifo have no safe std form.
#![allow(unsafe_code)]

use std::collections::BTreeMap;
use std::hash::{Hash, Hasher};
use std::io::{Read, Write};
use std::path::PathBuf;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// The stated memory ceiling of a run (README, "Limits").
const CEILING_KIB: i64 = 256 * 1024;
/// Longest any case may take; a hang is killed and fails the test.
const TIMEOUT: Duration = Duration::from_secs(60);

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn case(name: &str) -> String {
    root().join("tests/bad_inputs/cases").join(name).to_string_lossy().into_owned()
}

fn graph(name: &str) -> String {
    root().join("graphs").join(name).to_string_lossy().into_owned()
}

fn scratch(name: &str) -> PathBuf {
    let d = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join(format!("hostile-{name}"));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// How a run of the command ended.
#[derive(Debug)]
struct Outcome {
    code: Option<i32>,
    signal: Option<i32>,
    stdout: String,
    stderr: String,
    peak_kib: i64,
    elapsed: Duration,
}

#[derive(Clone, Copy)]
enum Out {
    Pipe,
    /// A pipe whose reading end is closed at once (`| head -0`).
    ClosedPipe,
    DevFull,
}

struct Run {
    args: Vec<String>,
    stdin: Option<Vec<u8>>,
    stdout: Out,
    stderr: Out,
}

fn run(args: &[&str]) -> Run {
    Run { args: args.iter().map(|s| s.to_string()).collect(), stdin: None, stdout: Out::Pipe, stderr: Out::Pipe }
}

fn stdio(o: Out) -> Stdio {
    match o {
        Out::Pipe | Out::ClosedPipe => Stdio::piped(),
        Out::DevFull => std::fs::OpenOptions::new().write(true).open("/dev/full").unwrap().into(),
    }
}

fn drain(r: Option<impl Read + Send + 'static>) -> std::thread::JoinHandle<String> {
    std::thread::spawn(move || {
        let mut s = Vec::new();
        if let Some(mut r) = r {
            let _ = r.read_to_end(&mut s);
        }
        String::from_utf8_lossy(&s).into_owned()
    })
}

impl Run {
    fn go(self) -> Outcome {
        let mut cmd = Command::new(env!("CARGO_BIN_EXE_lobeflow"));
        cmd.args(&self.args).stdout(stdio(self.stdout)).stderr(stdio(self.stderr));
        cmd.stdin(if self.stdin.is_some() { Stdio::piped() } else { Stdio::null() });
        let t0 = Instant::now();
        // Reaped by `wait4` below, which also gives the peak memory.
        #[allow(clippy::zombie_processes)]
        let mut child = cmd.spawn().unwrap();
        if let (Some(data), Some(mut w)) = (self.stdin, child.stdin.take()) {
            std::thread::spawn(move || {
                let _ = w.write_all(&data);
            });
        }
        let mut stdout = child.stdout.take();
        if matches!(self.stdout, Out::ClosedPipe) {
            drop(stdout.take());
        }
        let out = drain(stdout);
        let err = drain(child.stderr.take());
        let pid = child.id() as libc::pid_t;
        let (status, peak_kib) = loop {
            let mut status = 0;
            // SAFETY: rusage is plain data; wait4 fills it for our own child.
            let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
            let r = unsafe { libc::wait4(pid, &mut status, libc::WNOHANG, &mut usage) };
            if r == pid {
                break (status, usage.ru_maxrss);
            }
            assert!(r == 0, "wait4 failed");
            if t0.elapsed() > TIMEOUT {
                let _ = child.kill();
                panic!("hang: {:?} still running after {TIMEOUT:?}", self.args);
            }
            std::thread::sleep(Duration::from_millis(5));
        };
        let elapsed = t0.elapsed();
        let (code, signal) = if libc::WIFEXITED(status) {
            (Some(libc::WEXITSTATUS(status)), None)
        } else {
            (None, Some(libc::WTERMSIG(status)))
        };
        Outcome {
            code,
            signal,
            stdout: out.join().unwrap_or_default(),
            stderr: err.join().unwrap_or_default(),
            peak_kib,
            elapsed,
        }
    }
}

/// Run and check the common rules: no panic, no signal, under the ceiling,
/// the expected exit code and words in the message.
fn expect(r: Run, code: i32, words: &[&str]) -> Outcome {
    let args = r.args.join(" ");
    let o = r.go();
    assert_eq!(o.signal, None, "{args}: killed by a signal: {o:?}");
    assert_ne!(o.code, Some(101), "{args}: panicked: {}", o.stderr);
    assert!(!o.stderr.contains("panicked"), "{args}: panicked: {}", o.stderr);
    assert!(o.peak_kib < CEILING_KIB, "{args}: peak {} MiB is over the ceiling", o.peak_kib / 1024);
    assert_eq!(o.code, Some(code), "{args}: stderr: {}", o.stderr);
    for w in words {
        assert!(o.stderr.contains(w), "{args}: '{w}' missing from: {}", o.stderr);
    }
    if code == 2 {
        assert_eq!(o.stderr.matches("error: ").count(), 1, "{args}: one error, once: {}", o.stderr);
    }
    o
}

/// Content hashes of every file the cases read.
fn input_hashes() -> BTreeMap<PathBuf, u64> {
    let mut out = BTreeMap::new();
    for dir in ["tests/bad_inputs/cases", "samples", "graphs", "graphs/parts"] {
        for e in std::fs::read_dir(root().join(dir)).unwrap().flatten() {
            if e.path().is_file() {
                let mut h = std::collections::hash_map::DefaultHasher::new();
                std::fs::read(e.path()).unwrap().hash(&mut h);
                out.insert(e.path(), h.finish());
            }
        }
    }
    out
}

/// Run `cases` and check that no input changed meanwhile.
fn unchanged_inputs(cases: impl FnOnce()) {
    let before = input_hashes();
    cases();
    assert_eq!(before, input_hashes(), "an input file was modified");
}

#[test]
fn crashes_and_hangs_are_clear_errors() {
    unchanged_inputs(|| {
        let out = scratch("crashes");
        let o = out.to_string_lossy().to_string();
        let four = graph("four-lobe-pulsed.yaml");
        let beacon = graph("two-lobe-beacon.yaml");
        expect(run(&["inspect", &case("huge_channels.sigmf-meta")]), 2, &["core:num_channels", "at most 64"]);
        expect(
            run(&["run", &four, "--input", &case("huge_rate.sigmf-meta"), "--out", &o]),
            2,
            &["core:sample_rate", "unusable"],
        );
        expect(run(&["check", &four, "--set", "blank=1e30 samples"]), 2, &["blank", "out of range"]);
        // Within the static bound, but 25 s at the capture's rate: refused
        // when the rate is known.
        expect(
            run(&["run", &four, "--set", "blank=5e7 samples", "--out", &o, "--quiet"]),
            2,
            &["'blank'", "out of range"],
        );
        expect(run(&["check", &four, "--set", "guard=1e19 samples"]), 2, &["guard", "out of range"]);
        expect(run(&["run", &beacon, "--set", "first_start=1e30 samples", "--out", &o]), 2, &["first_start"]);
        expect(run(&["run", &four, "--threads", "100000", "--out", &o]), 2, &["100000"]);
    });
}

#[test]
fn long_use_chains_and_huge_graphs_are_handled() {
    let d = scratch("graphs");
    for k in 0..5000 {
        let body = if k == 4999 {
            "blocks:\n  p: {kind: pass}\nexposes:\n  inputs: {samples: p.samples}\n  outputs: {samples: p.samples}\n"
                .to_string()
        } else {
            format!(
                "blocks:\n  p: {{use: g{}.yaml}}\nexposes:\n  inputs: {{samples: p.samples}}\n  outputs: {{samples: p.samples}}\n",
                k + 1
            )
        };
        std::fs::write(d.join(format!("g{k}.yaml")), body).unwrap();
    }
    let g0 = d.join("g0.yaml").to_string_lossy().to_string();
    expect(run(&["check", &g0]), 2, &["at most 64 may nest"]);

    let mut big = String::from("blocks:\n  tone: {kind: test_tone}\n");
    let mut wiring = String::from("wiring:\n  - tone -> b0\n");
    for k in 0..20_000 {
        big.push_str(&format!("  b{k}: {{kind: pass}}\n"));
        if k > 0 {
            wiring.push_str(&format!("  - b{} -> b{k}\n", k - 1));
        }
    }
    big.push_str("  end: {kind: discard}\n");
    wiring.push_str("  - b19999 -> end\n");
    let path = d.join("big.yaml");
    std::fs::write(&path, big + &wiring).unwrap();
    let o = expect(run(&["check", &path.to_string_lossy()]), 0, &[]);
    assert!(o.stdout.contains("20002 blocks"), "{}", &o.stdout[o.stdout.len().saturating_sub(200)..]);
    assert!(o.elapsed < Duration::from_secs(10), "checking 20 000 blocks took {:?}", o.elapsed);
}

#[test]
fn closed_or_full_standard_streams_end_quietly_or_with_an_error() {
    let four = graph("four-lobe-pulsed.yaml");
    let mut r = run(&["blocks"]);
    r.stdout = Out::DevFull;
    expect(r, 2, &["cannot write to standard output"]);
    let mut r = run(&["check", &four]);
    r.stdout = Out::ClosedPipe;
    let o = expect(r, 0, &[]);
    assert_eq!(o.stderr, "", "a closed pipe is not an error");
    let mut r = run(&["blocks"]);
    r.stdout = Out::ClosedPipe;
    expect(r, 0, &[]);
    let out = scratch("devfull");
    let mut r = run(&["run", &four, "--out", &out.to_string_lossy()]);
    r.stderr = Out::DevFull;
    let o = r.go();
    assert_eq!((o.code, o.signal), (Some(2), None), "a summary that cannot be written is an error, not a panic");
}

#[test]
fn empty_and_stream_inputs() {
    unchanged_inputs(|| {
        let out = scratch("empty");
        let o = out.to_string_lossy().to_string();
        let four = graph("four-lobe-pulsed.yaml");
        let none = ["the capture holds no samples"];
        expect(run(&["run", &four, "--input", &case("empty_data.wav"), "--out", &o]), 2, &none);
        expect(run(&["inspect", &case("empty.cu8"), "--rate", "1e6"]), 2, &none);
        expect(run(&["inspect", &case("empty_data.sigmf-meta")]), 2, &none);
        expect(run(&["inspect", "-", "--format", "raw", "--datatype", "cu8", "--rate", "1e6"]), 2, &none);
        expect(run(&["inspect", "/dev/null", "--format", "raw", "--datatype", "cu8", "--rate", "1e6"]), 2, &none);
        assert!(!out.join("angles.csv").exists(), "nothing written for an empty capture");
    });
}

/// A FIFO is read as a stream, for raw data and for WAV alike.
#[test]
fn fifos_are_read_as_streams() {
    let d = scratch("fifo");
    for (name, src, extra) in [
        ("raw.cu8", root().join("tests/fixtures/captures/dongle.cu8"), vec!["--rate", "2.4e6"]),
        ("wave.wav", root().join("tests/fixtures/captures/wave_i16_iq.wav"), vec![]),
    ] {
        let fifo = d.join(name);
        let c = std::ffi::CString::new(fifo.to_string_lossy().as_bytes()).unwrap();
        // SAFETY: a valid NUL-terminated path.
        assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o600) }, 0);
        let data = std::fs::read(&src).unwrap();
        let writer = {
            let fifo = fifo.clone();
            std::thread::spawn(move || std::fs::OpenOptions::new().write(true).open(fifo).unwrap().write_all(&data))
        };
        let mut args = vec!["inspect", fifo.to_str().unwrap()];
        args.extend(extra);
        let o = expect(run(&args), 0, &[]);
        writer.join().unwrap().unwrap();
        assert!(o.stdout.contains("examined"), "{}", o.stdout);
    }
}

#[test]
fn physical_nonsense_is_refused_or_flagged() {
    unchanged_inputs(|| {
        let out = scratch("physics");
        let o = out.to_string_lossy().to_string();
        let four = graph("four-lobe-pulsed.yaml");
        let beacon = graph("two-lobe-beacon.yaml");
        expect(run(&["check", &beacon, "--set", "guard=30ms"]), 2, &["not shorter than the dwell"]);
        // Sync timing learns the dwell (1 ms here), so only the run can tell.
        let g = out.join("sync-gate.yaml");
        let wav = root().join("samples/four-lobe-pulsed.wav");
        std::fs::write(
            &g,
            format!(
                "blocks:\n  read: {{kind: capture_reader, set: {{path: '{}'}}}}\n  gate: {{kind: lobe_gate, set: {{lobes: 'right,up,left,down', guard: 5 ms}}}}\nwiring:\n  - read -> gate\n",
                wav.display()
            ),
        )
        .unwrap();
        expect(run(&["run", &g.to_string_lossy(), "--out", &o]), 2, &["inside the guard"]);
        expect(run(&["check", &four, "--set", "pairs=az=right/left, el=up/sideways"]), 2, &["'sideways'"]);
        expect(run(&["run", &beacon, "--set", "tone=2 MHz", "--out", &o]), 2, &["outside the band"]);
        // A pulse longer than the echo: the range would come out negative.
        expect(run(&["run", &four, "--set", "pulse=150 us", "--out", &o, "--quiet"]), 0, &[]);
        let dwells = std::fs::read_to_string(out.join("dwells.csv")).unwrap();
        let col = dwells.lines().next().unwrap().split(',').position(|c| c == "range_m").unwrap();
        for line in dwells.lines().skip(1) {
            let r = line.split(',').nth(col).unwrap_or("");
            assert!(r.is_empty() || r.parse::<f64>().unwrap() >= 0.0, "negative range: {line}");
        }
    });
}

#[test]
fn memory_stays_under_the_ceiling() {
    unchanged_inputs(|| {
        let out = scratch("memory");
        let o = out.to_string_lossy().to_string();
        let four = graph("four-lobe-pulsed.yaml");
        let beacon = graph("two-lobe-beacon.yaml");
        expect(run(&["run", &four, "--set", "prf=0.01", "--out", &o]), 2, &["prf", "GB", "256 MiB"]);
        // 1e6 bins is past the metres limit at this rate; 90 000 km is not, but
        // its picture window would need about 460 MB.
        expect(
            run(&["run", &four, "--set", "search_end=1e6 bins", "--out", &o, "--quiet"]),
            2,
            &["range_end", "out of range"],
        );
        expect(
            run(&["run", &four, "--set", "search_end=90000 km", "--out", &o, "--quiet"]),
            2,
            &["range_end", "256 MiB"],
        );
        // Every sample its own dwell: the timeline's merge starves for segments.
        let r = run(&["run", &beacon, "--set", "dwell=2 samples", "--set", "guard=0", "--out", &o, "--quiet"]);
        let got = r.go();
        assert_eq!(got.signal, None);
        assert!(got.peak_kib < CEILING_KIB, "peak {} MiB", got.peak_kib / 1024);
        let d = scratch("bigmeta");
        let mut meta = String::from(
            "{\"global\": {\"core:datatype\": \"cu8\", \"core:version\": \"1.2.0\", \"core:sample_rate\": 1e6}, \"captures\": [{\"core:sample_start\": 0}], \"annotations\": [",
        );
        while meta.len() < 9 << 20 {
            meta.push_str("{\"core:sample_start\": 0, \"core:comment\": \"padding padding padding\"},");
        }
        meta.push_str("{\"core:sample_start\": 0}]}");
        std::fs::write(d.join("big.sigmf-meta"), meta).unwrap();
        std::fs::write(d.join("big.sigmf-data"), [128u8; 64]).unwrap();
        expect(run(&["inspect", &d.join("big.sigmf-meta").to_string_lossy()]), 2, &["too large", "8 MiB"]);
    });
}

#[test]
fn wav_variants_get_true_messages() {
    unchanged_inputs(|| {
        let o = expect(run(&["inspect", &case("streaming_size.wav")]), 0, &[]);
        assert!(o.stdout.contains("32 samples"), "{}", o.stdout);
        let o = expect(run(&["inspect", &case("odd_chunk_pad.wav")]), 0, &[]);
        assert!(o.stdout.contains("32 samples"), "{}", o.stdout);
        expect(run(&["inspect", &case("rf64.wav")]), 2, &["RF64"]);
        expect(run(&["inspect", &case("rifx.wav")]), 2, &["RIFX", "big-endian"]);
    });
}

#[test]
fn one_line_mappings_point_at_the_parameter() {
    let d = scratch("position");
    let g = d.join("g.yaml");
    std::fs::write(
        &g,
        "blocks:\n  tone: {kind: test_tone}\n  gate: {kind: lobe_gate, set: {lobes: \"a,b\", guard: 1e30 samples}}\nwiring:\n  - tone -> gate\n",
    )
    .unwrap();
    let col = "  gate: {kind: lobe_gate, set: {lobes: \"a,b\", guard: 1e30 samples}}".find("guard").unwrap() + 1;
    expect(run(&["check", &g.to_string_lossy()]), 2, &[&format!("g.yaml:3:{col}:"), "guard"]);
}

#[test]
fn wav_streaming_placeholder_reads_the_frames_python_wrote() {
    // The frames listed by the script that wrote the cases.
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(root().join("tests/bad_inputs/wav_cases.json")).unwrap())
            .unwrap();
    let codes: Vec<f32> =
        json["codes"].as_array().unwrap().iter().map(|c| c.as_f64().unwrap() as f32 / 32768.0).collect();
    for name in ["streaming_size.wav", "odd_chunk_pad.wav"] {
        let mut r = lobeflow::capture::open(&case(name), &lobeflow::capture::OpenOptions::default()).unwrap();
        assert_eq!(r.info().rate, 8000.0);
        let mut all = Vec::new();
        let mut buf = Vec::new();
        while r.read_frames(7, &mut buf).unwrap() > 0 {
            all.extend_from_slice(&buf);
        }
        assert_eq!(all, codes, "{name}");
    }
}

/// A path naming a folder is an error that says so.
#[test]
fn a_folder_is_not_a_capture() {
    let d = scratch("folder");
    let p = d.join("x.cu8");
    std::fs::create_dir_all(&p).unwrap();
    expect(run(&["inspect", &p.to_string_lossy(), "--rate", "1e6"]), 2, &["is a folder"]);
}

/// Noise where the sync staircase should be is called noise, not "flat".
#[test]
fn noise_on_the_sync_channel_is_named_as_noise() {
    let d = scratch("syncnoise");
    let path = d.join("noise-sync.wav");
    let spec = hound::WavSpec {
        channels: 3,
        sample_rate: 1_000_000,
        bits_per_sample: 16,
        sample_format: hound::SampleFormat::Int,
    };
    let mut w = hound::WavWriter::create(&path, spec).unwrap();
    // A fixed linear congruential sequence: noise without a random crate.
    let mut x: u32 = 12345;
    let mut next = || {
        x = x.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
        ((x >> 16) as i16) / 4
    };
    for _ in 0..300_000 {
        for _ in 0..3 {
            w.write_sample(next()).unwrap();
        }
    }
    w.finalize().unwrap();
    let g = d.join("gate.yaml");
    std::fs::write(
        &g,
        "blocks:\n  read: {kind: capture_reader, set: {path: noise-sync.wav}}\n  gate: {kind: lobe_gate, set: {lobes: \"a,b,c,d\"}}\nwiring:\n  - read -> gate\n",
    )
    .unwrap();
    let out = scratch("syncnoise-out");
    let o = expect(run(&["run", &g.to_string_lossy(), "--out", &out.to_string_lossy()]), 2, &["looks like noise"]);
    assert!(!o.stderr.contains("flat"), "{}", o.stderr);
}
