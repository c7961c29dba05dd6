//! `lobeflow regress` as a CI system uses it: every sample gets its rows
//! (a sample that cannot run is an `error` row), JSON with numbers as
//! numbers, JUnit XML valid against the common schema, exit codes 0/1/2,
//! notices bounded, `--update` only where everything else passes, and
//! manifests that could delete or pass wrongly refused with file:line.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn repo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn lobeflow(args: &[&str], dir: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_lobeflow")).args(args).current_dir(dir).output().unwrap()
}

fn copy_tree(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let p = e.unwrap().path();
        let dest = to.join(p.file_name().unwrap());
        if p.is_dir() { copy_tree(&p, &dest) } else { std::fs::copy(&p, dest).map(|_| ()).unwrap() }
    }
}

/// A scratch copy of the graphs and of the samples whose names start with `samples`.
fn scratch(name: &str, samples: &[&str]) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-reports-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    copy_tree(&repo().join("graphs"), &d.join("graphs"));
    std::fs::create_dir_all(d.join("samples")).unwrap();
    for e in std::fs::read_dir(repo().join("samples")).unwrap() {
        let p = e.unwrap().path();
        let n = p.file_name().unwrap().to_string_lossy().into_owned();
        if samples.iter().any(|s| n.starts_with(&format!("{s}."))) {
            std::fs::copy(&p, d.join("samples").join(&n)).unwrap();
        }
    }
    d
}

fn edit(path: &Path, from: &str, to: &str) {
    let text = std::fs::read_to_string(path).unwrap();
    assert!(text.contains(from), "{from} not in {}", path.display());
    std::fs::write(path, text.replacen(from, to, 1)).unwrap();
}

fn text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}

fn rows(json: &serde_json::Value) -> &Vec<serde_json::Value> {
    json["rows"].as_array().unwrap()
}

/// Checks what the common JUnit XML schema (the Ant JUnit task's XSD, as CI
/// systems read it) requires, and returns (tests, failures, errors).
fn assert_junit_schema(xml: &str) -> (usize, usize, usize) {
    let doc = roxmltree::Document::parse(xml).expect("well-formed XML");
    let root = doc.root_element();
    assert_eq!(root.tag_name().name(), "testsuites");
    assert_eq!(root.attributes().count(), 0, "testsuites takes no attributes");
    let decimal = |v: &str| {
        !v.is_empty() && v.chars().all(|c| c.is_ascii_digit() || c == '.' || c == '-') && v.parse::<f64>().is_ok()
    };
    let timestamp = |v: &str| {
        v.len() == 19
            && v.char_indices().all(|(i, c)| match i {
                4 | 7 => c == '-',
                10 => c == 'T',
                13 | 16 => c == ':',
                _ => c.is_ascii_digit(),
            })
    };
    let (mut tests, mut failures, mut errors) = (0, 0, 0);
    for (id, suite) in root.children().filter(|n| n.is_element()).enumerate() {
        assert_eq!(suite.tag_name().name(), "testsuite");
        for a in suite.attributes() {
            assert!(
                ["name", "timestamp", "hostname", "tests", "failures", "errors", "skipped", "time", "package", "id"]
                    .contains(&a.name()),
                "testsuite attribute {}",
                a.name()
            );
        }
        let attr = |k: &str| suite.attribute(k).unwrap_or_else(|| panic!("testsuite needs {k}"));
        assert!(!attr("name").trim().is_empty() && !attr("hostname").trim().is_empty());
        assert!(!attr("package").trim().is_empty());
        assert!(timestamp(attr("timestamp")), "{}", attr("timestamp"));
        assert!(decimal(attr("time")), "{}", attr("time"));
        assert_eq!(attr("id").parse::<usize>().unwrap(), id);
        let count = |k: &str| attr(k).parse::<usize>().unwrap_or_else(|_| panic!("{k} is not an int"));
        let children: Vec<_> = suite.children().filter(|n| n.is_element()).collect();
        let names: Vec<&str> = children.iter().map(|n| n.tag_name().name()).collect();
        assert_eq!(names.first(), Some(&"properties"), "{names:?}");
        assert_eq!(&names[names.len() - 2..], ["system-out", "system-err"], "{names:?}");
        for p in children[0].children().filter(|n| n.is_element()) {
            assert!(p.tag_name().name() == "property" && p.has_attribute("name") && p.has_attribute("value"));
        }
        let cases = &children[1..children.len() - 2];
        let (mut f, mut e) = (0, 0);
        for case in cases {
            assert_eq!(case.tag_name().name(), "testcase");
            for a in case.attributes() {
                assert!(["name", "classname", "time"].contains(&a.name()), "testcase attribute {}", a.name());
            }
            assert!(!case.attribute("name").unwrap().is_empty() && case.has_attribute("classname"));
            assert!(decimal(case.attribute("time").unwrap()));
            let inner: Vec<_> = case.children().filter(|n| n.is_element()).collect();
            assert!(inner.len() <= 1, "a testcase holds at most one of skipped, error, failure");
            if let Some(outcome) = inner.first() {
                match outcome.tag_name().name() {
                    "failure" => f += 1,
                    "error" => e += 1,
                    other => panic!("unexpected <{other}>"),
                }
                assert!(outcome.has_attribute("type"), "failure and error need a type");
                for a in outcome.attributes() {
                    assert!(["message", "type"].contains(&a.name()));
                }
            }
        }
        assert_eq!((count("tests"), count("failures"), count("errors")), (cases.len(), f, e));
        tests += cases.len();
        failures += f;
        errors += e;
    }
    (tests, failures, errors)
}

#[test]
fn a_sample_that_cannot_run_is_an_error_row_and_the_others_still_run_with_both_reports() {
    let d = scratch("missing", &["two-lobe-beacon", "four-lobe-pulsed"]);
    std::fs::remove_file(d.join("samples/two-lobe-beacon.sigmf-data")).unwrap();
    let out = lobeflow(&["regress", "samples", "--out", "out", "--report", "r.json", "--junit", "r.xml"], &d);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out.stderr));
    let table = text(&out.stdout);
    assert!(table.lines().any(|l| l.starts_with("two-lobe-beacon") && l.contains("ERROR")), "{table}");
    assert!(table.lines().filter(|l| l.starts_with("four-lobe-pulsed")).all(|l| l.contains(" pass ")), "{table}");

    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("r.json")).unwrap()).unwrap();
    assert_eq!(json["verdict"], "error");
    let beacon: Vec<_> = rows(&json).iter().filter(|r| r["sample"] == "two-lobe-beacon").collect();
    assert_eq!(beacon.len(), 1);
    assert_eq!(beacon[0]["verdict"], "error");
    assert!(beacon[0]["message"].as_str().unwrap().contains("two-lobe-beacon.sigmf-data"), "{}", beacon[0]);
    let pulsed: Vec<_> = rows(&json).iter().filter(|r| r["sample"] == "four-lobe-pulsed").collect();
    assert!(pulsed.len() >= 12 && pulsed.iter().all(|r| r["verdict"] == "pass"));
    // Numbers are numbers; measure, axis, unit apart.
    let rms = pulsed.iter().find(|r| r["measure"] == "rms_error" && r["axis"] == "az").unwrap();
    assert!(rms["measured"].as_f64().unwrap() > 0.0 && rms["measured"].as_f64().unwrap() < 0.5);
    assert_eq!(rms["bound"]["max"].as_f64(), Some(0.5));
    assert!(rms["bound"]["min"].is_null());
    assert_eq!(rms["unit"], "deg");
    assert!(rms["seconds"].is_f64());
    let estimates = pulsed.iter().find(|r| r["measure"] == "estimates").unwrap();
    assert_eq!(estimates["bound"]["min"].as_f64(), Some(70.0));

    let xml = std::fs::read_to_string(d.join("r.xml")).unwrap();
    let (tests, failures, errors) = assert_junit_schema(&xml);
    assert_eq!((tests, failures, errors), (rows(&json).len(), 0, 1));
    assert!(xml.contains("two-lobe-beacon.sigmf-data"));
}

#[test]
fn failed_checks_exit_1_show_measured_against_bound_and_reports_go_to_standard_output() {
    let d = scratch("failed", &["two-lobe-beacon"]);
    edit(
        &d.join("samples/two-lobe-beacon.check.yaml"),
        "rms_error, axis: az, max: 0.2",
        "rms_error, axis: az, max: 0.01",
    );
    let out = lobeflow(&["regress", "samples", "--out", "out", "--junit", "-"], &d);
    assert_eq!(out.status.code(), Some(1), "{}", text(&out.stderr));
    assert!(!d.join("-").exists(), "'-' means standard output, not a file");
    let xml = text(&out.stdout);
    assert_eq!(assert_junit_schema(&xml).1, 1);
    let doc = roxmltree::Document::parse(&xml).unwrap();
    let failure = doc.descendants().find(|n| n.has_tag_name("failure")).unwrap();
    let message = failure.attribute("message").unwrap();
    assert!(message.contains("measured 0.") && message.contains("deg, bound <= 0.01 deg"), "{message}");
    assert_eq!(failure.parent().unwrap().attribute("name"), Some("rms_error az"));
    // The table a person reads moved to standard error.
    assert!(text(&out.stderr).contains("FAIL"), "{}", text(&out.stderr));

    let out = lobeflow(&["regress", "samples", "--out", "out", "--report", "-"], &d);
    assert_eq!(out.status.code(), Some(1));
    let json: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(json["verdict"], "fail");
    assert_eq!(json["failed"].as_u64(), Some(1));
    assert!(!d.join("-").exists());
    let out = lobeflow(&["regress", "samples", "--report", "-", "--junit", "-"], &d);
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn a_chain_that_starts_warning_on_clean_data_fails_its_notice_bound() {
    let d = scratch("notices", &["four-lobe-pulsed"]);
    // The dwell length the switch gate expects, a pulse short: every dwell
    // looks irregular, yet the angles stay good.
    edit(&d.join("samples/four-lobe-pulsed.check.yaml"), "checks:", "settings: {dwell: 3 pulses}\nchecks:");
    let out = lobeflow(&["regress", "samples", "--out", "out", "--report", "r.json"], &d);
    assert_eq!(out.status.code(), Some(1), "{}", text(&out.stdout));
    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("r.json")).unwrap()).unwrap();
    let failed: Vec<_> = rows(&json).iter().filter(|r| r["verdict"] == "fail").collect();
    assert!(failed.iter().all(|r| r["measure"] == "notices" || r["measure"] == "warnings"), "{failed:?}");
    let all = failed.iter().find(|r| r["block"].is_null()).unwrap();
    // 8 irregular dwells are shown and the rest counted: all of them count.
    assert!(all["measured"].as_f64().unwrap() > 200.0, "{all}");
    assert!(failed.iter().any(|r| r["block"] == "sweep_gate"));
}

#[test]
fn update_rewrites_a_golden_only_when_every_other_check_passes_and_says_what_moved() {
    let d = scratch("update", &["two-lobe-beacon"]);
    let golden = d.join("samples/two-lobe-beacon.golden.csv");
    let original = std::fs::read_to_string(&golden).unwrap();
    let mut lines: Vec<String> = original.lines().map(String::from).collect();
    lines.remove(5); // the run will have one row more
    let mut cells: Vec<String> = lines[10].split(',').map(String::from).collect();
    let err_col = lines[0].split(',').position(|c| c == "error_deg").unwrap();
    cells[err_col] = format!("{:.5}", cells[err_col].parse::<f64>().unwrap() + 0.25);
    lines[10] = cells.join(",");
    let stale = lines.join("\n") + "\n";
    std::fs::write(&golden, &stale).unwrap();

    // Another check of the sample fails: the golden stays as it was.
    let manifest = d.join("samples/two-lobe-beacon.check.yaml");
    edit(&manifest, "estimates, axis: az, min: 140", "estimates, axis: az, min: 1000");
    let out = lobeflow(&["regress", "samples", "--out", "out", "--update"], &d);
    assert_eq!(out.status.code(), Some(1));
    assert_eq!(std::fs::read_to_string(&golden).unwrap(), stale);
    let table = text(&out.stdout);
    assert!(
        table.lines().any(|l| l.contains("golden angles.csv") && l.contains("FAIL") && l.contains("not updated")),
        "{table}"
    );

    // All other checks pass: rewritten, and what moved is printed.
    edit(&manifest, "min: 1000", "min: 140");
    let out = lobeflow(&["regress", "samples", "--out", "out", "--update"], &d);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stdout));
    assert_eq!(std::fs::read_to_string(&golden).unwrap(), original);
    let table = text(&out.stdout);
    assert!(table.contains("rows added 1, removed 0, changed 1"), "{table}");
    let moved = table.lines().find(|l| l.trim_start().starts_with("error_deg: largest change")).unwrap();
    let change: f64 = moved.rsplit(' ').next().unwrap().parse().unwrap();
    assert!((change - 0.25).abs() < 1e-4, "{moved}");
}

#[test]
fn manifest_names_that_leave_the_output_folder_are_refused_and_delete_nothing() {
    let d = scratch("names", &["two-lobe-beacon"]);
    let beside = d.join("work/keep.txt");
    let inside = d.join("work/out/keep.txt");
    std::fs::create_dir_all(inside.parent().unwrap()).unwrap();
    std::fs::write(&beside, "beside --out").unwrap();
    std::fs::write(&inside, "inside --out").unwrap();
    let text_of = |m: &str| std::fs::read_to_string(d.join("samples").join(m)).unwrap();
    let manifest = text_of("two-lobe-beacon.check.yaml");
    std::fs::write(d.join("samples/...check.yaml"), &manifest).unwrap(); // name ".."
    std::fs::write(d.join("samples/.check.yaml"), &manifest).unwrap(); // name ""
    let out = lobeflow(&["regress", "samples", "--out", "work/out", "--report", "r.json"], &d);
    assert_eq!(out.status.code(), Some(2));
    assert!(beside.exists() && inside.exists(), "nothing outside a sample's own folder is deleted");
    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("r.json")).unwrap()).unwrap();
    let errors: Vec<_> = rows(&json).iter().filter(|r| r["verdict"] == "error").collect();
    assert_eq!(errors.len(), 2, "{errors:?}");
    for e in &errors {
        let m = e["message"].as_str().unwrap();
        assert!(m.contains("check.yaml:1:") && m.contains("must be a plain file name"), "{m}");
    }
    // The good sample still ran.
    assert!(rows(&json).iter().any(|r| r["sample"] == "two-lobe-beacon" && r["verdict"] == "pass"));
}

#[test]
fn bounds_must_be_finite_ordered_and_on_known_axes_with_file_and_line() {
    let d = scratch("bounds", &["two-lobe-beacon"]);
    let manifest = d.join("samples/two-lobe-beacon.check.yaml");
    let original = std::fs::read_to_string(&manifest).unwrap();
    let line_of = |needle: &str| original.lines().position(|l| l.contains(needle)).unwrap() + 1;
    let cases = [
        ("tolerance: 1e-4", "tolerance: .nan", "tolerance: 1e-4", "tolerance must be a finite number"),
        ("tolerance: 1e-4", "tolerance: -1", "tolerance: 1e-4", "tolerance must be a finite number of at least 0"),
        ("max: 0.05}", "max: .nan}", "bias, axis", "max must be a finite number"),
        ("max: 0.05}", "max: -0.05}", "bias, axis", "never negative"),
        ("max: 0.05}", "min: 0.1, max: 0.05}", "bias, axis", "min 0.1 is above max 0.05"),
        ("rms_error, axis: az", "rms_error, axis: az, flag: ok", "rms_error", "takes no flag"),
    ];
    for (from, to, at, says) in cases {
        std::fs::write(&manifest, original.replacen(from, to, 1)).unwrap();
        let err = lobeflow::regress::Manifest::load(&manifest).map(|_| ()).unwrap_err().to_string();
        let want = format!("two-lobe-beacon.check.yaml:{}:", line_of(at));
        assert!(err.contains(&want) && err.contains(says), "{to}: {err}");
    }
    // A check on an axis the graph does not measure cannot pass silently.
    std::fs::write(&manifest, original.replacen("{measure: bias, axis: az", "{measure: bias, axis: elv", 1)).unwrap();
    let out = lobeflow(&["regress", "samples", "--out", "out", "--report", "-"], &d);
    assert_eq!(out.status.code(), Some(2));
    let json: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let bad = rows(&json).iter().find(|r| r["axis"] == "elv").unwrap();
    assert_eq!(bad["verdict"], "error");
    let m = bad["message"].as_str().unwrap();
    assert!(
        m.contains(&format!("two-lobe-beacon.check.yaml:{}:", line_of("bias, axis"))) && m.contains("measures az"),
        "{m}"
    );
    // The other checks of that sample still have their verdicts.
    assert!(rows(&json).iter().any(|r| r["measure"] == "rms_error" && r["verdict"] == "pass"));
}

#[test]
fn the_default_output_folder_is_not_a_relative_target() {
    let d = scratch("default-out", &["two-lobe-beacon"]);
    let out = lobeflow(&["regress", "samples"], &d);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stdout));
    assert!(!d.join("target").exists());
    let table = text(&out.stdout);
    let line = table.lines().find(|l| l.starts_with("outputs in ")).unwrap();
    let folder = PathBuf::from(line.trim_start_matches("outputs in "));
    assert!(folder.starts_with(std::env::temp_dir()), "{line}");
    assert!(folder.join("two-lobe-beacon/angles.csv").is_file());
    std::fs::remove_dir_all(folder).unwrap();
}

#[test]
fn the_regression_page_puts_failures_first_with_their_rows_and_shows_markup_as_text() {
    let d = scratch("page", &["two-lobe-beacon", "four-lobe-pulsed"]);
    let beacon = d.join("samples/two-lobe-beacon.check.yaml");
    // A sample whose manifest name and check (so its error message) carry markup.
    let hostile_name = "zz<script>alert(1)<b>&'";
    let hostile_text = std::fs::read_to_string(&beacon).unwrap().replacen(
        "{measure: bias, axis: az",
        "{measure: bias, axis: \"<script>alert(2)</script>\"",
        1,
    );
    std::fs::write(d.join(format!("samples/{hostile_name}.check.yaml")), hostile_text).unwrap();
    edit(&beacon, "rms_error, axis: az, max: 0.2", "rms_error, axis: az, max: 0.01");
    let out = lobeflow(&["regress", "samples", "--out", "out"], &d);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out.stderr));
    let page = std::fs::read_to_string(d.join("out/report.html")).unwrap();
    assert!(!page.to_lowercase().contains("<script"), "no raw script tag on the page");

    let heading = |name: &str| page.find(&format!("<h2>{name} ")).unwrap_or_else(|| panic!("no section {name}"));
    let escaped_name = "zz&lt;script&gt;alert(1)&lt;b&gt;&amp;&#39;";
    let (errored, failed, passed) = (heading(escaped_name), heading("two-lobe-beacon"), heading("four-lobe-pulsed"));
    assert!(errored < failed && failed < passed, "errored, then failed, then passed sections");
    assert!(page[errored..failed].contains("&lt;script&gt;alert(2)&lt;/script&gt;"), "the hostile axis as text");

    // The failing row, with its measured value against its bound.
    let section = &page[failed..passed];
    let row = section.lines().find(|l| l.contains("<td>rms_error az</td>")).unwrap();
    assert!(row.contains("<td class=fail>fail</td>") && row.contains("<td>&lt;= 0.01 deg</td>"), "{row}");
    assert!(section.lines().filter(|l| l.contains("<td class=fail>")).count() == 1, "{section}");
    // Links to the sample's run page and pictures, which exist.
    for target in ["two-lobe-beacon/report.html", "two-lobe-beacon/angles.svg"] {
        assert!(section.contains(&format!("<a href=\"{target}\">")), "{target}");
        assert!(d.join("out").join(target).is_file(), "{target}");
    }
    assert!(page.contains("<a href=\"zz%3Cscript%3Ealert%281%29%3Cb%3E%26%27/report.html\">"));
    regress_page_in_a_browser(&d.join("out/report.html"));
}

/// The regression page in headless Chromium (skipped, saying so, without
/// one): the DOM it builds holds the three sample sections and no script
/// element, the screenshot has the window's size, and the stylesheet drew
/// the fail and pass verdicts in their colours.
fn regress_page_in_a_browser(page: &Path) {
    use crate::report_page::{rendered_dom, screenshot};
    let shot = page.with_file_name("regress-shot.png");
    let Some((w, h, step, buf)) = screenshot(page, (1200, 1400), &shot) else { return };
    assert_eq!((w, h), (1200, 1400), "screenshot size");
    let has = |rgb: [u8; 3]| buf.chunks(step).filter(|p| p[..3] == rgb).count() > 50;
    assert!(has([196, 58, 40]), "no fail colour drawn");
    assert!(has([26, 104, 112]), "no pass colour drawn");
    let dom = rendered_dom(page).unwrap();
    assert_eq!(dom.matches("<h2>").count(), 3, "three sample sections");
    assert!(!dom.to_lowercase().contains("<script"), "a script element in the rendered page");
    assert!(dom.contains("alert(2)"), "the hostile axis shown as text");
}
