//! Simulated astrometry: what a survey would measure of the tracked body,
//! from the full nonlinear model (perturbers included), with seeded Gaussian
//! noise. Used by the demo and by injection-recovery tests.

use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

use crate::astrometry::ObservingGeometry;
use crate::dynamics::{ForceModel, InitialState};
use crate::ephemeris::Ephemeris;
use crate::frames::angular_separation;
use crate::io::observations::{Observation, SiteTable};
use crate::reference::{OrbitModel, ReferenceError, observing_geometry};
use crate::time::{epoch_from_tdb_days, tdb_days_from_j2000, utc_iso_from_epoch};
use crate::units::{RAD_PER_ARCSEC, RAD_PER_DEG, wrap_two_pi};

/// How the simulated survey observes.
#[derive(Clone, Debug, PartialEq)]
pub struct SurveyPlan {
    /// Candidate observation times (TDB days after J2000.0).
    pub times_tdb_days: Vec<f64>,
    /// Observing site (a name in the site table, or `geocenter`).
    pub site: String,
    /// Stated 1-sigma error of RA*cos(Dec) and Dec, arcsec.
    pub sigma_arcsec: f64,
    /// Whether to add noise of that size (false: exact positions with the
    /// stated errors, for tests of the model itself).
    pub add_noise: bool,
    /// Only times when the body is at least this far from the Sun are kept, degrees.
    pub min_elongation_deg: f64,
    pub seed: u64,
}

/// Simulates the plan: exact astrometric positions from the model (light
/// time converged), plus noise. The returned observations carry
/// `source = "simulated"` and are sorted by time.
pub fn simulate_survey(
    plan: &SurveyPlan,
    initial: &InitialState,
    model: &ForceModel,
    ephemeris: &dyn Ephemeris,
    sites: &SiteTable,
) -> Result<Vec<Observation>, ReferenceError> {
    let mut observations: Vec<Observation> = plan
        .times_tdb_days
        .iter()
        .map(|&t| {
            let epoch = epoch_from_tdb_days(t);
            Observation {
                t_tdb_days: tdb_days_from_j2000(epoch),
                epoch,
                ra_rad: 0.0,
                dec_rad: 0.0,
                sigma_ra_arcsec: plan.sigma_arcsec,
                sigma_dec_arcsec: plan.sigma_arcsec,
                corr: 0.0,
                site: plan.site.clone(),
                source: "simulated".into(),
                epoch_text: utc_iso_from_epoch(epoch),
            }
        })
        .collect();
    observations.sort_by(|a, b| a.t_tdb_days.total_cmp(&b.t_tdb_days));
    let geometry: Vec<ObservingGeometry> = observing_geometry(&observations, sites, ephemeris)?;
    let problem =
        |e: crate::dynamics::PropagationError| ReferenceError::Fit(crate::fit::FitError::Problem(e.to_string()));
    let mut truth =
        OrbitModel::new(&observations, geometry.clone(), initial.t0_tdb_days, model, ephemeris).map_err(problem)?;
    truth.perturbers = initial.perturbers.clone();
    let state = [
        initial.tracked_position_au.x,
        initial.tracked_position_au.y,
        initial.tracked_position_au.z,
        initial.tracked_velocity_au_per_day.x,
        initial.tracked_velocity_au_per_day.y,
        initial.tracked_velocity_au_per_day.z,
    ];
    // Twice, so that the light-time epochs have converged.
    let predicted = truth.predict_settled(&state).map_err(problem)?;
    let mut rng = rand::rngs::StdRng::seed_from_u64(plan.seed);
    let noise =
        Normal::new(0.0, plan.sigma_arcsec.max(0.0)).map_err(|e| ReferenceError::NoPreliminaryOrbit(e.to_string()))?;
    let mut out = Vec::with_capacity(observations.len());
    for ((mut o, p), g) in observations.into_iter().zip(&predicted).zip(&geometry) {
        let elongation = angular_separation(p.rho_au, -g.observer_au) / RAD_PER_DEG;
        if elongation < plan.min_elongation_deg {
            continue;
        }
        let scale = if plan.add_noise { RAD_PER_ARCSEC } else { 0.0 };
        let dra = noise.sample(&mut rng) * scale / p.radec.dec_rad.cos();
        let ddec = noise.sample(&mut rng) * scale;
        o.ra_rad = wrap_two_pi(p.radec.ra_rad + dra);
        o.dec_rad = p.radec.dec_rad + ddec;
        out.push(o);
    }
    Ok(out)
}
