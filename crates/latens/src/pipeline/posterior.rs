//! The posterior stage: the alternative explanations weighed on the null
//! kernel, tempered ensemble sampling of the perturber through the linear
//! kernel (recentred in the strong regime), convergence diagnostics, the
//! evidence, the check of the samples against the full nonlinear model, and
//! which explanation the data support.

use std::fmt::Write as _;
use std::path::PathBuf;
use std::time::Instant;

use super::{Detection, PipelineError, Study};
use crate::astrometry::{ObservingGeometry, astrometric_direction, sun_barycentric_velocity};
use crate::dynamics::kepler::OutputElements;
use crate::ephemeris::{Body, Ephemeris};
use crate::frames::angular_separation;
use crate::io::results::{
    DiagnosticsFile, EstimateFile, EvidenceFile, ExplanationFile, ImpostorFile, IntervalFile, PosteriorFile, PriorFile,
};
use crate::perturber::{KeplerOrbit, Scored, SignalKernel};
use crate::posterior::impostors::{self, ImpostorPriors};
use crate::posterior::sampler::{self, Checkpoint, SamplerError, SamplerSettings, SamplerState};
use crate::posterior::{
    NonlinearLikelihood, NonlinearPosterior, PerturberPosterior, PerturberPrior, PerturberSample,
    effective_sample_size, importance_log_weights, quantiles, resample,
};
use crate::progress::{Observer, Stage};
use crate::time::{epoch_from_tdb_days, parse_epoch, tdb_days_from_j2000, utc_iso_from_epoch};
use crate::units::RAD_PER_DEG;
use crate::vec3::Vec3;

/// Parameter names of the sampled vector.
const PARAMETERS: [&str; 7] =
    ["ln_mass_earth", "x_au", "y_au", "z_au", "vx_au_per_year", "vy_au_per_year", "vz_au_per_year"];

/// Largest split R-hat, and fewest autocorrelation times after burn-in, for
/// a posterior to count as converged (Gelman et al. 2013 suggest R-hat
/// below 1.1, Vehtari et al. 2021 below 1.01; 1.05 here. emcee's
/// documentation asks for 50 autocorrelation times).
const MAX_R_HAT: f64 = 1.05;
const MIN_TAUS: f64 = 50.0;
/// Samples checked against the full nonlinear model.
const CHECKED: usize = 400;

/// How the posterior stage runs.
#[derive(Clone, Debug)]
pub struct PosteriorSettings {
    /// Walkers per temperature, temperatures, steps, independent runs.
    pub walkers: usize,
    pub temperatures: usize,
    pub steps: usize,
    pub runs: usize,
    pub seed: u64,
    /// The prior's largest eccentricity of the perturber's orbit.
    pub max_eccentricity: f64,
    /// Priors of the alternative explanations.
    pub alternatives: ImpostorPriors,
    /// False: weigh only the alternatives (no sampling of the perturber).
    pub sample: bool,
    /// Where the sampler saves its progress (none: no checkpoint).
    pub checkpoint: Option<PathBuf>,
    /// Continue from the checkpoint instead of starting afresh.
    pub resume: bool,
}

impl PosteriorSettings {
    /// The sampler's settings: 40% burn-in, thinning by 4, adaptive stretch
    /// scale, a tenth of the moves mode hops.
    pub fn sampler(&self) -> SamplerSettings {
        SamplerSettings {
            n_walkers: self.walkers,
            n_temperatures: self.temperatures,
            max_temperature: 1e5,
            n_steps: self.steps,
            burn_in: self.steps * 2 / 5,
            thin: 4,
            adapt: true,
            stretch_scale: 2.0,
            mode_hop: 0.1,
            seed: self.seed,
        }
    }

    /// Checks the settings before any work.
    pub fn check(&self) -> Result<(), PipelineError> {
        self.sampler()
            .check(crate::posterior::model::DIM)
            .map_err(|e| PipelineError::Input(format!("posterior sampler: {e}")))?;
        if self.runs == 0 {
            return Err(PipelineError::Input("--runs must be at least 1".into()));
        }
        Ok(())
    }
}

/// Which explanation the data support best.
#[derive(Clone, Debug, PartialEq)]
pub enum Best {
    /// Nothing weighed beats noise alone by a meaningful margin.
    NoneNeeded,
    /// The leader's margin is within twice the evidence's error.
    Undecided,
    /// An unseen perturber.
    Perturber,
    /// One of the alternatives, by name.
    Alternative(String),
}

/// The comparison of the explanations.
#[derive(Clone, Debug)]
pub struct Explanation {
    pub best: Best,
    pub runner_up: String,
    pub log10_margin: f64,
    /// Kass & Raftery's word for the margin, or "undecided" / "none needed".
    pub strength: String,
    /// The comparison in one sentence.
    pub text: String,
}

impl Explanation {
    /// The file form (summary.json).
    pub fn file(&self) -> ExplanationFile {
        ExplanationFile {
            best: match &self.best {
                Best::NoneNeeded => "no extra effect (noise alone)".into(),
                Best::Undecided => "undecided".into(),
                Best::Perturber => PERTURBER.into(),
                Best::Alternative(name) => name.clone(),
            },
            runner_up: self.runner_up.clone(),
            log10_margin: self.log10_margin,
            strength: self.strength.clone(),
            text: self.text.clone(),
        }
    }
}

/// How the final samples were obtained.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SampleSource {
    /// The linear posterior, which the nonlinear model confirms.
    Linear,
    /// The linear posterior resampled by its nonlinear weights.
    Reweighted,
    /// MCMC steps on the full nonlinear model.
    Nonlinear,
}

impl SampleSource {
    pub fn name(self) -> &'static str {
        match self {
            SampleSource::Linear => "linear",
            SampleSource::Reweighted => "reweighted",
            SampleSource::Nonlinear => "nonlinear",
        }
    }
}

/// A finished sampling of the perturber's posterior.
pub struct PosteriorRun {
    pub summary: PosteriorFile,
    pub evidence: Option<EvidenceFile>,
    pub diagnostics: DiagnosticsFile,
    pub source: SampleSource,
    /// Equally weighted samples with their derived quantities.
    pub samples: Vec<DerivedSample>,
    /// The sampler's final states (chains for trace charts).
    pub states: Vec<SamplerState>,
    pub sampler: SamplerSettings,
}

/// The columns of [`PosteriorRun::table`] (and of posterior.csv).
pub const SAMPLE_COLUMNS: [&str; 11] = [
    "mass_earth",
    "a_au",
    "e",
    "inc_deg",
    "node_deg",
    "peri_deg",
    "mean_anomaly_deg",
    "ra_deg",
    "dec_deg",
    "distance_au",
    "log_likelihood",
];

impl PosteriorRun {
    /// The equally weighted samples as a table: mass (Earth masses),
    /// osculating heliocentric ecliptic elements at the reference epoch,
    /// geocentric astrometric RA/Dec (deg) and distance (au) at the search
    /// epoch, and the log-likelihood.
    pub fn table(&self) -> super::Table {
        super::Table::from_rows(
            SAMPLE_COLUMNS.to_vec(),
            self.samples.iter().map(|d| {
                vec![
                    d.sample.mass_earth(),
                    d.a_au,
                    d.e,
                    d.inc_deg,
                    d.node_deg,
                    d.peri_deg,
                    d.mean_anomaly_deg,
                    d.ra_deg,
                    d.dec_deg,
                    d.distance_au,
                    d.log_likelihood,
                ]
            }),
        )
    }
}

/// What the posterior stage found.
pub struct PosteriorOutcome {
    /// The alternatives, weighed on the null kernel.
    pub alternatives: Vec<ImpostorFile>,
    pub explanation: Explanation,
    /// None when sampling was not asked for or there was no basin.
    pub run: Option<PosteriorRun>,
    pub warnings: Vec<String>,
}

/// Maps a sampler error to the pipeline's.
fn interrupted(e: SamplerError) -> PipelineError {
    match e {
        SamplerError::Interrupted { step, of, checkpoint } => PipelineError::Interrupted { step, of, checkpoint },
        e => PipelineError::Failed { stage: "posterior sampling", source: Box::new(e) },
    }
}

/// One posterior sample with everything posterior.csv says about it.
#[derive(Clone, Copy, Debug)]
pub struct DerivedSample {
    pub sample: PerturberSample,
    pub log_likelihood: f64,
    pub a_au: f64,
    pub e: f64,
    pub inc_deg: f64,
    pub node_deg: f64,
    pub peri_deg: f64,
    pub mean_anomaly_deg: f64,
    pub ra_deg: f64,
    pub dec_deg: f64,
    pub distance_au: f64,
    pub heliocentric_distance_au: f64,
    pub elongation_deg: f64,
    /// Geocentric unit vector at the search epoch (ICRF).
    pub direction: Vec3,
}

/// The Earth's place at the search epoch, for the samples' sky positions.
pub struct SearchGeometry {
    pub geometry: ObservingGeometry,
    pub epoch: f64,
}

impl SearchGeometry {
    pub fn new(wide: &dyn Ephemeris, epoch: f64) -> Result<Self, PipelineError> {
        Ok(SearchGeometry { geometry: geometry_at(wide, epoch)?, epoch })
    }

    /// Geocentric astrometric direction, distance, heliocentric distance and
    /// solar elongation (deg) of a two-body orbit at `t` (TDB days).
    pub fn place_at(&self, orbit: &KeplerOrbit, t: f64, g: &ObservingGeometry) -> (Vec3, f64, f64, f64) {
        let mut guess = f64::NAN;
        let r = orbit.position(t, &mut guess);
        let v = (orbit.position(t + 1.0, &mut guess) - orbit.position(t - 1.0, &mut guess)) / 2.0;
        let (rho, _, _) = astrometric_direction(g, t, r, v);
        let elongation = angular_separation(rho, -g.observer_au) / RAD_PER_DEG;
        (rho.unit(), rho.norm(), r.norm(), elongation)
    }

    pub fn derive(&self, s: &PerturberSample, log_likelihood: f64, t0: f64, gm_sun: f64) -> Option<DerivedSample> {
        let orbit = KeplerOrbit::from_state(gm_sun, s.position_au, s.velocity_au_per_day, t0)?;
        let el = OutputElements::from_icrf_state(s.position_au, s.velocity_au_per_day).ok()?;
        let (dir, dist, helio, elong) = self.place_at(&orbit, self.epoch, &self.geometry);
        let place = crate::frames::radec_from_vector(dir);
        let (ra, dec) = (place.ra_rad, place.dec_rad);
        let deg = |x: f64| x / RAD_PER_DEG;
        Some(DerivedSample {
            sample: *s,
            log_likelihood,
            a_au: el.a_au,
            e: el.e,
            inc_deg: el.inc_deg,
            node_deg: el.node_deg,
            peri_deg: el.peri_deg,
            mean_anomaly_deg: el.mean_anomaly_deg,
            ra_deg: deg(ra),
            dec_deg: deg(dec),
            distance_au: dist,
            heliocentric_distance_au: helio,
            elongation_deg: elong,
            direction: dir,
        })
    }
}

/// Geometry of the Earth at `t` (TDB days).
pub fn geometry_at(wide: &dyn Ephemeris, t: f64) -> Result<ObservingGeometry, PipelineError> {
    let earth = wide.heliocentric_position_au(Body::Earth, t).map_err(PipelineError::failed("the Earth's place"))?;
    let vsun = sun_barycentric_velocity(wide, t).unwrap_or(Vec3::ZERO);
    Ok(ObservingGeometry { t_tdb_days: t, observer_au: earth, sun_barycentric_velocity_au_per_day: vsun })
}

/// The mid-month epochs (TDB days) and labels of the twelve months after
/// the one holding `t`.
pub fn next_months(t: f64) -> Vec<(f64, String)> {
    let iso = utc_iso_from_epoch(epoch_from_tdb_days(t));
    let (mut year, mut month): (i32, u32) = (iso[0..4].parse().unwrap_or(2000), iso[5..7].parse().unwrap_or(1));
    let mut out = Vec::new();
    for _ in 0..12 {
        month += 1;
        if month > 12 {
            month = 1;
            year += 1;
        }
        if let Ok(e) = parse_epoch(&format!("{year:04}-{month:02}-15T00:00:00Z")) {
            out.push((tdb_days_from_j2000(e), format!("{year:04}-{month:02}")));
        }
    }
    out
}

/// FNV-1a hash of the problem: residuals, prior, settings.
pub(super) fn fingerprint(residuals: &[f64], prior: &PerturberPrior, settings: &SamplerSettings) -> String {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    let mut eat = |x: f64| {
        for b in x.to_le_bytes() {
            h ^= b as u64;
            h = h.wrapping_mul(0x0100_0000_01b3);
        }
    };
    residuals.iter().for_each(|&r| eat(r));
    for v in [prior.mass_earth.0, prior.mass_earth.1, prior.distance_au.0, prior.distance_au.1, prior.max_eccentricity]
    {
        eat(v);
    }
    eat(prior.min_separation_au);
    if let Some(band) = prior.near_ecliptic_deg {
        // Only when given, so checkpoints of whole-sky runs stay valid.
        eat(band);
    }
    eat(settings.seed as f64);
    format!("{h:016x}")
}

pub(super) fn interval(values: &[f64]) -> IntervalFile {
    let q = quantiles(values, &[0.5, 0.16, 0.84, 0.025, 0.975]);
    IntervalFile { median: q[0], lo68: q[1], hi68: q[2], lo95: q[3], hi95: q[4] }
}

/// Runs the posterior stage on a one-body study after [`super::detect`].
pub fn posterior(
    study: &Study,
    detection: &Detection,
    settings: &PosteriorSettings,
    observer: &dyn Observer,
) -> Result<PosteriorOutcome, PipelineError> {
    settings.check()?;
    let arc = study.single()?;
    let (model, ephemeris) = (&arc.model, study.ephemeris.as_ref());
    let search_settings = &detection.settings.search;
    let null_kernel = &detection.kernel;
    let (kernel, delta_chi2_offset) = detection.posterior_kernel();
    let observations = detection.observations.as_slice();
    let mut warnings = Vec::new();

    // The alternatives first: they are cheap and do not need a perturber.
    let priors = &settings.alternatives;
    let mut models = vec![impostors::offset_model(null_kernel, observations, priors)];
    if priors.nongrav_au_per_day2 > 0.0 {
        models.insert(0, impostors::nongravitational_model(null_kernel, priors));
    }
    match impostors::gm_model(null_kernel, model, ephemeris, priors) {
        Some(m) => models.insert(0, m),
        None => warnings.push("the known-planet mass alternative could not be weighed (no planet with a published GM uncertainty, or the ephemeris does not cover the arc)".into()),
    }
    let compared: Vec<impostors::Comparison> = models.iter().map(|m| impostors::compare(null_kernel, m)).collect();
    let alternatives: Vec<ImpostorFile> = compared.iter().map(impostor_file).collect();

    let prior = PerturberPrior {
        mass_earth: search_settings.mass_earth,
        distance_au: search_settings.distance_au,
        max_eccentricity: settings.max_eccentricity,
        min_separation_au: search_settings.min_separation_au,
        near_ecliptic_deg: search_settings.near_ecliptic_deg,
    };
    if !settings.sample || detection.basins.is_empty() {
        return Ok(PosteriorOutcome { explanation: explain(None, &alternatives), alternatives, run: None, warnings });
    }
    let posterior = PerturberPosterior::new(kernel, prior);
    let fp = fingerprint(kernel.residuals(), &prior, &settings.sampler());
    let sampled = sample(&posterior, &detection.basins, settings, &fp, observer)?;
    let (mut diagnostics, mut sampling_warnings) = diagnose(&sampled, settings);
    warnings.append(&mut sampling_warnings);
    let evidence = evidence_of(&sampled, settings.runs, delta_chi2_offset);

    // The nonlinear check.
    let nonlinear =
        NonlinearLikelihood::new(&detection.null, kernel, observations, &detection.geometry, model, ephemeris)
            .map_err(PipelineError::failed("nonlinear check"))?;
    let (source, chosen) =
        check_full_model(&posterior, &nonlinear, &sampled, settings, &mut diagnostics, &mut warnings, observer)?;

    let search = SearchGeometry::new(study.wide.as_ref(), study.search_epoch_tdb_days)?;
    let derived = derive_all(&search, &chosen, kernel.epoch_tdb_days, kernel.central_gm());
    let posterior_file = summarise(&derived, &prior, source);
    if let Some(path) = &settings.checkpoint {
        let _ = std::fs::remove_file(path);
    }
    let explanation =
        explain(evidence.as_ref().map(|e| (e.log10_bayes_factor, e.log10_bayes_factor_error)), &alternatives);
    Ok(PosteriorOutcome {
        alternatives,
        explanation,
        run: Some(PosteriorRun {
            summary: posterior_file,
            evidence,
            diagnostics,
            source,
            samples: derived,
            states: sampled.states,
            sampler: sampled.sampler,
        }),
        warnings,
    })
}

/// The file form of an alternative's comparison.
pub(super) fn impostor_file(c: &impostors::Comparison) -> ImpostorFile {
    ImpostorFile {
        name: c.name.clone(),
        description: c.description.clone(),
        n_parameters: c.n_parameters,
        delta_chi2: c.delta_chi2,
        log10_bayes_factor: c.ln_bayes_factor / std::f64::consts::LN_10,
        estimates: c
            .estimates
            .iter()
            .map(|(p, m, s, u)| EstimateFile { parameter: p.clone(), mean: *m, sigma: *s, unit: u.clone() })
            .collect(),
    }
}

/// The linear samples thinned to at most 5000.
pub(super) fn capped(linear: &[(Vec<f64>, f64)]) -> Vec<(Vec<f64>, f64)> {
    let step = (linear.len() / 5000).max(1);
    linear.iter().step_by(step).cloned().collect()
}

/// Derived quantities of sampled parameter vectors at the search epoch
/// (`t0` and `gm_sun`: the kernel's epoch and central GM).
pub(super) fn derive_all(
    search: &SearchGeometry,
    chosen: &[(Vec<f64>, f64)],
    t0: f64,
    gm_sun: f64,
) -> Vec<DerivedSample> {
    chosen.iter().filter_map(|(x, ll)| search.derive(&PerturberSample::from_params(x), *ll, t0, gm_sun)).collect()
}

/// A finished run of the tempered ensemble sampler.
pub(super) struct Sampled {
    pub states: Vec<SamplerState>,
    pub sampler: SamplerSettings,
    pub seconds: f64,
    pub evaluations: u64,
}

/// Runs the tempered ensemble sampler on a perturber posterior (any
/// kernel), started from the basins or resumed from the checkpoint.
pub(super) fn sample<K: SignalKernel + ?Sized>(
    posterior: &PerturberPosterior<'_, K>,
    basins: &[Scored],
    settings: &PosteriorSettings,
    fingerprint: &str,
    observer: &dyn Observer,
) -> Result<Sampled, PipelineError> {
    let sampler_settings = settings.sampler();
    let checkpoint = settings.checkpoint.as_ref().map(|path| Checkpoint {
        path: path.as_path(),
        every: 100,
        fingerprint: fingerprint.to_string(),
    });
    let states = match (&checkpoint, settings.resume) {
        (Some(c), true) => {
            let s = c.load(&sampler_settings).map_err(|e| PipelineError::Input(e.to_string()))?;
            if s.len() != settings.runs {
                return Err(PipelineError::Input(format!(
                    "{}: it holds {} runs, --runs asks for {}",
                    c.path.display(),
                    s.len(),
                    settings.runs
                )));
            }
            observer
                .note(&format!("Resuming the posterior from step {} of {}...", s[0].step, sampler_settings.n_steps));
            s
        }
        _ => {
            let betas = sampler_settings.initial_betas();
            (0..settings.runs as u64)
                .map(|r| {
                    let start = posterior.starting_walkers(
                        basins,
                        &betas,
                        sampler_settings.n_walkers,
                        settings.seed.wrapping_add(r),
                        r % 2 == 1,
                    );
                    SamplerState::new(posterior, &sampler_settings, r, &start)
                })
                .collect::<Result<Vec<_>, _>>()
                .map_err(PipelineError::failed("starting the sampler"))?
        }
    };
    if let Some(dir) = settings.checkpoint.as_ref().and_then(|p| p.parent()) {
        std::fs::create_dir_all(dir)
            .map_err(|e| PipelineError::failure("posterior sampling", format!("creating {}: {e}", dir.display())))?;
    }
    let started = Instant::now();
    let start_step = states[0].step;
    let states = sampler::run(posterior, &sampler_settings, states, checkpoint.as_ref(), Stage::Sampling, observer)
        .map_err(interrupted)?;
    let seconds = started.elapsed().as_secs_f64();
    let evaluations = (sampler_settings.n_steps - start_step) as u64
        * settings.runs as u64
        * sampler_settings.n_temperatures as u64
        * sampler_settings.n_walkers as u64;
    Ok(Sampled { states, sampler: sampler_settings, seconds, evaluations })
}

/// Convergence diagnostics of a run (the reweighting fields are left at
/// zero for the caller), and the warning when it has not converged.
pub(super) fn diagnose(sampled: &Sampled, settings: &PosteriorSettings) -> (DiagnosticsFile, Vec<String>) {
    let (states, sampler_settings) = (&sampled.states, &sampled.sampler);
    let burn_in = sampler_settings.burn_in;
    let mut warnings = Vec::new();
    // Diagnostics.
    let post_steps = (sampler_settings.n_steps - burn_in) as f64;
    let tau: Vec<f64> = (0..PARAMETERS.len())
        .map(|p| {
            states
                .iter()
                .map(|s| sampler::autocorrelation_time(&s.walker_series(burn_in, p)) * sampler_settings.thin as f64)
                .fold(0.0, f64::max)
        })
        .collect();
    let r_hat: Vec<f64> = (0..PARAMETERS.len())
        .map(|p| {
            let runs: Vec<Vec<f64>> = states
                .iter()
                .map(|s| {
                    let w = s.walker_series(burn_in, p);
                    let n = w.first().map_or(0, |x| x.len());
                    (0..n).flat_map(|k| w.iter().map(move |walker| walker[k])).collect()
                })
                .collect();
            sampler::rank_normalized_r_hat(&runs)
        })
        .collect();
    let tau_max = tau.iter().copied().fold(0.0, f64::max);
    let r_hat_max = r_hat.iter().copied().filter(|r| r.is_finite()).fold(1.0, f64::max);
    let effective = (settings.runs * sampler_settings.n_walkers) as f64 * post_steps / tau_max.max(1.0);
    let enough_length = post_steps >= MIN_TAUS * tau_max;
    let mixed = settings.runs >= 2 && r_hat_max < MAX_R_HAT;
    let converged = enough_length && mixed;
    let advice = if converged {
        "converged: rank-normalised split R-hat (bulk and folded) below 1.05 and more than 50 autocorrelation times after burn-in".to_string()
    } else {
        let mut a = String::from("not converged: ");
        if settings.runs < 2 {
            a.push_str("one run cannot show convergence, use --runs 2 or more; ");
        } else if !mixed {
            let _ = write!(
                a,
                "the runs or their halves disagree (rank-normalised split R-hat {r_hat_max:.3} > {MAX_R_HAT}); "
            );
        }
        if !enough_length {
            let _ = write!(
                a,
                "only {:.0} autocorrelation times after burn-in (want {MIN_TAUS}); ",
                post_steps / tau_max.max(1.0)
            );
        }
        let want = ((MIN_TAUS * tau_max / 0.6) as usize).max(settings.steps * 2).div_ceil(100) * 100;
        let _ = write!(a, "rerun with --posterior-steps {want}, and more --walkers if the posterior has several modes");
        a
    };
    if !converged {
        warnings.push(format!("posterior {advice}"));
    }
    let n_t = sampler_settings.n_temperatures;
    let sum = |f: &dyn Fn(&SamplerState) -> &Vec<u64>, i: usize| states.iter().map(|s| f(s)[i]).sum::<u64>() as f64;
    let acceptance: Vec<f64> = (0..n_t).map(|t| sum(&|s| &s.accepted, t) / sum(&|s| &s.proposed, t).max(1.0)).collect();
    let swap_rates: Vec<f64> = (0..n_t.saturating_sub(1))
        .map(|t| sum(&|s| &s.swaps_accepted, t) / sum(&|s| &s.swaps_proposed, t).max(1.0))
        .collect();

    let diagnostics = DiagnosticsFile {
        runs: settings.runs,
        walkers: sampler_settings.n_walkers,
        steps: sampler_settings.n_steps,
        burn_in,
        thin: sampler_settings.thin,
        likelihood_evaluations: sampled.evaluations,
        sampling_seconds: sampled.seconds,
        betas: states[0].betas.clone(),
        acceptance,
        swap_rates,
        parameters: PARAMETERS.iter().map(|s| s.to_string()).collect(),
        autocorrelation_steps: tau,
        split_r_hat: r_hat,
        effective_samples: effective,
        effective_samples_per_second: if sampled.seconds > 0.0 { effective / sampled.seconds } else { f64::NAN },
        reweighting_effective_samples: 0.0,
        reweighting_checked: 0,
        converged,
        advice,
    };
    (diagnostics, warnings)
}

/// The evidence of a run against no perturber, from thermodynamic
/// integration and stepping stones; `delta_chi2_offset` puts a recentred
/// kernel's likelihood against the null model.
pub(super) fn evidence_of(sampled: &Sampled, runs: usize, delta_chi2_offset: f64) -> Option<EvidenceFile> {
    let (states, n_t) = (&sampled.states, sampled.sampler.n_temperatures);
    // Evidence.
    // A recentred kernel's likelihood is relative to its own residuals y';
    // against the null model it is higher by (|y|^2 - |y'|^2) / 2.
    let shift = 0.5 * delta_chi2_offset;
    let (ln_z, ln_z_err) = sampler::combined_evidence(states, sampler::thermodynamic_evidence);
    let (ss_z, ss_err) = sampler::combined_evidence(states, sampler::stepping_stone_evidence);
    let (ln_z, ss_z) = (ln_z + shift, ss_z + shift);
    // Two estimates of the same number: thermodynamic integration (whose
    // discretisation error grows with the signal) and stepping stones over
    // the whole ladder. When they agree within three combined errors the
    // tighter one is reported; when they do not, the thermodynamic value
    // with its error widened to cover the disagreement.
    let diff = (ln_z - ss_z).abs();
    let consistent = diff <= 3.0 * ln_z_err.hypot(ss_err);
    let (z, z_err, chosen) = if consistent && ss_err.is_finite() && ss_err < ln_z_err {
        (ss_z, ss_err, "stepping stones over the whole ladder")
    } else if consistent {
        (ln_z, ln_z_err, "thermodynamic integration")
    } else {
        (
            ln_z,
            ln_z_err.max(diff),
            "thermodynamic integration, its error widened to its disagreement with stepping stones",
        )
    };
    (n_t >= 2).then(|| EvidenceFile {
        ln_bayes_factor: z,
        ln_bayes_factor_error: z_err,
        log10_bayes_factor: z / std::f64::consts::LN_10,
        log10_bayes_factor_error: z_err / std::f64::consts::LN_10,
        method: format!(
            "{chosen}, mean of {} runs over {n_t} rungs, the linear kernel's likelihood; thermodynamic integration (trapezoid in ln beta; stepping stone to the prior) gives ln B = {ln_z:.2} +- {ln_z_err:.2}, stepping stones over the whole ladder ln B = {ss_z:.2} +- {ss_err:.2}",
            runs
        ),
    })
}

/// The posterior's summary (intervals and prior) from its samples.
pub(super) fn summarise(derived: &[DerivedSample], prior: &PerturberPrior, source: SampleSource) -> PosteriorFile {
    let col = |f: &dyn Fn(&DerivedSample) -> f64| derived.iter().map(f).collect::<Vec<f64>>();
    let mean_dir = derived.iter().fold(Vec3::ZERO, |acc, d| acc + d.direction).unit();
    let radius: Vec<f64> = derived.iter().map(|d| angular_separation(d.direction, mean_dir) / RAD_PER_DEG).collect();
    PosteriorFile {
        method: source.name().into(),
        n_samples: derived.len(),
        mass_earth: interval(&col(&|d| d.sample.mass_earth())),
        distance_au: interval(&col(&|d| d.distance_au)),
        heliocentric_distance_au: interval(&col(&|d| d.heliocentric_distance_au)),
        a_au: interval(&col(&|d| d.a_au)),
        e: interval(&col(&|d| d.e)),
        inc_deg: interval(&col(&|d| d.inc_deg)),
        sky_radius_deg: interval(&radius),
        mean_ra_deg: crate::frames::radec_from_vector(mean_dir).ra_rad / RAD_PER_DEG,
        mean_dec_deg: crate::frames::radec_from_vector(mean_dir).dec_rad / RAD_PER_DEG,
        prior: PriorFile {
            mass_earth_log_uniform: [prior.mass_earth.0, prior.mass_earth.1],
            heliocentric_distance_au_log_uniform: [prior.distance_au.0, prior.distance_au.1],
            max_eccentricity: prior.max_eccentricity,
            min_separation_au: prior.min_separation_au,
            description: "mass log-uniform; position isotropic with log-uniform heliocentric distance; eccentricity uniform on [0, max_eccentricity], the velocity given e spread as in a uniform ball of bound velocities; orbits passing within min_separation_au of the tracked body excluded".into(),
        },
    }
}

/// Parameter vectors with their kernel log-likelihoods.
type ScoredSamples = Vec<(Vec<f64>, f64)>;

/// Checks the linear posterior's samples against the full nonlinear model
/// (importance weights on up to [`CHECKED`] of them) and chooses what to
/// report: the linear samples when the full model confirms them (effective
/// share of the weights at least 90%), the checked samples resampled by
/// weight when it reweights them (10-90%), MCMC steps on the full model
/// when the weights collapse. The one-body and the joint stage share it.
pub(super) fn check_full_model<K: SignalKernel + ?Sized>(
    posterior: &PerturberPosterior<K>,
    nonlinear: &NonlinearLikelihood,
    sampled: &Sampled,
    settings: &PosteriorSettings,
    diagnostics: &mut DiagnosticsFile,
    warnings: &mut Vec<String>,
    observer: &dyn Observer,
) -> Result<(SampleSource, ScoredSamples), PipelineError> {
    let burn_in = sampled.sampler.burn_in;
    let linear: Vec<(Vec<f64>, f64)> = sampled.states.iter().flat_map(|s| s.posterior_samples(burn_in)).collect();
    let stride = (linear.len() / CHECKED).max(1);
    let checked: Vec<(Vec<f64>, f64)> = linear.iter().step_by(stride).take(CHECKED).cloned().collect();
    observer.note(&format!("Checking {} posterior samples against the full nonlinear model...", checked.len()));
    let log_w = importance_log_weights(&checked, nonlinear);
    let ess = effective_sample_size(&log_w);
    let share = ess / checked.len().max(1) as f64;
    diagnostics.reweighting_effective_samples = ess;
    diagnostics.reweighting_checked = checked.len();
    Ok(if share >= 0.9 {
        (SampleSource::Linear, capped(&linear))
    } else if share >= 0.1 {
        warnings.push(format!(
            "the nonlinear model reweights the linear posterior (effective share {:.0}%): the samples are resampled by weight",
            100.0 * share
        ));
        let idx = resample(&log_w, checked.len(), settings.seed ^ 0x7e5a);
        (SampleSource::Reweighted, idx.iter().map(|&i| checked[i].clone()).collect())
    } else {
        warnings.push(format!(
            "the linear posterior collapses under the nonlinear model (effective share {:.1}%): running MCMC steps on the full model around the modes",
            100.0 * share
        ));
        (SampleSource::Nonlinear, nonlinear_steps(posterior, nonlinear, &checked, &log_w, settings.seed, observer)?)
    })
}

/// MCMC on the full nonlinear model, started from the samples the
/// importance weights favour most (distinct ones, for a non-degenerate
/// ensemble).
fn nonlinear_steps<K: SignalKernel + ?Sized>(
    linear: &PerturberPosterior<K>,
    nonlinear: &NonlinearLikelihood,
    checked: &[(Vec<f64>, f64)],
    log_w: &[f64],
    seed: u64,
    observer: &dyn Observer,
) -> Result<Vec<(Vec<f64>, f64)>, PipelineError> {
    let target = NonlinearPosterior { linear, likelihood: nonlinear };
    let settings = SamplerSettings {
        n_walkers: 28,
        n_temperatures: 1,
        max_temperature: 2.0,
        n_steps: 240,
        burn_in: 120,
        thin: 2,
        adapt: false,
        stretch_scale: 2.0,
        mode_hop: 0.1,
        seed: seed ^ 0x6e6c,
    };
    let mut order: Vec<usize> = (0..checked.len()).filter(|&i| log_w[i].is_finite()).collect();
    order.sort_by(|&a, &b| log_w[b].total_cmp(&log_w[a]));
    if order.len() < settings.n_walkers {
        return Err(PipelineError::failure(
            "nonlinear sampling",
            "too few posterior samples survive the nonlinear model to restart the sampler on it",
        ));
    }
    let start: Vec<Vec<f64>> = order[..settings.n_walkers].iter().map(|&i| checked[i].0.clone()).collect();
    let state =
        SamplerState::new(&target, &settings, 0, &[start]).map_err(PipelineError::failed("nonlinear sampling"))?;
    let states =
        sampler::run(&target, &settings, vec![state], None, Stage::NonlinearSampling, observer).map_err(interrupted)?;
    Ok(states[0].posterior_samples(settings.burn_in))
}

/// Names the best-supported explanation, by log10 Bayes factor against no
/// extra effect, and how strongly it beats the runner-up.
/// The name of the perturber explanation in the verdict.
pub const PERTURBER: &str = "an unseen perturber";

/// The best-supported explanation among those weighed. One rule: a margin
/// counts (on the Kass & Raftery 1995 scale) only beyond twice the error
/// of the evidences it compares; inside that the verdict is "undecided".
/// Without a posterior the perturber was not weighed, and the text says
/// so instead of ranking the others above it.
pub(super) fn explain(perturber: Option<(f64, f64)>, impostors: &[ImpostorFile]) -> Explanation {
    let mut options: Vec<(String, f64, f64)> = vec![("no extra effect (noise alone)".into(), 0.0, 0.0)];
    if let Some((b, err)) = perturber {
        options.push((PERTURBER.into(), b, err));
    }
    options.extend(impostors.iter().map(|i| (i.name.clone(), i.log10_bayes_factor, 0.0)));
    options.sort_by(|a, b| b.1.total_cmp(&a.1));
    let (best, runner) = (&options[0], &options[1.min(options.len() - 1)]);
    let margin = best.1 - runner.1;
    let error = best.2.hypot(runner.2);
    // Nothing stands out from noise alone (not even "substantial", 0.5 in
    // log10, beyond twice its error): no extra effect is needed.
    let none_needed = best.1 < 0.5 + 2.0 * best.2;
    let undecided = !none_needed && margin <= 2.0 * error;
    let strength = if none_needed {
        "none needed"
    } else if undecided {
        "undecided"
    } else {
        impostors::strength(margin)
    };
    let noise_first = options.iter().position(|o| o.1 == 0.0 && o.2 == 0.0 && o.0.starts_with("no extra effect"));
    let mut text = if none_needed {
        // Name the strongest alternative, not noise itself.
        let rival = options.iter().enumerate().find(|(k, _)| Some(*k) != noise_first).map(|(_, o)| o);
        match rival {
            Some(r) => format!(
                "no extra effect is needed: nothing weighed beats noise alone by a meaningful margin (the strongest, {}, by {:.1} in log10 Bayes factor)",
                r.0, r.1
            ),
            None => "no extra effect is needed: nothing weighed beats noise alone".to_string(),
        }
    } else if undecided {
        format!(
            "undecided between {} and {}: the margin, {:.1} in log10 Bayes factor, is within twice the evidence's error ({:.1}); \
             more or better data, or a longer posterior run (--posterior-steps), are needed to tell them apart",
            best.0, runner.0, margin, error
        )
    } else {
        format!(
            "best supported: {} (log10 Bayes factor {:.1} against no extra effect); over the runner-up, {}, by {:.1} in log10 \
             (error {:.1}): {} (Kass & Raftery 1995)",
            best.0, best.1, runner.0, margin, error, strength
        )
    };
    if perturber.is_none() {
        let _ = write!(
            text,
            "; the perturber itself was not weighed (no posterior was run), so this ranks only the alternatives"
        );
    }
    Explanation {
        best: if none_needed {
            Best::NoneNeeded
        } else if undecided {
            Best::Undecided
        } else if best.0 == PERTURBER {
            Best::Perturber
        } else {
            Best::Alternative(best.0.clone())
        },
        runner_up: runner.0.clone(),
        log10_margin: margin,
        strength: strength.into(),
        text,
    }
}
