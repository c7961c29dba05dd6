//! Signal-processing pieces shared by several blocks (no block code here).
pub mod beam;
pub mod rng;
pub mod spectrum;
