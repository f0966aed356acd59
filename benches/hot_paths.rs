//! Criterion benchmarks of the hot paths, on the W1(a) observation pattern
//! (300 epochs over 30 years of an invented body at 44 au):
//! one kernel hypothesis, one posterior likelihood, one sampler step, one
//! fast propagation with a perturber, and a sky map of 8000 directions.
//!
//! Run: `cargo bench --bench hot_paths` (reports in target/criterion).

use std::hint::black_box;

use criterion::{Criterion, criterion_group, criterion_main};
use latens::dynamics::kepler::{Elements, state_from_elements};
use latens::dynamics::{ForceModel, InitialState, Perturber, PropagationSettings, Propagator};
use latens::ephemeris::{Tabulated, Vsop87};
use latens::frames::icrf_from_ecliptic;
use latens::io::observations::SiteTable;
use latens::perturber::{KeplerOrbit, LinearKernel};
use latens::posterior::sampler::{SamplerSettings, SamplerState, Target, advance};
use latens::posterior::{PerturberPosterior, PerturberPrior, PerturberSample};
use latens::reference::{ReferenceSettings, fit_reference_orbit, observing_geometry};
use latens::simulate::{SurveyPlan, simulate_survey};
use latens::skymap::SkyMap;
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

struct Setup {
    model: ForceModel,
    eph: Tabulated,
    init: InitialState,
    epochs: Vec<f64>,
    kernel: LinearKernel,
}

fn setup() -> Setup {
    let model = ForceModel::outer_planets_with_inner_folded();
    let mut bodies = latens::astrometry::observer_ephemeris_bodies();
    bodies.extend(model.ephemeris_bodies());
    bodies.sort();
    bodies.dedup();
    let eph = model.tabulate(&Vsop87::new(), &bodies, (T0 - 16.0 * 365.25, T0 + 16.0 * 365.25)).expect("ephemeris");
    let (r, v) = state(44.0, 0.1, 12.0, 80.0, 150.0, 20.0);
    let (pr, pv) = state(75.0, 0.05, 25.0, 200.0, 40.0, 300.0);
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
    let epochs: Vec<f64> = (0..30)
        .flat_map(|y| (0..10).map(move |n| T0 - 15.0 * 365.25 + 365.25 * y as f64 + 120.0 + 3.0 * n as f64))
        .collect();
    let plan = SurveyPlan {
        times_tdb_days: epochs.clone(),
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
    Setup { model, eph, init, epochs, kernel }
}

fn benches(c: &mut Criterion) {
    let s = setup();
    let p = s.init.perturbers[0];
    let orbit =
        KeplerOrbit::from_state(s.kernel.central_gm(), p.position_au, p.velocity_au_per_day, T0).expect("orbit");
    let mut out = vec![0.0; s.kernel.n_residuals()];
    c.bench_function("kernel_signal_300_obs", |b| b.iter(|| black_box(s.kernel.signal(black_box(&orbit), &mut out))));

    let prior = PerturberPrior {
        mass_earth: (0.01, 5000.0),
        distance_au: (5.0, 500.0),
        max_eccentricity: 0.6,
        min_separation_au: 2.0,
        near_ecliptic_deg: None,
    };
    let posterior = PerturberPosterior::new(&s.kernel, prior);
    let x = PerturberSample {
        gm_au3_per_day2: p.gm_au3_per_day2,
        position_au: p.position_au,
        velocity_au_per_day: p.velocity_au_per_day,
    }
    .to_params();
    c.bench_function("posterior_log_likelihood_300_obs", |b| {
        b.iter(|| black_box(posterior.log_likelihood(black_box(&x))))
    });

    let settings = SamplerSettings {
        n_walkers: 32,
        n_temperatures: 8,
        n_steps: 1_000_000,
        burn_in: 10,
        ..SamplerSettings::default()
    };
    let mut rng = <rand::rngs::StdRng as rand::SeedableRng>::seed_from_u64(1);
    let start: Vec<Vec<Vec<f64>>> =
        settings.initial_betas().iter().map(|_| (0..32).map(|_| posterior.draw_prior(&mut rng)).collect()).collect();
    let mut st = Some(SamplerState::new(&posterior, &settings, 0, &start).expect("start"));
    c.bench_function("sampler_step_8x32_walkers", |b| {
        b.iter(|| {
            let next = advance(st.take().expect("state"), &posterior, &settings);
            st = Some(next);
        })
    });

    let mut prop = Propagator::new(&s.model, &s.eph, PropagationSettings::fast()).expect("propagator");
    c.bench_function("propagate_w1a_fast", |b| {
        b.iter(|| black_box(prop.propagate(&s.init, &s.epochs).expect("propagate")))
    });

    let dirs: Vec<Vec3> = (0..8000)
        .map(|k| {
            let t = k as f64 * 0.618_034;
            Vec3::new((t * 7.0).cos(), (t * 7.0).sin(), (k as f64 / 8000.0) * 0.3).unit()
        })
        .collect();
    c.bench_function("skymap_8000_samples", |b| b.iter(|| black_box(SkyMap::from_directions(black_box(&dirs)))));
}

criterion_group! {
    name = hot_paths;
    config = Criterion::default().sample_size(20);
    targets = benches
}
criterion_main!(hot_paths);
