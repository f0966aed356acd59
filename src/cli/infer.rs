//! `latens infer`: does an unseen perturber explain the residuals, and where
//! is it? (Grid search through the linear kernel, basins, false-alarm
//! probability by null simulation.)

use std::fmt::Write as _;
use std::path::Path;

use anyhow::Context;

use super::CliError;
use super::args::InferArgs;
use super::residuals::{ResidualProducts, force_model, load_ephemeris, orbit_file, parse_known, read_inputs};
use crate::astrometry::{ObservingGeometry, astrometric_direction, sun_barycentric_velocity};
use crate::dynamics::Perturber;
use crate::dynamics::kepler::elements_from_state;
use crate::ephemeris::{Body, Ephemeris, SpkFile, Vsop87};
use crate::frames::{angular_separation, ecliptic_from_icrf};
use crate::io::observations::Observation;
use crate::io::results::{
    DetectionFile, InferSettingsFile, InferSummary, NullModelFile, PerturberFile, SearchStatsFile,
};
use crate::io::write_atomically;
use crate::perturber::{KeplerOrbit, LinearKernel, Scored, SearchSettings, grid_search};
use crate::reference::{OrbitModel, ReferenceFit, ReferenceSettings, fit_reference_orbit, observing_geometry, whiten};
use crate::report::residual_chart::ResidualChart;
use crate::time::{epoch_from_tdb_days, parse_epoch, tdb_days_from_j2000, utc_iso_from_epoch};
use crate::units::{J2000_JD, RAD_PER_DEG};
use crate::vec3::Vec3;

/// False-alarm probability below which a perturber counts as detected: the
/// two-sided 3-sigma Gaussian tail (common practice).
pub const DETECTION_FAP: f64 = 0.0027;

/// The null fit of `infer` sets aside only gross blunders (chi-square above
/// 100 in the two coordinates, 10 sigma): a perturber's signal makes
/// residuals of several sigma over whole seasons, and the usual 5-sigma
/// rejection of `latens residuals` would set aside the very observations
/// that carry it (measured on the demo: 68 of 520 at 5 sigma, which moved
/// the posterior 20 deg away from the truth).
const INFER_REFERENCE_SETTINGS: ReferenceSettings =
    ReferenceSettings { epoch_tdb_days: None, reject_chi2: 100.0, readmit_chi2: 64.0, max_rounds: 10 };

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
    let known = parse_known(&args.input.known).map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
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
        (args.nongrav_prior, "--nongrav-prior"),
        (args.offset_prior, "--offset-prior"),
        (args.max_eccentricity, "--max-eccentricity"),
    ] {
        if !(v.is_finite() && v > 0.0) || (name == "--max-eccentricity" && v >= 1.0) {
            return Err(CliError::bad_input(anyhow::anyhow!(
                "{name} must be positive (and below 1 for an eccentricity), got {v}"
            )));
        }
    }
    let model = force_model(&known);
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

    eprintln!("Fitting the reference orbit (no perturber) to {} observations...", observations.len());
    let null = fit_reference_orbit(&observations, &sites, &model, ephemeris.as_ref(), &INFER_REFERENCE_SETTINGS, None)
        .map_err(CliError::failed)?;
    let geometry = observing_geometry(&observations, &sites, ephemeris.as_ref()).map_err(CliError::failed)?;
    let kernel = LinearKernel::build(&null, &observations, geometry.clone(), &model, ephemeris.as_ref())
        .map_err(CliError::failed)?;
    if args.directions < 12 || args.distances < 2 {
        return Err(CliError::bad_input(anyhow::anyhow!(
            "--directions must be at least 12 and --distances at least 2"
        )));
    }
    let settings = SearchSettings {
        mass_earth: mass,
        distance_au: distance,
        n_null: args.nulls,
        seed: args.seed,
        n_directions: args.directions,
        n_distances: args.distances,
        ..SearchSettings::default()
    };
    let n_total = crate::perturber::search::hypotheses(&settings, kernel.central_gm()).len();
    let bar = indicatif::ProgressBar::new(n_total as u64);
    bar.set_style(
        indicatif::ProgressStyle::with_template("searching {bar:40} {pos}/{len} hypotheses ({eta} left)")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    let result = grid_search(&kernel, &settings, &|n| bar.set_position(n as u64));
    bar.finish_and_clear();

    let fap = result.false_alarm_probability();
    let largest_null = result.null_maxima.iter().copied().fold(0.0, f64::max);
    let mut warnings = null.warnings.clone();
    let described: Vec<PerturberFile> = result
        .basins
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
        if d.solar_elongation_deg < SUN_WARNING_DEG {
            warnings.push(format!(
                "basin {} lies {:.0} deg from the Sun at the search epoch: pointing a telescope near the Sun can destroy eyes \
                 and instruments; observe it only with proper solar safeguards, after sunset, or wait for it to move away",
                k + 1,
                d.solar_elongation_deg
            ));
        }
        // Only worth saying for a solution that stands out from the noise.
        if d.linearisation_error_fraction > 0.05 && result.false_alarm_probability() < 0.05 {
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
    // Refine the best solution on the full nonlinear model.
    let refined = match result.best() {
        Some(b) if b.gm_au3_per_day2 > 0.0 => {
            eprintln!("Refining the best solution on the full nonlinear model...");
            let start = Perturber {
                gm_au3_per_day2: b.gm_au3_per_day2,
                position_au: b.hypothesis.position_au,
                velocity_au_per_day: b.hypothesis.velocity_au_per_day,
            };
            match crate::perturber::refine::refine(&null, &observations, &geometry, &model, ephemeris.as_ref(), start) {
                Ok(r) => Some(refined_file(&r, &null)),
                Err(e) => {
                    warnings.push(format!("the nonlinear refinement failed ({e}); the grid solution stands"));
                    None
                }
            }
        }
        _ => None,
    };
    let detected = fap < DETECTION_FAP && best_delta > 0.0;
    // A signal that repeats with the year points at a systematic error tied
    // to the Earth's motion (a catalogue or reduction error), not at a
    // planet, whose pull changes slowly.
    let annual = annual_share(&null, &observations, best_delta);
    let yearly = annual > ANNUAL_SUSPICION;
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
            kernel: &kernel,
            observations: &observations,
            geometry: &geometry,
            model: &model,
            ephemeris: ephemeris.as_ref(),
            wide: wide.as_ref(),
            search_epoch,
            basins: &result.basins,
            mass_earth: mass,
            distance_au: distance,
            min_separation_au: settings.min_separation_au,
        },
    )?;
    warnings.extend(stage.warnings.iter().cloned());
    let search_products = if stage.samples.is_empty() {
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
        && ex.best != "an unseen perturber"
    {
        let lead =
            if yearly { "; the best-supported explanation is" } else { "; but the data favour another explanation:" };
        verdict.push_str(&format!("{lead} {} ({})", ex.best, ex.strength));
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
        refined_best_fit: refined,
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
    if described.len() > 1 {
        let _ = writeln!(
            text,
            "  Several basins fit almost equally well: mass, distance and direction are not all pinned down by these data."
        );
    }
    text.push_str(&stage.text);
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

fn refined_file(r: &crate::perturber::refine::Refinement, null: &ReferenceFit) -> crate::io::results::RefinedFile {
    let gm_earth = crate::units::EARTH_MASS_SOLAR * crate::units::GM_SUN_AU3_PER_DAY2;
    let p = &r.perturber;
    let el = elements_from_state(
        crate::units::GM_SUN_AU3_PER_DAY2,
        ecliptic_from_icrf(p.position_au),
        ecliptic_from_icrf(p.velocity_au_per_day),
    )
    .ok();
    let deg = |x: f64| x / RAD_PER_DEG;
    crate::io::results::RefinedFile {
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
    model: &crate::dynamics::ForceModel,
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
    model: &crate::dynamics::ForceModel,
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
        let w = whiten(&observations[k], crate::reference::residual_arcsec_between(&p1[k].radec, &p0[k].radec));
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

/// The share of the null residuals' excess chi-square (over its degrees of
/// freedom, or over the best solution's drop if larger) that a constant plus
/// a one-year sinusoid in each coordinate removes.
fn annual_share(null: &ReferenceFit, observations: &[Observation], best_delta: f64) -> f64 {
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
    removed / excess
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
    let years: Vec<f64> = observations.iter().map(|o| 2000.0 + o.t_tdb_days / crate::units::JULIAN_YEAR_DAYS).collect();
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
