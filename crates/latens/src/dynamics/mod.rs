//! Orbital dynamics. Knows nothing of observations, fitting or files.
//!
//! - [`kepler`]: two-body motion: Kepler's equation, conversions between
//!   orbital elements and state vectors, universal-variable propagation.
//! - [`forces`]: the heliocentric force model (Sun, known planets from an
//!   ephemeris, propagated perturbers, indirect terms, optional 1PN solar
//!   term) and its variational equations.
//! - [`integrator`]: the 15th-order Gauss-Radau integrator with dense output.
//! - [`propagate`]: "states (and partials) of these bodies at these epochs".
//! - [`tracked`]: what the tracked body is (its own GM and its kind).

pub mod forces;
pub mod integrator;
pub mod kepler;
pub mod propagate;
pub mod tracked;

pub use forces::{ForceModel, KnownBody};
pub use propagate::{InitialState, Perturber, PropagationSettings, PropagationStats, Propagator, Trajectory};
pub use tracked::{BodyKind, TrackedBody};

use crate::ephemeris::EphemerisError;

/// Errors from propagating orbits.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PropagationError {
    /// The message carries the ephemeris error's own (it is not also a
    /// source, so a printed chain does not say it twice).
    #[error("while propagating: {0}")]
    Ephemeris(EphemerisError),
    #[error(
        "the integration produced a non-finite value at {t_tdb_days} TDB days after J2000.0 (a collision or an escape to infinity?)"
    )]
    NonFinite { t_tdb_days: f64 },
    #[error(
        "the step size fell to {dt_days:e} days at {t_tdb_days} TDB days after J2000.0 (a close encounter too deep to follow)"
    )]
    StepSizeUnderflow { t_tdb_days: f64, dt_days: f64 },
    #[error("more than {max_steps} integration steps were needed")]
    TooManySteps { max_steps: usize },
    #[error("invalid propagation request: {0}")]
    Invalid(String),
}

impl From<EphemerisError> for PropagationError {
    fn from(e: EphemerisError) -> Self {
        PropagationError::Ephemeris(e)
    }
}
