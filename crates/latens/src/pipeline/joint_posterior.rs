//! The posterior of one perturber shared by several tracked bodies.
//!
//! The sampler, its convergence diagnostics and the thermodynamic evidence
//! are those of the one-body stage, run on the joint kernel (one mass and
//! one orbit for all bodies; each body's own 6 orbit corrections projected
//! out of its part). The samples are then checked on the full nonlinear
//! model as in the one-body stage, every body integrated with the sampled
//! perturber and the bodies' log-likelihoods added: confirmed, reweighted,
//! or (when the weights collapse) replaced by MCMC steps on the full model.
//! In the strong regime the sampler runs on the joint kernel recentred on
//! the refined solution (each body's kernel recentred on its refitted
//! orbit), as the one-body stage does; the evidence is put back against
//! the null model with the recentring offset.
//!
//! The alternatives are weighed on the same residuals, each as the bodies
//! would need it:
//! - a non-gravitational push and constant astrometric offsets are each
//!   body's own (independent parameters and priors per body), so the
//!   normal matrix is block-diagonal and the joint Bayes factor is the
//!   product of the bodies' (the sum of their logarithms);
//! - the known planets' GM offsets are shared (one Neptune for all), so
//!   their columns are the bodies' side by side, one parameter per planet.
//!
//! A perturber must pull every body in the pattern its one orbit implies;
//! a push per body can fit any pattern body by body, but pays for its
//! 3 parameters per body in the evidence. The comparison says which the
//! data prefer.
//!
//! Each body's own orbit correction under the perturber is summarised too:
//! how far the perturber moves its fitted state at the reference epoch.

use super::joint::JointDetection;
use super::posterior::{
    Explanation, PosteriorRun, PosteriorSettings, SearchGeometry, check_full_model, derive_all, diagnose, evidence_of,
    explain, fingerprint, impostor_file, interval, sample, summarise,
};
use super::{PipelineError, Study};
use crate::io::results::{EstimateFile, ImpostorFile, IntervalFile};
use crate::perturber::{KeplerOrbit, SignalKernel};
use crate::posterior::impostors::{self, Comparison, LinearModel};
use crate::posterior::{BodyModel, NonlinearLikelihood, PerturberPosterior, PerturberPrior, PerturberSample};
use crate::progress::Observer;
use crate::units::{AU_KM, AU_M, DAY_S};

/// How far the perturber moves one body's fitted orbit.
#[derive(Clone, Debug)]
pub struct BodyCorrection {
    pub name: String,
    /// Size of the shift of the fitted position at the reference epoch, km.
    pub position_km: IntervalFile,
    /// Size of the shift of the fitted velocity, m/s.
    pub velocity_m_per_s: IntervalFile,
}

/// What the joint posterior stage found.
pub struct JointPosteriorOutcome {
    /// The alternatives over all bodies together.
    pub alternatives: Vec<ImpostorFile>,
    /// Per body (the study's order), the alternatives that are its own
    /// (non-gravitational push, astrometric offsets), weighed on it alone.
    pub body_alternatives: Vec<Vec<ImpostorFile>>,
    pub explanation: Explanation,
    /// None when sampling was not asked for or there was no basin.
    pub run: Option<PosteriorRun>,
    /// Per body, the orbit correction the perturber implies (empty without
    /// a run).
    pub corrections: Vec<BodyCorrection>,
    pub warnings: Vec<String>,
}

/// At most this many samples are used for the orbit-correction summary.
const CORRECTION_SAMPLES: usize = 1000;

/// Runs the posterior stage on a joint study after [`super::detect_joint`].
pub fn posterior_joint(
    study: &Study,
    detection: &JointDetection,
    settings: &PosteriorSettings,
    observer: &dyn Observer,
) -> Result<JointPosteriorOutcome, PipelineError> {
    settings.check()?;
    let (kernel, delta_chi2_offset) = detection.posterior_kernel();
    let mut warnings = Vec::new();
    let (alternatives, body_alternatives) = weigh_alternatives(study, detection, settings, &mut warnings);

    let search_settings = &detection.settings.search;
    let prior = PerturberPrior {
        mass_earth: search_settings.mass_earth,
        distance_au: search_settings.distance_au,
        max_eccentricity: settings.max_eccentricity,
        min_separation_au: search_settings.min_separation_au,
        near_ecliptic_deg: search_settings.near_ecliptic_deg,
    };
    let basins = &detection.basins;
    if !settings.sample || basins.is_empty() {
        return Ok(JointPosteriorOutcome {
            explanation: explain(None, &alternatives),
            alternatives,
            body_alternatives,
            run: None,
            corrections: Vec::new(),
            warnings,
        });
    }
    let posterior = PerturberPosterior::new(kernel, prior);
    let fp = fingerprint(kernel.residuals(), &prior, &settings.sampler());
    let sampled = sample(&posterior, basins, settings, &fp, observer)?;
    let (mut diagnostics, mut sampling_warnings) = diagnose(&sampled, settings);
    warnings.append(&mut sampling_warnings);
    let evidence = evidence_of(&sampled, settings.runs, delta_chi2_offset);
    // The check on the full model: every body integrated with the sampled
    // perturber, the bodies' log-likelihoods added.
    let parts = detection
        .bodies
        .iter()
        .zip(kernel.bodies())
        .zip(&study.bodies)
        .map(|((fit, k), arc)| BodyModel {
            null: &fit.null,
            kernel: k,
            observations: &fit.observations,
            geometry: &fit.geometry,
            model: &arc.model,
        })
        .collect();
    let nonlinear = NonlinearLikelihood::joint(parts, study.ephemeris.as_ref())
        .map_err(PipelineError::failed("nonlinear check"))?;
    let (source, chosen) =
        check_full_model(&posterior, &nonlinear, &sampled, settings, &mut diagnostics, &mut warnings, observer)?;
    let search = SearchGeometry::new(study.wide.as_ref(), study.search_epoch_tdb_days)?;
    let (t0, gm_sun) = (kernel.epoch_tdb_days(), kernel.central_gm());
    let derived = derive_all(&search, &chosen, t0, gm_sun);
    let summary = summarise(&derived, &prior, source);
    let corrections = corrections(detection, &chosen);
    if let Some(path) = &settings.checkpoint {
        let _ = std::fs::remove_file(path);
    }
    let explanation =
        explain(evidence.as_ref().map(|e| (e.log10_bayes_factor, e.log10_bayes_factor_error)), &alternatives);
    Ok(JointPosteriorOutcome {
        alternatives,
        body_alternatives,
        explanation,
        run: Some(PosteriorRun {
            summary,
            evidence,
            diagnostics,
            source,
            samples: derived,
            states: sampled.states,
            sampler: sampled.sampler,
        }),
        corrections,
        warnings,
    })
}

/// The alternatives over all bodies (joint) and each body's own.
fn weigh_alternatives(
    study: &Study,
    detection: &JointDetection,
    settings: &PosteriorSettings,
    warnings: &mut Vec<String>,
) -> (Vec<ImpostorFile>, Vec<Vec<ImpostorFile>>) {
    let kernel = &detection.kernel;
    let priors = &settings.alternatives;
    let names: Vec<&str> = detection.bodies.iter().map(|b| b.name.as_str()).collect();
    // Each body's own alternatives.
    let per_body: Vec<Vec<Comparison>> = kernel
        .bodies()
        .iter()
        .zip(&detection.bodies)
        .zip(&study.bodies)
        .map(|((k, b), arc)| {
            // A body's own push prior: from its kind in a study of bodies
            // of several kinds; none for a planet.
            let own = impostors::ImpostorPriors {
                nongrav_au_per_day2: if priors.nongrav_from_kind {
                    impostors::nongrav_prior_for(arc.tracked.kind)
                } else {
                    priors.nongrav_au_per_day2
                },
                ..*priors
            };
            let mut models = Vec::new();
            if own.nongrav_au_per_day2 > 0.0 {
                models.push(impostors::nongravitational_model(k, &own));
            }
            models.push(impostors::offset_model(k, &b.observations, &own));
            models.iter().map(|m| impostors::compare(k, m)).collect()
        })
        .collect();
    let mut joint: Vec<ImpostorFile> = Vec::new();
    // Block-diagonal alternatives: the bodies' log Bayes factors add. A
    // body that cannot have an alternative (a planet has no push) adds
    // nothing to it: under that alternative the body is as in the null.
    let mut kinds: Vec<&str> = Vec::new();
    for c in per_body.iter().flatten() {
        if !kinds.contains(&c.name.as_str()) {
            kinds.push(&c.name);
        }
    }
    for kind in kinds {
        let parts: Vec<(&Comparison, &&str)> = per_body
            .iter()
            .zip(&names)
            .filter_map(|(cs, n)| cs.iter().find(|c| c.name == kind).map(|c| (c, n)))
            .collect();
        let first = parts[0].0;
        let each = if parts.len() == per_body.len() {
            "each body its own".to_string()
        } else {
            format!("each of {} bodies its own (the others cannot have one)", parts.len())
        };
        let mut file = impostor_file(&Comparison {
            name: first.name.clone(),
            description: format!("{}, {each}", first.description),
            n_parameters: parts.iter().map(|(c, _)| c.n_parameters).sum(),
            delta_chi2: parts.iter().map(|(c, _)| c.delta_chi2).sum(),
            ln_bayes_factor: parts.iter().map(|(c, _)| c.ln_bayes_factor).sum(),
            estimates: Vec::new(),
        });
        file.estimates = parts
            .iter()
            .map(|(c, name)| (*c, *name))
            .flat_map(|(c, name)| {
                c.estimates.iter().map(move |(p, mean, sigma, unit)| EstimateFile {
                    parameter: format!("{name}: {p}"),
                    mean: *mean,
                    sigma: *sigma,
                    unit: unit.clone(),
                })
            })
            .collect();
        joint.push(file);
    }
    // The known planets' GMs: one parameter per planet for all bodies.
    let gm_models: Vec<Option<LinearModel>> = kernel
        .bodies()
        .iter()
        .zip(&study.bodies)
        .map(|(k, arc)| impostors::gm_model(k, &arc.model, study.ephemeris.as_ref(), priors))
        .collect();
    match shared_columns(&gm_models, kernel) {
        Some(model) => joint.insert(0, impostor_file(&impostors::compare_with(kernel.residuals(), &model))),
        None => warnings.push(
            "the known-planet mass alternative could not be weighed (no planet with a published GM uncertainty in every body's model, or the ephemeris does not cover the arcs)"
                .into(),
        ),
    }
    let body_files = per_body.iter().map(|c| c.iter().map(impostor_file).collect()).collect();
    (joint, body_files)
}

/// One linear model whose parameters every body shares: each parameter's
/// column is the bodies' columns side by side (`None` unless every body
/// has the model with the same parameters).
fn shared_columns(models: &[Option<LinearModel>], kernel: &crate::perturber::JointKernel) -> Option<LinearModel> {
    let first = models.first()?.as_ref()?;
    let names: Vec<&str> = first.parameters.iter().map(|p| p.0.as_str()).collect();
    let mut columns = vec![vec![0.0; kernel.n_residuals()]; names.len()];
    for (b, m) in models.iter().enumerate() {
        let m = m.as_ref()?;
        if m.parameters.iter().map(|p| p.0.as_str()).ne(names.iter().copied()) {
            return None;
        }
        let part = kernel.part(b);
        for (col, own) in columns.iter_mut().zip(&m.columns) {
            col[part.clone()].copy_from_slice(own);
        }
    }
    Some(LinearModel {
        name: first.name.clone(),
        description: format!("{}, the same for every body", first.description),
        parameters: first.parameters.clone(),
        columns,
    })
}

/// Per body, the size of the orbit correction over the samples.
fn corrections(detection: &JointDetection, chosen: &[(Vec<f64>, f64)]) -> Vec<BodyCorrection> {
    let kernel = &detection.kernel;
    let (t0, gm_sun) = (kernel.epoch_tdb_days(), kernel.central_gm());
    let step = (chosen.len() / CORRECTION_SAMPLES).max(1);
    let orbits: Vec<(KeplerOrbit, f64)> = chosen
        .iter()
        .step_by(step)
        .filter_map(|(x, _)| {
            let s = PerturberSample::from_params(x);
            KeplerOrbit::from_state(gm_sun, s.position_au, s.velocity_au_per_day, t0).map(|o| (o, s.gm_au3_per_day2))
        })
        .collect();
    kernel
        .bodies()
        .iter()
        .zip(&detection.bodies)
        .map(|(k, b)| {
            let mut signal = vec![0.0; k.n_residuals()];
            let (mut dr, mut dv) = (Vec::new(), Vec::new());
            for (orbit, gm) in &orbits {
                k.signal(orbit, &mut signal);
                signal.iter_mut().for_each(|x| *x *= gm);
                if let Some(c) = k.orbit_correction(&signal) {
                    dr.push((c[0] * c[0] + c[1] * c[1] + c[2] * c[2]).sqrt() * AU_KM);
                    dv.push((c[3] * c[3] + c[4] * c[4] + c[5] * c[5]).sqrt() * AU_M / DAY_S);
                }
            }
            BodyCorrection { name: b.name.clone(), position_km: interval(&dr), velocity_m_per_s: interval(&dv) }
        })
        .collect()
}
