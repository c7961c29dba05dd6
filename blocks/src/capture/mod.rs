//! Captures: reading recordings (WAV, raw interleaved IQ, SigMF, standard
//! input) in chunks, and writing derived streams.

pub mod datatype;
pub mod error;
pub mod live;
mod mapped;
pub mod raw;
pub mod reader;
pub mod roles;
pub mod sigmf;
pub mod sigmf_meta;
pub mod source;
pub mod wav;

pub use datatype::{DataType, SampleFormat};
pub use error::{CaptureError, Place};
pub mod sink;
pub mod write;
pub use reader::{CaptureInfo, CaptureReader, Format, OpenOptions, open};
pub use roles::{NonFinite, Role, RoleMap};

/// The capture block kinds, registered by [`crate::standard_registry`].
pub const ALL: &[crate::BlockSpec] = &[source::SPEC, sink::SPEC];
