//! The simulator: its noise-free places equal the propagation's (here a
//! two-body orbit, whose propagation agrees with REBOUND in
//! reference_kepler.rs), and its noise has the stated statistics (seeded).

use latens::astrometry::astrometric_direction;
use latens::dynamics::kepler::{Elements, propagate, state_from_elements};
use latens::dynamics::{ForceModel, InitialState};
use latens::ephemeris::Vsop87;
use latens::frames::icrf_from_ecliptic;
use latens::io::observations::SiteTable;
use latens::reference::observing_geometry;
use latens::simulate::{SurveyPlan, simulate_survey};
use latens::units::{C_AU_PER_DAY, GM_SUN_AU3_PER_DAY2, RAD_PER_ARCSEC, RAD_PER_DEG};

const T0: f64 = 8766.0;

fn setup() -> (ForceModel, latens::ephemeris::Tabulated, InitialState, Vec<f64>) {
    let model = ForceModel::sun_only();
    let mut bodies = latens::astrometry::observer_ephemeris_bodies();
    bodies.sort();
    bodies.dedup();
    let eph = model.tabulate(&Vsop87::new(), &bodies, (T0 - 3700.0, T0 + 3700.0)).unwrap();
    let el = Elements::from_semi_major_axis(
        39.0,
        0.2,
        21.0 * RAD_PER_DEG,
        150.0 * RAD_PER_DEG,
        30.0 * RAD_PER_DEG,
        80.0 * RAD_PER_DEG,
    )
    .unwrap();
    let (r, v) = state_from_elements(GM_SUN_AU3_PER_DAY2, &el).unwrap();
    let init = InitialState {
        t0_tdb_days: T0,
        tracked_position_au: icrf_from_ecliptic(r),
        tracked_velocity_au_per_day: icrf_from_ecliptic(v),
        perturbers: vec![],
    };
    let times = (0..400).map(|k| T0 - 3600.0 + 18.0 * k as f64).collect();
    (model, eph, init, times)
}

#[test]
fn noise_free_places_equal_the_two_body_propagation() {
    let (model, eph, init, times) = setup();
    let plan = SurveyPlan {
        times_tdb_days: times,
        site: "geocenter".into(),
        sigma_arcsec: 0.1,
        add_noise: false,
        min_elongation_deg: 0.0,
        seed: 1,
    };
    let sites = SiteTable::new();
    let obs = simulate_survey(&plan, &init, &model, &eph, &sites).unwrap();
    let geometry = observing_geometry(&obs, &sites, &eph).unwrap();
    let mut worst: f64 = 0.0;
    for (o, g) in obs.iter().zip(&geometry) {
        // Light time solved here by iterating the two-body solution.
        let mut emit = o.t_tdb_days;
        for _ in 0..6 {
            let (r, _) =
                propagate(GM_SUN_AU3_PER_DAY2, init.tracked_position_au, init.tracked_velocity_au_per_day, emit - T0)
                    .unwrap();
            emit = o.t_tdb_days - (r - g.observer_au).norm() / C_AU_PER_DAY;
        }
        let (r, v) =
            propagate(GM_SUN_AU3_PER_DAY2, init.tracked_position_au, init.tracked_velocity_au_per_day, emit - T0)
                .unwrap();
        let (_, _, want) = astrometric_direction(g, emit, r, v);
        let dra = latens::units::wrap_pi(o.ra_rad - want.ra_rad) * want.dec_rad.cos();
        let d = (dra * dra + (o.dec_rad - want.dec_rad).powi(2)).sqrt() / RAD_PER_ARCSEC;
        worst = worst.max(d);
    }
    // 0.01 mas: far below any survey's noise (the propagator's tolerance
    // and the light-time iteration's convergence; measured 1e-4 mas or so).
    assert!(worst < 1e-5, "worst difference {worst} arcsec");
}

#[test]
fn noise_has_the_stated_statistics_and_follows_the_seed() {
    let (model, eph, init, times) = setup();
    let sites = SiteTable::new();
    let plan = |noise: bool, seed: u64| SurveyPlan {
        times_tdb_days: times.clone(),
        site: "geocenter".into(),
        sigma_arcsec: 0.2,
        add_noise: noise,
        min_elongation_deg: 0.0,
        seed,
    };
    let clean = simulate_survey(&plan(false, 1), &init, &model, &eph, &sites).unwrap();
    let noisy = simulate_survey(&plan(true, 7), &init, &model, &eph, &sites).unwrap();
    let again = simulate_survey(&plan(true, 7), &init, &model, &eph, &sites).unwrap();
    let other = simulate_survey(&plan(true, 8), &init, &model, &eph, &sites).unwrap();
    assert!(noisy.iter().zip(&again).all(|(a, b)| a.ra_rad == b.ra_rad && a.dec_rad == b.dec_rad));
    assert!(noisy.iter().zip(&other).any(|(a, b)| a.ra_rad != b.ra_rad));
    let z: Vec<f64> = noisy
        .iter()
        .zip(&clean)
        .flat_map(|(n, c)| {
            let dra = latens::units::wrap_pi(n.ra_rad - c.ra_rad) * c.dec_rad.cos() / RAD_PER_ARCSEC / 0.2;
            [dra, (n.dec_rad - c.dec_rad) / RAD_PER_ARCSEC / 0.2]
        })
        .collect();
    let n = z.len() as f64;
    let mean = z.iter().sum::<f64>() / n;
    let var = z.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0);
    // Standard normal: the mean within 4/sqrt(n), the variance within
    // 4 sqrt(2/n) of 1.
    assert!(mean.abs() < 4.0 / n.sqrt(), "mean {mean}");
    assert!((var - 1.0).abs() < 4.0 * (2.0 / n).sqrt(), "variance {var}");
}
