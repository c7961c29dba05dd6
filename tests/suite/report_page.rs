//! The run's `report.html`: written with the outputs, every file string
//! escaped (a graph whose title, about text, setting doc and picture name
//! carry markup and script), every picture linked, and the page loaded in a
//! real headless browser when one is installed (Chromium; skipped, saying
//! so, where none is).

use std::path::{Path, PathBuf};
use std::process::Command;

const HOSTILE: &str = "<script>alert(1)</script><img src=x onerror=alert(2)>&\"'";

fn scratch(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("report-page").join(name);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// The four-lobe graph with markup in its title, about text, a setting's
/// doc, and the timeline picture's file name; run into `out`.
fn run_hostile_graph(dir: &Path) -> PathBuf {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(root.join("graphs/four-lobe-pulsed.yaml")).unwrap();
    let yaml_hostile = HOSTILE.replace('"', "\\\"");
    let text = drop_block(&text, "about: >")
        .replace("title: four-lobe pulsed tracker", &format!("title: \"{yaml_hostile}\"\nabout: \"{yaml_hostile}\""))
        .replace("../samples/four-lobe-pulsed.wav", &root.join("samples/four-lobe-pulsed.wav").display().to_string())
        .replace("use: parts/", &format!("use: {}/", root.join("graphs/parts").display()))
        .replace("doc: \"nominal pulse repetition frequency\"", &format!("doc: \"{yaml_hostile}\""))
        .replace("path: timeline}", "path: \"time<b>line\"}");
    let graph = dir.join("hostile.yaml");
    std::fs::write(&graph, text).unwrap();
    let out = dir.join("out");
    let status = Command::new(env!("CARGO_BIN_EXE_lobeflow"))
        .args(["run", graph.to_str().unwrap(), "--out", out.to_str().unwrap(), "--quiet"])
        .output()
        .unwrap();
    assert!(status.status.success(), "{}", String::from_utf8_lossy(&status.stderr));
    out
}

/// Remove a folded YAML key and its indented lines.
fn drop_block(text: &str, key: &str) -> String {
    let mut out = String::new();
    let mut skipping = false;
    for line in text.lines() {
        if line.starts_with(key) {
            skipping = true;
            continue;
        }
        if skipping && line.starts_with("  ") {
            continue;
        }
        skipping = false;
        out.push_str(line);
        out.push('\n');
    }
    out
}

#[test]
fn run_page_escapes_file_strings_and_links_every_picture() {
    let dir = scratch("hostile");
    let out = run_hostile_graph(&dir);
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    // Shown as text: the escaped form is there, the markup nowhere.
    assert!(page.contains("&lt;script&gt;alert(1)&lt;/script&gt;&lt;img src=x onerror=alert(2)&gt;&amp;&quot;&#39;"));
    assert!(!page.contains("<script") && !page.contains("<img src=x"), "markup leaked into the page");
    assert!(page.matches("&lt;script&gt;alert(1)").count() >= 3, "title, about and setting doc each escaped");
    // Every picture of the run is on the page and its file exists.
    let svgs: Vec<String> = std::fs::read_dir(&out)
        .unwrap()
        .filter_map(|e| e.ok()?.file_name().into_string().ok())
        .filter(|n| n.ends_with(".svg"))
        .collect();
    assert_eq!(svgs.len(), 6, "{svgs:?}");
    assert!(svgs.contains(&"time<b>line.svg".to_string()));
    for name in &svgs {
        let link = lobeflow::report::link(Path::new(name));
        assert!(page.contains(&format!("<img src=\"{link}\"")), "{name} not on the page");
    }
    // The summary table holds both axes.
    assert!(page.contains("<tr><td>az</td>") && page.contains("<tr><td>el</td>"));
    browser_check(&out, &svgs);
}

pub fn browser() -> Option<PathBuf> {
    ["chromium", "chromium-browser", "chromium-headless-shell", "google-chrome"].iter().find_map(|name| {
        let path = std::env::var_os("PATH")?;
        std::env::split_paths(&path).map(|d| d.join(name)).find(|p| p.is_file())
    })
}

/// A headless Chromium screenshot of `page` at `size`: its width, height,
/// and rows of pixels (RGB or RGBA, `step` bytes each). None, saying so,
/// where no browser is installed.
pub fn screenshot(page: &Path, size: (u32, u32), shot: &Path) -> Option<(u32, u32, usize, Vec<u8>)> {
    let Some(chromium) = browser() else {
        eprintln!("SKIPPED browser check: no chromium on PATH (apt-get install -y chromium)");
        return None;
    };
    let run = Command::new(&chromium)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--hide-scrollbars",
            &format!("--screenshot={}", shot.display()),
            &format!("--window-size={},{}", size.0, size.1),
            &format!("file://{}", page.display()),
        ])
        .output()
        .unwrap();
    assert!(run.status.success(), "chromium failed: {}", String::from_utf8_lossy(&run.stderr));
    let decoder = png::Decoder::new(std::io::BufReader::new(std::fs::File::open(shot).unwrap()));
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    buf.truncate(info.buffer_size());
    Some((info.width, info.height, info.color_type.samples(), buf))
}

/// The DOM Chromium built from `page` after loading it (scripts would have run by then).
pub fn rendered_dom(page: &Path) -> Option<String> {
    let chromium = browser()?;
    let run = Command::new(&chromium)
        .args(["--headless", "--no-sandbox", "--disable-gpu", "--dump-dom", &format!("file://{}", page.display())])
        .output()
        .unwrap();
    assert!(run.status.success(), "chromium failed: {}", String::from_utf8_lossy(&run.stderr));
    Some(String::from_utf8_lossy(&run.stdout).into_owned())
}

/// Load the page in headless Chromium: the screenshot has the window's
/// size, and the pictures' paper colour (absent from the page's own white
/// ground) covers about as many rows as the pictures are tall together,
/// so every picture loaded.
fn browser_check(out: &Path, svgs: &[String]) {
    let heights: u32 = svgs.iter().map(|n| svg_height(&out.join(n))).sum();
    let (w, h) = (1400u32, heights + 3000);
    let shot = out.parent().unwrap().join("shot.png");
    let Some((width, height, step, buf)) = screenshot(&out.join("report.html"), (w, h), &shot) else { return };
    assert_eq!((width, height), (w, h), "screenshot size");
    let row_bytes = width as usize * step;
    let paper_rows =
        buf.chunks(row_bytes).filter(|row| row.chunks(step).filter(|p| p[..3] == [250, 247, 240]).count() > 20).count()
            as u32;
    assert!(
        paper_rows as f64 > 0.9 * heights as f64,
        "pictures cover {paper_rows} rows of {heights}: one did not load"
    );
}

fn svg_height(path: &Path) -> u32 {
    let text = std::fs::read_to_string(path).unwrap();
    let doc = roxmltree::Document::parse(&text).unwrap();
    doc.root_element().attribute("height").and_then(|h| h.parse().ok()).unwrap()
}

/// Per-lobe mean levels written in the timeline's key (`name: mean X dB`).
fn timeline_levels(svg: &Path) -> Vec<(String, f64)> {
    let text = std::fs::read_to_string(svg).unwrap();
    let doc = roxmltree::Document::parse(&text).unwrap();
    doc.descendants()
        .filter(|n| n.tag_name().name() == "text")
        .filter_map(|n| {
            let t = n.text()?.trim().to_string();
            let (name, rest) = t.split_once(": mean ")?;
            let db: f64 = rest.split(' ').next()?.parse().ok()?;
            Some((name.to_string(), db))
        })
        .collect()
}

fn beacon_levels(dir: &Path, first_start: &str) -> (f64, f64) {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let out = dir.join(first_start.replace(' ', ""));
    let run = Command::new(env!("CARGO_BIN_EXE_lobeflow"))
        .args(["run", root.join("graphs/two-lobe-beacon.yaml").to_str().unwrap(), "--out", out.to_str().unwrap()])
        .args(["--quiet", "--set", &format!("first_start={first_start}")])
        .output()
        .unwrap();
    assert!(run.status.success(), "{}", String::from_utf8_lossy(&run.stderr));
    let levels = timeline_levels(&out.join("timeline.svg"));
    let get = |name: &str| levels.iter().find(|l| l.0 == name).unwrap_or_else(|| panic!("{levels:?}")).1;
    (get("right"), get("left"))
}

/// A schedule one dwell off labels every dwell with the other lobe: the
/// timeline's per-lobe means then trade places (right minus left flips its
/// sign with about the same size), which is what a person sees at a glance.
#[test]
fn timeline_shows_a_schedule_one_dwell_off() {
    let dir = scratch("offset");
    let (right, left) = beacon_levels(&dir, "-7 ms");
    let (right_off, left_off) = beacon_levels(&dir, "13 ms");
    let (good, off) = (right - left, right_off - left_off);
    assert!(good.abs() > 0.3, "the beacon sample is off axis: right - left = {good} dB");
    assert!(off * good < 0.0, "one dwell off: {off} dB against {good} dB");
    assert!((off + good).abs() < 0.25 * good.abs(), "swapped means: {off} dB against {good} dB");
}

/// A SigMF copy of the two-lobe beacon whose description and annotation
/// labels carry markup: the run page's capture section shows them as text.
#[test]
fn run_page_shows_sigmf_description_and_annotation_labels_as_text() {
    let dir = scratch("hostile-sigmf");
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    std::fs::copy(root.join("samples/two-lobe-beacon.sigmf-data"), dir.join("beacon.sigmf-data")).unwrap();
    let mut meta: serde_json::Value =
        serde_json::from_slice(&std::fs::read(root.join("samples/two-lobe-beacon.sigmf-meta")).unwrap()).unwrap();
    meta["global"]["core:description"] = serde_json::json!(HOSTILE);
    let label = "<script>alert(3)</script>left";
    meta["annotations"] = serde_json::json!([
        {"core:sample_start": 0, "core:sample_count": 100, "core:label": label},
        {"core:sample_start": 100, "core:sample_count": 100, "core:label": label},
    ]);
    let meta_path = dir.join("beacon.sigmf-meta");
    std::fs::write(&meta_path, serde_json::to_string(&meta).unwrap()).unwrap();
    let out = dir.join("out");
    let run = Command::new(env!("CARGO_BIN_EXE_lobeflow"))
        .args(["run", root.join("graphs/two-lobe-beacon.yaml").to_str().unwrap()])
        .args(["--input", meta_path.to_str().unwrap(), "--out", out.to_str().unwrap(), "--quiet"])
        .output()
        .unwrap();
    assert!(run.status.success(), "{}", String::from_utf8_lossy(&run.stderr));
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(!page.contains("<script") && !page.contains("<img src=x"), "markup leaked into the page");
    let capture = &page[page.find("<h2>Capture</h2>").unwrap()..page.find("<h2>Angle estimates</h2>").unwrap()];
    let description = "&lt;script&gt;alert(1)&lt;/script&gt;&lt;img src=x onerror=alert(2)&gt;&amp;&quot;&#39;";
    assert!(capture.contains(&format!("<p>description: {description}</p>")), "{capture}");
    let row = "<tr><td>&lt;script&gt;alert(3)&lt;/script&gt;left</td><td class=n>2</td></tr>";
    assert!(capture.contains(row), "{capture}");
}
