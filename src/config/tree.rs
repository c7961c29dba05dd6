//! YAML text to a tree of nodes, each with the line and column it starts at.
//!
//! The events come from `saphyr-parser` (a pure-Rust YAML 1.2 parser that
//! reports a span for every event); this module only stacks them into
//! nodes. It refuses what configuration files never need and a hostile
//! file could abuse: repeated keys, anchors and aliases (an alias bomb
//! expands a few lines into gigabytes), tags, several documents, and
//! nesting deeper than [`MAX_DEPTH`].

use super::Error;
use saphyr_parser::{Event, Parser, ScalarStyle, Span};
use std::collections::HashSet;

/// Deepest nesting of mappings and sequences a file may have; real files
/// nest four or five levels, and the deserializer recurses once per level.
pub const MAX_DEPTH: usize = 64;

/// 1-based line and column of a value in its file.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, PartialOrd, Ord)]
pub struct Pos {
    pub line: usize,
    pub column: usize,
}

impl Pos {
    fn of(span: &Span) -> Pos {
        Pos { line: span.start.line(), column: span.start.col() + 1 }
    }
}

/// One value of the file and where it starts.
#[derive(Clone, Debug, PartialEq)]
pub struct Node {
    pub at: Pos,
    pub value: NodeValue,
}

#[derive(Clone, Debug, PartialEq)]
pub enum NodeValue {
    /// `plain` is false for quoted and block scalars, which are always text.
    Scalar {
        text: String,
        plain: bool,
    },
    Seq(Vec<Node>),
    /// Entries in file order.
    Map(Vec<(Node, Node)>),
}

/// One step of a path into the tree: a mapping key or a sequence index.
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub enum Seg {
    Key(String),
    Index(usize),
}

/// The path step for mapping key `k`.
pub fn key(k: &str) -> Seg {
    Seg::Key(k.to_string())
}

impl Node {
    /// True for an empty value, `~` or `null` written plain.
    pub fn is_null(&self) -> bool {
        matches!(&self.value, NodeValue::Scalar { text, plain: true } if matches!(text.as_str(), "" | "~" | "null" | "Null" | "NULL"))
    }

    /// The value under mapping key `k`, if this is a mapping that has it.
    pub fn get(&self, k: &str) -> Option<&Node> {
        self.entry(k).map(|(_, v)| v)
    }

    fn entry(&self, k: &str) -> Option<(&Node, &Node)> {
        match &self.value {
            NodeValue::Map(entries) => entries
                .iter()
                .find(|(key, _)| matches!(&key.value, NodeValue::Scalar { text, .. } if text == k))
                .map(|(k, v)| (k, v)),
            _ => None,
        }
    }

    /// Where the value at `path` is written: a mapping key's own position for
    /// a key step, the item's for an index. A path that leaves the tree
    /// stops at the deepest step found (the root itself is (1, 1)).
    pub fn locate(&self, path: &[Seg]) -> Pos {
        let mut here = self;
        let mut best = Pos { line: 1, column: 1 };
        for seg in path {
            let next = match (seg, &here.value) {
                (Seg::Key(k), _) => here.entry(k).map(|(key, value)| (key.at, value)),
                (Seg::Index(i), NodeValue::Seq(items)) => items.get(*i).map(|item| (item.at, item)),
                _ => None,
            };
            match next {
                Some((at, node)) => {
                    best = at;
                    here = node;
                }
                None => break,
            }
        }
        best
    }
}

/// A collection being filled while its events arrive.
enum Open {
    Seq(Pos, Vec<Node>),
    Map { at: Pos, entries: Vec<(Node, Node)>, pending_key: Option<Node>, seen: HashSet<String> },
}

/// Parse `text` into its one document's tree (an empty file is a null).
pub fn parse(text: &str) -> Result<Node, Error> {
    let mut stack: Vec<Open> = Vec::new();
    let mut root: Option<Node> = None;
    for event in Parser::new_from_str(text) {
        let (event, span) = event.map_err(|e| {
            let m = e.marker();
            Error::at(Pos { line: m.line(), column: m.col() + 1 }, format!("not valid YAML: {}", e.info()))
        })?;
        let at = Pos::of(&span);
        let done = match event {
            Event::Scalar(text, style, anchor, tag) => {
                refuse_anchor_or_tag(at, anchor, tag.is_some())?;
                Node { at, value: NodeValue::Scalar { text: text.into_owned(), plain: style == ScalarStyle::Plain } }
            }
            Event::SequenceStart(anchor, tag) | Event::MappingStart(anchor, tag) if stack.len() >= MAX_DEPTH => {
                let _ = (anchor, tag);
                return Err(Error::at(at, format!("nested more than {MAX_DEPTH} levels deep")));
            }
            Event::SequenceStart(anchor, tag) => {
                refuse_anchor_or_tag(at, anchor, tag.is_some())?;
                stack.push(Open::Seq(at, Vec::new()));
                continue;
            }
            Event::MappingStart(anchor, tag) => {
                refuse_anchor_or_tag(at, anchor, tag.is_some())?;
                stack.push(Open::Map { at, entries: Vec::new(), pending_key: None, seen: HashSet::new() });
                continue;
            }
            Event::SequenceEnd | Event::MappingEnd => match stack.pop() {
                Some(Open::Seq(at, items)) => Node { at, value: NodeValue::Seq(items) },
                Some(Open::Map { at, entries, .. }) => Node { at, value: NodeValue::Map(entries) },
                None => continue,
            },
            Event::Alias(_) => {
                return Err(Error::at(at, "aliases (*name) are not accepted").with_hint("write the value out in full"));
            }
            Event::DocumentStart(_) if root.is_some() => {
                return Err(Error::at(at, "a second YAML document; the file must hold one"));
            }
            _ => continue,
        };
        match stack.last_mut() {
            None => root = Some(done),
            Some(Open::Seq(_, items)) => items.push(done),
            Some(Open::Map { entries, pending_key, seen, .. }) => match pending_key.take() {
                None => {
                    if let NodeValue::Scalar { text, .. } = &done.value
                        && !seen.insert(text.clone())
                    {
                        return Err(Error::at(done.at, format!("duplicate entry with key \"{text}\""))
                            .with_hint("each key may appear once in a mapping"));
                    }
                    *pending_key = Some(done);
                }
                Some(k) => entries.push((k, done)),
            },
        }
    }
    Ok(root.unwrap_or(Node {
        at: Pos { line: 1, column: 1 },
        value: NodeValue::Scalar { text: String::new(), plain: true },
    }))
}

fn refuse_anchor_or_tag(at: Pos, anchor: usize, tagged: bool) -> Result<(), Error> {
    if anchor != 0 {
        return Err(Error::at(at, "anchors (&name) are not accepted").with_hint("write each value out in full"));
    }
    if tagged {
        return Err(Error::at(at, "tags (!name) are not accepted").with_hint("write the plain value"));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    const DOC: &str = "title: x\nsettings:\n  bw: {default: 6 deg, doc: beam}\nblocks:\n  read:\n    kind: capture_reader\n    set:\n      path: $input\n  gate:\n    kind: lobe_gate\n    set: {lobes: a, guard: 2 us}\nwiring:\n  - read -> gate\n  # comment\n  - gate -> out\n";

    fn at(line: usize, column: usize) -> Pos {
        Pos { line, column }
    }

    #[test]
    fn finds_nested_keys_flow_keys_and_items() {
        let root = parse(DOC).unwrap();
        assert_eq!(root.locate(&[key("blocks"), key("read"), key("kind")]), at(6, 5));
        assert_eq!(root.locate(&[key("blocks"), key("read"), key("set"), key("path")]), at(8, 7));
        assert_eq!(root.locate(&[key("blocks"), key("gate")]), at(9, 3));
        assert_eq!(root.locate(&[key("blocks"), key("gate"), key("set"), key("guard")]), at(11, 21));
        assert_eq!(root.locate(&[key("settings"), key("bw"), key("doc")]), at(3, 24));
        assert_eq!(root.locate(&[key("wiring"), Seg::Index(1)]), at(15, 5));
        // A missing key falls back to its parent.
        assert_eq!(root.locate(&[key("blocks"), key("read"), key("nope")]), at(5, 3));
    }

    #[test]
    fn refuses_repeats_aliases_and_deep_nesting() {
        let e = parse("blocks:\n  a: 1\n  a: 2\n").unwrap_err();
        assert_eq!((e.at, e.message.as_str()), (at(3, 3), "duplicate entry with key \"a\""));
        let e = parse("a: &x [1, 2]\nb: [*x, *x]\n").unwrap_err();
        assert!(e.message.contains("anchors"), "{e:?}");
        let deep = "[".repeat(200) + &"]".repeat(200);
        assert!(parse(&deep).unwrap_err().message.contains("nested more than"));
        let e = parse("blocks:\n  a: {kind: pass\n").unwrap_err();
        assert!(e.message.starts_with("not valid YAML"), "{e:?}");
    }
}
