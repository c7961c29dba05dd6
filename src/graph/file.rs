//! Reading one graph file into its parts, without judging what they mean.
//!
//! A graph file is a YAML mapping with these keys (all but `blocks` optional):
//!
//! ```yaml
//! title: two-lobe beacon tracker
//! about: one paragraph for `lobeflow check`
//! settings:                      # the installation's numbers, overridable
//!   beamwidth: {default: 12, unit: deg, doc: one-way 3 dB beamwidth}
//! blocks:                     # named instances
//!   read:  {kind: capture_reader, set: {path: $input}}
//!   front: {use: parts/front-end.yaml, set: {rate: $rate}}   # a composite
//! wiring:                     # chains of ports, left to right
//!   - read -> front -> pairs.dwells
//! exposes:                    # only in files used as composites
//!   inputs: {samples: dc.samples}
//!   outputs: {dwells: integrate.dwells}
//! ```

use super::error::GraphError;
use crate::config::{Document, Entries, Located, ParamValue, Pos, Seg};
use lobeflow_blocks::RawValue;
use serde::Deserialize;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// A graph file's text and tree, kept for positions in later messages.
#[derive(Debug)]
pub struct Source {
    pub path: PathBuf,
    pub text: String,
    doc: Document,
}

impl Source {
    /// 1-based (line, column) of the key path `at` (or its deepest ancestor).
    pub fn locate(&self, at: &[Seg]) -> (usize, usize) {
        let p = self.doc.locate(at);
        (p.line, p.column)
    }
    /// An error at the key path `at`.
    pub fn error(&self, at: &[Seg], message: impl Into<String>) -> GraphError {
        self.doc.error(at, message)
    }
    /// An error at a position read with the value.
    pub fn error_at(&self, at: Pos, message: impl Into<String>) -> GraphError {
        crate::config::Error::at(at, message).in_file(&self.path)
    }
    /// Directory relative paths in this file resolve against.
    pub fn dir(&self) -> PathBuf {
        self.path.parent().map(Path::to_path_buf).unwrap_or_default()
    }
}

#[derive(Debug, Clone)]
pub struct KnobDecl {
    pub name: String,
    pub default: Option<RawValue>,
    pub unit: Option<String>,
    pub doc: String,
    /// Where the knob's name is written.
    pub at: Pos,
}

#[derive(Debug, Clone)]
pub enum BlockBody {
    Kind(String),
    Use(String),
}

#[derive(Debug, Clone)]
pub struct BlockDecl {
    pub name: String,
    pub body: BlockBody,
    pub set: Vec<(String, RawValue)>,
    /// The block's own description (`doc:`), shown by `check`.
    pub doc: String,
    /// Where the block's name is written.
    pub at: Pos,
}

#[derive(Debug, Clone, Default)]
pub struct Exposes {
    pub inputs: Vec<(String, String)>,
    pub outputs: Vec<(String, String)>,
}

#[derive(Debug)]
pub struct GraphFile {
    pub source: Arc<Source>,
    pub title: String,
    pub about: String,
    pub settings: Vec<KnobDecl>,
    pub blocks: Vec<BlockDecl>,
    pub wiring: Vec<String>,
    pub exposes: Exposes,
}

/// The file as serde reads it; [`GraphFile::parse`] then checks names and
/// the choice between `kind` and `use`.
#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawGraph {
    #[serde(default)]
    title: String,
    #[serde(default)]
    about: String,
    #[serde(default)]
    settings: Entries<Located<String>, RawKnob>,
    blocks: Option<Entries<Located<String>, RawBlock>>,
    #[serde(default)]
    wiring: Vec<String>,
    #[serde(default)]
    exposes: RawExposes,
}

/// A knob: `name: value`, or a mapping with default, unit, doc.
enum RawKnob {
    Value(RawValue),
    Full(FullKnob),
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FullKnob {
    default: Option<ParamValue>,
    unit: Option<String>,
    #[serde(default)]
    doc: String,
}

impl<'de> Deserialize<'de> for RawKnob {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        // A mapping is the full form; anything else is the value itself.
        struct V;
        impl<'de> serde::de::Visitor<'de> for V {
            type Value = RawKnob;
            fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
                f.write_str("a value, or a mapping with default, unit, doc")
            }
            fn visit_map<A: serde::de::MapAccess<'de>>(self, map: A) -> Result<RawKnob, A::Error> {
                FullKnob::deserialize(serde::de::value::MapAccessDeserializer::new(map)).map(RawKnob::Full)
            }
            fn visit_seq<A: serde::de::SeqAccess<'de>>(self, seq: A) -> Result<RawKnob, A::Error> {
                ParamValue::deserialize(serde::de::value::SeqAccessDeserializer::new(seq)).map(|p| RawKnob::Value(p.0))
            }
            fn visit_bool<E: serde::de::Error>(self, v: bool) -> Result<RawKnob, E> {
                Ok(RawKnob::Value(RawValue::Bool(v)))
            }
            fn visit_i64<E: serde::de::Error>(self, v: i64) -> Result<RawKnob, E> {
                Ok(RawKnob::Value(RawValue::Number(v as f64)))
            }
            fn visit_f64<E: serde::de::Error>(self, v: f64) -> Result<RawKnob, E> {
                Ok(RawKnob::Value(RawValue::Number(v)))
            }
            fn visit_str<E: serde::de::Error>(self, v: &str) -> Result<RawKnob, E> {
                Ok(RawKnob::Value(RawValue::Text(v.to_string())))
            }
        }
        d.deserialize_any(V)
    }
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawBlock {
    kind: Option<String>,
    #[serde(rename = "use")]
    use_file: Option<String>,
    #[serde(default)]
    set: Entries<String, ParamValue>,
    #[serde(default)]
    doc: String,
}

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields)]
struct RawExposes {
    #[serde(default)]
    inputs: Entries<String, String>,
    #[serde(default)]
    outputs: Entries<String, String>,
}

/// Most bytes a graph, params, manifest or scenario file may have: real
/// ones are kilobytes, a graph of 20 000 blocks about 1.5 MB, and the parsed
/// YAML takes tens of times the text, so this keeps parsing far below the
/// memory ceiling (and a path naming a device or FIFO cannot fill memory).
pub const MAX_TEXT_BYTES: u64 = 4 << 20;

/// Read at most [`MAX_TEXT_BYTES`] of text from `path`.
pub fn read_limited(path: &Path) -> std::io::Result<String> {
    use std::io::Read;
    let mut text = String::new();
    std::fs::File::open(path)?.take(MAX_TEXT_BYTES + 1).read_to_string(&mut text)?;
    if text.len() as u64 > MAX_TEXT_BYTES {
        return Err(std::io::Error::new(
            std::io::ErrorKind::InvalidData,
            format!("longer than {MAX_TEXT_BYTES} bytes (4 MiB), more than lobeflow reads as a text file"),
        ));
    }
    Ok(text)
}

/// Read a file's text, or an error naming it.
pub fn read_text(path: &Path) -> Result<String, GraphError> {
    read_limited(path).map_err(|e| GraphError {
        file: path.to_path_buf(),
        line: 0,
        column: 0,
        message: format!("cannot read: {e}"),
        hint: None,
    })
}

impl GraphFile {
    pub fn load(path: &Path) -> Result<GraphFile, GraphError> {
        let text = read_text(path)?;
        Self::parse(path, text)
    }

    pub fn parse(path: &Path, text: String) -> Result<GraphFile, GraphError> {
        let doc = Document::parse(path, text)?;
        if !matches!(doc.root.value, crate::config::NodeValue::Map(_)) {
            return Err(doc.error(&[], "a graph file must be a mapping (title, settings, blocks, wiring, exposes)"));
        }
        let raw: RawGraph = doc.read()?;
        let settings = raw
            .settings
            .0
            .into_iter()
            .map(|(name, body)| {
                check_name(path, &name, "knob")?;
                Ok(match body {
                    RawKnob::Value(v) => {
                        KnobDecl { name: name.value, default: Some(v), unit: None, doc: String::new(), at: name.at }
                    }
                    RawKnob::Full(k) => KnobDecl {
                        name: name.value,
                        default: k.default.map(|p| p.0),
                        unit: k.unit,
                        doc: k.doc,
                        at: name.at,
                    },
                })
            })
            .collect::<Result<Vec<_>, GraphError>>()?;
        let Some(raw_blocks) = raw.blocks else {
            return Err(doc.error(&[], "a graph file needs a 'blocks' mapping"));
        };
        let blocks = raw_blocks
            .0
            .into_iter()
            .map(|(name, b)| block_decl(path, name, b))
            .collect::<Result<Vec<_>, GraphError>>()?;
        let exposes = Exposes { inputs: raw.exposes.inputs.0, outputs: raw.exposes.outputs.0 };
        let text = doc.text.clone();
        let source = Arc::new(Source { path: path.to_path_buf(), text, doc });
        Ok(GraphFile { source, title: raw.title, about: raw.about, settings, blocks, wiring: raw.wiring, exposes })
    }
}

fn block_decl(path: &Path, name: Located<String>, b: RawBlock) -> Result<BlockDecl, GraphError> {
    check_name(path, &name, "block")?;
    let at = name.at;
    let name = name.value;
    let body = match (b.kind, b.use_file) {
        (Some(kind), None) => BlockBody::Kind(kind),
        (None, Some(file)) => BlockBody::Use(file),
        (Some(_), Some(_)) => {
            return Err(crate::config::Error::at(at, format!("block '{name}' has both 'kind' and 'use'; give one"))
                .in_file(path));
        }
        (None, None) => {
            return Err(crate::config::Error::at(
                at,
                format!("block '{name}' needs a 'kind' (a block kind) or 'use' (a graph file to include)"),
            )
            .with_hint("`lobeflow blocks` lists the kinds")
            .in_file(path));
        }
    };
    let set = b.set.0.into_iter().map(|(k, v)| (k, v.0)).collect();
    Ok(BlockDecl { name, body, set, doc: b.doc, at })
}

fn check_name(path: &Path, name: &Located<String>, what: &str) -> Result<(), GraphError> {
    let ok = !name.is_empty() && name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-');
    if ok {
        Ok(())
    } else {
        Err(crate::config::Error::at(
            name.at,
            format!("{what} name '{}' may use only letters, digits, '_' and '-'", name.value),
        )
        .in_file(path))
    }
}
