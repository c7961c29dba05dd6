//! The circular sweep formatter drawn from synthesized sweeps: it reads
//! the echo ranges back within half a bin, its trace passes through every
//! averaged sample, and it writes its pictures even without sweeps.

use super::pictures::*;
use lobeflow::blocks::pictures::accum::{BinWindow, SweepAverage};
use lobeflow::blocks::pictures::circular_sweep::{CircularSweepSettings, Scene};
use lobeflow_blocks::dsp::rng::Rng;
use lobeflow_blocks::{Cell, Item, Settings, range_bin_m};
use std::path::Path;
use std::sync::Arc;

#[test]
fn circular_sweep_draws_and_reads_the_echo() {
    let spec = lobeflow::blocks::pictures::circular_sweep::SPEC;
    let echo_bin = 1234.4;
    let items = || {
        let mut rng = Rng::new(11);
        (0..60).map(|k| (0, Item::Sweep(sweep(&mut rng, k, echo_bin, 3.0, None)))).collect::<Vec<_>>()
    };
    let set = [("range_start", "3 km"), ("range_end", "63 km"), ("revolutions", "6"), ("mark_every", "1 km")];
    let (rows, written) = assert_repeatable(&spec, &set, items, "circle");
    let base = written[0].with_extension("");
    check_pictures(&written, &base, (1280, 780));
    // One row per window bin, then the readout row.
    let bin = range_bin_m(RATE);
    let window_bins = ((63e3 / bin).round() - (3e3 / bin).round()) as usize;
    assert_eq!(rows.len(), window_bins + 1);
    let Some((0, Item::Row(last))) = rows.last() else { panic!("no readout row") };
    assert_eq!(last.fields[0].1, Cell::Text(Arc::from("readout")));
    let Cell::Num(read) = last.fields[1].1 else { panic!("readout range missing") };
    assert!((read - echo_bin * bin).abs() < 0.5 * bin, "read {read} m, truth {} m", echo_bin * bin);
}

#[test]
fn circular_readout_is_within_half_a_bin_of_synthesized_echoes() {
    // The readout interpolates between range samples; its step is one range
    // bin (c / 2 fs, docs/derivations.md section 5), so half a bin is the tolerance.
    let bin = range_bin_m(RATE);
    let spec = lobeflow::blocks::pictures::circular_sweep::SPEC;
    let p = params(&spec, &[("range_start", "2 km"), ("range_end", "72 km"), ("revolutions", "7")]);
    let settings = CircularSweepSettings::from_params(&p).unwrap();
    let mut rng = Rng::new(5);
    for (i, &truth_m) in [4_321.0, 12_345.0, 29_999.0, 33_000.7, 51_800.0, 70_002.5].iter().enumerate() {
        let echo_bin = truth_m / bin;
        let first = sweep(&mut rng, 0, echo_bin, 2.5, None);
        let window = BinWindow::from_settings(&settings.range_start, &settings.range_end, &first).unwrap();
        let mut avg = SweepAverage::new(window, 0, first.stamp);
        avg.add(&first).unwrap();
        for k in 1..40 {
            avg.add(&sweep(&mut rng, k, echo_bin, 2.5, None)).unwrap();
        }
        let sign = if i % 2 == 0 { 1.0 } else { -1.0 };
        let scene = Scene::compute(&avg, 7.0, sign, 1.0, 1000.0).unwrap();
        let err = scene.readout.range_m - truth_m;
        assert!(err.abs() < 0.5 * bin, "truth {truth_m} m: read {} m", scene.readout.range_m);
        assert_eq!(scene.readout.turn, ((truth_m - 2_000.0) / 10_000.0).floor() as i64);
    }
}

/// Vertices of the SVG polylines drawn in `stroke`.
fn polylines(svg: &Path, stroke: &str) -> Vec<Vec<(f64, f64)>> {
    let text = std::fs::read_to_string(svg).unwrap();
    let doc = roxmltree::Document::parse(&text).unwrap();
    doc.descendants()
        .filter(|n| n.tag_name().name() == "polyline" && n.attribute("stroke") == Some(stroke))
        .map(|n| {
            let points = n.attribute("points").unwrap_or("");
            points
                .split_whitespace()
                .filter_map(|p| p.split_once(','))
                .map(|(x, y)| (x.parse().unwrap(), y.parse().unwrap()))
                .collect()
        })
        .collect()
}

/// Text elements with their anchor position.
pub(super) fn placed_texts(svg: &Path) -> Vec<(String, f64, f64)> {
    let text = std::fs::read_to_string(svg).unwrap();
    let doc = roxmltree::Document::parse(&text).unwrap();
    doc.descendants()
        .filter(|n| n.tag_name().name() == "text")
        .filter_map(|n| {
            let x = n.attribute("x")?.parse().ok()?;
            let y = n.attribute("y")?.parse().ok()?;
            Some((n.text()?.trim().to_string(), x, y))
        })
        .collect()
}

#[test]
fn circle_trace_passes_through_every_averaged_sample_and_labels_are_round_and_clear() {
    // 40 range bins over 8 turns: 5 bins a turn, so the circle is round only
    // if the trace is drawn between them; every bin must still be a vertex.
    let spec = lobeflow::blocks::pictures::circular_sweep::SPEC;
    let bin = range_bin_m(RATE);
    let (start, end) = (80.0 * bin, 120.0 * bin);
    let items = || {
        let mut rng = Rng::new(9);
        (0..30).map(|k| (0, Item::Sweep(sweep(&mut rng, k, 101.3, 4.0, None)))).collect::<Vec<_>>()
    };
    let (start_t, end_t) = (format!("{start} m"), format!("{end} m"));
    let set = [("range_start", start_t.as_str()), ("range_end", end_t.as_str()), ("mark_every", "100 m")];
    let (rows, written) = assert_repeatable(&spec, &set, items, "circle-few-bins");
    let svg = written[0].with_extension("svg");
    // Fine circle: centre (400, 418), radius 260 px; rows give points on a unit circle, y up.
    let (cx, cy, radius) = (400.0, 418.0, 260.0);
    let traces = polylines(&svg, "#166870");
    let fine = traces
        .iter()
        .find(|t| t.iter().all(|p| ((p.0 - cx).hypot(p.1 - cy) - radius).abs() < 0.5 * radius))
        .expect("the fine circle's trace");
    let samples: Vec<(f64, f64)> = rows
        .iter()
        .filter_map(|(_, item)| {
            let Item::Row(row) = item else { return None };
            let cell = |name: &str| row.fields.iter().find(|f| &*f.0 == name).map(|f| f.1.clone());
            match (cell("point"), cell("x"), cell("y")) {
                (Some(Cell::Text(p)), Some(Cell::Num(x)), Some(Cell::Num(y))) if &*p == "trace" => {
                    Some((cx + x * radius, cy - y * radius))
                }
                _ => None,
            }
        })
        .collect();
    assert_eq!(samples.len(), 40);
    for s in &samples {
        let nearest = fine.iter().map(|v| (v.0 - s.0).hypot(v.1 - s.1)).fold(f64::INFINITY, f64::min);
        assert!(nearest <= 1.0, "sample at {s:?} is {nearest:.2} px from the drawn trace");
    }
    // Round: consecutive vertices at most about a degree apart around the centre.
    let angle = |p: &(f64, f64)| (p.0 - cx).atan2(cy - p.1);
    let widest = fine
        .windows(2)
        .map(|w| {
            let d = (angle(&w[1]) - angle(&w[0])).rem_euclid(std::f64::consts::TAU);
            d.min(std::f64::consts::TAU - d).to_degrees()
        })
        .fold(0.0, f64::max);
    assert!(widest < 1.5, "the trace jumps {widest:.2} deg between points");
    // Coarse labels are whole multiples of the mark spacing; fine labels sit
    // clear of their circle.
    for (label, x, y) in placed_texts(&svg) {
        let Some(km) = label.strip_suffix(" km") else { continue };
        if let Some(offset) = km.strip_prefix('+') {
            let off: f64 = offset.parse().unwrap();
            assert!((off * 10.0 - (off * 10.0).round()).abs() < 1e-9, "fine label {label}");
            let gap = ((x - cx).hypot(y - cy) - radius).abs();
            assert!(gap > 14.0, "fine label {label} only {gap:.1} px from the circle line");
        } else if let Ok(r) = km.parse::<f64>() {
            assert!((r * 10.0 - (r * 10.0).round()).abs() < 1e-9, "coarse label {label} is not a round range");
        }
    }
}

#[test]
fn circular_sweep_without_sweeps_still_writes_pictures() {
    let spec = lobeflow::blocks::pictures::circular_sweep::SPEC;
    let dir = scratch("circle-empty");
    let base = dir.join("empty");
    let (rows, written) = run(&spec, &[("path", &base.to_string_lossy())], Vec::new());
    assert!(rows.is_empty());
    assert_eq!(written.len(), 2);
    let (w, h, _) = png_facts(&base.with_extension("png"));
    assert_eq!((w, h), (1280, 780));
}
