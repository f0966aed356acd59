//! Perturber inversion: is there an unseen mass, and where?
//!
//! - [`kernel`]: the linearised, orbit-marginalised O-C signal of a
//!   perturber hypothesis.
//! - [`search`]: the grid over hypotheses, basins, null simulations.
//! - [`refine`]: the 13-parameter refinement on the full nonlinear model.
//! - [`joint_refine`]: the same for a perturber shared by several bodies.
//! - [`sensitivity`]: detection probability over mass and distance.

pub mod joint_refine;
pub mod kernel;
pub mod profile;
pub mod refine;
pub mod search;
pub mod sensitivity;

pub use kernel::{JointKernel, KeplerOrbit, LinearKernel, SignalKernel};
pub use search::{Hypothesis, Scored, SearchResult, SearchSettings, grid_search};
