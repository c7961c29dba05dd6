//! The standard block kinds, one file each. To add one: write the file with
//! a `pub const SPEC: BlockSpec`, declare it here and list it in [`ALL`].

pub mod discard;
pub mod gate_common;
pub mod lobe_gate;
pub mod pass;
pub mod ratio_discriminator;
pub mod table_writer;
pub mod pulse_framer;
pub mod sweep_gate;
pub mod test_tone;
pub mod tracker;

use crate::block::BlockSpec;

/// Every standard kind, registered by [`crate::standard_registry`].
pub const ALL: &[BlockSpec] = &[
    discard::SPEC,
    pass::SPEC,
    test_tone::SPEC,
    lobe_gate::SPEC,
    sweep_gate::SPEC,
    pulse_framer::SPEC,
    ratio_discriminator::SPEC,
    tracker::SPEC,
    table_writer::SPEC,
];
