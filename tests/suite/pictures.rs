//! Picture blocks run directly: PNGs decode (png crate) with the expected
//! size and several colours, SVGs parse (roxmltree), outputs repeat byte for
//! byte. The circular formatter has its own file (`pictures_circular.rs`).

use lobeflow::blocks::pictures::accum::{BinWindow, SweepAverage};
use lobeflow_blocks::dsp::rng::Rng;
use lobeflow_blocks::{
    AngleEstimate, BlockSpec, BuildContext, FileStager, Flag, Item, LobeSegment, LobeTag, Notice, Outputs, Params,
    RawValue, SampleChunk, Stamp, Sweep, range_bin_m,
};
use num_complex::Complex32;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::sync::Arc;

pub(super) const RATE: f64 = 4e6;
pub(super) const SWEEP_LEN: usize = 2000;

pub(super) fn params(spec: &BlockSpec, set: &[(&str, &str)]) -> Params {
    spec.params_from_text(set).unwrap_or_else(|e| panic!("test parameters: {e}"))
}

/// A fresh directory under cargo's scratch space for integration tests
/// (left in place so the pictures can be looked at after a run).
pub(super) fn scratch(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("pictures").join(name);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// Build `spec` with `set`, feed `items` (port, item), finish, commit the
/// files. Returns the items pushed and the committed paths.
pub(super) fn run(
    spec: &BlockSpec,
    set: &[(&str, &str)],
    items: Vec<(usize, Item)>,
) -> (Vec<(usize, Item)>, Vec<PathBuf>) {
    let files = FileStager::default();
    let ctx = BuildContext { name: spec.kind.into(), out_dir: std::env::temp_dir(), files: files.clone() };
    let mut block = (spec.build)(&params(spec, set), &ctx).unwrap();
    let mut out = Outputs::new(spec.outputs.len());
    let mut pushed = Vec::new();
    for (port, item) in items {
        block.process(port, item, &mut out).unwrap();
        pushed.extend(out.drain());
    }
    block.finish(&mut out).unwrap();
    pushed.extend(out.drain());
    let written = files.commit().unwrap();
    (pushed, written)
}

fn lobe_tag(lobe: usize, name: &str, dwell: u64, start: u64) -> LobeTag {
    LobeTag { lobe, name: Arc::from(name), dwell, dwell_start: start }
}

/// A sweep with a Gaussian-envelope echo centred at fractional bin `echo_bin`.
pub(super) fn sweep(rng: &mut Rng, pulse: u64, echo_bin: f64, echo_amp: f64, lobe: Option<LobeTag>) -> Sweep {
    let phase = rng.uniform() * std::f64::consts::TAU;
    let iq: Vec<Complex32> = (0..SWEEP_LEN)
        .map(|k| {
            let env = echo_amp * (-0.5 * ((k as f64 - echo_bin) / 1.5).powi(2)).exp();
            rng.complex_gaussian(1.0) + Complex32::from_polar(env as f32, phase as f32)
        })
        .collect();
    Sweep {
        stamp: Stamp::new(pulse * SWEEP_LEN as u64, RATE),
        pulse,
        iq: iq.into(),
        sync: None,
        blanked: 0,
        predicted: false,
        lobe,
    }
}

/// PNG size and number of distinct colours.
pub(super) fn png_facts(path: &Path) -> (u32, u32, usize) {
    let decoder = png::Decoder::new(std::io::BufReader::new(std::fs::File::open(path).unwrap()));
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    let bytes = &buf[..info.buffer_size()];
    let step = info.color_type.samples();
    let colours: BTreeSet<&[u8]> = bytes.chunks(step).collect();
    (info.width, info.height, colours.len())
}

/// Every written picture: the PNG decodes at `size` with many colours, the
/// SVG parses and has drawing elements.
pub(super) fn check_pictures(written: &[PathBuf], base: &Path, size: (u32, u32)) {
    let png_path = base.with_extension("png");
    let svg_path = base.with_extension("svg");
    assert!(written.contains(&png_path) && written.contains(&svg_path), "{written:?}");
    let (w, h, colours) = png_facts(&png_path);
    assert_eq!((w, h), size);
    assert!(colours >= 6, "{} has only {colours} colours", png_path.display());
    let text = std::fs::read_to_string(&svg_path).unwrap();
    let doc = roxmltree::Document::parse(&text).unwrap();
    assert_eq!(doc.root_element().tag_name().name(), "svg");
    let drawn = doc
        .descendants()
        .filter(|n| matches!(n.tag_name().name(), "polyline" | "path" | "circle" | "rect" | "line"))
        .count();
    let texts = doc.descendants().filter(|n| n.tag_name().name() == "text").count();
    assert!(drawn > 10 && texts > 3, "{}: {drawn} shapes, {texts} texts", svg_path.display());
}

/// Run twice into two directories and compare the files byte for byte.
pub(super) fn assert_repeatable(
    spec: &BlockSpec,
    set: &[(&str, &str)],
    items: impl Fn() -> Vec<(usize, Item)>,
    name: &str,
) -> (Vec<(usize, Item)>, Vec<PathBuf>) {
    let mut results = Vec::new();
    for attempt in 0..2 {
        let dir = scratch(&format!("{name}-{attempt}"));
        let base = dir.join(name);
        let base_text = base.to_string_lossy().into_owned();
        let mut set: Vec<(&str, &str)> = set.to_vec();
        set.push(("path", &base_text));
        let (pushed, written) = run(spec, &set, items());
        results.push((pushed, written, base));
    }
    let (a, b) = (&results[0], &results[1]);
    for ext in ["png", "svg"] {
        let fa = std::fs::read(a.2.with_extension(ext)).unwrap();
        let fb = std::fs::read(b.2.with_extension(ext)).unwrap();
        assert!(fa == fb, "{name}.{ext} differs between two runs");
    }
    let (pushed, written, _) = results.swap_remove(0);
    (pushed, written)
}

const LOBES: [&str; 4] = ["right", "up", "left", "down"];
const PULSES_PER_DWELL: u64 = 4;

/// Relative echo amplitude of each lobe for a target at 0.5 deg right and
/// 0.5 deg up: Gaussian beams, BW 6 deg, squint 2.4 deg, two-way (docs/derivations.md
/// §2-3, whose check value is A/B = 1.447269, 20 log10 = 3.2110 dB).
fn lobe_gain(lobe: usize) -> f64 {
    let bw: f64 = 6.0;
    let g = |x: f64| (-2.0 * 2f64.ln() * x * x / (bw * bw)).exp();
    let off = match lobe {
        0 | 1 => 0.5 - 2.4,
        _ => 0.5 + 2.4,
    };
    g(off).powi(2)
}

/// Labelled sweeps of a four-lobe switch cycle, echo at `echo_bin`.
fn labelled_sweeps(n: u64, echo_bin: f64, noise: bool) -> Vec<Sweep> {
    let mut rng = Rng::new(23);
    (0..n)
        .map(|k| {
            let dwell = k / PULSES_PER_DWELL;
            let lobe = (dwell % 4) as usize;
            let tag = lobe_tag(lobe, LOBES[lobe], dwell, dwell * PULSES_PER_DWELL * SWEEP_LEN as u64);
            let mut s = sweep(&mut rng, k, echo_bin, 20.0 * lobe_gain(lobe), Some(tag));
            if !noise {
                let clean: Vec<Complex32> = (0..SWEEP_LEN)
                    .map(|i| {
                        let env = 20.0 * lobe_gain(lobe) * (-0.5 * ((i as f64 - echo_bin) / 1.5).powi(2)).exp();
                        Complex32::new(env as f32, 0.0)
                    })
                    .collect();
                s.iq = clean.into();
            }
            s
        })
        .collect()
}

pub(super) fn svg_texts(path: &Path) -> Vec<String> {
    let text = std::fs::read_to_string(path).unwrap();
    let doc = roxmltree::Document::parse(&text).unwrap();
    doc.descendants()
        .filter(|n| n.tag_name().name() == "text")
        .filter_map(|n| n.text().map(|t| t.trim().to_string()))
        .collect()
}

#[test]
fn range_trace_draws_each_lobe_and_the_gate() {
    let spec = lobeflow::blocks::pictures::range_trace::SPEC;
    let items = || labelled_sweeps(160, 900.3, true).into_iter().map(|s| (0, Item::Sweep(s))).collect();
    let set = [("gate_start", "33.5 km"), ("gate_width", "600 m"), ("range_end", "60 km")];
    let (_, written) = assert_repeatable(&spec, &set, items, "trace");
    let base = written[0].with_extension("");
    check_pictures(&written, &base, (1200, 820));
    let texts = svg_texts(&base.with_extension("svg"));
    for lobe in LOBES {
        let entry = format!("{lobe}: 40 sweeps averaged");
        assert!(texts.contains(&entry), "legend lacks {lobe}: {texts:?}");
    }
    assert!(texts.iter().any(|t| t.starts_with("gate 33.")), "{texts:?}");
}

#[test]
fn split_pair_prints_the_balance_of_each_pair() {
    let spec = lobeflow::blocks::pictures::split_pair::SPEC;
    let echo_bin = 900.0;
    let bin = range_bin_m(RATE);
    let gate_start = format!("{} m", (echo_bin - 3.0) * bin);
    let gate_width = format!("{} m", 6.0 * bin);
    let items = || labelled_sweeps(64, echo_bin, false).into_iter().map(|s| (0, Item::Sweep(s))).collect();
    let set = [("gate_start", gate_start.as_str()), ("gate_width", gate_width.as_str())];
    let (_, written) = assert_repeatable(&spec, &set, items, "split");
    let base = written[0].with_extension("");
    check_pictures(&written, &base, (1200, 640));
    // Check value computed by hand from the two-way Gaussian ratio: A/B = 1.447269, 3.2110 dB, for 0.5 deg off axis.
    let texts = svg_texts(&base.with_extension("svg"));
    assert!(texts.contains(&"balance right over left: +3.21 dB".to_string()), "{texts:?}");
    assert!(texts.contains(&"balance up over down: +3.21 dB".to_string()), "{texts:?}");
    // One scale: no trace is raised, and the legend says what the counts are.
    assert!(texts.contains(&"right: 16 sweeps averaged".to_string()), "{texts:?}");
}

#[test]
fn split_pair_balance_matches_the_gaussian_check_value() {
    use lobeflow::blocks::pictures::split_pair::balance_db;
    let sweeps = labelled_sweeps(32, 700.0, false);
    let window = BinWindow::from_bins(0.0, sweeps[0].iq.len() as f64, &sweeps[0]).unwrap();
    let mut right = SweepAverage::new(window, 0, sweeps[0].stamp);
    let mut left = SweepAverage::new(window, 0, sweeps[0].stamp);
    for s in &sweeps {
        match s.lobe.as_ref().map(|t| &*t.name) {
            Some("right") => right.add(s).unwrap(),
            Some("left") => left.add(s).unwrap(),
            _ => {}
        }
    }
    let b = balance_db(Some(&right), Some(&left), Some((697, 704))).unwrap();
    assert!((b - 3.2110).abs() < 5e-4, "balance {b} dB");
    let at_peak = balance_db(Some(&right), Some(&left), None).unwrap();
    assert!((at_peak - 3.2110).abs() < 5e-4, "balance {at_peak} dB");
    assert_eq!(balance_db(Some(&right), None, None), None);
}

fn estimates(n: u64) -> Vec<(usize, Item)> {
    let mut rng = Rng::new(3);
    let mut out = Vec::new();
    for k in 0..n {
        for (axis, truth) in [("az", 0.4), ("el", -0.2)] {
            let t = k as f64 * 0.002;
            let flag = match k % 97 {
                5 => Flag::OutOfRange,
                11 => Flag::NoSignal,
                23 => Flag::Outlier,
                _ => Flag::Ok,
            };
            let err =
                truth + 0.3 * (t * 0.5).sin() + 0.05 * rng.gaussian() + if flag == Flag::Outlier { 1.5 } else { 0.0 };
            out.push((
                0,
                Item::Estimate(Arc::new(AngleEstimate {
                    stamp: Stamp::new(k * 8000, RATE),
                    axis: Arc::from(axis),
                    error_deg: matches!(flag, Flag::Ok | Flag::Outlier).then_some(err),
                    sigma_deg: 0.05,
                    snr_db: 18.0,
                    ratio_db: 0.0,
                    range_m: Some(33_700.0),
                    flag,
                    tracked_deg: Some(truth + 0.3 * (t * 0.5).sin()),
                    tracked_sigma_deg: None,
                    absolute_deg: None,
                })),
            ));
        }
    }
    out
}

#[test]
fn angle_plot_has_one_panel_per_axis_and_marks_flags() {
    let spec = lobeflow::blocks::pictures::angle_plot::SPEC;
    let (_, written) = assert_repeatable(&spec, &[], || estimates(20_000), "angles");
    let base = written[0].with_extension("");
    check_pictures(&written, &base, (1200, 68 + 2 * 280));
    let texts = svg_texts(&base.with_extension("svg"));
    // 20000 per axis: k % 97 == 5 and 11 happen 207 times, == 23 206 times.
    assert!(texts.iter().any(|t| t == "axis az: 19380 ok, 207 out of range, 207 no signal, 206 outliers"), "{texts:?}");
    assert!(texts.iter().any(|t| t.starts_with("axis el:")));
    assert!(texts.iter().any(|t| t == "out of range: 207, top"));
}

#[test]
fn formats_write_only_the_files_asked_for_and_draw_them_the_same() {
    let spec = lobeflow::blocks::pictures::angle_plot::SPEC;
    let dir = scratch("formats");
    let written = |formats: &str| {
        let path = dir.join(formats).join("angles").display().to_string();
        let (_, written) = run(&spec, &[("path", &path), ("formats", formats)], estimates(300));
        let names: Vec<String> =
            written.iter().map(|p| p.file_name().unwrap().to_string_lossy().into_owned()).collect();
        (names, written)
    };
    let (both, both_files) = written("both");
    let (svg, svg_files) = written("svg");
    let (png, png_files) = written("png");
    assert_eq!(both, ["angles.png", "angles.svg"]);
    assert_eq!(svg, ["angles.svg"]);
    assert_eq!(png, ["angles.png"]);
    assert!(!dir.join("svg/angles.png").exists() && !dir.join("png/angles.svg").exists());
    // One drawing whichever files are asked for.
    let read = |p: &PathBuf| std::fs::read(p).unwrap();
    assert_eq!(read(&svg_files[0]), read(&both_files[1]));
    assert_eq!(read(&png_files[0]), read(&both_files[0]));
    // An unknown format is refused by name, with the words accepted.
    let err = spec.params_from_text(&[("formats", "jpeg")]).map(|_| ()).unwrap_err().to_string();
    assert!(err.contains("formats") && err.contains("jpeg") && err.contains("svg"), "{err}");
}

fn timeline_items(dwells: u64) -> Vec<(usize, Item)> {
    let dwell_len = 4 * SWEEP_LEN;
    let guard = 100;
    let mut items = Vec::new();
    for d in 0..dwells {
        let lobe = (d % 4) as usize;
        let start = d * dwell_len as u64;
        let tag = lobe_tag(lobe, LOBES[lobe], d, start);
        // Two segments per dwell after the guard.
        for half in 0..2u64 {
            let from = start + guard + half * (dwell_len as u64 - guard) / 2;
            let len = (dwell_len as u64 - guard) / 2;
            let chunk = SampleChunk {
                stamp: Stamp::new(from, RATE),
                // Lobe i at amplitude i + 1: levels 0, 6.02, 9.54, 12.04 dB.
                iq: vec![Complex32::new(0.0, 1.0 + lobe as f32); len as usize].into(),
                sync: None,
                trigger: None,
            };
            items.push((1, Item::Segment(Box::new(LobeSegment { tag: tag.clone(), chunk, dwell_end: half == 1 }))));
        }
        for p in 0..4u64 {
            let mut rng = Rng::new(d * 4 + p);
            let mut s = sweep(&mut rng, d * 4 + p, 500.0, 1.0, Some(tag.clone()));
            s.stamp = Stamp::new(start + p * SWEEP_LEN as u64, RATE);
            items.push((0, Item::Sweep(s)));
        }
        if d % 37 == 10 {
            let what = format!("dwell {d} shorter than expected at sample {start}");
            items.push((2, Item::Notice(Notice::new(Stamp::new(start, RATE), Arc::from("gate"), what))));
        }
    }
    items.sort_by_key(|(_, i)| i.stamp().index);
    items
}

#[test]
fn lobe_timeline_draws_rows_guards_and_notices_and_truncates() {
    let spec = lobeflow::blocks::pictures::lobe_timeline::SPEC;
    let (_, written) = assert_repeatable(&spec, &[("max_dwells", "40")], || timeline_items(120), "timeline");
    let base = written[0].with_extension("");
    check_pictures(&written, &base, (1200, 68 + 60 + 44 * 4 + 280 + 100));
    let texts = svg_texts(&base.with_extension("svg"));
    assert!(
        texts.iter().any(|t| t.starts_with("first 0.08") && t.contains("40 dwells from lobe segments")),
        "{texts:?}"
    );
    assert!(texts.iter().any(|t| t.contains("dwell 10 shorter")), "{texts:?}");
    for lobe in LOBES {
        assert!(texts.iter().any(|t| t == lobe), "no row label {lobe}");
    }
    // The level panel's key: each lobe's mean over its 10 drawn dwells.
    for (lobe, level) in LOBES.iter().zip(["0.00", "6.02", "9.54", "12.04"]) {
        let key = format!("{lobe}: mean {level} dB, 10 dwells");
        assert!(texts.contains(&key), "no '{key}' in {texts:?}");
    }
    // A span limit instead of a dwell count: 10 ms holds 5 dwells of 2 ms.
    let dir = scratch("timeline-span");
    let base = dir.join("span");
    let (_, written) = run(&spec, &[("span", "10 ms"), ("path", &base.to_string_lossy())], timeline_items(20));
    assert_eq!(written.len(), 2);
    let texts = svg_texts(&base.with_extension("svg"));
    assert!(texts.iter().any(|t| t.contains("5 dwells from lobe segments")), "{texts:?}");
}

#[test]
fn bad_windows_and_rates_are_errors_not_panics() {
    let spec = lobeflow::blocks::pictures::circular_sweep::SPEC;
    let files = FileStager::default();
    let ctx = BuildContext { name: "c".into(), out_dir: std::env::temp_dir(), files };
    let dir = scratch("bad");
    let path = dir.join("bad").to_string_lossy().into_owned();
    let mut block = (spec.build)(&params(&spec, &[("range_start", "100 km"), ("path", &path)]), &ctx).unwrap();
    let mut out = Outputs::new(1);
    let mut rng = Rng::new(1);
    let err = block.process(0, Item::Sweep(sweep(&mut rng, 0, 10.0, 1.0, None)), &mut out).unwrap_err();
    assert!(err.message.contains("range_start") && err.at_sample == Some(0), "{err}");

    let mut block = (spec.build)(&params(&spec, &[("path", &path)]), &ctx).unwrap();
    block.process(0, Item::Sweep(sweep(&mut rng, 0, 10.0, 1.0, None)), &mut out).unwrap();
    let mut odd = sweep(&mut rng, 1, 10.0, 1.0, None);
    odd.stamp.rate = 2e6;
    let err = block.process(0, Item::Sweep(odd), &mut out).unwrap_err();
    assert!(err.message.contains("sample rate changed"), "{err}");

    let mut block = (spec.build)(&params(&spec, &[("mark_every", "0 bins"), ("path", &path)]), &ctx).unwrap();
    block.process(0, Item::Sweep(sweep(&mut rng, 0, 10.0, 1.0, None)), &mut out).unwrap();
    let err = block.finish(&mut out).err().unwrap();
    assert!(err.message.contains("mark_every"), "{err}");

    let split = lobeflow::blocks::pictures::split_pair::SPEC;
    // Lobe pairs are read when the graph is, before the block is built.
    let pairs = split.param("pairs").unwrap();
    let err = pairs.parse(&RawValue::from_text("az=right")).unwrap_err();
    assert!(err.contains("pairs"), "{err}");
    // Non-finite estimates are counted as no signal, not drawn or panicked on.
    let angle = lobeflow::blocks::pictures::angle_plot::SPEC;
    let mut items = estimates(50);
    if let (_, Item::Estimate(e)) = &mut items[0] {
        Arc::make_mut(e).error_deg = Some(f64::NAN);
    }
    let (_, written) = run(&angle, &[("path", &path)], items);
    assert_eq!(written.len(), 2);
}

/// Warnings a block raises on `items` with `set`.
fn warnings(spec: &BlockSpec, set: &[(&str, &str)], items: Vec<(usize, Item)>) -> Vec<String> {
    let files = FileStager::default();
    let ctx = BuildContext { name: spec.kind.into(), out_dir: std::env::temp_dir(), files: files.clone() };
    let mut block = (spec.build)(&params(spec, set), &ctx).unwrap();
    let mut out = Outputs::new(spec.outputs.len());
    for (port, item) in items {
        block.process(port, item, &mut out).unwrap();
    }
    block.finish(&mut out).unwrap();
    files.commit().unwrap();
    out.drain_notices().map(|n| n.what).collect()
}

/// The hand-worked check value above (Gaussian beams, BW 6 deg, squint
/// 2.4 deg, two-way: 3.2110 dB at 0.5 deg) lies on the curve picture's
/// model with those settings; told another beamwidth, the picture warns
/// that the points lie off its curve, naming the settings to align.
#[test]
fn discriminator_curve_warns_when_points_lie_off_its_model() {
    let spec = lobeflow::blocks::pictures::discriminator_curve::SPEC;
    let point = |k: u64| {
        let e = AngleEstimate {
            stamp: Stamp::new(k * 8000, RATE),
            axis: Arc::from("az"),
            error_deg: Some(0.5),
            sigma_deg: 0.05,
            snr_db: 18.0,
            ratio_db: 3.2110,
            range_m: None,
            flag: Flag::Ok,
            tracked_deg: None,
            tracked_sigma_deg: None,
            absolute_deg: None,
        };
        (0, Item::Estimate(Arc::new(e)))
    };
    let dir = scratch("curve-model");
    let base = dir.join("curve");
    let base = base.to_string_lossy();
    let set = [("beam", "gaussian"), ("beamwidth", "6 deg"), ("squint", "2.4 deg"), ("way", "two"), ("path", &base)];
    assert!(warnings(&spec, &set, (0..5).map(point).collect()).is_empty());
    let wrong = [("beam", "gaussian"), ("beamwidth", "8 deg"), ("squint", "2.4 deg"), ("way", "two"), ("path", &base)];
    let said = warnings(&spec, &wrong, (0..5).map(point).collect());
    assert_eq!(said.len(), 1, "{said:?}");
    assert!(said[0].starts_with("5 operating points lie more than") && said[0].contains("beamwidth"), "{said:?}");
}
