//! Graph errors: what is wrong, where (file:line:column) and a hint.

use std::fmt;
use std::path::PathBuf;

#[derive(Debug, Clone, PartialEq)]
pub struct GraphError {
    pub file: PathBuf,
    /// 1-based; 0 when the problem is with the file as a whole.
    pub line: usize,
    pub column: usize,
    pub message: String,
    pub hint: Option<String>,
}

impl GraphError {
    pub fn with_hint(mut self, hint: impl Into<String>) -> Self {
        self.hint = Some(hint.into());
        self
    }

    /// Hint the closest candidate ("did you mean"), or `otherwise`.
    pub fn hint_closest<'a>(self, word: &str, candidates: impl Iterator<Item = &'a str>, otherwise: &str) -> Self {
        match lobeflow_blocks::closest(word, candidates) {
            Some(c) => self.with_hint(format!("did you mean '{c}'?")),
            None if otherwise.is_empty() => self,
            None => self.with_hint(otherwise.to_string()),
        }
    }
}

impl fmt::Display for GraphError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.line > 0 {
            write!(f, "{}:{}:{}: {}", self.file.display(), self.line, self.column, self.message)?;
        } else {
            write!(f, "{}: {}", self.file.display(), self.message)?;
        }
        if let Some(h) = &self.hint {
            write!(f, "\n  hint: {h}")?;
        }
        Ok(())
    }
}

impl std::error::Error for GraphError {}
