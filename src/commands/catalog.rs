//! `lobeflow blocks [KIND]`: the catalog of block kinds, from their declarations.

use crate::error::Error;
use lobeflow_blocks::{BlockSpec, Registry};
use std::fmt::Write;
use std::path::Path;

pub fn catalog(registry: &Registry, kind: Option<&str>) -> Result<String, Error> {
    let mut s = String::new();
    match kind {
        Some(k) if Path::new(k).is_file() => external_catalog(&mut s, registry, Path::new(k))?,
        Some(k) => {
            let spec = registry.get(k).ok_or_else(|| {
                let hint = lobeflow_blocks::closest(k, registry.kinds().map(|s| s.kind))
                    .map(|c| format!("; did you mean '{c}'?"))
                    .unwrap_or_default();
                Error::Usage(format!("no block kind '{k}'{hint}"))
            })?;
            describe(&mut s, spec);
        }
        None => {
            let _ = writeln!(s, "Block kinds ({}); `lobeflow blocks KIND` for one alone.\n", registry.kinds().count());
            for spec in registry.kinds() {
                describe(&mut s, spec);
                s.push('\n');
            }
        }
    }
    Ok(s)
}

/// `lobeflow blocks GRAPH` lists the external blocks of a graph as their
/// programs describe them; `lobeflow blocks PROGRAM` describes one program.
fn external_catalog(s: &mut String, registry: &Registry, path: &Path) -> Result<(), Error> {
    let is_graph = path.extension().is_some_and(|e| e == "yaml" || e == "yml");
    if !is_graph {
        let spec = crate::external::describe::described_spec(&crate::external::Launch::program(path))
            .map_err(|e| Error::Usage(format!("{}: {e}", path.display())))?;
        describe(s, &spec);
        return Ok(());
    }
    let graph = crate::graph::resolve(path, &crate::graph::Overrides::default(), registry)?;
    let external: Vec<_> = graph.blocks.iter().filter(|b| b.spec.kind == crate::external::KIND).collect();
    if external.is_empty() {
        let _ = writeln!(s, "{} has no {} blocks.", path.display(), crate::external::KIND);
    }
    for b in external {
        let _ = writeln!(s, "block {} ({}:{})", b.name, b.file.display(), b.line);
        describe(s, &b.spec);
        s.push('\n');
    }
    Ok(())
}

fn describe(s: &mut String, spec: &BlockSpec) {
    let _ = writeln!(s, "{}\n  {}", spec.kind, spec.doc);
    for (side, ports) in [("in ", spec.inputs), ("out", spec.outputs)] {
        for p in ports {
            let req = if side == "in " && !p.required { " (optional)" } else { "" };
            let _ = writeln!(s, "  {side} {:<12} {}{req}: {}", p.name, p.kind.name(), p.doc);
        }
    }
    for p in spec.params {
        let default = p.default.map(|d| format!(" = {d}")).unwrap_or_else(|| " (required)".into());
        let _ = writeln!(s, "  param {}{default}  [{}]\n        {}", p.name, p.ty.describe(), p.doc);
    }
}
