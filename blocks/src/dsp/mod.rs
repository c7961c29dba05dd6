//! Signal-processing pieces shared by several blocks (no block code here).
pub mod beam;
pub mod rng;
pub mod gate;
pub mod spectrum;
