//! Signal-processing pieces shared by several blocks (no block code here).
pub mod beam;
pub mod compressed_gate;
pub mod discriminator;
pub mod event_period;
pub mod gate;
pub mod pulse_timing;
pub mod rng;
pub mod smoother;
pub mod spectrum;
pub mod sweep_label_check;
pub mod switch_finder;
pub mod switch_schedule;
pub mod switch_sync;
pub mod sync_levels;
pub mod sync_tracker;
pub mod timing_check;
pub mod tracking;
