//! The standard block kinds, one file each. To add one: write the file with
//! a `pub const SPEC: BlockSpec`, declare it here and list it in [`ALL`].

pub mod discard;
pub mod pass;
pub mod range_gate;
pub mod test_tone;
pub mod tone_dwell;

use crate::block::BlockSpec;

/// Every standard kind, registered by [`crate::standard_registry`].
pub const ALL: &[BlockSpec] = &[discard::SPEC, pass::SPEC, range_gate::SPEC, test_tone::SPEC, tone_dwell::SPEC];
