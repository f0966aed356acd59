//! Least-squares fitting. Knows nothing about orbits: a problem is anything
//! that can give whitened residuals and their Jacobian
//! ([`LeastSquaresProblem`]), so the solver is tested on problems with
//! certified answers (NIST StRD) and against scipy.

mod lm;

pub use lm::{Criterion, Lm, LmReport, Scaling, Termination};

use faer::Mat;

/// A weighted least-squares problem: minimise the sum of squares of the
/// residuals, which the problem has already divided by their standard
/// errors (whitened).
pub trait LeastSquaresProblem {
    fn n_params(&self) -> usize;
    fn n_residuals(&self) -> usize;
    /// Whitened residuals at `params`, into `out` (length `n_residuals`).
    fn residuals(&mut self, params: &[f64], out: &mut [f64]) -> Result<(), FitError>;
    /// The Jacobian of the whitened residuals, `n_residuals x n_params`.
    fn jacobian(&mut self, params: &[f64], out: &mut Mat<f64>) -> Result<(), FitError>;
}

/// Errors from fitting.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FitError {
    #[error("the residuals are not finite at the starting point")]
    NonFiniteStart,
    #[error("the problem has {n_residuals} residuals for {n_params} parameters: too few to fit")]
    TooFewResiduals { n_residuals: usize, n_params: usize },
    #[error("the Jacobian could not be decomposed: {0}")]
    Decomposition(String),
    #[error("{0}")]
    Problem(String),
    #[error("invalid solver setting: {0}")]
    Setting(String),
}
