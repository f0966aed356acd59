//! Perturber inversion: is there an unseen mass, and where?
//!
//! - [`kernel`]: the linearised, orbit-marginalised O-C signal of a
//!   perturber hypothesis.

pub mod kernel;

pub use kernel::{KeplerOrbit, LinearKernel};
