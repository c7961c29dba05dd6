//! `lobeflow check GRAPH`: validate and print the resolved graph.

use crate::error::Error;
use crate::graph::{Overrides, ResolvedGraph, resolve};
use lobeflow_blocks::{ParamType, Value};
use std::fmt::Write;
use std::path::Path;

/// Resolve `path` and describe it: settings (value and origin), blocks with
/// every parameter and where it came from, and the wires.
pub fn check(path: &Path, overrides: &Overrides) -> Result<String, Error> {
    check_with_out(path, overrides, Path::new("out"))
}

/// As [`check`], the outputs checked as a run with `--out out_dir` would
/// write them (inside the folder, none the same as an input or another output).
pub fn check_with_out(path: &Path, overrides: &Overrides, out_dir: &Path) -> Result<String, Error> {
    let g = resolve(path, overrides, &crate::registry())?;
    crate::runtime::outputs::check_outputs(&g, out_dir, None)?;
    Ok(describe(&g))
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
        let unit = k.unit.as_deref().map(|u| format!(" [{u}]")).unwrap_or_default();
        let _ = writeln!(s, "  {} = {}{unit}    ({})", k.name, k.value, k.origin);
    }
    let _ = writeln!(s, "\nblocks:");
    for b in &g.blocks {
        let _ = writeln!(s, "  {} ({})", b.name, b.spec.kind);
        if !b.doc.is_empty() {
            let _ = writeln!(s, "      # {}", b.doc);
        }
        for (name, value) in b.params.iter() {
            let from = b.sources.get(name).map(String::as_str).unwrap_or("");
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
