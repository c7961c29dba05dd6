//! `lobeflow check GRAPH`: the validation phase a run goes through before
//! its first sample, then a description of the resolved graph.
//!
//! Check resolves the graph as `run` does and prepares the run as `run`
//! does ([`crate::runtime::prepare`]): every block is built, so inputs are
//! opened and their headers read and compared with their data, pattern
//! files are parsed, and every output path is checked against the others.
//! No output is written: the files blocks open while they are built go to a
//! private folder under the system's temporary folder, removed at once.

use crate::capture::live::{PushFormat, PushedInput, pushed_input};
use crate::capture::reader::is_pipe;
use crate::capture::{Format, source};
use crate::error::Error;
use crate::graph::{GraphError, Overrides, ResolvedGraph, resolve};
use crate::runtime::{RunOptions, outputs, prepare};
use lobeflow_blocks::{ParamType, Value};
use std::fmt::Write;
use std::path::{Path, PathBuf};

/// What `check` is given: as `run` is, without what only matters once
/// samples flow.
pub struct CheckArgs {
    pub graph: PathBuf,
    pub overrides: Overrides,
    /// The output folder a run would use (outputs are checked against it).
    pub out_dir: PathBuf,
    /// Parameters set on every capture reader (`--format`, `--rate`, ...).
    pub capture: Vec<(&'static str, String)>,
}

/// Resolve `path` and describe it: settings (value, unit and origin),
/// blocks with every parameter and where it came from, and the wires.
pub fn check(path: &Path, overrides: &Overrides) -> Result<String, Error> {
    check_with_out(path, overrides, Path::new("out"))
}

/// As [`check`], the outputs checked as a run with `--out out_dir` would
/// write them.
pub fn check_with_out(path: &Path, overrides: &Overrides, out_dir: &Path) -> Result<String, Error> {
    let args = CheckArgs {
        graph: path.to_path_buf(),
        overrides: overrides.clone(),
        out_dir: out_dir.to_path_buf(),
        capture: Vec::new(),
    };
    check_graph(&args)
}

/// Check as `run` would up to its first sample, and describe the graph.
pub fn check_graph(args: &CheckArgs) -> Result<String, Error> {
    let mut g = resolve(&args.graph, &args.overrides, &crate::registry())?;
    super::run::set_capture_options(&mut g, &args.capture)?;
    let remarks = validate(&g, &args.out_dir)?;
    let mut text = describe(&g);
    for r in remarks {
        let _ = writeln!(text, "note: {r}");
    }
    Ok(text)
}

/// Everything a run with `--out out_dir` does before its first sample,
/// writing nothing: the outputs are checked and every block is built. Live
/// inputs are not read (that would take their samples); their stated
/// format is checked instead. Returns a note per input not opened.
pub fn validate(g: &ResolvedGraph, out_dir: &Path) -> Result<Vec<String>, Error> {
    outputs::check_outputs(g, out_dir, None).map_err(|e| place_error(g, e))?;
    let (pushed, remarks) = live_stand_ins(g).map_err(|e| place_error(g, e))?;
    let opts =
        RunOptions { out_dir: out_dir.to_path_buf(), write_files: false, threads: 1, pushed, ..Default::default() };
    // Dropping the prepared run removes its private folder and stops any
    // external program it started.
    drop(prepare(g, &opts, Vec::new()).map_err(|e| place_error(g, e))?);
    Ok(remarks)
}

/// An empty pushed input for each capture reader of a live input, in the
/// format its parameters state, so building it checks format, rate,
/// channels and roles without reading the pipe.
fn live_stand_ins(g: &ResolvedGraph) -> Result<(Vec<PushedInput>, Vec<String>), Error> {
    let mut pushed = Vec::new();
    let mut remarks = Vec::new();
    for b in g.blocks.iter().filter(|b| b.spec.kind == source::SPEC.kind) {
        let Ok(path) = b.params.text("path") else { continue };
        if !is_pipe(path) {
            continue;
        }
        let block_error =
            |message: String| Error::Block { block: b.name.clone(), kind: b.spec.kind.to_string(), message };
        let opts = source::open_options(&b.params).map_err(|e| block_error(e.to_string()))?;
        let wav_name = Path::new(path).extension().is_some_and(|e| e.eq_ignore_ascii_case("wav"));
        let wav = path != "-" && (opts.format == Format::Wav || (opts.format == Format::Auto && wav_name));
        let format = if wav {
            remarks.push(format!("{path}: a WAV stream's header is read only by a run (reading it takes samples)"));
            wav_stand_in(b.params.names("roles").unwrap_or_default())
        } else {
            let info = crate::capture::raw::raw_info(path, &opts, None).map_err(|e| block_error(e.to_string()))?;
            remarks.push(format!("{path}: a live input; its stated format was checked, no sample was read"));
            PushFormat { rate: info.rate, datatype: info.encoding_text.clone(), channels: info.channels }
        };
        let (input, _feeder) = pushed_input(&b.name, format).map_err(block_error)?;
        pushed.push(input);
    }
    Ok((pushed, remarks))
}

/// A format that fits `roles` (real channels, one per role; two when the
/// roles are left to the channel count), for a WAV stream not opened.
fn wav_stand_in(roles: Vec<String>) -> PushFormat {
    let channels = if roles.is_empty() || roles == ["auto"] { 2 } else { roles.len() };
    PushFormat { rate: 48_000.0, datatype: "rf32_le".into(), channels }
}

/// An error found while the run was prepared, placed in the graph file: at
/// the parameter its message names (or whose value it quotes), else at the
/// block, with where that value came from as the hint. Other errors pass.
pub fn place_error(g: &ResolvedGraph, e: Error) -> Error {
    let (block, kind, message) = match &e {
        Error::Block { block, kind, message } => (block.as_str(), kind.as_str(), message.as_str()),
        _ => return e,
    };
    let Some(b) = g.blocks.iter().find(|b| b.name == block) else { return e };
    let quoted = |name: &str| message.contains(&format!("'{name}'"));
    let leading = |name: &str| message.starts_with(&format!("{name}:")) || message.starts_with(&format!("{name} "));
    let quotes_path = |name: &str, value: &Value| {
        let is_path =
            b.spec.param(name).is_some_and(|ps| matches!(ps.ty, ParamType::InputPath | ParamType::OutputPath));
        matches!(value, Value::Text(t) if is_path && !t.is_empty() && message.contains(t.as_str()))
    };
    let named = b
        .params
        .iter()
        .find(|(name, _)| quoted(name))
        .or_else(|| b.params.iter().find(|(name, _)| leading(name)))
        .or_else(|| b.params.iter().find(|(name, value)| quotes_path(name, value)));
    let (line, column) = named.and_then(|(n, _)| b.places.get(n.as_str())).copied().unwrap_or((b.line, b.column));
    let hint = match named {
        Some((n, v)) => {
            let from = b.sources.get(n.as_str()).map(String::as_str).unwrap_or("block default");
            let v = v.to_string();
            if v.is_empty() { format!("'{n}' is not set ({from})") } else { format!("'{n}' is {v} ({from})") }
        }
        None => format!("`lobeflow blocks {kind}` describes the block's parameters"),
    };
    Error::Graph(GraphError {
        file: b.file.clone(),
        line,
        column,
        message: format!("block '{block}' ({kind}): {message}"),
        hint: Some(hint),
    })
}

pub fn describe(g: &ResolvedGraph) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "graph {}{}",
        g.path.display(),
        if g.title.is_empty() { String::new() } else { format!(": {}", g.title) }
    );
    let _ = writeln!(s, "\nsettings:");
    for k in &g.settings {
        let _ = writeln!(s, "  {} = {}    ({})", k.name, k.value_text(), k.origin);
    }
    let _ = writeln!(s, "\nblocks:");
    for b in &g.blocks {
        let _ = writeln!(s, "  {} ({})", b.name, b.spec.kind);
        if !b.doc.is_empty() {
            let _ = writeln!(s, "      # {}", b.doc);
        }
        for (name, value) in b.params.iter() {
            let from = b.sources.get(name).map(String::as_str).unwrap_or("block default");
            let unit = match (value, b.spec.param(name).map(|p| p.ty)) {
                (Value::Number(_), Some(ParamType::Number { unit, .. })) if !unit.symbol().is_empty() => {
                    format!(" {}", unit.symbol())
                }
                _ => String::new(),
            };
            let _ = writeln!(s, "      {name} = {value}{unit}    ({from})");
        }
    }
    let _ = writeln!(s, "\nwires:");
    for w in &g.wires {
        let (f, t) = (&g.blocks[w.from.0], &g.blocks[w.to.0]);
        let _ = writeln!(
            s,
            "  {}.{} -> {}.{}    ({})",
            f.name,
            f.spec.outputs[w.from.1].name,
            t.name,
            t.spec.inputs[w.to.1].name,
            f.spec.outputs[w.from.1].kind.name()
        );
    }
    let _ = writeln!(s, "\nok: {} blocks, {} wires", g.blocks.len(), g.wires.len());
    s
}
