//! The tempered ensemble sampler on densities with known answers (seeded).

use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};

use latens::progress::{Observer, Stage};

/// An observer that asks to stop once the run has reported `at` steps done,
/// as a caller's Ctrl-C would; it records what it was told.
struct StopAt {
    at: u64,
    seen: AtomicU64,
    stop: AtomicBool,
    begun: AtomicBool,
}

impl StopAt {
    fn new(at: u64) -> Self {
        StopAt { at, seen: AtomicU64::new(0), stop: AtomicBool::new(false), begun: AtomicBool::new(false) }
    }
}

impl Observer for StopAt {
    fn begin(&self, stage: Stage, _total: u64) {
        assert_eq!(stage, Stage::Sampling);
        self.begun.store(true, Ordering::SeqCst);
    }
    fn advance(&self, done: u64) {
        self.seen.store(done, Ordering::SeqCst);
        if done == self.at {
            self.stop.store(true, Ordering::SeqCst);
        }
    }
    fn stop_requested(&self) -> bool {
        self.stop.load(Ordering::SeqCst)
    }
}

use latens::posterior::sampler::{
    Checkpoint, SamplerSettings, SamplerState, Target, autocorrelation_time, combined_evidence, rank_normalized_r_hat,
    run, split_r_hat, stepping_stone_evidence, thermodynamic_evidence,
};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal, StandardNormal};

fn start(
    target: &dyn Target,
    settings: &SamplerSettings,
    centre: &[f64],
    spread: f64,
    seed: u64,
) -> Vec<Vec<Vec<f64>>> {
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    let betas = settings.initial_betas();
    betas
        .iter()
        .map(|_| {
            (0..settings.n_walkers)
                .map(|_| {
                    let mut x: Vec<f64>;
                    loop {
                        x = centre
                            .iter()
                            .map(|c| c + spread * Distribution::<f64>::sample(&StandardNormal, &mut rng))
                            .collect();
                        if target.log_prior(&x).is_finite() {
                            break;
                        }
                    }
                    x
                })
                .collect()
        })
        .collect()
}

fn sample(
    target: &dyn Target,
    settings: &SamplerSettings,
    centre: &[f64],
    spread: f64,
    runs: u64,
) -> Vec<SamplerState> {
    let states: Vec<SamplerState> = (0..runs)
        .map(|r| SamplerState::new(target, settings, r, &start(target, settings, centre, spread, 100 + r)).unwrap())
        .collect();
    run(target, settings, states, None, latens::progress::Stage::Sampling, &latens::progress::Quiet).unwrap()
}

fn pooled(states: &[SamplerState], burn_in: usize) -> Vec<Vec<f64>> {
    states.iter().flat_map(|s| s.posterior_samples(burn_in)).map(|(x, _)| x).collect()
}

/// A flat prior on a box.
fn in_box(x: &[f64], half_width: f64) -> f64 {
    if x.iter().all(|v| v.abs() <= half_width) { 0.0 } else { f64::NEG_INFINITY }
}

struct Gaussian {
    mean: Vec<f64>,
    precision: Vec<Vec<f64>>,
}

impl Target for Gaussian {
    fn dim(&self) -> usize {
        self.mean.len()
    }
    fn log_prior(&self, x: &[f64]) -> f64 {
        in_box(x, 1e3)
    }
    fn log_likelihood(&self, x: &[f64]) -> Option<f64> {
        let d: Vec<f64> = x.iter().zip(&self.mean).map(|(a, b)| a - b).collect();
        let q: f64 = (0..d.len()).map(|i| d[i] * (0..d.len()).map(|j| self.precision[i][j] * d[j]).sum::<f64>()).sum();
        Some(-0.5 * q)
    }
}

#[test]
fn correlated_13_dimensional_gaussian_mean_and_covariance() {
    // Covariance S = B B^T + 0.3 I with a seeded random B: strongly
    // correlated, condition number in the hundreds.
    let n = 13;
    let mut rng = rand::rngs::StdRng::seed_from_u64(7);
    let b: Vec<Vec<f64>> = (0..n).map(|_| (0..n).map(|_| StandardNormal.sample(&mut rng)).collect()).collect();
    let cov = faer::Mat::from_fn(n, n, |i, j| {
        (0..n).map(|k| b[i][k] * b[j][k]).sum::<f64>() + if i == j { 0.3 } else { 0.0 }
    });
    use faer::linalg::solvers::DenseSolveCore;
    let prec = cov.llt(faer::Side::Lower).unwrap().inverse();
    let mean: Vec<f64> = (0..n).map(|i| i as f64 - 6.0).collect();
    let target =
        Gaussian { mean: mean.clone(), precision: (0..n).map(|i| (0..n).map(|j| prec[(i, j)]).collect()).collect() };
    let settings = SamplerSettings {
        n_walkers: 64,
        n_temperatures: 1,
        n_steps: 6000,
        burn_in: 2000,
        thin: 2,
        seed: 11,
        ..SamplerSettings::default()
    };
    let states = sample(&target, &settings, &mean, 1.0, 1);
    let xs = pooled(&states, settings.burn_in);
    let m = xs.len() as f64;
    for i in 0..n {
        let tau = autocorrelation_time(&states[0].walker_series(settings.burn_in, i)) * settings.thin as f64;
        let mu = xs.iter().map(|x| x[i]).sum::<f64>() / m;
        // Monte Carlo error of the mean: sqrt(var * tau / (walkers * steps)).
        let mc = (cov[(i, i)] * tau / (64.0 * 4000.0)).sqrt();
        assert!((mu - mean[i]).abs() < 4.0 * mc, "mean {i}: {mu} vs {} (MC error {mc}, tau {tau})", mean[i]);
        for j in 0..=i {
            let muj = xs.iter().map(|x| x[j]).sum::<f64>() / m;
            let c = xs.iter().map(|x| (x[i] - mu) * (x[j] - muj)).sum::<f64>() / m;
            // Sample covariance error ~ sqrt((S_ii S_jj + S_ij^2) tau / N).
            let err = ((cov[(i, i)] * cov[(j, j)] + cov[(i, j)].powi(2)) * tau / (64.0 * 4000.0)).sqrt();
            assert!((c - cov[(i, j)]).abs() < 5.0 * err, "cov {i},{j}: {c} vs {} (err {err})", cov[(i, j)]);
        }
    }
}

/// The two-dimensional density of Goodman & Weare (2010), eq. 13:
/// pi(x1, x2) ~ exp(-(100 (x2 - x1^2)^2 + (1 - x1)^2) / 20). Integrating
/// x2 out leaves x1 ~ N(1, 10) exactly, so E[x1] = 1, Var[x1] = 10 and
/// E[x2] = E[x1^2] = 11 (derived here).
struct Rosenbrock;

impl Target for Rosenbrock {
    fn dim(&self) -> usize {
        2
    }
    fn log_prior(&self, x: &[f64]) -> f64 {
        in_box(x, 1e4)
    }
    fn log_likelihood(&self, x: &[f64]) -> Option<f64> {
        Some(-(100.0 * (x[1] - x[0] * x[0]).powi(2) + (1.0 - x[0]).powi(2)) / 20.0)
    }
}

#[test]
fn goodman_weare_rosenbrock_moments() {
    let settings = SamplerSettings {
        n_walkers: 100,
        n_temperatures: 1,
        n_steps: 30_000,
        burn_in: 2000,
        thin: 10,
        seed: 3,
        ..SamplerSettings::default()
    };
    let states = sample(&Rosenbrock, &settings, &[1.0, 1.0], 0.1, 1);
    let xs = pooled(&states, settings.burn_in);
    let m = xs.len() as f64;
    let e1 = xs.iter().map(|x| x[0]).sum::<f64>() / m;
    let v1 = xs.iter().map(|x| (x[0] - e1).powi(2)).sum::<f64>() / m;
    let e2 = xs.iter().map(|x| x[1]).sum::<f64>() / m;
    let tau = autocorrelation_time(&states[0].walker_series(settings.burn_in, 0)) * settings.thin as f64;
    let n_eff = 100.0 * 28_000.0 / tau;
    // Tolerances: 4 Monte Carlo errors (x2 has a heavy tail: Var[x1^2] = 440).
    assert!((e1 - 1.0).abs() < 4.0 * (10.0 / n_eff).sqrt(), "E[x1] {e1}, tau {tau}");
    assert!((v1 - 10.0).abs() < 4.0 * (200.0 / n_eff).sqrt(), "Var[x1] {v1}");
    assert!((e2 - 11.0).abs() < 4.0 * (440.0 / n_eff).sqrt(), "E[x2] {e2}");
}

/// A two-mode mixture, 1/4 N((-6, 0), 0.5^2 I) + 3/4 N((6, 0), 0.5^2 I),
/// on a flat prior over [-20, 20]^2: the modes are 24 standard deviations
/// apart, so only the tempering can move walkers between them; the ratio of
/// the modes' occupancy must come out 1 : 3, and the evidence
/// ln(1 / 40^2) (the mixture integrates to 2 pi 0.25).
struct Mixture;

impl Target for Mixture {
    fn dim(&self) -> usize {
        2
    }
    fn log_prior(&self, x: &[f64]) -> f64 {
        in_box(x, 20.0) - (40.0f64 * 40.0).ln()
    }
    fn log_likelihood(&self, x: &[f64]) -> Option<f64> {
        // ln(0.25 g(-6) + 0.75 g(6)) without underflow.
        let lg = |c: f64| -((x[0] - c).powi(2) + x[1] * x[1]) / (2.0 * 0.25);
        let (a, b) = (0.25f64.ln() + lg(-6.0), 0.75f64.ln() + lg(6.0));
        let m = a.max(b);
        Some(m + ((a - m).exp() + (b - m).exp()).ln())
    }
}

#[test]
fn tempering_finds_both_modes_in_the_right_ratio() {
    let settings = SamplerSettings {
        n_walkers: 32,
        n_temperatures: 10,
        max_temperature: 1e3,
        n_steps: 4000,
        burn_in: 1000,
        thin: 2,
        seed: 5,
        ..SamplerSettings::default()
    };
    // Every walker starts in the heavier mode.
    let states = sample(&Mixture, &settings, &[6.0, 0.0], 0.3, 2);
    let xs = pooled(&states, settings.burn_in);
    let left = xs.iter().filter(|x| x[0] < 0.0).count() as f64 / xs.len() as f64;
    assert!((left - 0.25).abs() < 0.04, "share in the lighter mode {left}");
    // ln Z = ln(0.25 * 2 pi * 0.25 + 0.75 * 2 pi * 0.25) - ln(1600).
    let exact = (2.0 * std::f64::consts::PI * 0.25).ln() - 1600f64.ln();
    let (z, err) = combined_evidence(&states, thermodynamic_evidence);
    assert!(err < 0.3, "evidence error {err}");
    assert!((z - exact).abs() < 3.0 * err.max(0.02), "ln Z {z} +- {err} vs {exact}");
}

/// Without tempering, walkers started evenly in the two modes of the 1 : 3
/// mixture: stretch moves cannot cross 24 standard deviations (they move
/// along the line through two walkers, never onto the other one), so the
/// occupancy stays where it started; the mode hops (ter Braak 2006) carry
/// walkers across and the share of the lighter mode settles at 1/4.
#[test]
fn mode_hops_settle_the_weights_of_separate_modes() {
    let share = |mode_hop: f64| {
        let settings = SamplerSettings {
            n_walkers: 32,
            n_temperatures: 1,
            n_steps: 12000,
            burn_in: 2000,
            thin: 4,
            mode_hop,
            seed: 9,
            ..SamplerSettings::default()
        };
        let mut rng = rand::rngs::StdRng::seed_from_u64(17);
        let walkers: Vec<Vec<f64>> = (0..settings.n_walkers)
            .map(|w| {
                let c = if w % 2 == 0 { -6.0 } else { 6.0 };
                let n = |rng: &mut rand::rngs::StdRng| 0.3 * Distribution::<f64>::sample(&StandardNormal, rng);
                vec![c + n(&mut rng), n(&mut rng)]
            })
            .collect();
        let state = SamplerState::new(&Mixture, &settings, 0, &[walkers]).unwrap();
        let states =
            run(&Mixture, &settings, vec![state], None, latens::progress::Stage::Sampling, &latens::progress::Quiet)
                .unwrap();
        let xs = pooled(&states, settings.burn_in);
        xs.iter().filter(|x| x[0] < 0.0).count() as f64 / xs.len() as f64
    };
    let (without, with) = (share(0.0), share(0.1));
    eprintln!("share in the lighter mode: {without:.3} without hops, {with:.3} with");
    assert!((without - 0.5).abs() < 0.02, "without hops {without}");
    assert!((with - 0.25).abs() < 0.03, "with hops {with}");
}

/// Gaussian likelihood exp(-|x - mu|^2 / (2 sl^2)) and normalised Gaussian
/// prior N(0, sp^2 I) in 3 dimensions: Z = (sl^2 / (sl^2 + sp^2))^(3/2)
/// exp(-|mu|^2 / (2 (sl^2 + sp^2))) (the convolution of two Gaussians).
struct AnalyticEvidence {
    mu: [f64; 3],
    sl: f64,
    sp: f64,
}

impl Target for AnalyticEvidence {
    fn dim(&self) -> usize {
        3
    }
    fn log_prior(&self, x: &[f64]) -> f64 {
        let s2 = self.sp * self.sp;
        -x.iter().map(|v| v * v).sum::<f64>() / (2.0 * s2) - 1.5 * (2.0 * std::f64::consts::PI * s2).ln()
    }
    fn log_likelihood(&self, x: &[f64]) -> Option<f64> {
        Some(-x.iter().zip(&self.mu).map(|(a, b)| (a - b).powi(2)).sum::<f64>() / (2.0 * self.sl * self.sl))
    }
}

#[test]
fn thermodynamic_integration_matches_an_analytic_evidence() {
    let t = AnalyticEvidence { mu: [1.0, -2.0, 0.5], sl: 0.1, sp: 5.0 };
    let (sl2, sp2) = (t.sl * t.sl, t.sp * t.sp);
    let mu2: f64 = t.mu.iter().map(|m| m * m).sum();
    let exact = 1.5 * (sl2 / (sl2 + sp2)).ln() - mu2 / (2.0 * (sl2 + sp2));
    let settings = SamplerSettings {
        n_walkers: 32,
        n_temperatures: 16,
        max_temperature: 1e6,
        n_steps: 3000,
        burn_in: 1000,
        thin: 5,
        seed: 9,
        ..SamplerSettings::default()
    };
    let mut rng = rand::rngs::StdRng::seed_from_u64(1);
    let normal = Normal::new(0.0, t.sp).unwrap();
    // Start from the prior (every rung).
    let starts: Vec<Vec<Vec<f64>>> = settings
        .initial_betas()
        .iter()
        .map(|_| (0..32).map(|_| (0..3).map(|_| normal.sample(&mut rng)).collect()).collect())
        .collect();
    let states: Vec<SamplerState> = (0..2).map(|r| SamplerState::new(&t, &settings, r, &starts).unwrap()).collect();
    let states = run(&t, &settings, states, None, latens::progress::Stage::Sampling, &latens::progress::Quiet).unwrap();
    let (z, err) = combined_evidence(&states, thermodynamic_evidence);
    assert!(err < 0.5, "error {err}");
    assert!((z - exact).abs() < 3.0 * err, "ln Z {z} +- {err} vs exact {exact}");
    let (ss, ss_err) = combined_evidence(&states, stepping_stone_evidence);
    assert!((ss - exact).abs() < 3.0 * ss_err.max(0.05), "stepping stones: ln Z {ss} +- {ss_err} vs exact {exact}");
}

#[test]
fn a_resumed_run_repeats_the_uninterrupted_one() {
    let settings = SamplerSettings {
        n_walkers: 16,
        n_temperatures: 5,
        max_temperature: 100.0,
        n_steps: 300,
        burn_in: 100,
        thin: 3,
        seed: 21,
        ..SamplerSettings::default()
    };
    let fresh = || -> Vec<SamplerState> {
        (0..2)
            .map(|r| {
                SamplerState::new(&Mixture, &settings, r, &start(&Mixture, &settings, &[6.0, 0.0], 0.3, r)).unwrap()
            })
            .collect()
    };
    let whole =
        run(&Mixture, &settings, fresh(), None, latens::progress::Stage::Sampling, &latens::progress::Quiet).unwrap();

    let dir = std::env::temp_dir().join(format!("latens-checkpoint-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("checkpoint.json");
    let cp = Checkpoint { path: &path, every: 50, fingerprint: "mixture".into() };
    // Interrupted at step 130 (as Ctrl-C would), then resumed.
    let observer = StopAt::new(130);
    let err = run(&Mixture, &settings, fresh(), Some(&cp), Stage::Sampling, &observer).unwrap_err();
    assert!(observer.begun.load(Ordering::SeqCst));
    assert_eq!(observer.seen.load(Ordering::SeqCst), 130);
    assert!(err.to_string().contains("step 130"), "{err}");
    let states = cp.load(&settings).unwrap();
    assert_eq!(states[0].step, 130);
    let resumed =
        run(&Mixture, &settings, states, Some(&cp), latens::progress::Stage::Sampling, &latens::progress::Quiet)
            .unwrap();
    assert!(resumed == whole, "the resumed run differs from the uninterrupted one");
    // Another problem's checkpoint is refused.
    let other = Checkpoint { path: &path, every: 50, fingerprint: "other".into() };
    assert!(other.load(&settings).is_err());
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn autocorrelation_time_of_an_ar1_process() {
    // x_t = phi x_{t-1} + noise has tau = (1 + phi) / (1 - phi) (a textbook
    // result, e.g. Sokal 1997, Monte Carlo Methods in Statistical Mechanics).
    let phi: f64 = 0.8;
    let mut rng = rand::rngs::StdRng::seed_from_u64(4);
    let series: Vec<Vec<f64>> = (0..32)
        .map(|_| {
            let mut x = 0.0;
            (0..5000)
                .map(|_| {
                    x = phi * x + Distribution::<f64>::sample(&StandardNormal, &mut rng);
                    x
                })
                .collect()
        })
        .collect();
    let tau = autocorrelation_time(&series);
    let exact = (1.0 + phi) / (1.0 - phi);
    assert!((tau - exact).abs() < 0.1 * exact, "{tau} vs {exact}");
}

#[test]
fn split_r_hat_flags_runs_that_disagree() {
    let mut rng = rand::rngs::StdRng::seed_from_u64(8);
    let draw = |rng: &mut rand::rngs::StdRng, shift: f64| -> Vec<f64> {
        (0..2000).map(|_| shift + Distribution::<f64>::sample(&StandardNormal, rng)).collect()
    };
    let same = vec![draw(&mut rng, 0.0), draw(&mut rng, 0.0)];
    let r = split_r_hat(&same);
    assert!((r - 1.0).abs() < 0.01, "{r}");
    let apart = vec![draw(&mut rng, 0.0), draw(&mut rng, 1.0)];
    assert!(split_r_hat(&apart) > 1.1);
    // Runs with the same mean but different spreads: the plain split R-hat
    // misses it, the rank-normalised one (its folded part) does not
    // (Vehtari et al. 2021).
    let wide: Vec<f64> = draw(&mut rng, 0.0).iter().map(|x| 3.0 * x).collect();
    let spread = vec![draw(&mut rng, 0.0), wide];
    assert!(split_r_hat(&spread) < 1.02, "{}", split_r_hat(&spread));
    assert!(rank_normalized_r_hat(&spread) > 1.1, "{}", rank_normalized_r_hat(&spread));
    assert!((rank_normalized_r_hat(&same) - 1.0).abs() < 0.01);
}
