//! Picture blocks run directly: PNGs decode (png crate) with the expected
//! size and several colours, SVGs parse (roxmltree), outputs repeat byte for
//! byte, and the circular formatter reads synthesized echo ranges back.

use lobeflow::picture::accum::{BinWindow, SweepAverage};
use lobeflow::picture::circular_sweep::Scene;
use lobeflow_blocks::dsp::rng::Rng;
use lobeflow_blocks::{
    AngleEstimate, BlockSpec, BuildContext, Cell, FileStager, Flag, Item, LobeSegment, LobeTag,
    Notice, Outputs, Params, RawValue, SampleChunk, Stamp, Sweep, range_bin_m,
};
use num_complex::Complex32;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::sync::Arc;

const RATE: f64 = 4e6;
const SWEEP_LEN: usize = 2000;

fn params(spec: &BlockSpec, set: &[(&str, &str)]) -> Params {
    let mut p = Params::new();
    for ps in spec.params {
        let text = set
            .iter()
            .find(|(n, _)| *n == ps.name)
            .map(|(_, v)| *v)
            .or(ps.default);
        if let Some(t) = text {
            let v = ps
                .parse(&RawValue::from_text(t))
                .unwrap_or_else(|e| panic!("{}: {e}", ps.name));
            p.insert(ps.name, v);
        }
    }
    p
}

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("lobeflow-pictures-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// Build `spec` with `set`, feed `items` (port, item), finish, commit the
/// files. Returns the items pushed and the committed paths.
fn run(
    spec: &BlockSpec,
    set: &[(&str, &str)],
    items: Vec<(usize, Item)>,
) -> (Vec<(usize, Item)>, Vec<PathBuf>) {
    let files = FileStager::default();
    let ctx = BuildContext {
        name: spec.kind.into(),
        out_dir: std::env::temp_dir(),
        files: files.clone(),
    };
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
    LobeTag {
        lobe,
        name: Arc::from(name),
        dwell,
        dwell_start: start,
    }
}

/// A sweep with a Gaussian-envelope echo centred at fractional bin `echo_bin`.
fn sweep(rng: &mut Rng, pulse: u64, echo_bin: f64, echo_amp: f64, lobe: Option<LobeTag>) -> Sweep {
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
fn png_facts(path: &Path) -> (u32, u32, usize) {
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
fn check_pictures(written: &[PathBuf], base: &Path, size: (u32, u32)) {
    let png_path = base.with_extension("png");
    let svg_path = base.with_extension("svg");
    assert!(
        written.contains(&png_path) && written.contains(&svg_path),
        "{written:?}"
    );
    let (w, h, colours) = png_facts(&png_path);
    assert_eq!((w, h), size);
    assert!(
        colours >= 6,
        "{} has only {colours} colours",
        png_path.display()
    );
    let text = std::fs::read_to_string(&svg_path).unwrap();
    let doc = roxmltree::Document::parse(&text).unwrap();
    assert_eq!(doc.root_element().tag_name().name(), "svg");
    let drawn = doc
        .descendants()
        .filter(|n| {
            matches!(
                n.tag_name().name(),
                "polyline" | "path" | "circle" | "rect" | "line"
            )
        })
        .count();
    let texts = doc
        .descendants()
        .filter(|n| n.tag_name().name() == "text")
        .count();
    assert!(
        drawn > 10 && texts > 3,
        "{}: {drawn} shapes, {texts} texts",
        svg_path.display()
    );
}

/// Run twice into two directories and compare the files byte for byte.
fn assert_repeatable(
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

#[test]
fn circular_sweep_draws_and_reads_the_echo() {
    let spec = lobeflow::picture::circular_sweep::SPEC;
    let echo_bin = 1234.4;
    let items = || {
        let mut rng = Rng::new(11);
        (0..60)
            .map(|k| (0, Item::Sweep(sweep(&mut rng, k, echo_bin, 3.0, None))))
            .collect::<Vec<_>>()
    };
    let set = [
        ("range_start", "3 km"),
        ("range_end", "63 km"),
        ("revolutions", "6"),
        ("mark_every", "1 km"),
    ];
    let (rows, written) = assert_repeatable(&spec, &set, items, "circle");
    let base = written[0].with_extension("");
    check_pictures(&written, &base, (1280, 780));
    // One row per window bin, then the readout row.
    let bin = range_bin_m(RATE);
    let window_bins = ((63e3 / bin).round() - (3e3 / bin).round()) as usize;
    assert_eq!(rows.len(), window_bins + 1);
    let Some((0, Item::Row(last))) = rows.last() else {
        panic!("no readout row")
    };
    assert_eq!(last.fields[0].1, Cell::Text(Arc::from("readout")));
    let Cell::Num(read) = last.fields[1].1 else {
        panic!("readout range missing")
    };
    assert!(
        (read - echo_bin * bin).abs() < 0.5 * bin,
        "read {read} m, truth {} m",
        echo_bin * bin
    );
}

#[test]
fn circular_readout_is_within_half_a_bin_of_synthesized_echoes() {
    // The readout interpolates between range samples; its step is one range
    // bin (c / 2 fs, field notes section 5), so half a bin is the tolerance.
    let bin = range_bin_m(RATE);
    let spec = lobeflow::picture::circular_sweep::SPEC;
    let p = params(
        &spec,
        &[
            ("range_start", "2 km"),
            ("range_end", "72 km"),
            ("revolutions", "7"),
        ],
    );
    let mut rng = Rng::new(5);
    for (i, &truth_m) in [4_321.0, 12_345.0, 29_999.0, 33_000.7, 51_800.0, 70_002.5]
        .iter()
        .enumerate()
    {
        let echo_bin = truth_m / bin;
        let first = sweep(&mut rng, 0, echo_bin, 2.5, None);
        let window = BinWindow::from_params(&p, "range_start", "range_end", &first).unwrap();
        let mut avg = SweepAverage::new(window, 0, first.stamp);
        avg.add(&first).unwrap();
        for k in 1..40 {
            avg.add(&sweep(&mut rng, k, echo_bin, 2.5, None)).unwrap();
        }
        let sign = if i % 2 == 0 { 1.0 } else { -1.0 };
        let scene = Scene::compute(&avg, 7.0, sign, 1.0, 1000.0).unwrap();
        let err = scene.readout.range_m - truth_m;
        assert!(
            err.abs() < 0.5 * bin,
            "truth {truth_m} m: read {} m",
            scene.readout.range_m
        );
        assert_eq!(
            scene.readout.turn,
            ((truth_m - 2_000.0) / 10_000.0).floor() as i64
        );
    }
}

#[test]
fn circular_sweep_without_sweeps_still_writes_pictures() {
    let spec = lobeflow::picture::circular_sweep::SPEC;
    let dir = scratch("circle-empty");
    let base = dir.join("empty");
    let (rows, written) = run(&spec, &[("path", &base.to_string_lossy())], Vec::new());
    assert!(rows.is_empty());
    assert_eq!(written.len(), 2);
    let (w, h, _) = png_facts(&base.with_extension("png"));
    assert_eq!((w, h), (1280, 780));
}
