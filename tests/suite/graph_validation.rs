//! Graph files: every validation error says what, where (file:line:column)
//! and hints the fix, before any sample flows.

use lobeflow::graph::{GraphError, Origin, Overrides, resolve};
use lobeflow_blocks::RawValue;
use lobeflow_blocks::prelude::*;
use std::path::PathBuf;

fn dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lobeflow-gv-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

block_settings! {
    struct SweepSinkSettings {
        squint: f64 {
            ty: ParamType::Number { unit: Unit::Degrees, min: 0.01, max: 45.0 },
            default: None,
            doc: "required angle",
        },
    }
}

block_ports! { inputs enum SweepSinkIn { Sweeps = required("sweeps", ItemKind::Sweep, "sweeps") } }

/// A test-only kind that takes sweeps and needs a parameter.
struct SweepSink;
impl TypedBlock for SweepSink {
    type Settings = SweepSinkSettings;
    type In = SweepSinkIn;
    type Out = NoPorts;
    fn build(_: SweepSinkSettings, _: &BuildContext) -> Result<Self, BuildError> {
        Ok(SweepSink)
    }
}
const SWEEP_SINK: BlockSpec = BlockSpec::typed::<SweepSink>("sweep_sink", "test: takes sweeps");

fn registry() -> Registry {
    let mut r = lobeflow::registry();
    r.register(SWEEP_SINK);
    r
}

fn check(name: &str, text: &str) -> Result<(), GraphError> {
    let d = dir(name);
    let p = d.join("g.yaml");
    std::fs::write(&p, text).unwrap();
    resolve(&p, &Overrides::default(), &registry()).map(|_| ())
}

fn expect(name: &str, text: &str, line: usize, needle: &str) -> GraphError {
    let e = check(name, text).expect_err("the graph must be refused");
    assert!(
        e.message.contains(needle) || e.to_string().contains(needle),
        "message: {e}\nexpected to contain: {needle}"
    );
    assert_eq!(e.line, line, "line of: {e}");
    assert!(e.to_string().contains(&format!("g.yaml:{line}:")), "file:line in {e}");
    e
}

const GOOD: &str = "\
title: good
settings:
  n: {default: 1000, doc: samples}
  rate: {default: 2, unit: MS/s, doc: sample rate}
blocks:
  tone: {kind: test_tone, set: {samples: $n, rate: $rate}}
  keep: {kind: pass}
  drop: {kind: discard}
wiring:
  - tone -> keep -> drop
";

#[test]
fn a_good_graph_resolves_with_units_from_knobs() {
    let d = dir("good");
    let p = d.join("g.yaml");
    std::fs::write(&p, GOOD).unwrap();
    let g = resolve(&p, &Overrides::default(), &registry()).unwrap();
    assert_eq!(g.blocks.len(), 3);
    assert_eq!(g.wires.len(), 2);
    // The knob's unit (MS/s) applied to the bare number 2.
    assert_eq!(g.blocks[0].params.num("rate").unwrap(), 2e6);
    assert!(matches!(g.settings[0].origin, Origin::Default { line: 3, .. }));
}

#[test]
fn unknown_kind_hints_the_closest() {
    let e = expect("kind", &GOOD.replace("kind: test_tone", "kind: test_tonne"), 6, "unknown block kind 'test_tonne'");
    assert_eq!(e.hint.as_deref(), Some("did you mean 'test_tone'?"));
}

#[test]
fn unknown_parameter_hints_the_closest() {
    let e = expect("param", &GOOD.replace("samples: $n", "sampels: $n"), 6, "has no parameter 'sampels'");
    assert_eq!(e.hint.as_deref(), Some("did you mean 'samples'?"));
}

#[test]
fn missing_parameter_is_named() {
    let text = "blocks:\n  src: {kind: test_tone}\n  s:\n    kind: sweep_sink\nwiring:\n  - src -> s\n";
    let e = check("missing", text).unwrap_err();
    // Wiring is checked after parameters: the missing one is reported first.
    assert!(e.message.contains("needs parameter 'squint'"), "{e}");
    assert_eq!(e.line, 3);
}

#[test]
fn wrong_type_is_explained() {
    expect("type", &GOOD.replace("samples: $n", "samples: many"), 6, "expected a whole number");
}

#[test]
fn wrong_unit_is_explained_with_the_knob_it_came_from() {
    let e = expect("unit", &GOOD.replace("unit: MS/s", "unit: km"), 6, "unit 'km' does not fit");
    assert!(e.message.contains("from knob 'rate'"), "{e}");
}

#[test]
fn out_of_range_shows_the_allowed_range() {
    let e = expect("range", &GOOD.replace("rate: $rate}", "rate: $rate, chunk: 0}"), 6, "out of range");
    assert!(e.message.contains("1 to 16777216"), "{e}");
}

#[test]
fn unconnected_required_input_is_refused() {
    let e = expect(
        "unwired",
        &GOOD.replace("  - tone -> keep -> drop\n", "  - tone -> keep\n"),
        8,
        "input 'samples' of block 'drop' (discard) is not wired",
    );
    assert!(e.hint.unwrap().contains("drop.samples"));
}

#[test]
fn port_type_mismatch_is_refused() {
    let text =
        "blocks:\n  tone: {kind: test_tone}\n  s: {kind: sweep_sink, set: {squint: 2 deg}}\nwiring:\n  - tone -> s\n";
    expect("mismatch", text, 5, "port type mismatch: tone.samples carries samples, but s.sweeps takes sweeps");
}

#[test]
fn cycles_are_refused() {
    let text = "blocks:\n  a: {kind: pass}\n  b: {kind: pass}\nwiring:\n  - a -> b\n  - b -> a\n";
    expect("cycle", text, 6, "the wiring has a cycle");
}

#[test]
fn duplicate_names_are_refused() {
    let text = "blocks:\n  a: {kind: test_tone}\n  a: {kind: pass}\n";
    expect("dup", text, 3, "duplicate entry with key \"a\"");
}

#[test]
fn knob_referenced_but_not_defined() {
    let e = expect("knob", &GOOD.replace("samples: $n", "samples: $nn"), 6, "knob 'nn' is referenced but not defined");
    assert_eq!(e.hint.as_deref(), Some("did you mean 'n'?"));
}

#[test]
fn yaml_syntax_errors_carry_their_position() {
    expect("syntax", "blocks:\n  a: {kind: pass\n", 3, "not valid YAML");
}

#[test]
fn unknown_keys_and_unknown_blocks_in_wiring() {
    expect("topkey", &format!("{GOOD}wirring: []\n"), 11, "unknown key 'wirring'");
    let e = expect("wireblock", &GOOD.replace("tone -> keep", "tones -> keep"), 10, "no block named 'tones'");
    assert_eq!(e.hint.as_deref(), Some("did you mean 'tone'?"));
    expect("port", &GOOD.replace("keep -> drop", "keep.smaples -> drop"), 10, "'keep' has no input port 'smaples'");
}

#[test]
fn overrides_apply_in_order_and_unknown_ones_are_refused() {
    let d = dir("override");
    let p = d.join("g.yaml");
    std::fs::write(&p, GOOD).unwrap();
    let params = d.join("site.yaml");
    std::fs::write(&params, "# installation numbers\nn: 4000\nrate: 1\n").unwrap();
    let mut o = Overrides::default();
    o.add_params_file(&params).unwrap();
    o.set_text("n=5000").unwrap();
    let g = resolve(&p, &o, &registry()).unwrap();
    assert_eq!(g.blocks[0].params.int("samples").unwrap(), 5000);
    assert_eq!(g.blocks[0].params.num("rate").unwrap(), 1e6);
    assert!(matches!(g.settings[1].origin, Origin::ParamsFile { line: 3, .. }));
    assert_eq!(g.settings[0].origin, Origin::CommandLine);

    std::fs::write(&params, "n: 4000\nrte: 1\n").unwrap();
    let mut o = Overrides::default();
    o.add_params_file(&params).unwrap();
    let e = resolve(&p, &o, &registry()).unwrap_err();
    assert!(e.to_string().contains("site.yaml:2:") && e.message.contains("knob 'rte' is not defined"), "{e}");
    assert_eq!(e.hint.as_deref(), Some("did you mean 'rate'?"));

    let mut o = Overrides::default();
    o.set("rate", RawValue::Text("3 deg".into()));
    let e = resolve(&p, &o, &registry()).unwrap_err();
    assert!(e.message.contains("unit 'deg'") && e.message.contains("--set"), "{e}");
}

#[test]
fn composites_expand_with_prefixed_names_and_their_own_errors() {
    let d = dir("composite");
    std::fs::create_dir_all(d.join("parts")).unwrap();
    std::fs::write(
        d.join("parts/chain.yaml"),
        "title: two passes\nsettings:\n  unused: {default: 1}\nblocks:\n  first: {kind: pass}\n  second: {kind: pass}\nwiring:\n  - first -> second\nexposes:\n  inputs: {samples: first.samples}\n  outputs: {samples: second.samples}\n",
    )
    .unwrap();
    let parent = "blocks:\n  tone: {kind: test_tone}\n  mid: {use: parts/chain.yaml, set: {unused: 2}}\n  drop: {kind: discard}\nwiring:\n  - tone -> mid -> drop\n";
    let p = d.join("g.yaml");
    std::fs::write(&p, parent).unwrap();
    let g = resolve(&p, &Overrides::default(), &registry()).unwrap();
    let names: Vec<&str> = g.blocks.iter().map(|b| b.name.as_str()).collect();
    assert_eq!(names, ["tone", "mid/first", "mid/second", "drop"]);
    assert_eq!(g.wires.len(), 3);

    std::fs::write(&p, parent.replace("unused: 2", "unsued: 2")).unwrap();
    let e = resolve(&p, &Overrides::default(), &registry()).unwrap_err();
    assert!(e.message.contains("has no knob 'unsued'") && e.line == 3, "{e}");

    std::fs::write(d.join("parts/chain.yaml"), "blocks:\n  first: {kind: pas}\n").unwrap();
    std::fs::write(&p, parent.replace(", set: {unused: 2}", "")).unwrap();
    let e = resolve(&p, &Overrides::default(), &registry()).unwrap_err();
    assert!(e.file.ends_with("parts/chain.yaml") && e.line == 2, "{e}");

    std::fs::write(d.join("parts/chain.yaml"), "blocks:\n  again: {use: ../g.yaml}\n").unwrap();
    let e = resolve(&p, &Overrides::default(), &registry()).unwrap_err();
    assert!(e.message.contains("includes itself"), "{e}");
}

#[test]
fn a_block_doc_is_kept_and_shown_by_check() {
    let d = dir("doc");
    let p = d.join("g.yaml");
    let text = GOOD.replace("keep: {kind: pass}", "keep: {kind: pass, doc: 'hands the tone on, unchanged'}");
    std::fs::write(&p, text).unwrap();
    let g = resolve(&p, &Overrides::default(), &registry()).unwrap();
    let keep = g.blocks.iter().find(|b| b.name == "keep").unwrap();
    assert_eq!(keep.doc, "hands the tone on, unchanged");
    let shown = lobeflow::commands::check::describe(&g);
    assert!(shown.contains("keep (pass)\n      # hands the tone on, unchanged\n"), "{shown}");
}

#[test]
fn an_unnamed_port_of_a_block_with_several_outputs_is_refused() {
    let text = "blocks:\n  tone: {kind: test_tone}\n  gate: {kind: lobe_gate, set: {lobes: 'a,b', dwell: 1 ms}}\n  \
                drop: {kind: discard}\nwiring:\n  - tone -> gate\n  - gate -> drop\n";
    let e = expect("ports", text, 7, "'gate' has output ports segments, notices: name one, as gate.segments");
    assert!(e.to_string().contains("g.yaml:7:5:"), "{e}");
}

#[test]
fn retired_words_and_unknown_keys_name_the_word_to_use() {
    let e =
        expect("retired", &GOOD.replace("keep: {kind: pass}", "keep: {kind: pass, dco: x}"), 7, "unknown key 'dco'");
    assert_eq!(e.hint.as_deref(), Some("did you mean 'doc'?"));
    let e = expect("anchor", &GOOD.replace("keep: {kind: pass}", "keep: &k {kind: pass}"), 7, "anchors");
    assert!(e.hint.is_some());
}
