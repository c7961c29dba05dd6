//! Whole-graph checks made once every block and wire is known: required
//! inputs are wired, and items flow one way (no cycles).

use super::error::GraphError;
use super::resolve::Builder;

pub(super) fn required_inputs(b: &Builder, exposed: &[(usize, usize)]) -> Result<(), GraphError> {
    for (i, blk) in b.blocks.iter().enumerate() {
        for (p, port) in blk.spec.inputs.iter().enumerate() {
            if port.required && !b.wires.iter().any(|w| w.to == (i, p)) && !exposed.contains(&(i, p)) {
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
    // Depth-first search; colour 1 = on the stack, 2 = done.
    let n = b.blocks.len();
    let mut colour = vec![0u8; n];
    fn visit(v: usize, b: &Builder, colour: &mut [u8], path: &mut Vec<usize>) -> Option<(Vec<usize>, usize)> {
        colour[v] = 1;
        path.push(v);
        for (wi, w) in b.wires.iter().enumerate().filter(|(_, w)| w.from.0 == v) {
            let u = w.to.0;
            if colour[u] == 1 {
                let start = path.iter().position(|&x| x == u).unwrap_or(0);
                return Some((path[start..].to_vec(), wi));
            }
            if colour[u] == 0
                && let Some(c) = visit(u, b, colour, path)
            {
                return Some(c);
            }
        }
        path.pop();
        colour[v] = 2;
        None
    }
    for v in 0..n {
        if colour[v] == 0 {
            let mut path = Vec::new();
            if let Some((cycle, wi)) = visit(v, b, &mut colour, &mut path) {
                let mut names: Vec<&str> = cycle.iter().map(|&i| b.blocks[i].name.as_str()).collect();
                names.push(names[0]);
                let (src, at) = &b.wire_at[wi];
                return Err(src
                    .error(at, format!("the wiring has a cycle: {}", names.join(" -> ")))
                    .with_hint("items flow one way; break the loop"));
            }
        }
    }
    Ok(())
}
