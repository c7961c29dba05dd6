//! The one error type of the command and library, with its exit code.

use crate::graph::GraphError;
use std::fmt;

#[derive(Debug)]
pub enum Error {
    /// The command line was wrong (exit 2).
    Usage(String),
    /// A graph or params file is wrong (exit 2).
    Graph(GraphError),
    /// An input file is missing, unreadable or malformed (exit 2).
    Input(String),
    /// A block failed while the graph ran (exit 2: almost always bad input).
    Block { block: String, kind: String, message: String },
    /// A check or regression failed (exit 1).
    Failed(String),
    /// Stopped by Ctrl-C or by the embedding application (exit 130).
    Cancelled,
    /// Writing output failed (exit 2).
    Output(String),
}

impl Error {
    /// The process exit code the command uses for this error.
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::Failed(_) => 1,
            Error::Cancelled => 130,
            _ => 2,
        }
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Error::Usage(m) | Error::Input(m) | Error::Failed(m) | Error::Output(m) => write!(f, "{m}"),
            Error::Graph(g) => write!(f, "{g}"),
            Error::Block { block, kind, message } => {
                if kind.is_empty() {
                    write!(f, "block '{block}': {message}")
                } else {
                    write!(f, "block '{block}' ({kind}): {message}")
                }
            }
            Error::Cancelled => write!(f, "stopped before the end; no outputs were written"),
        }
    }
}

impl std::error::Error for Error {}

impl From<GraphError> for Error {
    fn from(g: GraphError) -> Self {
        Error::Graph(g)
    }
}
