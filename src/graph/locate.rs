//! Finding where a key sits in a YAML text, for error messages.
//!
//! The YAML parser tells positions only for syntax errors; validation
//! errors (an unknown block kind, a bad parameter) are found later on the
//! parsed value. This scanner maps a key path such as
//! `blocks / gate / set / guard` back to a line and column. It understands
//! block-style mappings and sequences, and flow mappings written on one line,
//! which is how graph files are written.

/// One step of a key path: a mapping key or a sequence index.
#[derive(Clone, Debug, PartialEq)]
pub enum Seg {
    Key(String),
    Index(usize),
}

pub fn key(k: &str) -> Seg {
    Seg::Key(k.to_string())
}

/// 1-based (line, column) of the last segment of `path`; falls back to the
/// deepest ancestor found, then to (1, 1).
pub fn locate(text: &str, path: &[Seg]) -> (usize, usize) {
    let mut best = (1, 1);
    for depth in 1..=path.len() {
        match locate_exact(text, &path[..depth]) {
            Some(p) => best = p,
            None => break,
        }
    }
    best
}

fn locate_exact(text: &str, path: &[Seg]) -> Option<(usize, usize)> {
    // Stack of (indent, segment) describing the path of the current line.
    let mut stack: Vec<(usize, Seg)> = Vec::new();
    // Sequence counters: (indent of the dash, path depth) -> next index.
    let mut seq_count: Vec<(usize, usize, usize)> = Vec::new();
    for (ln, raw) in text.lines().enumerate() {
        let line = strip_comment(raw);
        if line.trim().is_empty() {
            continue;
        }
        let mut indent = line.len() - line.trim_start().len();
        let mut rest = line.trim_start();
        // A sequence item: "- value" or "- key: value".
        while let Some(after) = rest.strip_prefix("- ").or_else(|| if rest == "-" { Some("") } else { None }) {
            // Leave deeper entries and the previous item of this sequence.
            while stack.last().is_some_and(|(i, s)| *i > indent || (*i == indent && matches!(s, Seg::Index(_)))) {
                stack.pop();
            }
            let depth = stack.len();
            let idx = match seq_count.iter_mut().find(|(i, d, _)| *i == indent && *d == depth) {
                Some(entry) => {
                    entry.2 += 1;
                    entry.2 - 1
                }
                None => {
                    seq_count.push((indent, depth, 1));
                    0
                }
            };
            stack.push((indent, Seg::Index(idx)));
            if path_is(&stack, path) {
                return Some((ln + 1, indent + 1));
            }
            indent += 2;
            rest = after.trim_start();
            if rest.is_empty() {
                break;
            }
        }
        if rest.is_empty() {
            continue;
        }
        if let Some((k, value)) = split_key(rest) {
            while stack.last().is_some_and(|(i, _)| *i >= indent) {
                stack.pop();
            }
            seq_count.retain(|(i, _, _)| *i < indent);
            stack.push((indent, Seg::Key(k.to_string())));
            if path_is(&stack, path) {
                return Some((ln + 1, indent + 1));
            }
            // A flow mapping on the same line: `set: {a: 1, b: 2}`.
            if let (Some(Seg::Key(last)), true) = (path.last(), path.len() == stack.len() + 1) {
                if path_is(&stack, &path[..path.len() - 1]) && value.trim_start().starts_with('{') {
                    let col_base = line.len() - value.len();
                    if let Some(off) = find_flow_key(value, last) {
                        return Some((ln + 1, col_base + off + 1));
                    }
                }
            }
        }
    }
    None
}

fn path_is(stack: &[(usize, Seg)], path: &[Seg]) -> bool {
    stack.len() == path.len() && stack.iter().zip(path).all(|((_, a), b)| a == b)
}

fn strip_comment(line: &str) -> &str {
    // A '#' starts a comment at line start or after white space, outside quotes.
    let mut quote: Option<char> = None;
    let mut prev_space = true;
    for (i, c) in line.char_indices() {
        match (quote, c) {
            (Some(q), c) if c == q => quote = None,
            (None, '"' | '\'') => quote = Some(c),
            (None, '#') if prev_space => return &line[..i],
            _ => {}
        }
        prev_space = c.is_whitespace();
    }
    line
}

/// `key: value` → (key, value); quotes around the key are removed.
fn split_key(s: &str) -> Option<(&str, &str)> {
    let (k, v) = if let Some(q) = s.strip_prefix('"') {
        let end = q.find('"')?;
        let after = q[end + 1..].strip_prefix(':')?;
        (&q[..end], after)
    } else {
        let pos = s.find(": ").or_else(|| s.strip_suffix(':').map(|t| t.len()))?;
        let k = &s[..pos];
        if k.contains(['{', '[', ',']) {
            return None;
        }
        (k, &s[pos + 1..])
    };
    Some((k.trim(), v))
}

fn find_flow_key(value: &str, key: &str) -> Option<usize> {
    let mut from = 0;
    while let Some(pos) = value[from..].find(key) {
        let at = from + pos;
        let before = value[..at].trim_end().chars().last();
        let after = value[at + key.len()..].trim_start();
        if matches!(before, Some('{') | Some(',')) && after.starts_with(':') {
            return Some(at);
        }
        from = at + key.len();
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    const DOC: &str = "title: x\nsettings:\n  bw: {default: 6 deg, doc: beam}\nblocks:\n  read:\n    kind: capture_reader\n    set:\n      path: $input\n  gate:\n    kind: lobe_gate\n    set: {lobes: a, guard: 2 us}\nwiring:\n  - read -> gate\n  # comment\n  - gate -> out\n";

    #[test]
    fn finds_nested_keys() {
        assert_eq!(locate(DOC, &[key("blocks"), key("read"), key("kind")]), (6, 5));
        assert_eq!(locate(DOC, &[key("blocks"), key("read"), key("set"), key("path")]), (8, 7));
        assert_eq!(locate(DOC, &[key("blocks"), key("gate")]), (9, 3));
    }

    #[test]
    fn finds_flow_keys_and_sequence_items() {
        assert_eq!(locate(DOC, &[key("blocks"), key("gate"), key("set"), key("guard")]), (11, 21));
        assert_eq!(locate(DOC, &[key("settings"), key("bw"), key("doc")]), (3, 24));
        assert_eq!(locate(DOC, &[key("wiring"), Seg::Index(1)]), (15, 3));
    }

    #[test]
    fn falls_back_to_the_parent() {
        assert_eq!(locate(DOC, &[key("blocks"), key("read"), key("nope")]), (5, 3));
    }
}
