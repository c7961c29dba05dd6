//! Finding where a key sits in a YAML text, for error messages.
//!
//! The YAML parser tells positions only for syntax errors; validation
//! errors (an unknown block kind, a bad parameter) are found later on the
//! parsed value. This scanner maps a key path such as
//! `blocks / gate / set / guard` back to a line and column. It understands
//! block-style mappings and sequences, and flow mappings written on one line,
//! which is how graph files are written.

use std::collections::HashMap;

/// One step of a key path: a mapping key or a sequence index.
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub enum Seg {
    Key(String),
    Index(usize),
}

pub fn key(k: &str) -> Seg {
    Seg::Key(k.to_string())
}

/// 1-based (line, column) of the last segment of `path`; falls back to the
/// deepest ancestor found, then to (1, 1). Scans the whole text: for many
/// look-ups in one file build [`Positions`] once.
pub fn locate(text: &str, path: &[Seg]) -> (usize, usize) {
    Positions::of(text).find(path)
}

/// Every key path of a YAML text with its first position, from one scan, so
/// a file of many thousand blocks is located in linear time.
#[derive(Debug, Default)]
pub struct Positions {
    at: HashMap<Vec<Seg>, (usize, usize)>,
}

impl Positions {
    pub fn of(text: &str) -> Positions {
        let mut p = Positions::default();
        p.scan(text);
        p
    }

    /// As [`locate`]: the deepest ancestor of `path` found, else (1, 1).
    pub fn find(&self, path: &[Seg]) -> (usize, usize) {
        let mut best = (1, 1);
        for depth in 1..=path.len() {
            match self.at.get(&path[..depth]) {
                Some(&p) => best = p,
                None => break,
            }
        }
        best
    }

    fn record(&mut self, path: Vec<Seg>, pos: (usize, usize)) {
        self.at.entry(path).or_insert(pos);
    }

    fn scan(&mut self, text: &str) {
        // Stack of (indent, segment) describing the path of the current line.
        let mut stack: Vec<(usize, Seg)> = Vec::new();
        // Sequence counters: (indent of the dash, path depth) -> next index.
        let mut seq_count: Vec<(usize, usize, usize)> = Vec::new();
        let path_of = |stack: &[(usize, Seg)]| stack.iter().map(|(_, s)| s.clone()).collect::<Vec<Seg>>();
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
                self.record(path_of(&stack), (ln + 1, indent + 1));
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
                let mut path = path_of(&stack);
                self.record(path.clone(), (ln + 1, indent + 1));
                // A flow mapping on the same line: `set: {a: 1, b: {c: 2}}`.
                let flow = value.trim_start();
                if flow.starts_with('{') {
                    let col = line.len() - flow.len();
                    self.scan_flow(flow, col, ln + 1, &mut path);
                }
            }
        }
    }

    /// Record the keys of the flow mapping `s` starts with, nested ones too;
    /// `col` is the 0-based column of `s` in its line. Returns the bytes
    /// the mapping takes, its closing brace included.
    fn scan_flow(&mut self, s: &str, col: usize, line: usize, path: &mut Vec<Seg>) -> usize {
        let b = s.as_bytes();
        let mut i = 1;
        loop {
            while i < b.len() && (b[i] == b' ' || b[i] == b'\t' || b[i] == b',') {
                i += 1;
            }
            match b.get(i) {
                None => return b.len(),
                Some(b'}') => return i + 1,
                _ => {}
            }
            let key_at = i;
            let k = match b[i] {
                q @ (b'"' | b'\'') => {
                    let end = s[i + 1..].find(q as char).map_or(b.len(), |e| i + 1 + e);
                    let k = &s[i + 1..end];
                    i = (end + 1).min(b.len());
                    k
                }
                b'{' | b'[' => {
                    i += skip_balanced(&s[i..]);
                    continue;
                }
                _ => {
                    let end = s[i..].find([':', ',', '}', '{', '[']).map_or(b.len(), |e| i + e);
                    let k = s[i..end].trim();
                    i = end;
                    k
                }
            };
            while i < b.len() && b[i] == b' ' {
                i += 1;
            }
            if b.get(i) != Some(&b':') {
                continue;
            }
            path.push(Seg::Key(k.to_string()));
            self.record(path.clone(), (line, col + key_at + 1));
            i += 1;
            while i < b.len() && b[i] == b' ' {
                i += 1;
            }
            match b.get(i) {
                Some(b'{') => i += self.scan_flow(&s[i..], col + i, line, path),
                Some(b'[') => i += skip_balanced(&s[i..]),
                Some(&q @ (b'"' | b'\'')) => i = s[i + 1..].find(q as char).map_or(b.len(), |e| i + 1 + e + 1),
                _ => i = s[i..].find([',', '}']).map_or(b.len(), |e| i + e),
            }
            path.pop();
        }
    }
}

/// Bytes of the bracketed collection `s` starts with, quotes respected.
fn skip_balanced(s: &str) -> usize {
    let mut depth = 0usize;
    let mut quote: Option<char> = None;
    for (i, c) in s.char_indices() {
        match (quote, c) {
            (Some(q), c) if c == q => quote = None,
            (Some(_), _) => {}
            (None, '"' | '\'') => quote = Some(c),
            (None, '{' | '[') => depth += 1,
            (None, '}' | ']') => {
                depth = depth.saturating_sub(1);
                if depth == 0 {
                    return i + 1;
                }
            }
            _ => {}
        }
    }
    s.len()
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
    fn finds_keys_in_nested_one_line_mappings() {
        let doc = "blocks:\n  gate: {kind: lobe_gate, set: {lobes: 'a,b', guard: 1e30 samples}}\n  x: {kind: k, set: {a: [1, {b: 2}], c: 3}}\n";
        assert_eq!(locate(doc, &[key("blocks"), key("gate"), key("set"), key("guard")]), (2, 47));
        assert_eq!(locate(doc, &[key("blocks"), key("gate"), key("set"), key("lobes")]), (2, 33));
        assert_eq!(locate(doc, &[key("blocks"), key("x"), key("set"), key("c")]), (3, 38));
        assert_eq!(locate(doc, &[key("blocks"), key("x"), key("set"), key("b")]), (3, 16));
    }

    #[test]
    fn falls_back_to_the_parent() {
        assert_eq!(locate(DOC, &[key("blocks"), key("read"), key("nope")]), (5, 3));
    }
}
