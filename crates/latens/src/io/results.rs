//! The serialised forms of results (the only serde types in Latens), so that
//! changing internals never changes a file format unnoticed; and the typed
//! views through which one command reads back what another wrote. Documented
//! column by column in `docs/formats.md`.

use std::path::Path;

use serde::de::DeserializeOwned;
use serde::{Deserialize, Deserializer, Serialize};

/// A number as Latens writes it: JSON has no NaN, and serde_json writes a
/// non-finite number as `null`, which reads back as NaN here.
fn real<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
    Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
}

/// Reads a JSON file Latens wrote into its type. The error names the file
/// and, for a malformed or incomplete file, the line, column and field.
pub fn read_json<T: DeserializeOwned>(path: &Path) -> Result<T, String> {
    let name = path.display();
    let text = std::fs::read_to_string(path).map_err(|e| format!("{name}: {e}"))?;
    serde_json::from_str(&text).map_err(|e| format!("{name}: {e}"))
}

/// The part of an `infer` summary.json that `latens predict` reads back:
/// the search epoch and the reference orbit.
#[derive(Debug, Deserialize)]
pub struct SummaryHead {
    pub search_epoch_utc: String,
    pub null_model: NullModelHead,
    /// Absent from summaries written before it was recorded.
    #[serde(default)]
    pub settings: Option<SettingsHead>,
}

/// The settings of a summary.json, as read back.
#[derive(Debug, Deserialize)]
pub struct SettingsHead {
    /// See [`InferSettingsFile::central_gm_au3_per_day2`].
    #[serde(default)]
    pub central_gm_au3_per_day2: Option<f64>,
}

/// The reference fit of a summary.json, as read back.
#[derive(Debug, Deserialize)]
pub struct NullModelHead {
    #[serde(deserialize_with = "real")]
    pub chi2: f64,
    pub dof: usize,
    pub orbit: OrbitFile,
}

/// The part of a `residuals` fit.json that `latens sensitivity --orbit`
/// reads back: the orbit.
#[derive(Debug, Deserialize)]
pub struct FitHead {
    pub orbit: OrbitFile,
}

/// `fit.json` of `latens residuals`.
#[derive(Debug, Serialize, Clone)]
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

#[derive(Debug, Serialize, Deserialize, Clone)]
pub struct OrbitFile {
    pub frame: String,
    pub epoch_tdb_jd: f64,
    pub epoch_utc: String,
    #[serde(deserialize_with = "real")]
    pub a_au: f64,
    #[serde(deserialize_with = "real")]
    pub e: f64,
    #[serde(deserialize_with = "real")]
    pub inc_deg: f64,
    #[serde(deserialize_with = "real")]
    pub node_deg: f64,
    #[serde(deserialize_with = "real")]
    pub peri_deg: f64,
    #[serde(deserialize_with = "real")]
    pub mean_anomaly_deg: f64,
    #[serde(deserialize_with = "real")]
    pub sigma_a_au: f64,
    #[serde(deserialize_with = "real")]
    pub sigma_e: f64,
    #[serde(deserialize_with = "real")]
    pub sigma_inc_deg: f64,
    #[serde(deserialize_with = "real")]
    pub sigma_node_deg: f64,
    #[serde(deserialize_with = "real")]
    pub sigma_peri_deg: f64,
    #[serde(deserialize_with = "real")]
    pub sigma_mean_anomaly_deg: f64,
    /// Heliocentric ICRF state: x, y, z (au), vx, vy, vz (au/day).
    pub state_icrf: [f64; 6],
    /// Covariance of `state_icrf`, 6 x 6.
    pub covariance: Vec<[f64; 6]>,
}

#[derive(Debug, Serialize, Clone)]
pub struct TrendFile {
    /// Weighted linear trend of the used RA*cos(Dec) residuals, mas per year, and its formal error.
    pub ra_mas_per_year: f64,
    pub ra_sigma_mas_per_year: f64,
    pub dec_mas_per_year: f64,
    pub dec_sigma_mas_per_year: f64,
}

#[derive(Debug, Serialize, Clone)]
pub struct SolverFile {
    pub start: String,
    pub iterations: usize,
    pub termination: String,
    pub condition_number: f64,
}

/// `summary.json` of `latens infer`.
#[derive(Debug, Serialize, Clone)]
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
    /// The posterior (absent with --no-posterior).
    pub posterior: Option<PosteriorFile>,
    /// Evidence for a perturber against no perturber (absent with --no-posterior).
    pub evidence: Option<EvidenceFile>,
    /// The alternative explanations, each weighed against no extra effect.
    pub impostors: Vec<ImpostorFile>,
    /// Which explanation the data support best, and how strongly.
    pub explanation: Option<ExplanationFile>,
    pub diagnostics: Option<DiagnosticsFile>,
    /// The search products: credible areas and modes (absent without a posterior).
    pub sky: Option<SkyFile>,
    /// What the tracked body is and which observations were left out.
    pub tracked: TrackedFile,
    pub outliers: OutlierFile,
    /// How the linear model was brought to the data in the nonlinear regime.
    pub nonlinear_stage: Option<NonlinearStageFile>,
    /// For a non-detection: 95% upper limits on the mass by distance band
    /// (heliocentric, at the reference epoch); empty for a detection.
    pub upper_limits: Vec<UpperLimitFile>,
    pub warnings: Vec<String>,
}

#[derive(Debug, Serialize, Clone)]
pub struct UpperLimitFile {
    pub distance_au: [f64; 2],
    pub mass_earth_95: f64,
    pub n_samples: usize,
}

#[derive(Debug, Serialize, Clone)]
pub struct TrackedFile {
    pub kind: String,
    pub mass_earth: f64,
    pub gm_au3_per_day2: f64,
    /// The planet whose GM was used, when given by name.
    pub named: Option<String>,
    /// Width of the non-gravitational prior at 1 au (au/day^2; 0: not offered).
    pub nongrav_prior_au_per_day2: f64,
}

#[derive(Debug, Serialize, Clone)]
pub struct OutlierFile {
    /// The threshold in sigma (both coordinates together), absent when off.
    pub threshold_sigma: Option<f64>,
    /// The model the observations were judged against.
    pub judged_against: String,
    /// Observations left out by hand (file:line).
    pub excluded_by_hand: Vec<String>,
    /// Observations set aside by the threshold (file:line).
    pub set_aside: Vec<String>,
}

#[derive(Debug, Serialize, Clone)]
pub struct NonlinearStageFile {
    /// Rounds of refine-and-recentre done.
    pub rounds: usize,
    /// The full model's chi-square at the centre of the final kernel.
    pub chi2_at_centre: f64,
    /// Chi-square drop of the centre against the null model.
    pub delta_chi2_at_centre: f64,
    pub note: String,
}

#[derive(Debug, Serialize, Clone)]
pub struct SkyFile {
    pub search_epoch_utc: String,
    pub area50_deg2: f64,
    pub area90_deg2: f64,
    /// Connected sky regions of the 90% region, most probable first.
    pub modes: Vec<ModeFile>,
    /// How sizes and brightness were estimated.
    pub brightness_assumptions: String,
    /// The Sun's geocentric direction at the search epoch.
    pub sun_ra_deg: f64,
    pub sun_dec_deg: f64,
    pub safety_warning: Option<String>,
    /// Where each basin of the search stands against the posterior (the
    /// search's order, best first).
    pub basins: Vec<BasinStandingFile>,
    /// The confidence regions from the profile likelihood over the sky
    /// (null when not computed).
    pub confidence: Option<ConfidenceFile>,
}

/// The confidence regions from the profile likelihood over the sky: the
/// places where some perturber the prior allows fits within a chi-square
/// threshold of the best, whatever the prior's volume there.
#[derive(Debug, Serialize, Clone)]
pub struct ConfidenceFile {
    pub method: String,
    /// HEALPix order of the map's pixels.
    pub order: u8,
    /// The best drop over the sky.
    pub best_delta_chi2: f64,
    /// Drops below the best that bound the 50% and 90% regions (chi-square
    /// with 2 degrees of freedom).
    pub threshold50: f64,
    pub threshold90: f64,
    pub area50_deg2: f64,
    pub area90_deg2: f64,
    /// Share of the 90% confidence region's area outside the 90% credible
    /// region.
    pub outside_credible90: f64,
    pub n_pixels: usize,
    pub n_evaluations: usize,
}

/// One basin of the search against the posterior: inside the prior, as good
/// a fit as the best, inside the 95% mass interval and the 90% region.
#[derive(Debug, Serialize, Clone)]
pub struct BasinStandingFile {
    /// 1 for the best.
    pub basin: usize,
    pub delta_chi2: f64,
    pub mass_earth: f64,
    /// Geocentric astrometric place at the search epoch.
    pub ra_deg: f64,
    pub dec_deg: f64,
    /// About the posterior's central mass (the prior's eccentricity is).
    pub eccentricity: f64,
    /// Whether the prior allows it (eccentricity at most the prior's).
    pub in_prior: bool,
    /// Within 12.02 of the best drop in chi-square.
    pub as_good_as_best: bool,
    pub in_mass_interval95: bool,
    pub in_region90: bool,
}

impl BasinStandingFile {
    /// In the prior and as good a fit as the best, yet outside the 95% mass
    /// interval or the 90% region: a place the posterior leaves out that
    /// the data do not.
    pub fn left_out(&self) -> bool {
        self.in_prior && self.as_good_as_best && !(self.in_mass_interval95 && self.in_region90)
    }
}

#[derive(Debug, Serialize, Clone)]
pub struct ModeFile {
    pub mode: usize,
    /// Posterior probability inside this mode's part of the 90% region.
    pub probability: f64,
    pub ra_deg: f64,
    pub dec_deg: f64,
    pub area50_deg2: f64,
    pub area90_deg2: f64,
    /// Median and 5%-95% range.
    pub heliocentric_distance_au: [f64; 3],
    pub geocentric_distance_au: [f64; 3],
    pub mass_earth: [f64; 3],
    /// Brightest and faintest expected V (5% and 95% over the mode's samples
    /// and the density and albedo ranges).
    pub v_mag_range: [f64; 2],
    pub motion_arcsec_per_hour: f64,
    pub motion_position_angle_deg: f64,
    pub solar_elongation_deg: f64,
    /// Months (YYYY-MM) of the twelve after the search epoch when the mode's
    /// median solar elongation exceeds 90 deg.
    pub months_elongation_over_90: Vec<String>,
    pub galactic_latitude_deg: f64,
    pub crowded_field: bool,
    pub near_sun: bool,
}

/// Median and central 68% and 95% intervals of one quantity.
#[derive(Debug, Serialize, Clone, Copy)]
pub struct IntervalFile {
    pub median: f64,
    pub lo68: f64,
    pub hi68: f64,
    pub lo95: f64,
    pub hi95: f64,
}

#[derive(Debug, Serialize, Clone)]
pub struct PosteriorFile {
    /// How the samples in posterior.csv were made: `linear` (the kernel's
    /// posterior, confirmed by the nonlinear weights), `reweighted` (resampled
    /// by nonlinear importance weights) or `nonlinear` (MCMC on the full model).
    pub method: String,
    pub n_samples: usize,
    pub mass_earth: IntervalFile,
    /// Geocentric distance at the search epoch.
    pub distance_au: IntervalFile,
    /// Heliocentric distance at the search epoch.
    pub heliocentric_distance_au: IntervalFile,
    pub a_au: IntervalFile,
    pub e: IntervalFile,
    pub inc_deg: IntervalFile,
    /// Angular distance of the samples from their mean direction at the
    /// search epoch (a rough size; the sky map gives the regions).
    pub sky_radius_deg: IntervalFile,
    pub mean_ra_deg: f64,
    pub mean_dec_deg: f64,
    pub prior: PriorFile,
}

#[derive(Debug, Serialize, Clone)]
pub struct PriorFile {
    pub mass_earth_log_uniform: [f64; 2],
    pub heliocentric_distance_au_log_uniform: [f64; 2],
    pub max_eccentricity: f64,
    pub min_separation_au: f64,
    pub description: String,
}

#[derive(Debug, Serialize, Clone)]
pub struct EvidenceFile {
    /// ln of the evidence ratio against the no-perturber model, and its error.
    pub ln_bayes_factor: f64,
    pub ln_bayes_factor_error: f64,
    pub log10_bayes_factor: f64,
    pub log10_bayes_factor_error: f64,
    pub method: String,
}

#[derive(Debug, Serialize, Clone)]
pub struct ImpostorFile {
    pub name: String,
    pub description: String,
    pub n_parameters: usize,
    pub delta_chi2: f64,
    pub log10_bayes_factor: f64,
    pub estimates: Vec<EstimateFile>,
}

#[derive(Debug, Serialize, Clone)]
pub struct EstimateFile {
    pub parameter: String,
    pub mean: f64,
    pub sigma: f64,
    pub unit: String,
}

#[derive(Debug, Serialize, Clone)]
pub struct ExplanationFile {
    pub best: String,
    pub runner_up: String,
    /// log10 Bayes factor of the best over the runner-up.
    pub log10_margin: f64,
    /// Kass & Raftery (1995) wording for the margin.
    pub strength: String,
    pub text: String,
}

#[derive(Debug, Serialize, Clone)]
pub struct DiagnosticsFile {
    pub runs: usize,
    pub walkers: usize,
    pub steps: usize,
    pub burn_in: usize,
    pub thin: usize,
    pub likelihood_evaluations: u64,
    pub sampling_seconds: f64,
    /// Final ladder (inverse temperatures) of the first run.
    pub betas: Vec<f64>,
    /// Stretch-move acceptance per temperature, after burn-in, all runs.
    pub acceptance: Vec<f64>,
    /// Exchange rates between neighbouring temperatures.
    pub swap_rates: Vec<f64>,
    pub parameters: Vec<String>,
    /// Integrated autocorrelation time per parameter (steps, the largest over runs).
    pub autocorrelation_steps: Vec<f64>,
    /// Rank-normalised split R-hat (bulk and folded, the larger) per parameter across the runs.
    pub split_r_hat: Vec<f64>,
    /// Cold-chain samples after burn-in over the largest autocorrelation time.
    pub effective_samples: f64,
    pub effective_samples_per_second: f64,
    /// Kish effective size of the nonlinear importance weights, of `reweighting_checked` samples.
    pub reweighting_effective_samples: f64,
    pub reweighting_checked: usize,
    pub converged: bool,
    pub advice: String,
}

#[derive(Debug, Serialize, Clone)]
pub struct InferSettingsFile {
    pub mass_earth: [f64; 2],
    pub distance_au: [f64; 2],
    pub n_directions: usize,
    pub n_distances: usize,
    pub n_orientations: usize,
    pub speed_factors: Vec<f64>,
    pub min_separation_au: f64,
    pub basin_delta_chi2: f64,
    /// The false-alarm probability below which a perturber counts as detected.
    pub fap_level: f64,
    /// The direction prior: perturbers within this many degrees of the
    /// ecliptic (heliocentric, at the reference epoch); null: the whole sky.
    pub near_ecliptic_deg: Option<f64>,
    pub known_bodies: Vec<String>,
    pub folded_into_sun: Vec<String>,
    /// The GM (au^3/day^2) of the central mass about which the perturber's
    /// orbits move and its elements in posterior.csv osculate: the Sun
    /// with the folded planets.
    pub central_gm_au3_per_day2: f64,
    pub ephemeris: String,
}

#[derive(Debug, Serialize, Clone)]
pub struct NullModelFile {
    pub chi2: f64,
    pub dof: usize,
    pub orbit: OrbitFile,
}

#[derive(Debug, Serialize, Clone)]
pub struct PerturberFile {
    pub chi2: f64,
    pub delta_chi2: f64,
    pub mass_earth: f64,
    pub frame: String,
    pub epoch_tdb_jd: f64,
    /// a_au, e, inc_deg, node_deg, peri_deg, mean_anomaly_deg.
    #[serde(flatten)]
    pub elements: crate::dynamics::kepler::OutputElements,
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

#[derive(Debug, Serialize, Clone)]
pub struct DetectionFile {
    pub delta_chi2: f64,
    pub false_alarm_probability: f64,
    pub n_null_simulations: usize,
    pub largest_null_delta_chi2: f64,
    pub detected: bool,
    pub verdict: String,
}

#[derive(Debug, Serialize, Clone)]
pub struct SearchStatsFile {
    pub n_hypotheses: usize,
    pub n_skipped_close_approach: usize,
    pub signal_subspace_dimension: usize,
    pub signal_subspace_energy: f64,
}

/// A perturber solution refined on the full nonlinear model: what the
/// one-body and the joint refinements both give (flattened into each).
#[derive(Debug, Serialize, Clone)]
pub struct RefinedSolutionFile {
    /// Chi-square of the full nonlinear model with the perturber (all bodies
    /// together in a joint study).
    pub chi2: f64,
    /// Null chi-square (summed over the bodies) minus `chi2`.
    pub delta_chi2: f64,
    pub mass_earth: f64,
    /// Formal error, the tracked orbits marginalised.
    pub mass_sigma_earth: f64,
    pub frame: String,
    pub epoch_tdb_jd: f64,
    /// a_au, e, inc_deg, node_deg, peri_deg, mean_anomaly_deg.
    #[serde(flatten)]
    pub elements: crate::dynamics::kepler::OutputElements,
    pub state_icrf: [f64; 6],
    pub iterations: usize,
    pub condition_number: f64,
    pub note: String,
}

impl RefinedSolutionFile {
    /// The file block of a refined perturber, `null_chi2` being the null
    /// chi-square it is compared with and `epoch_tdb_days` its epoch (days
    /// from J2000 TDB).
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        perturber: &crate::dynamics::Perturber,
        chi2: f64,
        null_chi2: f64,
        gm_sigma: f64,
        epoch_tdb_days: f64,
        iterations: usize,
        condition_number: f64,
        note: &str,
    ) -> Self {
        use crate::dynamics::kepler::{OUTPUT_FRAME, OutputElements};
        let gm_earth = crate::units::GM_EARTH_MASS_AU3_PER_DAY2;
        let (r, v) = (perturber.position_au, perturber.velocity_au_per_day);
        let el = OutputElements::from_icrf_state(r, v).unwrap_or(OutputElements::nan());
        Self {
            chi2,
            delta_chi2: null_chi2 - chi2,
            mass_earth: perturber.gm_au3_per_day2 / gm_earth,
            mass_sigma_earth: gm_sigma / gm_earth,
            frame: OUTPUT_FRAME.into(),
            epoch_tdb_jd: crate::units::J2000_JD + epoch_tdb_days,
            elements: el,
            state_icrf: [r.x, r.y, r.z, v.x, v.y, v.z],
            iterations,
            condition_number,
            note: note.to_string(),
        }
    }
}

/// The best solution after the nonlinear refinement.
#[derive(Debug, Serialize, Clone)]
pub struct RefinedFile {
    #[serde(flatten)]
    pub solution: RefinedSolutionFile,
    /// Whether all 13 parameters were fitted, or the perturber's orbit was held.
    pub all_13_parameters: bool,
}

/// `truth.json` of `latens simulate`: what the simulation put in.
#[derive(Debug, Serialize, Clone)]
pub struct TruthFile {
    pub scenario: String,
    pub description: String,
    /// Epoch of the elements and states (the tracked body's epoch).
    pub epoch_utc: String,
    pub epoch_tdb_jd: f64,
    pub tracked: TruthBodyFile,
    /// The scenario's further tracked bodies (joint studies).
    #[serde(skip_serializing_if = "Vec::is_empty", default)]
    pub more_bodies: Vec<TruthBodyFile>,
    pub perturber: Option<TruthBodyFile>,
    pub survey: String,
    pub n_observations: usize,
    pub sigma_arcsec: f64,
    pub seed: u64,
    pub known_bodies: String,
}

#[derive(Debug, Serialize, Clone)]
pub struct TruthBodyFile {
    pub name: String,
    pub mass_earth: Option<f64>,
    pub frame: String,
    pub a_au: f64,
    pub e: f64,
    pub inc_deg: f64,
    pub node_deg: f64,
    pub peri_deg: f64,
    pub mean_anomaly_deg: f64,
    pub state_icrf: [f64; 6],
    /// The geocentric astrometric place at the search epoch (perturber only).
    pub at_search_epoch: Option<PlaceFile>,
}

#[derive(Debug, Serialize, Clone)]
pub struct PlaceFile {
    pub epoch_utc: String,
    pub ra_deg: f64,
    pub dec_deg: f64,
    pub distance_au: f64,
    pub heliocentric_distance_au: f64,
    pub solar_elongation_deg: f64,
}

/// `summary.json` of a joint study (several tracked bodies, one perturber).
#[derive(Debug, Serialize, Clone)]
pub struct JointSummaryFile {
    /// Always "joint": tells this file from a one-body summary.
    pub study: String,
    pub n_bodies: usize,
    /// The common epoch of every body's reference orbit and of the
    /// perturber states.
    pub reference_epoch_utc: String,
    pub reference_epoch_tdb_jd: f64,
    pub search_epoch_utc: String,
    pub seed: u64,
    pub settings: InferSettingsFile,
    pub bodies: Vec<JointBodyFile>,
    pub detection: DetectionFile,
    pub search: SearchStatsFile,
    /// The best solution and the distinct basins near it, best first.
    pub basins: Vec<JointBasinFile>,
    /// The search without the body that carries most of the signal.
    pub leave_one_out: Option<LeaveOneOutFile>,
    /// A detection's best solution refined on the full nonlinear model of
    /// every body (null without a detection).
    pub refined_best_fit: Option<JointRefinedFile>,
    /// Present when every body's kernel was recentred on the refined
    /// solution (strong regime): the basins and the posterior come from it.
    pub nonlinear_stage: Option<NonlinearStageFile>,
    /// The shared perturber's posterior (null when not sampled).
    pub posterior: Option<PosteriorFile>,
    pub evidence: Option<EvidenceFile>,
    /// The alternatives over all bodies together: a push or offsets per
    /// body (their Bayes factors multiply), the known planets' GMs shared.
    pub alternatives: Vec<ImpostorFile>,
    pub explanation: Option<ExplanationFile>,
    pub diagnostics: Option<DiagnosticsFile>,
    /// Where to look (a detection with a posterior only).
    pub sky: Option<SkyFile>,
    /// 95% mass limits by distance (a non-detection with a posterior only).
    pub upper_limits: Vec<UpperLimitFile>,
    /// Observations left out by hand and set aside as outliers, all bodies
    /// (each named by file and line).
    pub outliers: OutlierFile,
    /// What a joint run does not give (yet), so nobody looks for it.
    pub not_computed: Vec<String>,
    pub warnings: Vec<String>,
}

/// The best joint solution after the nonlinear refinement: the shared
/// perturber's mass and orbit fitted with every body's orbit refitted.
#[derive(Debug, Serialize, Clone)]
pub struct JointRefinedFile {
    #[serde(flatten)]
    pub solution: RefinedSolutionFile,
    /// Whether the perturber's orbit was fitted, or held at the grid solution
    /// (its mass and every body's orbit fitted either way).
    pub orbit_fitted: bool,
    /// Each body's chi-square under the refined solution and its drop
    /// against the body's null fit.
    pub bodies: Vec<JointRefinedBodyFile>,
}

#[derive(Debug, Serialize, Clone)]
pub struct JointRefinedBodyFile {
    pub name: String,
    pub chi2: f64,
    pub delta_chi2: f64,
}

/// One body of a joint study.
#[derive(Debug, Serialize, Clone)]
pub struct JointBodyFile {
    pub name: String,
    pub file: String,
    pub n_observations: usize,
    /// What the body is (planet, dwarf-planet, small-body, comet) and its
    /// own mass in the model (Earth masses).
    pub kind: String,
    pub tracked_mass_earth: f64,
    pub null_chi2: f64,
    pub null_dof: usize,
    /// Observations set aside as outliers (they are not in `n_observations`).
    pub n_set_aside: usize,
    /// Its part of the best joint solution's chi-square drop (at the joint mass).
    pub delta_chi2_at_best: f64,
    /// That part over the joint drop.
    pub share_of_best: f64,
    /// The body searched alone (null when not run).
    pub alone_delta_chi2: Option<f64>,
    pub alone_false_alarm_probability: Option<f64>,
    /// How far the shared perturber moves this body's fitted position
    /// (km) and velocity (m/s) at the reference epoch, over the posterior
    /// (null without a posterior).
    pub orbit_correction_km: Option<IntervalFile>,
    pub orbit_correction_m_per_s: Option<IntervalFile>,
    /// The alternatives that are this body's own, weighed on it alone.
    pub alternatives: Vec<ImpostorFile>,
    pub orbit: OrbitFile,
}

/// A basin of a joint search (linear kernel).
#[derive(Debug, Serialize, Clone)]
pub struct JointBasinFile {
    pub delta_chi2: f64,
    pub mass_earth: f64,
    pub frame: String,
    pub epoch_tdb_jd: f64,
    /// a_au, e, inc_deg, node_deg, peri_deg, mean_anomaly_deg.
    #[serde(flatten)]
    pub elements: crate::dynamics::kepler::OutputElements,
    pub state_icrf: [f64; 6],
    /// Geocentric astrometric place at the search epoch.
    pub ra_deg: f64,
    pub dec_deg: f64,
    pub distance_au: f64,
    pub heliocentric_distance_au: f64,
    pub solar_elongation_deg: f64,
    /// Closest approach to any tracked body, au.
    pub closest_approach_au: f64,
}

#[derive(Debug, Serialize, Clone)]
pub struct LeaveOneOutFile {
    pub left_out: String,
    pub delta_chi2: f64,
    pub false_alarm_probability: f64,
    pub detected: bool,
}

/// `sensitivity.json` (and `sensitivity.part-K-of-N.json` of a shard): what
/// the map in sensitivity.csv was made with, so the CSV holds only its
/// table. Shards of one map agree on everything but `shard` and the
/// fields only a shard has (its hypotheses, distances and null maxima).
#[derive(Debug, Serialize, Deserialize, Clone, PartialEq)]
pub struct SensitivityFile {
    /// The chi-square drop a detection needs in these data (null in a
    /// shard: it is known once every shard's null maxima are in).
    pub threshold_delta_chi2: Option<f64>,
    pub false_alarm_probability: f64,
    pub seed: u64,
    pub mass_earth: [f64; 2],
    pub distance_au: [f64; 2],
    /// Masses by distances.
    pub grid: [usize; 2],
    pub trials: usize,
    /// Directions within this many degrees of the ecliptic (null: isotropic).
    pub near_ecliptic_deg: Option<f64>,
    pub nulls: usize,
    pub directions: usize,
    pub distances: usize,
    /// Trials passing closer than this to a body are redrawn, au.
    #[serde(default = "default_min_separation")]
    pub min_separation_au: f64,
    /// The bodies mapped together, by name.
    pub bodies: Vec<String>,
    /// [K, N] for shard K of N; null for a whole (or merged) map.
    pub shard: Option<[usize; 2]>,
    /// The sky map's HEALPix order and trials per cell (absent: no sky map).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sky_order: Option<u8>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sky_trials: Option<usize>,
    /// A shard's hypotheses of the threshold search: [in this shard, in
    /// the whole grid].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub hypotheses: Option<[usize; 2]>,
    /// A shard's distance indices (its trials are in its CSV).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub distance_indices: Option<Vec<usize>>,
    /// A shard's search maximum of each null simulation over its hypotheses.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub null_maxima: Option<Vec<f64>>,
}

fn default_min_separation() -> f64 {
    crate::perturber::search::SearchSettings::default().min_separation_au
}

impl SensitivityFile {
    /// The settings every shard of one map shares (shard-only fields cleared).
    pub fn common(&self) -> SensitivityFile {
        SensitivityFile {
            threshold_delta_chi2: None,
            shard: None,
            hypotheses: None,
            distance_indices: None,
            null_maxima: None,
            ..self.clone()
        }
    }
}
