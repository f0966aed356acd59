//! The posterior's cost: 10^6 likelihood evaluations through the linear
//! kernel on a 600-observation survey (the W1(a) pattern with 20 epochs per
//! apparition), sampled by the tempered ensemble on all cores, with an
//! injected 5 Earth-mass perturber so the posterior is a real one.
//! Prints the wall time, evaluations per second, and autocorrelation-
//! normalised effective samples per second of the cold chain.
//!
//! Run: `cargo bench --bench posterior`.

use std::time::Instant;

use latens::dynamics::kepler::{Elements, state_from_elements};
use latens::dynamics::{ForceModel, InitialState, Perturber};
use latens::ephemeris::Vsop87;
use latens::frames::icrf_from_ecliptic;
use latens::io::observations::SiteTable;
use latens::perturber::{LinearKernel, SearchSettings, grid_search};
use latens::posterior::sampler::{SamplerSettings, SamplerState, autocorrelation_time, run};
use latens::posterior::{PerturberPosterior, PerturberPrior};
use latens::reference::{ReferenceSettings, fit_reference_orbit, observing_geometry};
use latens::simulate::{SurveyPlan, simulate_survey};
use latens::units::{EARTH_MASS_SOLAR, GM_SUN_AU3_PER_DAY2, RAD_PER_DEG};
use latens::vec3::Vec3;

const T0: f64 = 9131.25;

fn state(a: f64, e: f64, i: f64, node: f64, peri: f64, m: f64) -> (Vec3, Vec3) {
    let el =
        Elements::from_semi_major_axis(a, e, i * RAD_PER_DEG, node * RAD_PER_DEG, peri * RAD_PER_DEG, m * RAD_PER_DEG)
            .expect("elements");
    let (r, v) = state_from_elements(GM_SUN_AU3_PER_DAY2, &el).expect("state");
    (icrf_from_ecliptic(r), icrf_from_ecliptic(v))
}

fn main() {
    let model = ForceModel::outer_planets_with_inner_folded();
    let mut bodies = latens::astrometry::observer_ephemeris_bodies();
    bodies.extend(model.ephemeris_bodies());
    bodies.sort();
    bodies.dedup();
    let eph = model.tabulate(&Vsop87::new(), &bodies, (T0 - 16.0 * 365.25, T0 + 16.0 * 365.25)).expect("ephemeris");
    let (r, v) = state(44.0, 0.1, 12.0, 80.0, 150.0, 20.0);
    let (pr, pv) = state(75.0, 0.05, 20.0, 60.0, 40.0, 300.0);
    let init = InitialState {
        t0_tdb_days: T0,
        tracked_position_au: r,
        tracked_velocity_au_per_day: v,
        perturbers: vec![Perturber {
            gm_au3_per_day2: 5.0 * EARTH_MASS_SOLAR * GM_SUN_AU3_PER_DAY2,
            position_au: pr,
            velocity_au_per_day: pv,
        }],
    };
    let mut times = Vec::new();
    for year in 0..30 {
        for night in 0..20 {
            times.push(T0 - 15.0 * 365.25 + 365.25 * year as f64 + 120.0 + 1.5 * night as f64);
        }
    }
    let plan = SurveyPlan {
        times_tdb_days: times,
        site: "geocenter".into(),
        sigma_arcsec: 0.05,
        add_noise: true,
        min_elongation_deg: 0.0,
        seed: 3,
    };
    let sites = SiteTable::new();
    let obs = simulate_survey(&plan, &init, &model, &eph, &sites).expect("simulation");
    let settings = ReferenceSettings { epoch_tdb_days: Some(T0), ..ReferenceSettings::default() };
    let fit = fit_reference_orbit(&obs, &sites, &model, &eph, &settings, None).expect("fit");
    let geometry = observing_geometry(&obs, &sites, &eph).expect("geometry");
    let kernel = LinearKernel::build(&fit, &obs, geometry, &model, &eph).expect("kernel");
    let search = SearchSettings { n_null: 0, n_directions: 192, n_distances: 12, ..SearchSettings::default() };
    let grid = grid_search(&kernel, &search, &latens::progress::Quiet);
    let prior = PerturberPrior {
        mass_earth: search.mass_earth,
        distance_au: search.distance_au,
        max_eccentricity: 0.6,
        min_separation_au: search.min_separation_au,
        near_ecliptic_deg: None,
    };
    let posterior = PerturberPosterior::new(&kernel, prior);
    // 16 rungs x 32 walkers x 1954 steps = 1.0004e6 evaluations.
    let settings = SamplerSettings {
        n_walkers: 32,
        n_temperatures: 16,
        n_steps: 1954,
        burn_in: 780,
        thin: 2,
        seed: 1,
        ..SamplerSettings::default()
    };
    let start = posterior.starting_walkers(&grid.basins, &settings.initial_betas(), settings.n_walkers, 1, false);
    let state = SamplerState::new(&posterior, &settings, 0, &start).expect("start");
    let t = Instant::now();
    let states =
        run(&posterior, &settings, vec![state], None, latens::progress::Stage::Sampling, &latens::progress::Quiet)
            .expect("run");
    let seconds = t.elapsed().as_secs_f64();
    let evaluations = (settings.n_steps * settings.n_temperatures * settings.n_walkers) as f64;
    let tau = (0..7)
        .map(|p| autocorrelation_time(&states[0].walker_series(settings.burn_in, p)) * settings.thin as f64)
        .fold(0.0, f64::max);
    let effective = settings.n_walkers as f64 * (settings.n_steps - settings.burn_in) as f64 / tau;
    println!(
        "posterior_{}_obs: {evaluations:.0} likelihood evaluations in {seconds:.1} s wall on {} threads ({:.0} per second); \
         largest autocorrelation time {tau:.1} steps, {effective:.0} effective cold samples, {:.0} per second",
        obs.len(),
        rayon::current_num_threads(),
        evaluations / seconds,
        effective / seconds
    );
}
