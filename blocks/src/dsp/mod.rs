//! Signal-processing pieces shared by several blocks (no block code here).
pub mod beam;
pub mod discriminator;
pub mod rng;
pub mod tracking;
pub mod switch_sync;
pub mod pulse_timing;
