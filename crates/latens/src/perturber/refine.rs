//! Refinement of a perturber solution on the full nonlinear model: the
//! tracked body's state (6), the perturber's state (6) and its GM (1, fitted
//! as its logarithm so that it stays positive), by Levenberg-Marquardt.
//!
//! When the data cannot constrain all 13 (a distant perturber over a short
//! arc: the condition number of the fit exceeds 1e12, or the fit fails), the
//! perturber's orbit is held at the grid solution and only the tracked body's
//! state and the perturber's GM are refitted: the combination the data do
//! constrain. The report says which was done.

use faer::Mat;

use crate::astrometry::ObservingGeometry;
use crate::dynamics::{ForceModel, Perturber};
use crate::ephemeris::Ephemeris;
use crate::fit::{FitError, LeastSquaresProblem, Lm, LmReport};
use crate::io::observations::Observation;
use crate::perturber::{LinearKernel, SignalKernel};
use crate::reference::{OrbitModel, ReferenceFit, whiten, whitened_residuals};
use crate::units::RAD_PER_ARCSEC;
use crate::vec3::Vec3;

/// Condition numbers above this mean the 13 parameters are not all constrained.
const UNCONSTRAINED: f64 = 1e12;

/// How the refinement went.
#[derive(Clone, Debug)]
pub struct Refinement {
    /// Tracked state (6), perturber state (6), GM (au^3/day^2).
    pub tracked_state: [f64; 6],
    pub perturber: Perturber,
    pub chi2: f64,
    /// Formal error of the GM (au^3/day^2).
    pub gm_sigma: f64,
    pub all_thirteen: bool,
    pub iterations: usize,
    pub condition_number: f64,
    pub note: String,
}

struct PerturberProblem<'m, 'a> {
    model: &'m mut OrbitModel<'a>,
    used: Vec<bool>,
    /// When set, the perturber's state is held at this value and only the
    /// tracked state and ln(GM) are fitted (7 parameters).
    held: Option<[f64; 6]>,
}

impl PerturberProblem<'_, '_> {
    fn full_params(&self, p: &[f64]) -> [f64; 13] {
        let mut out = [0.0; 13];
        match self.held {
            None => out.copy_from_slice(&p[..13]),
            Some(h) => {
                out[..6].copy_from_slice(&p[..6]);
                out[6..12].copy_from_slice(&h);
                out[12] = p[6];
            }
        }
        out
    }

    fn set_perturber(&mut self, q: &[f64; 13]) {
        self.model.perturbers = vec![Perturber {
            gm_au3_per_day2: q[12].exp(),
            position_au: Vec3::new(q[6], q[7], q[8]),
            velocity_au_per_day: Vec3::new(q[9], q[10], q[11]),
        }];
    }
}

impl LeastSquaresProblem for PerturberProblem<'_, '_> {
    fn n_params(&self) -> usize {
        if self.held.is_some() { 7 } else { 13 }
    }

    fn n_residuals(&self) -> usize {
        2 * self.model.observations.len()
    }

    fn residuals(&mut self, params: &[f64], out: &mut [f64]) -> Result<(), FitError> {
        let q = self.full_params(params);
        self.set_perturber(&q);
        let pred = self.model.predict(&q[..6], false).map_err(|e| FitError::Problem(e.to_string()))?;
        whitened_residuals(self.model.observations, &pred, &self.used, out);
        Ok(())
    }

    fn jacobian(&mut self, params: &[f64], out: &mut Mat<f64>) -> Result<(), FitError> {
        let q = self.full_params(params);
        self.set_perturber(&q);
        let gm = q[12].exp();
        let pred = self.model.predict(&q[..6], true).map_err(|e| FitError::Problem(e.to_string()))?;
        let columns: Vec<usize> = if self.held.is_some() { vec![0, 1, 2, 3, 4, 5, 12] } else { (0..13).collect() };
        for (k, (obs, p)) in self.model.observations.iter().zip(&pred).enumerate() {
            let rows = p.partials.unwrap_or([[0.0; 13]; 2]);
            for (j, &c) in columns.iter().enumerate() {
                // d/d ln(GM) = GM d/dGM.
                let scale = if c == 12 { gm } else { 1.0 };
                let (w1, w2) = if self.used[k] {
                    whiten(obs, (-rows[0][c] * scale / RAD_PER_ARCSEC, -rows[1][c] * scale / RAD_PER_ARCSEC))
                } else {
                    (0.0, 0.0)
                };
                out[(2 * k, j)] = w1;
                out[(2 * k + 1, j)] = w2;
            }
        }
        Ok(())
    }
}

/// Refines a perturber solution from the grid on the full nonlinear model.
#[allow(clippy::too_many_arguments)]
pub fn refine(
    null: &ReferenceFit,
    observations: &[Observation],
    geometry: &[ObservingGeometry],
    model: &ForceModel,
    ephemeris: &dyn Ephemeris,
    start: Perturber,
    searched: &super::search::SearchSettings,
) -> Result<Refinement, FitError> {
    let used: Vec<bool> = null.residuals.iter().map(|r| r.used).collect();
    let perturber_state = start.state();
    let gm0 = start.gm_au3_per_day2.max(1e-16);
    let new_model = || {
        OrbitModel::new(observations, geometry.to_vec(), null.epoch_tdb_days, model, ephemeris)
            .map_err(|e| FitError::Problem(e.to_string()))
    };
    let lm = Lm::new().with_max_iterations(60)?;

    let mut full_model = new_model()?;
    let mut p13 = null.state.to_vec();
    p13.extend_from_slice(&perturber_state);
    p13.push(gm0.ln());
    let full = {
        let mut problem = PerturberProblem { model: &mut full_model, used: used.clone(), held: None };
        lm.minimize(&mut problem, &p13)
    };
    let mut held_model = new_model()?;
    let mut p7 = null.state.to_vec();
    p7.push(gm0.ln());
    let held = {
        let mut problem = PerturberProblem { model: &mut held_model, used, held: Some(perturber_state) };
        lm.minimize(&mut problem, &p7)?
    };
    let held_summary = |reason: String| {
        summarise(
            &held,
            Some(perturber_state),
            false,
            format!(
                "the data do not constrain all 13 parameters ({reason}): the perturber's orbit was held at the grid solution \
                 and the tracked body's orbit and the perturber's mass were refitted"
            ),
        )
    };
    match full {
        Ok(rep) => {
            let candidate = summarise(&rep, None, true, "all 13 parameters fitted on the full nonlinear model".into());
            let relative_mass_error = candidate.gm_sigma / candidate.perturber.gm_au3_per_day2;
            match held_reason(
                &candidate.perturber,
                rep.condition_number,
                relative_mass_error,
                rep.cost,
                held.cost,
                model.central_gm_au3_per_day2(),
                searched,
            ) {
                None => Ok(candidate),
                Some(reason) => Ok(held_summary(reason)),
            }
        }
        Err(e) => Ok(held_summary(e.to_string())),
    }
}

/// Why a fit of the perturber's orbit must give way to the fit with its
/// orbit held (`None`: it stands). It stands when it keeps the perturber
/// bound to the Sun, inside the searched distances and band, is well
/// conditioned, pins the mass down to better than 100%, and fits at least as
/// well as the held-orbit fit (within 1 in chi-square).
pub(super) fn held_reason(
    p: &Perturber,
    condition_number: f64,
    relative_mass_error: f64,
    cost: f64,
    held_cost: f64,
    central_gm: f64,
    searched: &super::search::SearchSettings,
) -> Option<String> {
    let bound = 0.5 * p.velocity_au_per_day.norm_squared() < central_gm / p.position_au.norm();
    let distance_au = searched.distance_au;
    let inside = (distance_au.0..=distance_au.1).contains(&p.position_au.norm());
    let in_band = super::search::orbit_in_band(p.position_au, p.velocity_au_per_day, searched.near_ecliptic_deg);
    if !bound {
        Some("the fit of the perturber's orbit drifted to an unbound orbit".into())
    } else if !inside {
        Some(format!(
            "the fit of the perturber's orbit drifted to {:.2} au from the Sun, outside the searched range {}-{} au",
            p.position_au.norm(),
            distance_au.0,
            distance_au.1
        ))
    } else if !in_band {
        Some(format!(
            "the fit of the perturber's orbit drifted to an orbit leaving the searched band of {} deg about the ecliptic",
            searched.near_ecliptic_deg.unwrap_or(90.0)
        ))
    } else if condition_number < UNCONSTRAINED && relative_mass_error < 1.0 && cost <= held_cost + 1.0 {
        None
    } else {
        Some(format!(
            "fit of the perturber's orbit: condition number {condition_number:.1e}, mass known to {:.0}%",
            100.0 * relative_mass_error
        ))
    }
}

fn summarise(rep: &LmReport, held: Option<[f64; 6]>, all: bool, note: String) -> Refinement {
    let p = &rep.params;
    let (state, gm_index) = match held {
        None => ([p[6], p[7], p[8], p[9], p[10], p[11]], 12),
        Some(h) => (h, 6),
    };
    let gm = p[gm_index].exp();
    let n = p.len();
    // sigma(GM) = GM sigma(ln GM).
    let gm_sigma = gm * rep.covariance[gm_index * n + gm_index].max(0.0).sqrt();
    Refinement {
        tracked_state: [p[0], p[1], p[2], p[3], p[4], p[5]],
        perturber: Perturber {
            gm_au3_per_day2: gm,
            position_au: Vec3::new(state[0], state[1], state[2]),
            velocity_au_per_day: Vec3::new(state[3], state[4], state[5]),
        },
        chi2: rep.cost,
        gm_sigma,
        all_thirteen: all,
        iterations: rep.iterations,
        condition_number: rep.condition_number,
        note,
    }
}

/// The linear kernel recentred on a refined solution: the kernel's
/// residuals become y' = r* + s*(P*), with r* the whitened residuals of the
/// full nonlinear model with the perturber P* (and the refitted tracked
/// orbit) and s*(P*) the kernel's own projected signal of P*. A hypothesis H
/// then scores |P(y' - s(H))|^2, which equals the full model's chi-square at
/// H = P* and carries only the difference of linearisation errors between H
/// and P* elsewhere: the linear model is exact where the posterior lives,
/// however strong the signal. (Phi stays that of the unperturbed orbit; the
/// error this leaves is of order m*.m_H, second order in the masses.)
///
/// A joint study recentres every body's kernel and adds their offsets and
/// chi-squares: `Recentred<JointKernel>`.
#[derive(Clone)]
pub struct Recentred<K = LinearKernel> {
    pub kernel: K,
    /// |P y_null|^2 - |P y'|^2: add it to a chi-square drop measured on the
    /// recentred kernel to get the drop against the null model.
    pub delta_chi2_offset: f64,
    /// The full model's chi-square at P* (used observations).
    pub chi2_at_centre: f64,
}

/// Recentres `null_kernel` on `centre` (see [`Recentred`]).
#[allow(clippy::too_many_arguments)]
pub fn recentre(
    null_kernel: &LinearKernel,
    epoch_tdb_days: f64,
    tracked_state: &[f64; 6],
    centre: &Perturber,
    observations: &[Observation],
    geometry: &[ObservingGeometry],
    model: &ForceModel,
    ephemeris: &dyn Ephemeris,
) -> Result<Recentred, crate::dynamics::PropagationError> {
    let mut m = OrbitModel::new(observations, geometry.to_vec(), epoch_tdb_days, model, ephemeris)?;
    m.perturbers = vec![*centre];
    let pred = m.predict_settled(tracked_state)?;
    let mut r = vec![0.0; 2 * observations.len()];
    whitened_residuals(observations, &pred, &null_kernel.used, &mut r);
    let chi2_at_centre = r.iter().map(|x| x * x).sum::<f64>();
    let s = null_kernel
        .projected_signal(centre.position_au, centre.velocity_au_per_day, centre.gm_au3_per_day2)
        .ok_or_else(|| crate::dynamics::PropagationError::Invalid("the centre's orbit is unbound".into()))?;
    r.iter_mut().zip(&s).for_each(|(a, b)| *a += b);
    let kernel = null_kernel.with_residuals(&r);
    let y0: f64 = null_kernel.residuals.iter().map(|x| x * x).sum();
    let y1: f64 = kernel.residuals.iter().map(|x| x * x).sum();
    Ok(Recentred { kernel, delta_chi2_offset: y0 - y1, chi2_at_centre })
}
