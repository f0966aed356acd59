//! Helpers shared by the reference tests: fixture loading and comparisons with
//! tolerances in named units.
#![allow(dead_code)]

use std::collections::HashMap;
use std::path::PathBuf;

pub const MICROSECOND: f64 = 1e-6;
/// One metre in au (IAU 2012 au).
pub const METRE_AU: f64 = 1.0 / 149_597_870_700.0;
pub const ARCSEC_RAD: f64 = std::f64::consts::PI / 180.0 / 3600.0;
pub const MAS_RAD: f64 = ARCSEC_RAD / 1000.0;

pub fn data_path(rel: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data").join(rel)
}

/// Rows of a plain comma-separated fixture (no quoting), keyed by header.
pub fn read_rows(rel: &str) -> Vec<HashMap<String, String>> {
    let text = std::fs::read_to_string(data_path(rel)).unwrap_or_else(|e| panic!("{rel}: {e}"));
    let mut lines = text.lines().filter(|l| !l.trim().is_empty());
    let header: Vec<String> = lines.next().expect("header").split(',').map(|s| s.trim().to_string()).collect();
    lines.map(|l| header.iter().cloned().zip(l.split(',').map(|s| s.trim().to_string())).collect()).collect()
}

pub fn num(row: &HashMap<String, String>, key: &str) -> f64 {
    row.get(key).unwrap_or_else(|| panic!("no column {key}")).parse().unwrap_or_else(|e| panic!("{key}: {e}"))
}

/// Asserts |got - want| <= tol and says both values and the unit otherwise.
#[track_caller]
pub fn compare(what: &str, got: f64, want: f64, tol: f64, unit: &str) {
    let d = (got - want).abs();
    assert!(d <= tol, "{what}: got {got}, expected {want}: off by {d:e} {unit} (tolerance {tol:e} {unit})");
}

/// Like [`read_rows`] but skipping `#` comment lines before the header.
pub fn read_rows_skipping_comments(rel: &str) -> Vec<HashMap<String, String>> {
    let text = std::fs::read_to_string(data_path(rel)).unwrap_or_else(|e| panic!("{rel}: {e}"));
    let mut lines = text.lines().filter(|l| !l.trim().is_empty() && !l.starts_with('#'));
    let header: Vec<String> = lines.next().expect("header").split(',').map(|s| s.trim().to_string()).collect();
    lines.map(|l| header.iter().cloned().zip(l.split(',').map(|s| s.trim().to_string())).collect()).collect()
}

/// Calibration of a perturber posterior on one injection: runs the sampler
/// (32 walkers, 8 temperatures up to 1000, 1200 steps, 500 burnt in) from
/// prior draws and tells whether the truth `truth_x` (sampler parameters)
/// lies in the central 68% and 90% intervals of ln mass and in the 68% and
/// 90% sky caps about the posterior's mean direction: [mass 68, mass 90,
/// sky 68, sky 90].
pub fn covers<K: latens::perturber::SignalKernel + ?Sized>(
    posterior: &latens::posterior::PerturberPosterior<K>,
    truth_x: &[f64],
    seed: u64,
    rng: &mut impl rand::Rng,
) -> [bool; 4] {
    use latens::frames::angular_separation;
    use latens::posterior::quantiles;
    use latens::posterior::sampler::{SamplerSettings, SamplerState, Target, run};
    use latens::vec3::Vec3;
    let settings = SamplerSettings {
        n_walkers: 32,
        n_temperatures: 8,
        max_temperature: 1e3,
        n_steps: 1200,
        burn_in: 500,
        thin: 5,
        seed,
        ..SamplerSettings::default()
    };
    let start: Vec<Vec<Vec<f64>>> =
        settings.initial_betas().iter().map(|_| (0..32).map(|_| posterior.draw_prior(rng)).collect()).collect();
    let state = SamplerState::new(posterior, &settings, 0, &start).unwrap();
    let states =
        run(posterior, &settings, vec![state], None, latens::progress::Stage::Sampling, &latens::progress::Quiet)
            .unwrap();
    let samples: Vec<Vec<f64>> = states[0].posterior_samples(settings.burn_in).into_iter().map(|s| s.0).collect();
    assert!(posterior.log_prior(truth_x).is_finite());
    // Mass: central intervals of ln m.
    let lm: Vec<f64> = samples.iter().map(|x| x[0]).collect();
    let q = quantiles(&lm, &[0.16, 0.84, 0.05, 0.95]);
    let mass = [truth_x[0] >= q[0] && truth_x[0] <= q[1], truth_x[0] >= q[2] && truth_x[0] <= q[3]];
    // Sky: the heliocentric direction at the epoch; the credible caps about
    // the posterior's mean direction.
    let dir = |x: &[f64]| Vec3::new(x[1], x[2], x[3]).unit();
    let mean = samples.iter().fold(Vec3::ZERO, |a, x| a + dir(x)).unit();
    let dist: Vec<f64> = samples.iter().map(|x| angular_separation(dir(x), mean)).collect();
    let q = quantiles(&dist, &[0.68, 0.9]);
    let t = angular_separation(dir(truth_x), mean);
    [mass[0], mass[1], t <= q[0], t <= q[1]]
}

/// True when `hits` of `n` is within 3 binomial standard deviations of `p`.
pub fn consistent(hits: usize, n: usize, p: f64) -> bool {
    let sd = (n as f64 * p * (1.0 - p)).sqrt();
    (hits as f64 - n as f64 * p).abs() <= 3.0 * sd
}

/// Points about `centre` (sampler parameters) for importance-weight checks:
/// ln mass jittered by 0.01, the state's components by 1e-4 of their size
/// (at least 1e-7), each with its kernel log-likelihood.
pub fn jittered_points<K: latens::perturber::SignalKernel + ?Sized>(
    posterior: &latens::posterior::PerturberPosterior<K>,
    centre: &[f64],
    n: usize,
    rng: &mut impl rand::Rng,
) -> Vec<(Vec<f64>, f64)> {
    use latens::posterior::Target;
    use rand_distr::{Distribution, StandardNormal};
    (0..n)
        .map(|_| {
            let x: Vec<f64> = centre
                .iter()
                .enumerate()
                .map(|(i, v)| {
                    let z: f64 = StandardNormal.sample(rng);
                    v + z * if i == 0 { 0.01 } else { 1e-4 * v.abs().max(1e-3) }
                })
                .collect();
            let ll = posterior.log_likelihood(&x).unwrap();
            (x, ll)
        })
        .collect()
}
