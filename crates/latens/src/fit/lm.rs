//! Levenberg-Marquardt in its scaled trust-region form.
//!
//! Each iteration takes the Jacobian J, scales its columns by D (the largest
//! column norms seen so far, as in MINPACK), and decomposes J D^-1 = U S V^T
//! once; the step for any damping lambda is then
//!
//!   delta = -D^-1 V diag(s / (s^2 + lambda)) U^T r,
//!
//! so trying a smaller trust region after a failed step costs no new
//! decomposition. The damping is the one whose scaled step |D delta| fits the
//! trust-region radius (found by bisection; the Gauss-Newton step when it
//! fits already). A step is taken when the actual reduction of the cost is a
//! positive share (1e-4) of the reduction the linear model predicted; the
//! radius is halved when that share is below 1/4 and set to twice the step
//! when it is above 3/4.
//!
//! Reference: Moré (1978), Lecture Notes in Mathematics 630, 105 (scaling,
//! trust region, radius update); Madsen, Nielsen & Tingleff (2004), *Methods
//! for Non-Linear Least Squares Problems*, sec. 3.2.

use faer::Mat;

use super::{FitError, LeastSquaresProblem};

/// Which convergence test ended the fit.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Criterion {
    /// The scaled gradient (cosine between the residual and every column of J) fell below `gtol`.
    Gradient,
    /// The scaled step fell below `xtol` of the scaled parameters.
    Step,
    /// Actual and predicted relative reductions of the cost fell below `ftol`.
    Cost,
    /// The residuals are zero.
    ExactFit,
    /// Even the undamped step could lower the cost by no more than rounding
    /// allows (1e-10 of it): a minimum to working precision.
    NoFurtherReduction,
}

/// Why the fit stopped. Stopping is not failing: every variant comes with the
/// best parameters found.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Termination {
    Converged(Criterion),
    MaxIterations,
    /// No step reduced the cost even with the largest damping: the start is at
    /// a minimum to working precision, or the problem is badly scaled.
    DampingOverflow,
}

/// The outcome of a fit.
#[derive(Clone, Debug, PartialEq)]
pub struct LmReport {
    pub params: Vec<f64>,
    /// Whitened residuals at `params`.
    pub residuals: Vec<f64>,
    /// Sum of squared whitened residuals (chi-square).
    pub cost: f64,
    pub iterations: usize,
    pub termination: Termination,
    /// (J^T J)^-1 at the solution, row-major `n_params x n_params`: the
    /// covariance of the parameters when the residuals are whitened.
    pub covariance: Vec<f64>,
    /// Ratio of the largest to the smallest singular value of the
    /// column-scaled Jacobian.
    pub condition_number: f64,
    pub residual_evaluations: usize,
    pub jacobian_evaluations: usize,
    /// Non-fatal diagnostics (ill-conditioning, iteration limit).
    pub warnings: Vec<String>,
}

impl LmReport {
    /// Formal standard error of parameter `k`.
    pub fn sigma(&self, k: usize) -> f64 {
        let n = self.params.len();
        self.covariance[k * n + k].sqrt()
    }
}

/// How the parameters are scaled for the damping term.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Scaling {
    /// By the largest column norms of the Jacobian seen so far (MINPACK's
    /// default; invariant to the parameters' units).
    Jacobian,
    /// Not at all (Levenberg's original damping).
    Identity,
}

/// Solver settings. Construct with [`Lm::new`] and adjust with the validating
/// `with_*` methods.
///
/// A fit that ends on a plateau (no step reduces the cost, or the Jacobian
/// loses rank) with one scaling is repeated from the start with the other, and
/// the better result is kept, with a warning. Jacobian scaling alone, like
/// MINPACK's, stalls on NIST's BoxBOD from its first start (an exponential
/// rate driven to a value where the model saturates).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Lm {
    max_iterations: usize,
    ftol: f64,
    xtol: f64,
    gtol: f64,
    scaling: Scaling,
}

impl Default for Lm {
    fn default() -> Self {
        Lm::new()
    }
}

/// Condition numbers above this get a warning.
const ILL_CONDITIONED: f64 = 1e10;

impl Lm {
    pub fn new() -> Self {
        Lm { max_iterations: 200, ftol: 1e-15, xtol: 1e-12, gtol: 1e-12, scaling: Scaling::Jacobian }
    }

    pub fn with_max_iterations(mut self, n: usize) -> Result<Self, FitError> {
        if n == 0 {
            return Err(FitError::Setting("max_iterations must be at least 1".into()));
        }
        self.max_iterations = n;
        Ok(self)
    }

    /// Relative tolerances on the cost reduction, the step and the scaled gradient.
    pub fn with_tolerances(mut self, ftol: f64, xtol: f64, gtol: f64) -> Result<Self, FitError> {
        for (name, v) in [("ftol", ftol), ("xtol", xtol), ("gtol", gtol)] {
            if !(v.is_finite() && v >= 0.0) {
                return Err(FitError::Setting(format!("{name} must be finite and not negative, got {v}")));
            }
        }
        (self.ftol, self.xtol, self.gtol) = (ftol, xtol, gtol);
        Ok(self)
    }

    /// The scaling tried first.
    pub fn with_scaling(mut self, scaling: Scaling) -> Self {
        self.scaling = scaling;
        self
    }

    /// Minimises the problem from `start`.
    pub fn minimize<P: LeastSquaresProblem + ?Sized>(
        &self,
        problem: &mut P,
        start: &[f64],
    ) -> Result<LmReport, FitError> {
        let first = self.minimize_with(problem, start, self.scaling)?;
        let stalled = first.termination == Termination::DampingOverflow || first.condition_number > 1e14;
        if !stalled {
            return Ok(first);
        }
        let other = match self.scaling {
            Scaling::Jacobian => Scaling::Identity,
            Scaling::Identity => Scaling::Jacobian,
        };
        let mut second = match self.minimize_with(problem, start, other) {
            Ok(r) => r,
            Err(_) => return Ok(first),
        };
        if second.cost < first.cost {
            second.residual_evaluations += first.residual_evaluations;
            second.jacobian_evaluations += first.jacobian_evaluations;
            second.warnings.push(format!(
                "the first attempt stalled on a plateau (chi-square {:.6e}); the fit was repeated with {other:?} scaling",
                first.cost
            ));
            problem.residuals(&second.params, &mut vec![0.0; problem.n_residuals()])?;
            Ok(second)
        } else {
            problem.residuals(&first.params, &mut vec![0.0; problem.n_residuals()])?;
            Ok(first)
        }
    }

    fn minimize_with<P: LeastSquaresProblem + ?Sized>(
        &self,
        problem: &mut P,
        start: &[f64],
        scaling: Scaling,
    ) -> Result<LmReport, FitError> {
        let n = problem.n_params();
        let m = problem.n_residuals();
        if m < n || n == 0 {
            return Err(FitError::TooFewResiduals { n_residuals: m, n_params: n });
        }
        let mut params = start.to_vec();
        let mut r = vec![0.0; m];
        problem.residuals(&params, &mut r)?;
        let mut evaluations = 1usize;
        if !r.iter().all(|x| x.is_finite()) {
            return Err(FitError::NonFiniteStart);
        }
        let mut cost = sum_sq(&r);
        let mut jac = Mat::<f64>::zeros(m, n);
        let mut jacobians = 0usize;
        let mut scale = vec![0.0f64; n];
        let mut radius = -1.0;
        let mut trial = vec![0.0; m];
        let mut termination = Termination::MaxIterations;
        let mut iterations = 0;
        let mut decomposition = None;

        for iteration in 0..self.max_iterations {
            iterations = iteration + 1;
            problem.jacobian(&params, &mut jac)?;
            jacobians += 1;
            if cost == 0.0 {
                termination = Termination::Converged(Criterion::ExactFit);
                break;
            }
            for (j, s) in scale.iter_mut().enumerate() {
                *s = match scaling {
                    Scaling::Jacobian => {
                        let norm = (0..m).map(|i| jac[(i, j)] * jac[(i, j)]).sum::<f64>().sqrt();
                        s.max(norm).max(f64::MIN_POSITIVE)
                    }
                    Scaling::Identity => 1.0,
                };
            }
            // Scaled gradient test: cosine between r and each column of J.
            let rnorm = cost.sqrt();
            let gmax = (0..n)
                .map(|j| {
                    let cn = (0..m).map(|i| jac[(i, j)] * jac[(i, j)]).sum::<f64>().sqrt();
                    if cn == 0.0 { 0.0 } else { ((0..m).map(|i| jac[(i, j)] * r[i]).sum::<f64>() / (cn * rnorm)).abs() }
                })
                .fold(0.0, f64::max);
            if gmax <= self.gtol {
                termination = Termination::Converged(Criterion::Gradient);
                break;
            }
            let svd = ScaledSvd::new(&jac, &scale)?;
            let ur = svd.u_transpose_times(&r);
            let scaled_params = params.iter().zip(&scale).map(|(p, s)| (p * s).powi(2)).sum::<f64>().sqrt();
            if radius < 0.0 {
                // MINPACK's initial trust region: 100 times the scaled
                // parameters (or 100 if they are zero).
                radius = if scaled_params > 0.0 { 100.0 * scaled_params } else { 100.0 };
            }
            let mut accepted = false;
            let mut stop = None;
            let mut first_predicted = None;
            for _ in 0..60 {
                let lambda = svd.damping_for_radius(&ur, radius);
                let delta = svd.step(&ur, lambda);
                let scaled_step = delta.iter().zip(&scale).map(|(d, s)| (d * s).powi(2)).sum::<f64>().sqrt();
                let candidate: Vec<f64> = params.iter().zip(&delta).map(|(p, d)| p + d).collect();
                let ok = problem.residuals(&candidate, &mut trial).is_ok() && trial.iter().all(|x| x.is_finite());
                evaluations += 1;
                // Predicted cost: |r + J delta|^2.
                let predicted_cost = (0..m)
                    .map(|i| {
                        let jd: f64 = (0..n).map(|j| jac[(i, j)] * delta[j]).sum();
                        (r[i] + jd) * (r[i] + jd)
                    })
                    .sum::<f64>();
                let predicted = cost - predicted_cost;
                first_predicted.get_or_insert(predicted);
                let new_cost = if ok { sum_sq(&trial) } else { f64::INFINITY };
                let actual = cost - new_cost;
                let rho = if predicted > 0.0 { actual / predicted } else { -1.0 };
                // Trust-region radius update (More 1978): shrink on a poor
                // agreement, grow to twice the step on a good one.
                if rho < 0.25 {
                    radius = 0.5 * scaled_step.min(radius);
                } else if rho > 0.75 || lambda == 0.0 {
                    radius = radius.max(2.0 * scaled_step);
                }
                if ok && rho > 1e-4 {
                    params = candidate;
                    std::mem::swap(&mut r, &mut trial);
                    let old_cost = cost;
                    cost = new_cost;
                    accepted = true;
                    if actual <= self.ftol * old_cost && predicted <= self.ftol * old_cost {
                        stop = Some(Criterion::Cost);
                    } else if scaled_step <= self.xtol * (scaled_params + self.xtol) {
                        stop = Some(Criterion::Step);
                    }
                    break;
                }
                if radius <= f64::EPSILON * scaled_params.max(f64::MIN_POSITIVE) || !radius.is_finite() {
                    break;
                }
            }
            decomposition = Some(svd);
            if let Some(c) = stop {
                termination = Termination::Converged(c);
                problem.jacobian(&params, &mut jac)?;
                jacobians += 1;
                decomposition = None;
                break;
            }
            if !accepted {
                termination = if first_predicted.is_some_and(|p| p <= 1e-10 * cost) {
                    Termination::Converged(Criterion::NoFurtherReduction)
                } else {
                    Termination::DampingOverflow
                };
                break;
            }
        }

        // Covariance (J^T J)^-1 = D^-1 V S^-2 V^T D^-1 at the final point.
        let svd = match decomposition {
            Some(s)
                if matches!(
                    termination,
                    Termination::DampingOverflow | Termination::Converged(Criterion::NoFurtherReduction)
                ) =>
            {
                s
            }
            _ => {
                if !matches!(termination, Termination::Converged(Criterion::Gradient | Criterion::ExactFit)) {
                    problem.jacobian(&params, &mut jac)?;
                    jacobians += 1;
                }
                let mut final_scale = vec![0.0; n];
                for (j, s) in final_scale.iter_mut().enumerate() {
                    *s = (0..m).map(|i| jac[(i, j)] * jac[(i, j)]).sum::<f64>().sqrt().max(f64::MIN_POSITIVE);
                }
                ScaledSvd::new(&jac, &final_scale)?
            }
        };
        let condition_number = if svd.s[n - 1] > 0.0 { svd.s[0] / svd.s[n - 1] } else { f64::INFINITY };
        let covariance = svd.inverse_normal_matrix();
        let mut warnings = Vec::new();
        if condition_number > ILL_CONDITIONED {
            warnings.push(format!(
                "the problem is ill-conditioned (condition number {condition_number:.1e}): some parameter combinations are barely constrained and their formal errors are unreliable"
            ));
        }
        if termination == Termination::MaxIterations {
            warnings
                .push(format!("stopped after {} iterations without meeting a convergence test", self.max_iterations));
        }
        Ok(LmReport {
            params,
            residuals: r,
            cost,
            iterations,
            termination,
            covariance,
            condition_number,
            residual_evaluations: evaluations,
            jacobian_evaluations: jacobians,
            warnings,
        })
    }
}

fn sum_sq(v: &[f64]) -> f64 {
    v.iter().map(|x| x * x).sum()
}

/// The thin SVD of J with its columns divided by `scale`.
struct ScaledSvd {
    u: Mat<f64>,
    s: Vec<f64>,
    v: Mat<f64>,
    scale: Vec<f64>,
}

impl ScaledSvd {
    fn new(jac: &Mat<f64>, scale: &[f64]) -> Result<Self, FitError> {
        let (m, n) = (jac.nrows(), jac.ncols());
        let scaled = Mat::<f64>::from_fn(m, n, |i, j| jac[(i, j)] / scale[j]);
        let svd = scaled.thin_svd().map_err(|e| FitError::Decomposition(format!("{e:?}")))?;
        let s: Vec<f64> = (0..n).map(|k| svd.S().column_vector()[k]).collect();
        Ok(ScaledSvd { u: svd.U().to_owned(), s, v: svd.V().to_owned(), scale: scale.to_vec() })
    }

    fn u_transpose_times(&self, r: &[f64]) -> Vec<f64> {
        (0..self.s.len()).map(|k| (0..r.len()).map(|i| self.u[(i, k)] * r[i]).sum()).collect()
    }

    /// The smallest damping whose scaled step fits inside `radius` (0 when
    /// the Gauss-Newton step already does), by bisection on log(lambda): the
    /// scaled step length sqrt(sum (s_k c_k / (s_k^2 + lambda))^2) falls
    /// monotonically with lambda.
    fn damping_for_radius(&self, ur: &[f64], radius: f64) -> f64 {
        let length = |lambda: f64| -> f64 {
            self.s
                .iter()
                .zip(ur)
                .map(|(&s, &c)| if s > 0.0 { (s * c / (s * s + lambda)).powi(2) } else { 0.0 })
                .sum::<f64>()
                .sqrt()
        };
        if length(0.0) <= 1.1 * radius {
            return 0.0;
        }
        let sc = self.s.iter().zip(ur).map(|(s, c)| (s * c).powi(2)).sum::<f64>().sqrt();
        let (mut lo, mut hi) =
            ((self.s[0] * self.s[0] * 1e-16).max(f64::MIN_POSITIVE).ln(), (sc / radius).max(1e-300).ln());
        if hi <= lo {
            return hi.exp();
        }
        for _ in 0..100 {
            let mid = 0.5 * (lo + hi);
            if length(mid.exp()) > radius {
                lo = mid;
            } else {
                hi = mid;
            }
            if hi - lo < 1e-3 {
                break;
            }
        }
        hi.exp()
    }

    /// The damped step for `lambda`, in unscaled parameters.
    fn step(&self, ur: &[f64], lambda: f64) -> Vec<f64> {
        let n = self.s.len();
        let coef: Vec<f64> = (0..n)
            .map(|k| {
                let s = self.s[k];
                if s > 0.0 { -s * ur[k] / (s * s + lambda) } else { 0.0 }
            })
            .collect();
        (0..n).map(|j| (0..n).map(|k| self.v[(j, k)] * coef[k]).sum::<f64>() / self.scale[j]).collect()
    }

    fn inverse_normal_matrix(&self) -> Vec<f64> {
        let n = self.s.len();
        let mut out = vec![0.0; n * n];
        for a in 0..n {
            for b in 0..n {
                let mut sum = 0.0;
                for k in 0..n {
                    let s = self.s[k];
                    if s > 0.0 {
                        sum += self.v[(a, k)] * self.v[(b, k)] / (s * s);
                    } else {
                        sum = f64::INFINITY;
                    }
                }
                out[a * n + b] = sum / (self.scale[a] * self.scale[b]);
            }
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Fit y = a x + b to exact data: one step, exact answer, known covariance.
    struct Line {
        x: Vec<f64>,
        y: Vec<f64>,
        sigma: f64,
    }
    impl LeastSquaresProblem for Line {
        fn n_params(&self) -> usize {
            2
        }
        fn n_residuals(&self) -> usize {
            self.x.len()
        }
        fn residuals(&mut self, p: &[f64], out: &mut [f64]) -> Result<(), FitError> {
            for ((o, x), y) in out.iter_mut().zip(&self.x).zip(&self.y) {
                *o = (p[0] * x + p[1] - y) / self.sigma;
            }
            Ok(())
        }
        fn jacobian(&mut self, _p: &[f64], out: &mut Mat<f64>) -> Result<(), FitError> {
            for i in 0..self.x.len() {
                out[(i, 0)] = self.x[i] / self.sigma;
                out[(i, 1)] = 1.0 / self.sigma;
            }
            Ok(())
        }
    }

    #[test]
    fn straight_line_recovers_parameters_and_textbook_covariance() {
        let x: Vec<f64> = (0..10).map(|k| k as f64).collect();
        let y: Vec<f64> = x.iter().map(|x| 3.0 * x - 2.0).collect();
        let mut p = Line { x: x.clone(), y, sigma: 0.5 };
        let rep = Lm::new().minimize(&mut p, &[0.0, 0.0]).unwrap();
        assert!((rep.params[0] - 3.0).abs() < 1e-10 && (rep.params[1] + 2.0).abs() < 1e-10, "{:?}", rep.params);
        // Var(slope) = sigma^2 / sum (x - mean)^2 (common practice).
        let sxx: f64 = x.iter().map(|v| (v - 4.5).powi(2)).sum();
        assert!((rep.covariance[0] - 0.25 / sxx).abs() < 1e-12);
        assert!(matches!(rep.termination, Termination::Converged(_)));
    }

    #[test]
    fn settings_are_validated() {
        assert!(Lm::new().with_max_iterations(0).is_err());
        assert!(Lm::new().with_tolerances(-1.0, 0.0, 0.0).is_err());
    }
}
