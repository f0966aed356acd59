//! Cost of the joint kernel: one perturber hypothesis through several
//! bodies' kernels side by side, per body, against one body's kernel; then
//! a whole default grid search over a population (the size from
//! `LATENS_BENCH_BODIES`, default 100) on all cores.
//!
//! Each body is observed on the pattern of workload W1(a) (300 epochs: 30
//! apparitions of 10 epochs 3 days apart) with its own invented orbit
//! (a 38-56 au, e up to 0.2, i up to 28 deg, random angles; seeded).
//!
//! Run: `cargo bench --bench joint` (the population search takes minutes;
//! `LATENS_BENCH_BODIES=0` skips it). `LATENS_BENCH_SHARDS=1/16,9/16`
//! times those shards of the sensitivity map's threshold calibration over
//! the population instead of the whole search (as `latens sensitivity
//! --shard K/N` runs them).

use std::time::Instant;

use rand::{RngExt, SeedableRng};
use rayon::prelude::*;

use latens::dynamics::kepler::{Elements, state_from_elements};
use latens::dynamics::{ForceModel, InitialState};
use latens::ephemeris::Vsop87;
use latens::frames::icrf_from_ecliptic;
use latens::io::observations::SiteTable;
use latens::perturber::search::{SearchSettings, hypotheses, null_maxima_share, score};
use latens::perturber::{JointKernel, LinearKernel, SignalKernel, grid_search};
use latens::progress::Quiet;
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
    let sites = SiteTable::new();
    let population: usize = std::env::var("LATENS_BENCH_BODIES").ok().and_then(|v| v.parse().ok()).unwrap_or(100);
    let n_build = population.max(16);
    let built = Instant::now();
    let kernels: Vec<LinearKernel> = (0..n_build as u64)
        .into_par_iter()
        .map(|k| {
            let mut rng = rand::rngs::StdRng::seed_from_u64(7000 + k);
            let deg = |x: f64| x * RAD_PER_DEG;
            let el = Elements::from_semi_major_axis(
                38.0 + 18.0 * rng.random::<f64>(),
                0.2 * rng.random::<f64>(),
                deg(28.0 * rng.random::<f64>()),
                deg(360.0 * rng.random::<f64>()),
                deg(360.0 * rng.random::<f64>()),
                deg(360.0 * rng.random::<f64>()),
            )
            .expect("elements");
            let (r, v) = state_from_elements(GM_SUN_AU3_PER_DAY2, &el).expect("state");
            let init = InitialState {
                t0_tdb_days: T0,
                tracked_position_au: icrf_from_ecliptic(r),
                tracked_velocity_au_per_day: icrf_from_ecliptic(v),
                perturbers: vec![],
            };
            let times: Vec<f64> = (0..30)
                .flat_map(|year| {
                    (0..10).map(move |night| T0 - 15.0 * 365.25 + 365.25 * year as f64 + 3.0 * night as f64)
                })
                .map(|t| t + 120.0 + (11 * k % 240) as f64)
                .collect();
            let plan = SurveyPlan {
                times_tdb_days: times,
                site: "geocenter".into(),
                sigma_arcsec: 0.05,
                add_noise: true,
                min_elongation_deg: 0.0,
                seed: 3 + k,
            };
            let obs = simulate_survey(&plan, &init, &model, &eph, &sites).expect("simulation");
            let (p, q) = (init.tracked_position_au, init.tracked_velocity_au_per_day);
            let start = [p.x, p.y, p.z, q.x, q.y, q.z];
            let settings = ReferenceSettings { epoch_tdb_days: Some(T0), ..ReferenceSettings::default() };
            let fit = fit_reference_orbit(&obs, &sites, &model, &eph, &settings, Some(start)).expect("fit");
            let geometry = observing_geometry(&obs, &sites, &eph).expect("geometry");
            LinearKernel::build(&fit, &obs, geometry, &model, &eph).expect("kernel")
        })
        .collect();
    println!(
        "{} bodies of {} observations simulated, fitted and their kernels built in {:.1} s",
        kernels.len(),
        kernels[0].n_residuals() / 2,
        built.elapsed().as_secs_f64()
    );

    // Per hypothesis, one core.
    let search = SearchSettings { n_directions: 96, ..SearchSettings::default() };
    let hyps = hypotheses(&search, kernels[0].central_gm());
    let time_per_hypothesis = |kernel: &dyn Fn(&mut Vec<f64>, usize) -> f64| -> f64 {
        let mut samples = Vec::new();
        let mut scratch = Vec::new();
        for _ in 0..5 {
            let t = Instant::now();
            let mut acc = 0.0;
            for i in 0..hyps.len() {
                acc += kernel(&mut scratch, i);
            }
            samples.push(t.elapsed().as_secs_f64() * 1e6 / hyps.len() as f64);
            std::hint::black_box(acc);
        }
        samples.sort_by(f64::total_cmp);
        samples[2]
    };
    let single = time_per_hypothesis(&|scratch, i| {
        scratch.resize(kernels[0].n_residuals(), 0.0);
        score(&kernels[0], &hyps[i], 1e9, 0.0, scratch).map_or(0.0, |s| s.delta_chi2)
    });
    println!(
        "single_kernel_300_obs: {single:.2} us per hypothesis (median of 5 passes over {} hypotheses)",
        hyps.len()
    );
    for n in [1usize, 4, 16] {
        let joint = JointKernel::new(kernels[..n].to_vec()).expect("one epoch");
        let t = time_per_hypothesis(&|scratch, i| {
            scratch.resize(joint.n_residuals(), 0.0);
            score(&joint, &hyps[i], 1e9, 0.0, scratch).map_or(0.0, |s| s.delta_chi2)
        });
        println!(
            "joint_kernel_{n}_bodies: {t:.2} us per hypothesis, {:.2} us per hypothesis per body ({:.2} x the single kernel)",
            t / n as f64,
            t / n as f64 / single
        );
    }

    if population == 0 {
        return;
    }
    let joint = JointKernel::new(kernels[..population].to_vec()).expect("one epoch");
    let settings = SearchSettings::default();
    let n_hyp = hypotheses(&settings, joint.central_gm()).len();
    if let Ok(list) = std::env::var("LATENS_BENCH_SHARDS") {
        // Shards of the sensitivity map's threshold calibration (the null
        // simulations over every N-th hypothesis of the default grid), as
        // `latens sensitivity --shard K/N` runs them: each shard's time.
        for item in list.split(',') {
            let (k, n) = item.split_once('/').expect("K/N");
            let shard = (k.trim().parse().expect("K"), n.trim().parse().expect("N"));
            let t = Instant::now();
            let share = null_maxima_share(&joint, &settings, shard, &Quiet);
            println!(
                "population_{population}_bodies_null_shard_{}_of_{}: {:.1} s on {} threads ({} of {n_hyp} hypotheses, {} null simulations, subspace dimension {}, energy {:.4}; median maximum {:.2})",
                shard.0,
                shard.1,
                t.elapsed().as_secs_f64(),
                rayon::current_num_threads(),
                share.n_in_shard,
                settings.n_null,
                share.subspace_dimension,
                share.subspace_energy,
                {
                    let mut m = share.maxima.clone();
                    m.sort_by(f64::total_cmp);
                    m[m.len() / 2]
                }
            );
        }
        return;
    }
    let t = Instant::now();
    let result = grid_search(&joint, &settings, &Quiet);
    println!(
        "population_{population}_bodies_default_grid: {:.1} s on {} threads ({n_hyp} hypotheses, {} null simulations, subspace dimension {}; best delta chi2 {:.1})",
        t.elapsed().as_secs_f64(),
        rayon::current_num_threads(),
        settings.n_null,
        result.subspace_dimension,
        result.grid_best_delta_chi2
    );
}
