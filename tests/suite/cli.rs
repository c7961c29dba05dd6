//! The `lobeflow` command as a person uses it: help, exit codes, errors
//! printed once, Ctrl-C.

use std::path::PathBuf;
use std::process::{Command, Stdio};
use std::time::Duration;

fn lobeflow() -> Command {
    Command::new(env!("CARGO_BIN_EXE_lobeflow"))
}

fn dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-cli-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

#[test]
fn help_lists_the_subcommands() {
    let out = lobeflow().arg("--help").output().unwrap();
    assert!(out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    for cmd in ["run", "check", "blocks"] {
        assert!(text.lines().any(|l| l.trim_start().starts_with(cmd)), "{cmd} missing from:\n{text}");
    }
}

#[test]
fn usage_errors_exit_2_and_graph_errors_name_file_and_line() {
    let out = lobeflow().args(["run"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let d = dir("bad");
    let g = d.join("broken.yaml");
    std::fs::write(&g, "blocks:\n  tone: {kind: test_tone}\n  x: {kind: pas}\n").unwrap();
    let out = lobeflow().arg("check").arg(&g).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("broken.yaml:3:") && err.contains("did you mean 'pass'"), "{err}");
    assert_eq!(err.matches("unknown block kind").count(), 1, "printed once: {err}");
    assert!(!err.contains("panicked") && !err.contains("backtrace"), "{err}");
    let out = lobeflow().args(["blocks", "pas"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn blocks_documents_every_kind() {
    let out = lobeflow().arg("blocks").output().unwrap();
    assert!(out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    for spec in lobeflow::registry().kinds() {
        assert!(text.contains(&format!("\n{}\n  ", spec.kind)) || text.starts_with(spec.kind), "{} missing", spec.kind);
        for p in spec.params {
            assert!(!p.doc.is_empty(), "{}.{} has no doc", spec.kind, p.name);
            assert!(text.contains(&format!("param {}", p.name)), "{}.{} not listed", spec.kind, p.name);
        }
        assert!(!spec.doc.is_empty(), "{} has no doc", spec.kind);
    }
}

#[test]
fn ctrl_c_stops_cleanly_with_no_output() {
    let d = dir("sigint");
    let g = d.join("long.yaml");
    std::fs::write(
        &g,
        "blocks:\n  tone: {kind: test_tone, set: {samples: 100000000000}}\n  keep: {kind: pass}\n  drop: {kind: discard}\nwiring:\n  - tone -> keep -> drop\n",
    )
    .unwrap();
    let out_dir = d.join("out");
    let child = lobeflow()
        .arg("run")
        .arg(&g)
        .arg("--out")
        .arg(&out_dir)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    std::thread::sleep(Duration::from_millis(500));
    let killed = Command::new("kill").arg("-INT").arg(child.id().to_string()).status().unwrap();
    assert!(killed.success());
    let out = child.wait_with_output().unwrap();
    assert_eq!(out.status.code(), Some(130));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("stopped before the end; no outputs were written"), "{err}");
}
