//! The tracked body's predicted astrometry and its partial derivatives, for a
//! state at the reference epoch: the model behind the reference-orbit fit.

use faer::Mat;

use crate::astrometry::{ObservingGeometry, astrometric_direction, radec_partials};
use crate::dynamics::{ForceModel, InitialState, Perturber, PropagationError, PropagationSettings, Propagator};
use crate::ephemeris::Ephemeris;
use crate::fit::{FitError, LeastSquaresProblem};
use crate::frames::RaDec;
use crate::io::observations::Observation;
use crate::units::{C_AU_PER_DAY, RAD_PER_ARCSEC, wrap_pi};
use crate::vec3::Vec3;

/// Most parameters a prediction has partials for: a tracked body and one
/// perturber.
pub const MAX_PARAMS: usize = 13;

/// Predicted astrometry of one observation.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Prediction {
    pub radec: RaDec,
    /// Observer-to-body vector at light-time-corrected emission, au.
    pub rho_au: Vec3,
    /// d(RA*cos(Dec))/d(parameter) and d(Dec)/d(parameter), radians per unit
    /// of the parameter, when asked for. Parameters: the tracked body's state
    /// at the epoch (6), then, with a perturber, its state (6) and its GM (1);
    /// unused columns are zero.
    pub partials: Option<[[f64; MAX_PARAMS]; 2]>,
}

/// Observations, their geometry and a propagator for one reference epoch.
pub struct OrbitModel<'a> {
    pub observations: &'a [Observation],
    pub geometry: Vec<ObservingGeometry>,
    pub epoch_tdb_days: f64,
    /// Perturbers carried along (none for the plain reference orbit).
    pub perturbers: Vec<Perturber>,
    propagator: Propagator<'a>,
    /// Emission-time guesses (TDB days), improved at every prediction.
    emission: Vec<f64>,
    pub predictions: u64,
}

impl<'a> OrbitModel<'a> {
    pub fn new(
        observations: &'a [Observation],
        geometry: Vec<ObservingGeometry>,
        epoch_tdb_days: f64,
        model: &'a ForceModel,
        ephemeris: &'a dyn Ephemeris,
    ) -> Result<Self, PropagationError> {
        let settings = PropagationSettings { partials: true, reuse_steps: true, ..PropagationSettings::fast() };
        Self::with_settings(observations, geometry, epoch_tdb_days, model, ephemeris, settings)
    }

    /// As [`OrbitModel::new`], with other propagation settings (e.g. without
    /// partials, for many predictions that need none).
    pub fn with_settings(
        observations: &'a [Observation],
        geometry: Vec<ObservingGeometry>,
        epoch_tdb_days: f64,
        model: &'a ForceModel,
        ephemeris: &'a dyn Ephemeris,
        settings: PropagationSettings,
    ) -> Result<Self, PropagationError> {
        let emission = observations.iter().map(|o| o.t_tdb_days).collect();
        Ok(OrbitModel {
            observations,
            geometry,
            epoch_tdb_days,
            perturbers: Vec::new(),
            propagator: Propagator::new(model, ephemeris, settings)?,
            emission,
            predictions: 0,
        })
    }

    /// The current light-time emission epochs (TDB days), one per observation.
    pub fn emission_epochs(&self) -> &[f64] {
        &self.emission
    }

    /// Sets the emission epochs the next prediction starts from (so that a
    /// prediction depends only on its inputs, not on the ones before it).
    pub fn set_emission_epochs(&mut self, epochs: &[f64]) {
        self.emission.copy_from_slice(epochs);
        self.predictions = self.predictions.max(1);
    }

    /// Predictions for a heliocentric ICRF state with the light time
    /// settled: the first call fixes the emission epochs, the second
    /// predicts with them (one pass moves them by far less than the noise).
    pub fn predict_settled(&mut self, state: &[f64]) -> Result<Vec<Prediction>, PropagationError> {
        self.predict(state, false)?;
        self.predict(state, false)
    }

    /// Predictions for a heliocentric ICRF state (x, y, z, vx, vy, vz) at the
    /// reference epoch.
    pub fn predict(&mut self, state: &[f64], partials: bool) -> Result<Vec<Prediction>, PropagationError> {
        let init = InitialState {
            t0_tdb_days: self.epoch_tdb_days,
            tracked_position_au: Vec3::new(state[0], state[1], state[2]),
            tracked_velocity_au_per_day: Vec3::new(state[3], state[4], state[5]),
            perturbers: self.perturbers.clone(),
        };
        if self.predictions == 0 {
            // First guesses of the light time from the distance at the epoch.
            for (e, g) in self.emission.iter_mut().zip(&self.geometry) {
                *e = g.t_tdb_days - (init.tracked_position_au - g.observer_au).norm() / C_AU_PER_DAY;
            }
        }
        self.predictions += 1;
        let traj = self.propagator.propagate(&init, &self.emission)?;
        let n_params = traj.n_params;
        let mut out = Vec::with_capacity(self.geometry.len());
        for (k, g) in self.geometry.iter().enumerate() {
            let s = traj.tracked[k];
            let (rho, tau, radec) = astrometric_direction(g, self.emission[k], s.position_au, s.velocity_au_per_day);
            self.emission[k] = g.t_tdb_days - tau;
            let partials = partials.then(|| {
                let (pa, pd) = radec_partials(rho);
                let phi = traj.tracked_partials(k);
                let mut rows = [[0.0; MAX_PARAMS]; 2];
                for j in 0..n_params.min(MAX_PARAMS) {
                    // Position rows of the state-transition matrix.
                    let col = [phi[j], phi[n_params + j], phi[2 * n_params + j]];
                    rows[0][j] = pa[0] * col[0] + pa[1] * col[1] + pa[2] * col[2];
                    rows[1][j] = pd[0] * col[0] + pd[1] * col[1] + pd[2] * col[2];
                }
                rows
            });
            out.push(Prediction { radec, rho_au: rho, partials });
        }
        Ok(out)
    }
}

/// The (RA*cos(Dec), Dec) difference a - b between two predicted places,
/// arcsec.
pub fn residual_arcsec_between(a: &RaDec, b: &RaDec) -> (f64, f64) {
    let dra = wrap_pi(a.ra_rad - b.ra_rad) * a.dec_rad.cos() / RAD_PER_ARCSEC;
    (dra, (a.dec_rad - b.dec_rad) / RAD_PER_ARCSEC)
}

/// O-C of one observation: (RA_obs - RA_calc) cos(Dec) and Dec_obs - Dec_calc,
/// arcsec.
pub fn residual_arcsec(obs: &Observation, predicted: &RaDec) -> (f64, f64) {
    let dra = wrap_pi(obs.ra_rad - predicted.ra_rad) * obs.dec_rad.cos() / RAD_PER_ARCSEC;
    let ddec = (obs.dec_rad - predicted.dec_rad) / RAD_PER_ARCSEC;
    (dra, ddec)
}

/// Whitens an (RA, Dec) residual pair by its 2x2 covariance (sigmas and
/// correlation): w = L^-1 r with L the Cholesky factor.
pub fn whiten(obs: &Observation, r: (f64, f64)) -> (f64, f64) {
    let (sa, sd, c) = (obs.sigma_ra_arcsec, obs.sigma_dec_arcsec, obs.corr);
    let w1 = r.0 / sa;
    let w2 = (r.1 - c * sd * w1) / (sd * (1.0 - c * c).sqrt());
    (w1, w2)
}

/// Fills `out` (length 2N) with the whitened O-C of every used observation
/// and zeros for the set-aside ones.
pub fn whitened_residuals(observations: &[Observation], predictions: &[Prediction], used: &[bool], out: &mut [f64]) {
    for (k, (obs, p)) in observations.iter().zip(predictions).enumerate() {
        let (w1, w2) = if used[k] { whiten(obs, residual_arcsec(obs, &p.radec)) } else { (0.0, 0.0) };
        out[2 * k] = w1;
        out[2 * k + 1] = w2;
    }
}

/// The weighted least-squares problem of the reference orbit: parameters are
/// the state at the epoch; observations marked unused contribute zeros.
pub struct OrbitProblem<'m, 'a> {
    pub model: &'m mut OrbitModel<'a>,
    pub used: Vec<bool>,
}

impl LeastSquaresProblem for OrbitProblem<'_, '_> {
    fn n_params(&self) -> usize {
        6
    }

    fn n_residuals(&self) -> usize {
        2 * self.model.observations.len()
    }

    fn residuals(&mut self, params: &[f64], out: &mut [f64]) -> Result<(), FitError> {
        let pred = self.model.predict(params, false).map_err(|e| FitError::Problem(e.to_string()))?;
        whitened_residuals(self.model.observations, &pred, &self.used, out);
        Ok(())
    }

    fn jacobian(&mut self, params: &[f64], out: &mut Mat<f64>) -> Result<(), FitError> {
        let pred = self.model.predict(params, true).map_err(|e| FitError::Problem(e.to_string()))?;
        for (k, (obs, p)) in self.model.observations.iter().zip(&pred).enumerate() {
            let rows = p.partials.unwrap_or([[0.0; MAX_PARAMS]; 2]);
            for j in 0..6 {
                if self.used[k] {
                    // residual = observed - computed: its derivative is minus
                    // the model's, in arcsec, then whitened like the residual.
                    let d = (-rows[0][j] / RAD_PER_ARCSEC, -rows[1][j] / RAD_PER_ARCSEC);
                    let (w1, w2) = whiten(obs, d);
                    out[(2 * k, j)] = w1;
                    out[(2 * k + 1, j)] = w2;
                } else {
                    out[(2 * k, j)] = 0.0;
                    out[(2 * k + 1, j)] = 0.0;
                }
            }
        }
        Ok(())
    }
}
