//! The fuzz targets' inputs on stable: every seed the corpora start from (the
//! repository's own captures, recordings, graphs, manifests and scenarios)
//! and every input fuzzing found (`tests/bad_inputs/fuzz/<target>/`) goes
//! through the same entry point the fuzz target calls. None may panic, and
//! an error must say where.

use lobeflow::fuzzing;
use std::path::PathBuf;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn files(dir: &str, suffix: &str) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(root().join(dir))
        .map(|d| d.flatten().map(|e| e.path()).filter(|p| p.to_string_lossy().ends_with(suffix)).collect())
        .unwrap_or_default();
    v.sort();
    v
}

fn check_all(target: &str, run: &dyn Fn(&[u8]) -> Result<String, String>, seeds: Vec<PathBuf>) {
    let found = fuzzing::committed_inputs(&root().join("tests/bad_inputs/fuzz"), target);
    assert!(!seeds.is_empty(), "{target}: no seeds");
    for path in seeds.iter().chain(&found) {
        let data = std::fs::read(path).unwrap();
        // A panic fails the test with the input's name in the message.
        let result = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| run(&data)));
        match result {
            Ok(Ok(_)) => {}
            Ok(Err(e)) => {
                assert!(fuzzing::error_has_place(&e), "{target} {}: error without a place: {e}", path.display())
            }
            Err(_) => panic!("{target}: {} panicked", path.display()),
        }
    }
    fuzzing::clean_scratch();
}

fn wrap<T: std::fmt::Debug>(f: fn(&[u8]) -> Result<T, String>) -> impl Fn(&[u8]) -> Result<String, String> {
    move |d| f(d).map(|v| format!("{v:?}"))
}

#[test]
fn wav_reader_inputs() {
    let mut seeds = files("tests/fixtures/captures", ".wav");
    seeds.extend(files("tests/fixtures/bad", ".wav"));
    seeds.extend(files("tests/bad_inputs/cases", ".wav"));
    let f = wrap(fuzzing::wav_reader);
    check_all("wav_reader", &f, seeds);
}

#[test]
fn sigmf_meta_inputs() {
    let mut seeds = files("samples", ".sigmf-meta");
    seeds.extend(files("tests/fixtures/captures", ".sigmf-meta"));
    seeds.extend(files("tests/fixtures/bad", ".sigmf-meta"));
    seeds.extend(files("tests/bad_inputs/cases", ".sigmf-meta"));
    let f = wrap(fuzzing::sigmf_meta);
    check_all("sigmf_meta", &f, seeds);
}

#[test]
fn raw_datatype_inputs() {
    let mut seeds = files("tests/fixtures/captures", ".cu8");
    seeds.extend(files("tests/fixtures/bad", ".cf32_le"));
    seeds.extend(files("tests/fixtures/bad", ".ci16"));
    let f = wrap(fuzzing::raw_datatypes);
    check_all("raw_datatypes", &f, seeds);
}

#[test]
fn graph_inputs() {
    let mut seeds = files("graphs", ".yaml");
    seeds.extend(files("graphs/parts", ".yaml"));
    let f = wrap(fuzzing::graph_load);
    check_all("graph_load", &f, seeds);
}

#[test]
fn manifest_inputs() {
    let f = wrap(fuzzing::manifest);
    check_all("manifest", &f, files("samples", ".check.yaml"));
}

#[test]
fn scenario_inputs() {
    let f = wrap(fuzzing::scenario);
    check_all("scenario", &f, files("samples", ".scenario.yaml"));
}
