//! Graph files: reading them, settling settings, expanding composites and
//! checking everything before a sample flows.

mod checks;
pub(crate) mod error;
pub mod file;
pub(crate) mod resolve;

pub use error::GraphError;
pub use resolve::{KnobValue, Origin, Override, Overrides, ResolvedBlock, ResolvedGraph, Wire, resolve};
