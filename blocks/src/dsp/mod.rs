//! Signal-processing pieces shared by several blocks (no block code here).
pub mod beam;
pub mod discriminator;
pub mod rng;
pub mod tracking;
