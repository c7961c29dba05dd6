//! Wiring: chains of `a -> b.port` turned into checked wires between
//! output and input ports.

use super::{Builder, Local, Wire};
use crate::config::{Seg, key};
use crate::graph::error::GraphError;
use crate::graph::file::{GraphFile, Source};
use lobeflow_blocks::ItemKind;
use std::collections::HashMap;
use std::sync::Arc;

/// Wire the chains of `file`'s `wiring:` list between the blocks of `scope`.
pub(super) fn wire_chains(file: &GraphFile, scope: &HashMap<String, Local>, b: &mut Builder) -> Result<(), GraphError> {
    let src = &file.source;
    for (i, chain) in file.wiring.iter().enumerate() {
        let at = [key("wiring"), Seg::Index(i)];
        let ends: Vec<&str> = chain.split("->").map(str::trim).collect();
        if ends.len() < 2 || ends.iter().any(|e| e.is_empty()) {
            return Err(src
                .error(&at, format!("'{chain}' is not a chain"))
                .with_hint("write 'a -> b -> c', naming ports as block.port where a block has several"));
        }
        for pair in ends.windows(2) {
            let from = output_end(scope, pair[0], src, &at, b)?;
            let kind = b.blocks[from.0].spec.outputs[from.1].kind;
            let to = input_end(scope, pair[1], Some(kind), src, &at, b)?;
            connect(from, to, src, &at, b)?;
        }
    }
    Ok(())
}

fn split_end(text: &str) -> (&str, Option<&str>) {
    match text.split_once('.') {
        Some((blk, port)) => (blk.trim(), Some(port.trim())),
        None => (text.trim(), None),
    }
}

fn lookup<'s>(
    scope: &'s HashMap<String, Local>,
    name: &str,
    src: &Source,
    at: &[Seg],
) -> Result<&'s Local, GraphError> {
    scope.get(name).ok_or_else(|| {
        src.error(at, format!("no block named '{name}' in this file")).hint_closest(
            name,
            scope.keys().map(String::as_str),
            "",
        )
    })
}

fn pick_port(
    ports: &[(String, (usize, usize))],
    want: Option<&str>,
    side: &str,
    owner: &str,
    src: &Source,
    at: &[Seg],
) -> Result<(usize, usize), GraphError> {
    match want {
        Some(p) => ports.iter().find(|(n, _)| n == p).map(|(_, e)| *e).ok_or_else(|| {
            let names: Vec<&str> = ports.iter().map(|(n, _)| n.as_str()).collect();
            src.error(at, format!("'{owner}' has no {side} port '{p}'")).hint_closest(
                p,
                names.iter().copied(),
                &format!("its {side} ports: {}", if names.is_empty() { "none".into() } else { names.join(", ") }),
            )
        }),
        None if ports.len() == 1 => Ok(ports[0].1),
        None if ports.is_empty() => Err(src.error(at, format!("'{owner}' has no {side} ports"))),
        None => {
            let names: Vec<&str> = ports.iter().map(|(n, _)| n.as_str()).collect();
            Err(src.error(
                at,
                format!("'{owner}' has {side} ports {}: name one, as {owner}.{}", names.join(", "), names[0]),
            ))
        }
    }
}

fn block_ports(b: &Builder, idx: usize, outputs: bool) -> Vec<(String, (usize, usize))> {
    let spec = &b.blocks[idx].spec;
    let ports = if outputs { spec.outputs } else { spec.inputs };
    ports.iter().enumerate().map(|(i, p)| (p.name.to_string(), (idx, i))).collect()
}

pub(super) fn output_end(
    scope: &HashMap<String, Local>,
    text: &str,
    src: &Source,
    at: &[Seg],
    b: &Builder,
) -> Result<(usize, usize), GraphError> {
    let (name, port) = split_end(text);
    match lookup(scope, name, src, at)? {
        Local::Block(idx) => pick_port(&block_ports(b, *idx, true), port, "output", name, src, at),
        Local::Composite { outputs, .. } => pick_port(outputs, port, "output", name, src, at),
    }
}

/// An input end; with several inputs and no port named, the one input that
/// takes `kind` (what the wire carries) is meant.
pub(super) fn input_end(
    scope: &HashMap<String, Local>,
    text: &str,
    kind: Option<ItemKind>,
    src: &Source,
    at: &[Seg],
    b: &Builder,
) -> Result<(usize, usize), GraphError> {
    let (name, port) = split_end(text);
    let ports = match lookup(scope, name, src, at)? {
        Local::Block(idx) => block_ports(b, *idx, false),
        Local::Composite { inputs, .. } => inputs.clone(),
    };
    if let (None, Some(k)) = (port, kind) {
        let fitting: Vec<_> = ports.iter().filter(|(_, e)| b.blocks[e.0].spec.inputs[e.1].kind == k).collect();
        if ports.len() > 1 && fitting.len() == 1 {
            return Ok(fitting[0].1);
        }
    }
    pick_port(&ports, port, "input", name, src, at)
}

fn connect(
    from: (usize, usize),
    to: (usize, usize),
    src: &Arc<Source>,
    at: &[Seg],
    b: &mut Builder,
) -> Result<(), GraphError> {
    let out_spec = b.blocks[from.0].spec.outputs[from.1];
    let in_spec = b.blocks[to.0].spec.inputs[to.1];
    if out_spec.kind != in_spec.kind {
        return Err(src
            .error(
                at,
                format!(
                    "port type mismatch: {}.{} carries {}, but {}.{} takes {}",
                    b.blocks[from.0].name,
                    out_spec.name,
                    out_spec.kind.name(),
                    b.blocks[to.0].name,
                    in_spec.name,
                    in_spec.kind.name()
                ),
            )
            .with_hint(suggest_output(b, from.0, in_spec.kind)));
    }
    if let Some(w) = b.wire_into.get(&to).map(|&wi| &b.wires[wi]) {
        return Err(src.error(
            at,
            format!("input {}.{} is already wired from {}", b.blocks[to.0].name, in_spec.name, b.blocks[w.from.0].name),
        ));
    }
    b.wire_into.insert(to, b.wires.len());
    b.wires.push(Wire { from, to });
    b.wire_at.push((Arc::clone(src), at.to_vec()));
    Ok(())
}

fn suggest_output(b: &Builder, idx: usize, kind: ItemKind) -> String {
    match b.blocks[idx].spec.outputs.iter().find(|p| p.kind == kind) {
        Some(p) => format!("{}.{} carries {}", b.blocks[idx].name, p.name, kind.name()),
        None => format!(
            "a block between them must turn {} into {}",
            b.blocks[idx].spec.outputs.first().map(|p| p.kind.name()).unwrap_or("?"),
            kind.name()
        ),
    }
}
