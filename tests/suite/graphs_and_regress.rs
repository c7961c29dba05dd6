//! The shipped graphs check, and `lobeflow regress` catches a broken chain,
//! refuses a malformed manifest, and reports every row as JSON.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn repo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn lobeflow(args: &[&str], dir: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_lobeflow")).args(args).current_dir(dir).output().unwrap()
}

fn graph_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            graph_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "yaml") {
            out.push(p);
        }
    }
}

#[test]
fn every_shipped_graph_checks_and_a_broken_one_names_its_line() {
    let mut files = Vec::new();
    graph_files(&repo().join("graphs"), &mut files);
    assert!(files.len() >= 4, "{files:?}");
    for f in &files {
        let out = lobeflow(&["check", f.to_str().unwrap()], &repo());
        assert!(out.status.success(), "{}: {}", f.display(), String::from_utf8_lossy(&out.stderr));
        assert!(String::from_utf8_lossy(&out.stdout).contains("\nok: "));
    }
    let d = std::env::temp_dir().join(format!("lobeflow-broken-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    let text = std::fs::read_to_string(repo().join("graphs/two-lobe-beacon.yaml")).unwrap();
    let broken = d.join("broken.yaml");
    std::fs::write(&broken, text.replace("kind: tone_dwell", "kind: tone_dwel")).unwrap();
    let line = text.lines().position(|l| l.contains("kind: tone_dwell")).unwrap() + 1;
    let out = lobeflow(&["check", broken.to_str().unwrap()], &d);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains(&format!("broken.yaml:{line}:")) && err.contains("did you mean 'tone_dwell'"), "{err}");
}

/// A scratch copy of the graphs and two samples, laid out like the repo.
fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-regress-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    let mut files = Vec::new();
    graph_files(&repo().join("graphs"), &mut files);
    for f in files.iter().chain([repo().join("graphs/patterns/saltmarsh-dish.csv")].iter()) {
        let to = d.join(f.strip_prefix(repo()).unwrap());
        std::fs::create_dir_all(to.parent().unwrap()).unwrap();
        std::fs::copy(f, to).unwrap();
    }
    std::fs::create_dir_all(d.join("samples")).unwrap();
    for e in std::fs::read_dir(repo().join("samples")).unwrap() {
        let p = e.unwrap().path();
        let n = p.file_name().unwrap().to_string_lossy().into_owned();
        if n.starts_with("four-lobe-pulsed.") || n.starts_with("two-lobe-beacon.") {
            std::fs::copy(&p, d.join("samples").join(&n)).unwrap();
        }
    }
    d
}

fn edit(path: &Path, from: &str, to: &str) {
    let text = std::fs::read_to_string(path).unwrap();
    assert!(text.contains(from), "{from} not in {}", path.display());
    std::fs::write(path, text.replace(from, to)).unwrap();
}

#[test]
fn regress_passes_then_catches_a_flipped_sign_and_a_wrong_squint() {
    let d = scratch("broken");
    let report = d.join("report.json");
    let out = lobeflow(&["regress", "samples", "--report", report.to_str().unwrap(), "--out", "out"], &d);
    let table = String::from_utf8_lossy(&out.stdout).into_owned();
    assert!(out.status.success(), "{table}\n{}", String::from_utf8_lossy(&out.stderr));

    // The JSON report holds every row of the table.
    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(&report).unwrap()).unwrap();
    let rows = json["rows"].as_array().unwrap();
    let table_rows = table.lines().filter(|l| l.starts_with("four-lobe") || l.starts_with("two-lobe")).count();
    assert_eq!(rows.len(), table_rows);
    assert!(rows.len() >= 15);
    for r in rows {
        for k in ["sample", "check", "measured", "bound", "verdict"] {
            assert!(r.get(k).is_some(), "{k} missing in {r}");
        }
    }

    // A flipped sign convention in the beacon graph: azimuth reads mirrored.
    edit(&d.join("graphs/two-lobe-beacon.yaml"), "default: \"az=right/left\"", "default: \"az=left/right\"");
    // A wrong squint for the pulsed sample: the angle scale is off.
    edit(&d.join("samples/four-lobe-pulsed.check.yaml"), "checks:", "settings: {squint: 3.4 deg}\nchecks:");
    let out = lobeflow(&["regress", "samples", "--out", "out"], &d);
    assert_eq!(out.status.code(), Some(1), "{}", String::from_utf8_lossy(&out.stdout));
    let table = String::from_utf8_lossy(&out.stdout);
    let failing: Vec<&str> = table.lines().filter(|l| l.contains("FAIL")).collect();
    assert!(failing.iter().any(|l| l.starts_with("two-lobe-beacon") && l.contains("rms_error az")), "{table}");
    assert!(failing.iter().any(|l| l.starts_with("four-lobe-pulsed") && l.contains("rms_over_sigma")), "{table}");
    assert!(failing.iter().any(|l| l.contains("golden angles.csv")), "{table}");
}

/// What a run said: its table (where error rows carry their message) and stderr.
fn said(out: &Output) -> String {
    format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr))
}

#[test]
fn a_malformed_manifest_is_an_input_error_with_file_and_line() {
    let d = scratch("malformed");
    edit(
        &d.join("samples/two-lobe-beacon.check.yaml"),
        "  - {measure: bias, axis: az, max: 0.05}",
        "  - {measure: bias, axsi: az, max: 0.05}",
    );
    let out = lobeflow(&["regress", "samples", "--out", "out"], &d);
    assert_eq!(out.status.code(), Some(2));
    let err = said(&out);
    assert!(err.contains("two-lobe-beacon.check.yaml:8:") && err.contains("unknown key 'axsi'"), "{err}");

    edit(&d.join("samples/two-lobe-beacon.check.yaml"), "axsi: az, ", "");
    let out = lobeflow(&["regress", "samples", "--out", "out"], &d);
    assert_eq!(out.status.code(), Some(2));
    let err = said(&out);
    assert!(err.contains("two-lobe-beacon.check.yaml:8:") && err.contains("needs an axis"), "{err}");

    std::fs::remove_file(d.join("samples/two-lobe-beacon.sigmf-data")).unwrap();
    edit(
        &d.join("samples/two-lobe-beacon.check.yaml"),
        "{measure: bias, max: 0.05}",
        "{measure: bias, axis: az, max: 0.05}",
    );
    let out = lobeflow(&["regress", "samples", "--out", "out"], &d);
    assert_eq!(out.status.code(), Some(2));
    assert!(said(&out).contains("two-lobe-beacon.sigmf-data"), "{}", said(&out));
}
