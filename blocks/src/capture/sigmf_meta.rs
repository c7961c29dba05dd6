//! The SigMF metadata file (`.sigmf-meta`, JSON), spec 1.2.x: the parts this
//! project reads and writes. Unknown fields are kept so a derived recording
//! carries them on.
//!
//! Reading of `core:sample_start` and `core:offset` (the spec leaves room):
//! sample indices in lobeflow count from the first sample of the data file;
//! `core:sample_start` of a capture segment is an index into that file, and
//! `core:offset` (global) is only a note of where the recording sat in a
//! larger stream, kept but not added to any index.

use serde::{Deserialize, Serialize};
use serde_json::{Map, Value};

#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct SigmfMeta {
    pub global: Global,
    pub captures: Vec<Capture>,
    pub annotations: Vec<Annotation>,
}

#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Global {
    #[serde(rename = "core:datatype")]
    pub datatype: String,
    #[serde(rename = "core:version")]
    pub version: String,
    #[serde(rename = "core:sample_rate", skip_serializing_if = "Option::is_none", default)]
    pub sample_rate: Option<f64>,
    #[serde(rename = "core:num_channels", skip_serializing_if = "Option::is_none", default)]
    pub num_channels: Option<u64>,
    #[serde(rename = "core:offset", skip_serializing_if = "Option::is_none", default)]
    pub offset: Option<u64>,
    #[serde(rename = "core:description", skip_serializing_if = "Option::is_none", default)]
    pub description: Option<String>,
    #[serde(flatten)]
    pub other: Map<String, Value>,
}

#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Capture {
    #[serde(rename = "core:sample_start")]
    pub sample_start: u64,
    #[serde(rename = "core:frequency", skip_serializing_if = "Option::is_none", default)]
    pub frequency: Option<f64>,
    #[serde(rename = "core:datetime", skip_serializing_if = "Option::is_none", default)]
    pub datetime: Option<String>,
    #[serde(flatten)]
    pub other: Map<String, Value>,
}

#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Annotation {
    #[serde(rename = "core:sample_start")]
    pub sample_start: u64,
    #[serde(rename = "core:sample_count", skip_serializing_if = "Option::is_none", default)]
    pub sample_count: Option<u64>,
    #[serde(rename = "core:label", skip_serializing_if = "Option::is_none", default)]
    pub label: Option<String>,
    #[serde(rename = "core:comment", skip_serializing_if = "Option::is_none", default)]
    pub comment: Option<String>,
    #[serde(flatten)]
    pub other: Map<String, Value>,
}

/// The spec version written by this project.
pub const SIGMF_VERSION: &str = "1.2.0";
