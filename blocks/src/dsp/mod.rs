//! Signal-processing pieces shared by several blocks (no block code here).
pub mod beam;
pub mod rng;
pub mod switch_sync;
pub mod pulse_timing;
