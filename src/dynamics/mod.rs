//! Orbital dynamics. Knows nothing of observations, fitting or files.
//!
//! - [`kepler`]: two-body motion: Kepler's equation, conversions between
//!   orbital elements and state vectors, universal-variable propagation.

pub mod kepler;
