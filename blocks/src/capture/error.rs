//! What can go wrong reading or writing a capture, by kind. Every error
//! names the file; the `Display` text is the message a person reads, and
//! `source()` leads to the file-system, JSON or WAV-encoder error beneath.

use crate::{BlockError, BuildError};
use std::error::Error;
use std::fmt;
use std::path::PathBuf;

/// Where in a file a header problem lies.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Place {
    /// A part of a binary header (e.g. "the 'fmt ' chunk") at a byte offset.
    Bytes { part: String, offset: u64 },
    /// A metadata field (e.g. "global core:num_channels", "captures[2]").
    Field(String),
    /// The file as a whole, or its first bytes.
    Whole,
}

/// A capture that could not be read or written.
#[derive(Debug)]
pub enum CaptureError {
    /// A file could not be opened, read, created or written; `offset` is
    /// the byte offset of a failed read when known.
    Io { path: String, doing: &'static str, offset: Option<u64>, source: std::io::Error },
    /// No file by that name (`hint` says what was looked for).
    NotFound { path: String, hint: String },
    /// A header field or metadata entry that is malformed or contradicts
    /// the file.
    BadHeader { path: String, place: Place, problem: String },
    /// Metadata that is not valid JSON or not SigMF, with the parser's error.
    BadMetadata { path: String, problem: String, source: serde_json::Error },
    /// A container, sample encoding, datatype or size outside what lobeflow
    /// reads or writes.
    Unsupported { path: String, what: String },
    /// A setting that is missing, out of range, or contradicted by the file
    /// (rate, channels, datatype, format, writer settings).
    Setting { path: String, problem: String },
    /// Channel roles that do not fit the capture's channels.
    Roles { path: String, problem: String },
    /// Sample data that ends early or inside a frame: `offset` is the byte
    /// offset where it ends, `sample` the first sample not whole.
    Truncated { path: String, offset: u64, sample: u64, problem: String },
    /// The WAV encoder refused while writing.
    WavEncoder { path: PathBuf, doing: &'static str, source: hound::Error },
    /// The SigMF metadata of a written capture could not be encoded.
    MetaEncoding { path: PathBuf, source: serde_json::Error },
}

impl CaptureError {
    /// A failed file operation on `path`, for `map_err`.
    pub fn io<'a>(path: &'a str, doing: &'static str) -> impl Fn(std::io::Error) -> CaptureError + 'a {
        move |source| CaptureError::Io { path: path.to_string(), doing, offset: None, source }
    }

    /// A header problem at `place` in `path`.
    pub fn header(path: &str, place: Place, problem: impl Into<String>) -> CaptureError {
        CaptureError::BadHeader { path: path.to_string(), place, problem: problem.into() }
    }

    /// A problem with the file as a whole (its first bytes, its size).
    pub fn whole(path: &str, problem: impl Into<String>) -> CaptureError {
        CaptureError::header(path, Place::Whole, problem)
    }

    /// A metadata field of `path` that is wrong.
    pub fn field(path: &str, field: impl Into<String>, problem: impl Into<String>) -> CaptureError {
        CaptureError::header(path, Place::Field(field.into()), problem)
    }

    pub fn unsupported(path: &str, what: impl Into<String>) -> CaptureError {
        CaptureError::Unsupported { path: path.to_string(), what: what.into() }
    }

    pub fn setting(path: &str, problem: impl Into<String>) -> CaptureError {
        CaptureError::Setting { path: path.to_string(), problem: problem.into() }
    }

    /// The file the error is about (empty when there is none, e.g. a
    /// datatype name checked on its own).
    pub fn path(&self) -> String {
        match self {
            CaptureError::Io { path, .. }
            | CaptureError::NotFound { path, .. }
            | CaptureError::BadHeader { path, .. }
            | CaptureError::BadMetadata { path, .. }
            | CaptureError::Unsupported { path, .. }
            | CaptureError::Setting { path, .. }
            | CaptureError::Roles { path, .. }
            | CaptureError::Truncated { path, .. } => path.clone(),
            CaptureError::WavEncoder { path, .. } | CaptureError::MetaEncoding { path, .. } => {
                path.display().to_string()
            }
        }
    }

    /// The first sample the error concerns, when it is about the data.
    pub fn sample(&self) -> Option<u64> {
        match self {
            CaptureError::Truncated { sample, .. } => Some(*sample),
            _ => None,
        }
    }

    /// A name checked on its own (a datatype, a format), then found in
    /// `file`: the same error, naming the file.
    pub fn in_file(self, file: &str) -> CaptureError {
        match self {
            CaptureError::Unsupported { path, what } if path.is_empty() => CaptureError::unsupported(file, what),
            e => e,
        }
    }
}

/// `path: ` before a message, or nothing for an error about no file.
fn file_prefix(f: &mut fmt::Formatter<'_>, path: &str) -> fmt::Result {
    if path.is_empty() { Ok(()) } else { write!(f, "{path}: ") }
}

impl fmt::Display for CaptureError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if let CaptureError::WavEncoder { path, doing, source } = self {
            return write!(f, "{}: {doing}: {source}", path.display());
        }
        if let CaptureError::MetaEncoding { path, source } = self {
            return write!(f, "{}: cannot encode the SigMF metadata: {source}", path.display());
        }
        file_prefix(f, &self.path())?;
        match self {
            CaptureError::Io { doing, offset: Some(at), source, .. } => {
                write!(f, "{doing} at byte offset {at}: {source}")
            }
            CaptureError::Io { doing, offset: None, source, .. } => write!(f, "{doing}: {source}"),
            CaptureError::NotFound { hint, .. } => write!(f, "{hint}"),
            CaptureError::BadHeader { place: Place::Bytes { part, offset }, problem, .. } => {
                write!(f, "{part} at byte offset {offset} {problem}")
            }
            CaptureError::BadHeader { place: Place::Field(field), problem, .. } => write!(f, "{field}: {problem}"),
            CaptureError::BadHeader { place: Place::Whole, problem, .. }
            | CaptureError::BadMetadata { problem, .. }
            | CaptureError::Setting { problem, .. }
            | CaptureError::Roles { problem, .. } => write!(f, "{problem}"),
            CaptureError::Truncated { problem, sample, .. } => write!(f, "{problem} (at sample {sample})"),
            CaptureError::Unsupported { what, .. } => write!(f, "{what}"),
            CaptureError::WavEncoder { .. } | CaptureError::MetaEncoding { .. } => Ok(()),
        }
    }
}

impl Error for CaptureError {
    fn source(&self) -> Option<&(dyn Error + 'static)> {
        match self {
            CaptureError::Io { source, .. } => Some(source),
            CaptureError::BadMetadata { source, .. } | CaptureError::MetaEncoding { source, .. } => Some(source),
            CaptureError::WavEncoder { source, .. } => Some(source),
            _ => None,
        }
    }
}

/// A capture error met while samples flow stops the block at its sample.
impl From<CaptureError> for BlockError {
    fn from(e: CaptureError) -> BlockError {
        match e {
            // The block error says the sample itself.
            CaptureError::Truncated { path, sample, problem, .. } => {
                BlockError::at(format!("{path}: {problem}"), sample)
            }
            e => BlockError::new(e.to_string()),
        }
    }
}

/// A capture that cannot be opened stops the build, its error kept as the source.
impl From<CaptureError> for BuildError {
    fn from(e: CaptureError) -> BuildError {
        BuildError::failed("", e)
    }
}

/// Parameter and synthesizer errors are messages; the capture error says it all.
impl From<CaptureError> for String {
    fn from(e: CaptureError) -> String {
        e.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn messages_name_file_and_place_and_keep_their_source() {
        let e = CaptureError::header(
            "x.wav",
            Place::Bytes { part: "the 'fmt ' chunk".into(), offset: 12 },
            "has 8 bytes; it must have 16 to 1024",
        );
        assert_eq!(e.to_string(), "x.wav: the 'fmt ' chunk at byte offset 12 has 8 bytes; it must have 16 to 1024");
        let e = CaptureError::field("r.sigmf-meta", "global core:num_channels", "is 0");
        assert_eq!(e.to_string(), "r.sigmf-meta: global core:num_channels: is 0");
        let io = std::io::Error::new(std::io::ErrorKind::PermissionDenied, "denied");
        let e = CaptureError::io("x.cu8", "cannot open the raw capture")(io);
        assert_eq!(e.to_string(), "x.cu8: cannot open the raw capture: denied");
        assert_eq!(e.source().map(|s| s.to_string()).as_deref(), Some("denied"));
        let e = CaptureError::Truncated { path: "t.wav".into(), offset: 194, sample: 37, problem: "ends".into() };
        let b = BlockError::from(e);
        assert_eq!((b.message.as_str(), b.at_sample), ("t.wav: ends", Some(37)));
        assert_eq!(b.to_string(), "t.wav: ends (at sample 37)");
    }
}
