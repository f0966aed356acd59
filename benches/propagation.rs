//! Propagation benchmark on the reference workload W1(a) (see
//! docs/performance.md): a tracked body on a 44 au, e = 0.1, i = 12 deg orbit
//! and a 5 Earth-mass perturber on a 75 au orbit, under the Sun and
//! Jupiter..Neptune (embedded VSOP87A ephemeris, tabulated once), propagated
//! over 30 years from the middle of the arc and read at 300 epochs (30
//! apparitions of 10 epochs 3 days apart).
//!
//! Run: `cargo bench --bench propagation` (add `-- --json` for one JSON line per
//! case, as `benches/compare/rebound_w1.py` reads). Prints, per case, the
//! median wall time of one evaluation over repeated runs on one core, the
//! steps and force evaluations, and the largest error of the tracked body's
//! heliocentric direction against a run at tolerance 1e-11.

use std::time::Instant;

use latens::dynamics::kepler::{Elements, state_from_elements};
use latens::dynamics::{ForceModel, InitialState, Perturber, PropagationSettings, Propagator, Trajectory};
use latens::ephemeris::{Tabulated, Vsop87};
use latens::frames::{angular_separation, icrf_from_ecliptic};
use latens::units::{EARTH_MASS_SOLAR, GM_SUN_AU3_PER_DAY2, RAD_PER_DEG, RAD_PER_MAS};

const T0: f64 = 9131.25; // 2025-01-01 TDB, middle of the arc

fn workload() -> (InitialState, Vec<f64>) {
    let state = |a: f64, e: f64, i: f64, node: f64, peri: f64, m: f64| {
        let el = Elements::from_semi_major_axis(
            a,
            e,
            i * RAD_PER_DEG,
            node * RAD_PER_DEG,
            peri * RAD_PER_DEG,
            m * RAD_PER_DEG,
        )
        .expect("valid elements");
        let (r, v) = state_from_elements(GM_SUN_AU3_PER_DAY2, &el).expect("valid state");
        (icrf_from_ecliptic(r), icrf_from_ecliptic(v))
    };
    let (rt, vt) = state(44.0, 0.1, 12.0, 80.0, 150.0, 20.0);
    let (rp, vp) = state(75.0, 0.05, 25.0, 200.0, 40.0, 300.0);
    let init = InitialState {
        t0_tdb_days: T0,
        tracked_position_au: rt,
        tracked_velocity_au_per_day: vt,
        perturbers: vec![Perturber {
            gm_au3_per_day2: 5.0 * EARTH_MASS_SOLAR * GM_SUN_AU3_PER_DAY2,
            position_au: rp,
            velocity_au_per_day: vp,
        }],
    };
    let mut epochs = Vec::with_capacity(300);
    for year in 0..30 {
        for night in 0..10 {
            epochs.push(T0 - 15.0 * 365.25 + 365.25 * year as f64 + 120.0 + 3.0 * night as f64);
        }
    }
    (init, epochs)
}

fn median_ms(mut samples: Vec<f64>) -> f64 {
    samples.sort_by(f64::total_cmp);
    samples[samples.len() / 2]
}

fn max_error_mas(a: &Trajectory, b: &Trajectory) -> f64 {
    a.tracked
        .iter()
        .zip(&b.tracked)
        .map(|(x, y)| angular_separation(x.position_au, y.position_au) / RAD_PER_MAS)
        .fold(0.0, f64::max)
}

fn main() {
    let json = std::env::args().any(|a| a == "--json");
    let quick = std::env::args().any(|a| a == "--quick");
    let (init, epochs) = workload();
    let model = ForceModel::with_known(&[
        latens::ephemeris::Body::Jupiter,
        latens::ephemeris::Body::Saturn,
        latens::ephemeris::Body::Uranus,
        latens::ephemeris::Body::Neptune,
    ]);
    let span = (epochs[0] - 1.0, epochs[epochs.len() - 1] + 1.0);
    let eph = Tabulated::new(&Vsop87::new(), &model.ephemeris_bodies(), span).expect("ephemeris table");
    let reference = Propagator::new(&model, &eph, PropagationSettings { tolerance: 1e-11, ..Default::default() })
        .expect("settings")
        .propagate(&init, &epochs)
        .expect("reference run");
    let repeats = if quick { 15 } else { 60 };

    for (name, tolerance, partials, reuse) in [
        ("w1a_full_tol1e-9", 1e-9, false, false),
        ("w1a_full_fast_tol1e-6", PropagationSettings::fast().tolerance, false, false),
        ("w1a_full_tol1e-5", 1e-5, false, false),
        ("w1a_full_tol1e-5_replayed_plan", 1e-5, false, true),
        ("w1a_jacobian13_tol1e-9", 1e-9, true, false),
        ("w1a_jacobian13_fast_tol1e-6", PropagationSettings::fast().tolerance, true, false),
        ("w1a_jacobian13_tol1e-5", 1e-5, true, false),
        ("w1a_jacobian13_tol1e-5_replayed_plan", 1e-5, true, true),
    ] {
        let settings = PropagationSettings { tolerance, partials, reuse_steps: reuse, ..Default::default() };
        let mut prop = Propagator::new(&model, &eph, settings).expect("settings");
        let mut last = prop.propagate(&init, &epochs).expect("warm-up run");
        let mut times = Vec::with_capacity(repeats);
        for k in 0..repeats {
            // A fitter moves the orbit a little between calls.
            let mut moved = init.clone();
            moved.tracked_position_au.x += 1e-9 * k as f64;
            if !reuse {
                prop = Propagator::new(&model, &eph, settings).expect("settings");
            }
            let start = Instant::now();
            last = prop.propagate(&moved, &epochs).expect("run");
            times.push(start.elapsed().as_secs_f64() * 1e3);
        }
        let ms = median_ms(times);
        // The error is judged on the unmoved initial state.
        let check = Propagator::new(&model, &eph, settings).expect("settings").propagate(&init, &epochs).expect("run");
        let error = max_error_mas(&check, &reference);
        if json {
            println!(
                "{{\"case\":\"{name}\",\"median_ms\":{ms:.4},\"steps\":{},\"force_evaluations\":{},\"max_error_mas\":{error:.5}}}",
                last.stats.steps, last.stats.force_evaluations
            );
        } else {
            println!(
                "{name:<40} {ms:>9.3} ms  steps {:>4}  force evaluations {:>6}  max error {error:.4} mas",
                last.stats.steps, last.stats.force_evaluations
            );
        }
    }
}
