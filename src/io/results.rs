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

/// `summary.json` of `latens infer`.
#[derive(Debug, Serialize)]
pub struct InferSummary {
    pub search_epoch_utc: String,
    pub seed: u64,
    pub settings: InferSettingsFile,
    pub null_model: NullModelFile,
    /// The best perturber solution (absent when no hypothesis lowers the chi-square).
    pub best_fit: Option<PerturberFile>,
    /// The best solution refined on the full nonlinear model.
    pub refined_best_fit: Option<RefinedFile>,
    /// Distinct basins within the threshold of the best, the best first.
    pub basins: Vec<PerturberFile>,
    pub detection: DetectionFile,
    pub search: SearchStatsFile,
    pub warnings: Vec<String>,
}

#[derive(Debug, Serialize)]
pub struct InferSettingsFile {
    pub mass_earth: [f64; 2],
    pub distance_au: [f64; 2],
    pub n_directions: usize,
    pub n_distances: usize,
    pub n_orientations: usize,
    pub speed_factors: Vec<f64>,
    pub min_separation_au: f64,
    pub basin_delta_chi2: f64,
    pub known_bodies: Vec<String>,
    pub folded_into_sun: Vec<String>,
    pub ephemeris: String,
}

#[derive(Debug, Serialize)]
pub struct NullModelFile {
    pub chi2: f64,
    pub dof: usize,
    pub orbit: OrbitFile,
}

#[derive(Debug, Serialize)]
pub struct PerturberFile {
    pub chi2: f64,
    pub delta_chi2: f64,
    pub mass_earth: f64,
    pub frame: String,
    pub epoch_tdb_jd: f64,
    pub a_au: f64,
    pub e: f64,
    pub inc_deg: f64,
    pub node_deg: f64,
    pub peri_deg: f64,
    pub mean_anomaly_deg: f64,
    /// Heliocentric ICRF state at the reference epoch.
    pub state_icrf: [f64; 6],
    /// Geocentric astrometric position at the search epoch.
    pub ra_deg: f64,
    pub dec_deg: f64,
    pub distance_au: f64,
    pub heliocentric_distance_au: f64,
    pub solar_elongation_deg: f64,
    pub closest_approach_to_tracked_body_au: f64,
    /// RMS difference between the linear and the full nonlinear signal, and
    /// that as a share of the signal's RMS.
    pub linearisation_error_arcsec: f64,
    pub linearisation_error_fraction: f64,
}

#[derive(Debug, Serialize)]
pub struct DetectionFile {
    pub delta_chi2: f64,
    pub false_alarm_probability: f64,
    pub n_null_simulations: usize,
    pub largest_null_delta_chi2: f64,
    pub detected: bool,
    pub verdict: String,
}

#[derive(Debug, Serialize)]
pub struct SearchStatsFile {
    pub n_hypotheses: usize,
    pub n_skipped_close_approach: usize,
    pub signal_subspace_dimension: usize,
    pub signal_subspace_energy: f64,
}

/// The best solution after the nonlinear refinement.
#[derive(Debug, Serialize)]
pub struct RefinedFile {
    /// Chi-square of the full nonlinear model with the perturber.
    pub chi2: f64,
    /// Null chi-square minus `chi2`.
    pub delta_chi2: f64,
    pub mass_earth: f64,
    pub mass_sigma_earth: f64,
    pub frame: String,
    pub epoch_tdb_jd: f64,
    pub a_au: f64,
    pub e: f64,
    pub inc_deg: f64,
    pub node_deg: f64,
    pub peri_deg: f64,
    pub mean_anomaly_deg: f64,
    pub state_icrf: [f64; 6],
    /// Whether all 13 parameters were fitted, or the perturber's orbit was held.
    pub all_13_parameters: bool,
    pub iterations: usize,
    pub condition_number: f64,
    pub note: String,
}
