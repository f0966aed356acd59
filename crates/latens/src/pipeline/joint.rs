//! Joint detection: one perturber shared by several tracked bodies.
//!
//! Each body's orbit is fitted on its own (in parallel over bodies), all at
//! one reference epoch, the whole TDB day nearest the middle of all the
//! arcs together, so that one perturber hypothesis (a state at that epoch)
//! means the same orbit for every body. Each body gets its own linear
//! kernel, with its own 6 orbit corrections projected out; the joint
//! kernel puts their signals side by side and profiles one mass for all
//! (see [`crate::perturber::JointKernel`]). The grid search, its basins and
//! its null simulations (look-elsewhere effect included) run on the joint
//! kernel exactly as on one body's.
//!
//! Then, which bodies carry the signal: each body's part of the best
//! solution's chi-square drop, each body searched alone (its own best drop
//! and false-alarm probability), and the search run again without the body
//! that carries most: does the detection survive without it?
//!
//! Outliers are judged against the best model, as in the one-body stage:
//! the best joint solution when one is detected, else the null model; those
//! beyond the threshold are set aside and every body is fitted and searched
//! again without them.
//!
//! A detection is refined on the full nonlinear model, every body's orbit
//! refitted with the shared perturber ([`crate::perturber::joint_refine`]).
//! In the strong regime (the linear kernel's error at the best solution
//! changes the chi-square by more than 1) every body's kernel is recentred
//! on the refined solution and the joint search runs again on them, as in
//! the one-body stage: the basins the posterior starts from are then found
//! where the linear model is exact. Outliers of a detection are judged
//! against the refined full model.

use rayon::prelude::*;

use super::detection::{OutlierJudge, STRONG_DELTA_CHI2, Verdict, follow_nonlinear};
use super::{PipelineError, Study};
use crate::astrometry::ObservingGeometry;
use crate::io::observations::Observation;
use crate::perturber::joint_refine::{JointPart, JointRefinement, refine_joint};
use crate::perturber::{JointKernel, LinearKernel, Scored, SearchResult, SearchSettings, SignalKernel, grid_search};
use crate::progress::{Observer, Quiet};
use crate::reference::{ReferenceFit, ReferenceSettings, fit_reference_orbit, observing_geometry};

/// How joint detection runs.
#[derive(Clone, Debug)]
pub struct JointSettings {
    /// The grid, the priors' ranges, the null simulations and the seed.
    pub search: SearchSettings,
    /// Also search each body alone (its own false-alarm probability): one
    /// more search per body, each as costly as the joint one divided by the
    /// number of bodies.
    pub each_alone: bool,
    /// Search again without the body that carries most of the signal.
    pub leave_one_out: bool,
    /// Observations beyond this many sigma (both coordinates together)
    /// against the best model are set aside and the search runs again;
    /// `None` sets nothing aside.
    pub reject_sigma: Option<f64>,
}

/// One body's part of a joint study after its reference fit.
pub struct BodyFit {
    pub name: String,
    /// The observations fitted (those set aside excluded).
    pub observations: Vec<Observation>,
    /// The sources (file and line) of the observations set aside as
    /// outliers.
    pub set_aside: Vec<String>,
    pub null: ReferenceFit,
    pub geometry: Vec<ObservingGeometry>,
}

/// A body searched alone.
#[derive(Clone, Copy, Debug)]
pub struct AloneResult {
    pub delta_chi2: f64,
    pub false_alarm_probability: f64,
}

/// What one body contributes to the joint detection.
#[derive(Clone, Debug)]
pub struct BodyEvidence {
    pub name: String,
    pub n_observations: usize,
    /// Its part of the best joint solution's chi-square drop, at the joint
    /// profiled mass (the parts sum to the joint drop; a part may be
    /// negative when the shared mass overshoots what this body alone
    /// would want).
    pub delta_chi2_at_best: f64,
    /// Its search alone, when run.
    pub alone: Option<AloneResult>,
}

/// The search run again without the strongest body.
#[derive(Clone, Debug)]
pub struct LeaveOneOut {
    /// The body left out (index into the study's bodies).
    pub body: usize,
    pub delta_chi2: f64,
    pub false_alarm_probability: f64,
}

/// Everything joint detection found.
pub struct JointDetection {
    pub settings: JointSettings,
    /// The common reference epoch of every body's fit and of the
    /// hypotheses' states, TDB days.
    pub epoch_tdb_days: f64,
    pub bodies: Vec<BodyFit>,
    pub kernel: JointKernel,
    pub search: SearchResult,
    /// Per body, in the study's order.
    pub evidence: Vec<BodyEvidence>,
    pub leave_one_out: Option<LeaveOneOut>,
    pub verdict: Verdict,
    /// What outliers were judged against (each body's are in its
    /// [`BodyFit::set_aside`]).
    pub judged_against: OutlierJudge,
    /// A detection's best solution refined on the full model.
    pub refined: Option<JointRefinement>,
    /// The joint kernel recentred on the refined solution (strong regime).
    pub centred: Option<JointRecentred>,
    /// The basins the posterior starts from, drops against the null model:
    /// the search's, or those found on the recentred kernel.
    pub basins: Vec<Scored>,
    /// Rounds of refine-and-recentre run.
    pub rounds: usize,
    /// What the refinement stage warns of (a failed refinement).
    pub refinement_warnings: Vec<String>,
}

/// The joint kernel recentred on a refined solution: each body's kernel
/// recentred on its refitted orbit and the shared perturber (see
/// [`crate::perturber::refine::Recentred`]); the offsets add over bodies.
pub type JointRecentred = crate::perturber::refine::Recentred<JointKernel>;

impl JointDetection {
    /// The kernel the posterior samples (recentred in the strong regime)
    /// and the offset that puts its drops against the null model.
    pub fn posterior_kernel(&self) -> (&JointKernel, f64) {
        match &self.centred {
            Some(c) => (&c.kernel, c.delta_chi2_offset),
            None => (&self.kernel, 0.0),
        }
    }

    pub fn best_delta_chi2(&self) -> f64 {
        self.search.grid_best_delta_chi2
    }

    pub fn false_alarm_probability(&self) -> f64 {
        self.search.false_alarm_probability()
    }

    /// The verdict in one sentence, with the bodies that carry it.
    pub fn verdict_text(&self) -> String {
        let (best, fap) = (self.best_delta_chi2(), self.false_alarm_probability());
        let n = self.bodies.len();
        let mut text = match self.verdict {
            Verdict::Detected | Verdict::AnnualSystematic => format!(
                "detected jointly: one perturber lowers the chi-square of the {n} bodies together by {best:.1}, which {} of {} simulated noise-only data sets reached (false-alarm probability {fap:.2e})",
                self.search.null_maxima.iter().filter(|&&m| m >= best).count(),
                self.search.null_maxima.len()
            ),
            Verdict::Marginal => format!(
                "suspicious: one perturber lowers the chi-square of the {n} bodies together by {best:.1} (false-alarm probability {fap:.3}); not enough for a detection"
            ),
            Verdict::NotDetected => format!(
                "not detected: the best perturber lowers the chi-square of the {n} bodies together by {best:.1}, as noise alone often does (false-alarm probability {fap:.2})"
            ),
        };
        let alone: Vec<&BodyEvidence> = self.evidence.iter().filter(|e| e.alone.is_some()).collect();
        if self.verdict.detected() && alone.len() == n {
            let single = alone
                .iter()
                .filter(|e| e.alone.is_some_and(|a| a.false_alarm_probability < self.settings.search.fap_level));
            let names: Vec<&str> = single.map(|e| e.name.as_str()).collect();
            if names.is_empty() {
                text.push_str("; no body alone reaches the detection threshold");
            } else {
                text.push_str(&format!("; alone, {} of {n} bodies reach it ({})", names.len(), names.join(", ")));
            }
        }
        if let Some(l) = &self.leave_one_out
            && self.verdict.detected()
        {
            let name = &self.bodies[l.body].name;
            if l.false_alarm_probability < self.settings.search.fap_level {
                text.push_str(&format!(
                    "; without {name}, which carries most of it, the detection stands (false-alarm probability {:.2e})",
                    l.false_alarm_probability
                ));
            } else {
                text.push_str(&format!(
                    "; without {name}, which carries most of it, it falls to a false-alarm probability of {:.2}: the detection rests on that body",
                    l.false_alarm_probability
                ));
            }
        }
        text
    }

    /// The warnings of the bodies' reference fits and the observations
    /// set aside, each named by body.
    pub fn warnings(&self) -> Vec<String> {
        let mut out: Vec<String> =
            self.bodies.iter().flat_map(|b| b.null.warnings.iter().map(move |w| format!("{}: {w}", b.name))).collect();
        out.extend(self.refinement_warnings.iter().cloned());
        for b in self.bodies.iter().filter(|b| !b.set_aside.is_empty()) {
            out.push(format!(
                "{}: {} observation(s) set aside beyond {} sigma against {}: {}",
                b.name,
                b.set_aside.len(),
                self.settings.reject_sigma.unwrap_or(f64::NAN),
                self.judged_against.describe(),
                b.set_aside.join(", ")
            ));
        }
        out
    }
}

/// The common reference epoch of a joint study: the whole TDB day nearest
/// the middle of all the arcs together.
pub fn joint_epoch(study: &Study) -> f64 {
    let times = study.bodies.iter().flat_map(|b| b.observations.iter().map(|o| o.t_tdb_days));
    let (lo, hi) = times.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), t| (a.min(t), b.max(t)));
    (0.5 * (lo + hi)).round()
}

/// Each body's null fit and kernel at the common epoch, in parallel over
/// bodies. Nothing is set aside in these fits (as in the one-body
/// detection: a perturber's signal would be set aside with the outliers).
pub fn fit_bodies(study: &Study, observer: &dyn Observer) -> Result<(f64, Vec<BodyFit>, JointKernel), PipelineError> {
    if study.bodies.is_empty() {
        return Err(PipelineError::Input("the study has no tracked body".into()));
    }
    let epoch = joint_epoch(study);
    let all = study.bodies.iter().map(|b| b.observations.clone()).collect();
    let (bodies, kernel) = fit_observations(study, epoch, all, observer)?;
    Ok((epoch, bodies, kernel))
}

/// The bodies' null fits and kernels at `epoch` on the given observations
/// (one list per body of the study, in its order).
fn fit_observations(
    study: &Study,
    epoch: f64,
    observations: Vec<Vec<Observation>>,
    observer: &dyn Observer,
) -> Result<(Vec<BodyFit>, JointKernel), PipelineError> {
    let settings = ReferenceSettings {
        epoch_tdb_days: Some(epoch),
        reject_chi2: f64::INFINITY,
        readmit_chi2: f64::INFINITY,
        max_rounds: 10,
    };
    observer.note(&format!("Fitting the reference orbits (no perturber) of {} bodies...", study.bodies.len()));
    let ephemeris = study.ephemeris.as_ref();
    let fitted: Vec<Result<(BodyFit, LinearKernel), PipelineError>> = study
        .bodies
        .par_iter()
        .zip(observations)
        .map(|(arc, observations)| {
            let failed = |stage: &'static str| {
                let name = arc.name.clone();
                move |e: Box<dyn std::error::Error + Send + Sync>| PipelineError::failure(stage, format!("{name}: {e}"))
            };
            let null = fit_reference_orbit(&observations, &arc.sites, &arc.model, ephemeris, &settings, None)
                .map_err(|e| failed("reference fit")(e.into()))?;
            let geometry = observing_geometry(&observations, &arc.sites, ephemeris)
                .map_err(|e| failed("observing geometry")(e.into()))?;
            let kernel = LinearKernel::build(&null, &observations, geometry.clone(), &arc.model, ephemeris)
                .map_err(|e| failed("linear kernel")(e.into()))?;
            let name = arc.name.clone();
            Ok((BodyFit { name, observations, set_aside: Vec::new(), null, geometry }, kernel))
        })
        .collect();
    let mut bodies = Vec::with_capacity(fitted.len());
    let mut kernels = Vec::with_capacity(fitted.len());
    for f in fitted {
        let (b, k) = f?;
        bodies.push(b);
        kernels.push(k);
    }
    let kernel = JointKernel::new(kernels).map_err(|e| PipelineError::failure("joint kernel", e))?;
    Ok((bodies, kernel))
}

/// Each body's observations' chi-square (both coordinates) against the best
/// model: with `best`, its projected signal taken off each body's whitened
/// residuals (the residuals of each orbit refitted, to first order, with
/// the perturber), else the null residuals.
fn chi2_per_observation(kernel: &JointKernel, best: Option<&Scored>) -> Vec<Vec<f64>> {
    let signal = best.and_then(|b| {
        kernel.projected_signal(b.hypothesis.position_au, b.hypothesis.velocity_au_per_day, b.gm_au3_per_day2)
    });
    kernel
        .bodies()
        .iter()
        .enumerate()
        .map(|(b, k)| {
            let s = signal.as_ref().map(|s| &s[kernel.part(b)]);
            let r = |i: usize| k.residuals[i] - s.map_or(0.0, |s| s[i]);
            (0..k.used.len()).map(|j| if k.used[j] { r(2 * j).powi(2) + r(2 * j + 1).powi(2) } else { 0.0 }).collect()
        })
        .collect()
}

/// Each body's observations' chi-square (both coordinates) against the
/// refined full model: every body integrated from its refitted orbit with
/// the refined perturber, in parallel over bodies.
fn chi2_against_refined(
    study: &Study,
    bodies: &[BodyFit],
    refined: &JointRefinement,
) -> Result<Vec<Vec<f64>>, PipelineError> {
    let ephemeris = study.ephemeris.as_ref();
    bodies
        .par_iter()
        .zip(&study.bodies)
        .zip(&refined.tracked_states)
        .map(|((b, arc), state)| {
            let failed = |e: crate::dynamics::PropagationError| {
                PipelineError::failure("outlier check", format!("{}: {e}", b.name))
            };
            let mut m = crate::reference::OrbitModel::new(
                &b.observations,
                b.geometry.clone(),
                b.null.epoch_tdb_days,
                &arc.model,
                ephemeris,
            )
            .map_err(failed)?;
            m.perturbers = vec![refined.perturber];
            let pred = m.predict_settled(state).map_err(failed)?;
            let n = b.observations.len();
            let mut w = vec![0.0; 2 * n];
            crate::reference::whitened_residuals(&b.observations, &pred, &vec![true; n], &mut w);
            Ok(w.chunks(2).map(|p| p[0] * p[0] + p[1] * p[1]).collect())
        })
        .collect()
}

/// What the refinement stage gives.
struct Refined {
    refined: Option<JointRefinement>,
    centred: Option<JointRecentred>,
    basins: Vec<Scored>,
    rounds: usize,
    warnings: Vec<String>,
}

/// A detection's best solution refined on the full model of every body
/// and, in the strong regime, the kernels recentred on it and searched
/// again (see the module's description). Nothing is refined without a
/// detection.
fn refine_stage(
    study: &Study,
    bodies: &[BodyFit],
    kernel: &JointKernel,
    search: &SearchResult,
    detected: bool,
    settings: &SearchSettings,
    observer: &dyn Observer,
) -> Result<Refined, PipelineError> {
    use crate::perturber::refine::recentre;
    let mut out =
        Refined { refined: None, centred: None, basins: search.basins.clone(), rounds: 0, warnings: Vec::new() };
    let Some(best) = search.best().copied().filter(|b| detected && b.gm_au3_per_day2 > 0.0) else {
        return Ok(out);
    };
    let ephemeris = study.ephemeris.as_ref();
    let parts: Vec<JointPart> = bodies
        .iter()
        .zip(&study.bodies)
        .map(|(b, arc)| JointPart {
            name: &b.name,
            null: &b.null,
            observations: &b.observations,
            geometry: &b.geometry,
            model: &arc.model,
        })
        .collect();
    let refine_from = |s: &Scored| {
        let start = crate::dynamics::Perturber {
            gm_au3_per_day2: s.gm_au3_per_day2,
            position_au: s.hypothesis.position_au,
            velocity_au_per_day: s.hypothesis.velocity_au_per_day,
        };
        refine_joint(&parts, ephemeris, start, settings)
    };
    observer.note("Refining the best solution on the full nonlinear model of every body...");
    let current = match refine_from(&best) {
        Ok(r) => r,
        Err(e) => {
            out.warnings.push(format!("the joint nonlinear refinement failed ({e}); the grid solution stands"));
            return Ok(out);
        }
    };
    // The strong regime, as in the one-body stage: the linear kernel's
    // error at the best solution, each body's error share f_b squared times
    // its part of the drop, adds up to more than 1 in chi-square.
    let gm_max = settings.mass_earth.1 * crate::units::GM_EARTH_MASS_AU3_PER_DAY2;
    let strong = best.delta_chi2 > STRONG_DELTA_CHI2 && {
        let mut s = vec![0.0; SignalKernel::n_residuals(kernel)];
        let drops = match crate::perturber::search::score(kernel, &best.hypothesis, gm_max, 0.0, &mut s) {
            Some(scored) => kernel.drops_by_body(&s, scored.gm_au3_per_day2),
            None => vec![0.0; bodies.len()],
        };
        let errors: Vec<Result<f64, PipelineError>> = (0..bodies.len())
            .into_par_iter()
            .map(|b| {
                if drops[b] <= 0.0 {
                    return Ok(0.0);
                }
                let (_, f) = super::detection::linearisation_error(
                    &best,
                    &bodies[b].null,
                    &kernel.bodies()[b],
                    &bodies[b].observations,
                    &bodies[b].geometry,
                    &study.bodies[b].model,
                    ephemeris,
                )?;
                Ok(f * f * drops[b])
            })
            .collect();
        let mut total = 0.0;
        for e in errors {
            total += e?;
        }
        total > 1.0
    };
    if !strong {
        out.refined = Some(current);
        return Ok(out);
    }
    let null_chi2: f64 = bodies.iter().map(|b| b.null.chi2).sum();
    let followed = follow_nonlinear(
        current,
        null_chi2,
        settings,
        observer,
        "every body's kernel",
        |c: &JointRefinement| {
            let recentred: Vec<Result<crate::perturber::refine::Recentred, PipelineError>> = (0..bodies.len())
                .into_par_iter()
                .map(|b| {
                    recentre(
                        &kernel.bodies()[b],
                        bodies[b].null.epoch_tdb_days,
                        &c.tracked_states[b],
                        &c.perturber,
                        &bodies[b].observations,
                        &bodies[b].geometry,
                        &study.bodies[b].model,
                        ephemeris,
                    )
                    .map_err(|e| PipelineError::failure("recentring the kernel", format!("{}: {e}", bodies[b].name)))
                })
                .collect();
            let (mut kernels, mut offset, mut chi2) = (Vec::with_capacity(bodies.len()), 0.0, 0.0);
            for r in recentred {
                let r = r?;
                offset += r.delta_chi2_offset;
                chi2 += r.chi2_at_centre;
                kernels.push(r.kernel);
            }
            let joint = JointKernel::new(kernels).map_err(|e| PipelineError::failure("recentring the kernel", e))?;
            Ok(JointRecentred { kernel: joint, delta_chi2_offset: offset, chi2_at_centre: chi2 })
        },
        |s| refine_from(s).ok(),
    )?;
    out.rounds = followed.rounds;
    out.basins = followed.basins;
    out.centred = Some(followed.centred);
    out.refined = Some(followed.refined);
    Ok(out)
}

/// The verdict of a joint search.
fn verdict_of(search: &SearchResult, settings: &SearchSettings) -> Verdict {
    let fap = search.false_alarm_probability();
    if fap < settings.fap_level && search.grid_best_delta_chi2 > 0.0 {
        Verdict::Detected
    } else if fap < 0.05 {
        Verdict::Marginal
    } else {
        Verdict::NotDetected
    }
}

/// Runs joint detection on a study of one or more bodies.
pub fn detect_joint(
    study: &Study,
    settings: &JointSettings,
    observer: &dyn Observer,
) -> Result<JointDetection, PipelineError> {
    check_bodies(study)?;
    if let Some(limit) = settings.reject_sigma
        && !(limit.is_finite() && limit > 0.0)
    {
        return Err(PipelineError::Input(format!(
            "the outlier threshold must be a positive number of sigma, not {limit}"
        )));
    }
    let (epoch, mut bodies, mut kernel) = fit_bodies(study, observer)?;
    let searching = |bodies: &[BodyFit], kernel: &JointKernel| {
        let n = SignalKernel::n_residuals(kernel);
        observer.note(&format!("Searching {} bodies together ({n} residuals)...", bodies.len()));
        grid_search(kernel, &settings.search, observer)
    };
    let mut search = searching(&bodies, &kernel);
    let mut verdict = verdict_of(&search, &settings.search);
    let refining = |bodies: &[BodyFit], kernel: &JointKernel, search: &SearchResult, verdict: Verdict| {
        refine_stage(study, bodies, kernel, search, verdict.detected(), &settings.search, observer)
    };
    let mut refined = refining(&bodies, &kernel, &search, verdict)?;

    // Outliers are judged against the best model (the refined full model
    // of a detection, else its best joint solution on the kernel: in each
    // body the largest residuals may be the signal), as in the one-body
    // detection; those set aside, the bodies are fitted, searched and
    // refined again without them.
    let mut judged_against = OutlierJudge::NullModel;
    if let Some(limit) = settings.reject_sigma {
        let best = search.best().filter(|_| verdict.detected());
        let chi2 = match &refined.refined {
            Some(r) if verdict.detected() => {
                judged_against = OutlierJudge::RefinedPerturber;
                chi2_against_refined(study, &bodies, r)?
            }
            _ => {
                if best.is_some() {
                    judged_against = OutlierJudge::JointPerturber;
                }
                chi2_per_observation(&kernel, best)
            }
        };
        let keep: Vec<Vec<bool>> = chi2.iter().map(|c| c.iter().map(|&c| c <= limit * limit).collect()).collect();
        if keep.iter().flatten().any(|k| !k) {
            for (b, k) in bodies.iter().zip(&keep) {
                let kept = k.iter().filter(|&&k| k).count();
                if kept < 4 {
                    let file = b.observations.first().map_or("", |x| x.file());
                    return Err(PipelineError::Input(format!(
                        "body `{}` ({file}) keeps {kept} of {} observations within {limit} sigma of {}: too few to fit; check its observations or raise the outlier threshold",
                        b.name,
                        k.len(),
                        judged_against.describe()
                    )));
                }
            }
            let n_out = keep.iter().flatten().filter(|k| !**k).count();
            observer.note(&format!(
                "Setting aside {n_out} observation(s) beyond {limit} sigma against {}; fitting and searching again...",
                judged_against.describe()
            ));
            let split = |b: &BodyFit, k: &[bool], want: bool| -> Vec<Observation> {
                b.observations.iter().zip(k).filter(|(_, k)| **k == want).map(|(o, _)| o.clone()).collect()
            };
            let set_aside: Vec<Vec<String>> = bodies
                .iter()
                .zip(&keep)
                .map(|(b, k)| split(b, k, false).iter().map(|o| o.source.clone()).collect())
                .collect();
            let rest = bodies.iter().zip(&keep).map(|(b, k)| split(b, k, true)).collect();
            (bodies, kernel) = fit_observations(study, epoch, rest, observer)?;
            bodies.iter_mut().zip(set_aside).for_each(|(b, s)| b.set_aside = s);
            search = searching(&bodies, &kernel);
            verdict = verdict_of(&search, &settings.search);
            refined = refining(&bodies, &kernel, &search, verdict)?;
        }
    }
    let Refined { refined, centred, basins, rounds, warnings: refinement_warnings } = refined;

    // Each body's part of the best solution's drop.
    let gm_max = settings.search.mass_earth.1 * crate::units::GM_EARTH_MASS_AU3_PER_DAY2;
    let parts: Vec<f64> = match search.best() {
        Some(best) => {
            let mut s = vec![0.0; SignalKernel::n_residuals(&kernel)];
            match crate::perturber::search::score(&kernel, &best.hypothesis, gm_max, 0.0, &mut s) {
                Some(scored) => kernel.drops_by_body(&s, scored.gm_au3_per_day2),
                None => vec![0.0; bodies.len()],
            }
        }
        None => vec![0.0; bodies.len()],
    };

    // Each body alone.
    let alone: Vec<Option<AloneResult>> = if settings.each_alone && bodies.len() > 1 {
        observer.note("Searching each body alone...");
        kernel
            .bodies()
            .iter()
            .map(|k| {
                let r = grid_search(k, &settings.search, &Quiet);
                Some(AloneResult {
                    delta_chi2: r.grid_best_delta_chi2,
                    false_alarm_probability: r.false_alarm_probability(),
                })
            })
            .collect()
    } else {
        vec![None; bodies.len()]
    };

    // Without the strongest body.
    let leave_one_out = if settings.leave_one_out && bodies.len() > 1 && search.best().is_some() {
        let strongest = (0..bodies.len()).max_by(|&a, &b| parts[a].total_cmp(&parts[b])).unwrap_or(0);
        observer
            .note(&format!("Searching again without {}, which carries most of the signal...", bodies[strongest].name));
        let rest = kernel.without(strongest).expect("more than one body");
        let r = grid_search(&rest, &settings.search, &Quiet);
        Some(LeaveOneOut {
            body: strongest,
            delta_chi2: r.grid_best_delta_chi2,
            false_alarm_probability: r.false_alarm_probability(),
        })
    } else {
        None
    };

    let evidence = bodies
        .iter()
        .zip(parts.iter().zip(alone))
        .map(|(b, (&part, alone))| BodyEvidence {
            name: b.name.clone(),
            n_observations: b.observations.len(),
            delta_chi2_at_best: part,
            alone,
        })
        .collect();
    Ok(JointDetection {
        settings: settings.clone(),
        epoch_tdb_days: epoch,
        bodies,
        kernel,
        search,
        evidence,
        leave_one_out,
        verdict,
        judged_against,
        refined,
        centred,
        basins,
        rounds,
        refinement_warnings,
    })
}

/// The bodies of a joint study must be told apart and each must be fittable.
fn check_bodies(study: &Study) -> Result<(), PipelineError> {
    let mut seen = std::collections::HashSet::new();
    for b in &study.bodies {
        if !seen.insert(b.name.as_str()) {
            let files: Vec<&str> = study
                .bodies
                .iter()
                .filter(|o| o.name == b.name)
                .filter_map(|o| o.observations.first().map(|x| x.file()))
                .collect();
            return Err(PipelineError::Input(format!(
                "two bodies are both named `{}` ({}): each body needs its own name",
                b.name,
                files.join(" and ")
            )));
        }
        // 6 orbit parameters need more than 3 two-coordinate observations to
        // leave any freedom for a perturber's signal.
        if b.observations.len() < 4 {
            let file = b.observations.first().map_or("", |x| x.file());
            return Err(PipelineError::Input(format!(
                "body `{}` ({file}) has {} observation(s); a joint study needs at least 4 per body",
                b.name,
                b.observations.len()
            )));
        }
    }
    Ok(())
}
