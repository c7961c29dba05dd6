//! Errors of parameters and block construction, as types a caller can match
//! on; their `Display` is the message a person reads.

use std::error::Error;
use std::fmt;
use std::path::PathBuf;

/// A checked parameter that a block could not use.
#[derive(Clone, Debug, PartialEq)]
pub enum ParamError {
    /// The graph gave no value and the declaration has no default.
    Missing { name: String },
    /// The value has another type than the getter reads (`expected` names it).
    WrongType { name: String, value: String, expected: &'static str },
    /// A choice parameter holds a word the block does not know.
    UnknownWord { name: String, word: String, accepted: &'static [&'static str] },
    /// A count of samples, pulses or bins that is out of range once the
    /// stream's rate turns it into seconds or metres.
    OutOfRange { name: String, value: String, allowed: String },
    /// A time given in pulses, on a stream without a known pulse interval.
    NoPulseInterval { name: String },
    /// A value that is valid on its own but not for this block (an even
    /// filter length, a cutoff above the input's band).
    Invalid { name: String, reason: String },
}

impl ParamError {
    /// The parameter the error is about.
    pub fn name(&self) -> &str {
        match self {
            ParamError::Missing { name }
            | ParamError::WrongType { name, .. }
            | ParamError::UnknownWord { name, .. }
            | ParamError::OutOfRange { name, .. }
            | ParamError::NoPulseInterval { name }
            | ParamError::Invalid { name, .. } => name,
        }
    }

    /// A value of `name` that the block refuses, and why.
    pub fn invalid(name: &str, reason: impl Into<String>) -> Self {
        ParamError::Invalid { name: name.to_string(), reason: reason.into() }
    }
}

impl fmt::Display for ParamError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ParamError::Missing { name } => write!(f, "parameter '{name}' has no value"),
            ParamError::WrongType { name, value, expected } => {
                write!(f, "parameter '{name}' is {value}, not {expected}")
            }
            ParamError::UnknownWord { name, word, accepted } => {
                write!(f, "parameter '{name}': '{word}' is not one of {}", accepted.join(", "))
            }
            ParamError::OutOfRange { name, value, allowed } => {
                write!(f, "parameter '{name}' is {value}, out of range (allowed{allowed})")
            }
            ParamError::NoPulseInterval { name } => {
                write!(f, "parameter '{name}' is given in pulses, but this stream has no pulse interval")
            }
            ParamError::Invalid { name, reason } => write!(f, "parameter '{name}': {reason}"),
        }
    }
}

impl Error for ParamError {}

/// Legacy blocks still report errors as text; a typed error reads the same.
impl From<ParamError> for String {
    fn from(e: ParamError) -> String {
        e.to_string()
    }
}

/// Why a block could not be built from its checked parameters.
#[derive(Debug)]
pub enum BuildError {
    /// A parameter the block could not use.
    Param(ParamError),
    /// A file the block reads or creates could not be opened.
    File { path: PathBuf, source: std::io::Error },
    /// Something the block's constructor relies on failed (a capture's
    /// header, a described program), with the error underneath.
    Failed { what: String, source: Box<dyn Error + Send + Sync> },
    /// A block still on the text-error constructor refused its parameters.
    Refused(String),
}

impl BuildError {
    /// `what` failed because of `source`.
    pub fn failed(what: impl Into<String>, source: impl Into<Box<dyn Error + Send + Sync>>) -> Self {
        BuildError::Failed { what: what.into(), source: source.into() }
    }
}

impl fmt::Display for BuildError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            BuildError::Param(e) => write!(f, "{e}"),
            BuildError::File { path, source } => write!(f, "{}: {source}", path.display()),
            BuildError::Failed { what, source } if what.is_empty() => write!(f, "{source}"),
            BuildError::Failed { what, source } => write!(f, "{what}: {source}"),
            BuildError::Refused(why) => write!(f, "{why}"),
        }
    }
}

impl Error for BuildError {
    fn source(&self) -> Option<&(dyn Error + 'static)> {
        match self {
            // Transparent: the parameter error is this error.
            BuildError::Param(e) => e.source(),
            BuildError::File { source, .. } => Some(source),
            BuildError::Failed { source, .. } => Some(source.as_ref()),
            BuildError::Refused(_) => None,
        }
    }
}

impl From<ParamError> for BuildError {
    fn from(e: ParamError) -> Self {
        BuildError::Param(e)
    }
}

impl From<String> for BuildError {
    fn from(why: String) -> Self {
        BuildError::Refused(why)
    }
}

impl From<&str> for BuildError {
    fn from(why: &str) -> Self {
        BuildError::Refused(why.to_string())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn build_errors_keep_their_source() {
        let io = std::io::Error::new(std::io::ErrorKind::NotFound, "no such file");
        let e = BuildError::File { path: "taps.csv".into(), source: io };
        assert_eq!(e.to_string(), "taps.csv: no such file");
        assert!(e.source().is_some_and(|s| s.to_string() == "no such file"));
        let p = BuildError::from(ParamError::invalid("taps", "must be odd"));
        assert_eq!(p.to_string(), "parameter 'taps': must be odd");
        assert!(matches!(p, BuildError::Param(ParamError::Invalid { ref name, .. }) if name == "taps"));
    }
}
