//! The reference orbit: the tracked body's best orbit under the Sun and the
//! known planets, fitted to the observations by weighted least squares, with
//! outlier rejection, and its O-C residuals.
//!
//! Outliers: after each fit, an observation whose chi-square (2 degrees of
//! freedom, with its own sigmas and correlation) exceeds 25 is set aside, and
//! one set aside whose chi-square has fallen below 16 is re-admitted; the fit
//! is repeated until nothing changes (at most 10 rounds). For Gaussian errors
//! 25 is exceeded with probability 3.7e-6 (chi-square with 2 degrees of
//! freedom: exp(-25/2)). At most a quarter of the observations may be set
//! aside: beyond that the model, not the data, is at fault, and the fit says
//! so.

pub mod gauss;
mod model;

pub use model::{
    MAX_PARAMS, OrbitModel, OrbitProblem, Prediction, residual_arcsec, residual_arcsec_between, whiten,
    whitened_residuals,
};

use crate::astrometry::{ObservingGeometry, observer_heliocentric_au, sun_barycentric_velocity};
use crate::dynamics::ForceModel;
use crate::dynamics::kepler::{self, Elements, elements_from_state};
use crate::ephemeris::Ephemeris;
use crate::fit::{FitError, Lm, Termination};
use crate::frames::{ecliptic_from_icrf, vector_from_radec};
use crate::io::observations::{Observation, SiteTable};
use crate::units::{GM_SUN_AU3_PER_DAY2, wrap_pi};
use crate::vec3::Vec3;

use gauss::{SightLine, gauss_candidates};

/// Errors from the reference-orbit fit.
#[derive(Debug, thiserror::Error)]
pub enum ReferenceError {
    #[error("observation at {location}: {message}")]
    Observation { location: String, message: String },
    /// The message carries the solver's own (not also a source, so a
    /// printed chain does not say it twice).
    #[error("fitting the reference orbit: {0}")]
    Fit(FitError),
    #[error("no preliminary orbit could be found from the observations: {0}")]
    NoPreliminaryOrbit(String),
}

impl From<FitError> for ReferenceError {
    fn from(e: FitError) -> Self {
        ReferenceError::Fit(e)
    }
}

/// How to fit.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ReferenceSettings {
    /// Reference epoch, TDB days after J2000.0; default: the whole TDB day
    /// nearest the middle of the observations.
    pub epoch_tdb_days: Option<f64>,
    /// Chi-square (2 degrees of freedom) above which an observation is set aside.
    pub reject_chi2: f64,
    /// Chi-square below which a set-aside observation is re-admitted.
    pub readmit_chi2: f64,
    pub max_rounds: usize,
}

impl Default for ReferenceSettings {
    fn default() -> Self {
        ReferenceSettings { epoch_tdb_days: None, reject_chi2: 25.0, readmit_chi2: 16.0, max_rounds: 10 }
    }
}

/// The O-C of one observation.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ObservationResidual {
    /// (RA_obs - RA_calc) cos(Dec), arcsec.
    pub ra_arcsec: f64,
    /// Dec_obs - Dec_calc, arcsec.
    pub dec_arcsec: f64,
    /// Chi-square of the pair with its sigmas and correlation.
    pub chi2: f64,
    pub used: bool,
}

/// The fitted reference orbit.
#[derive(Clone, Debug)]
pub struct ReferenceFit {
    pub epoch_tdb_days: f64,
    /// Heliocentric ICRF state at the epoch: x, y, z (au), vx, vy, vz (au/day).
    pub state: [f64; 6],
    /// Covariance of `state`, row-major 6 x 6.
    pub covariance: Vec<f64>,
    /// Osculating heliocentric elements, ecliptic J2000, with GM of the Sun.
    pub elements: Elements,
    /// Formal errors of a (au), e, i, node, argument of perihelion and mean
    /// anomaly (radians).
    pub element_sigmas: [f64; 6],
    pub chi2: f64,
    pub dof: usize,
    pub n_used: usize,
    pub n_rejected: usize,
    pub rms_ra_arcsec: f64,
    pub rms_dec_arcsec: f64,
    pub residuals: Vec<ObservationResidual>,
    pub iterations: usize,
    pub termination: Termination,
    pub condition_number: f64,
    /// How the starting orbit was obtained.
    pub start: String,
    pub warnings: Vec<String>,
}

/// The columns of [`ReferenceFit::residual_table`].
pub const RESIDUAL_COLUMNS: [&str; 7] =
    ["t_tdb_days", "ra_arcsec", "dec_arcsec", "sigma_ra_arcsec", "sigma_dec_arcsec", "chi2", "used"];

impl ReferenceFit {
    /// The orbit as fit.json and summary.json give it: osculating
    /// heliocentric ecliptic elements with their formal sigmas (degrees),
    /// the ICRF state and its covariance, the epoch in TDB JD and UTC.
    pub fn orbit_file(&self) -> crate::io::results::OrbitFile {
        use crate::time::{epoch_from_tdb_days, utc_iso_from_epoch};
        let el = crate::dynamics::kepler::OutputElements::from_elements(&self.elements);
        let cov = &self.covariance;
        let deg = f64::to_degrees;
        crate::io::results::OrbitFile {
            frame: crate::dynamics::kepler::OUTPUT_FRAME.into(),
            epoch_tdb_jd: crate::units::J2000_JD + self.epoch_tdb_days,
            epoch_utc: utc_iso_from_epoch(epoch_from_tdb_days(self.epoch_tdb_days)),
            a_au: el.a_au,
            e: el.e,
            inc_deg: el.inc_deg,
            node_deg: el.node_deg,
            peri_deg: el.peri_deg,
            mean_anomaly_deg: el.mean_anomaly_deg,
            sigma_a_au: self.element_sigmas[0],
            sigma_e: self.element_sigmas[1],
            sigma_inc_deg: deg(self.element_sigmas[2]),
            sigma_node_deg: deg(self.element_sigmas[3]),
            sigma_peri_deg: deg(self.element_sigmas[4]),
            sigma_mean_anomaly_deg: deg(self.element_sigmas[5]),
            state_icrf: self.state,
            covariance: (0..6)
                .map(|i| [cov[6 * i], cov[6 * i + 1], cov[6 * i + 2], cov[6 * i + 3], cov[6 * i + 4], cov[6 * i + 5]])
                .collect(),
        }
    }

    /// The O-C residuals as a table, one row per observation (those this
    /// fit was made on, in order): epoch (TDB days since J2000.0), O-C in
    /// RA*cos(Dec) and Dec (arcsec), the sigmas, the pair's chi-square and
    /// whether it was used (1) or set aside (0).
    pub fn residual_table(&self, observations: &[Observation]) -> crate::pipeline::Table {
        crate::pipeline::Table::from_rows(
            RESIDUAL_COLUMNS.to_vec(),
            observations.iter().zip(&self.residuals).map(|(o, r)| {
                vec![
                    o.t_tdb_days,
                    r.ra_arcsec,
                    r.dec_arcsec,
                    o.sigma_ra_arcsec,
                    o.sigma_dec_arcsec,
                    r.chi2,
                    if r.used { 1.0 } else { 0.0 },
                ]
            }),
        )
    }
}

/// The observing geometry of every observation (observer position, the Sun's
/// barycentric velocity).
pub fn observing_geometry(
    observations: &[Observation],
    sites: &SiteTable,
    ephemeris: &dyn Ephemeris,
) -> Result<Vec<ObservingGeometry>, ReferenceError> {
    observations
        .iter()
        .map(|o| {
            let err = |e: crate::ephemeris::EphemerisError| ReferenceError::Observation {
                location: o.source.clone(),
                message: e.to_string(),
            };
            let observer =
                observer_heliocentric_au(ephemeris, sites.get(&o.site), o.epoch, o.t_tdb_days).map_err(err)?;
            let vsun = sun_barycentric_velocity(ephemeris, o.t_tdb_days).map_err(err)?;
            Ok(ObservingGeometry {
                t_tdb_days: o.t_tdb_days,
                observer_au: observer,
                sun_barycentric_velocity_au_per_day: vsun,
            })
        })
        .collect()
}

/// A starting state given at `from_tdb_days` carried on a two-body orbit
/// about `force_model`'s central mass to `to_tdb_days`: a start for a fit,
/// which refines it under the full model.
pub fn carried_start(
    force_model: &ForceModel,
    from_tdb_days: f64,
    state: [f64; 6],
    to_tdb_days: f64,
) -> Result<[f64; 6], ReferenceError> {
    let mu = force_model.tracked_two_body_gm_au3_per_day2();
    let (r, v) = kepler::propagate(
        mu,
        Vec3::new(state[0], state[1], state[2]),
        Vec3::new(state[3], state[4], state[5]),
        to_tdb_days - from_tdb_days,
    )
    .map_err(|e| {
        ReferenceError::NoPreliminaryOrbit(format!("the starting orbit cannot be carried to the epoch: {e}"))
    })?;
    Ok([r.x, r.y, r.z, v.x, v.y, v.z])
}

/// The default reference epoch: the whole TDB day (noon, JD x.0) nearest the
/// middle of the observed arc.
pub fn default_epoch(observations: &[Observation]) -> f64 {
    let (a, b) = (observations[0].t_tdb_days, observations[observations.len() - 1].t_tdb_days);
    (0.5 * (a + b)).round()
}

/// Fits the reference orbit. `start` is a heliocentric ICRF state at the
/// epoch; without one a preliminary orbit is found by Gauss's method.
pub fn fit_reference_orbit(
    observations: &[Observation],
    sites: &SiteTable,
    force_model: &ForceModel,
    ephemeris: &dyn Ephemeris,
    settings: &ReferenceSettings,
    start: Option<[f64; 6]>,
) -> Result<ReferenceFit, ReferenceError> {
    let epoch = settings.epoch_tdb_days.unwrap_or_else(|| default_epoch(observations));
    let geometry = observing_geometry(observations, sites, ephemeris)?;
    let mut model = OrbitModel::new(observations, geometry.clone(), epoch, force_model, ephemeris)
        .map_err(|e| FitError::Problem(e.to_string()))?;
    let (mut state, start_text) = match start {
        Some(s) => (s.to_vec(), "given".to_string()),
        None => preliminary_orbit(observations, &geometry, epoch, force_model, ephemeris)?,
    };

    let n = observations.len();
    let mut used = vec![true; n];
    let lm = Lm::new();
    let mut warnings = Vec::new();
    let mut report;
    let mut rounds = 0;
    loop {
        rounds += 1;
        let mut problem = OrbitProblem { model: &mut model, used: used.clone() };
        report = lm.minimize(&mut problem, &state)?;
        state = report.params.clone();
        let chi2 = per_observation_chi2(&mut model, observations, &state)?;
        let mut changed = false;
        let mut next = used.clone();
        for k in 0..n {
            if used[k] && chi2[k] > settings.reject_chi2 {
                next[k] = false;
                changed = true;
            } else if !used[k] && chi2[k] < settings.readmit_chi2 {
                next[k] = true;
                changed = true;
            }
        }
        let rejected = next.iter().filter(|u| !**u).count();
        if rejected * 4 > n {
            warnings.push(format!(
                "{rejected} of {n} observations would be set aside: the model does not describe these data (kept the previous selection)"
            ));
            break;
        }
        if !changed || rounds >= settings.max_rounds {
            if changed {
                warnings.push(format!("outlier rejection did not settle in {} rounds", settings.max_rounds));
            }
            break;
        }
        used = next;
    }
    warnings.extend(report.warnings.iter().cloned());

    // Final residuals at the solution.
    let pred = model.predict(&state, false).map_err(|e| FitError::Problem(e.to_string()))?;
    let mut residuals = Vec::with_capacity(n);
    let (mut chi2, mut sum_ra, mut sum_dec, mut n_used) = (0.0, 0.0, 0.0, 0usize);
    for (k, (obs, p)) in observations.iter().zip(&pred).enumerate() {
        let r = residual_arcsec(obs, &p.radec);
        let w = whiten(obs, r);
        let c = w.0 * w.0 + w.1 * w.1;
        if used[k] {
            chi2 += c;
            sum_ra += r.0 * r.0;
            sum_dec += r.1 * r.1;
            n_used += 1;
        }
        residuals.push(ObservationResidual { ra_arcsec: r.0, dec_arcsec: r.1, chi2: c, used: used[k] });
    }
    let state_arr: [f64; 6] = [state[0], state[1], state[2], state[3], state[4], state[5]];
    let (elements, element_sigmas) = ecliptic_elements_with_sigmas(&state_arr, &report.covariance)?;
    Ok(ReferenceFit {
        epoch_tdb_days: epoch,
        state: state_arr,
        covariance: report.covariance.clone(),
        elements,
        element_sigmas,
        chi2,
        dof: (2 * n_used).saturating_sub(6),
        n_used,
        n_rejected: n - n_used,
        rms_ra_arcsec: (sum_ra / n_used.max(1) as f64).sqrt(),
        rms_dec_arcsec: (sum_dec / n_used.max(1) as f64).sqrt(),
        residuals,
        iterations: report.iterations,
        termination: report.termination,
        condition_number: report.condition_number,
        start: start_text,
        warnings,
    })
}

fn per_observation_chi2(
    model: &mut OrbitModel<'_>,
    observations: &[Observation],
    state: &[f64],
) -> Result<Vec<f64>, FitError> {
    let pred = model.predict(state, false).map_err(|e| FitError::Problem(e.to_string()))?;
    Ok(observations
        .iter()
        .zip(&pred)
        .map(|(o, p)| {
            let w = whiten(o, residual_arcsec(o, &p.radec));
            w.0 * w.0 + w.1 * w.1
        })
        .collect())
}

/// Heliocentric ecliptic-J2000 elements of an ICRF state and their formal
/// errors, propagating the state covariance through a numerical Jacobian.
fn ecliptic_elements_with_sigmas(state: &[f64; 6], covariance: &[f64]) -> Result<(Elements, [f64; 6]), FitError> {
    let to_vec = |s: &[f64; 6]| -> Result<[f64; 6], FitError> {
        let r = ecliptic_from_icrf(Vec3::new(s[0], s[1], s[2]));
        let v = ecliptic_from_icrf(Vec3::new(s[3], s[4], s[5]));
        let el = elements_from_state(GM_SUN_AU3_PER_DAY2, r, v).map_err(|e| FitError::Problem(e.to_string()))?;
        Ok([
            el.semi_major_axis_au(),
            el.eccentricity,
            el.inclination_rad,
            el.node_rad,
            el.periapsis_arg_rad,
            el.mean_anomaly_rad(),
        ])
    };
    let r = ecliptic_from_icrf(Vec3::new(state[0], state[1], state[2]));
    let v = ecliptic_from_icrf(Vec3::new(state[3], state[4], state[5]));
    let elements = elements_from_state(GM_SUN_AU3_PER_DAY2, r, v).map_err(|e| FitError::Problem(e.to_string()))?;
    let base = to_vec(state)?;
    let mut jac = [[0.0; 6]; 6];
    for j in 0..6 {
        let h = if j < 3 { 1e-7 * state[j].abs().max(1.0) } else { 1e-7 * state[j].abs().max(1e-4) };
        let (mut plus, mut minus) = (*state, *state);
        plus[j] += h;
        minus[j] -= h;
        let (p, m) = (to_vec(&plus)?, to_vec(&minus)?);
        for i in 0..6 {
            let d = if i >= 3 { wrap_pi(p[i] - m[i]) } else { p[i] - m[i] };
            jac[i][j] = d / (2.0 * h);
        }
    }
    let _ = base;
    let mut sigmas = [0.0; 6];
    for (i, s) in sigmas.iter_mut().enumerate() {
        let mut var = 0.0;
        for a in 0..6 {
            for b in 0..6 {
                var += jac[i][a] * covariance[a * 6 + b] * jac[i][b];
            }
        }
        *s = var.max(0.0).sqrt();
    }
    Ok((elements, sigmas))
}

/// Finds a starting orbit: Gauss's method on several well-spaced triplets,
/// each candidate moved to the epoch on a two-body orbit, the three best (by
/// the fit to all observations) refined briefly, the best kept.
fn preliminary_orbit(
    observations: &[Observation],
    geometry: &[ObservingGeometry],
    epoch: f64,
    force_model: &ForceModel,
    ephemeris: &dyn Ephemeris,
) -> Result<(Vec<f64>, String), ReferenceError> {
    let n = observations.len();
    let line = |k: usize| SightLine {
        t_tdb_days: observations[k].t_tdb_days,
        direction: vector_from_radec(crate::frames::RaDec {
            ra_rad: observations[k].ra_rad,
            dec_rad: observations[k].dec_rad,
        }),
        observer_au: geometry[k].observer_au,
    };
    let nearest = |t: f64| -> usize {
        (0..n)
            .min_by(|&a, &b| (observations[a].t_tdb_days - t).abs().total_cmp(&(observations[b].t_tdb_days - t).abs()))
            .unwrap_or(0)
    };
    let mut triplets = Vec::new();
    for anchor in [n / 2, n / 4, (3 * n) / 4, 0, n - 1] {
        let ta = observations[anchor].t_tdb_days;
        for spacing in [10.0, 30.0, 90.0, 365.25, 1500.0] {
            let (i, k) = (nearest(ta - spacing), nearest(ta + spacing));
            let j = if i < anchor && anchor < k {
                anchor
            } else {
                nearest(0.5 * (observations[i].t_tdb_days + observations[k].t_tdb_days))
            };
            if i < j && j < k && !triplets.contains(&(i, j, k)) {
                triplets.push((i, j, k));
            }
        }
    }
    let mu = force_model.tracked_two_body_gm_au3_per_day2();
    let mut scored: Vec<(f64, Vec<f64>, String)> = Vec::new();
    for &(i, j, k) in &triplets {
        for c in gauss_candidates([line(i), line(j), line(k)], mu) {
            let Ok((r, v)) = kepler::propagate(mu, c.position_au, c.velocity_au_per_day, epoch - c.t_tdb_days) else {
                continue;
            };
            let state = vec![r.x, r.y, r.z, v.x, v.y, v.z];
            // A fresh model each time: a candidate far from the last one
            // would otherwise replay an unsuitable step plan.
            let mut model = OrbitModel::new(observations, geometry.to_vec(), epoch, force_model, ephemeris)
                .map_err(|e| ReferenceError::NoPreliminaryOrbit(e.to_string()))?;
            if let Ok(chi2) = per_observation_chi2(&mut model, observations, &state) {
                let total: f64 = chi2.iter().sum();
                if total.is_finite() {
                    let what = format!(
                        "Gauss's method on observations {}, {}, {}",
                        observations[i].source, observations[j].source, observations[k].source
                    );
                    scored.push((total, state, what));
                }
            }
        }
    }
    if scored.is_empty() {
        return Err(ReferenceError::NoPreliminaryOrbit(format!(
            "{} triplets of observations gave no usable solution; give a starting orbit (`--start-orbit FIT_JSON` on the command line)",
            triplets.len()
        )));
    }
    scored.sort_by(|a, b| a.0.total_cmp(&b.0));
    let lm = Lm::new().with_max_iterations(40)?;
    let mut best: Option<(f64, Vec<f64>, String)> = None;
    for (_, state, what) in scored.into_iter().take(3) {
        let mut model = OrbitModel::new(observations, geometry.to_vec(), epoch, force_model, ephemeris)
            .map_err(|e| ReferenceError::NoPreliminaryOrbit(e.to_string()))?;
        let mut problem = OrbitProblem { model: &mut model, used: vec![true; n] };
        if let Ok(rep) = lm.minimize(&mut problem, &state)
            && best.as_ref().is_none_or(|b| rep.cost < b.0)
        {
            best = Some((rep.cost, rep.params, what));
        }
    }
    best.map(|(_, s, w)| (s, w))
        .ok_or_else(|| ReferenceError::NoPreliminaryOrbit("no candidate could be refined".into()))
}
