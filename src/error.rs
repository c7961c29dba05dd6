//! The one error type of the command and library, by kind, with its exit
//! code. An error that comes from another (a file system call, the capture
//! writer, a graph file) keeps it as its `source()`; the message of each
//! kind already says what the source says, so it is printed once.

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
    /// A file system call failed while doing `what` (exit 2).
    Io { what: String, source: std::io::Error },
    /// Writing a capture failed (exit 2).
    Write(crate::capture::CaptureError),
}

impl Error {
    /// A failed file system call, `what` naming what was being done and to which file.
    pub fn io(what: impl Into<String>) -> impl FnOnce(std::io::Error) -> Error {
        let what = what.into();
        move |source| Error::Io { what, source }
    }

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
            Error::Io { what, source } => write!(f, "{what}: {source}"),
            Error::Write(e) => write!(f, "{e}"),
        }
    }
}

impl std::error::Error for Error {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Error::Graph(g) => Some(g),
            Error::Io { source, .. } => Some(source),
            Error::Write(e) => Some(e),
            _ => None,
        }
    }
}

impl From<crate::capture::CaptureError> for Error {
    fn from(e: crate::capture::CaptureError) -> Self {
        Error::Write(e)
    }
}

impl From<GraphError> for Error {
    fn from(g: GraphError) -> Self {
        Error::Graph(g)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::error::Error as _;

    #[test]
    fn io_errors_are_kept_as_sources() {
        let e = Error::io("cannot read graphs/x.yaml")(std::io::Error::new(std::io::ErrorKind::NotFound, "gone"));
        assert_eq!(e.to_string(), "cannot read graphs/x.yaml: gone");
        assert_eq!(e.exit_code(), 2);
        let io = e.source().and_then(|s| s.downcast_ref::<std::io::Error>()).expect("the io error is the source");
        assert_eq!(io.kind(), std::io::ErrorKind::NotFound);
    }

    #[test]
    fn a_capture_writer_error_chains_to_the_file_system() {
        let dir = std::env::temp_dir().join(format!("lobeflow-error-chain-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).unwrap();
        // A file where the output's folder would have to be.
        std::fs::write(dir.join("plain"), "a file").unwrap();
        let config = crate::capture::write::WriterConfig::new(crate::capture::write::WriteFormat::WavF32, 48_000.0);
        let Err(write) = crate::capture::write::CaptureWriter::create(&dir.join("plain/x.wav"), config) else {
            panic!("a capture under a file cannot be written")
        };
        let e = Error::from(write);
        assert_eq!(e.exit_code(), 2);
        let write = e.source().expect("the writer's error is the source");
        assert!(write.to_string().contains("plain/x.wav"), "{write}");
        assert!(write.source().and_then(|s| s.downcast_ref::<std::io::Error>()).is_some(), "then the io error");
        let graph = Error::from(crate::graph::GraphError {
            file: "g.yaml".into(),
            line: 3,
            column: 5,
            message: "m".into(),
            hint: None,
        });
        assert!(graph.source().is_some_and(|s| s.to_string() == "g.yaml:3:5: m"));
    }
}
