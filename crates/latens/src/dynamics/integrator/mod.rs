//! Integrators for second-order systems `x'' = a(t, x, x')`.
//!
//! One file per method. There is one method so far, [`GaussRadau`], a
//! 15th-order implicit Gauss-Radau integrator with adaptive steps and dense
//! output. The interface is the [`SecondOrderSystem`] trait, so the integrator
//! knows nothing about gravity and is tested on problems with known answers.

mod gauss_radau;

pub use gauss_radau::{GaussRadau, RADAU_NODES, StepOutcome};

/// A system of second-order ODEs `x'' = a(t, x, x')` with `dim()` components.
pub trait SecondOrderSystem {
    /// Number of scalar components of x (and of v, and of a).
    fn dim(&self) -> usize;

    /// The leading components that steer the step size (the rest, e.g.
    /// variational equations, follow the steps those choose).
    fn control_dim(&self) -> usize {
        self.dim()
    }

    /// Called once before the nodes of a step starting at `t0` with length
    /// `dt` are evaluated, so the system can prepare per-node data (for
    /// example the known planets' positions at the eight node times). A step
    /// may be tried more than once with different `dt`.
    fn begin_step(&mut self, t0: f64, dt: f64) -> Result<(), super::PropagationError>;

    /// Accelerations at node `node` (0 = the step's start, 1..=7 the Radau
    /// nodes) of the step announced by `begin_step`, at time `t`.
    fn accelerations(
        &mut self,
        node: usize,
        t: f64,
        x: &[f64],
        v: &[f64],
        a: &mut [f64],
    ) -> Result<(), super::PropagationError>;
}
