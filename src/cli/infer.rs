//! `latens infer`: does an unseen perturber explain the residuals, and where
//! is it? (Grid search through the linear kernel, basins, false-alarm
//! probability by null simulation.)

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use anyhow::Context;

use super::CliError;
use super::args::InferArgs;
use super::residuals::{ResidualProducts, orbit_file};
use latens::astrometry::ObservingGeometry;
use latens::dynamics::TrackedBody;
use latens::dynamics::kepler::{OUTPUT_FRAME, OutputElements};
use latens::ephemeris::{Body, Ephemeris};
use latens::io::observations::Observation;
use latens::io::results::{
    DetectionFile, InferSettingsFile, InferSummary, NullModelFile, PerturberFile, SearchStatsFile,
};
use latens::io::write_atomically;
use latens::perturber::{KeplerOrbit, LinearKernel, Scored, SearchSettings, SignalKernel};
use latens::pipeline::{
    Best, Detection, DetectionSettings, EphemerisSource, PosteriorSettings, Study, TrackedArc, detect,
    linearisation_error, parse_known,
};
use latens::reference::ReferenceFit;
use latens::time::{epoch_from_tdb_days, parse_epoch, tdb_days_from_j2000, utc_iso_from_epoch};
use latens::units::{J2000_JD, RAD_PER_DEG};
use latens_charts::residual_chart::ResidualChart;

/// Everything `infer` was asked to do, typed and checked before any work.
pub(super) struct InferPlan {
    /// Whether a detection gets the profile likelihood's confidence regions.
    pub confidence_region: bool,
    /// One file per tracked body; several make a joint study.
    pub obs: Vec<PathBuf>,
    pub sites: Option<PathBuf>,
    pub known: Vec<Body>,
    pub tracked: TrackedBody,
    pub ephemeris: EphemerisSource,
    /// TDB days since J2000.0; none: the last observation.
    pub search_epoch: Option<f64>,
    /// Line numbers of the observation file left out by hand.
    pub excluded_lines: Vec<usize>,
    /// `--exclude-dates`: TDB-day ranges (inclusive), with the text given.
    pub excluded_dates: Vec<(f64, f64, String)>,
    /// `--exclude-site`: site codes.
    pub excluded_sites: Vec<String>,
    pub detection: DetectionSettings,
    pub posterior: PosteriorSettings,
    /// Where the files go (the interrupted run's directory on resume).
    pub out: PathBuf,
    /// The simulation's truth, to mark on the charts (`--truth`).
    pub truth: Option<Truth>,
}

/// The true perturber of a simulation, as charts mark it.
#[derive(Clone, Debug)]
pub(super) struct Truth {
    pub name: String,
    pub mass_earth: f64,
    /// At the truth's epoch (checked against the search epoch before use).
    pub epoch_utc: String,
    pub ra_deg: f64,
    pub dec_deg: f64,
    pub distance_au: f64,
}

impl Truth {
    /// Reads the perturber of a truth.json (`latens simulate`).
    pub fn read(path: &Path) -> Result<Truth, CliError> {
        #[derive(serde::Deserialize)]
        struct File {
            perturber: Option<Perturber>,
        }
        #[derive(serde::Deserialize)]
        struct Perturber {
            name: String,
            mass_earth: Option<f64>,
            at_search_epoch: Option<Place>,
        }
        #[derive(serde::Deserialize)]
        struct Place {
            epoch_utc: String,
            ra_deg: f64,
            dec_deg: f64,
            distance_au: f64,
        }
        let bad = |what: String| CliError::bad_input(anyhow::anyhow!("--truth {}: {what}", path.display()));
        let file: File = latens::io::results::read_json(path).map_err(bad)?;
        let p = file.perturber.ok_or_else(|| bad("the simulation has no perturber to mark".into()))?;
        let place = p.at_search_epoch.ok_or_else(|| bad("field `perturber.at_search_epoch` is missing".into()))?;
        let mass = p.mass_earth.ok_or_else(|| bad("field `perturber.mass_earth` is missing".into()))?;
        if !(mass > 0.0 && place.distance_au > 0.0 && place.ra_deg.is_finite() && place.dec_deg.is_finite()) {
            return Err(bad("the perturber's mass, distance and place must be finite and positive".into()));
        }
        Ok(Truth {
            name: p.name,
            mass_earth: mass,
            epoch_utc: place.epoch_utc,
            ra_deg: place.ra_deg,
            dec_deg: place.dec_deg,
            distance_au: place.distance_au,
        })
    }

    /// The truth if it is given at the search epoch (within a minute); a
    /// note on stderr otherwise (its place would be at another date).
    pub fn at_epoch(truth: Option<&Truth>, search_epoch_tdb_days: f64) -> Option<Truth> {
        let t = truth?;
        let at = parse_epoch(&t.epoch_utc).map(tdb_days_from_j2000).ok()?;
        if (at - search_epoch_tdb_days).abs() * 1440.0 > 1.0 {
            super::note(&format!(
                "--truth gives {}'s place at {}, not at the search epoch {}: it is not marked",
                t.name,
                t.epoch_utc,
                utc_iso_from_epoch(epoch_from_tdb_days(search_epoch_tdb_days))
            ));
            return None;
        }
        Some(t.clone())
    }
}

impl InferPlan {
    /// The plan the arguments describe; every option is checked here.
    pub fn from_args(args: &InferArgs) -> Result<InferPlan, CliError> {
        // A resumed run writes where it was interrupted; its checkpoint must
        // be there before any work starts.
        let out = args.resume.clone().unwrap_or_else(|| args.out.clone());
        if let Some(dir) = &args.resume
            && !dir.join("checkpoint.json").is_file()
        {
            return Err(CliError::bad_input(anyhow::anyhow!(
                "--resume {}: no checkpoint.json there (an interrupted `latens infer` leaves one in its output directory)",
                dir.display()
            )));
        }
        let mass = super::parse_range(&args.mass_earth, "--mass-earth")?;
        let distance = super::parse_range(&args.distance_au, "--distance-au")?;
        // The false-alarm probability cannot go below 1/(nulls + 1): enough
        // nulls are needed for it to reach the detection threshold at all.
        if !(args.fap_level > 0.0 && args.fap_level <= 0.05) {
            return Err(CliError::bad_input(anyhow::anyhow!(
                "--fap-level must lie in (0, 0.05] (0.0027 is 3 sigma), got {}",
                args.fap_level
            )));
        }
        let min_nulls = (1.0 / args.fap_level).ceil() as usize;
        if args.nulls < min_nulls {
            return Err(CliError::bad_input(anyhow::anyhow!(
                "--nulls must be at least {min_nulls} for a false-alarm probability below the detection threshold {}, got {}",
                args.fap_level,
                args.nulls
            )));
        }
        for (v, name) in [
            (args.gm_prior_inflation, "--gm-prior-inflation"),
            // Checked only when given; its default follows --kind.
            (args.nongrav_prior.unwrap_or(1.0), "--nongrav-prior"),
            (args.offset_prior, "--offset-prior"),
            (args.max_eccentricity, "--max-eccentricity"),
        ] {
            if !(v.is_finite() && v > 0.0) || (name == "--max-eccentricity" && v >= 1.0) {
                return Err(CliError::bad_input(anyhow::anyhow!(
                    "{name} must be positive (and below 1 for an eccentricity), got {v}"
                )));
            }
        }
        if args.directions < 12 || args.distances < 2 {
            return Err(CliError::bad_input(anyhow::anyhow!(
                "--directions must be at least 12 and --distances at least 2"
            )));
        }
        let reject_sigma = parse_reject_sigma(&args.reject_sigma)?;
        let excluded_lines = parse_exclude(args.exclude.as_deref())?;
        let excluded_dates = args.exclude_dates.iter().map(|r| parse_date_range(r)).collect::<Result<Vec<_>, _>>()?;
        let excluded_sites = args.exclude_site.clone();
        let search = SearchSettings {
            mass_earth: mass,
            distance_au: distance,
            n_null: args.nulls,
            seed: args.seed,
            n_directions: args.directions,
            n_distances: args.distances,
            fap_level: args.fap_level,
            near_ecliptic_deg: args.near_ecliptic,
            ..SearchSettings::default()
        };
        search.check_band().map_err(|e| CliError::bad_input(anyhow::anyhow!("--near-ecliptic: {e}")))?;
        let search_epoch = match &args.search_epoch {
            Some(text) => Some(tdb_days_from_j2000(
                parse_epoch(text).map_err(|e| CliError::bad_input(anyhow::anyhow!("--search-epoch: {e}")))?,
            )),
            None => None,
        };
        let known = parse_known(&args.input.known).map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
        let tracked = args.input.tracked().map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
        let posterior = super::posterior::settings(args, &out, tracked.kind)?;
        let obs = args.input.obs_files().map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
        if obs.len() > 1 && (args.exclude.is_some() || !excluded_dates.is_empty() || !excluded_sites.is_empty()) {
            return Err(CliError::bad_input(anyhow::anyhow!(
                "--exclude, --exclude-dates and --exclude-site apply to one tracked body; --obs gives {} files for a joint study",
                obs.len()
            )));
        }
        let truth = args.truth.as_deref().map(Truth::read).transpose()?;
        if obs.len() > 1 && args.start_orbit.is_some() {
            return Err(CliError::bad_input(anyhow::anyhow!(
                "--start-orbit applies to one tracked body; --obs gives {} files for a joint study",
                obs.len()
            )));
        }
        let start_orbit = args.start_orbit.as_deref().map(super::sensitivity::read_orbit).transpose()?;
        Ok(InferPlan {
            confidence_region: !args.no_confidence_region,
            truth,
            obs,
            sites: args.input.sites.clone(),
            known,
            tracked,
            ephemeris: EphemerisSource::parse(&args.input.ephemeris),
            search_epoch,
            excluded_lines,
            excluded_dates,
            excluded_sites,
            detection: DetectionSettings { search, reject_sigma, start_orbit },
            posterior,
            out,
        })
    }
}

/// Gives the bodies named in `--tracked-mass BODY=...` / `--kind BODY=...`
/// their own mass and kind; every such name must be a body read.
pub(super) fn own_bodies(input: &super::args::InputArgs, arcs: &mut [TrackedArc]) -> Result<(), CliError> {
    if !input.has_named_bodies() {
        return Ok(());
    }
    let names: Vec<&str> = arcs.iter().map(|a| a.name.as_str()).collect();
    input.check_named_bodies(&names).map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
    for arc in arcs.iter_mut() {
        let tracked = input.tracked_for(&arc.name).map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
        arc.set_tracked(tracked)?;
    }
    Ok(())
}

/// `latens infer`: one body, or several searched jointly.
pub(super) fn run(args: &InferArgs) -> Result<(), CliError> {
    let mut plan = InferPlan::from_args(args)?;
    // Every body of every file: several make a joint study (a file may hold
    // several, told apart by a designation column).
    let mut arcs = plan
        .obs
        .iter()
        .map(|p| TrackedArc::load_all(p, plan.sites.as_deref(), &plan.known, plan.tracked.clone()))
        .collect::<Result<Vec<_>, _>>()?
        .into_iter()
        .flatten()
        .collect::<Vec<_>>();
    own_bodies(&args.input, &mut arcs)?;
    if let [arc] = arcs.as_slice() {
        // One body: its own mass and kind (given by name or not) decide the
        // model and, unless --nongrav-prior says, the push prior.
        plan.tracked = arc.tracked.clone();
        if plan.posterior.alternatives.nongrav_from_kind {
            plan.posterior.alternatives.nongrav_au_per_day2 =
                latens::posterior::impostors::nongrav_prior_for(arc.tracked.kind);
        }
    }
    for file in &plan.obs {
        for note in latens::io::observations::column_notes(file) {
            super::note(&note);
        }
    }
    for arc in &arcs {
        for warning in latens::io::observations::date_outliers(&arc.observations) {
            eprintln!("warning: {} {warning}", arc.name);
        }
    }
    if arcs.len() > 1 {
        if !plan.excluded_lines.is_empty()
            || !plan.excluded_dates.is_empty()
            || !plan.excluded_sites.is_empty()
            || plan.detection.start_orbit.is_some()
        {
            return Err(CliError::bad_input(anyhow::anyhow!(
                "--exclude, --exclude-dates, --exclude-site and --start-orbit apply to one tracked body; the observations hold {} bodies",
                arcs.len()
            )));
        }
        super::joint::execute(&plan, arcs)
    } else {
        execute(&plan).map(|_| ())
    }
}

/// Runs a checked plan: the study, the stages, the files and the report.
pub(super) fn execute(plan: &InferPlan) -> Result<InferSummary, CliError> {
    let out = plan.out.as_path();
    let distance = plan.detection.search.distance_au;
    let settings = &plan.detection.search;
    let reject_sigma = plan.detection.reject_sigma;
    let posterior_settings = &plan.posterior;

    // The study: read once, passed to every stage.
    let mut arc = TrackedArc::load(&plan.obs[0], plan.sites.as_deref(), &plan.known, plan.tracked.clone())
        .map_err(super::pipeline_error)?;
    arc.exclude_lines(&plan.excluded_lines).map_err(|e| CliError::bad_input(anyhow::anyhow!("--exclude: {e}")))?;
    let file = plan.obs[0].display().to_string();
    for (from, to, text) in &plan.excluded_dates {
        let n = arc
            .exclude_where(|o| (*from..=*to).contains(&o.t_tdb_days))
            .map_err(|e| CliError::bad_input(anyhow::anyhow!("--exclude-dates {text}: {e}")))?;
        if n == 0 {
            return Err(CliError::bad_input(anyhow::anyhow!(
                "--exclude-dates {text}: no observation of {file} falls in it"
            )));
        }
    }
    for site in &plan.excluded_sites {
        let n = arc
            .exclude_where(|o| o.site == *site)
            .map_err(|e| CliError::bad_input(anyhow::anyhow!("--exclude-site {site}: {e}")))?;
        if n == 0 {
            return Err(CliError::bad_input(anyhow::anyhow!(
                "--exclude-site {site}: no observation of {file} was made there"
            )));
        }
    }
    let study = Study::new(vec![arc], &plan.ephemeris, plan.search_epoch).map_err(super::pipeline_error)?;
    let search_epoch = study.search_epoch_tdb_days;
    let detection = detect(&study, &plan.detection, &crate::cli::progress::Bars::new())?;
    let arc = study.single().map_err(super::pipeline_error)?;
    let (model, tracked, excluded_by_hand) = (&arc.model, &arc.tracked, arc.excluded_by_hand.clone());
    let (ephemeris, wide) = (study.ephemeris.as_ref(), study.wide.as_ref());
    let Detection { observations, null, geometry, kernel, search: result, centred, basins, .. } = &detection;
    let (observations, null, geometry, kernel, result, centred, basins) =
        (observations.as_slice(), null, geometry.as_slice(), kernel, result, centred, basins);

    let fap = detection.false_alarm_probability();
    let largest_null = result.null_maxima.iter().copied().fold(0.0, f64::max);
    let mut warnings = detection.warnings();
    let described: Vec<PerturberFile> = basins
        .iter()
        .map(|b| describe(b, null, kernel, observations, geometry, model, ephemeris, wide, search_epoch))
        .collect::<Result<_, _>>()?;
    for (k, d) in described.iter().enumerate() {
        // Only a detection sends anyone to the telescope.
        if d.solar_elongation_deg < latens::pipeline::SUN_WARNING_DEG && fap < settings.fap_level {
            warnings.push(sun_warning(k + 1, d.solar_elongation_deg));
        }
        // Only worth saying for a solution that stands out from the noise
        // and that the recentred kernel did not take over.
        if d.linearisation_error_fraction > 0.05 && fap < settings.fap_level && centred.is_none() {
            warnings.push(format!(
                "basin {}: the linear kernel differs from the full model by {:.0}% of the signal; treat its figures with caution",
                k + 1,
                100.0 * d.linearisation_error_fraction
            ));
        }
    }
    let best_delta = detection.best_delta_chi2();
    let refined_summary = detection.refined.as_ref().map(|r| refined_file(r, null));
    let nonlinear_stage = centred.as_ref().map(|c| latens::io::results::NonlinearStageFile {
        rounds: detection.rounds,
        chi2_at_centre: c.chi2_at_centre,
        delta_chi2_at_centre: null.chi2 - c.chi2_at_centre,
        note: "the linear kernel recentred on the refined full-model solution (residuals of the full model plus the \
               kernel's signal of that solution), so the linear model is exact at the centre; the search and the \
               posterior ran on it"
            .into(),
    });
    let detected = detection.verdict.detected();
    let yearly = detection.annual.flagged();
    let mut verdict = detection.verdict_text();

    let truth = Truth::at_epoch(plan.truth.as_ref(), search_epoch);
    let stage = super::posterior::run(out, &study, &detection, posterior_settings, truth.as_ref())?;
    warnings.extend(stage.result.warnings.iter().cloned());
    // A non-detection gives upper limits, not a place to look.
    let upper_limits = if detected { Vec::new() } else { upper_limits(stage.samples(), distance) };
    let search_products = if stage.samples().is_empty() || !detected {
        None
    } else {
        let run = stage.result.run.as_ref().expect("samples come from a run");
        let s = super::search::run(
            out,
            &study,
            &detection,
            run,
            &stage.result.explanation,
            truth.as_ref(),
            plan.confidence_region,
        )?;
        warnings.extend(s.warnings.iter().cloned());
        Some(s)
    };

    let ex = &stage.result.explanation;
    if detected && stage.result.run.as_ref().is_some_and(|r| r.evidence.is_some()) {
        verdict.push_str(&explanation_clause(ex, yearly));
    }

    let summary = InferSummary {
        search_epoch_utc: utc_iso_from_epoch(epoch_from_tdb_days(search_epoch)),
        seed: settings.seed,
        settings: settings_file(settings, model, ephemeris.description()),
        null_model: NullModelFile { chi2: null.chi2, dof: null.dof, orbit: orbit_file(null) },
        best_fit: described.first().map(clone_perturber),
        refined_best_fit: refined_summary,
        basins: described.iter().map(clone_perturber).collect(),
        detection: DetectionFile {
            delta_chi2: best_delta,
            false_alarm_probability: fap,
            n_null_simulations: result.null_maxima.len(),
            largest_null_delta_chi2: largest_null,
            detected,
            verdict: verdict.clone(),
        },
        search: SearchStatsFile {
            n_hypotheses: result.n_hypotheses,
            n_skipped_close_approach: result.n_skipped_close,
            signal_subspace_dimension: result.subspace_dimension,
            signal_subspace_energy: result.subspace_energy,
        },
        posterior: stage.result.run.as_ref().map(|r| r.summary.clone()),
        evidence: stage.result.run.as_ref().and_then(|r| r.evidence.clone()),
        impostors: stage.result.alternatives.clone(),
        explanation: Some(ex.file()),
        diagnostics: stage.result.run.as_ref().map(|r| r.diagnostics.clone()),
        sky: search_products.as_ref().map(|s| s.sky.clone()),
        tracked: latens::io::results::TrackedFile {
            kind: tracked.kind.name().into(),
            mass_earth: tracked.mass_earth(),
            gm_au3_per_day2: tracked.gm_au3_per_day2,
            named: tracked.named.map(|b| b.name().to_string()),
            nongrav_prior_au_per_day2: posterior_settings.alternatives.nongrav_au_per_day2,
        },
        outliers: latens::io::results::OutlierFile {
            threshold_sigma: reject_sigma,
            judged_against: detection.outliers.judged_against.describe().into(),
            excluded_by_hand,
            set_aside: detection.outliers.set_aside.clone(),
        },
        nonlinear_stage,
        upper_limits: upper_limits.clone(),
        warnings: warnings.clone(),
    };
    let json = serde_json::to_string_pretty(&summary).map_err(|e| CliError::failed(anyhow::anyhow!(e)))? + "\n";

    // Residual charts: the null model and the best fit (null residuals minus
    // the best linear signal, with the orbit correction), side by side.
    let null_products = ResidualProducts::build(null, observations, model, ephemeris.description());
    let charts = best_fit_residuals(null, observations, kernel, result.best());
    write_outputs(out, &json, &null_products, &charts, observations, null, best_delta).map_err(CliError::failed)?;

    let mut text = String::new();
    let _ =
        writeln!(text, "Null model (no perturber): chi-square {:.1} for {} degrees of freedom", null.chi2, null.dof);
    let _ = writeln!(
        text,
        "Searched {} perturber hypotheses{} ({} skipped for passing within {} au of the body)",
        result.n_hypotheses,
        settings.near_ecliptic_deg.map_or(String::new(), |b| format!(" within {b} deg of the ecliptic")),
        result.n_skipped_close,
        settings.min_separation_au
    );
    let _ = writeln!(text, "Verdict: {verdict}");
    for (k, (d, b)) in described.iter().zip(basins).enumerate() {
        // The basins follow the fit; the posterior keeps to the prior (its
        // eccentricity about the kernel's central mass).
        let e = latens::pipeline::basin_eccentricity(b, kernel.central_gm());
        let _ = writeln!(
            text,
            "  basin {}: delta chi2 {:.1}, {:.2} Earth masses {:.0} au from the Sun at the reference epoch; at the search epoch \
             RA {:.2} deg, Dec {:+.2} deg, {:.0} au away, {:.0} deg from the Sun{}",
            k + 1,
            d.delta_chi2,
            d.mass_earth,
            (d.state_icrf[0].powi(2) + d.state_icrf[1].powi(2) + d.state_icrf[2].powi(2)).sqrt(),
            d.ra_deg,
            d.dec_deg,
            d.distance_au,
            d.solar_elongation_deg,
            if e > posterior_settings.max_eccentricity {
                format!(
                    " (eccentricity {e:.2} about the central mass, beyond the prior's {}: not in the posterior)",
                    posterior_settings.max_eccentricity
                )
            } else {
                String::new()
            }
        );
    }
    if described.len() > 1 && detected {
        let _ = writeln!(
            text,
            "  Several basins fit almost equally well: mass, distance and direction are not all pinned down by these data."
        );
    }
    text.push_str(&stage.text);
    if !upper_limits.is_empty() {
        let _ = writeln!(
            text,
            "No perturber detected, so no search region: these data exclude, at 95% posterior probability, perturbers heavier than"
        );
        for u in &upper_limits {
            let _ = writeln!(
                text,
                "  {:>7.1} Earth masses at {:.0}-{:.0} au from the Sun ({} samples)",
                u.mass_earth_95, u.distance_au[0], u.distance_au[1], u.n_samples
            );
        }
    }
    if let Some(s) = &search_products {
        text.push_str(&s.text);
    }
    for w in &warnings {
        let _ = writeln!(text, "warning: {w}");
    }
    super::report(&text);
    say!("Files written in {}:", out.display());
    say!("  summary.json         the verdict, the best solution and every basin, the settings and the seed");
    say!("  null_fit.json        the reference orbit (no perturber) the search started from");
    if let Some(name) = super::chart_name("residuals_null_vs_best") {
        say!("  {name}  O-C of the null model and of the best perturber solution, side by side");
    }
    for (name, what) in stage.files.iter().chain(search_products.iter().flat_map(|s| s.files.iter())) {
        say!("  {name:<20} {what}");
    }
    Ok(summary)
}

fn refined_file(r: &latens::perturber::refine::Refinement, null: &ReferenceFit) -> latens::io::results::RefinedFile {
    latens::io::results::RefinedFile {
        solution: latens::io::results::RefinedSolutionFile::new(
            &r.perturber,
            r.chi2,
            null.chi2,
            r.gm_sigma,
            null.epoch_tdb_days,
            r.iterations,
            r.condition_number,
            &r.note,
        ),
        all_13_parameters: r.all_thirteen,
    }
}

fn clone_perturber(p: &PerturberFile) -> PerturberFile {
    PerturberFile { frame: p.frame.clone(), ..*p }
}

/// Everything the summary says about one basin.
#[allow(clippy::too_many_arguments)]
fn describe(
    s: &Scored,
    null: &ReferenceFit,
    kernel: &LinearKernel,
    observations: &[Observation],
    geometry: &[ObservingGeometry],
    model: &latens::dynamics::ForceModel,
    ephemeris: &dyn Ephemeris,
    wide: &dyn Ephemeris,
    search_epoch: f64,
) -> Result<PerturberFile, CliError> {
    let h = &s.hypothesis;
    let t0 = null.epoch_tdb_days;
    let el = OutputElements::from_icrf_state(h.position_au, h.velocity_au_per_day).map_err(CliError::failed)?;
    // Geocentric astrometric place at the search epoch, moving about the
    // model's central mass.
    let orbit = KeplerOrbit::from_state(kernel.central_gm(), h.position_au, h.velocity_au_per_day, t0)
        .ok_or_else(|| CliError::failed(anyhow::anyhow!("a basin's orbit is unbound")))?;
    let search = latens::pipeline::SearchGeometry::new(wide, search_epoch)?;
    let (direction, distance, heliocentric, elongation) = search.place_at(&orbit, search_epoch, &search.geometry);
    let radec = latens::frames::radec_from_vector(direction);

    // Linear against nonlinear signal, both with the orbit correction removed.
    let (err_arcsec, err_fraction) = linearisation_error(s, null, kernel, observations, geometry, model, ephemeris)
        .map_err(super::pipeline_error)?;
    Ok(PerturberFile {
        chi2: null.chi2 - s.delta_chi2,
        delta_chi2: s.delta_chi2,
        mass_earth: s.mass_earth(),
        frame: OUTPUT_FRAME.into(),
        epoch_tdb_jd: J2000_JD + t0,
        elements: el,
        state_icrf: [
            h.position_au.x,
            h.position_au.y,
            h.position_au.z,
            h.velocity_au_per_day.x,
            h.velocity_au_per_day.y,
            h.velocity_au_per_day.z,
        ],
        ra_deg: radec.ra_rad / RAD_PER_DEG,
        dec_deg: radec.dec_rad / RAD_PER_DEG,
        distance_au: distance,
        heliocentric_distance_au: heliocentric,
        solar_elongation_deg: elongation,
        closest_approach_to_tracked_body_au: s.closest_approach_au,
        linearisation_error_arcsec: err_arcsec,
        linearisation_error_fraction: err_fraction,
    })
}

/// The search settings as summary.json records them.
pub(super) fn settings_file(
    s: &SearchSettings,
    model: &latens::dynamics::ForceModel,
    ephemeris: String,
) -> InferSettingsFile {
    InferSettingsFile {
        mass_earth: [s.mass_earth.0, s.mass_earth.1],
        distance_au: [s.distance_au.0, s.distance_au.1],
        n_directions: s.n_directions,
        n_distances: s.n_distances,
        n_orientations: s.n_orientations,
        speed_factors: s.speed_factors.clone(),
        min_separation_au: s.min_separation_au,
        basin_delta_chi2: s.basin_delta_chi2,
        fap_level: s.fap_level,
        near_ecliptic_deg: s.near_ecliptic_deg,
        known_bodies: model.known.iter().map(|k| k.body.name().to_string()).collect(),
        folded_into_sun: model.folded.iter().map(|k| k.body.name().to_string()).collect(),
        central_gm_au3_per_day2: model.central_gm_au3_per_day2(),
        ephemeris,
    }
}

/// The safety warning for basin `number` of a detection lying
/// `elongation_deg` from the Sun.
pub(super) fn sun_warning(number: usize, elongation_deg: f64) -> String {
    format!(
        "basin {number} lies {elongation_deg:.0} deg from the Sun at the search epoch: pointing a telescope near the Sun can destroy eyes \
         and instruments; observe it only with proper solar safeguards, after sunset, or wait for it to move away"
    )
}

/// What the verdict of a detection adds when the evidence prefers another
/// explanation or cannot decide (empty when the perturber is best);
/// `yearly`: the residuals carry a one-year pattern, so the alternative is
/// named as the best-supported one rather than as a contradiction.
pub(super) fn explanation_clause(ex: &latens::pipeline::Explanation, yearly: bool) -> String {
    match &ex.best {
        Best::Perturber => String::new(),
        Best::Undecided => format!("; which explanation is best is undecided: {}", ex.text),
        other => {
            let lead = if yearly {
                "; the best-supported explanation is"
            } else {
                "; but the data favour another explanation:"
            };
            let name = match other {
                Best::Alternative(name) => name.as_str(),
                _ => "no extra effect (noise alone)",
            };
            format!("{lead} {name} ({})", ex.strength)
        }
    }
}

/// Residuals of the best solution: the null residuals minus its linear
/// signal (with the orbit correction), in arcsec.
fn best_fit_residuals(
    null: &ReferenceFit,
    observations: &[Observation],
    kernel: &LinearKernel,
    best: Option<&Scored>,
) -> Vec<(f64, f64)> {
    let n = observations.len();
    let mut out: Vec<(f64, f64)> = null.residuals.iter().map(|r| (r.ra_arcsec, r.dec_arcsec)).collect();
    let Some(best) = best else {
        return out;
    };
    let Some(s) =
        kernel.projected_signal(best.hypothesis.position_au, best.hypothesis.velocity_au_per_day, best.gm_au3_per_day2)
    else {
        return out;
    };
    for k in 0..n {
        // Unwhiten: w1 = r1/sa; w2 = (r2 - c sd w1)/(sd sqrt(1-c^2)).
        let o = &observations[k];
        let (sa, sd, c) = (o.sigma_ra_arcsec, o.sigma_dec_arcsec, o.corr);
        let r1 = s[2 * k] * sa;
        let r2 = s[2 * k + 1] * sd * (1.0 - c * c).sqrt() + c * sd * s[2 * k];
        out[k].0 -= r1;
        out[k].1 -= r2;
    }
    out
}

fn write_outputs(
    out: &Path,
    json: &str,
    null_products: &ResidualProducts,
    best: &[(f64, f64)],
    observations: &[Observation],
    null: &ReferenceFit,
    best_delta: f64,
) -> anyhow::Result<()> {
    let years: Vec<f64> =
        observations.iter().map(|o| 2000.0 + o.t_tdb_days / latens::units::JULIAN_YEAR_DAYS).collect();
    let used: Vec<bool> = null.residuals.iter().map(|r| r.used).collect();
    let sra: Vec<f64> = observations.iter().map(|o| o.sigma_ra_arcsec).collect();
    let sdec: Vec<f64> = observations.iter().map(|o| o.sigma_dec_arcsec).collect();
    let (null_ra, null_dec): (Vec<f64>, Vec<f64>) = null.residuals.iter().map(|r| (r.ra_arcsec, r.dec_arcsec)).unzip();
    let (best_ra, best_dec): (Vec<f64>, Vec<f64>) = best.iter().copied().unzip();
    let left = ResidualChart {
        years: &years,
        ra_arcsec: &null_ra,
        dec_arcsec: &null_dec,
        sigma_ra_arcsec: &sra,
        sigma_dec_arcsec: &sdec,
        used: &used,
        title: format!("Null model (no perturber): chi2 = {:.1} for {} dof", null.chi2, null.dof),
        subtitle: "O-C of the reference orbit; error bars 1 sigma".into(),
    };
    let right = ResidualChart {
        years: &years,
        ra_arcsec: &best_ra,
        dec_arcsec: &best_dec,
        sigma_ra_arcsec: &sra,
        sigma_dec_arcsec: &sdec,
        used: &used,
        title: format!("Best perturber solution: chi2 = {:.1} (delta {best_delta:.1})", null.chi2 - best_delta),
        subtitle: "O-C with the best perturber's linear signal and its orbit correction removed".into(),
    };
    std::fs::create_dir_all(out).with_context(|| format!("creating {}", out.display()))?;
    super::write_chart(
        out,
        "residuals_null_vs_best",
        |tmp| ResidualChart::draw_pair_png(&left, &right, tmp),
        || ResidualChart::draw_pair_svg(&left, &right),
    )?;
    write_atomically(&out.join("null_fit.json"), null_products.fit_json.as_bytes())?;
    write_atomically(&out.join("summary.json"), json.as_bytes())?;
    Ok(())
}

/// `--reject-sigma`: a positive number of sigma, or `off`.
fn parse_reject_sigma(text: &str) -> Result<Option<f64>, CliError> {
    if text.trim().eq_ignore_ascii_case("off") {
        return Ok(None);
    }
    match text.trim().parse::<f64>() {
        Ok(v) if v.is_finite() && v >= 3.0 => Ok(Some(v)),
        _ => Err(CliError::bad_input(anyhow::anyhow!(
            "--reject-sigma: expected a number of sigma of at least 3, or `off`, got `{text}`"
        ))),
    }
}

/// `--exclude`: line numbers of the observation file, `A-B` for a range.
/// `--exclude-dates FROM..TO`: a TDB-day range, inclusive; a date alone
/// (no time) covers its whole UTC day.
fn parse_date_range(spec: &str) -> Result<(f64, f64, String), CliError> {
    let bad = |why: String| CliError::bad_input(anyhow::anyhow!("--exclude-dates {spec}: {why}"));
    let (a, b) = spec.split_once("..").ok_or_else(|| bad("expected FROM..TO, e.g. 2015-01-01..2015-06-30".into()))?;
    let at = |t: &str| parse_epoch(t.trim()).map(tdb_days_from_j2000).map_err(|e| bad(e.to_string()));
    let from = at(a)?;
    // A bare date at the end means the end of that day.
    let to = at(b)? + if b.trim().len() == 10 { 1.0 - 1e-9 } else { 0.0 };
    if to < from {
        return Err(bad("the range ends before it starts".into()));
    }
    Ok((from, to, spec.to_string()))
}

fn parse_exclude(spec: Option<&str>) -> Result<Vec<usize>, CliError> {
    let Some(spec) = spec else { return Ok(Vec::new()) };
    let bad =
        |t: &str| CliError::bad_input(anyhow::anyhow!("--exclude: expected line numbers like 12,40-45, got `{t}`"));
    let mut lines = Vec::new();
    for part in spec.split(',').map(str::trim).filter(|p| !p.is_empty()) {
        let (a, b) = match part.split_once('-') {
            Some((a, b)) => {
                (a.trim().parse::<usize>().map_err(|_| bad(part))?, b.trim().parse::<usize>().map_err(|_| bad(part))?)
            }
            None => {
                let a = part.parse::<usize>().map_err(|_| bad(part))?;
                (a, a)
            }
        };
        if a == 0 || b < a {
            return Err(bad(part));
        }
        lines.extend(a..=b);
    }
    Ok(lines)
}

/// 95% upper limits on the mass, per band of heliocentric distance, from
/// the posterior samples of a non-detection (log-spaced bands over the
/// prior's range; bands with fewer than 50 samples are left out).
pub(super) fn upper_limits(
    samples: &[latens::pipeline::DerivedSample],
    distance_au: (f64, f64),
) -> Vec<latens::io::results::UpperLimitFile> {
    let bands = 6;
    let ratio = (distance_au.1 / distance_au.0).powf(1.0 / bands as f64);
    (0..bands)
        .filter_map(|b| {
            let lo = distance_au.0 * ratio.powi(b);
            let hi = lo * ratio;
            let masses: Vec<f64> = samples
                .iter()
                .filter(|s| {
                    let d = s.sample.position_au.norm();
                    d >= lo && d < hi
                })
                .map(|s| s.sample.mass_earth())
                .collect();
            (masses.len() >= 50).then(|| latens::io::results::UpperLimitFile {
                distance_au: [lo, hi],
                mass_earth_95: latens::posterior::quantiles(&masses, &[0.95])[0],
                n_samples: masses.len(),
            })
        })
        .collect()
}
