//! The typed block API: a block declares its settings as a struct, its
//! choices as enums and its ports as enums, and implements [`TypedBlock`];
//! [`BlockSpec::typed`] turns that into the one declaration the engine,
//! `check` and the catalog read. DEVELOPERS.md ("Writing a block") walks
//! through a whole block.
//!
//! - [`block_settings!`](crate::block_settings) declares a settings struct:
//!   each field with its parameter type, default and doc. It generates the
//!   `[ParamSpec]` list and a constructor from the checked [`Params`].
//! - [`block_choice!`](crate::block_choice) declares an enum of words a
//!   choice parameter accepts.
//! - [`block_ports!`](crate::block_ports) declares a block's inputs or
//!   outputs as an enum whose variants are the port handles.

use crate::block::{Block, BlockError, BlockSpec, BuildContext, Outputs, PortSpec};
use crate::dsp::discriminator::LobePair;
use crate::error::{BuildError, ParamError};
use crate::facts::{Facts, StreamFacts};
use crate::item::Item;
use crate::param::{ParamSpec, ParamType, Params, Value, distance_in_bins, range_bin_m, time_in_samples};
use std::path::PathBuf;

/// A block written against the typed API.
pub trait TypedBlock: Send + Sized + 'static {
    /// The parameters, declared with [`block_settings!`](crate::block_settings)
    /// (`()` for none).
    type Settings: Settings;
    /// The input ports, declared with [`block_ports!`](crate::block_ports)
    /// ([`NoPorts`] for a source).
    type In: PortSet;
    /// The output ports ([`NoPorts`] for a sink).
    type Out: PortSet;

    /// Make the block from its checked settings.
    fn build(settings: Self::Settings, ctx: &BuildContext) -> Result<Self, BuildError>;

    /// Before any sample flows: take what is known of the inputs (sample
    /// rate, pulse interval, lobes, channels) and say what is known of the
    /// outputs. Turn time and range settings into samples here, so a bad
    /// one is refused by `check` too. The default hands the inputs' facts on.
    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError> {
        Ok(facts.merged())
    }

    /// Handle one item that arrived on input `port`.
    fn process(&mut self, port: Self::In, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        let _ = (port, item, out);
        Ok(())
    }

    /// All inputs have ended: flush whatever is held back.
    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        let _ = out;
        Ok(())
    }

    /// Sources only (blocks without inputs): produce the next items and
    /// return `Ok(true)` while more will follow. Keep each call small (one
    /// chunk) so memory stays bounded.
    fn generate(&mut self, out: &mut Outputs) -> Result<bool, BlockError> {
        let _ = out;
        Ok(false)
    }

    /// False once the block has all the input it will use (a picture of the
    /// first seconds, say): the scheduler then stops delivering items to it,
    /// and calls `finish` when its inputs end. A block must ignore any item
    /// still handed to it after it said so, so its output does not depend on
    /// how items were batched.
    fn wants_input(&self) -> bool {
        true
    }

    /// Sources reading a file: (bytes done, bytes total), for progress bars.
    fn progress(&self) -> Option<(u64, u64)> {
        None
    }
}

/// The engine's view of a [`TypedBlock`]: port numbers become handles.
/// The one implementation of [`Block`] for blocks.
struct Typed<B>(B);

impl<B: TypedBlock> Block for Typed<B> {
    fn start(&mut self, facts: &Facts) -> Result<StreamFacts, BlockError> {
        self.0.start(facts)
    }
    fn process(&mut self, port: usize, item: Item, out: &mut Outputs) -> Result<(), BlockError> {
        match B::In::from_index(port) {
            Some(p) => self.0.process(p, item, out),
            None => Err(BlockError::new(format!("an item arrived on input {port}, which the block does not declare"))),
        }
    }
    fn finish(&mut self, out: &mut Outputs) -> Result<(), BlockError> {
        self.0.finish(out)
    }
    fn generate(&mut self, out: &mut Outputs) -> Result<bool, BlockError> {
        self.0.generate(out)
    }
    fn wants_input(&self) -> bool {
        self.0.wants_input()
    }
    fn progress(&self) -> Option<(u64, u64)> {
        self.0.progress()
    }
}

/// Build a typed block behind the engine's trait.
pub fn boxed<B: TypedBlock>(block: B) -> Box<dyn Block> {
    Box::new(Typed(block))
}

fn build_typed<B: TypedBlock>(p: &Params, ctx: &BuildContext) -> Result<Box<dyn Block>, BuildError> {
    let settings = B::Settings::from_params(p)?;
    Ok(boxed(B::build(settings, ctx)?))
}

impl BlockSpec {
    /// The declaration of a typed block kind: ports, parameters and
    /// constructor all come from `B`.
    pub const fn typed<B: TypedBlock>(kind: &'static str, doc: &'static str) -> BlockSpec {
        BlockSpec {
            kind,
            doc,
            inputs: B::In::SPECS,
            outputs: B::Out::SPECS,
            params: B::Settings::PARAMS,
            build: build_typed::<B>,
        }
    }
}

/// A block's settings struct (see [`block_settings!`](crate::block_settings)).
pub trait Settings: Sized {
    const PARAMS: &'static [ParamSpec];
    fn from_params(p: &Params) -> Result<Self, ParamError>;
}

/// No parameters.
impl Settings for () {
    const PARAMS: &'static [ParamSpec] = &[];
    fn from_params(_: &Params) -> Result<Self, ParamError> {
        Ok(())
    }
}

/// The declarations of two groups of settings, `first` then `second`, as
/// one array (a kind whose settings join a shared group and its own); `N`
/// is their total, checked when the constant is evaluated.
pub const fn joined_params<const N: usize>(first: &[ParamSpec], second: &[ParamSpec]) -> [ParamSpec; N] {
    assert!(first.len() + second.len() == N, "N must be the number of declarations in both groups");
    let filler = ParamSpec { name: "", ty: ParamType::Text, default: None, doc: "" };
    let mut out = [filler; N];
    let mut i = 0;
    while i < N {
        out[i] = if i < first.len() { first[i] } else { second[i - first.len()] };
        i += 1;
    }
    out
}

/// A settings field type: read from the checked parameters by its declaration.
pub trait FromParam: Sized {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError>;
}

impl FromParam for f64 {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        p.num(spec.name)
    }
}

impl FromParam for i64 {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        p.int(spec.name)
    }
}

/// Counts and lengths: a whole number that cannot be negative.
impl FromParam for usize {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        let n = p.int(spec.name)?;
        usize::try_from(n).map_err(|_| ParamError::invalid(spec.name, format!("{n} is negative")))
    }
}

impl FromParam for u64 {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        let n = p.int(spec.name)?;
        u64::try_from(n).map_err(|_| ParamError::invalid(spec.name, format!("{n} is negative")))
    }
}

impl FromParam for bool {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        p.flag(spec.name)
    }
}

impl FromParam for String {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        p.text(spec.name).map(str::to_string)
    }
}

impl FromParam for PathBuf {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        p.text(spec.name).map(|t| PathBuf::from(t.trim()))
    }
}

impl FromParam for Vec<String> {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        p.names(spec.name)
    }
}

/// Lobe pairs, read when the graph was.
impl FromParam for Vec<LobePair> {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        p.lobe_pairs(spec.name).map(<[LobePair]>::to_vec)
    }
}

/// The checked value as it is, for parameter languages parsed at resolve time.
impl FromParam for Value {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        p.get(spec.name).cloned().ok_or_else(|| ParamError::Missing { name: spec.name.to_string() })
    }
}

/// A time setting as written (seconds, samples or pulses), turned into
/// samples once the stream's rate is known.
#[derive(Clone, Debug)]
pub struct TimeSetting {
    name: &'static str,
    value: Value,
    ty: ParamType,
}

impl TimeSetting {
    /// The value as given.
    pub fn value(&self) -> &Value {
        &self.value
    }
    /// The time as a count of samples at `rate` (`pri_samples` for pulses),
    /// a count held to the limits of its seconds form.
    pub fn samples(&self, rate: f64, pri_samples: Option<f64>) -> Result<f64, ParamError> {
        time_in_samples(self.name, &self.value, Some(&self.ty), rate, pri_samples)
    }
    /// True for a zero time in any unit.
    pub fn is_zero(&self) -> bool {
        matches!(self.value, Value::Seconds(x) | Value::Samples(x) | Value::Pulses(x) | Value::Number(x) if x == 0.0)
    }
    /// True when given in pulses: it needs the pulse interval.
    pub fn in_pulses(&self) -> bool {
        matches!(self.value, Value::Pulses(_))
    }
}

impl FromParam for TimeSetting {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        let value = Value::from_param(p, spec)?;
        Ok(TimeSetting { name: spec.name, value, ty: spec.ty })
    }
}

/// A distance setting as written (metres or range bins), turned into bins
/// once the stream's rate is known.
#[derive(Clone, Debug)]
pub struct DistanceSetting {
    name: &'static str,
    value: Value,
    ty: ParamType,
}

impl DistanceSetting {
    pub fn value(&self) -> &Value {
        &self.value
    }
    /// The parameter's name, for messages.
    pub fn name(&self) -> &'static str {
        self.name
    }
    /// The distance as a fractional count of range bins at `rate`.
    pub fn bins(&self, rate: f64) -> Result<f64, ParamError> {
        distance_in_bins(self.name, &self.value, Some(&self.ty), rate)
    }
    /// The distance in metres; a count of bins is converted at `rate`.
    pub fn metres(&self, rate: f64) -> Result<f64, ParamError> {
        match self.value {
            Value::Metres(m) | Value::Number(m) => Ok(m),
            _ => Ok(self.bins(rate)? * range_bin_m(rate)),
        }
    }
    /// True for a zero distance in any unit.
    pub fn is_zero(&self) -> bool {
        matches!(self.value, Value::Metres(x) | Value::Bins(x) | Value::Number(x) if x == 0.0)
    }
}

impl FromParam for DistanceSetting {
    fn from_param(p: &Params, spec: &ParamSpec) -> Result<Self, ParamError> {
        let value = Value::from_param(p, spec)?;
        Ok(DistanceSetting { name: spec.name, value, ty: spec.ty })
    }
}

/// An enum of the words a choice parameter accepts (see
/// [`block_choice!`](crate::block_choice)).
pub trait Choice: Copy + 'static {
    const WORDS: &'static [&'static str];
    fn word(self) -> &'static str;
    fn from_word(word: &str) -> Option<Self>;
}

/// Read a choice parameter; a word the enum does not know is an error
/// listing the ones it does.
pub fn choice_from_param<C: Choice>(p: &Params, spec: &ParamSpec) -> Result<C, ParamError> {
    let word = p.text(spec.name)?.trim();
    C::from_word(word).ok_or_else(|| ParamError::UnknownWord {
        name: spec.name.to_string(),
        word: word.to_string(),
        accepted: C::WORDS,
    })
}

/// A block's input or output ports (see [`block_ports!`](crate::block_ports)).
pub trait PortSet: Copy + Send + Sync + 'static {
    const SPECS: &'static [PortSpec];
    fn from_index(index: usize) -> Option<Self>;
}

/// The ports of a block whose instances declare their own (a program that
/// describes itself): a handle is the port's position in the instance's
/// declaration, and the kind declares none.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct InstancePort(pub usize);

impl PortSet for InstancePort {
    const SPECS: &'static [PortSpec] = &[];
    fn from_index(index: usize) -> Option<Self> {
        Some(InstancePort(index))
    }
}

impl PortIndex for InstancePort {
    fn port_index(self) -> usize {
        self.0
    }
}

impl OutputPort for InstancePort {}

/// Something naming a port by its position. A typed port
/// handle is the only way a block names one; bare numbers stay inside the engine.
pub trait PortIndex: Copy {
    fn port_index(self) -> usize;
}

/// A handle of an output port, accepted by [`Outputs::push`].
pub trait OutputPort: PortIndex {}

/// The ports of a block that has none on that side (a source's inputs, a
/// sink's outputs).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum NoPorts {}

impl PortSet for NoPorts {
    const SPECS: &'static [PortSpec] = &[];
    fn from_index(_: usize) -> Option<Self> {
        None
    }
}

/// Declares a settings struct: one field per parameter, with its type in the
/// block's Rust code and its declaration (parameter type, default, one-line
/// doc) as the graph sees it.
///
/// ```
/// use lobeflow_blocks::{ParamType, TimeSetting, Unit, block_settings, Settings};
///
/// block_settings! {
///     /// Settings of a hold block.
///     pub struct HoldSettings {
///         level: f64 { ty: ParamType::Number { unit: Unit::None, min: 0.0, max: 1.0 }, default: Some("0.5"), doc: "threshold" },
///         hold: TimeSetting { ty: ParamType::Time { min_s: 0.0, max_s: 1.0, pulses: false }, default: Some("2 ms"), doc: "how long" },
///     }
/// }
/// assert_eq!(HoldSettings::PARAMS[1].name, "hold");
/// assert_eq!(HoldSettings::PARAMS[1].default, Some("2 ms"));
/// ```
#[macro_export]
macro_rules! block_settings {
    (
        $(#[$meta:meta])*
        $vis:vis struct $name:ident {
            $( $field:ident : $fty:ty { ty: $pty:expr, default: $default:expr, doc: $doc:literal $(,)? } ),* $(,)?
        }
    ) => {
        $(#[$meta])*
        #[derive(Clone, Debug)]
        // The docs are the catalog's plain text (`<path>.png`), not markup.
        #[allow(rustdoc::invalid_html_tags)]
        $vis struct $name {
            $( #[doc = $doc] pub $field: $fty, )*
        }

        impl $crate::Settings for $name {
            const PARAMS: &'static [$crate::ParamSpec] = &[
                $( $crate::ParamSpec { name: stringify!($field), ty: $pty, default: $default, doc: $doc }, )*
            ];
            fn from_params(p: &$crate::Params) -> ::std::result::Result<Self, $crate::ParamError> {
                Ok($name {
                    $( $field: <$fty as $crate::FromParam>::from_param(
                        p,
                        &$crate::ParamSpec { name: stringify!($field), ty: $pty, default: $default, doc: $doc },
                    )?, )*
                })
            }
        }
    };
}

/// Declares the words of a choice parameter as an enum; use
/// `ParamType::Choice(Enum::WORDS)` in its declaration.
///
/// ```
/// use lobeflow_blocks::{Choice, block_choice};
///
/// block_choice! {
///     /// How a level is found.
///     pub enum Level { Peak = "peak", Mean = "mean" }
/// }
/// assert_eq!(Level::WORDS, ["peak", "mean"]);
/// assert_eq!(Level::from_word("mean"), Some(Level::Mean));
/// assert_eq!(Level::Peak.word(), "peak");
/// ```
#[macro_export]
macro_rules! block_choice {
    (
        $(#[$meta:meta])*
        $vis:vis enum $name:ident { $( $(#[$vmeta:meta])* $variant:ident = $word:literal ),+ $(,)? }
    ) => {
        $(#[$meta])*
        #[derive(Clone, Copy, Debug, PartialEq, Eq)]
        $vis enum $name { $( $(#[$vmeta])* $variant, )+ }

        impl $name {
            /// The accepted words, in declaration order.
            pub const WORDS: &'static [&'static str] = &[$($word),+];
        }

        impl $crate::Choice for $name {
            const WORDS: &'static [&'static str] = &[$($word),+];
            fn word(self) -> &'static str {
                match self { $( $name::$variant => $word, )+ }
            }
            fn from_word(word: &str) -> Option<Self> {
                [$($name::$variant),+].into_iter().find(|v| $crate::Choice::word(*v) == word)
            }
        }

        impl $crate::FromParam for $name {
            fn from_param(p: &$crate::Params, spec: &$crate::ParamSpec) -> ::std::result::Result<Self, $crate::ParamError> {
                $crate::typed::choice_from_param(p, spec)
            }
        }

        impl ::std::fmt::Display for $name {
            fn fmt(&self, f: &mut ::std::fmt::Formatter<'_>) -> ::std::fmt::Result {
                f.write_str($crate::Choice::word(*self))
            }
        }
    };
}

/// Declares a block's input or output ports as an enum: each variant is the
/// handle of one port (`required`/`optional`, name, item kind, doc), in
/// order. Output handles go to [`Outputs::push`]; input handles arrive in
/// [`TypedBlock::process`].
///
/// ```
/// use lobeflow_blocks::{ItemKind, PortSet, block_ports};
///
/// block_ports! {
///     inputs pub enum MixIn {
///         Main = required("main", ItemKind::Samples, "the stream to mix into"),
///         Aside = optional("aside", ItemKind::Samples, "mixed in when wired"),
///     }
/// }
/// assert_eq!(MixIn::SPECS[1].name, "aside");
/// assert_eq!(MixIn::from_index(1), Some(MixIn::Aside));
/// ```
#[macro_export]
macro_rules! block_ports {
    (
        $(#[$meta:meta])*
        inputs $vis:vis enum $name:ident { $( $(#[$vmeta:meta])* $variant:ident = $how:ident($port:literal, $kind:expr, $doc:literal) ),+ $(,)? }
    ) => {
        $crate::block_ports!(@enum $(#[$meta])* $vis $name { $( $(#[$vmeta])* $variant = $how($port, $kind, $doc) ),+ });
    };
    (
        $(#[$meta:meta])*
        outputs $vis:vis enum $name:ident { $( $(#[$vmeta:meta])* $variant:ident = $how:ident($port:literal, $kind:expr, $doc:literal) ),+ $(,)? }
    ) => {
        $crate::block_ports!(@enum $(#[$meta])* $vis $name { $( $(#[$vmeta])* $variant = $how($port, $kind, $doc) ),+ });
        impl $crate::OutputPort for $name {}
    };
    (@enum $(#[$meta:meta])* $vis:vis $name:ident { $( $(#[$vmeta:meta])* $variant:ident = $how:ident($port:literal, $kind:expr, $doc:literal) ),+ }) => {
        $(#[$meta])*
        #[derive(Clone, Copy, Debug, PartialEq, Eq)]
        $vis enum $name { $( $(#[$vmeta])* #[doc = $doc] $variant, )+ }

        impl $crate::PortSet for $name {
            const SPECS: &'static [$crate::PortSpec] = &[$( $crate::PortSpec::$how($port, $kind, $doc), )+];
            fn from_index(index: usize) -> Option<Self> {
                [$($name::$variant),+].get(index).copied()
            }
        }

        impl $crate::PortIndex for $name {
            fn port_index(self) -> usize {
                self as usize
            }
        }
    };
}
