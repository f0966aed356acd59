//! Refinement of a perturber shared by several tracked bodies on the full
//! nonlinear model, by variable projection.
//!
//! The parameters split into the perturber's (its state at the common epoch
//! and ln GM: 7, or ln GM alone with its orbit held) and each body's own
//! orbit (6 per body). For every trial perturber, each body's orbit is
//! refitted on its own with the perturber in place (Levenberg-Marquardt on
//! its 6 parameters, warm-started from its last solution, in parallel over
//! bodies); the outer Levenberg-Marquardt fit sees the bodies' residuals
//! after those refits, and as its Jacobian the perturber's columns with each
//! body's own orbit directions projected out. That is the variable
//! projection method of Golub & Pereyra (1973, SIAM J. Numer. Anal. 10,
//! 413) with Kaufman's (1975, BIT 15, 49) Jacobian; its minimum is the
//! minimum of the full fit over all 6N + 7 parameters, and (J^T J)^-1 of the
//! projected Jacobian is the perturber's covariance marginalised over every
//! body's orbit (the Schur complement of the full normal matrix). The outer
//! fit has 7 parameters however many bodies there are, so the cost grows as
//! the number of bodies (each integrated on its own, as in the kernel: the
//! bodies do not pull on each other).
//!
//! Which of the two fits stands (the perturber's orbit fitted, or held at
//! the grid solution) is decided by the rules of the one-body refinement
//! ([`super::refine::held_reason`]).

use faer::Mat;
use rayon::prelude::*;

use super::refine::held_reason;
use super::search::SearchSettings;
use crate::astrometry::ObservingGeometry;
use crate::dynamics::{ForceModel, Perturber};
use crate::ephemeris::Ephemeris;
use crate::fit::{FitError, LeastSquaresProblem, Lm, LmReport};
use crate::io::observations::Observation;
use crate::reference::{OrbitModel, OrbitProblem, ReferenceFit, whiten, whitened_residuals};
use crate::units::RAD_PER_ARCSEC;
use crate::vec3::Vec3;

/// One body of a joint refinement: its null fit (at the common epoch), its
/// observations, their geometry and its force model.
pub struct JointPart<'a> {
    pub name: &'a str,
    pub null: &'a ReferenceFit,
    pub observations: &'a [Observation],
    pub geometry: &'a [ObservingGeometry],
    pub model: &'a ForceModel,
}

/// How the joint refinement went.
#[derive(Clone, Debug)]
pub struct JointRefinement {
    /// Each body's refitted state at the common epoch, in the parts' order.
    pub tracked_states: Vec<[f64; 6]>,
    pub perturber: Perturber,
    /// Chi-square of the full model over all bodies (used observations).
    pub chi2: f64,
    /// Each body's part of `chi2`.
    pub chi2_by_body: Vec<f64>,
    /// Formal error of the GM (au^3/day^2), every body's orbit marginalised.
    pub gm_sigma: f64,
    /// Whether the perturber's orbit was fitted (else held at the start).
    pub orbit_fitted: bool,
    /// Outer iterations.
    pub iterations: usize,
    /// Of the outer (projected) Jacobian.
    pub condition_number: f64,
    pub note: String,
}

/// A body's whitened residuals after its refit and its projected columns.
type Refitted = (Vec<f64>, Mat<f64>);

struct Body<'a> {
    name: String,
    model: OrbitModel<'a>,
    used: Vec<bool>,
    /// The last refitted state (the warm start of the next refit).
    state: [f64; 6],
}

impl Body<'_> {
    /// Refits the body's orbit with `perturber` in place; its whitened
    /// residuals there and the perturber's columns (`columns` of the 13
    /// model parameters; column 12 is d/d ln GM) with the body's own orbit
    /// directions projected out.
    fn refit(&mut self, perturber: Perturber, columns: &[usize]) -> Result<Refitted, FitError> {
        let failed = |e: String| FitError::Problem(format!("{}: {e}", self.name));
        self.model.perturbers = vec![perturber];
        let lm = Lm::new().with_max_iterations(40)?;
        let rep = {
            let mut problem = OrbitProblem { model: &mut self.model, used: self.used.clone() };
            lm.minimize(&mut problem, &self.state).map_err(|e| failed(e.to_string()))?
        };
        self.state.copy_from_slice(&rep.params[..6]);
        let pred = self.model.predict(&self.state, true).map_err(|e| failed(e.to_string()))?;
        let observations = self.model.observations;
        let n = 2 * observations.len();
        let mut r = vec![0.0; n];
        whitened_residuals(observations, &pred, &self.used, &mut r);
        let mut orbit = Mat::<f64>::zeros(n, 6);
        let mut outer = Mat::<f64>::zeros(n, columns.len());
        for (k, (obs, p)) in observations.iter().zip(&pred).enumerate() {
            if !self.used[k] {
                continue;
            }
            let rows = p.partials.ok_or_else(|| failed("no partials from the propagation".into()))?;
            // residual = observed - computed: minus the model's derivative,
            // in arcsec, whitened like the residual.
            let column = |c: usize, scale: f64| {
                whiten(obs, (-rows[0][c] * scale / RAD_PER_ARCSEC, -rows[1][c] * scale / RAD_PER_ARCSEC))
            };
            for c in 0..6 {
                (orbit[(2 * k, c)], orbit[(2 * k + 1, c)]) = column(c, 1.0);
            }
            for (j, &c) in columns.iter().enumerate() {
                // d/d ln(GM) = GM d/dGM.
                let scale = if c == 12 { perturber.gm_au3_per_day2 } else { 1.0 };
                (outer[(2 * k, j)], outer[(2 * k + 1, j)]) = column(c, scale);
            }
        }
        project_out(&orbit, &mut outer).map_err(|e| failed(e.to_string()))?;
        Ok((r, outer))
    }
}

/// Takes the column space of `basis` out of every column of `m`: m - U U^T m
/// with U the left singular vectors of `basis` (columns scaled to unit
/// length first; directions with singular values below 1e-12 of the largest
/// are dropped as not constrained).
fn project_out(basis: &Mat<f64>, m: &mut Mat<f64>) -> Result<(), FitError> {
    let (rows, cols) = (basis.nrows(), basis.ncols());
    let norms: Vec<f64> = (0..cols).map(|j| (0..rows).map(|i| basis[(i, j)].powi(2)).sum::<f64>().sqrt()).collect();
    let scaled = Mat::<f64>::from_fn(rows, cols, |i, j| if norms[j] > 0.0 { basis[(i, j)] / norms[j] } else { 0.0 });
    let svd = scaled.thin_svd().map_err(|e| FitError::Decomposition(format!("{e:?}")))?;
    let s = svd.S().column_vector();
    let largest = (0..cols).map(|k| s[k]).fold(0.0, f64::max);
    let u = svd.U();
    for k in (0..cols).filter(|&k| s[k] > 1e-12 * largest) {
        for j in 0..m.ncols() {
            let dot: f64 = (0..rows).map(|i| u[(i, k)] * m[(i, j)]).sum();
            for i in 0..rows {
                m[(i, j)] -= dot * u[(i, k)];
            }
        }
    }
    Ok(())
}

/// The last evaluation, kept because the outer fit asks for the residuals
/// and the Jacobian at the same point one after the other.
struct Evaluated {
    params: Vec<f64>,
    residuals: Vec<f64>,
    jacobian: Mat<f64>,
}

struct JointProblem<'a> {
    bodies: Vec<Body<'a>>,
    /// Start of each body's rows, and the total at the end.
    offsets: Vec<usize>,
    /// When set, the perturber's state is held here and only ln GM is fitted.
    held: Option<[f64; 6]>,
    last: Option<Evaluated>,
}

impl JointProblem<'_> {
    fn perturber(&self, p: &[f64]) -> Perturber {
        let (state, ln_gm) = match self.held {
            Some(h) => (h, p[0]),
            None => ([p[0], p[1], p[2], p[3], p[4], p[5]], p[6]),
        };
        Perturber {
            gm_au3_per_day2: ln_gm.exp(),
            position_au: Vec3::new(state[0], state[1], state[2]),
            velocity_au_per_day: Vec3::new(state[3], state[4], state[5]),
        }
    }

    fn columns(&self) -> Vec<usize> {
        if self.held.is_some() { vec![12] } else { (6..13).collect() }
    }

    fn evaluate(&mut self, params: &[f64]) -> Result<&Evaluated, FitError> {
        if self.last.as_ref().is_none_or(|e| e.params != params) {
            let perturber = self.perturber(params);
            let columns = self.columns();
            let parts: Vec<Result<Refitted, FitError>> =
                self.bodies.par_iter_mut().map(|b| b.refit(perturber, &columns)).collect();
            let total = *self.offsets.last().unwrap_or(&0);
            let mut residuals = vec![0.0; total];
            let mut jacobian = Mat::<f64>::zeros(total, columns.len());
            for (part, &start) in parts.into_iter().zip(&self.offsets) {
                let (r, j) = part?;
                residuals[start..start + r.len()].copy_from_slice(&r);
                for i in 0..r.len() {
                    for c in 0..columns.len() {
                        jacobian[(start + i, c)] = j[(i, c)];
                    }
                }
            }
            self.last = Some(Evaluated { params: params.to_vec(), residuals, jacobian });
        }
        Ok(self.last.as_ref().expect("just evaluated"))
    }
}

impl LeastSquaresProblem for JointProblem<'_> {
    fn n_params(&self) -> usize {
        if self.held.is_some() { 1 } else { 7 }
    }

    fn n_residuals(&self) -> usize {
        *self.offsets.last().unwrap_or(&0)
    }

    fn residuals(&mut self, params: &[f64], out: &mut [f64]) -> Result<(), FitError> {
        out.copy_from_slice(&self.evaluate(params)?.residuals);
        Ok(())
    }

    fn jacobian(&mut self, params: &[f64], out: &mut Mat<f64>) -> Result<(), FitError> {
        out.copy_from(&self.evaluate(params)?.jacobian);
        Ok(())
    }
}

/// What one fit (orbit fitted or held) gave.
struct Fitted {
    report: LmReport,
    states: Vec<[f64; 6]>,
    chi2_by_body: Vec<f64>,
    perturber: Perturber,
}

fn run(
    parts: &[JointPart],
    ephemeris: &dyn Ephemeris,
    held: Option<[f64; 6]>,
    start: &[f64],
) -> Result<Fitted, FitError> {
    let mut bodies = Vec::with_capacity(parts.len());
    let mut offsets = vec![0];
    for p in parts {
        let model = OrbitModel::new(p.observations, p.geometry.to_vec(), p.null.epoch_tdb_days, p.model, ephemeris)
            .map_err(|e| FitError::Problem(format!("{}: {e}", p.name)))?;
        bodies.push(Body {
            name: p.name.to_string(),
            model,
            used: p.null.residuals.iter().map(|r| r.used).collect(),
            state: p.null.state,
        });
        offsets.push(offsets.last().unwrap_or(&0) + 2 * p.observations.len());
    }
    let mut problem = JointProblem { bodies, offsets, held, last: None };
    let lm = Lm::new().with_max_iterations(60)?;
    let report = lm.minimize(&mut problem, start)?;
    // The bodies' states at the reported solution (the last evaluation may
    // have been a rejected trial step).
    problem.evaluate(&report.params)?;
    let states = problem.bodies.iter().map(|b| b.state).collect();
    let chi2_by_body =
        problem.offsets.windows(2).map(|w| report.residuals[w[0]..w[1]].iter().map(|x| x * x).sum()).collect();
    let perturber = problem.perturber(&report.params);
    Ok(Fitted { report, states, chi2_by_body, perturber })
}

/// Refines a perturber solution from the grid on the full nonlinear model of
/// every body at once (see the module's description).
pub fn refine_joint(
    parts: &[JointPart],
    ephemeris: &dyn Ephemeris,
    start: Perturber,
    searched: &SearchSettings,
) -> Result<JointRefinement, FitError> {
    let Some(first) = parts.first() else {
        return Err(FitError::Problem("a joint refinement needs at least one body".into()));
    };
    if let Some(p) = parts.iter().find(|p| (p.null.epoch_tdb_days - first.null.epoch_tdb_days).abs() > 1e-9) {
        return Err(FitError::Problem(format!(
            "{} has its orbit at epoch {} TDB days, {} at {}: one epoch for all is needed",
            p.name, p.null.epoch_tdb_days, first.name, first.null.epoch_tdb_days
        )));
    }
    let orbit = start.state();
    let ln_gm = start.gm_au3_per_day2.max(1e-16).ln();
    let mut p7 = orbit.to_vec();
    p7.push(ln_gm);
    let full = run(parts, ephemeris, None, &p7);
    let held = run(parts, ephemeris, Some(orbit), &[ln_gm])?;
    let summary = |f: Fitted, fitted: bool, note: String| {
        let n = f.report.params.len();
        let gm = f.perturber.gm_au3_per_day2;
        JointRefinement {
            tracked_states: f.states,
            gm_sigma: gm * f.report.covariance[n * n - 1].max(0.0).sqrt(),
            perturber: f.perturber,
            chi2: f.report.cost,
            chi2_by_body: f.chi2_by_body,
            orbit_fitted: fitted,
            iterations: f.report.iterations,
            condition_number: f.report.condition_number,
            note,
        }
    };
    let held_note = |reason: String| {
        format!(
            "the data do not constrain the perturber's orbit ({reason}): it was held at the grid solution and the \
             perturber's mass and every body's orbit were refitted"
        )
    };
    let central_gm = first.model.central_gm_au3_per_day2();
    match full {
        Ok(f) => {
            // sigma(GM) / GM = sigma(ln GM), the last parameter.
            let n = f.report.params.len();
            let relative_mass_error = f.report.covariance[n * n - 1].max(0.0).sqrt();
            match held_reason(
                &f.perturber,
                f.report.condition_number,
                relative_mass_error,
                f.report.cost,
                held.report.cost,
                central_gm,
                searched,
            ) {
                None => Ok(summary(
                    f,
                    true,
                    "the perturber's orbit and mass fitted on the full nonlinear model, every body's orbit refitted with it"
                        .into(),
                )),
                Some(reason) => Ok(summary(held, false, held_note(reason))),
            }
        }
        Err(e) => Ok(summary(held, false, held_note(e.to_string()))),
    }
}
