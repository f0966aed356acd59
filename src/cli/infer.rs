//! `latens infer`: does an unseen perturber explain the residuals, and where
//! is it? (Grid search through the linear kernel, basins, false-alarm
//! probability by null simulation.)

use std::fmt::Write as _;
use std::path::Path;

use anyhow::Context;

use super::CliError;
use super::args::InferArgs;
use super::residuals::{ResidualProducts, load_ephemeris, model_from_input, orbit_file, read_inputs};
use latens::astrometry::{ObservingGeometry, astrometric_direction, sun_barycentric_velocity};
use latens::dynamics::Perturber;
use latens::dynamics::kepler::elements_from_state;
use latens::ephemeris::{Body, Ephemeris, SpkFile, Vsop87};
use latens::frames::{angular_separation, ecliptic_from_icrf};
use latens::io::observations::Observation;
use latens::io::results::{
    DetectionFile, InferSettingsFile, InferSummary, NullModelFile, PerturberFile, SearchStatsFile,
};
use latens::io::write_atomically;
use latens::perturber::{KeplerOrbit, LinearKernel, Scored, SearchSettings, grid_search};
use latens::reference::{OrbitModel, ReferenceFit, ReferenceSettings, fit_reference_orbit, observing_geometry, whiten};
use latens::time::{epoch_from_tdb_days, parse_epoch, tdb_days_from_j2000, utc_iso_from_epoch};
use latens::units::{J2000_JD, RAD_PER_DEG};
use latens::vec3::Vec3;
use latens_charts::residual_chart::ResidualChart;

/// False-alarm probability below which a perturber counts as detected: the
/// two-sided 3-sigma Gaussian tail (common practice).
pub const DETECTION_FAP: f64 = 0.0027;

/// The null fit of `infer` sets nothing aside: a perturber's signal makes
/// residuals of many sigma over whole seasons, and any threshold against
/// the null model sets aside the very observations that carry it (measured:
/// 68 of 520 demo observations at 5 sigma, which moved the posterior 20 deg
/// from the truth; 107 of 728 at 10 sigma on a 90-year planetary arc).
/// Outliers are judged afterwards against the best model, the perturber
/// included (`--reject-sigma`), and the search runs again without them.
const INFER_REFERENCE_SETTINGS: ReferenceSettings =
    ReferenceSettings { epoch_tdb_days: None, reject_chi2: f64::INFINITY, readmit_chi2: f64::INFINITY, max_rounds: 10 };

/// Solar elongations below this get a safety warning, degrees.
pub(super) const SUN_WARNING_DEG: f64 = 45.0;

fn parse_range(text: &str, what: &str) -> Result<(f64, f64), CliError> {
    let bad = || CliError::bad_input(anyhow::anyhow!("{what}: expected MIN:MAX with 0 < MIN < MAX, got `{text}`"));
    let (a, b) = text.split_once(':').ok_or_else(bad)?;
    let (a, b): (f64, f64) = (a.trim().parse().map_err(|_| bad())?, b.trim().parse().map_err(|_| bad())?);
    if !(a.is_finite() && b.is_finite() && a > 0.0 && b > a) {
        return Err(bad());
    }
    Ok((a, b))
}

pub(super) fn run(args: &InferArgs) -> Result<InferSummary, CliError> {
    // A resumed run writes where it was interrupted.
    let out_dir = args.resume.clone().unwrap_or_else(|| args.out.clone());
    let out = out_dir.as_path();
    let (observations, sites) = read_inputs(&args.input.obs, args.input.sites.as_ref())?;
    let (model, tracked) = model_from_input(&args.input)?;
    let mass = parse_range(&args.mass_earth, "--mass-earth")?;
    let distance = parse_range(&args.distance_au, "--distance-au")?;
    // The false-alarm probability cannot go below 1/(nulls + 1): enough
    // nulls are needed for it to reach the detection threshold at all.
    let min_nulls = (1.0 / DETECTION_FAP).ceil() as usize;
    if args.nulls < min_nulls {
        return Err(CliError::bad_input(anyhow::anyhow!(
            "--nulls must be at least {min_nulls} for a false-alarm probability below the detection threshold {DETECTION_FAP}, got {}",
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
    let ephemeris = load_ephemeris(&args.input.ephemeris, &model, &observations)?;
    let search_epoch = match &args.search_epoch {
        Some(text) => tdb_days_from_j2000(
            parse_epoch(text).map_err(|e| CliError::bad_input(anyhow::anyhow!("--search-epoch: {e}")))?,
        ),
        None => observations.last().map(|o| o.t_tdb_days).unwrap_or(0.0),
    };
    // The ephemeris for the search epoch, which may lie outside the observed span.
    let wide: Box<dyn Ephemeris> = if args.input.ephemeris == "builtin" {
        Box::new(Vsop87::new())
    } else {
        Box::new(SpkFile::open(Path::new(&args.input.ephemeris)).map_err(CliError::bad_input)?)
    };
    for b in [Body::Earth, Body::Jupiter] {
        wide.check_covered(b, search_epoch).map_err(|e| CliError::bad_input(anyhow::anyhow!("--search-epoch: {e}")))?;
    }

    if args.directions < 12 || args.distances < 2 {
        return Err(CliError::bad_input(anyhow::anyhow!(
            "--directions must be at least 12 and --distances at least 2"
        )));
    }
    let reject_sigma = parse_reject_sigma(&args.reject_sigma)?;
    let (observations, excluded_by_hand) = exclude_by_hand(observations, args.exclude.as_deref())?;
    let settings = SearchSettings {
        mass_earth: mass,
        distance_au: distance,
        n_null: args.nulls,
        seed: args.seed,
        n_directions: args.directions,
        n_distances: args.distances,
        ..SearchSettings::default()
    };
    let mut stage = search_stage(observations, &sites, &model, ephemeris.as_ref(), &settings)?;
    // Outliers are judged against the best model: with the perturber when
    // one is detected (in the strong regime the largest residuals are the
    // signal), else against the null model. Those set aside, the whole
    // search runs again without them.
    let mut set_aside = Vec::new();
    let judged_against = if stage.detected() && stage.refined.is_some() {
        "the full model with the refined perturber"
    } else {
        "the null model (no perturber)"
    };
    if let Some(limit) = reject_sigma {
        let chi2 = stage.chi2_per_observation(&model, ephemeris.as_ref())?;
        let keep: Vec<bool> = chi2.iter().map(|&c| c <= limit * limit).collect();
        if keep.iter().any(|k| !k) {
            set_aside =
                stage.observations.iter().zip(&keep).filter(|(_, k)| !**k).map(|(o, _)| o.source.clone()).collect();
            eprintln!(
                "Setting aside {} observation(s) beyond {limit} sigma against {judged_against}; searching again...",
                set_aside.len()
            );
            let rest: Vec<Observation> =
                stage.observations.iter().zip(&keep).filter(|(_, k)| **k).map(|(o, _)| o.clone()).collect();
            stage = search_stage(rest, &sites, &model, ephemeris.as_ref(), &settings)?;
        }
    }
    let SearchStage { observations, null, geometry, kernel, result, refined, centred, basins, rounds } = stage;

    let fap = result.false_alarm_probability();
    let largest_null = result.null_maxima.iter().copied().fold(0.0, f64::max);
    let mut warnings = null.warnings.clone();
    if !set_aside.is_empty() {
        warnings.push(format!(
            "{} observation(s) set aside beyond {} sigma against {judged_against}: {}",
            set_aside.len(),
            reject_sigma.unwrap_or(f64::NAN),
            set_aside.join(", ")
        ));
    }
    let described: Vec<PerturberFile> = basins
        .iter()
        .map(|b| {
            describe(
                b,
                &null,
                &kernel,
                &observations,
                &geometry,
                &model,
                ephemeris.as_ref(),
                wide.as_ref(),
                search_epoch,
            )
        })
        .collect::<Result<_, _>>()?;
    for (k, d) in described.iter().enumerate() {
        // Only a detection sends anyone to the telescope.
        if d.solar_elongation_deg < SUN_WARNING_DEG && fap < DETECTION_FAP {
            warnings.push(format!(
                "basin {} lies {:.0} deg from the Sun at the search epoch: pointing a telescope near the Sun can destroy eyes \
                 and instruments; observe it only with proper solar safeguards, after sunset, or wait for it to move away",
                k + 1,
                d.solar_elongation_deg
            ));
        }
        // Only worth saying for a solution that stands out from the noise
        // and that the recentred kernel did not take over.
        if d.linearisation_error_fraction > 0.05 && fap < DETECTION_FAP && centred.is_none() {
            warnings.push(format!(
                "basin {}: the linear kernel differs from the full model by {:.0}% of the signal; treat its figures with caution",
                k + 1,
                100.0 * d.linearisation_error_fraction
            ));
        }
    }
    // The detection statistic is the grid's best drop (the null maxima are
    // grid maxima); the basins carry their continuously refined drops.
    let best_delta = result.grid_best_delta_chi2;
    let refined_summary = refined.as_ref().map(|r| refined_file(r, &null));
    let nonlinear_stage = centred.as_ref().map(|c| latens::io::results::NonlinearStageFile {
        rounds,
        chi2_at_centre: c.chi2_at_centre,
        delta_chi2_at_centre: null.chi2 - c.chi2_at_centre,
        note: "the linear kernel recentred on the refined full-model solution (residuals of the full model plus the \
               kernel's signal of that solution), so the linear model is exact at the centre; the search and the \
               posterior ran on it"
            .into(),
    });
    let detected = fap < DETECTION_FAP && best_delta > 0.0;
    // A signal that repeats with the year points at a systematic error tied
    // to the Earth's motion (a catalogue or reduction error), not at a
    // planet, whose pull changes slowly.
    let (annual, annual_chi2) = annual_share(&null, &observations, best_delta);
    // Said only when the sinusoid itself is significant, not on noise.
    let yearly = annual > ANNUAL_SUSPICION && annual_chi2 > ANNUAL_MIN_CHI2;
    if yearly {
        warnings.push(format!(
            "a one-year sinusoid accounts for {:.0}% of the residuals' excess: check the astrometry for systematic errors before believing in a planet",
            100.0 * annual
        ));
    }
    let verdict = if detected && yearly {
        format!(
            "suspicious: a perturber lowers the chi-square by {best_delta:.1} (false-alarm probability {fap:.2e}), but a one-year sinusoid accounts for {:.0}% of the residuals' excess, which points at a systematic error in the astrometry rather than a planet",
            100.0 * annual
        )
    } else if detected {
        format!(
            "detected: the best perturber lowers the chi-square by {best_delta:.1}, which {} of {} simulated noise-only data sets reached (false-alarm probability {fap:.2e})",
            result.null_maxima.iter().filter(|&&m| m >= best_delta).count(),
            result.null_maxima.len()
        )
    } else if fap < 0.05 {
        format!(
            "suspicious: a perturber lowers the chi-square by {best_delta:.1} (false-alarm probability {fap:.3}); not enough for a detection"
        )
    } else {
        format!(
            "not detected: the best perturber lowers the chi-square by {best_delta:.1}, as noise alone often does (false-alarm probability {fap:.2})"
        )
    };

    let stage = super::posterior::run(
        args,
        out,
        &super::posterior::Inputs {
            null: &null,
            null_kernel: &kernel,
            kernel: centred.as_ref().map_or(&kernel, |c| &c.kernel),
            delta_chi2_offset: centred.as_ref().map_or(0.0, |c| c.delta_chi2_offset),
            tracked: &tracked,
            observations: &observations,
            geometry: &geometry,
            model: &model,
            ephemeris: ephemeris.as_ref(),
            wide: wide.as_ref(),
            search_epoch,
            basins: &basins,
            mass_earth: mass,
            distance_au: distance,
            min_separation_au: settings.min_separation_au,
        },
    )?;
    warnings.extend(stage.warnings.iter().cloned());
    // A non-detection gives upper limits, not a place to look.
    let upper_limits = if detected { Vec::new() } else { upper_limits(&stage.samples, distance) };
    let search_products = if stage.samples.is_empty() || !detected {
        None
    } else {
        let geometry_now = super::posterior::SearchGeometry::new(wide.as_ref(), search_epoch)?;
        let s = super::search::run(
            out,
            &stage.samples,
            &geometry_now,
            wide.as_ref(),
            kernel.epoch_tdb_days,
            kernel.central_gm(),
        )?;
        warnings.extend(s.warnings.iter().cloned());
        Some(s)
    };
    let mut verdict = verdict;
    if let Some(ex) = &stage.explanation
        && detected
        && stage.evidence.is_some()
        && ex.best != super::posterior::PERTURBER
    {
        if ex.best == "undecided" {
            verdict.push_str(&format!("; which explanation is best is undecided: {}", ex.text));
        } else {
            let lead = if yearly {
                "; the best-supported explanation is"
            } else {
                "; but the data favour another explanation:"
            };
            verdict.push_str(&format!("{lead} {} ({})", ex.best, ex.strength));
        }
    }

    let summary = InferSummary {
        search_epoch_utc: utc_iso_from_epoch(epoch_from_tdb_days(search_epoch)),
        seed: args.seed,
        settings: InferSettingsFile {
            mass_earth: [mass.0, mass.1],
            distance_au: [distance.0, distance.1],
            n_directions: settings.n_directions,
            n_distances: settings.n_distances,
            n_orientations: settings.n_orientations,
            speed_factors: settings.speed_factors.clone(),
            min_separation_au: settings.min_separation_au,
            basin_delta_chi2: settings.basin_delta_chi2,
            known_bodies: model.known.iter().map(|k| k.body.name().to_string()).collect(),
            folded_into_sun: model.folded.iter().map(|k| k.body.name().to_string()).collect(),
            ephemeris: ephemeris.description(),
        },
        null_model: NullModelFile { chi2: null.chi2, dof: null.dof, orbit: orbit_file(&null) },
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
        posterior: stage.posterior,
        evidence: stage.evidence,
        impostors: stage.impostors,
        explanation: stage.explanation,
        diagnostics: stage.diagnostics,
        sky: search_products.as_ref().map(|s| s.sky.clone()),
        tracked: latens::io::results::TrackedFile {
            kind: tracked.kind.name().into(),
            mass_earth: tracked.mass_earth(),
            gm_au3_per_day2: tracked.gm_au3_per_day2,
            named: tracked.named.map(|b| b.name().to_string()),
            nongrav_prior_au_per_day2: args
                .nongrav_prior
                .unwrap_or(latens::posterior::impostors::nongrav_prior_for(tracked.kind)),
        },
        outliers: latens::io::results::OutlierFile {
            threshold_sigma: reject_sigma,
            judged_against: judged_against.into(),
            excluded_by_hand,
            set_aside,
        },
        nonlinear_stage,
        upper_limits: upper_limits.clone(),
        warnings: warnings.clone(),
    };
    let json = serde_json::to_string_pretty(&summary).map_err(|e| CliError::failed(anyhow::anyhow!(e)))? + "\n";

    // Residual charts: the null model and the best fit (null residuals minus
    // the best linear signal, with the orbit correction), side by side.
    let null_products = ResidualProducts::build(&null, &observations, &model, ephemeris.description());
    let charts = best_fit_residuals(&null, &observations, &kernel, result.best());
    write_outputs(out, &json, &null_products, &charts, &observations, &null, best_delta).map_err(CliError::failed)?;

    let mut text = String::new();
    let _ =
        writeln!(text, "Null model (no perturber): chi-square {:.1} for {} degrees of freedom", null.chi2, null.dof);
    let _ = writeln!(
        text,
        "Searched {} perturber hypotheses ({} skipped for passing within {} au of the body)",
        result.n_hypotheses, result.n_skipped_close, settings.min_separation_au
    );
    let _ = writeln!(text, "Verdict: {verdict}");
    for (k, d) in described.iter().enumerate() {
        let _ = writeln!(
            text,
            "  basin {}: delta chi2 {:.1}, {:.2} Earth masses {:.0} au from the Sun at the reference epoch; at the search epoch \
             RA {:.2} deg, Dec {:+.2} deg, {:.0} au away, {:.0} deg from the Sun",
            k + 1,
            d.delta_chi2,
            d.mass_earth,
            (d.state_icrf[0].powi(2) + d.state_icrf[1].powi(2) + d.state_icrf[2].powi(2)).sqrt(),
            d.ra_deg,
            d.dec_deg,
            d.distance_au,
            d.solar_elongation_deg
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
    print!("{text}");
    println!("Files written in {}:", out.display());
    println!("  summary.json         the verdict, the best solution and every basin, the settings and the seed");
    println!(
        "  residuals_null_vs_best.png (.svg)  O-C of the null model and of the best perturber solution, side by side"
    );
    for (name, what) in stage.files.iter().chain(search_products.iter().flat_map(|s| s.files.iter())) {
        println!("  {name:<20} {what}");
    }
    Ok(summary)
}

fn refined_file(r: &latens::perturber::refine::Refinement, null: &ReferenceFit) -> latens::io::results::RefinedFile {
    let gm_earth = latens::units::EARTH_MASS_SOLAR * latens::units::GM_SUN_AU3_PER_DAY2;
    let p = &r.perturber;
    let el = elements_from_state(
        latens::units::GM_SUN_AU3_PER_DAY2,
        ecliptic_from_icrf(p.position_au),
        ecliptic_from_icrf(p.velocity_au_per_day),
    )
    .ok();
    let deg = |x: f64| x / RAD_PER_DEG;
    latens::io::results::RefinedFile {
        chi2: r.chi2,
        delta_chi2: null.chi2 - r.chi2,
        mass_earth: p.gm_au3_per_day2 / gm_earth,
        mass_sigma_earth: r.gm_sigma / gm_earth,
        frame: "elements: heliocentric ecliptic J2000 (IAU 2006), osculating, GM of the Sun; state: heliocentric ICRF"
            .into(),
        epoch_tdb_jd: J2000_JD + null.epoch_tdb_days,
        a_au: el.map_or(f64::NAN, |e| e.semi_major_axis_au()),
        e: el.map_or(f64::NAN, |e| e.eccentricity),
        inc_deg: el.map_or(f64::NAN, |e| deg(e.inclination_rad)),
        node_deg: el.map_or(f64::NAN, |e| deg(e.node_rad)),
        peri_deg: el.map_or(f64::NAN, |e| deg(e.periapsis_arg_rad)),
        mean_anomaly_deg: el.map_or(f64::NAN, |e| deg(e.mean_anomaly_rad())),
        state_icrf: [
            p.position_au.x,
            p.position_au.y,
            p.position_au.z,
            p.velocity_au_per_day.x,
            p.velocity_au_per_day.y,
            p.velocity_au_per_day.z,
        ],
        all_13_parameters: r.all_thirteen,
        iterations: r.iterations,
        condition_number: r.condition_number,
        note: r.note.clone(),
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
    let gm_sun = kernel.central_gm();
    let el = elements_from_state(gm_sun, ecliptic_from_icrf(h.position_au), ecliptic_from_icrf(h.velocity_au_per_day))
        .map_err(CliError::failed)?;
    // Geocentric astrometric place at the search epoch.
    let orbit = KeplerOrbit::from_state(gm_sun, h.position_au, h.velocity_au_per_day, t0)
        .ok_or_else(|| CliError::failed(anyhow::anyhow!("a basin's orbit is unbound")))?;
    let mut guess = f64::NAN;
    let r = orbit.position(search_epoch, &mut guess);
    let dt = 1.0;
    let v =
        (orbit.position(search_epoch + dt, &mut guess) - orbit.position(search_epoch - dt, &mut guess)) / (2.0 * dt);
    let earth = wide.heliocentric_position_au(Body::Earth, search_epoch).map_err(CliError::failed)?;
    let vsun = sun_barycentric_velocity(wide, search_epoch).unwrap_or(Vec3::ZERO);
    let g =
        ObservingGeometry { t_tdb_days: search_epoch, observer_au: earth, sun_barycentric_velocity_au_per_day: vsun };
    let (rho, _, radec) = astrometric_direction(&g, search_epoch, r, v);
    let elongation = angular_separation(rho, -earth) / RAD_PER_DEG;

    // Linear against nonlinear signal, both with the orbit correction removed.
    let (err_arcsec, err_fraction) = linearisation_error(s, null, kernel, observations, geometry, model, ephemeris)?;
    Ok(PerturberFile {
        chi2: null.chi2 - s.delta_chi2,
        delta_chi2: s.delta_chi2,
        mass_earth: s.mass_earth(),
        frame: "elements: heliocentric ecliptic J2000 (IAU 2006), osculating, GM of the Sun; state: heliocentric ICRF"
            .into(),
        epoch_tdb_jd: J2000_JD + t0,
        a_au: el.semi_major_axis_au(),
        e: el.eccentricity,
        inc_deg: el.inclination_rad / RAD_PER_DEG,
        node_deg: el.node_rad / RAD_PER_DEG,
        peri_deg: el.periapsis_arg_rad / RAD_PER_DEG,
        mean_anomaly_deg: el.mean_anomaly_rad() / RAD_PER_DEG,
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
        distance_au: rho.norm(),
        heliocentric_distance_au: r.norm(),
        solar_elongation_deg: elongation,
        closest_approach_to_tracked_body_au: s.closest_approach_au,
        linearisation_error_arcsec: err_arcsec,
        linearisation_error_fraction: err_fraction,
    })
}

/// The RMS difference (arcsec, and as a share of the signal RMS) between the
/// kernel's signal and the full nonlinear model's, for one solution.
fn linearisation_error(
    s: &Scored,
    null: &ReferenceFit,
    kernel: &LinearKernel,
    observations: &[Observation],
    geometry: &[ObservingGeometry],
    model: &latens::dynamics::ForceModel,
    ephemeris: &dyn Ephemeris,
) -> Result<(f64, f64), CliError> {
    let n = observations.len();
    let mut base = OrbitModel::new(observations, geometry.to_vec(), null.epoch_tdb_days, model, ephemeris)
        .map_err(CliError::failed)?;
    base.predict(&null.state, false).map_err(CliError::failed)?;
    let p0 = base.predict(&null.state, false).map_err(CliError::failed)?;
    let mut with = OrbitModel::new(observations, geometry.to_vec(), null.epoch_tdb_days, model, ephemeris)
        .map_err(CliError::failed)?;
    with.perturbers = vec![Perturber {
        gm_au3_per_day2: s.gm_au3_per_day2,
        position_au: s.hypothesis.position_au,
        velocity_au_per_day: s.hypothesis.velocity_au_per_day,
    }];
    with.predict(&null.state, false).map_err(CliError::failed)?;
    let p1 = with.predict(&null.state, false).map_err(CliError::failed)?;
    let mut nonlinear = vec![0.0; 2 * n];
    for k in 0..n {
        let w = whiten(&observations[k], latens::reference::residual_arcsec_between(&p1[k].radec, &p0[k].radec));
        nonlinear[2 * k] = w.0;
        nonlinear[2 * k + 1] = w.1;
    }
    let linear = kernel
        .projected_signal(s.hypothesis.position_au, s.hypothesis.velocity_au_per_day, s.gm_au3_per_day2)
        .ok_or_else(|| CliError::failed(anyhow::anyhow!("unbound orbit")))?;
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
            let w = std::f64::consts::TAU * o.t_tdb_days / latens::units::JULIAN_YEAR_DAYS;
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
    let svg = ResidualChart::draw_pair_svg(&left, &right).map_err(|e| anyhow::anyhow!("drawing the charts: {e}"))?;
    std::fs::create_dir_all(out).with_context(|| format!("creating {}", out.display()))?;
    let png = out.join("residuals_null_vs_best.png");
    let tmp = out.join(format!(".residuals_null_vs_best.{}.tmp.png", std::process::id()));
    ResidualChart::draw_pair_png(&left, &right, &tmp).map_err(|e| anyhow::anyhow!("drawing {}: {e}", png.display()))?;
    std::fs::rename(&tmp, &png).with_context(|| format!("writing {}", png.display()))?;
    write_atomically(&out.join("residuals_null_vs_best.svg"), svg.as_bytes())?;
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

/// Leaves out the observations on the lines `--exclude` names (line
/// numbers of the observation file, `A-B` for a range); every named line
/// must hold an observation.
fn exclude_by_hand(
    observations: Vec<Observation>,
    spec: Option<&str>,
) -> Result<(Vec<Observation>, Vec<String>), CliError> {
    let Some(spec) = spec else { return Ok((observations, Vec::new())) };
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
    let line_of = |o: &Observation| o.source.rsplit_once(':').and_then(|(_, l)| l.parse::<usize>().ok());
    for l in &lines {
        if !observations.iter().any(|o| line_of(o) == Some(*l)) {
            let file = observations.first().and_then(|o| o.source.rsplit_once(':')).map_or("", |(f, _)| f);
            return Err(CliError::bad_input(anyhow::anyhow!("--exclude: line {l} of {file} holds no observation")));
        }
    }
    let (out, kept): (Vec<Observation>, Vec<Observation>) =
        observations.into_iter().partition(|o| line_of(o).is_some_and(|l| lines.contains(&l)));
    if kept.len() < 3 {
        return Err(CliError::bad_input(anyhow::anyhow!("--exclude leaves fewer than 3 observations")));
    }
    Ok((kept, out.into_iter().map(|o| o.source).collect()))
}

/// Chi-square drop above which a detection counts as strong enough to
/// recentre the kernel on its refined solution.
const STRONG_DELTA_CHI2: f64 = 500.0;

/// Rounds of refine-and-recentre at most.
const MAX_RECENTRE_ROUNDS: usize = 3;

/// The search on one set of observations: the null fit, the kernel, the
/// grid, the refinement on the full model and, for a detection, the kernel
/// recentred on the refined solution with the basins found on it.
struct SearchStage {
    observations: Vec<Observation>,
    null: ReferenceFit,
    geometry: Vec<ObservingGeometry>,
    /// The kernel about the null orbit (detection, alternatives).
    kernel: LinearKernel,
    result: latens::perturber::SearchResult,
    refined: Option<latens::perturber::refine::Refinement>,
    centred: Option<latens::perturber::refine::Recentred>,
    /// The basins the posterior starts from, drops against the null model.
    basins: Vec<Scored>,
    rounds: usize,
}

impl SearchStage {
    fn detected(&self) -> bool {
        self.result.false_alarm_probability() < DETECTION_FAP && self.result.grid_best_delta_chi2 > 0.0
    }

    /// Each observation's chi-square (both coordinates) against the best
    /// model: the refined perturber's full model for a detection, else the
    /// null model.
    fn chi2_per_observation(
        &self,
        model: &latens::dynamics::ForceModel,
        ephemeris: &dyn Ephemeris,
    ) -> Result<Vec<f64>, CliError> {
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
                .map_err(CliError::failed)?;
                m.perturbers = vec![r.perturber];
                m.predict(&r.tracked_state, false).map_err(CliError::failed)?;
                let pred = m.predict(&r.tracked_state, false).map_err(CliError::failed)?;
                latens::reference::whitened_residuals(&self.observations, &pred, &vec![true; n], &mut w);
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

fn search_stage(
    observations: Vec<Observation>,
    sites: &latens::io::observations::SiteTable,
    model: &latens::dynamics::ForceModel,
    ephemeris: &dyn Ephemeris,
    settings: &SearchSettings,
) -> Result<SearchStage, CliError> {
    use latens::perturber::refine::{recentre, refine};
    eprintln!("Fitting the reference orbit (no perturber) to {} observations...", observations.len());
    let null = fit_reference_orbit(&observations, sites, model, ephemeris, &INFER_REFERENCE_SETTINGS, None)
        .map_err(CliError::failed)?;
    let geometry = observing_geometry(&observations, sites, ephemeris).map_err(CliError::failed)?;
    let kernel =
        LinearKernel::build(&null, &observations, geometry.clone(), model, ephemeris).map_err(CliError::failed)?;
    let result = grid_search(&kernel, settings, &crate::cli::progress::Bars::new());
    let mut stage = SearchStage {
        observations,
        null,
        geometry,
        kernel,
        basins: result.basins.clone(),
        result,
        refined: None,
        centred: None,
        rounds: 0,
    };
    let Some(best) = stage.result.best().copied().filter(|b| b.gm_au3_per_day2 > 0.0) else {
        return Ok(stage);
    };
    let refine_from = |s: &Scored, stage: &SearchStage| {
        let start = Perturber {
            gm_au3_per_day2: s.gm_au3_per_day2,
            position_au: s.hypothesis.position_au,
            velocity_au_per_day: s.hypothesis.velocity_au_per_day,
        };
        refine(&stage.null, &stage.observations, &stage.geometry, model, ephemeris, start, settings.distance_au)
    };
    eprintln!("Refining the best solution on the full nonlinear model...");
    let mut current = match refine_from(&best, &stage) {
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
    // Follow the data into the nonlinear regime: recentre the kernel on the
    // refined solution, search again on it, and refine again when another
    // place scores better there; every basin of the final search is kept
    // for the posterior.
    let gm_earth = latens::units::EARTH_MASS_SOLAR * latens::units::GM_SUN_AU3_PER_DAY2;
    let gm_max = settings.mass_earth.1 * gm_earth;
    let quiet = SearchSettings { n_null: 0, ..settings.clone() };
    for round in 1..=MAX_RECENTRE_ROUNDS {
        eprintln!("Recentring the linear kernel on the refined solution (round {round}) and searching again...");
        let centred = recentre(
            &stage.kernel,
            stage.null.epoch_tdb_days,
            &current.tracked_state,
            &current.perturber,
            &stage.observations,
            &stage.geometry,
            model,
            ephemeris,
        )
        .map_err(CliError::failed)?;
        let again = grid_search(&centred.kernel, &quiet, &latens::progress::Quiet);
        let centre = latens::perturber::Hypothesis {
            position_au: current.perturber.position_au,
            velocity_au_per_day: current.perturber.velocity_au_per_day,
        };
        let mut scratch = vec![0.0; centred.kernel.n_residuals()];
        let mut basins: Vec<Scored> = latens::perturber::search::score(
            &centred.kernel,
            &centre,
            gm_max,
            settings.min_separation_au,
            &mut scratch,
        )
        .into_iter()
        .chain(again.basins.iter().copied())
        .map(|s| Scored { delta_chi2: s.delta_chi2 + centred.delta_chi2_offset, ..s })
        .collect();
        basins.sort_by(|a, b| b.delta_chi2.total_cmp(&a.delta_chi2));
        let centre_delta = stage.null.chi2 - current.chi2;
        // A better place elsewhere on the recentred kernel: refine it.
        let challenger = basins.iter().find(|b| {
            let apart = b.hypothesis.position_au.unit().dot(centre.position_au.unit()) < 1f64.to_radians().cos()
                || (b.hypothesis.position_au.norm() / centre.position_au.norm()).ln().abs() > 0.1;
            apart && b.delta_chi2 > centre_delta + 1.0
        });
        let moved = match challenger.copied() {
            Some(c) if round < MAX_RECENTRE_ROUNDS => match refine_from(&c, &stage) {
                Ok(r) if r.chi2 < current.chi2 - 0.5 => {
                    current = r;
                    true
                }
                _ => false,
            },
            _ => false,
        };
        stage.rounds = round;
        if !moved {
            // Distinct basins within the usual window of the best, as the grid keeps them.
            let kept = latens::perturber::search::distinct(
                basins.into_iter(),
                settings.basin_separation_deg,
                2.0,
                settings.basin_delta_chi2,
                settings.max_basins,
            );
            stage.basins = kept;
            stage.centred = Some(centred);
            break;
        }
    }
    stage.refined = Some(current);
    Ok(stage)
}

/// 95% upper limits on the mass, per band of heliocentric distance, from
/// the posterior samples of a non-detection (log-spaced bands over the
/// prior's range; bands with fewer than 50 samples are left out).
fn upper_limits(
    samples: &[super::posterior::DerivedSample],
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
