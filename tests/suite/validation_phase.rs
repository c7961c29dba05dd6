//! The validation phase `check` shares with `run`: each case that once
//! passed `check` and failed only when `run` started now fails in `check`,
//! naming the graph file and line; bare numbers take the unit of their
//! default; `check` writes nothing and says where every value came from.

use lobeflow::Error;
use lobeflow::commands::check::{CheckArgs, check_graph};
use lobeflow::graph::{Overrides, resolve};
use lobeflow_blocks::Value;
use std::path::{Path, PathBuf};

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn four_lobe() -> PathBuf {
    root().join("graphs/four-lobe-pulsed.yaml")
}

fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-vp-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn sets(assignments: &[&str]) -> Overrides {
    let mut o = Overrides::default();
    for a in assignments {
        o.set_text(a).unwrap();
    }
    o
}

fn check_with(
    graph: &Path,
    overrides: Overrides,
    out_dir: &Path,
    capture: Vec<(&'static str, String)>,
) -> Result<String, Error> {
    check_graph(&CheckArgs { graph: graph.to_path_buf(), overrides, out_dir: out_dir.to_path_buf(), capture })
}

/// `check` refuses the graph; the error is placed at `file:line` and says `needle`.
fn refused_at(result: Result<String, Error>, file: &str, line: usize, needle: &str) -> String {
    let e = result.expect_err("check must refuse this");
    let text = e.to_string();
    assert_eq!(e.exit_code(), 2, "{text}");
    let Error::Graph(g) = &e else { panic!("expected an error placed in the graph file, got: {text}") };
    assert!(g.file.ends_with(file), "file of: {text}");
    assert_eq!(g.line, line, "line of: {text}");
    assert!(g.column > 0, "column of: {text}");
    assert!(g.hint.is_some(), "hint of: {text}");
    assert!(text.contains(needle), "{text}\nexpected to contain: {needle}");
    text
}

/// Line 54 of the four-lobe graph sets the discriminator's parameters.
const PAIRS_LINE: usize = 54;
/// Line 45 of the four-lobe graph sets the capture reader's path.
const READ_LINE: usize = 45;

#[test]
fn malformed_lobe_pairs_fail_check_at_their_line() {
    let out = scratch("pairs");
    let r = check_with(&four_lobe(), sets(&["pairs=az=right-left; el"]), &out, Vec::new());
    let text = refused_at(r, "four-lobe-pulsed.yaml", PAIRS_LINE, "needs two lobe names as plus/minus");
    assert!(text.contains("--set"), "the value's origin is named: {text}");
}

#[test]
fn lobe_pairs_outside_the_gate_fail_check_at_their_line() {
    let out = scratch("pairs-gate");
    let r = check_with(&four_lobe(), sets(&["pairs=az=right/west, el=up/down"]), &out, Vec::new());
    refused_at(r, "four-lobe-pulsed.yaml", PAIRS_LINE, "names lobe 'west'");
}

#[test]
fn a_missing_input_fails_check_at_the_reader() {
    let out = scratch("input");
    let mut o = Overrides::default();
    o.set("input", lobeflow_blocks::RawValue::Text("/nonexistent.wav".into()));
    let text = refused_at(
        check_with(&four_lobe(), o, &out, Vec::new()),
        "four-lobe-pulsed.yaml",
        READ_LINE,
        "/nonexistent.wav",
    );
    assert!(text.contains("hint: 'path' is /nonexistent.wav (knob input (--set))"), "{text}");
}

#[test]
fn a_table_beam_without_a_pattern_fails_check() {
    let out = scratch("beam");
    let r = check_with(&four_lobe(), sets(&["beam=table"]), &out, Vec::new());
    let text = refused_at(r, "four-lobe-pulsed.yaml", PAIRS_LINE, "needs a pattern file");
    assert!(text.contains("(parameter 'pattern')"), "{text}");
    // A pattern file that is not a pattern is found too.
    let bad = out.join("not-a-pattern.csv");
    std::fs::write(&bad, "angle_deg,gain_db\nfive,six\n").unwrap();
    let o = sets(&["beam=table", &format!("pattern={}", bad.display())]);
    refused_at(check_with(&four_lobe(), o, &out, Vec::new()), "four-lobe-pulsed.yaml", PAIRS_LINE, "not-a-pattern.csv");
}

#[test]
fn two_blocks_writing_one_path_fail_check_at_the_second() {
    let d = scratch("owners");
    let graph = d.join("g.yaml");
    let input = root().join("samples/four-lobe-pulsed.wav");
    std::fs::write(
        &graph,
        format!(
            "title: two writers\nsettings:\n  input: {{default: {}, doc: capture}}\nblocks:\n  read: {{kind: capture_reader, set: {{path: $input}}}}\n  first: {{kind: capture_writer, set: {{path: copy.wav}}}}\n  second: {{kind: capture_writer, set: {{path: copy.wav}}}}\nwiring:\n  - read -> first\n  - read -> second\n",
            input.display()
        ),
    )
    .unwrap();
    let out = d.join("out");
    let r = check_with(&graph, Overrides::default(), &out, Vec::new());
    refused_at(r, "g.yaml", 7, "also written by block 'first'");
    assert!(!out.exists(), "check made the output folder");
}

/// A SigMF recording whose data file was cut inside a frame.
fn cut_recording(d: &Path) -> PathBuf {
    let meta = root().join("samples/mid-dwell-cut.sigmf-meta");
    let data = std::fs::read(root().join("samples/mid-dwell-cut.sigmf-data")).unwrap();
    std::fs::copy(meta, d.join("cut.sigmf-meta")).unwrap();
    std::fs::write(d.join("cut.sigmf-data"), &data[..data.len() - 3]).unwrap();
    d.join("cut.sigmf-meta")
}

#[test]
fn check_compares_a_capture_with_its_header() {
    let d = scratch("header");
    let cut = cut_recording(&d);
    let mut o = Overrides::default();
    o.set("input", lobeflow_blocks::RawValue::Text(cut.to_string_lossy().into_owned()));
    let r = check_with(&four_lobe(), o, &d.join("out"), Vec::new());
    refused_at(r, "four-lobe-pulsed.yaml", READ_LINE, "not a whole number of frames");
    // The same data read raw with the capture flags `run` takes.
    let mut o = Overrides::default();
    o.set("input", lobeflow_blocks::RawValue::Text(d.join("cut.sigmf-data").to_string_lossy().into_owned()));
    let flags = vec![
        ("format", "raw".to_string()),
        ("datatype", "cf32_le".to_string()),
        ("rate", "1MS/s".to_string()),
        ("channels", "2".to_string()),
    ];
    let r = check_with(&four_lobe(), o, &d.join("out"), flags);
    refused_at(r, "four-lobe-pulsed.yaml", READ_LINE, "not a whole number of frames");
}

#[test]
fn roles_that_do_not_fit_the_capture_fail_check() {
    let d = scratch("roles");
    let flags = vec![("roles", "i,q".to_string())];
    let r = check_with(&four_lobe(), Overrides::default(), &d.join("out"), flags);
    let e = r.expect_err("two roles for a three-channel capture");
    assert!(e.to_string().contains("roles 'i,q' name 2 channel(s)"), "{e}");
}

#[test]
fn check_writes_nothing_and_names_every_origin() {
    let d = scratch("origins");
    let params = d.join("site.yaml");
    std::fs::write(&params, "# the site\nsquint: 2.5\n").unwrap();
    let mut o = Overrides::default();
    o.add_params_file(&params).unwrap();
    o.set_text("dwell=5").unwrap();
    let out = d.join("out");
    let text = check_with(&four_lobe(), o, &out, Vec::new()).expect("the graph checks");
    assert!(!out.exists(), "check made the output folder");
    assert!(text.contains("dwell = 5 pulses    (--set)"), "{text}");
    assert!(text.contains(&format!("squint = 2.5 deg    (--params {}:2)", params.display())), "{text}");
    assert!(text.contains("prf = 4000 Hz    (graph "), "{text}");
    assert!(text.contains("four-lobe-pulsed.yaml:13)"), "{text}");
    assert!(text.contains("(composite default "), "a composite's own default: {text}");
    assert!(text.contains("parts/pulsed-front-end.yaml:"), "{text}");
    // Every parameter's value is printed with its unit.
    assert!(text.contains("gate_width = 5 bins    (knob gate_width (graph "), "{text}");
}

/// The value one block's parameter resolved to.
fn resolved(overrides: &Overrides, block: &str, param: &str) -> Value {
    let g = resolve(&four_lobe(), overrides, &lobeflow::registry()).unwrap();
    let i = g.block_index(block).unwrap_or_else(|| panic!("no block {block}"));
    g.blocks[i].params.get(param).cloned().unwrap()
}

#[test]
fn a_bare_dwell_counts_pulses_like_its_default() {
    // The knob's default is "4 pulses": 5 is five pulses, not five seconds.
    assert_eq!(resolved(&sets(&["dwell=5"]), "front/gate", "dwell"), Value::Pulses(5.0));
    assert_eq!(resolved(&sets(&["dwell=2 ms"]), "front/gate", "dwell"), Value::Seconds(2e-3));
}

#[test]
fn a_bare_gate_width_counts_bins_like_its_default() {
    // The knob's default is "5 bins": 7 is seven range bins, not seven metres.
    assert_eq!(resolved(&sets(&["gate_width=7"]), "integrate", "gate_width"), Value::Bins(7.0));
    assert_eq!(resolved(&sets(&["gate_width=300 m"]), "integrate", "gate_width"), Value::Metres(300.0));
}

fn lobeflow() -> std::process::Command {
    std::process::Command::new(env!("CARGO_BIN_EXE_lobeflow"))
}

#[test]
fn run_stops_before_any_sample_with_the_same_placed_error() {
    let out = scratch("run-input");
    let o = lobeflow()
        .args(["run", "--quiet", "--input", "/nonexistent.wav", "--out"])
        .arg(&out)
        .arg(four_lobe())
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(err.contains(&format!("four-lobe-pulsed.yaml:{READ_LINE}:")), "{err}");
    assert!(err.contains("hint: 'path' is /nonexistent.wav"), "{err}");
    assert!(std::fs::read_dir(&out).unwrap().next().is_none(), "a failed run left files in {}", out.display());
}

#[test]
fn check_of_a_live_input_reads_no_sample() {
    use std::io::Write;
    use std::process::Stdio;
    let out = scratch("live");
    let mut child = lobeflow()
        .args(["check", "--input", "-", "--format", "raw", "--datatype", "cf32_le", "--rate", "1MS/s", "--channels"])
        .args(["2", "--roles", "iq,sync", "--out"])
        .arg(&out)
        .arg(four_lobe())
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // Standard input stays open and holds bytes: a check that read it would
    // wait for more, or take them.
    let mut stdin = child.stdin.take().unwrap();
    // A check that finished before this write closes the pipe: that is a
    // check that read nothing, too.
    let _ = stdin.write_all(&[0u8; 64]);
    let started = std::time::Instant::now();
    let status = loop {
        if let Some(s) = child.try_wait().unwrap() {
            break s;
        }
        assert!(started.elapsed().as_secs() < 20, "check waited for standard input");
        std::thread::sleep(std::time::Duration::from_millis(20));
    };
    drop(stdin);
    let o = child.wait_with_output().unwrap();
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(text.contains("note: -: a live input; its stated format was checked, no sample was read"), "{text}");
    // Without a rate the stream cannot be read: check says so, at the reader.
    let o = lobeflow()
        .args(["check", "--input", "-", "--format", "raw", "--datatype", "cf32_le", "--out"])
        .arg(&out)
        .arg(four_lobe())
        .stdin(Stdio::null())
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(err.contains(&format!("four-lobe-pulsed.yaml:{READ_LINE}:")), "{err}");
}
