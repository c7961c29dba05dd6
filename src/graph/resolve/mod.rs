//! From graph files to a checked, flat graph ready to run.
//!
//! Resolution settles every knob (file default, then params file, then
//! `--set`), expands composites (`use:`) into their blocks with prefixed
//! names, parses every parameter against its block's declaration, wires the
//! ports and checks the whole: nothing runs until all of it holds.

mod block_params;
mod composite;
mod knobs;
mod wiring;

use super::error::GraphError;
use super::file::{BlockBody, GraphFile, Source};
use crate::config::{Entries, Located, ParamValue, Seg, key};
use knobs::{settle_auto, settle_knobs};
use lobeflow_blocks::{BlockSpec, Params, RawValue, Registry};
use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use wiring::input_end;

/// Where a knob's value came from (shown by `lobeflow check`).
#[derive(Clone, Debug, PartialEq)]
pub enum Origin {
    Default {
        file: PathBuf,
        line: usize,
    },
    ParamsFile {
        file: PathBuf,
        line: usize,
    },
    CommandLine,
    /// The default written in a composite's own file (`use:`).
    CompositeDefault {
        file: PathBuf,
        line: usize,
    },
    /// Set by the enclosing graph on a composite block.
    Parent {
        file: PathBuf,
        line: usize,
    },
    /// An `auto` value measured from the capture (what it rests on).
    Measured(String),
}

impl std::fmt::Display for Origin {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Origin::Default { file, line } => write!(f, "graph {}:{line}", file.display()),
            Origin::ParamsFile { file, line } => write!(f, "--params {}:{line}", file.display()),
            Origin::CommandLine => write!(f, "--set"),
            Origin::CompositeDefault { file, line } => write!(f, "composite default {}:{line}", file.display()),
            Origin::Parent { file, line } => write!(f, "composite use {}:{line}", file.display()),
            Origin::Measured(how) => write!(f, "{how}"),
        }
    }
}

/// A knob value supplied from outside the graph file.
#[derive(Clone, Debug)]
pub struct Override {
    pub name: String,
    pub value: RawValue,
    pub origin: Origin,
    /// Directory that relative paths in `value` are relative to.
    pub base: PathBuf,
}

/// Knob values from `--set`, a params file, or the embedding API.
#[derive(Clone, Debug, Default)]
pub struct Overrides {
    pub items: Vec<Override>,
}

impl Overrides {
    /// `name=value`, as given to `--set`.
    pub fn set_text(&mut self, assignment: &str) -> Result<(), String> {
        let (name, value) =
            assignment.split_once('=').ok_or_else(|| format!("--set takes name=value, got '{assignment}'"))?;
        self.set(name.trim(), RawValue::from_text(value));
        Ok(())
    }

    pub fn set(&mut self, name: &str, value: RawValue) {
        self.items.push(Override { name: name.to_string(), value, origin: Origin::CommandLine, base: PathBuf::new() });
    }

    /// Read a params file: a YAML mapping of knob names to values.
    pub fn add_params_file(&mut self, path: &Path) -> Result<(), GraphError> {
        let doc = crate::config::Document::load(path)?;
        if !matches!(doc.root.value, crate::config::NodeValue::Map(_)) {
            return Err(doc.error(&[], "a params file is a mapping of knob names to values"));
        }
        let entries: Entries<Located<String>, ParamValue> = doc.read()?;
        let base = path.parent().map(Path::to_path_buf).unwrap_or_default();
        for (name, value) in entries.0 {
            self.items.push(Override {
                name: name.value,
                value: value.0,
                origin: Origin::ParamsFile { file: path.to_path_buf(), line: name.at.line },
                base: base.clone(),
            });
        }
        Ok(())
    }
}

/// A knob with its settled value.
#[derive(Clone, Debug)]
pub struct KnobValue {
    pub name: String,
    pub value: RawValue,
    /// The declared unit, or else the unit word of the default (`4 pulses`):
    /// a bare number given to the knob is in this unit.
    pub unit: Option<String>,
    pub doc: String,
    pub origin: Origin,
    base: PathBuf,
}

/// One block instance, parameters checked.
#[derive(Clone, Debug)]
pub struct ResolvedBlock {
    /// Unique name; blocks from composites are `composite/inner`.
    pub name: String,
    pub spec: BlockSpec,
    pub params: Params,
    /// Where each parameter's value came from.
    pub sources: BTreeMap<String, String>,
    /// Where each parameter set in the graph is written: (line, column) in `file`.
    pub places: BTreeMap<String, (usize, usize)>,
    pub file: PathBuf,
    pub line: usize,
    pub column: usize,
    /// The instance's own description (`doc:` in the graph file), or empty.
    pub doc: String,
}

/// A wire from an output port to an input port (block index, port index).
#[derive(Clone, Debug, PartialEq)]
pub struct Wire {
    pub from: (usize, usize),
    pub to: (usize, usize),
}

/// A whole graph, checked and flattened.
#[derive(Clone, Debug)]
pub struct ResolvedGraph {
    pub path: PathBuf,
    pub title: String,
    pub about: String,
    pub settings: Vec<KnobValue>,
    pub blocks: Vec<ResolvedBlock>,
    pub wires: Vec<Wire>,
}

impl KnobValue {
    /// The value as it will be read: a bare number with the knob's unit.
    pub fn value_text(&self) -> String {
        match (&self.value, self.unit.as_deref()) {
            (RawValue::Number(n), Some(u)) if !u.is_empty() => format!("{n} {u}"),
            (v, _) => v.to_string(),
        }
    }
}

impl ResolvedGraph {
    pub fn block_index(&self, name: &str) -> Option<usize> {
        self.blocks.iter().position(|b| b.name == name)
    }
}

/// What a local name in one file's scope stands for.
enum Local {
    Block(usize),
    Composite { inputs: Vec<(String, (usize, usize))>, outputs: Vec<(String, (usize, usize))> },
}

/// Most graph files nested through `use:` (each level costs stack; real
/// graphs nest two or three deep).
pub const MAX_USE_DEPTH: usize = 64;

pub(super) struct Builder<'r> {
    registry: &'r Registry,
    pub(super) blocks: Vec<ResolvedBlock>,
    pub(super) wires: Vec<Wire>,
    pub(super) wire_at: Vec<(Arc<Source>, Vec<Seg>)>,
    /// The wire into each connected input, to find a second one at once.
    pub(super) wire_into: HashMap<(usize, usize), usize>,
    /// Files being expanded, to catch a file that includes itself.
    stack: Vec<PathBuf>,
}

/// Load `path`, apply `overrides`, expand and check everything.
pub fn resolve(path: &Path, overrides: &Overrides, registry: &Registry) -> Result<ResolvedGraph, GraphError> {
    let file = GraphFile::load(path)?;
    let mut settings = settle_knobs(&file, BTreeMap::new(), true)?;
    apply_overrides(&file, path, overrides, &mut settings)?;
    settle_auto(&mut settings)?;
    for decl in &file.settings {
        if matches!(settings[&decl.name].value, RawValue::List(ref l) if l.is_empty()) {
            return Err(file
                .source
                .error(&[key("settings"), key(&decl.name)], format!("knob '{}' has no value", decl.name))
                .with_hint(format!("give it a default, or set it: --set {}=VALUE", decl.name)));
        }
    }
    let mut b = Builder {
        registry,
        blocks: Vec::new(),
        wires: Vec::new(),
        wire_at: Vec::new(),
        wire_into: HashMap::new(),
        stack: vec![canonical(path)],
    };
    let scope = expand(&file, "", &settings, &mut b)?;
    // A composite checked on its own: the inputs it exposes are wired by
    // whoever uses it, so they count as wired here.
    let mut exposed = Vec::new();
    for (pname, target) in &file.exposes.inputs {
        let at = [key("exposes"), key("inputs"), key(pname)];
        exposed.push(input_end(&scope, target, None, &file.source, &at, &b)?);
    }
    super::checks::required_inputs(&b, &exposed)?;
    super::checks::no_cycles(&b)?;
    super::checks::physical_sanity(&b)?;
    let ordered: Vec<KnobValue> = file.settings.iter().map(|d| settings[&d.name].clone()).collect();
    Ok(ResolvedGraph {
        path: path.to_path_buf(),
        title: file.title.clone(),
        about: file.about.clone(),
        settings: ordered,
        blocks: b.blocks,
        wires: b.wires,
    })
}

/// Give the knobs the values set from outside the file (`--params`, `--set`).
fn apply_overrides(
    file: &GraphFile,
    path: &Path,
    overrides: &Overrides,
    settings: &mut BTreeMap<String, KnobValue>,
) -> Result<(), GraphError> {
    for o in &overrides.items {
        let Some(k) = settings.get_mut(&o.name) else {
            let names: Vec<&str> = file.settings.iter().map(|k| k.name.as_str()).collect();
            let (f, line) = match &o.origin {
                Origin::ParamsFile { file, line } => (file.clone(), *line),
                _ => (PathBuf::from("--set"), 0),
            };
            return Err(GraphError {
                file: f,
                line,
                column: 1,
                message: format!("knob '{}' is not defined by {}", o.name, path.display()),
                hint: None,
            }
            .hint_closest(&o.name, names.iter().copied(), &format!("its settings: {}", names.join(", "))));
        };
        k.value = o.value.clone();
        k.origin = o.origin.clone();
        k.base = o.base.clone();
    }
    Ok(())
}

/// Add the blocks of `file` (composites expanded, names prefixed with
/// `prefix`) and its wires; returns what its local names stand for.
fn expand(
    file: &GraphFile,
    prefix: &str,
    settings: &BTreeMap<String, KnobValue>,
    b: &mut Builder,
) -> Result<HashMap<String, Local>, GraphError> {
    let mut scope: HashMap<String, Local> = HashMap::new();
    for decl in &file.blocks {
        let full = format!("{prefix}{}", decl.name);
        let local = match &decl.body {
            BlockBody::Kind(kind) => block_params::add_block(&file.source, decl, kind, full, settings, b)?,
            BlockBody::Use(rel) => composite::expand_composite(&file.source, decl, rel, &full, settings, b)?,
        };
        scope.insert(decl.name.clone(), local);
    }
    wiring::wire_chains(file, &scope, b)?;
    Ok(scope)
}

fn canonical(p: &Path) -> PathBuf {
    p.canonicalize().unwrap_or_else(|_| p.to_path_buf())
}
