//! Outputs are staged in one private folder inside --out and committed all
//! or nothing; an output never replaces an input, another output, or a
//! folder, and never lies outside --out; SIGTERM and SIGHUP on a file run
//! clean up like SIGINT; staging left by a killed run is removed by the next.

use lobeflow_blocks::{DeliveryPolicy, FileStager};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::Duration;

fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-safety-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn lobeflow(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_lobeflow")).current_dir(root()).args(args).output().unwrap()
}

fn names(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> =
        std::fs::read_dir(dir).unwrap().flatten().map(|e| e.file_name().to_string_lossy().into_owned()).collect();
    v.sort();
    v
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

#[test]
fn a_folder_at_an_output_name_stops_the_run_before_anything_is_written() {
    let out = scratch("folder");
    std::fs::create_dir_all(out.join("angles.csv")).unwrap();
    let o = lobeflow(&["run", "graphs/two-lobe-beacon.yaml", "--out", out.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("angles.csv is a folder"), "{}", stderr(&o));
    assert_eq!(names(&out), ["angles.csv"], "nothing else was written, no staging left");
    let _ = std::fs::remove_dir_all(&out);
}

#[test]
fn a_commit_that_fails_half_way_puts_every_file_back() {
    let out = scratch("commit");
    let staging = out.join(".staging");
    std::fs::create_dir_all(&staging).unwrap();
    let files = FileStager::in_folder(staging.clone(), DeliveryPolicy::default());
    std::fs::write(out.join("a.csv"), "old a\n").unwrap();
    for (name, text) in [("a.csv", "new a\n"), ("b.csv", "new b\n"), ("c.csv", "new c\n")] {
        let mut f = files.create(&out.join(name)).unwrap();
        f.write_all(text.as_bytes()).unwrap();
        f.finish(&files).unwrap();
    }
    // A folder appears where b.csv goes after b was staged.
    std::fs::create_dir_all(out.join("b.csv")).unwrap();
    let e = files.commit().unwrap_err();
    assert!(e.to_string().contains("b.csv is a folder"), "{e}");
    assert_eq!(std::fs::read_to_string(out.join("a.csv")).unwrap(), "old a\n");
    assert!(!out.join("c.csv").exists());
    assert!(names(&staging).is_empty(), "staged files removed: {:?}", names(&staging));
    // The same three commit together once the way is clear, replacing a.csv.
    std::fs::remove_dir(out.join("b.csv")).unwrap();
    for (name, text) in [("a.csv", "new a\n"), ("b.csv", "new b\n"), ("c.csv", "new c\n")] {
        let mut f = files.create(&out.join(name)).unwrap();
        f.write_all(text.as_bytes()).unwrap();
        f.finish(&files).unwrap();
    }
    assert_eq!(files.commit().unwrap().len(), 3);
    assert_eq!(std::fs::read_to_string(out.join("a.csv")).unwrap(), "new a\n");
    assert!(names(&staging).is_empty(), "the replaced a.csv is gone too");
    let _ = std::fs::remove_dir_all(&out);
}

/// A copy of the beacon graph with its angles table at `table_path`, reading
/// the capture named by the `input` setting.
/// The beacon reference graph written to `dir` with its sample paths made
/// absolute and each (from, to) replaced.
fn beacon_graph(dir: &Path, edits: &[(&str, String)]) -> PathBuf {
    let mut text = std::fs::read_to_string(root().join("graphs/two-lobe-beacon.yaml"))
        .unwrap()
        .replace("../samples/", &format!("{}/samples/", root().display()));
    for (from, to) in edits {
        text = text.replace(from, to);
    }
    let g = dir.join("g.yaml");
    std::fs::write(&g, text).unwrap();
    g
}

fn graph_with_table_path(dir: &Path, table_path: &str) -> PathBuf {
    beacon_graph(dir, &[("set: {path: angles.csv}", format!("set: {{path: {table_path}}}"))])
}

#[test]
fn an_output_that_is_an_input_is_refused_by_run_and_check() {
    let dir = scratch("input");
    let capture = dir.join("cap.cu8");
    let bytes = std::fs::read(root().join("samples/two-lobe-beacon.sigmf-data")).unwrap();
    std::fs::write(&capture, &bytes).unwrap();
    let g = graph_with_table_path(&dir, "$input");
    let g = g.to_str().unwrap();
    let run_into = |out: &Path| {
        lobeflow(&["run", g, "--input", capture.to_str().unwrap(), "--rate", "250kS/s", "--out", out.to_str().unwrap()])
    };
    // The capture's own folder as --out: the table would be the capture.
    let o = run_into(&dir);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("is an input of the run"), "{}", stderr(&o));
    assert!(stderr(&o).contains("block 'angles' (table_writer): parameter 'path'"), "{}", stderr(&o));
    assert_eq!(std::fs::read(&capture).unwrap(), bytes, "the capture is untouched");
    let o = lobeflow(&["check", g, "--input", capture.to_str().unwrap(), "--out", dir.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("is an input of the run"), "{}", stderr(&o));
    // Elsewhere the same path lies outside --out, which is refused too.
    let out = dir.join("out");
    let o = run_into(&out);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("not inside the output folder"), "{}", stderr(&o));
    assert_eq!(std::fs::read(&capture).unwrap(), bytes);
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn two_outputs_of_one_name_and_a_path_out_of_the_folder_are_refused() {
    let dir = scratch("names");
    let g = graph_with_table_path(&dir, "dwells.csv");
    let out = dir.join("out");
    let o = lobeflow(&["run", g.to_str().unwrap(), "--out", out.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("is also written by block"), "{}", stderr(&o));
    let g = graph_with_table_path(&dir, "../escaped.csv");
    let o = lobeflow(&["run", g.to_str().unwrap(), "--out", out.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("not inside the output folder"), "{}", stderr(&o));
    assert!(!dir.join("escaped.csv").exists());
    assert!(names(&out).is_empty(), "{:?}", names(&out));
    let _ = std::fs::remove_dir_all(&dir);
}

/// The beacon graph with its angle plot and timeline pictures set as given.
fn graph_with_pictures(dir: &Path, angle_plot: &str, timeline: &str) -> PathBuf {
    beacon_graph(
        dir,
        &[
            ("set: {path: angles}", format!("set: {{{angle_plot}}}")),
            ("set: {path: timeline, span: 0.3 s}", format!("set: {{{timeline}, span: 0.3 s}}")),
        ],
    )
}

#[test]
fn picture_formats_choose_the_files_and_a_picture_keeps_its_base_name_to_itself() {
    let dir = scratch("formats");
    let out = dir.join("out");
    let both = |g: &Path| {
        let g = g.to_str().unwrap();
        (lobeflow(&["check", g, "--out", out.to_str().unwrap()]), lobeflow(&["run", g, "--out", out.to_str().unwrap()]))
    };
    // An unknown format: check and run refuse it alike, naming block and parameter.
    let g = graph_with_pictures(&dir, "path: angles, formats: gif", "path: timeline");
    for o in <[Output; 2]>::from(both(&g)) {
        assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
        assert!(
            stderr(&o).contains("angle_plot") && stderr(&o).contains("formats") && stderr(&o).contains("gif"),
            "{}",
            stderr(&o)
        );
    }
    assert!(!out.exists() || names(&out).is_empty());
    // Two pictures on one base name are refused even when their files would differ.
    let g = graph_with_pictures(&dir, "path: angles, formats: png", "path: angles, formats: svg");
    for o in <[Output; 2]>::from(both(&g)) {
        assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
        assert!(stderr(&o).contains("is also written by block"), "{}", stderr(&o));
    }
    // Each writes what it is asked for, and the run page shows both pictures.
    let g = graph_with_pictures(&dir, "path: angles, formats: png", "path: timeline, formats: svg");
    let (check, run) = both(&g);
    assert_eq!(check.status.code(), Some(0), "{}", stderr(&check));
    assert_eq!(run.status.code(), Some(0), "{}", stderr(&run));
    let written = names(&out);
    for (name, present) in
        [("angles.png", true), ("angles.svg", false), ("timeline.svg", true), ("timeline.png", false)]
    {
        assert_eq!(written.contains(&name.to_string()), present, "{name}: {written:?}");
    }
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(page.contains("<img src=\"angles.png\"") && page.contains("<img src=\"timeline.svg\""), "{page}");
    assert!(
        page.contains("<img src=\"discriminator-curve.svg\"") && !page.contains("<img src=\"discriminator-curve.png\"")
    );
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn staging_left_by_a_killed_run_is_removed_by_the_next_and_a_live_one_is_not() {
    let out = scratch("stale");
    // A run killed outright (SIGKILL) while it waits on its input.
    let mut child = Command::new(env!("CARGO_BIN_EXE_lobeflow"))
        .current_dir(root())
        .args(["run", "graphs/two-lobe-beacon.yaml", "--input", "-", "--datatype", "cu8", "--rate", "250kS/s"])
        .arg("--out")
        .arg(&out)
        .stdin(Stdio::piped())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let mut waited = 0;
    // Wait until its blocks are built: the staging folder holds its lock and
    // the tables' unfinished files.
    let staged = |out: &Path| {
        names(out).iter().filter(|n| n.starts_with(".lobeflow-staging-")).any(|n| names(&out.join(n)).len() >= 3)
    };
    while !staged(&out) {
        std::thread::sleep(Duration::from_millis(20));
        waited += 1;
        assert!(waited < 500, "the run made its staging folder");
    }
    child.kill().unwrap();
    child.wait().unwrap();
    let stale = names(&out);
    assert_eq!(stale.len(), 1, "{stale:?}");
    // A run still going (this process holds its lock) is left alone.
    let alive = lobeflow::runtime::staging::Staging::create(&out).unwrap();
    let o = lobeflow(&["run", "graphs/two-lobe-beacon.yaml", "--out", out.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stderr(&o).contains(&format!("note: removed {}", out.join(&stale[0]).display())), "{}", stderr(&o));
    assert!(stderr(&o).contains("left by an earlier run that did not finish"));
    assert!(alive.dir().is_dir(), "a live run's staging stays");
    let mut left = names(&out);
    left.retain(|n| n.starts_with(".lobeflow"));
    assert_eq!(left, [alive.dir().file_name().unwrap().to_string_lossy()]);
    drop(alive);
    let _ = std::fs::remove_dir_all(&out);
}

/// A long file run stopped by `sig`: nothing written, no staging left, exit 128 + sig.
fn stop_file_run(sig: i32, dir: &Path, capture: &Path) {
    let out = dir.join(format!("out-{sig}"));
    let child = Command::new(env!("CARGO_BIN_EXE_lobeflow"))
        .current_dir(root())
        .args(["run", "graphs/two-lobe-beacon.yaml", "--rate", "250kS/s", "--input"])
        .arg(capture)
        .arg("--out")
        .arg(&out)
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    std::thread::sleep(Duration::from_millis(500));
    // kill(1) rather than a libc call: the workspace keeps `unsafe` out.
    let status = Command::new("kill").arg(format!("-{sig}")).arg(child.id().to_string()).status().unwrap();
    assert!(status.success(), "kill -{sig} failed");
    let o = child.wait_with_output().unwrap();
    assert_eq!(o.status.code(), Some(128 + sig), "{}", stderr(&o));
    assert!(stderr(&o).contains("no outputs were written"), "{}", stderr(&o));
    assert!(names(&out).is_empty(), "{:?}", names(&out));
}

#[test]
fn sigterm_sighup_and_sigint_on_a_file_run_leave_nothing() {
    let dir = scratch("signals");
    // Two minutes of capture: the run is still going when the signal comes.
    let capture = dir.join("long.cu8");
    let one = std::fs::read(root().join("samples/two-lobe-beacon.sigmf-data")).unwrap();
    let mut f = std::fs::File::create(&capture).unwrap();
    for _ in 0..20 {
        f.write_all(&one).unwrap();
    }
    drop(f);
    for sig in [libc::SIGTERM, libc::SIGHUP, libc::SIGINT] {
        stop_file_run(sig, &dir, &capture);
    }
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn synth_into_a_folder_name_writes_nothing_and_cleans_stale_staging() {
    let dir = scratch("synth");
    std::fs::create_dir_all(dir.join("cap.sigmf-data")).unwrap();
    let stale = dir.join(".lobeflow-staging-1-0");
    std::fs::create_dir_all(&stale).unwrap();
    std::fs::write(stale.join("lock"), "").unwrap();
    std::fs::write(stale.join("0000-cap.sigmf-data"), vec![0u8; 1000]).unwrap();
    let scenario = root().join("samples/two-lobe-beacon.scenario.yaml");
    let o = lobeflow(&["synth", scenario.to_str().unwrap(), "--out", dir.join("cap").to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("cap.sigmf-data is a folder"), "{}", stderr(&o));
    assert_eq!(names(&dir), ["cap.sigmf-data"], "no truth file, no staging left, the stale one removed");
    let _ = std::fs::remove_dir_all(&dir);
}
