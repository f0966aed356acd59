//! The serialised forms of results (the only serde types in Latens), so that
//! changing internals never changes a file format unnoticed. Documented
//! column by column in `docs/formats.md`.

use serde::Serialize;

/// `fit.json` of `latens residuals`.
#[derive(Debug, Serialize)]
pub struct FitFile {
    pub n_obs: usize,
    pub n_used: usize,
    pub n_rejected: usize,
    pub chi2: f64,
    pub dof: usize,
    pub chi2_per_dof: f64,
    /// Probability of a chi-square at least this large if the residuals were noise.
    pub p_value: f64,
    pub rms_ra_arcsec: f64,
    pub rms_dec_arcsec: f64,
    pub known_bodies: Vec<String>,
    pub folded_into_sun: Vec<String>,
    pub ephemeris: String,
    pub orbit: OrbitFile,
    pub trend: TrendFile,
    pub solver: SolverFile,
    pub warnings: Vec<String>,
}

#[derive(Debug, Serialize)]
pub struct OrbitFile {
    pub frame: String,
    pub epoch_tdb_jd: f64,
    pub epoch_utc: String,
    pub a_au: f64,
    pub e: f64,
    pub inc_deg: f64,
    pub node_deg: f64,
    pub peri_deg: f64,
    pub mean_anomaly_deg: f64,
    pub sigma_a_au: f64,
    pub sigma_e: f64,
    pub sigma_inc_deg: f64,
    pub sigma_node_deg: f64,
    pub sigma_peri_deg: f64,
    pub sigma_mean_anomaly_deg: f64,
    /// Heliocentric ICRF state: x, y, z (au), vx, vy, vz (au/day).
    pub state_icrf: [f64; 6],
    /// Covariance of `state_icrf`, 6 x 6.
    pub covariance: Vec<[f64; 6]>,
}

#[derive(Debug, Serialize)]
pub struct TrendFile {
    /// Weighted linear trend of the used RA*cos(Dec) residuals, mas per year, and its formal error.
    pub ra_mas_per_year: f64,
    pub ra_sigma_mas_per_year: f64,
    pub dec_mas_per_year: f64,
    pub dec_sigma_mas_per_year: f64,
}

#[derive(Debug, Serialize)]
pub struct SolverFile {
    pub start: String,
    pub iterations: usize,
    pub termination: String,
    pub condition_number: f64,
}
