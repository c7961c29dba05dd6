//! The one reader of configuration files: graph files, sample manifests,
//! scenarios and params files.
//!
//! YAML text becomes a tree of nodes that keep their line and column
//! (`tree`); a serde deserializer over that tree (`de`) fills the typed
//! structs each file type declares. Every error therefore carries a place,
//! and [`Error::in_file`] turns it into `FILE:LINE:COL: what (hint)`.
//! Values that later checks must point at are read as [`Located`].

mod de;
mod tree;

pub use de::{Entries, Located, ParamValue, from_node};
pub use tree::{MAX_DEPTH, Node, NodeValue, Pos, Seg, key, parse};

use crate::graph::GraphError;
use std::fmt;
use std::path::Path;

/// Words a file type once spelled differently: (old, the word now used).
/// An old spelling is refused with a hint naming its replacement.
pub const RETIRED_WORDS: &[(&str, &str)] =
    &[("pulse_length", "pulse"), ("first_lobe_start", "first_start"), ("one_way", "one"), ("two_way", "two")];

/// What is wrong with a configuration value, and where; the file is added
/// by the caller, who knows it.
#[derive(Clone, Debug, PartialEq)]
pub struct Error {
    /// (0, 0) until the deserializer places it at the node it concerns.
    pub at: Pos,
    pub message: String,
    pub hint: Option<String>,
}

impl Error {
    pub fn at(at: Pos, message: impl Into<String>) -> Error {
        Error { at, message: message.into(), hint: None }
    }

    pub fn with_hint(mut self, hint: impl Into<String>) -> Error {
        self.hint = Some(hint.into());
        self
    }

    /// Place an error that has no place yet at `at`.
    fn placed(mut self, at: Pos) -> Error {
        if self.at.line == 0 {
            self.at = at;
        }
        self
    }

    /// The error as a graph error in `file`.
    pub fn in_file(self, file: &Path) -> GraphError {
        GraphError {
            file: file.to_path_buf(),
            line: self.at.line,
            column: self.at.column,
            message: self.message,
            hint: self.hint,
        }
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}:{}: {}", self.at.line, self.at.column, self.message)?;
        if let Some(h) = &self.hint {
            write!(f, " ({h})")?;
        }
        Ok(())
    }
}

impl std::error::Error for Error {}

/// A hint for a word that is not one of `allowed`: its replacement if it
/// is a retired spelling, else the closest allowed word, else the list.
pub fn word_hint(word: &str, allowed: &[&str]) -> String {
    if let Some((_, new)) = RETIRED_WORDS.iter().find(|(old, _)| *old == word) {
        return format!("'{word}' is now written '{new}'");
    }
    match lobeflow_blocks::closest(word, allowed.iter().copied()) {
        Some(c) => format!("did you mean '{c}'?"),
        None if allowed.is_empty() => "nothing is accepted here".to_string(),
        None => format!("allowed: {}", allowed.join(", ")),
    }
}

impl serde::de::Error for Error {
    fn custom<T: fmt::Display>(msg: T) -> Error {
        Error { at: Pos::default(), message: msg.to_string(), hint: None }
    }

    fn unknown_field(field: &str, expected: &'static [&'static str]) -> Error {
        Error::custom(format!("unknown key '{field}'")).with_hint(word_hint(field, expected))
    }

    fn unknown_variant(variant: &str, expected: &'static [&'static str]) -> Error {
        Error::custom(format!("unknown value '{variant}'")).with_hint(word_hint(variant, expected))
    }

    fn missing_field(field: &'static str) -> Error {
        Error::custom(format!("missing key '{field}'"))
    }

    fn duplicate_field(field: &'static str) -> Error {
        Error::custom(format!("key '{field}' given twice"))
    }
}

/// A parsed file: its text, its tree (for positions) and the path that
/// names it in messages.
#[derive(Debug)]
pub struct Document {
    pub path: std::path::PathBuf,
    pub text: String,
    pub root: Node,
}

impl Document {
    /// Parse `text`; syntax errors name `path`, line and column.
    pub fn parse(path: &Path, text: String) -> Result<Document, GraphError> {
        let root = parse(&text).map_err(|e| e.in_file(path))?;
        Ok(Document { path: path.to_path_buf(), text, root })
    }

    /// Read `path` (at most [`crate::graph::file::MAX_TEXT_BYTES`]) and parse it.
    pub fn load(path: &Path) -> Result<Document, GraphError> {
        let text = crate::graph::file::read_text(path)?;
        Document::parse(path, text)
    }

    /// The whole file as `T`.
    pub fn read<'a, T: serde::Deserialize<'a>>(&'a self) -> Result<T, GraphError> {
        from_node(&self.root).map_err(|e| e.in_file(&self.path))
    }

    /// Where the value at `path` is written (see [`Node::locate`]).
    pub fn locate(&self, path: &[Seg]) -> Pos {
        self.root.locate(path)
    }

    /// An error about the value at `path`.
    pub fn error(&self, path: &[Seg], message: impl Into<String>) -> GraphError {
        Error::at(self.locate(path), message).in_file(&self.path)
    }
}
