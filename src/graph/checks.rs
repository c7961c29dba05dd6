//! Whole-graph checks made once every block and wire is known: required
//! inputs are wired, items flow one way (no cycles), and values that cannot
//! make sense together are refused.

use super::error::GraphError;
use super::resolve::{Builder, ResolvedBlock};
use lobeflow_blocks::Value;

pub(super) fn required_inputs(b: &Builder, exposed: &[(usize, usize)]) -> Result<(), GraphError> {
    for (i, blk) in b.blocks.iter().enumerate() {
        for (p, port) in blk.spec.inputs.iter().enumerate() {
            if port.required && !b.wire_into.contains_key(&(i, p)) && !exposed.contains(&(i, p)) {
                return Err(GraphError {
                    file: blk.file.clone(),
                    line: blk.line,
                    column: 3,
                    message: format!("input '{}' of block '{}' ({}) is not wired", port.name, blk.name, blk.spec.kind),
                    hint: Some(format!(
                        "add a chain ending in '{}.{}' ({})",
                        blk.name.rsplit('/').next().unwrap_or(&blk.name),
                        port.name,
                        port.kind.name()
                    )),
                });
            }
        }
    }
    Ok(())
}

pub(super) fn no_cycles(b: &Builder) -> Result<(), GraphError> {
    // Depth-first search with an explicit stack (a chain of many thousand
    // blocks must not exhaust the thread's stack); colour 1 = on the path,
    // 2 = done. `path` holds (block, next outgoing wire to try).
    let n = b.blocks.len();
    let mut out_wires: Vec<Vec<usize>> = vec![Vec::new(); n];
    for (wi, w) in b.wires.iter().enumerate() {
        out_wires[w.from.0].push(wi);
    }
    let mut colour = vec![0u8; n];
    for root in 0..n {
        if colour[root] != 0 {
            continue;
        }
        colour[root] = 1;
        let mut path: Vec<(usize, usize)> = vec![(root, 0)];
        while let Some(&mut (v, ref mut next)) = path.last_mut() {
            let Some(&wi) = out_wires[v].get(*next) else {
                colour[v] = 2;
                path.pop();
                continue;
            };
            *next += 1;
            let u = b.wires[wi].to.0;
            if colour[u] == 1 {
                let start = path.iter().position(|&(x, _)| x == u).unwrap_or(0);
                let mut names: Vec<&str> = path[start..].iter().map(|&(i, _)| b.blocks[i].name.as_str()).collect();
                names.push(names[0]);
                let (src, at) = &b.wire_at[wi];
                return Err(src
                    .error(at, format!("the wiring has a cycle: {}", names.join(" -> ")))
                    .with_hint("items flow one way; break the loop"));
            }
            if colour[u] == 0 {
                colour[u] = 1;
                path.push((u, 0));
            }
        }
    }
    Ok(())
}

/// Values that cannot make sense together, caught before a run: a guard at
/// least as long as the dwell it is cut from (every sample left out), and
/// lobe pairs naming a lobe that no gate upstream produces (no estimate
/// could ever be paired).
pub(super) fn physical_sanity(b: &Builder) -> Result<(), GraphError> {
    for blk in &b.blocks {
        guard_within_dwell(blk)?;
    }
    let mut into: Vec<Vec<usize>> = vec![Vec::new(); b.blocks.len()];
    for w in &b.wires {
        into[w.to.0].push(w.from.0);
    }
    for (i, blk) in b.blocks.iter().enumerate() {
        let Ok(pairs) = blk.params.lobe_pairs("pairs") else { continue };
        let gates = upstream_gates(b, &into, i);
        let Some(&(gate, _)) = gates.first() else { continue };
        let known: Vec<String> = gates.iter().flat_map(|(_, lobes)| lobes.iter().cloned()).collect();
        for lobe in pairs.iter().flat_map(|p| [&p.plus, &p.minus]) {
            if !known.contains(lobe) {
                return Err(param_error(
                    blk,
                    "pairs",
                    format!(
                        "parameter 'pairs' of block '{}' names lobe '{lobe}', but block '{}' upstream switches only {}",
                        blk.name,
                        b.blocks[gate].name,
                        known.join(", ")
                    ),
                )
                .hint_closest(
                    lobe,
                    known.iter().map(String::as_str),
                    "name lobes of the gate's 'lobes' list",
                ));
            }
        }
    }
    Ok(())
}

fn guard_within_dwell(blk: &ResolvedBlock) -> Result<(), GraphError> {
    let (Some(guard), Some(dwell)) = (blk.params.get("guard"), blk.params.get("dwell")) else {
        return Ok(());
    };
    // Only values in the same unit compare before the rate is known; the
    // gate checks the rest when it starts.
    let same = match (guard, dwell) {
        (Value::Seconds(g), Value::Seconds(d))
        | (Value::Samples(g), Value::Samples(d))
        | (Value::Pulses(g), Value::Pulses(d)) => Some((*g, *d)),
        _ => None,
    };
    match same {
        Some((g, d)) if d > 0.0 && g >= d => Err(param_error(
            blk,
            "guard",
            format!(
                "block '{}': guard {guard} is not shorter than the dwell {dwell}; every sample of every dwell would be left out",
                blk.name
            ),
        )
        .with_hint("a guard covers the switch transient only: a small fraction of the dwell")),
        _ => Ok(()),
    }
}

/// The gates (blocks with a `lobes` list) that feed block `i`, nearest first.
fn upstream_gates(b: &Builder, into: &[Vec<usize>], i: usize) -> Vec<(usize, Vec<String>)> {
    let mut seen = vec![false; b.blocks.len()];
    let mut queue = std::collections::VecDeque::from([i]);
    let mut gates = Vec::new();
    while let Some(v) = queue.pop_front() {
        for &u in &into[v] {
            if std::mem::replace(&mut seen[u], true) {
                continue;
            }
            match b.blocks[u].params.get("lobes") {
                Some(Value::Names(lobes)) => gates.push((u, lobes.clone())),
                _ => queue.push_back(u),
            }
        }
    }
    gates
}

/// An error at the place parameter `name` of `blk` is written (its block
/// when it was left to its default).
fn param_error(blk: &ResolvedBlock, name: &str, message: String) -> GraphError {
    let (line, column) = blk.places.get(name).copied().unwrap_or((blk.line, blk.column));
    GraphError { file: blk.file.clone(), line, column, message, hint: None }
}
