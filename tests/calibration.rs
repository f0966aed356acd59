//! Calibration of the perturber posterior on invented injections: perturbers
//! drawn from the prior, their linear signal plus unit Gaussian noise as the
//! data, and the sampler's 68% and 90% intervals of mass and of sky
//! direction must contain the truth at those rates (binomial errors). With
//! the data made by the likelihood's own model, a correct sampler and prior
//! give exact coverage; a bias shows as a rate outside the band.

mod common;

use latens::dynamics::kepler::{Elements, state_from_elements};
use latens::dynamics::{ForceModel, InitialState};
use latens::ephemeris::Vsop87;
use latens::frames::icrf_from_ecliptic;
use latens::io::observations::SiteTable;
use latens::perturber::{LinearKernel, SignalKernel};
use latens::posterior::{PerturberPosterior, PerturberPrior, PerturberSample};
use latens::reference::{ReferenceSettings, fit_reference_orbit, observing_geometry};
use latens::simulate::{SurveyPlan, simulate_survey};
use latens::units::{GM_SUN_AU3_PER_DAY2, RAD_PER_DEG};
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};

const T0: f64 = 8766.0;

fn kernel() -> LinearKernel {
    let model = ForceModel::sun_only();
    let mut bodies = latens::astrometry::observer_ephemeris_bodies();
    bodies.sort();
    bodies.dedup();
    let eph = model.tabulate(&Vsop87::new(), &bodies, (T0 - 11.0 * 365.25, T0 + 11.0 * 365.25)).unwrap();
    let el = Elements::from_semi_major_axis(
        44.0,
        0.1,
        12.0 * RAD_PER_DEG,
        80.0 * RAD_PER_DEG,
        150.0 * RAD_PER_DEG,
        20.0 * RAD_PER_DEG,
    )
    .unwrap();
    let (r, v) = state_from_elements(GM_SUN_AU3_PER_DAY2, &el).unwrap();
    let init = InitialState {
        t0_tdb_days: T0,
        tracked_position_au: icrf_from_ecliptic(r),
        tracked_velocity_au_per_day: icrf_from_ecliptic(v),
        perturbers: vec![],
    };
    let plan = SurveyPlan {
        times_tdb_days: (0..300).map(|k| T0 - 10.0 * 365.25 + 24.0 * k as f64).collect(),
        site: "geocenter".into(),
        sigma_arcsec: 0.1,
        add_noise: true,
        min_elongation_deg: 90.0,
        seed: 5,
    };
    let sites = SiteTable::new();
    let obs = simulate_survey(&plan, &init, &model, &eph, &sites).unwrap();
    let null = fit_reference_orbit(&obs, &sites, &model, &eph, &ReferenceSettings::default(), None).unwrap();
    let geometry = observing_geometry(&obs, &sites, &eph).unwrap();
    LinearKernel::build(&null, &obs, geometry, &model, &eph).unwrap()
}

/// Coverage counts (mass 68, mass 90, sky 68, sky 90) over `n` injections.
fn campaign(n: usize, seed: u64) -> [usize; 4] {
    let base = kernel();
    let prior = PerturberPrior {
        mass_earth: (3.0, 30.0),
        distance_au: (15.0, 60.0),
        max_eccentricity: 0.3,
        min_separation_au: 3.0,
        near_ecliptic_deg: None,
    };
    let mut hits = [0usize; 4];
    for k in 0..n {
        let mut rng = rand::rngs::StdRng::seed_from_u64(seed + k as u64);
        let truth_x = PerturberPosterior::new(&base, prior).draw_prior(&mut rng);
        let truth = PerturberSample::from_params(&truth_x);
        let mut y = base.projected_signal(truth.position_au, truth.velocity_au_per_day, truth.gm_au3_per_day2).unwrap();
        for (i, v) in y.iter_mut().enumerate() {
            if base.used[i / 2] {
                *v += Distribution::<f64>::sample(&StandardNormal, &mut rng);
            }
        }
        let data = base.with_residuals(&y);
        let posterior = PerturberPosterior::new(&data, prior);
        for (h, c) in hits.iter_mut().zip(common::covers(&posterior, &truth_x, 100 + k as u64, &mut rng)) {
            *h += usize::from(c);
        }
    }
    hits
}

#[test]
fn posterior_intervals_cover_the_truth_quick() {
    let n = 12;
    let h = campaign(n, 1000);
    eprintln!("coverage of {n}: mass 68% {}, mass 90% {}, sky 68% {}, sky 90% {}", h[0], h[1], h[2], h[3]);
    assert!(common::consistent(h[0], n, 0.68) && common::consistent(h[1], n, 0.9), "mass {h:?}");
    assert!(common::consistent(h[2], n, 0.68) && common::consistent(h[3], n, 0.9), "sky {h:?}");
}

#[test]
#[ignore = "60 injections, several minutes on 2 cores: run with --ignored; the result is recorded in docs/validation.md"]
fn posterior_intervals_cover_the_truth_full() {
    let n = 60;
    let h = campaign(n, 5000);
    eprintln!("coverage of {n}: mass 68% {}, mass 90% {}, sky 68% {}, sky 90% {}", h[0], h[1], h[2], h[3]);
    assert!(common::consistent(h[0], n, 0.68) && common::consistent(h[1], n, 0.9), "mass {h:?}");
    assert!(common::consistent(h[2], n, 0.68) && common::consistent(h[3], n, 0.9), "sky {h:?}");
}
