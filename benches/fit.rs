//! Cost of a reference-orbit fit (Levenberg-Marquardt on the full model with
//! light time and variational partials) on the observation pattern of
//! workload W1(a): 300 epochs over 30 years, 0.05" noise, started 1000 km
//! and 1 m/s from the truth. Median of 5 fits, one core for the model.
//!
//! Run: `cargo bench --bench fit`.

use std::time::Instant;

use latens::dynamics::kepler::{Elements, state_from_elements};
use latens::dynamics::{ForceModel, InitialState};
use latens::ephemeris::Vsop87;
use latens::frames::icrf_from_ecliptic;
use latens::io::observations::SiteTable;
use latens::reference::{ReferenceSettings, fit_reference_orbit};
use latens::simulate::{SurveyPlan, simulate_survey};
use latens::units::{GM_SUN_AU3_PER_DAY2, RAD_PER_DEG};

const T0: f64 = 9131.25;

fn main() {
    let model = ForceModel::outer_planets_with_inner_folded();
    let mut bodies = latens::astrometry::observer_ephemeris_bodies();
    bodies.extend(model.ephemeris_bodies());
    bodies.sort();
    bodies.dedup();
    let eph = model.tabulate(&Vsop87::new(), &bodies, (T0 - 16.0 * 365.25, T0 + 16.0 * 365.25)).expect("ephemeris");
    let el = Elements::from_semi_major_axis(
        44.0,
        0.1,
        12.0 * RAD_PER_DEG,
        80.0 * RAD_PER_DEG,
        150.0 * RAD_PER_DEG,
        20.0 * RAD_PER_DEG,
    )
    .expect("elements");
    let (r, v) = state_from_elements(GM_SUN_AU3_PER_DAY2, &el).expect("state");
    let (r, v) = (icrf_from_ecliptic(r), icrf_from_ecliptic(v));
    let init =
        InitialState { t0_tdb_days: T0, tracked_position_au: r, tracked_velocity_au_per_day: v, perturbers: vec![] };
    let times = (0..30)
        .flat_map(|y| (0..10).map(move |n| T0 - 15.0 * 365.25 + 365.25 * y as f64 + 120.0 + 3.0 * n as f64))
        .collect();
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
    let km = 1.0 / 149_597_870.7;
    let start = [r.x + 1000.0 * km, r.y, r.z, v.x, v.y + 86400.0 * 1e-3 * km, v.z];
    let settings = ReferenceSettings { epoch_tdb_days: Some(T0), ..ReferenceSettings::default() };
    let mut samples = Vec::new();
    let mut iterations = 0;
    for _ in 0..5 {
        let t = Instant::now();
        let fit = fit_reference_orbit(&obs, &sites, &model, &eph, &settings, Some(start)).expect("fit");
        samples.push(t.elapsed().as_secs_f64() * 1e3);
        iterations = fit.iterations;
        std::hint::black_box(fit.chi2);
    }
    samples.sort_by(f64::total_cmp);
    println!(
        "{{\"case\": \"fit_w1_300_obs\", \"median_ms\": {:.3}, \"iterations\": {iterations}, \"observations\": {}}}",
        samples[2],
        obs.len()
    );
}
