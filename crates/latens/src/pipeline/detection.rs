//! Detection: is there more in the residuals than noise? The reference fit
//! without a perturber, the linear kernel, the grid search with its null
//! simulations, the refinement on the full model, the kernel recentred on
//! the refined solution in the strong regime, outliers judged against the
//! best model (and the search run again without them), the check for a
//! one-year systematic, and the verdict.

use super::{PipelineError, Study};
use crate::astrometry::ObservingGeometry;
use crate::dynamics::{ForceModel, Perturber};
use crate::ephemeris::Ephemeris;
use crate::io::observations::{Observation, SiteTable};
use crate::perturber::refine::{Recentred, Refinement};
use crate::perturber::{LinearKernel, Scored, SearchResult, SearchSettings, SignalKernel, grid_search};
use crate::progress::Observer;
use crate::reference::{OrbitModel, ReferenceFit, ReferenceSettings, fit_reference_orbit, observing_geometry, whiten};

/// False-alarm probability below which a perturber counts as detected: the
/// two-sided 3-sigma Gaussian tail (common practice).
pub const DETECTION_FAP: f64 = 0.0027;

/// The null fit of detection sets nothing aside: a perturber's signal makes
/// residuals of many sigma over whole seasons, and any threshold against
/// the null model sets aside the very observations that carry it (measured:
/// 68 of 520 demo observations at 5 sigma, which moved the posterior 20 deg
/// from the truth; 107 of 728 at 10 sigma on a 90-year planetary arc).
/// Outliers are judged afterwards against the best model, the perturber
/// included, and the search runs again without them.
const INFER_REFERENCE_SETTINGS: ReferenceSettings =
    ReferenceSettings { epoch_tdb_days: None, reject_chi2: f64::INFINITY, readmit_chi2: f64::INFINITY, max_rounds: 10 };

/// How detection runs.
#[derive(Clone, Debug)]
pub struct DetectionSettings {
    /// The grid, the priors' ranges, the null simulations and the seed.
    pub search: SearchSettings,
    /// Observations beyond this many sigma against the best model are set
    /// aside and the search runs again; `None` sets nothing aside.
    pub reject_sigma: Option<f64>,
    /// A starting orbit for the reference fit, instead of Gauss's method:
    /// (epoch, TDB days after J2000; heliocentric ICRF state, au and au/day).
    pub start_orbit: Option<(f64, [f64; 6])>,
}

/// The model outliers were judged against.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum OutlierJudge {
    /// No perturber (nothing was detected, or the refinement failed).
    NullModel,
    /// The full model with the refined perturber.
    RefinedPerturber,
    /// A joint study's best grid solution through the linear kernel (each
    /// body's orbit refitted to first order, the perturber's signal taken
    /// off).
    JointPerturber,
}

impl OutlierJudge {
    pub fn describe(self) -> &'static str {
        match self {
            OutlierJudge::NullModel => "the null model (no perturber)",
            OutlierJudge::RefinedPerturber => "the full model with the refined perturber",
            OutlierJudge::JointPerturber => "the best joint solution (the grid's perturber, each orbit refitted)",
        }
    }
}

/// What was set aside, and against which model.
#[derive(Clone, Debug)]
pub struct OutlierReport {
    pub threshold_sigma: Option<f64>,
    pub judged_against: OutlierJudge,
    /// The sources (file and line) of the observations set aside.
    pub set_aside: Vec<String>,
}

/// The one-year systematic check: the share of the residuals' excess
/// chi-square that a constant plus a one-year sinusoid in each coordinate
/// removes, and the chi-square it removes.
#[derive(Clone, Copy, Debug)]
pub struct AnnualCheck {
    pub share: f64,
    pub chi2: f64,
}

impl AnnualCheck {
    /// Whether the sinusoid is both large and significant.
    pub fn flagged(&self) -> bool {
        self.share > ANNUAL_SUSPICION && self.chi2 > ANNUAL_MIN_CHI2
    }
}

/// The verdict of detection.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Verdict {
    /// The drop beats the noise at the detection threshold.
    Detected,
    /// It beats the noise, but a one-year sinusoid carries most of the
    /// excess: a systematic error tied to the Earth's motion is suspected.
    AnnualSystematic,
    /// False-alarm probability below 5% but above the detection threshold.
    Marginal,
    /// As noise alone often does.
    NotDetected,
}

impl Verdict {
    /// Whether a perturber counts as detected (with or without the annual
    /// suspicion): the condition for a search region.
    pub fn detected(self) -> bool {
        matches!(self, Verdict::Detected | Verdict::AnnualSystematic)
    }
}

/// Everything detection found.
pub struct Detection {
    /// The settings it ran with.
    pub settings: DetectionSettings,
    /// The observations the final search used (those set aside removed).
    pub observations: Vec<Observation>,
    pub null: ReferenceFit,
    pub geometry: Vec<ObservingGeometry>,
    /// The kernel about the null orbit (detection, alternatives).
    pub kernel: LinearKernel,
    pub search: SearchResult,
    /// The best solution refined on the full model.
    pub refined: Option<Refinement>,
    /// The kernel recentred on the refined solution (strong regime).
    pub centred: Option<Recentred>,
    /// The basins the posterior starts from, drops against the null model.
    pub basins: Vec<Scored>,
    /// Rounds of refine-and-recentre run.
    pub rounds: usize,
    pub outliers: OutlierReport,
    pub annual: AnnualCheck,
    pub verdict: Verdict,
}

impl Detection {
    /// The detection statistic: the grid's best drop (the null maxima are
    /// grid maxima; the basins carry their continuously refined drops).
    pub fn best_delta_chi2(&self) -> f64 {
        self.search.grid_best_delta_chi2
    }

    pub fn false_alarm_probability(&self) -> f64 {
        self.search.false_alarm_probability()
    }

    /// The kernel the posterior runs on: the recentred one in the strong
    /// regime, else the null kernel; and the offset that turns its drops
    /// into drops against the null model.
    pub fn posterior_kernel(&self) -> (&LinearKernel, f64) {
        self.centred.as_ref().map_or((&self.kernel, 0.0), |c| (&c.kernel, c.delta_chi2_offset))
    }

    /// The verdict in one sentence.
    pub fn verdict_text(&self) -> String {
        let (best_delta, fap) = (self.best_delta_chi2(), self.false_alarm_probability());
        match self.verdict {
            Verdict::AnnualSystematic => format!(
                "suspicious: a perturber lowers the chi-square by {best_delta:.1} (false-alarm probability {fap:.2e}), but a one-year sinusoid accounts for {:.0}% of the residuals' excess, which points at a systematic error in the astrometry rather than a planet",
                100.0 * self.annual.share
            ),
            Verdict::Detected => format!(
                "detected: the best perturber lowers the chi-square by {best_delta:.1}, which {} of {} simulated noise-only data sets reached (false-alarm probability {fap:.2e})",
                self.search.null_maxima.iter().filter(|&&m| m >= best_delta).count(),
                self.search.null_maxima.len()
            ),
            Verdict::Marginal => format!(
                "suspicious: a perturber lowers the chi-square by {best_delta:.1} (false-alarm probability {fap:.3}); not enough for a detection"
            ),
            Verdict::NotDetected => format!(
                "not detected: the best perturber lowers the chi-square by {best_delta:.1}, as noise alone often does (false-alarm probability {fap:.2})"
            ),
        }
    }

    /// The warnings detection raises: the reference fit's, what was set
    /// aside, and the one-year systematic.
    pub fn warnings(&self) -> Vec<String> {
        let mut w = self.null.warnings.clone();
        if !self.outliers.set_aside.is_empty() {
            w.push(format!(
                "{} observation(s) set aside beyond {} sigma against {}: {}",
                self.outliers.set_aside.len(),
                self.outliers.threshold_sigma.unwrap_or(f64::NAN),
                self.outliers.judged_against.describe(),
                self.outliers.set_aside.join(", ")
            ));
        }
        if self.annual.flagged() {
            w.push(format!(
                "a one-year sinusoid accounts for {:.0}% of the residuals' excess: check the astrometry for systematic errors before believing in a planet",
                100.0 * self.annual.share
            ));
        }
        w
    }
}

/// Runs detection on a one-body study.
pub fn detect(
    study: &Study,
    settings: &DetectionSettings,
    observer: &dyn Observer,
) -> Result<Detection, PipelineError> {
    let arc = study.single()?;
    let (model, ephemeris) = (&arc.model, study.ephemeris.as_ref());
    let search_settings = &settings.search;
    let start = settings.start_orbit;
    let mut stage = search(arc.observations.clone(), &arc.sites, model, ephemeris, search_settings, start, observer)?;
    // Outliers are judged against the best model: with the perturber when
    // one is detected (in the strong regime the largest residuals are the
    // signal), else against the null model. Those set aside, the whole
    // search runs again without them.
    let judged_against = if stage.detected() && stage.refined.is_some() {
        OutlierJudge::RefinedPerturber
    } else {
        OutlierJudge::NullModel
    };
    let mut set_aside = Vec::new();
    if let Some(limit) = settings.reject_sigma {
        let chi2 = stage.chi2_per_observation(model, ephemeris)?;
        let keep: Vec<bool> = chi2.iter().map(|&c| c <= limit * limit).collect();
        if keep.iter().any(|k| !k) {
            set_aside =
                stage.observations.iter().zip(&keep).filter(|(_, k)| !**k).map(|(o, _)| o.source.clone()).collect();
            observer.note(&format!(
                "Setting aside {} observation(s) beyond {limit} sigma against {}; searching again...",
                set_aside.len(),
                judged_against.describe()
            ));
            let rest: Vec<Observation> =
                stage.observations.iter().zip(&keep).filter(|(_, k)| **k).map(|(o, _)| o.clone()).collect();
            stage = search(rest, &arc.sites, model, ephemeris, search_settings, start, observer)?;
        }
    }
    let Searched { observations, null, geometry, kernel, result, refined, centred, basins, rounds, .. } = stage;
    let best_delta = result.grid_best_delta_chi2;
    let fap = result.false_alarm_probability();
    // A signal that repeats with the year points at a systematic error tied
    // to the Earth's motion (a catalogue or reduction error), not at a
    // planet, whose pull changes slowly.
    let (share, chi2) = annual_share(&null, &observations, best_delta);
    let annual = AnnualCheck { share, chi2 };
    let detected = fap < search_settings.fap_level && best_delta > 0.0;
    let verdict = match (detected, annual.flagged()) {
        (true, true) => Verdict::AnnualSystematic,
        (true, false) => Verdict::Detected,
        (false, _) if fap < 0.05 => Verdict::Marginal,
        (false, _) => Verdict::NotDetected,
    };
    Ok(Detection {
        settings: settings.clone(),
        observations,
        null,
        geometry,
        kernel,
        search: result,
        refined,
        centred,
        basins,
        rounds,
        outliers: OutlierReport { threshold_sigma: settings.reject_sigma, judged_against, set_aside },
        annual,
        verdict,
    })
}

/// The RMS difference (arcsec, and as a share of the signal RMS) between the
/// kernel's signal and the full nonlinear model's, for one solution.
pub fn linearisation_error(
    s: &Scored,
    null: &ReferenceFit,
    kernel: &LinearKernel,
    observations: &[Observation],
    geometry: &[ObservingGeometry],
    model: &crate::dynamics::ForceModel,
    ephemeris: &dyn Ephemeris,
) -> Result<(f64, f64), PipelineError> {
    let n = observations.len();
    let mut base = OrbitModel::new(observations, geometry.to_vec(), null.epoch_tdb_days, model, ephemeris)
        .map_err(PipelineError::failed("linearisation check"))?;
    let p0 = base.predict_settled(&null.state).map_err(PipelineError::failed("linearisation check"))?;
    let mut with = OrbitModel::new(observations, geometry.to_vec(), null.epoch_tdb_days, model, ephemeris)
        .map_err(PipelineError::failed("linearisation check"))?;
    with.perturbers = vec![Perturber {
        gm_au3_per_day2: s.gm_au3_per_day2,
        position_au: s.hypothesis.position_au,
        velocity_au_per_day: s.hypothesis.velocity_au_per_day,
    }];
    let p1 = with.predict_settled(&null.state).map_err(PipelineError::failed("linearisation check"))?;
    let mut nonlinear = vec![0.0; 2 * n];
    for k in 0..n {
        let w = whiten(&observations[k], crate::reference::residual_arcsec_between(&p1[k].radec, &p0[k].radec));
        nonlinear[2 * k] = w.0;
        nonlinear[2 * k + 1] = w.1;
    }
    let linear = kernel
        .projected_signal(s.hypothesis.position_au, s.hypothesis.velocity_au_per_day, s.gm_au3_per_day2)
        .ok_or_else(|| PipelineError::failure("linearisation check", "unbound orbit"))?;
    kernel.project(&mut nonlinear);
    let (mut diff2, mut sig2, mut count) = (0.0, 0.0, 0usize);
    for k in 0..n {
        if !kernel.used[k] {
            continue;
        }
        // Back to arcsec with the observation's sigmas (correlations ignored).
        let (sa, sd) = (observations[k].sigma_ra_arcsec, observations[k].sigma_dec_arcsec);
        diff2 += ((linear[2 * k] - nonlinear[2 * k]) * sa).powi(2)
            + ((linear[2 * k + 1] - nonlinear[2 * k + 1]) * sd).powi(2);
        sig2 += (nonlinear[2 * k] * sa).powi(2) + (nonlinear[2 * k + 1] * sd).powi(2);
        count += 2;
    }
    let rms = (diff2 / count.max(1) as f64).sqrt();
    let frac = if sig2 > 0.0 { (diff2 / sig2).sqrt() } else { 0.0 };
    Ok((rms, frac))
}

/// Share of the residuals' excess chi-square that a one-year sinusoid
/// explains, above which a detection is called suspicious.
const ANNUAL_SUSPICION: f64 = 0.5;
/// ... provided the sinusoid's own chi-square drop (4 parameters: sine and
/// cosine in two coordinates) is significant: 20 is its 5e-4 tail
/// (scipy.stats.chi2.sf(20, 4) = 4.99e-4).
const ANNUAL_MIN_CHI2: f64 = 20.0;

/// The share of the null residuals' excess chi-square (over its degrees of
/// freedom, or over the best solution's drop if larger) that a constant plus
/// a one-year sinusoid in each coordinate removes.
fn annual_share(null: &ReferenceFit, observations: &[Observation], best_delta: f64) -> (f64, f64) {
    let mut removed = 0.0;
    for coordinate in 0..2 {
        // Weighted least squares of r = a + b sin(wt) + c cos(wt).
        let mut ata = [[0.0; 3]; 3];
        let mut atb = [0.0; 3];
        for (k, o) in observations.iter().enumerate() {
            if !null.residuals[k].used {
                continue;
            }
            let (r, sigma) = if coordinate == 0 {
                (null.residuals[k].ra_arcsec, o.sigma_ra_arcsec)
            } else {
                (null.residuals[k].dec_arcsec, o.sigma_dec_arcsec)
            };
            let w = std::f64::consts::TAU * o.t_tdb_days / crate::units::JULIAN_YEAR_DAYS;
            let x = [1.0 / sigma, w.sin() / sigma, w.cos() / sigma];
            for i in 0..3 {
                atb[i] += x[i] * r / sigma;
                for j in 0..3 {
                    ata[i][j] += x[i] * x[j];
                }
            }
        }
        // The chi-square removed by the fit is b^T (A^T A)^-1 b; less the
        // constant's share, which is not periodic.
        let Some(coef) = solve3(ata, atb) else { continue };
        let all: f64 = (0..3).map(|i| coef[i] * atb[i]).sum();
        let constant = if ata[0][0] > 0.0 { atb[0] * atb[0] / ata[0][0] } else { 0.0 };
        removed += (all - constant).max(0.0);
    }
    let excess = (null.chi2 - null.dof as f64).max(best_delta).max(1e-9);
    (removed / excess, removed)
}

/// Solves a 3x3 linear system by Cramer's rule (None when singular).
fn solve3(a: [[f64; 3]; 3], b: [f64; 3]) -> Option<[f64; 3]> {
    let det = |m: [[f64; 3]; 3]| {
        m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1]) - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
            + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0])
    };
    let d = det(a);
    if d.abs() < 1e-300 {
        return None;
    }
    let mut out = [0.0; 3];
    for (col, o) in out.iter_mut().enumerate() {
        let mut m = a;
        for row in 0..3 {
            m[row][col] = b[row];
        }
        *o = det(m) / d;
    }
    Some(out)
}

/// Chi-square drop above which a detection counts as strong enough to
/// recentre the kernel on its refined solution.
pub(super) const STRONG_DELTA_CHI2: f64 = 500.0;

/// Rounds of refine-and-recentre at most.
pub(super) const MAX_RECENTRE_ROUNDS: usize = 3;

/// The search on one set of observations: the null fit, the kernel, the
/// grid, the refinement on the full model and, for a detection, the kernel
/// recentred on the refined solution with the basins found on it.
struct Searched {
    observations: Vec<Observation>,
    null: ReferenceFit,
    geometry: Vec<ObservingGeometry>,
    /// The kernel about the null orbit (detection, alternatives).
    kernel: LinearKernel,
    result: crate::perturber::SearchResult,
    refined: Option<crate::perturber::refine::Refinement>,
    centred: Option<crate::perturber::refine::Recentred>,
    /// The basins the posterior starts from, drops against the null model.
    basins: Vec<Scored>,
    rounds: usize,
    /// The false-alarm level of a detection (the settings').
    fap_level: f64,
}

impl Searched {
    fn detected(&self) -> bool {
        self.result.false_alarm_probability() < self.fap_level && self.result.grid_best_delta_chi2 > 0.0
    }

    /// Each observation's chi-square (both coordinates) against the best
    /// model: the refined perturber's full model for a detection, else the
    /// null model.
    fn chi2_per_observation(&self, model: &ForceModel, ephemeris: &dyn Ephemeris) -> Result<Vec<f64>, PipelineError> {
        let n = self.observations.len();
        let mut w = vec![0.0; 2 * n];
        match (&self.refined, self.detected()) {
            (Some(r), true) => {
                let mut m = OrbitModel::new(
                    &self.observations,
                    self.geometry.clone(),
                    self.null.epoch_tdb_days,
                    model,
                    ephemeris,
                )
                .map_err(PipelineError::failed("outlier check"))?;
                m.perturbers = vec![r.perturber];
                let pred = m.predict_settled(&r.tracked_state).map_err(PipelineError::failed("outlier check"))?;
                crate::reference::whitened_residuals(&self.observations, &pred, &vec![true; n], &mut w);
            }
            _ => {
                for (k, (o, r)) in self.observations.iter().zip(&self.null.residuals).enumerate() {
                    (w[2 * k], w[2 * k + 1]) = whiten(o, (r.ra_arcsec, r.dec_arcsec));
                }
            }
        }
        Ok(w.chunks(2).map(|p| p[0] * p[0] + p[1] * p[1]).collect())
    }
}

fn search(
    observations: Vec<Observation>,
    sites: &SiteTable,
    model: &ForceModel,
    ephemeris: &dyn Ephemeris,
    settings: &SearchSettings,
    start: Option<(f64, [f64; 6])>,
    observer: &dyn Observer,
) -> Result<Searched, PipelineError> {
    use crate::perturber::refine::{recentre, refine};
    observer.note(&format!("Fitting the reference orbit (no perturber) to {} observations...", observations.len()));
    let start = match start {
        Some((t, state)) => Some(
            crate::reference::carried_start(model, t, state, crate::reference::default_epoch(&observations))
                .map_err(PipelineError::failed("reference fit"))?,
        ),
        None => None,
    };
    let null = fit_reference_orbit(&observations, sites, model, ephemeris, &INFER_REFERENCE_SETTINGS, start)
        .map_err(PipelineError::failed("reference fit"))?;
    let geometry =
        observing_geometry(&observations, sites, ephemeris).map_err(PipelineError::failed("observing geometry"))?;
    let kernel = LinearKernel::build(&null, &observations, geometry.clone(), model, ephemeris)
        .map_err(PipelineError::failed("linear kernel"))?;
    let result = grid_search(&kernel, settings, observer);
    let mut stage = Searched {
        observations,
        null,
        geometry,
        kernel,
        basins: result.basins.clone(),
        result,
        refined: None,
        centred: None,
        rounds: 0,
        fap_level: settings.fap_level,
    };
    let Some(best) = stage.result.best().copied().filter(|b| b.gm_au3_per_day2 > 0.0) else {
        return Ok(stage);
    };
    let refine_from = |s: &Scored, stage: &Searched| {
        let start = Perturber {
            gm_au3_per_day2: s.gm_au3_per_day2,
            position_au: s.hypothesis.position_au,
            velocity_au_per_day: s.hypothesis.velocity_au_per_day,
        };
        refine(&stage.null, &stage.observations, &stage.geometry, model, ephemeris, start, settings)
    };
    observer.note("Refining the best solution on the full nonlinear model...");
    let current = match refine_from(&best, &stage) {
        Ok(r) => r,
        Err(e) => {
            stage.null.warnings.push(format!("the nonlinear refinement failed ({e}); the grid solution stands"));
            return Ok(stage);
        }
    };
    // Recentre only in the strong regime, where the linear kernel's error
    // at the best solution changes the chi-square by more than 1
    // (error share f: about f^2 times the drop) and the drop is large
    // enough (above STRONG_DELTA_CHI2) for a refined solution to be
    // trusted as the centre; weak detections keep the null kernel and its
    // broad posterior.
    let strong = stage.detected() && best.delta_chi2 > STRONG_DELTA_CHI2 && {
        let (_, f) = linearisation_error(
            &best,
            &stage.null,
            &stage.kernel,
            &stage.observations,
            &stage.geometry,
            model,
            ephemeris,
        )?;
        f * f * best.delta_chi2 > 1.0
    };
    if !strong {
        stage.refined = Some(current);
        return Ok(stage);
    }
    let followed = follow_nonlinear(
        current,
        stage.null.chi2,
        settings,
        observer,
        "the linear kernel",
        |c: &Refinement| {
            recentre(
                &stage.kernel,
                stage.null.epoch_tdb_days,
                &c.tracked_state,
                &c.perturber,
                &stage.observations,
                &stage.geometry,
                model,
                ephemeris,
            )
            .map_err(PipelineError::failed("recentring the kernel"))
        },
        |s| refine_from(s, &stage).ok(),
    )?;
    stage.rounds = followed.rounds;
    stage.basins = followed.basins;
    stage.centred = Some(followed.centred);
    stage.refined = Some(followed.refined);
    Ok(stage)
}

/// What the recentring loop needs of a refined solution (one body's or a
/// joint one).
pub(super) trait RefinedCentre {
    fn perturber(&self) -> &Perturber;
    /// The full model's chi-square at the solution.
    fn chi2(&self) -> f64;
}

impl RefinedCentre for Refinement {
    fn perturber(&self) -> &Perturber {
        &self.perturber
    }
    fn chi2(&self) -> f64 {
        self.chi2
    }
}

impl RefinedCentre for crate::perturber::joint_refine::JointRefinement {
    fn perturber(&self) -> &Perturber {
        &self.perturber
    }
    fn chi2(&self) -> f64 {
        self.chi2
    }
}

/// Where the strong regime's loop ended: the refined solution, the kernel
/// recentred on it, the distinct basins found on that kernel (drops against
/// the null model) and the number of rounds.
pub(super) struct Followed<R, K> {
    pub refined: R,
    pub centred: Recentred<K>,
    pub basins: Vec<Scored>,
    pub rounds: usize,
}

/// Follows the data into the nonlinear regime, for one body or a joint
/// study alike: recentres the kernel on the refined solution (`recentre`),
/// searches again on it, and refines again (`refine_from`) when another
/// place scores better there, for up to [`MAX_RECENTRE_ROUNDS`] rounds.
/// Every distinct basin of the final search is kept for the posterior.
/// `null_chi2` is the null model's chi-square (summed over the bodies).
pub(super) fn follow_nonlinear<R: RefinedCentre, K: SignalKernel>(
    mut current: R,
    null_chi2: f64,
    settings: &SearchSettings,
    observer: &dyn Observer,
    what: &str,
    recentre: impl Fn(&R) -> Result<Recentred<K>, PipelineError>,
    refine_from: impl Fn(&Scored) -> Option<R>,
) -> Result<Followed<R, K>, PipelineError> {
    let gm_max = settings.mass_earth.1 * crate::units::GM_EARTH_MASS_AU3_PER_DAY2;
    let quiet = SearchSettings { n_null: 0, ..settings.clone() };
    let mut round = 0;
    loop {
        round += 1;
        observer.note(&format!("Recentring {what} on the refined solution (round {round}) and searching again..."));
        let centred = recentre(&current)?;
        let again = grid_search(&centred.kernel, &quiet, &crate::progress::Quiet);
        let p = current.perturber();
        let centre =
            crate::perturber::Hypothesis { position_au: p.position_au, velocity_au_per_day: p.velocity_au_per_day };
        let mut scratch = vec![0.0; SignalKernel::n_residuals(&centred.kernel)];
        let mut basins: Vec<Scored> =
            crate::perturber::search::score(&centred.kernel, &centre, gm_max, settings.min_separation_au, &mut scratch)
                .into_iter()
                .chain(again.basins.iter().copied())
                .map(|s| Scored { delta_chi2: s.delta_chi2 + centred.delta_chi2_offset, ..s })
                .collect();
        basins.sort_by(|a, b| b.delta_chi2.total_cmp(&a.delta_chi2));
        let centre_delta = null_chi2 - current.chi2();
        // A better place elsewhere on the recentred kernel: refine it.
        let challenger = basins.iter().find(|b| {
            let apart = b.hypothesis.position_au.unit().dot(centre.position_au.unit()) < 1f64.to_radians().cos()
                || (b.hypothesis.position_au.norm() / centre.position_au.norm()).ln().abs() > 0.1;
            apart && b.delta_chi2 > centre_delta + 1.0
        });
        let moved = match challenger.copied() {
            Some(c) if round < MAX_RECENTRE_ROUNDS => match refine_from(&c) {
                Some(r) if r.chi2() < current.chi2() - 0.5 => {
                    current = r;
                    true
                }
                _ => false,
            },
            _ => false,
        };
        if !moved {
            // Distinct basins within the usual window of the best, as the grid keeps them.
            let basins = crate::perturber::search::distinct(
                basins.into_iter(),
                settings.basin_separation_deg,
                2.0,
                settings.basin_delta_chi2,
                settings.max_basins,
            );
            return Ok(Followed { refined: current, centred, basins, rounds: round });
        }
    }
}
