//! From graph files to a checked, flat graph ready to run.
//!
//! Resolution settles every knob (file default, then params file, then
//! `--set`), expands composites (`use:`) into their blocks with prefixed
//! names, parses every parameter against its block's declaration, wires the
//! ports and checks the whole: nothing runs until all of it holds.

use super::error::GraphError;
use super::file::{BlockBody, BlockDecl, GraphFile, Source};
use crate::config::{Entries, Located, ParamValue, Seg, key};
use lobeflow_blocks::{BlockSpec, ItemKind, ParamType, Params, RawValue, Registry, Value};
use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};
use std::sync::Arc;

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

/// Settings given as `auto` are measured from the start of the graph's
/// capture (src/inspect/params.rs); the error names the first such setting.
fn settle_auto(settings: &mut BTreeMap<String, KnobValue>) -> Result<(), GraphError> {
    let given: Vec<(&str, &RawValue, &Path)> =
        settings.values().map(|k| (k.name.as_str(), &k.value, k.base.as_path())).collect();
    match crate::inspect::settle_auto(&given) {
        Ok(found) => {
            for (name, value, how) in found {
                if let Some(k) = settings.get_mut(&name) {
                    k.value = RawValue::Text(value);
                    k.origin = Origin::Measured(how);
                }
            }
            Ok(())
        }
        Err((name, message)) => {
            let (file, line) = match &settings[&name].origin {
                Origin::ParamsFile { file, line } | Origin::Default { file, line } => (file.clone(), *line),
                _ => (PathBuf::from("--set"), 0),
            };
            Err(GraphError { file, line, column: 1, message, hint: None })
        }
    }
}

fn canonical(p: &Path) -> PathBuf {
    p.canonicalize().unwrap_or_else(|_| p.to_path_buf())
}

/// Knob values from the file's defaults, then from `given` (a parent's set).
/// A knob with no value yet holds an empty list, caught by the caller.
/// `top` is false for a composite's file.
fn settle_knobs(
    file: &GraphFile,
    mut given: BTreeMap<String, KnobValue>,
    top: bool,
) -> Result<BTreeMap<String, KnobValue>, GraphError> {
    let src = &file.source;
    let mut out = BTreeMap::new();
    for d in &file.settings {
        let (line, _) = src.locate(&[key("settings"), key(&d.name)]);
        let file = src.path.clone();
        let default_unit = match &d.default {
            Some(RawValue::Text(t)) => lobeflow_blocks::param::unit_word(t).map(str::to_string),
            _ => None,
        };
        let mut v = KnobValue {
            name: d.name.clone(),
            value: d.default.clone().unwrap_or(RawValue::List(Vec::new())),
            unit: d.unit.clone().filter(|u| !u.is_empty()).or(default_unit),
            doc: d.doc.clone(),
            origin: if top { Origin::Default { file, line } } else { Origin::CompositeDefault { file, line } },
            base: src.dir(),
        };
        if let Some(g) = given.remove(&d.name) {
            v.value = g.value;
            v.unit = v.unit.or(g.unit);
            v.origin = g.origin;
            v.base = g.base;
        }
        out.insert(d.name.clone(), v);
    }
    Ok(out)
}

/// Replace a `$knob` reference by the knob's value; bare numbers take the
/// knob's unit so the parameter's own unit check applies.
fn substitute(
    raw: &RawValue,
    ty: Option<&ParamType>,
    settings: &BTreeMap<String, KnobValue>,
    src: &Source,
    at: &[Seg],
) -> Result<(RawValue, Option<KnobValue>), GraphError> {
    let RawValue::Text(t) = raw else { return Ok((raw.clone(), None)) };
    let Some(name) = t.strip_prefix('$') else { return Ok((raw.clone(), None)) };
    let Some(k) = settings.get(name) else {
        return Err(src.error(at, format!("knob '{name}' is referenced but not defined")).hint_closest(
            name,
            settings.keys().map(String::as_str),
            "declare it under 'settings:'",
        ));
    };
    if matches!(k.value, RawValue::List(ref l) if l.is_empty()) {
        return Err(src
            .error(at, format!("knob '{name}' has no value"))
            .with_hint(format!("set it: --set {name}=VALUE")));
    }
    let takes_unit =
        matches!(ty, Some(ParamType::Number { .. } | ParamType::Time { .. } | ParamType::Distance { .. }) | None);
    let value = match &k.value {
        RawValue::Number(_) if takes_unit => RawValue::from_text(&k.value_text()),
        v => v.clone(),
    };
    Ok((value, Some(k.clone())))
}

fn expand(
    file: &GraphFile,
    prefix: &str,
    settings: &BTreeMap<String, KnobValue>,
    b: &mut Builder,
) -> Result<HashMap<String, Local>, GraphError> {
    let src = &file.source;
    let mut scope: HashMap<String, Local> = HashMap::new();
    for decl in &file.blocks {
        let at = [key("blocks"), key(&decl.name)];
        let full = format!("{prefix}{}", decl.name);
        match &decl.body {
            BlockBody::Kind(kind) => {
                let Some(spec) = b.registry.get(kind) else {
                    return Err(src
                        .error(&[key("blocks"), key(&decl.name), key("kind")], format!("unknown block kind '{kind}'"))
                        .hint_closest(kind, b.registry.kinds().map(|s| s.kind), "`lobeflow blocks` lists the kinds"));
                };
                let mut spec = *spec;
                if let Some(describe) = b.registry.describer(kind) {
                    // The instance declares itself from the parameters its kind
                    // always has (a program and its arguments).
                    let (launch, _, _) = set_params(&spec, decl, settings, src, true)?;
                    spec = describe(&launch, &src.dir())
                        .map_err(|m| src.error(&at, format!("block '{}' ({}): {m}", decl.name, spec.kind)))?;
                }
                let (mut params, mut sources, places) = set_params(&spec, decl, settings, src, false)?;
                for ps in spec.params {
                    if params.get(ps.name).is_some() {
                        continue;
                    }
                    match ps.default {
                        Some(d) => {
                            let v = ps.parse(&RawValue::from_text(d)).map_err(|m| {
                                src.error(
                                    &at,
                                    format!("built-in default of '{}' on kind '{}' is bad: {m}", ps.name, spec.kind),
                                )
                            })?;
                            params.insert_declared(ps, v);
                            sources.insert(ps.name.to_string(), "block default".into());
                        }
                        None => {
                            return Err(src
                                .error(
                                    &at,
                                    format!("block '{}' ({}) needs parameter '{}'", decl.name, spec.kind, ps.name),
                                )
                                .with_hint(format!("'{}': {} — {}", ps.name, ps.ty.describe(), ps.doc)));
                        }
                    }
                }
                let (line, column) = src.locate(&at);
                let (file, doc) = (src.path.clone(), decl.doc.clone());
                b.blocks.push(ResolvedBlock { name: full, spec, params, sources, places, file, line, column, doc });
                scope.insert(decl.name.clone(), Local::Block(b.blocks.len() - 1));
            }
            BlockBody::Use(rel) => {
                let child_path = src.dir().join(rel);
                let canon = canonical(&child_path);
                if b.stack.contains(&canon) {
                    return Err(src.error(
                        &[key("blocks"), key(&decl.name), key("use")],
                        format!("'{rel}' includes itself (directly or through other files)"),
                    ));
                }
                if b.stack.len() >= MAX_USE_DEPTH {
                    return Err(src.error(
                        &[key("blocks"), key(&decl.name), key("use")],
                        format!(
                            "'{rel}' would be composite number {} in a chain of 'use:' files; at most {MAX_USE_DEPTH} may nest",
                            b.stack.len() + 1
                        ),
                    ));
                }
                let child = GraphFile::load(&child_path).map_err(|e| {
                    if e.line == 0 {
                        src.error(&[key("blocks"), key(&decl.name), key("use")], e.message.clone())
                    } else {
                        e
                    }
                })?;
                let mut given = BTreeMap::new();
                for (kname, raw) in &decl.set {
                    let pat = [key("blocks"), key(&decl.name), key("set"), key(kname)];
                    let Some(cd) = child.settings.iter().find(|k| &k.name == kname) else {
                        let names: Vec<&str> = child.settings.iter().map(|k| k.name.as_str()).collect();
                        return Err(src.error(&pat, format!("'{rel}' has no knob '{kname}'")).hint_closest(
                            kname,
                            names.iter().copied(),
                            &format!("its settings: {}", names.join(", ")),
                        ));
                    };
                    let (value, knob) = substitute(raw, None, settings, src, &pat)?;
                    let base = knob.as_ref().map(|k| k.base.clone()).unwrap_or_else(|| src.dir());
                    given.insert(
                        kname.clone(),
                        KnobValue {
                            name: kname.clone(),
                            value,
                            unit: None,
                            doc: cd.doc.clone(),
                            origin: Origin::Parent { file: src.path.clone(), line: src.locate(&pat).0 },
                            base,
                        },
                    );
                }
                let child_knobs = settle_knobs(&child, given, false)?;
                for cd in &child.settings {
                    if matches!(child_knobs[&cd.name].value, RawValue::List(ref l) if l.is_empty()) {
                        return Err(src
                            .error(&at, format!("composite '{}' needs knob '{}' set", decl.name, cd.name))
                            .with_hint(cd.doc.clone()));
                    }
                }
                b.stack.push(canon);
                let child_scope = expand(&child, &format!("{full}/"), &child_knobs, b)?;
                b.stack.pop();
                let csrc = &child.source;
                let mut inputs = Vec::new();
                for (pname, target) in &child.exposes.inputs {
                    let pat = [key("exposes"), key("inputs"), key(pname)];
                    inputs.push((pname.clone(), input_end(&child_scope, target, None, csrc, &pat, b)?));
                }
                let mut outputs = Vec::new();
                for (pname, target) in &child.exposes.outputs {
                    let pat = [key("exposes"), key("outputs"), key(pname)];
                    outputs.push((pname.clone(), output_end(&child_scope, target, csrc, &pat, b)?));
                }
                scope.insert(decl.name.clone(), Local::Composite { inputs, outputs });
            }
        }
    }
    for (i, chain) in file.wiring.iter().enumerate() {
        let at = [key("wiring"), Seg::Index(i)];
        let ends: Vec<&str> = chain.split("->").map(str::trim).collect();
        if ends.len() < 2 || ends.iter().any(|e| e.is_empty()) {
            return Err(src
                .error(&at, format!("'{chain}' is not a chain"))
                .with_hint("write 'a -> b -> c', naming ports as block.port where a block has several"));
        }
        for pair in ends.windows(2) {
            let from = output_end(&scope, pair[0], src, &at, b)?;
            let kind = b.blocks[from.0].spec.outputs[from.1].kind;
            let to = input_end(&scope, pair[1], Some(kind), src, &at, b)?;
            connect(from, to, src, &at, b)?;
        }
    }
    Ok(scope)
}

/// A block's parameters, where each value came from, and where each set
/// one is written (line, column).
type SetParams = (Params, BTreeMap<String, String>, BTreeMap<String, (usize, usize)>);

/// Check the parameters a block declaration sets against `spec`, with where
/// each came from. With `declared_only`, names `spec` does not declare are
/// passed over instead of refused (a self-declaring kind reads its own first).
fn set_params(
    spec: &BlockSpec,
    decl: &BlockDecl,
    settings: &BTreeMap<String, KnobValue>,
    src: &Source,
    declared_only: bool,
) -> Result<SetParams, GraphError> {
    let mut params = Params::new();
    let mut sources = BTreeMap::new();
    let mut places = BTreeMap::new();
    for (pname, raw) in &decl.set {
        let pat = [key("blocks"), key(&decl.name), key("set"), key(pname)];
        let Some(ps) = spec.param(pname) else {
            if declared_only {
                continue;
            }
            let names: Vec<&str> = spec.params.iter().map(|p| p.name).collect();
            return Err(src
                .error(&pat, format!("block kind '{}' has no parameter '{pname}'", spec.kind))
                .hint_closest(pname, names.iter().copied(), &format!("its parameters: {}", names.join(", "))));
        };
        let (value, knob) = substitute(raw, Some(&ps.ty), settings, src, &pat)?;
        let base = knob.as_ref().map(|k| k.base.clone()).unwrap_or_else(|| src.dir());
        let mut parsed = ps.parse(&value).map_err(|m| {
            let via = knob.as_ref().map(|k| format!(" (from knob '{}', {})", k.name, k.origin)).unwrap_or_default();
            src.error(&pat, format!("parameter '{pname}' of block '{}': {m}{via}", decl.name))
                .with_hint(format!("'{pname}' takes {}", ps.ty.describe()))
        })?;
        if let (ParamType::InputPath, Value::Text(p)) = (&ps.ty, &parsed)
            && p != "-"
            && !p.is_empty()
            && Path::new(p).is_relative()
        {
            parsed = Value::Text(base.join(p).to_string_lossy().into_owned());
        }
        let place = src.locate(&pat);
        let from = match &knob {
            Some(k) => format!("knob {} ({})", k.name, k.origin),
            None => format!("graph {}:{}", src.path.display(), place.0),
        };
        sources.insert(pname.clone(), from);
        places.insert(pname.clone(), place);
        params.insert_declared(ps, parsed);
    }
    Ok((params, sources, places))
}

fn split_end(text: &str) -> (&str, Option<&str>) {
    match text.split_once('.') {
        Some((blk, port)) => (blk.trim(), Some(port.trim())),
        None => (text.trim(), None),
    }
}

fn lookup<'s>(
    scope: &'s HashMap<String, Local>,
    name: &str,
    src: &Source,
    at: &[Seg],
) -> Result<&'s Local, GraphError> {
    scope.get(name).ok_or_else(|| {
        src.error(at, format!("no block named '{name}' in this file")).hint_closest(
            name,
            scope.keys().map(String::as_str),
            "",
        )
    })
}

fn pick_port(
    ports: &[(String, (usize, usize))],
    want: Option<&str>,
    side: &str,
    owner: &str,
    src: &Source,
    at: &[Seg],
) -> Result<(usize, usize), GraphError> {
    match want {
        Some(p) => ports.iter().find(|(n, _)| n == p).map(|(_, e)| *e).ok_or_else(|| {
            let names: Vec<&str> = ports.iter().map(|(n, _)| n.as_str()).collect();
            src.error(at, format!("'{owner}' has no {side} port '{p}'")).hint_closest(
                p,
                names.iter().copied(),
                &format!("its {side} ports: {}", if names.is_empty() { "none".into() } else { names.join(", ") }),
            )
        }),
        None if ports.len() == 1 => Ok(ports[0].1),
        None if ports.is_empty() => Err(src.error(at, format!("'{owner}' has no {side} ports"))),
        None => {
            let names: Vec<&str> = ports.iter().map(|(n, _)| n.as_str()).collect();
            Err(src.error(
                at,
                format!("'{owner}' has {side} ports {}: name one, as {owner}.{}", names.join(", "), names[0]),
            ))
        }
    }
}

fn block_ports(b: &Builder, idx: usize, outputs: bool) -> Vec<(String, (usize, usize))> {
    let spec = &b.blocks[idx].spec;
    let ports = if outputs { spec.outputs } else { spec.inputs };
    ports.iter().enumerate().map(|(i, p)| (p.name.to_string(), (idx, i))).collect()
}

fn output_end(
    scope: &HashMap<String, Local>,
    text: &str,
    src: &Source,
    at: &[Seg],
    b: &Builder,
) -> Result<(usize, usize), GraphError> {
    let (name, port) = split_end(text);
    match lookup(scope, name, src, at)? {
        Local::Block(idx) => pick_port(&block_ports(b, *idx, true), port, "output", name, src, at),
        Local::Composite { outputs, .. } => pick_port(outputs, port, "output", name, src, at),
    }
}

/// An input end; with several inputs and no port named, the one input that
/// takes `kind` (what the wire carries) is meant.
fn input_end(
    scope: &HashMap<String, Local>,
    text: &str,
    kind: Option<ItemKind>,
    src: &Source,
    at: &[Seg],
    b: &Builder,
) -> Result<(usize, usize), GraphError> {
    let (name, port) = split_end(text);
    let ports = match lookup(scope, name, src, at)? {
        Local::Block(idx) => block_ports(b, *idx, false),
        Local::Composite { inputs, .. } => inputs.clone(),
    };
    if let (None, Some(k)) = (port, kind) {
        let fitting: Vec<_> = ports.iter().filter(|(_, e)| b.blocks[e.0].spec.inputs[e.1].kind == k).collect();
        if ports.len() > 1 && fitting.len() == 1 {
            return Ok(fitting[0].1);
        }
    }
    pick_port(&ports, port, "input", name, src, at)
}

fn connect(
    from: (usize, usize),
    to: (usize, usize),
    src: &Arc<Source>,
    at: &[Seg],
    b: &mut Builder,
) -> Result<(), GraphError> {
    let out_spec = b.blocks[from.0].spec.outputs[from.1];
    let in_spec = b.blocks[to.0].spec.inputs[to.1];
    if out_spec.kind != in_spec.kind {
        return Err(src
            .error(
                at,
                format!(
                    "port type mismatch: {}.{} carries {}, but {}.{} takes {}",
                    b.blocks[from.0].name,
                    out_spec.name,
                    out_spec.kind.name(),
                    b.blocks[to.0].name,
                    in_spec.name,
                    in_spec.kind.name()
                ),
            )
            .with_hint(suggest_output(b, from.0, in_spec.kind)));
    }
    if let Some(w) = b.wire_into.get(&to).map(|&wi| &b.wires[wi]) {
        return Err(src.error(
            at,
            format!("input {}.{} is already wired from {}", b.blocks[to.0].name, in_spec.name, b.blocks[w.from.0].name),
        ));
    }
    b.wire_into.insert(to, b.wires.len());
    b.wires.push(Wire { from, to });
    b.wire_at.push((Arc::clone(src), at.to_vec()));
    Ok(())
}

fn suggest_output(b: &Builder, idx: usize, kind: ItemKind) -> String {
    match b.blocks[idx].spec.outputs.iter().find(|p| p.kind == kind) {
        Some(p) => format!("{}.{} carries {}", b.blocks[idx].name, p.name, kind.name()),
        None => format!(
            "a block between them must turn {} into {}",
            b.blocks[idx].spec.outputs.first().map(|p| p.kind.name()).unwrap_or("?"),
            kind.name()
        ),
    }
}
