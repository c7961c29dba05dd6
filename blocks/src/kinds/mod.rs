//! The standard block kinds, one file each. To add one: write the file with
//! a `pub const SPEC: BlockSpec`, declare it here and list it in [`ALL`].

pub mod dc_remove;
pub mod discard;
pub mod frequency_shift;
pub mod lowpass_decimate;
pub mod matched_filter;
pub mod pass;
pub mod range_gate;
pub mod test_tone;
pub mod tone_dwell;

use crate::block::BlockSpec;

/// Every standard kind, registered by [`crate::standard_registry`].
pub const ALL: &[BlockSpec] = &[
    dc_remove::SPEC,
    discard::SPEC,
    frequency_shift::SPEC,
    lowpass_decimate::SPEC,
    matched_filter::SPEC,
    pass::SPEC,
    range_gate::SPEC,
    test_tone::SPEC,
    tone_dwell::SPEC,
];
