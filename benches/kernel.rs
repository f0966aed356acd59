//! Cost of one perturber hypothesis through the linear kernel, on the
//! observation pattern of workload W1(a) (300 epochs: 30 apparitions of 10
//! epochs 3 days apart) and on twice as many epochs (600), one core.
//!
//! Run: `cargo bench --bench kernel`.

use std::time::Instant;

use latens::dynamics::kepler::{Elements, state_from_elements};
use latens::dynamics::{ForceModel, InitialState};
use latens::ephemeris::Vsop87;
use latens::frames::icrf_from_ecliptic;
use latens::io::observations::SiteTable;
use latens::perturber::LinearKernel;
use latens::perturber::search::{SearchSettings, hypotheses, score};
use latens::reference::{ReferenceSettings, fit_reference_orbit, observing_geometry};
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
    let init = InitialState {
        t0_tdb_days: T0,
        tracked_position_au: icrf_from_ecliptic(r),
        tracked_velocity_au_per_day: icrf_from_ecliptic(v),
        perturbers: vec![],
    };
    let sites = SiteTable::new();
    for per_apparition in [10, 20] {
        let mut times = Vec::new();
        for year in 0..30 {
            for night in 0..per_apparition {
                times.push(
                    T0 - 15.0 * 365.25
                        + 365.25 * year as f64
                        + 120.0
                        + 3.0 * night as f64 / (per_apparition as f64 / 10.0),
                );
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
        let obs = simulate_survey(&plan, &init, &model, &eph, &sites).expect("simulation");
        let start = [
            init.tracked_position_au.x,
            init.tracked_position_au.y,
            init.tracked_position_au.z,
            init.tracked_velocity_au_per_day.x,
            init.tracked_velocity_au_per_day.y,
            init.tracked_velocity_au_per_day.z,
        ];
        let settings = ReferenceSettings { epoch_tdb_days: Some(T0), ..ReferenceSettings::default() };
        let fit = fit_reference_orbit(&obs, &sites, &model, &eph, &settings, Some(start)).expect("fit");
        let geometry = observing_geometry(&obs, &sites, &eph).expect("geometry");
        let built = Instant::now();
        let kernel = LinearKernel::build(&fit, &obs, geometry, &model, &eph).expect("kernel");
        let build_ms = built.elapsed().as_secs_f64() * 1e3;
        let search = SearchSettings { n_directions: 96, ..SearchSettings::default() };
        let hyps = hypotheses(&search, kernel.central_gm());
        let mut scratch = vec![0.0; kernel.n_residuals()];
        let mut samples = Vec::new();
        for _ in 0..5 {
            let t = Instant::now();
            let mut acc = 0.0;
            for h in &hyps {
                if let Some(s) = score(&kernel, h, 1e9, 0.0, &mut scratch) {
                    acc += s.delta_chi2;
                }
            }
            samples.push(t.elapsed().as_secs_f64() * 1e6 / hyps.len() as f64);
            std::hint::black_box(acc);
        }
        samples.sort_by(f64::total_cmp);
        println!(
            "kernel_{}_obs: {:.2} us per hypothesis (median of 5 passes over {} hypotheses; {} quadrature nodes); kernel built in {build_ms:.0} ms",
            obs.len(),
            samples[2],
            hyps.len(),
            kernel.n_nodes()
        );
    }
}
