//! The standard block kinds, one file each. To add one: write the file with
//! a `pub const SPEC: BlockSpec`, declare it here and list it in [`ALL`].

pub mod discard;
pub mod pass;
pub mod ratio_discriminator;
pub mod table_writer;
pub mod test_tone;
pub mod tracker;

use crate::block::BlockSpec;

/// Every standard kind, registered by [`crate::standard_registry`].
pub const ALL: &[BlockSpec] = &[discard::SPEC, pass::SPEC, test_tone::SPEC, ratio_discriminator::SPEC, tracker::SPEC, table_writer::SPEC];
