//! `external_program`: blocks written in Python, run as child processes.
//! The Python discriminator against the built-in one, a numpy gain against
//! the same product in Rust, every way a child can fail, signals, and
//! memory behind a slow child. Tests that need python3 (or numpy) say so on
//! standard error and pass without running where it is missing.

use lobeflow::Error;
use lobeflow::graph::{Overrides, resolve};
use lobeflow::runtime::{RunOptions, Tap, run};
use lobeflow_blocks::{AngleEstimate, Item};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// Why the test cannot run here (no python3, or no numpy when `numpy`).
fn missing(numpy: bool) -> Option<&'static str> {
    let works = |code: &str| {
        Command::new("python3").args(["-c", code]).stderr(Stdio::null()).status().is_ok_and(|s| s.success())
    };
    if !works("import json") {
        Some("python3 is not on the PATH")
    } else if numpy && !works("import numpy") {
        Some("numpy is not installed (python3 -m pip install numpy)")
    } else {
        None
    }
}

/// Skip (with a line on the real standard error, past the test harness's
/// capture) when Python or numpy is missing.
macro_rules! needs_python {
    ($numpy:expr, $test:expr) => {
        if let Some(why) = missing($numpy) {
            let _ = writeln!(std::io::stderr(), "SKIPPED {}: {why}", $test);
            return;
        }
    };
}

fn temp_dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-external-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Run `graph`, collecting the items of the listed ports.
fn run_tapped(graph: &Path, ports: &[&str], threads: usize, out: &Path) -> Result<Vec<Vec<Item>>, Error> {
    let g = resolve(graph, &Overrides::default(), &lobeflow::registry())?;
    let mut taps = Vec::new();
    let mut receivers = Vec::new();
    for p in ports {
        let (tx, rx) = crossbeam_channel::unbounded();
        taps.push(Tap { port: p.to_string(), sender: tx, index: 0, waker: None });
        receivers.push(rx);
    }
    let opts = RunOptions { threads, out_dir: out.to_path_buf(), ..RunOptions::default() };
    run(&g, &opts, taps)?;
    Ok(receivers.into_iter().map(|rx| rx.try_iter().map(|(_, item)| item).collect()).collect())
}

fn estimates(items: &[Item]) -> Vec<AngleEstimate> {
    items
        .iter()
        .map(|i| match i {
            Item::Estimate(e) => (**e).clone(),
            other => panic!("expected estimates, got {other:?}"),
        })
        .collect()
}

fn close(what: &str, k: usize, a: f64, b: f64) {
    let same = (a.is_nan() && b.is_nan()) || a == b || (a - b).abs() <= 1e-9 * a.abs().max(b.abs());
    assert!(same, "estimate {k}: {what} {a} (built-in) against {b} (Python)");
}

#[test]
fn the_python_discriminator_gives_the_built_in_angles() {
    needs_python!(false, "the_python_discriminator_gives_the_built_in_angles");
    let graph = root().join("tests/fixtures/external/dos-compare.yaml");
    let out = temp_dir("dos");
    let runs = run_tapped(&graph, &["builtin", "python"], 1, &out).unwrap();
    let (builtin, python) = (estimates(&runs[0]), estimates(&runs[1]));
    assert_eq!(builtin.len(), python.len());
    let ok = builtin.iter().filter(|e| e.flag == lobeflow_blocks::Flag::Ok).count();
    assert!(ok > 140, "only {ok} angles: the comparison would say little");
    for (k, (b, p)) in builtin.iter().zip(&python).enumerate() {
        assert_eq!((b.stamp, &b.axis, b.flag), (p.stamp, &p.axis, p.flag), "estimate {k}");
        assert_eq!(b.error_deg.is_some(), p.error_deg.is_some(), "estimate {k}");
        close("error_deg", k, b.error_deg.unwrap_or(0.0), p.error_deg.unwrap_or(0.0));
        close("sigma_deg", k, b.sigma_deg, p.sigma_deg);
        close("snr_db", k, b.snr_db, p.snr_db);
        close("ratio_db", k, b.ratio_db, p.ratio_db);
        assert_eq!(b.range_m.is_some(), p.range_m.is_some(), "estimate {k}");
        close("range_m", k, b.range_m.unwrap_or(0.0), p.range_m.unwrap_or(0.0));
    }
    // The same items, in the same order, on more worker threads.
    let again = run_tapped(&graph, &["python"], 3, &out).unwrap();
    assert_eq!(format!("{:?}", estimates(&again[0])), format!("{python:?}"));
}

#[test]
fn a_graph_named_without_its_folder_starts_its_program_there() {
    needs_python!(false, "a_graph_named_without_its_folder_starts_its_program_there");
    // `lobeflow check graph.yaml` and `run graph.yaml` from the graph's own
    // folder: the folder of a bare file name is the empty path, which no
    // process can be started in (this failed as "cannot start ... in :").
    let out = temp_dir("bare-name");
    for command in ["check", "run"] {
        let mut cmd = Command::new(env!("CARGO_BIN_EXE_lobeflow"));
        cmd.current_dir(root().join("graphs")).args([command, "four-lobe-external-dos.yaml"]);
        if command == "run" {
            cmd.arg("--out").arg(&out).arg("--quiet");
        }
        let done = cmd.output().unwrap();
        let stderr = String::from_utf8_lossy(&done.stderr);
        assert!(done.status.success(), "{command}: {stderr}");
    }
    let angles = std::fs::read_to_string(out.join("angles.csv")).unwrap();
    assert!(angles.lines().count() > 100, "{angles}");
}

#[test]
fn a_numpy_gain_gives_the_samples_of_the_same_product_in_rust() {
    needs_python!(true, "a_numpy_gain_gives_the_samples_of_the_same_product_in_rust");
    let d = temp_dir("gain");
    let graph = d.join("gain.yaml");
    let wav = root().join("samples/four-lobe-pulsed.wav");
    let script = root().join("python/examples/gain.py");
    std::fs::write(
        &graph,
        format!(
            "blocks:\n  read: {{kind: capture_reader, set: {{path: '{}', chunk: 5000}}}}\n  gain: {{kind: external_program, set: {{command: [python3, '{}'], gain: 0.37}}}}\nwiring:\n  - read -> gain\n",
            wav.display(),
            script.display()
        ),
    )
    .unwrap();
    let runs = run_tapped(&graph, &["read", "gain"], 2, &d.join("out")).unwrap();
    assert_eq!(runs[0].len(), runs[1].len());
    let mut samples = 0;
    for (a, b) in runs[0].iter().zip(&runs[1]) {
        let (Item::Samples(a), Item::Samples(b)) = (a, b) else { panic!("expected sample chunks") };
        assert_eq!(a.stamp, b.stamp);
        let expected: Vec<_> = a.iq.iter().map(|x| x * 0.37f32).collect();
        assert_eq!(&b.iq[..], &expected[..], "chunk at sample {}", a.stamp.index);
        assert_eq!(a.sync.as_deref(), b.sync.as_deref(), "the sync channel passes unchanged");
        assert!(a.sync.is_some());
        samples += b.len();
    }
    assert_eq!(samples, 300_000);
}

/// A graph reading the bundled capture through a misbehaving program into a
/// capture writer; the run's error, and what the output folder holds.
fn misbehave(mode: &str) -> (String, Vec<PathBuf>) {
    let d = temp_dir(mode);
    let graph = d.join("g.yaml");
    let wav = root().join("samples/four-lobe-pulsed.wav");
    let script = root().join("tests/fixtures/external/misbehave.py");
    std::fs::write(
        &graph,
        format!(
            "blocks:\n  read: {{kind: capture_reader, set: {{path: '{}'}}}}\n  bad: {{kind: external_program, set: {{command: [python3, '{}'], mode: {mode}, timeout: 5 s}}}}\n  write: {{kind: capture_writer, set: {{path: copy.sigmf-data}}}}\nwiring:\n  - read -> bad -> write\n",
            wav.display(),
            script.display()
        ),
    )
    .unwrap();
    let out = d.join("out");
    let err = match run_tapped(&graph, &[], 2, &out) {
        Err(Error::Block { block, message, .. }) => {
            assert_eq!(block, "bad");
            message
        }
        other => panic!("mode {mode}: expected the block to fail, got {other:?}"),
    };
    let left = std::fs::read_dir(&out).map(|r| r.map(|e| e.unwrap().path()).collect()).unwrap_or_default();
    (err, left)
}

#[test]
fn a_program_that_quits_early_stops_the_run_with_its_last_words() {
    needs_python!(false, "a_program_that_quits_early_stops_the_run_with_its_last_words");
    let (err, left) = misbehave("quit_early");
    assert!(err.contains("before its input ended"), "{err}");
    assert!(err.contains("misbehave: leaving after two chunks"), "{err}");
    assert!(left.is_empty(), "outputs left behind: {left:?}");
}

#[test]
fn a_program_that_exits_non_zero_stops_the_run_with_its_status() {
    needs_python!(false, "a_program_that_exits_non_zero_stops_the_run_with_its_status");
    let (err, left) = misbehave("fail");
    assert!(err.contains("failed (exit status: 3)"), "{err}");
    assert!(err.contains("last lines of its standard error:\n    misbehave: the fit did not converge"), "{err}");
    assert!(left.is_empty(), "outputs left behind: {left:?}");
}

#[test]
fn malformed_output_stops_the_run_and_shows_the_line() {
    needs_python!(false, "malformed_output_stops_the_run_and_shows_the_line");
    let (err, left) = misbehave("garbage");
    assert!(err.contains("wrote malformed output: frame 3"), "{err}");
    assert!(err.contains("not a JSON object") && err.contains("'angle 3.2 deg'"), "{err}");
    assert!(left.is_empty(), "outputs left behind: {left:?}");
}

#[test]
fn a_program_that_stops_answering_is_ended_after_the_timeout() {
    needs_python!(false, "a_program_that_stops_answering_is_ended_after_the_timeout");
    let started = Instant::now();
    let (err, left) = misbehave("hang");
    assert!(err.contains("for 5 s (parameter 'timeout')"), "{err}");
    assert!(err.contains("(ended by lobeflow)") && err.contains("misbehave: thinking very hard"), "{err}");
    assert!(started.elapsed() < Duration::from_secs(20), "took {:?}", started.elapsed());
    assert!(left.is_empty(), "outputs left behind: {left:?}");
}

fn process_alive(pid: u32) -> bool {
    // Gone, or a zombie waiting for a parent that is gone too.
    std::fs::read_to_string(format!("/proc/{pid}/stat"))
        .map(|s| !s.rsplit(')').next().unwrap_or("").trim_start().starts_with('Z'))
        .unwrap_or(false)
}

fn wait_for(what: &str, limit: Duration, mut done: impl FnMut() -> bool) {
    let start = Instant::now();
    while !done() {
        assert!(start.elapsed() < limit, "{what} did not happen within {limit:?}");
        std::thread::sleep(Duration::from_millis(20));
    }
}

#[test]
fn sigterm_and_ctrl_c_end_the_program_too() {
    needs_python!(false, "sigterm_and_ctrl_c_end_the_program_too");
    for signal in ["-TERM", "-INT"] {
        let d = temp_dir(&format!("signal{signal}"));
        let pid_file = d.join("child.pid");
        let graph = d.join("g.yaml");
        std::fs::write(
            &graph,
            format!(
                "blocks:\n  read: {{kind: capture_reader, set: {{path: '{}'}}}}\n  bad: {{kind: external_program, set: {{command: [python3, '{}'], mode: sleepy, pid_file: '{}'}}}}\n  write: {{kind: capture_writer, set: {{path: copy.sigmf-data}}}}\nwiring:\n  - read -> bad -> write\n",
                root().join("samples/four-lobe-pulsed.wav").display(),
                root().join("tests/fixtures/external/misbehave.py").display(),
                pid_file.display()
            ),
        )
        .unwrap();
        let out = d.join("out");
        let run = Command::new(env!("CARGO_BIN_EXE_lobeflow"))
            .args(["run", graph.to_str().unwrap(), "--out", out.to_str().unwrap()])
            .stderr(Stdio::piped())
            .spawn()
            .unwrap();
        let mut pid = 0u32;
        wait_for("the program writing its pid", Duration::from_secs(20), || {
            pid = std::fs::read_to_string(&pid_file).ok().and_then(|s| s.trim().parse().ok()).unwrap_or(0);
            pid != 0
        });
        std::thread::sleep(Duration::from_millis(300));
        assert!(process_alive(pid), "the program should be running before the signal");
        assert!(Command::new("kill").arg(signal).arg(run.id().to_string()).status().unwrap().success());
        let done = run.wait_with_output().unwrap();
        // 128 + the signal, as a shell reports it.
        let expected = if signal == "-TERM" { 143 } else { 130 };
        assert_eq!(done.status.code(), Some(expected), "{signal}: {}", String::from_utf8_lossy(&done.stderr));
        assert!(String::from_utf8_lossy(&done.stderr).contains("no outputs were written"));
        wait_for("the program ending", Duration::from_secs(5), || !process_alive(pid));
        let left: Vec<_> = std::fs::read_dir(&out).map(|r| r.map(|e| e.unwrap().path()).collect()).unwrap_or_default();
        assert!(left.is_empty(), "{signal}: outputs left behind: {left:?}");
    }
}

/// Peak resident set of process `pid`, KiB.
fn peak_kib(pid: u32) -> Option<u64> {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    status.lines().find(|l| l.starts_with("VmHWM:"))?.split_whitespace().nth(1)?.parse().ok()
}

#[test]
fn a_slow_program_keeps_memory_flat_on_a_long_capture() {
    needs_python!(true, "a_slow_program_keeps_memory_flat_on_a_long_capture");
    // 12 M samples (96 MB of complex float32) from a fast source through a
    // program that sleeps 2 ms per 16384-sample chunk: were the queues not
    // bounded, the source would run ahead and hold most of it.
    const BOUND_MIB: u64 = 48;
    let d = temp_dir("memory");
    let graph = d.join("g.yaml");
    std::fs::write(
        &graph,
        format!(
            "blocks:\n  tone: {{kind: test_tone, set: {{samples: 12000000, chunk: 16384}}}}\n  slow: {{kind: external_program, set: {{command: [python3, '{}', samples], delay: 2 ms}}}}\nwiring:\n  - tone -> slow\n",
            root().join("python/examples/pass_through.py").display()
        ),
    )
    .unwrap();
    let mut run = Command::new(env!("CARGO_BIN_EXE_lobeflow"))
        .args(["run", graph.to_str().unwrap(), "--out", d.join("out").to_str().unwrap(), "--stats"])
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let pid = run.id();
    let mut peak = 0;
    while run.try_wait().unwrap().is_none() {
        // The high-water mark only rises; the last reading before the end is the peak.
        peak = peak_kib(pid).unwrap_or(0).max(peak);
        std::thread::sleep(Duration::from_millis(20));
    }
    let out = run.wait_with_output().unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{err}");
    let line = err.lines().find(|l| l.starts_with("slow ")).unwrap_or_else(|| panic!("no stats line for slow:\n{err}"));
    assert!(line.contains("12000000"), "every sample went through: {line}");
    let peak_mib = peak / 1024;
    assert!(peak > 0 && peak_mib < BOUND_MIB, "peak resident set {peak_mib} MiB (bound {BOUND_MIB} MiB)");
}

#[test]
fn a_described_block_is_checked_like_a_built_in_one() {
    // The description is a file beside the program: no Python needed here.
    let fixture = root().join("tests/fixtures/external/file-described.yaml");
    let g = resolve(&fixture, &Overrides::default(), &lobeflow::registry()).unwrap();
    let scale = &g.blocks[g.block_index("scale").unwrap()];
    assert_eq!(scale.params.get("gain"), Some(&lobeflow_blocks::Value::Number(2.0)));
    assert_eq!(scale.spec.inputs[0].name, "samples");
    // --set reaches the program's parameter through the knob, with its range.
    let mut o = Overrides::default();
    o.set_text("factor=50").unwrap();
    let e = resolve(&fixture, &o, &lobeflow::registry()).unwrap_err().to_string();
    assert!(e.contains("file-described.yaml:6"), "{e}");
    assert!(e.contains("parameter 'gain' of block 'scale': 50 dB is out of range"), "{e}");
    assert!(e.contains("from knob 'factor', --set") && e.contains("number [dB], -40 to 40"), "{e}");
    // Misspelt names and wrong units say where and what would fit.
    let d = temp_dir("check");
    let program = root().join("tests/fixtures/external/described_by_file.py");
    for (set, want) in [
        ("gian: 3 dB", "has no parameter 'gian'"),
        ("gain: 3 us", "unit 'us' does not fit this parameter"),
        ("shape: round", "'round' is not one of flat, tapered"),
    ] {
        let graph = d.join("g.yaml");
        std::fs::write(
            &graph,
            format!(
                "blocks:\n  tone: {{kind: test_tone}}\n  scale:\n    kind: external_program\n    set:\n      command: [python3, '{}']\n      {set}\nwiring:\n  - tone -> scale\n",
                program.display()
            ),
        )
        .unwrap();
        let e = resolve(&graph, &Overrides::default(), &lobeflow::registry()).unwrap_err();
        let text = format!("{e}{}", e.hint.clone().unwrap_or_default());
        assert_eq!(e.line, 7, "{text}");
        assert!(text.contains(want), "{text}");
    }
    let listing = lobeflow::commands::catalog::catalog(&lobeflow::registry(), fixture.to_str()).unwrap();
    assert!(listing.contains("block scale") && listing.contains("param gain = 0 dB"), "{listing}");
}

#[test]
fn the_program_hears_its_parameters_and_its_standard_error_becomes_notices() {
    needs_python!(false, "the_program_hears_its_parameters_and_its_standard_error_becomes_notices");
    let fixture = root().join("tests/fixtures/external/file-described.yaml");
    let mut o = Overrides::default();
    o.set_text("factor=-6.5").unwrap();
    let g = resolve(&fixture, &o, &lobeflow::registry()).unwrap();
    let opts = RunOptions { threads: 2, out_dir: temp_dir("notices"), ..RunOptions::default() };
    let report = run(&g, &opts, Vec::new()).unwrap();
    let said: Vec<_> = report.notices.iter().filter(|n| &*n.block == "scale").map(|n| n.what.as_str()).collect();
    assert_eq!(said, ["gain -6.5 dB"]);
}

mod hop_blocks {
    use lobeflow_blocks::PortSet;
    use lobeflow_blocks::prelude::*;
    use std::marker::PhantomData;

    block_settings! {
        pub struct DwellSourceSettings {
            count: u64 { ty: ParamType::Integer { min: 1, max: 1 << 40 }, default: Some("1000"), doc: "records" },
        }
    }

    block_ports! { outputs pub enum DwellSourceOut { Dwells = optional("dwells", ItemKind::Dwell, "records") } }

    /// Emits `count` dwell records of four lobes, 256 per call.
    pub struct DwellSource {
        left: u64,
        next: u64,
    }

    impl TypedBlock for DwellSource {
        type Settings = DwellSourceSettings;
        type In = NoPorts;
        type Out = DwellSourceOut;

        fn build(s: DwellSourceSettings, _: &BuildContext) -> Result<Self, BuildError> {
            Ok(DwellSource { left: s.count, next: 0 })
        }

        fn generate(&mut self, out: &mut Outputs) -> Result<bool, BlockError> {
            for _ in 0..256.min(self.left) {
                let lobe = (self.next % 4) as usize;
                let name = ["right", "up", "left", "down"][lobe];
                out.push(
                    DwellSourceOut::Dwells,
                    Item::Dwell(DwellRecord {
                        tag: LobeTag { lobe, name: name.into(), dwell: self.next, dwell_start: self.next * 400 },
                        mid: Stamp::new(self.next * 400 + 200, 1e6),
                        amplitude: 1.0 + (self.next % 7) as f64 * 0.01,
                        noise_power: 0.01,
                        snr: 100.0,
                        var_ln_amp: 0.001,
                        range_m: Some(8000.0),
                        used: 4,
                    }),
                );
                self.next += 1;
                self.left -= 1;
            }
            Ok(self.left > 0)
        }
    }

    block_ports! { inputs pub enum DwellsIn { In = required("in", ItemKind::Dwell, "dwell records") } }
    block_ports! { inputs pub enum SamplesIn { In = required("in", ItemKind::Samples, "chunks") } }

    /// A sink that takes whatever reaches its input `I`.
    pub struct Count<I>(PhantomData<I>);

    impl<I: PortSet> TypedBlock for Count<I> {
        type Settings = ();
        type In = I;
        type Out = NoPorts;

        fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
            Ok(Count(PhantomData))
        }
    }
}

fn hop_registry() -> lobeflow_blocks::Registry {
    use hop_blocks::{Count, DwellSource, DwellsIn, SamplesIn};
    use lobeflow_blocks::BlockSpec;
    let mut r = lobeflow::registry();
    r.register(BlockSpec::typed::<DwellSource>("dwell_source", "test: many dwell records, fast"));
    r.register(BlockSpec::typed::<Count<DwellsIn>>("count_dwells", "test: consumes its input"));
    r.register(BlockSpec::typed::<Count<SamplesIn>>("count_samples", "test: consumes its input"));
    r
}

/// The cost of the external hop, for the figures in docs/external-blocks.md:
/// `cargo test --release --test external_block -- --ignored --nocapture external_hop`.
#[test]
#[ignore = "a measurement, not a check: run it by name with --release"]
fn external_hop_cost() {
    needs_python!(true, "external_hop_cost");
    let d = temp_dir("hop");
    let pass = root().join("python/examples/pass_through.py");
    let cases = [
        ("dwells", "dwell_source", "count: 200000", "dwell", "count_dwells", 200_000.0),
        ("samples", "test_tone", "samples: 100000000, chunk: 16384", "samples", "count_samples", 100e6),
    ];
    for (what, source, size, kind, sink, n) in cases {
        for hop in [false, true] {
            let graph = d.join(format!("{what}-{hop}.yaml"));
            let middle = if hop {
                format!(
                    "  hop: {{kind: external_program, set: {{command: [python3, '{}', {kind}]}}}}\n",
                    pass.display()
                )
            } else {
                String::new()
            };
            let chain = if hop { "src -> hop -> sink" } else { "src -> sink" };
            std::fs::write(
                &graph,
                format!("blocks:\n  src: {{kind: {source}, set: {{{size}}}}}\n{middle}  sink: {{kind: {sink}}}\nwiring:\n  - {chain}\n"),
            )
            .unwrap();
            let g = resolve(&graph, &Overrides::default(), &hop_registry()).unwrap();
            let opts = RunOptions { threads: 2, out_dir: d.clone(), ..RunOptions::default() };
            let start = Instant::now();
            let report = run(&g, &opts, Vec::new()).unwrap();
            let secs = start.elapsed().as_secs_f64();
            let sink_in = report.stats.last().unwrap().items_in;
            let rate = if what == "dwells" {
                format!("{:.0} items/s", n / secs)
            } else {
                format!("{:.1} MS/s", n / secs / 1e6)
            };
            let _ = writeln!(
                std::io::stderr(),
                "{what:8} {:18} {secs:7.2} s  {rate}  ({sink_in} items reached the sink)",
                if hop { "through Python" } else { "built-in only" }
            );
        }
    }
}

#[test]
fn a_program_without_inputs_is_a_source() {
    needs_python!(false, "a_program_without_inputs_is_a_source");
    let d = temp_dir("source");
    std::fs::write(
        d.join("count.py"),
        format!(
            "import sys\nsys.path.insert(0, {:?})\nimport lobeflow_block\nD = {{'name': 'count', 'outputs': [{{'name': 'rows', 'kind': 'row'}}], 'params': [{{'name': 'n', 'type': 'integer', 'default': 3, 'min': 0}}]}}\nb = lobeflow_block.Block(D)\nfor k in range(b.params['n']):\n    b.emit({{'kind': 'row', 'index': 10 * k, 'rate': 100.0, 'fields': [['k', k], ['half', k / 2], ['nan', float('nan')]]}})\n",
            root().join("python").display().to_string()
        ),
    )
    .unwrap();
    let graph = d.join("g.yaml");
    std::fs::write(&graph, "blocks:\n  count: {kind: external_program, set: {command: [python3, count.py], n: 4}}\n")
        .unwrap();
    let rows = run_tapped(&graph, &["count"], 2, &d.join("out")).unwrap().remove(0);
    assert_eq!(rows.len(), 4);
    let Item::Row(last) = &rows[3] else { panic!("expected rows") };
    assert_eq!(last.stamp, lobeflow_blocks::Stamp::new(30, 100.0));
    assert_eq!(last.fields[0].1, lobeflow_blocks::Cell::Int(3));
    assert_eq!(last.fields[1].1, lobeflow_blocks::Cell::Num(1.5));
    assert!(matches!(last.fields[2].1, lobeflow_blocks::Cell::Num(x) if x.is_nan()));
}
