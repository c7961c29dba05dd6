//! The standard block kinds, one file each. To add one: write the file with
//! a `pub const SPEC: BlockSpec`, declare it here and list it in [`ALL`].

pub mod dc_remove;
pub mod discard;
pub mod frequency_shift;
pub(crate) mod gate_common;
pub mod lobe_gate;
pub mod lowpass_decimate;
pub mod matched_filter;
pub mod pass;
pub mod pulse_framer;
pub mod range_gate;
pub mod ratio_discriminator;
pub mod sweep_gate;
pub mod table_writer;
pub mod test_tone;
pub mod thin;
pub mod tone_dwell;
pub mod tracker;

use crate::block::BlockSpec;

/// Every standard kind, registered by [`crate::standard_registry`].
pub const ALL: &[BlockSpec] = &[
    dc_remove::SPEC,
    discard::SPEC,
    frequency_shift::SPEC,
    thin::SPEC,
    lobe_gate::SPEC,
    lowpass_decimate::SPEC,
    matched_filter::SPEC,
    pass::SPEC,
    pulse_framer::SPEC,
    range_gate::SPEC,
    ratio_discriminator::SPEC,
    sweep_gate::SPEC,
    table_writer::SPEC,
    test_tone::SPEC,
    tone_dwell::SPEC,
    tracker::SPEC,
];
