//! Captures: reading recordings (WAV, raw interleaved IQ, SigMF, standard
//! input) in chunks, and writing derived streams.

pub mod datatype;
pub mod sigmf_meta;

pub use datatype::{DataType, SampleFormat};
pub mod sink;
pub mod write;
