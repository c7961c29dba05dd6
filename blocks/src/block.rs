//! The block model: the engine's block trait, and one declaration per
//! block kind.
//!
//! Blocks are written against [`TypedBlock`](crate::TypedBlock) (settings
//! struct, named ports; see DEVELOPERS.md, "Writing a block"). The scheduler
//! drives them as [`Block`]s, ports by number: it calls [`Block::process`]
//! for every input item (merging several inputs in time order), then
//! [`Block::finish`] once every input has ended. A block never runs twice at
//! once, so it keeps its state in plain fields.
//!
//! ```
//! use lobeflow_blocks::prelude::*;
//! use lobeflow_blocks::typed::boxed;
//!
//! block_ports! { inputs enum ScaleIn { Samples = required("samples", ItemKind::Samples, "in") } }
//! block_ports! { outputs enum ScaleOut { Samples = optional("samples", ItemKind::Samples, "scaled") } }
//!
//! /// Multiplies every complex sample by a constant.
//! struct Scale(f32);
//!
//! impl TypedBlock for Scale {
//!     type Settings = ();
//!     type In = ScaleIn;
//!     type Out = ScaleOut;
//!     fn build(_: (), _: &BuildContext) -> Result<Self, BuildError> {
//!         Ok(Scale(2.0))
//!     }
//!     fn process(&mut self, _: ScaleIn, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
//!         if let Item::Samples(mut chunk) = item {
//!             chunk.iq = chunk.iq.iter().map(|x| x * self.0).collect::<Vec<_>>().into();
//!             out.push(ScaleOut::Samples, Item::Samples(chunk));
//!         }
//!         Ok(())
//!     }
//! }
//!
//! // The engine's view: input and output ports by number.
//! let mut block = boxed(Scale(2.0));
//! let mut out = Outputs::new(1);
//! let chunk = SampleChunk {
//!     stamp: Stamp::new(0, 1000.0),
//!     iq: vec![num_complex::Complex32::new(1.0, -1.0)].into(),
//!     sync: None,
//!     trigger: None,
//! };
//! block.process(0, Item::Samples(chunk), &mut out).unwrap();
//! let (port, item) = out.drain().next().unwrap();
//! assert_eq!(port, 0);
//! if let Item::Samples(c) = item { assert_eq!(c.iq[0].re, 2.0); }
//! ```

use crate::error::BuildError;
use crate::facts::{Facts, StreamFacts};
use crate::item::{Item, ItemKind, ItemType, Notice, Severity, Stamp};
pub use crate::output_file::FileStager;
use crate::param::{ParamSpec, Params};
use crate::typed::OutputPort;
use std::collections::BTreeMap;
use std::fmt;
use std::path::PathBuf;
use std::sync::Arc;

/// What went wrong inside a block; the scheduler adds the block's name.
#[derive(Debug, Clone, PartialEq)]
pub struct BlockError {
    pub message: String,
    /// Sample index the problem was found at, when there is one.
    pub at_sample: Option<u64>,
}

impl BlockError {
    pub fn new(message: impl Into<String>) -> Self {
        BlockError { message: message.into(), at_sample: None }
    }
    pub fn at(message: impl Into<String>, sample: u64) -> Self {
        BlockError { message: message.into(), at_sample: Some(sample) }
    }
}

impl fmt::Display for BlockError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.at_sample {
            Some(s) => write!(f, "{} (at sample {s})", self.message),
            None => write!(f, "{}", self.message),
        }
    }
}

impl std::error::Error for BlockError {}

impl From<crate::error::ParamError> for BlockError {
    fn from(e: crate::error::ParamError) -> Self {
        BlockError::new(e.to_string())
    }
}

impl From<String> for BlockError {
    fn from(s: String) -> Self {
        BlockError::new(s)
    }
}

impl From<std::io::Error> for BlockError {
    fn from(e: std::io::Error) -> Self {
        BlockError::new(e.to_string())
    }
}

/// Items a block produced in one step, with the notices it raised.
#[derive(Default)]
pub struct Outputs {
    items: Vec<(usize, Item)>,
    notices: Vec<Notice>,
    ports: usize,
}

impl Outputs {
    pub fn new(ports: usize) -> Self {
        Outputs { items: Vec::new(), notices: Vec::new(), ports }
    }
    /// Send `item` on output `port` (a handle from the block's
    /// [`block_ports!`](crate::block_ports) declaration).
    pub fn push(&mut self, port: impl OutputPort, item: Item) {
        let port = port.port_index();
        debug_assert!(port < self.ports, "output port {port} not declared");
        self.items.push((port, item));
    }
    /// Report something to the person running the graph; its severity is
    /// told from the text ([`Severity::of_text`]). Prefer [`Outputs::inform`]
    /// or [`Outputs::warn`].
    pub fn notice(&mut self, stamp: Stamp, what: impl Into<String>) {
        self.notices.push(Notice::new(stamp, Arc::from(""), what));
    }
    /// Tell the person running the graph what was learned or done as planned.
    pub fn inform(&mut self, stamp: Stamp, what: impl Into<String>) {
        self.raise(stamp, what, Severity::Information);
    }
    /// Warn that the data or the settings disagree with what the run assumes.
    pub fn warn(&mut self, stamp: Stamp, what: impl Into<String>) {
        self.raise(stamp, what, Severity::Warning);
    }
    pub fn raise(&mut self, stamp: Stamp, what: impl Into<String>, severity: Severity) {
        self.notices.push(Notice { stamp, block: Arc::from(""), what: what.into(), severity });
    }
    pub fn drain(&mut self) -> std::vec::Drain<'_, (usize, Item)> {
        self.items.drain(..)
    }
    /// Every item pushed so far, in their buffer, leaving this empty: the
    /// engine holds back a burst of items this way without copying it.
    pub fn take_items(&mut self) -> Vec<(usize, Item)> {
        std::mem::take(&mut self.items)
    }
    pub fn drain_notices(&mut self) -> std::vec::Drain<'_, Notice> {
        self.notices.drain(..)
    }
    pub fn len(&self) -> usize {
        self.items.len()
    }
    pub fn is_empty(&self) -> bool {
        self.items.is_empty()
    }
}

/// The engine's view of a block, ports by number: what the scheduler
/// drives behind `Box<dyn Block>`. Blocks implement
/// [`TypedBlock`](crate::TypedBlock), whose methods of the same names say
/// what each does and hold the defaults; its adapter
/// ([`typed::boxed`](crate::typed::boxed)) implements this trait. Only
/// engine-side blocks that number their ports themselves implement it
/// directly.
pub trait Block: Send {
    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError>;
    fn process(&mut self, port: usize, item: Item, out: &mut Outputs) -> Result<(), BlockError>;
    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError>;
    fn generate(&mut self, out: &mut Outputs) -> Result<bool, BlockError>;
    fn wants_input(&self) -> bool;
    fn progress(&self) -> Option<(u64, u64)>;
}

/// One port's declaration.
#[derive(Clone, Copy, Debug)]
pub struct PortSpec {
    pub name: &'static str,
    pub kind: ItemKind,
    /// Inputs only: the graph is invalid when a required input is unwired.
    pub required: bool,
    pub doc: &'static str,
}

impl PortSpec {
    pub const fn required(name: &'static str, kind: ItemKind, doc: &'static str) -> Self {
        PortSpec { name, kind, required: true, doc }
    }
    pub const fn optional(name: &'static str, kind: ItemKind, doc: &'static str) -> Self {
        PortSpec { name, kind, required: false, doc }
    }
}

/// What a block's constructor may need besides its parameters.
#[derive(Clone, Default)]
pub struct BuildContext {
    /// Instance name in the graph (for messages).
    pub name: String,
    /// Where output files go (output-path parameters are already resolved).
    pub out_dir: PathBuf,
    pub files: FileStager,
}

/// Constructor of a block kind from its checked parameters.
pub type BuildFn = fn(&Params, &BuildContext) -> Result<Box<dyn Block>, BuildError>;

/// Everything known about one block kind, declared once.
#[derive(Clone, Copy, Debug)]
pub struct BlockSpec {
    pub kind: &'static str,
    /// One paragraph: what the block does and when to use it.
    pub doc: &'static str,
    pub inputs: &'static [PortSpec],
    pub outputs: &'static [PortSpec],
    pub params: &'static [ParamSpec],
    pub build: BuildFn,
}

impl BlockSpec {
    pub fn param(&self, name: &str) -> Option<&ParamSpec> {
        self.params.iter().find(|p| p.name == name)
    }

    /// Parameters for building this kind outside a graph file (embedding
    /// code, tests): the declared defaults overridden by `set` (name, text;
    /// a later pair wins), each text checked by its declaration as a graph
    /// file value is. A required parameter left unset is left out, so
    /// `build` names it. An unknown name or a value that does not parse is
    /// an error naming the parameter.
    pub fn params_from_text(&self, set: &[(&str, &str)]) -> Result<Params, String> {
        if let Some((name, _)) = set.iter().find(|(name, _)| self.param(name).is_none()) {
            return Err(format!("{} has no parameter '{name}'", self.kind));
        }
        let mut params = Params::new();
        for spec in self.params {
            let text = set.iter().rev().find(|(name, _)| *name == spec.name).map(|(_, text)| *text).or(spec.default);
            if let Some(text) = text {
                let value = spec
                    .parse(&crate::param::RawValue::from_text(text))
                    .map_err(|e| format!("{} parameter '{}': {e}", self.kind, spec.name))?;
                params.insert(spec.name, value);
            }
        }
        Ok(params)
    }
}

/// Declares one instance of a kind whose ports and parameters depend on the
/// instance (an external program describes itself): given the parameters of
/// the kind's own declaration that the graph set, and the folder of the
/// graph file declaring the instance, it returns the instance's declaration.
pub type DescribeFn = fn(&Params, &std::path::Path) -> Result<BlockSpec, String>;

/// The block kinds a graph may use, by name.
#[derive(Clone, Default)]
pub struct Registry {
    kinds: BTreeMap<&'static str, BlockSpec>,
    described: BTreeMap<&'static str, DescribeFn>,
    /// Item kinds defined outside the crate, from the ports of registered kinds.
    item_types: BTreeMap<&'static str, &'static ItemType>,
}

impl Registry {
    pub fn new() -> Self {
        Registry::default()
    }
    /// Add a kind; a later registration of the same name replaces it.
    pub fn register(&mut self, spec: BlockSpec) {
        self.described.remove(spec.kind);
        for port in spec.inputs.iter().chain(spec.outputs) {
            if let ItemKind::Extension(t) = port.kind {
                self.item_types.insert(t.name, t);
            }
        }
        self.kinds.insert(spec.kind, spec);
    }
    /// The item kinds defined outside this crate that registered kinds carry.
    pub fn item_types(&self) -> impl Iterator<Item = &'static ItemType> + '_ {
        self.item_types.values().copied()
    }
    /// Add a kind whose instances are declared by `describe`; `spec` holds
    /// the parameters every instance has (those `describe` reads).
    pub fn register_described(&mut self, spec: BlockSpec, describe: DescribeFn) {
        self.kinds.insert(spec.kind, spec);
        self.described.insert(spec.kind, describe);
    }
    /// How instances of `kind` are declared, when they declare themselves.
    pub fn describer(&self, kind: &str) -> Option<DescribeFn> {
        self.described.get(kind).copied()
    }
    pub fn get(&self, kind: &str) -> Option<&BlockSpec> {
        self.kinds.get(kind)
    }
    pub fn kinds(&self) -> impl Iterator<Item = &BlockSpec> {
        self.kinds.values()
    }
}

#[cfg(test)]
mod params_from_text {
    use crate::kinds::thin;

    #[test]
    fn defaults_overridden_by_the_last_setting_and_checked() {
        let spec = &thin::SPEC;
        assert_eq!(spec.params_from_text(&[]).unwrap().int("stride").unwrap(), 1);
        let set = spec.params_from_text(&[("stride", "3"), ("stride", "7")]).unwrap();
        assert_eq!(set.int("stride").unwrap(), 7);
        let unknown = spec.params_from_text(&[("strides", "3")]).unwrap_err();
        assert!(unknown.contains("no parameter 'strides'"), "{unknown}");
        let bad = spec.params_from_text(&[("stride", "0")]).unwrap_err();
        assert!(bad.contains("parameter 'stride'"), "{bad}");
    }
}
