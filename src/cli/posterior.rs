//! The posterior stage of `latens infer`: tempered ensemble sampling through
//! the linear kernel, the nonlinear check, the evidence, the impostors, and
//! the files (posterior.csv, corner and trace charts).

use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Instant;

use super::CliError;
use super::args::InferArgs;
use latens::astrometry::{ObservingGeometry, astrometric_direction};
use latens::dynamics::ForceModel;
use latens::dynamics::kepler::elements_from_state;
use latens::ephemeris::Ephemeris;
use latens::frames::{angular_separation, ecliptic_from_icrf};
use latens::io::observations::Observation;
use latens::io::results::{
    DiagnosticsFile, EstimateFile, EvidenceFile, ExplanationFile, ImpostorFile, IntervalFile, PosteriorFile, PriorFile,
};
use latens::io::write_atomically;
use latens::perturber::{KeplerOrbit, LinearKernel, Scored};
use latens::posterior::impostors::{self, ImpostorPriors};
use latens::posterior::sampler::{self, Checkpoint, SamplerError, SamplerSettings, SamplerState};
use latens::posterior::{
    NonlinearLikelihood, NonlinearPosterior, PerturberPosterior, PerturberPrior, PerturberSample,
    effective_sample_size, importance_log_weights, quantiles, resample,
};
use latens::progress::Stage;
use latens::reference::ReferenceFit;
use latens::units::RAD_PER_DEG;
use latens::vec3::Vec3;
use latens_charts::posterior_chart::{Column, CornerChart, TraceChart, render_png, render_svg};

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

/// Everything the stage reads.
pub(super) struct Inputs<'a> {
    pub null: &'a ReferenceFit,
    /// The kernel about the null orbit (the alternatives are weighed on it).
    pub null_kernel: &'a LinearKernel,
    /// The kernel the posterior samples: the null one, or the one
    /// recentred on the refined solution when the signal is strong.
    pub kernel: &'a LinearKernel,
    /// |y_null|^2 - |y'|^2 of that kernel (0 for the null kernel).
    pub delta_chi2_offset: f64,
    /// What the tracked body is (decides the alternatives' priors).
    pub tracked: &'a latens::dynamics::TrackedBody,
    pub observations: &'a [Observation],
    pub geometry: &'a [ObservingGeometry],
    pub model: &'a ForceModel,
    pub ephemeris: &'a dyn Ephemeris,
    pub wide: &'a dyn Ephemeris,
    pub search_epoch: f64,
    pub basins: &'a [Scored],
    pub mass_earth: (f64, f64),
    pub distance_au: (f64, f64),
    pub min_separation_au: f64,
}

/// What the stage gives back to `infer`.
pub(super) struct Outcome {
    pub posterior: Option<PosteriorFile>,
    pub evidence: Option<EvidenceFile>,
    pub diagnostics: Option<DiagnosticsFile>,
    pub impostors: Vec<ImpostorFile>,
    pub explanation: Option<ExplanationFile>,
    pub warnings: Vec<String>,
    pub text: String,
    pub files: Vec<(&'static str, &'static str)>,
    /// Equally weighted samples with their derived quantities (empty without a posterior).
    pub samples: Vec<DerivedSample>,
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
pub(crate) struct SearchGeometry {
    pub geometry: ObservingGeometry,
    pub epoch: f64,
}

impl SearchGeometry {
    pub fn new(wide: &dyn Ephemeris, epoch: f64) -> Result<Self, CliError> {
        Ok(SearchGeometry { geometry: super::search::geometry_at(wide, epoch)?, epoch })
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
        let el = elements_from_state(
            latens::units::GM_SUN_AU3_PER_DAY2,
            ecliptic_from_icrf(s.position_au),
            ecliptic_from_icrf(s.velocity_au_per_day),
        )
        .ok()?;
        let (dir, dist, helio, elong) = self.place_at(&orbit, self.epoch, &self.geometry);
        let place = latens::frames::radec_from_vector(dir);
        let (ra, dec) = (place.ra_rad, place.dec_rad);
        let deg = |x: f64| x / RAD_PER_DEG;
        Some(DerivedSample {
            sample: *s,
            log_likelihood,
            a_au: el.semi_major_axis_au(),
            e: el.eccentricity,
            inc_deg: deg(el.inclination_rad),
            node_deg: deg(el.node_rad),
            peri_deg: deg(el.periapsis_arg_rad),
            mean_anomaly_deg: deg(el.mean_anomaly_rad()),
            ra_deg: deg(ra),
            dec_deg: deg(dec),
            distance_au: dist,
            heliocentric_distance_au: helio,
            elongation_deg: elong,
            direction: dir,
        })
    }
}

/// FNV-1a hash of the problem: residuals, prior, settings.
fn fingerprint(kernel: &LinearKernel, prior: &PerturberPrior, settings: &SamplerSettings) -> String {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    let mut eat = |x: f64| {
        for b in x.to_le_bytes() {
            h ^= b as u64;
            h = h.wrapping_mul(0x0100_0000_01b3);
        }
    };
    kernel.residuals.iter().for_each(|&r| eat(r));
    for v in [prior.mass_earth.0, prior.mass_earth.1, prior.distance_au.0, prior.distance_au.1, prior.max_eccentricity]
    {
        eat(v);
    }
    eat(prior.min_separation_au);
    eat(settings.seed as f64);
    format!("{h:016x}")
}

fn interval(values: &[f64]) -> IntervalFile {
    let q = quantiles(values, &[0.5, 0.16, 0.84, 0.025, 0.975]);
    IntervalFile { median: q[0], lo68: q[1], hi68: q[2], lo95: q[3], hi95: q[4] }
}

/// Runs the stage.
pub(super) fn run(args: &InferArgs, out: &Path, input: &Inputs) -> Result<Outcome, CliError> {
    let mut warnings = Vec::new();
    let mut text = String::new();
    let mut files = Vec::new();

    // The impostors first: they are cheap and do not need a perturber.
    let priors = ImpostorPriors {
        gm_inflation: args.gm_prior_inflation,
        nongrav_au_per_day2: args.nongrav_prior.unwrap_or(impostors::nongrav_prior_for(input.tracked.kind)),
        offset_arcsec: args.offset_prior,
    };
    let mut models = vec![impostors::offset_model(input.null_kernel, input.observations, &priors)];
    if priors.nongrav_au_per_day2 > 0.0 {
        models.insert(0, impostors::nongravitational_model(input.null_kernel, &priors));
    }
    match impostors::gm_model(input.null_kernel, input.model, input.ephemeris, &priors) {
        Some(m) => models.insert(0, m),
        None => warnings.push("the known-planet mass alternative could not be weighed (no planet with a published GM uncertainty, or the ephemeris does not cover the arc)".into()),
    }
    let compared: Vec<impostors::Comparison> =
        models.iter().map(|m| impostors::compare(input.null_kernel, m)).collect();
    let impostor_files: Vec<ImpostorFile> = compared
        .iter()
        .map(|c| ImpostorFile {
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
        })
        .collect();

    let prior = PerturberPrior {
        mass_earth: input.mass_earth,
        distance_au: input.distance_au,
        max_eccentricity: args.max_eccentricity,
        min_separation_au: input.min_separation_au,
    };
    if args.no_posterior || input.basins.is_empty() {
        let explanation = explain(None, &impostor_files);
        let _ = writeln!(text, "Explanation: {}", explanation.text);
        return Ok(Outcome {
            posterior: None,
            evidence: None,
            diagnostics: None,
            impostors: impostor_files,
            explanation: Some(explanation),
            warnings,
            text,
            files,
            samples: Vec::new(),
        });
    }
    let burn_in = args.posterior_steps * 2 / 5;
    let settings = SamplerSettings {
        n_walkers: args.walkers,
        n_temperatures: args.temperatures,
        max_temperature: 1e5,
        n_steps: args.posterior_steps,
        burn_in,
        thin: 4,
        adapt: true,
        stretch_scale: 2.0,
        mode_hop: 0.1,
        seed: args.seed,
    };
    settings
        .check(latens::posterior::model::DIM)
        .map_err(|e| CliError::bad_input(anyhow::anyhow!("posterior sampler: {e}")))?;
    if args.runs == 0 {
        return Err(CliError::bad_input(anyhow::anyhow!("--runs must be at least 1")));
    }
    let posterior = PerturberPosterior::new(input.kernel, prior);
    let checkpoint_path: PathBuf = out.join("checkpoint.json");
    let checkpoint =
        Checkpoint { path: &checkpoint_path, every: 100, fingerprint: fingerprint(input.kernel, &prior, &settings) };
    let states = if args.resume.is_some() {
        let s = checkpoint.load(&settings).map_err(CliError::bad_input)?;
        if s.len() != args.runs {
            return Err(CliError::bad_input(anyhow::anyhow!(
                "{}: it holds {} runs, --runs asks for {}",
                checkpoint_path.display(),
                s.len(),
                args.runs
            )));
        }
        eprintln!("Resuming the posterior from step {} of {}...", s[0].step, settings.n_steps);
        s
    } else {
        let betas = settings.initial_betas();
        (0..args.runs as u64)
            .map(|r| {
                let start = posterior.starting_walkers(
                    input.basins,
                    &betas,
                    settings.n_walkers,
                    args.seed.wrapping_add(r),
                    r % 2 == 1,
                );
                SamplerState::new(&posterior, &settings, r, &start)
            })
            .collect::<Result<Vec<_>, _>>()
            .map_err(CliError::failed)?
    };
    std::fs::create_dir_all(out).map_err(|e| CliError::failed(anyhow::anyhow!("creating {}: {e}", out.display())))?;
    let started = Instant::now();
    let start_step = states[0].step;
    let bars = crate::cli::progress::Bars::interruptible();
    let result = sampler::run(&posterior, &settings, states, Some(&checkpoint), Stage::Sampling, &bars);
    let states = match result {
        Ok(s) => s,
        Err(SamplerError::Interrupted { step, of, checkpoint: Some(checkpoint) }) => {
            return Err(CliError::failed(anyhow::anyhow!(
                "interrupted at step {step} of {of}; the progress is saved in {checkpoint}: run the same command with --resume {} to finish it",
                out.display()
            )));
        }
        Err(e) => return Err(CliError::failed(e)),
    };
    let seconds = started.elapsed().as_secs_f64();
    let evaluations = (settings.n_steps - start_step) as u64
        * args.runs as u64
        * settings.n_temperatures as u64
        * settings.n_walkers as u64;

    // Diagnostics.
    let post_steps = (settings.n_steps - burn_in) as f64;
    let tau: Vec<f64> = (0..PARAMETERS.len())
        .map(|p| {
            states
                .iter()
                .map(|s| sampler::autocorrelation_time(&s.walker_series(burn_in, p)) * settings.thin as f64)
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
    let effective = (args.runs * settings.n_walkers) as f64 * post_steps / tau_max.max(1.0);
    let enough_length = post_steps >= MIN_TAUS * tau_max;
    let mixed = args.runs >= 2 && r_hat_max < MAX_R_HAT;
    let converged = enough_length && mixed;
    let advice = if converged {
        "converged: rank-normalised split R-hat (bulk and folded) below 1.05 and more than 50 autocorrelation times after burn-in".to_string()
    } else {
        let mut a = String::from("not converged: ");
        if args.runs < 2 {
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
        let want = ((MIN_TAUS * tau_max / 0.6) as usize).max(args.posterior_steps * 2).div_ceil(100) * 100;
        let _ = write!(a, "rerun with --posterior-steps {want}, and more --walkers if the posterior has several modes");
        a
    };
    if !converged {
        warnings.push(format!("posterior {advice}"));
    }
    let n_t = settings.n_temperatures;
    let sum = |f: &dyn Fn(&SamplerState) -> &Vec<u64>, i: usize| states.iter().map(|s| f(s)[i]).sum::<u64>() as f64;
    let acceptance: Vec<f64> = (0..n_t).map(|t| sum(&|s| &s.accepted, t) / sum(&|s| &s.proposed, t).max(1.0)).collect();
    let swap_rates: Vec<f64> = (0..n_t.saturating_sub(1))
        .map(|t| sum(&|s| &s.swaps_accepted, t) / sum(&|s| &s.swaps_proposed, t).max(1.0))
        .collect();

    // Evidence.
    // A recentred kernel's likelihood is relative to its own residuals y';
    // against the null model it is higher by (|y|^2 - |y'|^2) / 2.
    let shift = 0.5 * input.delta_chi2_offset;
    let (ln_z, ln_z_err) = sampler::combined_evidence(&states, sampler::thermodynamic_evidence);
    let (ss_z, ss_err) = sampler::combined_evidence(&states, sampler::stepping_stone_evidence);
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
    let evidence = (n_t >= 2).then(|| EvidenceFile {
        ln_bayes_factor: z,
        ln_bayes_factor_error: z_err,
        log10_bayes_factor: z / std::f64::consts::LN_10,
        log10_bayes_factor_error: z_err / std::f64::consts::LN_10,
        method: format!(
            "{chosen}, mean of {} runs over {n_t} rungs, the linear kernel's likelihood; thermodynamic integration (trapezoid in ln beta; stepping stone to the prior) gives ln B = {ln_z:.2} +- {ln_z_err:.2}, stepping stones over the whole ladder ln B = {ss_z:.2} +- {ss_err:.2}",
            args.runs
        ),
    });

    // The nonlinear check.
    let linear: Vec<(Vec<f64>, f64)> = states.iter().flat_map(|s| s.posterior_samples(burn_in)).collect();
    let stride = (linear.len() / CHECKED).max(1);
    let checked: Vec<(Vec<f64>, f64)> = linear.iter().step_by(stride).take(CHECKED).cloned().collect();
    eprintln!("Checking {} posterior samples against the full nonlinear model...", checked.len());
    let nonlinear = NonlinearLikelihood::new(
        input.null,
        input.kernel,
        input.observations,
        input.geometry,
        input.model,
        input.ephemeris,
    )
    .map_err(CliError::failed)?;
    let log_w = importance_log_weights(&checked, &nonlinear);
    let ess = effective_sample_size(&log_w);
    let share = ess / checked.len().max(1) as f64;
    let (method, chosen): (&str, Vec<(Vec<f64>, f64)>) = if share >= 0.9 {
        let cap = 5000;
        let step = (linear.len() / cap).max(1);
        ("linear", linear.iter().step_by(step).cloned().collect())
    } else if share >= 0.1 {
        warnings.push(format!(
            "the nonlinear model reweights the linear posterior (effective share {:.0}%): the samples are resampled by weight",
            100.0 * share
        ));
        let idx = resample(&log_w, checked.len(), args.seed ^ 0x7e5a);
        ("reweighted", idx.iter().map(|&i| checked[i].clone()).collect())
    } else {
        warnings.push(format!(
            "the linear posterior collapses under the nonlinear model (effective share {:.1}%): running MCMC steps on the full model around the modes",
            100.0 * share
        ));
        ("nonlinear", nonlinear_steps(&posterior, &nonlinear, &checked, &log_w, args.seed)?)
    };

    let search = SearchGeometry::new(input.wide, input.search_epoch)?;
    let t0 = input.kernel.epoch_tdb_days;
    let gm_sun = input.kernel.central_gm();
    let derived: Vec<DerivedSample> =
        chosen.iter().filter_map(|(x, ll)| search.derive(&PerturberSample::from_params(x), *ll, t0, gm_sun)).collect();
    let col = |f: &dyn Fn(&DerivedSample) -> f64| derived.iter().map(f).collect::<Vec<f64>>();
    let mean_dir = derived.iter().fold(Vec3::ZERO, |acc, d| acc + d.direction).unit();
    let radius: Vec<f64> = derived.iter().map(|d| angular_separation(d.direction, mean_dir) / RAD_PER_DEG).collect();
    let posterior_file = PosteriorFile {
        method: method.into(),
        n_samples: derived.len(),
        mass_earth: interval(&col(&|d| d.sample.mass_earth())),
        distance_au: interval(&col(&|d| d.distance_au)),
        heliocentric_distance_au: interval(&col(&|d| d.heliocentric_distance_au)),
        a_au: interval(&col(&|d| d.a_au)),
        e: interval(&col(&|d| d.e)),
        inc_deg: interval(&col(&|d| d.inc_deg)),
        sky_radius_deg: interval(&radius),
        mean_ra_deg: latens::frames::radec_from_vector(mean_dir).ra_rad / RAD_PER_DEG,
        mean_dec_deg: latens::frames::radec_from_vector(mean_dir).dec_rad / RAD_PER_DEG,
        prior: PriorFile {
            mass_earth_log_uniform: [prior.mass_earth.0, prior.mass_earth.1],
            heliocentric_distance_au_log_uniform: [prior.distance_au.0, prior.distance_au.1],
            max_eccentricity: prior.max_eccentricity,
            min_separation_au: prior.min_separation_au,
            description: "mass log-uniform; position isotropic with log-uniform heliocentric distance; eccentricity uniform on [0, max_eccentricity], the velocity given e spread as in a uniform ball of bound velocities; orbits passing within min_separation_au of the tracked body excluded".into(),
        },
    };
    let diagnostics = DiagnosticsFile {
        runs: args.runs,
        walkers: settings.n_walkers,
        steps: settings.n_steps,
        burn_in,
        thin: settings.thin,
        likelihood_evaluations: evaluations,
        sampling_seconds: seconds,
        betas: states[0].betas.clone(),
        acceptance,
        swap_rates,
        parameters: PARAMETERS.iter().map(|s| s.to_string()).collect(),
        autocorrelation_steps: tau,
        split_r_hat: r_hat,
        effective_samples: effective,
        effective_samples_per_second: if seconds > 0.0 { effective / seconds } else { f64::NAN },
        reweighting_effective_samples: ess,
        reweighting_checked: checked.len(),
        converged,
        advice,
    };

    write_posterior_files(out, &derived, &states, &settings)?;
    files.push((
        "posterior.csv",
        "equally weighted posterior samples: mass, elements, sky position at the search epoch",
    ));
    files.push(("posterior_corner.png (.svg)", "the posterior of mass, distance and sky position, pair by pair"));
    files.push((
        "posterior_trace.png (.svg)",
        "walkers' paths through the sampler's steps (a convergence check by eye)",
    ));
    let _ = std::fs::remove_file(&checkpoint_path);

    let pf = &posterior_file;
    let _ = writeln!(
        text,
        "Posterior ({} samples, {method}): mass {:.2} Earth masses (68%: {:.2} to {:.2}); {:.0} au away at the search epoch (68%: {:.0} to {:.0}); \
         centred at RA {:.2} deg, Dec {:+.2} deg, half the samples within {:.1} deg",
        pf.n_samples,
        pf.mass_earth.median,
        pf.mass_earth.lo68,
        pf.mass_earth.hi68,
        pf.distance_au.median,
        pf.distance_au.lo68,
        pf.distance_au.hi68,
        pf.mean_ra_deg,
        pf.mean_dec_deg,
        pf.sky_radius_deg.median
    );
    if let Some(ev) = &evidence {
        let _ = writeln!(
            text,
            "Evidence for a perturber: log10 Bayes factor {:.1} +- {:.1} against none",
            ev.log10_bayes_factor, ev.log10_bayes_factor_error
        );
    }
    let _ = writeln!(
        text,
        "Sampler: {evaluations} likelihood evaluations in {seconds:.1} s, {effective:.0} effective samples; {}",
        diagnostics.advice
    );
    let explanation =
        explain(evidence.as_ref().map(|e| (e.log10_bayes_factor, e.log10_bayes_factor_error)), &impostor_files);
    let _ = writeln!(text, "Explanation: {}", explanation.text);
    Ok(Outcome {
        posterior: Some(posterior_file),
        evidence,
        diagnostics: Some(diagnostics),
        impostors: impostor_files,
        explanation: Some(explanation),
        warnings,
        text,
        files,
        samples: derived,
    })
}

/// MCMC on the full nonlinear model, started from the samples the
/// importance weights favour most (distinct ones, for a non-degenerate
/// ensemble).
fn nonlinear_steps(
    linear: &PerturberPosterior,
    nonlinear: &NonlinearLikelihood,
    checked: &[(Vec<f64>, f64)],
    log_w: &[f64],
    seed: u64,
) -> Result<Vec<(Vec<f64>, f64)>, CliError> {
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
        return Err(CliError::failed(anyhow::anyhow!(
            "too few posterior samples survive the nonlinear model to restart the sampler on it"
        )));
    }
    let start: Vec<Vec<f64>> = order[..settings.n_walkers].iter().map(|&i| checked[i].0.clone()).collect();
    let state = SamplerState::new(&target, &settings, 0, &[start]).map_err(CliError::failed)?;
    let bars = crate::cli::progress::Bars::interruptible();
    let states = sampler::run(&target, &settings, vec![state], None, Stage::NonlinearSampling, &bars)
        .map_err(CliError::failed)?;
    Ok(states[0].posterior_samples(settings.burn_in))
}

/// Names the best-supported explanation, by log10 Bayes factor against no
/// extra effect, and how strongly it beats the runner-up.
/// The name of the perturber explanation in the verdict.
pub(super) const PERTURBER: &str = "an unseen perturber";

/// The best-supported explanation among those weighed. One rule: a margin
/// counts (on the Kass & Raftery 1995 scale) only beyond twice the error
/// of the evidences it compares; inside that the verdict is "undecided".
/// Without a posterior the perturber was not weighed, and the text says
/// so instead of ranking the others above it.
fn explain(perturber: Option<(f64, f64)>, impostors: &[ImpostorFile]) -> ExplanationFile {
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
    ExplanationFile {
        best: if none_needed {
            "no extra effect (noise alone)".into()
        } else if undecided {
            "undecided".into()
        } else {
            best.0.clone()
        },
        runner_up: runner.0.clone(),
        log10_margin: margin,
        strength: strength.into(),
        text,
    }
}

fn write_posterior_files(
    out: &Path,
    derived: &[DerivedSample],
    states: &[SamplerState],
    settings: &SamplerSettings,
) -> Result<(), CliError> {
    let fail = |e: String| CliError::failed(anyhow::anyhow!(e));
    let mut w = csv::Writer::from_writer(Vec::new());
    let header = [
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
    w.write_record(header).map_err(|e| fail(e.to_string()))?;
    for d in derived {
        let row = [
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
        ];
        w.write_record(row.iter().map(|v| format!("{v:.10e}"))).map_err(|e| fail(e.to_string()))?;
    }
    let bytes = w.into_inner().map_err(|e| fail(e.to_string()))?;
    write_atomically(&out.join("posterior.csv"), &bytes).map_err(CliError::failed)?;

    let corner = CornerChart {
        title: format!("Posterior of the perturber ({} samples; sky position at the search epoch)", derived.len()),
        columns: vec![
            Column {
                label: "log10 mass (Earth masses)".into(),
                values: derived.iter().map(|d| d.sample.mass_earth().log10()).collect(),
                marker: None,
            },
            Column {
                label: "distance from Earth (au)".into(),
                values: derived.iter().map(|d| d.distance_au).collect(),
                marker: None,
            },
            Column { label: "RA (deg)".into(), values: unwrap_ra(derived), marker: None },
            Column { label: "Dec (deg)".into(), values: derived.iter().map(|d| d.dec_deg).collect(), marker: None },
        ],
    };
    save_chart(out, "posterior_corner", CornerChart::SIZE, |a| corner.draw(a), |a| corner.draw(a))?;

    let s = &states[0];
    let d = s.dim;
    let walkers: Vec<usize> = (0..s.n_walkers).step_by((s.n_walkers / 8).max(1)).collect();
    let series = |f: &dyn Fn(&[f64]) -> f64| -> Vec<Vec<(f64, f64)>> {
        walkers
            .iter()
            .map(|&w| {
                s.chain_steps
                    .iter()
                    .enumerate()
                    .map(|(k, &step)| (step as f64, f(&s.chain[(k * s.n_walkers + w) * d..][..d])))
                    .collect()
            })
            .collect()
    };
    let trace = TraceChart {
        title: format!("Sampler trace: {} of {} walkers of run 1, cold chain", walkers.len(), s.n_walkers),
        burn_in: settings.burn_in,
        panels: vec![
            ("log10 mass (Earth masses)".into(), series(&|x| x[0] / std::f64::consts::LN_10)),
            ("heliocentric distance (au)".into(), series(&|x| (x[1] * x[1] + x[2] * x[2] + x[3] * x[3]).sqrt())),
        ],
    };
    save_chart(out, "posterior_trace", TraceChart::SIZE, |a| trace.draw(a), |a| trace.draw(a))?;
    Ok(())
}

/// RA values unwrapped around their circular mean, so a cloud straddling
/// 0 h stays in one piece on the chart.
fn unwrap_ra(derived: &[DerivedSample]) -> Vec<f64> {
    let (s, c) = derived.iter().fold((0.0, 0.0), |(s, c), d| {
        let a = d.ra_deg * RAD_PER_DEG;
        (s + a.sin(), c + a.cos())
    });
    let centre = s.atan2(c) / RAD_PER_DEG;
    derived.iter().map(|d| centre + (d.ra_deg - centre + 540.0).rem_euclid(360.0) - 180.0).collect()
}

/// Writes a chart as PNG (through a temporary file) and SVG.
pub(super) fn save_chart<P, S>(out: &Path, stem: &str, size: (u32, u32), png: P, svg: S) -> Result<(), CliError>
where
    P: FnOnce(&latens_charts::PngArea<'_>) -> Result<(), String>,
    S: FnOnce(&latens_charts::SvgArea<'_>) -> Result<(), String>,
{
    let fail = |e: String| CliError::failed(anyhow::anyhow!("drawing {stem}: {e}"));
    let tmp = out.join(format!(".{stem}.{}.tmp.png", std::process::id()));
    render_png(&tmp, size, png).map_err(fail)?;
    std::fs::rename(&tmp, out.join(format!("{stem}.png"))).map_err(|e| fail(e.to_string()))?;
    let text = render_svg(size, svg).map_err(fail)?;
    write_atomically(&out.join(format!("{stem}.svg")), text.as_bytes()).map_err(CliError::failed)?;
    Ok(())
}
