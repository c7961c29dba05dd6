//! # lobeflow-blocks
//!
//! The block trait, the stream items, the standard signal-processing
//! blocks and the capture readers and writers ([`capture`]) of lobeflow, a toolkit for lobe-switching angle trackers. This
//! crate is all a researcher needs to write a new block: implement
//! [`TypedBlock`], declare it with [`BlockSpec::typed`], and register it in
//! a [`Registry`].
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

// Everything a block author uses of these is re-exported below.
mod block;
pub mod capture;
pub mod csv_table;
mod decimal;
pub mod dsp;
mod error;
mod facts;
mod item;
pub mod kinds;
mod limits;
mod output_file;
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
pub use limits::{BLOCK_MEMORY, MAX_PRF, MAX_SAMPLE_RATE, MEMORY_CEILING, check_memory};
pub use output_file::{DeliveryPolicy, OutputFile};
pub use param::{ParamSpec, ParamType, Params, RawValue, SPEED_OF_LIGHT, Unit, Value, closest, range_bin_m};
pub use typed::{
    Choice, DistanceSetting, FromParam, InstancePort, NoPorts, OutputPort, PortIndex, PortSet, Settings, TimeSetting,
    TypedBlock,
};

/// What a block writer needs, in one import: `use lobeflow_blocks::prelude::*;`.
pub mod prelude {
    pub use crate::block::{BlockError, BlockSpec, BuildContext, Outputs, Registry};
    pub use crate::error::{BuildError, ParamError};
    pub use crate::facts::{Channels, Facts, LabelledSpan, StreamFacts};
    pub use crate::item::{
        AngleEstimate, DwellRecord, ExtensionItem, Item, ItemKind, ItemType, LobeSegment, LobeTag, RowCells,
        SampleChunk, Span, Stamp, Sweep, TableRow,
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
    for spec in kinds::ALL.iter().chain(capture::ALL) {
        r.register(*spec);
    }
    #[cfg(feature = "pictures")]
    for spec in pictures::ALL {
        r.register(*spec);
    }
    r
}
