//! The reference graphs' pictures read back against their own runs: what
//! a picture shows (gate band, ranges, key, curve, a beacon's tone) agrees
//! with the tables and the report page of the same run.

use super::pictures::{scratch, svg_texts};
use super::pictures_circular::placed_texts;
use std::path::{Path, PathBuf};

/// Run a reference graph with the command-line tool into a fresh folder.
fn run_graph(name: &str, graph: &str, extra: &[&str]) -> PathBuf {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let out = scratch(name).join("out");
    let run = std::process::Command::new(env!("CARGO_BIN_EXE_lobeflow"))
        .args(["run", root.join(graph).to_str().unwrap(), "--out", out.to_str().unwrap(), "--quiet"])
        .args(extra)
        .output()
        .unwrap();
    assert!(run.status.success(), "{}", String::from_utf8_lossy(&run.stderr));
    out
}

/// The first number in `text` after `after`.
fn number_after(text: &str, after: &str) -> Option<f64> {
    let rest = text[text.find(after)? + after.len()..].trim_start();
    let end = rest.find(|c: char| !(c.is_ascii_digit() || c == '.' || c == '-' || c == '+')).unwrap_or(rest.len());
    rest[..end].parse().ok()
}

/// Per axis, the report page's summary row: (estimates, ok, mean, RMS, median σ, outliers).
fn summary_rows(page: &str) -> Vec<(String, Vec<f64>)> {
    let table = &page[page.find("<h2>Angle estimates</h2>").unwrap()..];
    let table = &table[..table.find("</table>").unwrap()];
    table
        .lines()
        .filter(|l| l.starts_with("<tr><td>"))
        .map(|l| {
            let cells: Vec<&str> =
                l.split("<td").skip(1).map(|c| &c[c.find('>').unwrap() + 1..c.find("</td>").unwrap()]).collect();
            (cells[0].to_string(), cells[1..].iter().map(|c| c.parse().unwrap_or(f64::NAN)).collect())
        })
        .collect()
}

/// Mean of a numeric column of a CSV table over its non-empty cells.
fn column_mean(path: &Path, column: &str) -> f64 {
    let mut reader = csv::Reader::from_path(path).unwrap();
    let k = reader.headers().unwrap().iter().position(|h| h == column).unwrap();
    let values: Vec<f64> = reader.records().filter_map(|r| r.unwrap().get(k)?.parse().ok()).collect();
    values.iter().sum::<f64>() / values.len() as f64
}

/// Pixels per km and the pixel of 0 km along the top chart's range axis,
/// from its tick labels (the numeric, centred labels of the highest row).
fn range_axis(svg: &Path) -> (f64, f64) {
    let ticks: Vec<(f64, f64, f64)> =
        placed_texts(svg).into_iter().filter_map(|(t, x, y)| Some((t.parse::<f64>().ok()?, x, y))).collect();
    let mut rows: Vec<f64> = ticks.iter().map(|t| t.2).collect();
    rows.sort_by(f64::total_cmp);
    rows.dedup();
    let row = rows.iter().find(|&&y| ticks.iter().filter(|t| t.2 == y).count() >= 4).unwrap();
    let axis: Vec<&(f64, f64, f64)> = ticks.iter().filter(|t| t.2 == *row).collect();
    let (a, b) = (axis[0], axis[axis.len() - 1]);
    let per_km = (b.1 - a.1) / (b.0 - a.0);
    (per_km, a.1 - a.0 * per_km)
}

/// The four-lobe sample's pictures against its own run: the range trace's
/// gate band lies where the range gate says it acquired the echo, and the
/// tables' range (the echo's leading edge) lies inside it; the circle reads
/// that same range; the angle plot's key and the discriminator curve's
/// point counts are the report page's summary figures.
#[test]
fn four_lobe_pictures_agree_with_the_run_and_its_summary() {
    let out = run_graph("four-lobe-run", "graphs/four-lobe-pulsed.yaml", &[]);
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    let notice = &page[page.find("acquired the strongest echo").expect("no acquisition notice on the page")..];
    let (gate_from, gate_to) = (number_after(notice, "(").unwrap(), number_after(notice, " to ").unwrap());
    // The gate band of the whole-window chart.
    let svg = out.join("range-trace.svg");
    let (per_km, zero) = range_axis(&svg);
    let text = std::fs::read_to_string(&svg).unwrap();
    let doc = roxmltree::Document::parse(&text).unwrap();
    let band = doc
        .descendants()
        .find(|n| n.attribute("fill") == Some("#ECC478") && n.attribute("opacity") == Some("0.6"))
        .expect("a gate band");
    let x: f64 = band.attribute("x").unwrap().parse().unwrap();
    let w: f64 = band.attribute("width").unwrap().parse().unwrap();
    let (band_from, band_to) = ((x - zero) / per_km * 1e3, (x + w - zero) / per_km * 1e3);
    let px_m = 1e3 / per_km;
    assert!((band_from - gate_from).abs() < 1.5 * px_m, "band starts at {band_from:.0} m, gate at {gate_from:.0} m");
    assert!((band_to - gate_to).abs() < 1.5 * px_m, "band ends at {band_to:.0} m, gate at {gate_to:.0} m");
    let range = column_mean(&out.join("angles.csv"), "range_m");
    assert!(range > gate_from && range < gate_to, "range {range:.0} m outside the gate {gate_from:.0}..{gate_to:.0} m");
    // One range everywhere: the circle's reading is the tables' leading edge.
    let circle = svg_texts(&out.join("sweep-circle.svg"));
    let edge = circle.iter().find_map(|t| number_after(t, "Echo leading edge")).expect("leading edge readout");
    assert!((edge * 1e3 - range).abs() < 0.5 * 149.9, "circle {edge} km, tables {range:.1} m");
    // The angle plot's key and the curve's counts against the summary table.
    let rows = summary_rows(&page);
    assert_eq!(rows.len(), 2);
    let key = svg_texts(&out.join("angles.svg"));
    let curve = svg_texts(&out.join("discriminator-curve.svg"));
    for (axis, figures) in &rows {
        let panel = key.iter().position(|t| t.starts_with(&format!("axis {axis}:"))).unwrap();
        let mine = &key[panel..];
        let figure = |name: &str| mine.iter().find_map(|t| number_after(t, name)).unwrap();
        let (count, ok, mean, rms, sigma, outliers) =
            (figures[0], figures[1], figures[2], figures[3], figures[5], figures[8]);
        // The page's range column is the same leading edge the circle reads.
        assert!((figures[9] - edge * 1e3).abs() < 0.5 * 149.9, "{axis}: page {} m, circle {edge} km", figures[9]);
        assert_eq!(figure("mean "), mean, "{axis} mean");
        assert_eq!(figure("RMS "), rms, "{axis} RMS");
        assert_eq!(figure("median σ "), sigma, "{axis} median σ");
        assert_eq!(figure("angle, "), ok, "{axis} ok count");
        assert_eq!(number_after(mine.iter().find(|t| t.starts_with("angle, ")).unwrap(), " ok of "), Some(count));
        let panel = curve.iter().position(|t| t == &format!("pair {axis}")).unwrap();
        let points = curve[panel..].iter().find_map(|t| number_after(t, "operating points: ")).unwrap();
        assert_eq!(points, ok + outliers, "{axis}: curve points against ok and outlier estimates");
    }
}

/// The beacon spectrum on the independent off-grid beacon capture (numpy,
/// tests/independent): each lobe's peak lies within a bin of the tone the
/// script wrote (3137.7 Hz), inside the search window; a tone setting
/// far off (-3 kHz) leaves the real tone among the noise bins, and the
/// picture's block says so.
#[test]
fn beacon_spectrum_finds_the_independent_tone_and_warns_of_a_wrong_setting() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let capture = root.join("tests/independent/captures/beacon-off-grid.sigmf-meta");
    let input = format!("input={}", capture.display());
    let settings = ["dwell=5 ms", "first_start=2.5 ms", "guard=0.3 ms"];
    let mut args: Vec<&str> = vec!["--set", &input];
    for s in &settings {
        args.extend(["--set", s]);
    }
    let good = [args.clone(), vec!["--set", "tone=3137.7 Hz"]].concat();
    let out = run_graph("beacon-spectrum", "graphs/two-lobe-beacon.yaml", &good);
    let svg = out.join("beacon-spectrum.svg");
    let texts = svg_texts(&svg);
    let subtitle = texts.iter().find(|t| t.contains("-point transform")).unwrap();
    let bin_hz = number_after(subtitle, "transform, bin ").unwrap();
    let peaks: Vec<f64> =
        texts.iter().filter_map(|t| number_after(t, "peak ").filter(|_| t.contains("over noise"))).collect();
    assert_eq!(peaks.len(), 2, "{texts:?}");
    for p in peaks {
        assert!((p - 3137.7).abs() < bin_hz, "peak {p} Hz, tone 3137.7 Hz, bin {bin_hz} Hz");
    }
    let search = texts.iter().find_map(|t| number_after(t, "peak search ±")).unwrap();
    assert!(search > bin_hz && search < 1000.0, "search half-width {search} Hz");
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(!page.contains("beacon spectrum of lobe"), "a warning on the right tone");

    let wrong = [args, vec!["--set", "tone=-3000 Hz"]].concat();
    let out = run_graph("beacon-spectrum-wrong", "graphs/two-lobe-beacon.yaml", &wrong);
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    let warning = &page[page.find("beacon spectrum of lobe").expect("a warning of the wrong tone")..];
    let line = number_after(warning, "the strongest line is at ").unwrap();
    assert!((line - 3137.7).abs() < bin_hz, "the warning names {line} Hz");
}
