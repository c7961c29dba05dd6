//! # lobeflow-blocks
//!
//! The block trait, the stream items and the standard signal-processing
//! blocks of lobeflow, a toolkit for lobe-switching angle trackers. This
//! crate is all a researcher needs to write a new block: implement
//! [`Block`], declare a [`BlockSpec`], and register it in a [`Registry`].
//!
//! The default feature `pictures` adds the picture kinds (PNG and SVG drawn
//! in pure Rust with a bundled font, see [`pictures`]); without it the crate
//! pulls no drawing dependencies.
//!
//! ```
//! let registry = lobeflow_blocks::standard_registry();
//! let pass = registry.get("pass").expect("standard kind");
//! assert_eq!(pass.inputs[0].kind, lobeflow_blocks::ItemKind::Samples);
//! ```

pub mod block;
pub mod decimal;
pub mod dsp;
pub mod error;
pub mod facts;
pub mod item;
pub mod kinds;
pub mod limits;
pub mod output_file;
pub mod param;
#[cfg(feature = "pictures")]
pub mod pictures;
pub mod summary;
pub mod typed;

pub use block::{
    Block, BlockError, BlockSpec, BuildContext, BuildFn, DescribeFn, FileStager, Outputs, PortSpec, Registry,
};
pub use error::{BuildError, ParamError};
pub use facts::{Channels, Facts, LabelledSpan, StreamFacts};
pub use item::*;
pub use limits::{MAX_PRF, MAX_SAMPLE_RATE, MEMORY_CEILING, check_memory};
pub use output_file::{DeliveryPolicy, OutputFile};
pub use param::{ParamSpec, ParamType, Params, RawValue, SPEED_OF_LIGHT, Unit, Value, closest, range_bin_m};
pub use typed::{
    Choice, DistanceSetting, FromParam, NoPorts, OutputPort, PortIndex, PortSet, Settings, TimeSetting, TypedBlock,
};

/// What a block writer needs, in one import: `use lobeflow_blocks::prelude::*;`.
pub mod prelude {
    pub use crate::block::{BlockError, BlockSpec, BuildContext, Outputs, Registry};
    pub use crate::error::{BuildError, ParamError};
    pub use crate::facts::{Channels, Facts, LabelledSpan, StreamFacts};
    pub use crate::item::{
        AngleEstimate, DwellRecord, ExtensionItem, Item, ItemKind, ItemType, LobeSegment, LobeTag, SampleChunk, Span,
        Stamp, Sweep, TableRow,
    };
    pub use crate::param::{ParamType, Unit};
    pub use crate::typed::{Choice, DistanceSetting, NoPorts, TimeSetting, TypedBlock};
    pub use crate::{block_choice, block_ports, block_settings};
}

/// The contributor guide, whose block example is compiled as a doc test.
#[cfg(doctest)]
#[doc = include_str!("../../DEVELOPERS.md")]
pub struct DevelopersGuide;

/// A registry holding every standard block kind of this crate.
pub fn standard_registry() -> Registry {
    let mut r = Registry::new();
    for spec in kinds::ALL {
        r.register(*spec);
    }
    #[cfg(feature = "pictures")]
    for spec in pictures::ALL {
        r.register(*spec);
    }
    r
}
