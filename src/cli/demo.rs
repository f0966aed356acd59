//! `latens demo`: the built-in invented scenario.
//!
//! The scenario is invented: a distant minor body, here called Vesk, pulled
//! by an invented hidden planet, Orla (5 Earth masses, 33 au, inclined 28
//! degrees), and followed by an invented survey from an invented site. The demo runs the stages that
//! exist: it propagates Vesk under the Sun and the giant planets, simulates
//! the survey's astrometry with seeded noise, reads it back as any user's
//! file would be read, fits the reference orbit (starting from Gauss's
//! method, not from the truth) and writes the O-C products; and it says
//! plainly what it has not done yet.

use std::fmt::Write as _;

use anyhow::Context;

use super::CliError;
use super::args::DemoArgs;
use super::residuals::ResidualProducts;
use crate::dynamics::kepler::{Elements, elements_from_state, propagate, state_from_elements};
use crate::dynamics::{ForceModel, InitialState, Perturber, PropagationSettings, Propagator};
use crate::ephemeris::{Body, Ephemeris, Vsop87};
use crate::frames::{angular_separation, ecliptic_from_icrf, icrf_from_ecliptic, radec_from_vector};
use crate::io::observations::{SiteTable, read_observations};
use crate::io::write_atomically;
use crate::reference::{ReferenceSettings, fit_reference_orbit};
use crate::simulate::{SurveyPlan, simulate_survey};
use crate::time::{epoch_from_tdb_days, parse_epoch, tdb_days_from_j2000, utc_iso_from_epoch};
use crate::units::{GM_SUN_AU3_PER_DAY2, RAD_PER_ARCSEC, RAD_PER_DEG};
use crate::vec3::Vec3;

/// The invented tracked body's osculating heliocentric elements (ecliptic
/// J2000) at the scenario's reference epoch.
struct InventedBody {
    name: &'static str,
    reference_epoch: &'static str,
    a_au: f64,
    e: f64,
    i_deg: f64,
    node_deg: f64,
    peri_deg: f64,
    mean_anomaly_deg: f64,
}

const VESK: InventedBody = InventedBody {
    name: "Vesk",
    reference_epoch: "JD 2460370.5 TDB",
    a_au: 44.0,
    e: 0.12,
    i_deg: 17.3,
    node_deg: 112.4,
    peri_deg: 281.0,
    mean_anomaly_deg: 35.0,
};

/// The invented hidden planet that pulls on Vesk: its mass and osculating
/// heliocentric elements (ecliptic J2000) at the same reference epoch. Five
/// Earth masses on an orbit inclined 28 degrees, about 20 au from Vesk.
struct HiddenPlanet {
    name: &'static str,
    mass_earth: f64,
    a_au: f64,
    e: f64,
    i_deg: f64,
    node_deg: f64,
    peri_deg: f64,
    mean_anomaly_deg: f64,
}

const ORLA: HiddenPlanet = HiddenPlanet {
    name: "Orla",
    mass_earth: 5.0,
    a_au: 33.0,
    e: 0.08,
    i_deg: 28.0,
    node_deg: 40.0,
    peri_deg: 0.0,
    mean_anomaly_deg: 20.0,
};

/// First and last night of the invented survey, and the spacing of its visits.
const SURVEY_START_UTC: &str = "2014-03-01T06:00:00Z";
const SURVEY_END_UTC: &str = "2034-03-01T06:00:00Z";
const VISIT_SPACING_DAYS: f64 = 30.4375;

/// Heliocentric ICRF state of an invented body from its heliocentric ecliptic
/// J2000 elements (au, degrees), with the Sun's GM.
fn icrf_state(
    a_au: f64,
    e: f64,
    i_deg: f64,
    node_deg: f64,
    peri_deg: f64,
    mean_deg: f64,
) -> Result<(Vec3, Vec3), CliError> {
    let elements = Elements::from_semi_major_axis(
        a_au,
        e,
        i_deg * RAD_PER_DEG,
        node_deg * RAD_PER_DEG,
        peri_deg * RAD_PER_DEG,
        mean_deg * RAD_PER_DEG,
    )
    .map_err(CliError::failed)?;
    let (r, v) = state_from_elements(GM_SUN_AU3_PER_DAY2, &elements).map_err(CliError::failed)?;
    Ok((icrf_from_ecliptic(r), icrf_from_ecliptic(v)))
}

pub(super) fn run(args: &DemoArgs) -> Result<(), CliError> {
    let body = &VESK;
    let t_ref = tdb_days_from_j2000(parse_epoch(body.reference_epoch).map_err(CliError::failed)?);
    let t_start = tdb_days_from_j2000(parse_epoch(SURVEY_START_UTC).map_err(CliError::failed)?);
    let t_end = tdb_days_from_j2000(parse_epoch(SURVEY_END_UTC).map_err(CliError::failed)?);

    let (r0, v0) = icrf_state(body.a_au, body.e, body.i_deg, body.node_deg, body.peri_deg, body.mean_anomaly_deg)?;

    let mut epochs = Vec::new();
    let mut t = t_start;
    while t <= t_end + 1e-9 {
        epochs.push(t);
        t += VISIT_SPACING_DAYS;
    }
    // The Sun with the inner planets folded in, Jupiter..Neptune from the
    // embedded ephemeris, tabulated once; the Earth for the observer.
    let model = ForceModel::outer_planets_with_inner_folded();
    let ephemeris =
        model.tabulate(&Vsop87::new(), &[Body::Earth], (t_start - 1.0, t_end + 1.0)).map_err(CliError::failed)?;
    let hidden = &ORLA;
    let (hr, hv) =
        icrf_state(hidden.a_au, hidden.e, hidden.i_deg, hidden.node_deg, hidden.peri_deg, hidden.mean_anomaly_deg)?;
    let hidden_state = Perturber {
        gm_au3_per_day2: hidden.mass_earth * crate::units::EARTH_MASS_SOLAR * GM_SUN_AU3_PER_DAY2,
        position_au: hr,
        velocity_au_per_day: hv,
    };
    let initial = InitialState {
        t0_tdb_days: t_ref,
        tracked_position_au: r0,
        tracked_velocity_au_per_day: v0,
        perturbers: vec![hidden_state],
    };
    let trajectory = Propagator::new(&model, &ephemeris, PropagationSettings::fast())
        .and_then(|mut p| p.propagate(&initial, &epochs))
        .map_err(CliError::failed)?;

    let mut csv = String::from(
        "epoch_utc,t_tdb_days,ra_deg,dec_deg,heliocentric_distance_au,geocentric_distance_au,solar_elongation_deg,planetary_shift_arcsec\n",
    );
    let mut largest_shift_arcsec: f64 = 0.0;
    for (e, &t) in epochs.iter().enumerate() {
        let r = trajectory.tracked[e].position_au;
        let (r_two_body, _) = propagate(GM_SUN_AU3_PER_DAY2, r0, v0, t - t_ref).map_err(CliError::failed)?;
        let earth = ephemeris.heliocentric_position_au(Body::Earth, t).map_err(CliError::failed)?;
        let geo = r - earth;
        let d = radec_from_vector(geo);
        let elongation = angular_separation(geo, -earth) / RAD_PER_DEG;
        // How far the giant planets have moved the body on the sky, compared
        // with a two-body orbit about the Sun from the same starting state.
        let shift = angular_separation(geo, r_two_body - earth) / RAD_PER_ARCSEC;
        largest_shift_arcsec = largest_shift_arcsec.max(shift);
        let _ = writeln!(
            csv,
            "{},{:.6},{:.7},{:.7},{:.6},{:.6},{:.3},{:.4}",
            utc_iso_from_epoch(epoch_from_tdb_days(t)),
            t,
            d.ra_rad / RAD_PER_DEG,
            d.dec_rad / RAD_PER_DEG,
            r.norm(),
            geo.norm(),
            elongation,
            shift
        );
    }
    let visits = epochs.len();
    let track_path = args.out.join("track.csv");
    write_atomically(&track_path, csv.as_bytes()).context("writing the demo track").map_err(CliError::failed)?;

    // The invented survey: an invented site, a visit every 6 days while Vesk
    // is more than 100 degrees from the Sun, 0.08" astrometry (seeded).
    let survey = simulate_survey_files(&initial, &model, &ephemeris, t_start, t_end, &args.out)?;
    let sites = SiteTable::read(&survey.sites_path).map_err(CliError::failed)?;
    let observations = read_observations(&survey.observations_path, &sites, 3).map_err(CliError::failed)?;
    let fit = fit_reference_orbit(
        &observations,
        &sites,
        &model,
        &ephemeris,
        &ReferenceSettings { epoch_tdb_days: Some(t_ref), ..ReferenceSettings::default() },
        None,
    )
    .map_err(CliError::failed)?;
    let products = ResidualProducts::build(&fit, &observations, &model, ephemeris.description());
    let residual_dir = args.out.join("residuals");
    products.write(&residual_dir).map_err(CliError::failed)?;
    let recovered = Vec3::new(fit.state[0], fit.state[1], fit.state[2]);

    // Round trip of the elements through the ICRF state, as a visible check.
    let back = elements_from_state(GM_SUN_AU3_PER_DAY2, ecliptic_from_icrf(r0), ecliptic_from_icrf(v0))
        .map_err(CliError::failed)?;

    println!("Latens demo: invented scenario, tracked body {}", body.name);
    println!(
        "  reference orbit (heliocentric ecliptic J2000, at {}): a = {:.3} au, e = {:.4}, i = {:.3} deg",
        utc_iso_from_epoch(epoch_from_tdb_days(t_ref)),
        back.semi_major_axis_au(),
        back.eccentricity,
        back.inclination_rad / RAD_PER_DEG
    );
    println!("  embedded ephemeris: {}", ephemeris.description());
    println!(
        "  propagated under the Sun (inner planets folded in) and Jupiter..Neptune: {} steps, {} force evaluations",
        trajectory.stats.steps, trajectory.stats.force_evaluations
    );
    println!(
        "  computed {visits} geocentric positions, one every {VISIT_SPACING_DAYS} days from {SURVEY_START_UTC} to {SURVEY_END_UTC}"
    );
    println!(
        "  the giant planets move {} by up to {largest_shift_arcsec:.1} arcsec from a two-body orbit about the Sun",
        body.name
    );
    println!(
        "  simulated {} observations from the invented site {} with {SURVEY_SIGMA_ARCSEC}\" noise (seed {SURVEY_SEED})",
        observations.len(),
        SURVEY_SITE.0
    );
    println!(
        "  (the survey's positions include the pull of an invented hidden planet, {}, which the fit does not know about)",
        hidden.name
    );
    println!("  fitted the reference orbit from the observations alone ({}):", fit.start);
    for line in products.summary.lines() {
        println!("  {line}");
    }
    println!(
        "  the fitted position at the reference epoch is {:.0} km from the true one",
        (recovered - r0).norm() * crate::units::AU_KM
    );
    // The perturber search on the same survey.
    println!("Searching the residuals for an unseen perturber (latens infer):");
    let search_dir = args.out.join("search");
    let summary = super::infer::run(&super::args::InferArgs {
        input: super::args::InputArgs {
            obs: survey.observations_path.clone(),
            sites: Some(survey.sites_path.clone()),
            known: "jupiter,saturn,uranus,neptune".into(),
            ephemeris: "builtin".into(),
        },
        search_epoch: None,
        mass_earth: "0.01:5000".into(),
        distance_au: "5:500".into(),
        nulls: 500,
        directions: 768,
        distances: 20,
        seed: SURVEY_SEED,
        out: search_dir.clone(),
        no_posterior: false,
        posterior_steps: 1500,
        walkers: 32,
        temperatures: 16,
        runs: 2,
        max_eccentricity: 0.6,
        resume: None,
    })?;
    // Where the hidden planet really is at the search epoch, against the
    // search's basins (the demo knows the truth; a user would not).
    let search_epoch = observations.last().map(|o| o.t_tdb_days).unwrap_or(t_end);
    let truth_traj = Propagator::new(&model, &ephemeris, PropagationSettings::fast())
        .and_then(|mut p| p.propagate(&initial, &[search_epoch]))
        .map_err(CliError::failed)?;
    let earth = ephemeris.heliocentric_position_au(Body::Earth, search_epoch).map_err(CliError::failed)?;
    let truth_dir = truth_traj.perturbers[0][0].position_au - earth;
    let truth_place = radec_from_vector(truth_dir);
    println!(
        "  the invented hidden planet {} ({} Earth masses) is really at RA {:.2} deg, Dec {:+.2} deg at the search epoch",
        hidden.name,
        hidden.mass_earth,
        truth_place.ra_rad / RAD_PER_DEG,
        truth_place.dec_rad / RAD_PER_DEG
    );
    for (k, b) in summary.basins.iter().enumerate() {
        let place = crate::frames::RaDec { ra_rad: b.ra_deg * RAD_PER_DEG, dec_rad: b.dec_deg * RAD_PER_DEG };
        let sep = crate::frames::angular_separation_radec(place, truth_place) / RAD_PER_DEG;
        println!("  basin {}: {sep:.1} deg from where {} really is", k + 1, hidden.name);
    }
    // What this survey could have revealed at all.
    println!("Mapping which perturber masses at which distances this survey could reveal (latens sensitivity):");
    let sensitivity_dir = args.out.join("sensitivity");
    super::sensitivity::run(&super::args::SensitivityArgs {
        command: None,
        input: Some(super::args::InputArgs {
            obs: survey.observations_path.clone(),
            sites: Some(survey.sites_path.clone()),
            known: "jupiter,saturn,uranus,neptune".into(),
            ephemeris: "builtin".into(),
        }),
        mass_earth: "0.1:10000".into(),
        distance_au: "10:1000".into(),
        grid: "24:24".into(),
        trials: 48,
        fap: super::infer::DETECTION_FAP,
        near_ecliptic: None,
        orbit: None,
        nulls: 500,
        directions: 768,
        distances: 20,
        shard: None,
        seed: SURVEY_SEED,
        out: sensitivity_dir.clone(),
    })?;
    println!("What this demo did not do yet: the search products (sky map, credible regions, search chart).");
    println!("Files written:");
    println!(
        "  {}  geocentric RA/Dec (ICRF), distances, solar elongation and the planets' shift of {} at each visit",
        track_path.display(),
        body.name
    );
    println!("  {}  the simulated survey astrometry (Latens CSV)", survey.observations_path.display());
    println!("  {}  the invented observing site", survey.sites_path.display());
    println!(
        "  {}/fit.json, residuals.csv, residuals.png, residuals.svg  the fitted orbit and its O-C",
        residual_dir.display()
    );
    println!(
        "  {}/summary.json, residuals_null_vs_best.png, .svg, null_fit.json  the perturber search and its verdict; posterior.csv, posterior_corner.png/.svg, posterior_trace.png/.svg  the posterior",
        search_dir.display()
    );
    println!(
        "  {}/sensitivity.csv, sensitivity.png, .svg  detection probability over perturber mass and distance",
        sensitivity_dir.display()
    );
    Ok(())
}

/// The invented observing site: name, east longitude (deg), latitude (deg), height (m).
const SURVEY_SITE: (&str, f64, f64, f64) = ("tessel-peak", -70.21, -30.47, 2380.0);
const SURVEY_SIGMA_ARCSEC: f64 = 0.08;
const SURVEY_SEED: u64 = 2026;
const SURVEY_CADENCE_DAYS: f64 = 6.0;

struct Survey {
    observations_path: std::path::PathBuf,
    sites_path: std::path::PathBuf,
}

/// Simulates the invented survey (a visit every 6 days, varied a little in
/// time of night, kept while the body is over 100 degrees from the Sun) and
/// writes the observations and the site as input files.
fn simulate_survey_files(
    initial: &InitialState,
    model: &ForceModel,
    ephemeris: &dyn Ephemeris,
    t_start: f64,
    t_end: f64,
    out: &std::path::Path,
) -> Result<Survey, CliError> {
    let (name, lon, lat, height) = SURVEY_SITE;
    let mut sites = SiteTable::new();
    sites.insert(crate::io::observations::Site { name: name.into(), lon_deg: lon, lat_deg: lat, height_m: height });
    let mut times = Vec::new();
    let mut t = t_start;
    let mut k = 0u32;
    while t <= t_end {
        times.push(t + 0.05 * f64::from(k % 5));
        t += SURVEY_CADENCE_DAYS;
        k += 1;
    }
    let plan = SurveyPlan {
        times_tdb_days: times,
        site: name.into(),
        sigma_arcsec: SURVEY_SIGMA_ARCSEC,
        add_noise: true,
        min_elongation_deg: 100.0,
        seed: SURVEY_SEED,
    };
    let observations = simulate_survey(&plan, initial, model, ephemeris, &sites).map_err(CliError::failed)?;
    let mut csv = String::from(
        "# Invented survey of the invented body Vesk (latens demo); 0.08 arcsec Gaussian noise, seed 2026\n",
    );
    csv.push_str("epoch_utc,ra_deg,dec_deg,sigma_ra_arcsec,sigma_dec_arcsec,site\n");
    for o in &observations {
        let _ = writeln!(
            csv,
            "{},{:.9},{:.9},{},{},{}",
            o.epoch_text,
            o.ra_rad / RAD_PER_DEG,
            o.dec_rad / RAD_PER_DEG,
            o.sigma_ra_arcsec,
            o.sigma_dec_arcsec,
            o.site
        );
    }
    let observations_path = out.join("observations.csv");
    let sites_path = out.join("sites.csv");
    write_atomically(&observations_path, csv.as_bytes()).map_err(CliError::failed)?;
    let sites_csv = format!("name,lon_deg,lat_deg,height_m\n{name},{lon},{lat},{height}\n");
    write_atomically(&sites_path, sites_csv.as_bytes()).map_err(CliError::failed)?;
    Ok(Survey { observations_path, sites_path })
}
