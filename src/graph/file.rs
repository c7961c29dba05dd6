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
use super::locate::{Positions, Seg, key};
use lobeflow_blocks::RawValue;
use serde_yaml::Value;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// A graph file's text, kept for positions in later messages.
#[derive(Debug)]
pub struct Source {
    pub path: PathBuf,
    pub text: String,
    /// Key positions, indexed on first use.
    positions: std::sync::OnceLock<Positions>,
}

impl Source {
    pub fn new(path: PathBuf, text: String) -> Source {
        Source { path, text, positions: std::sync::OnceLock::new() }
    }
    /// 1-based (line, column) of the key path `at` (or its deepest ancestor).
    pub fn locate(&self, at: &[Seg]) -> (usize, usize) {
        self.positions.get_or_init(|| Positions::of(&self.text)).find(at)
    }
    /// An error at the key path `at`.
    pub fn error(&self, at: &[Seg], message: impl Into<String>) -> GraphError {
        let (line, column) = self.locate(at);
        GraphError { file: self.path.clone(), line, column, message: message.into(), hint: None }
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

const TOP_KEYS: &[&str] = &["title", "about", "settings", "blocks", "wiring", "exposes"];
const KNOB_KEYS: &[&str] = &["default", "unit", "doc"];
const BLOCK_KEYS: &[&str] = &["kind", "use", "set", "doc"];

/// YAML scalar or list → the raw value every parameter parser takes.
pub fn raw_value(v: &Value) -> Option<RawValue> {
    match v {
        Value::Number(n) => n.as_f64().map(RawValue::Number),
        Value::Bool(b) => Some(RawValue::Bool(*b)),
        Value::String(s) => Some(RawValue::Text(s.clone())),
        Value::Sequence(items) => items.iter().map(raw_value).collect::<Option<Vec<_>>>().map(RawValue::List),
        _ => None,
    }
}

/// Parse YAML text, turning syntax errors into file:line:column errors.
pub fn parse_yaml(path: &Path, text: &str) -> Result<Value, GraphError> {
    serde_yaml::from_str(text).map_err(|e| {
        let (mut line, mut column) = e.location().map(|l| (l.line(), l.column())).unwrap_or((1, 1));
        if let Some(at) = second_occurrence(text, &e.to_string(), line) {
            (line, column) = at;
        }
        GraphError { file: path.to_path_buf(), line, column, message: format!("not valid YAML: {e}"), hint: None }
    })
}

/// The parser places a duplicate key at its first occurrence; point at the
/// repeat instead, which is the line to change.
fn second_occurrence(text: &str, message: &str, first_line: usize) -> Option<(usize, usize)> {
    let start = message.find("duplicate entry with key \"")? + "duplicate entry with key \"".len();
    let key = &message[start..start + message[start..].find('"')?];
    let mut seen = 0;
    for (i, line) in text.lines().enumerate().skip(first_line.saturating_sub(1)) {
        let t = line.trim_start();
        if t.strip_prefix(key).is_some_and(|rest| rest.trim_start().starts_with(':')) {
            seen += 1;
            if seen == 2 {
                return Some((i + 1, line.len() - t.len() + 1));
            }
        }
    }
    None
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

fn check_keys(
    src: &Source,
    at: &[Seg],
    map: &serde_yaml::Mapping,
    allowed: &[&str],
    what: &str,
) -> Result<(), GraphError> {
    for k in map.keys() {
        let name = k.as_str().unwrap_or("");
        if !allowed.contains(&name) {
            let mut path = at.to_vec();
            path.push(key(name));
            return Err(src.error(&path, format!("unknown key '{name}' in {what}")).hint_closest(
                name,
                allowed.iter().copied(),
                &format!("allowed: {}", allowed.join(", ")),
            ));
        }
    }
    Ok(())
}

fn text_of(src: &Source, at: &[Seg], v: &Value, what: &str) -> Result<String, GraphError> {
    match v {
        Value::String(s) => Ok(s.clone()),
        Value::Number(n) => Ok(n.to_string()),
        _ => Err(src.error(at, format!("{what} must be text"))),
    }
}

fn mapping<'a>(src: &Source, at: &[Seg], v: &'a Value, what: &str) -> Result<&'a serde_yaml::Mapping, GraphError> {
    v.as_mapping().ok_or_else(|| src.error(at, format!("{what} must be a mapping (name: value)")))
}

impl GraphFile {
    pub fn load(path: &Path) -> Result<GraphFile, GraphError> {
        let text = read_text(path)?;
        Self::parse(path, text)
    }

    pub fn parse(path: &Path, text: String) -> Result<GraphFile, GraphError> {
        let doc = parse_yaml(path, &text)?;
        let src = Arc::new(Source::new(path.to_path_buf(), text));
        let top = mapping(&src, &[], &doc, "a graph file")?;
        check_keys(&src, &[], top, TOP_KEYS, "a graph file")?;
        let get = |k: &str| top.get(k);

        let title = match get("title") {
            Some(v) => text_of(&src, &[key("title")], v, "title")?,
            None => String::new(),
        };
        let about = match get("about") {
            Some(v) => text_of(&src, &[key("about")], v, "about")?,
            None => String::new(),
        };

        let mut settings = Vec::new();
        if let Some(v) = get("settings") {
            for (k, body) in mapping(&src, &[key("settings")], v, "settings")? {
                let name = k.as_str().unwrap_or_default().to_string();
                let at = [key("settings"), key(&name)];
                check_name(&src, &at, &name, "knob")?;
                let decl = match body {
                    Value::Mapping(m) => {
                        check_keys(&src, &at, m, KNOB_KEYS, &format!("knob '{name}'"))?;
                        let default = match m.get("default") {
                            Some(d) => Some(raw_value(d).ok_or_else(|| {
                                src.error(
                                    &[key("settings"), key(&name), key("default")],
                                    "default must be a number, text, true/false or a list",
                                )
                            })?),
                            None => None,
                        };
                        let unit = m.get("unit").map(|u| text_of(&src, &at, u, "unit")).transpose()?;
                        let doc = m.get("doc").map(|d| text_of(&src, &at, d, "doc")).transpose()?.unwrap_or_default();
                        KnobDecl { name, default, unit, doc }
                    }
                    // Shorthand: `name: value`.
                    other => {
                        KnobDecl {
                            name,
                            default: Some(raw_value(other).ok_or_else(|| {
                                src.error(&at, "a knob is a value or a mapping with default, unit, doc")
                            })?),
                            unit: None,
                            doc: String::new(),
                        }
                    }
                };
                settings.push(decl);
            }
        }

        let mut blocks = Vec::new();
        let block_map = match get("blocks") {
            Some(v) => mapping(&src, &[key("blocks")], v, "blocks")?,
            None => return Err(src.error(&[], "a graph file needs a 'blocks' mapping")),
        };
        for (k, body) in block_map {
            let name = k.as_str().unwrap_or_default().to_string();
            let at = [key("blocks"), key(&name)];
            check_name(&src, &at, &name, "block")?;
            let m = mapping(&src, &at, body, &format!("block '{name}'"))?;
            check_keys(&src, &at, m, BLOCK_KEYS, &format!("block '{name}'"))?;
            let body = match (m.get("kind"), m.get("use")) {
                (Some(kind), None) => {
                    BlockBody::Kind(text_of(&src, &[key("blocks"), key(&name), key("kind")], kind, "kind")?)
                }
                (None, Some(file)) => {
                    BlockBody::Use(text_of(&src, &[key("blocks"), key(&name), key("use")], file, "use")?)
                }
                (Some(_), Some(_)) => {
                    return Err(src.error(&at, format!("block '{name}' has both 'kind' and 'use'; give one")));
                }
                (None, None) => {
                    return Err(src
                        .error(
                            &at,
                            format!("block '{name}' needs a 'kind' (a block kind) or 'use' (a graph file to include)"),
                        )
                        .with_hint("`lobeflow blocks` lists the kinds"));
                }
            };
            let mut set = Vec::new();
            if let Some(s) = m.get("set") {
                let set_at = [key("blocks"), key(&name), key("set")];
                for (pk, pv) in mapping(&src, &set_at, s, "set")? {
                    let pname = pk.as_str().unwrap_or_default().to_string();
                    let value = raw_value(pv).ok_or_else(|| {
                        src.error(
                            &[key("blocks"), key(&name), key("set"), key(&pname)],
                            "a parameter value must be a number, text, true/false or a list",
                        )
                    })?;
                    set.push((pname, value));
                }
            }
            blocks.push(BlockDecl { name, body, set });
        }

        let mut wiring = Vec::new();
        if let Some(v) = get("wiring") {
            let items = v
                .as_sequence()
                .ok_or_else(|| src.error(&[key("wiring")], "wiring must be a list of chains like 'a -> b -> c'"))?;
            for (i, item) in items.iter().enumerate() {
                wiring.push(text_of(&src, &[key("wiring"), Seg::Index(i)], item, "a wiring chain")?);
            }
        }

        let mut exposes = Exposes::default();
        if let Some(v) = get("exposes") {
            let m = mapping(&src, &[key("exposes")], v, "exposes")?;
            check_keys(&src, &[key("exposes")], m, &["inputs", "outputs"], "exposes")?;
            for (side, list) in [("inputs", &mut exposes.inputs), ("outputs", &mut exposes.outputs)] {
                if let Some(ports) = m.get(side) {
                    let at = [key("exposes"), key(side)];
                    for (pk, pv) in mapping(&src, &at, ports, side)? {
                        let pname = pk.as_str().unwrap_or_default().to_string();
                        list.push((
                            pname.clone(),
                            text_of(&src, &[key("exposes"), key(side), key(&pname)], pv, "an exposed port")?,
                        ));
                    }
                }
            }
        }

        Ok(GraphFile { source: src, title, about, settings, blocks, wiring, exposes })
    }
}

fn check_name(src: &Source, at: &[Seg], name: &str, what: &str) -> Result<(), GraphError> {
    let ok = !name.is_empty() && name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-');
    if ok {
        Ok(())
    } else {
        Err(src.error(at, format!("{what} name '{name}' may use only letters, digits, '_' and '-'")))
    }
}
