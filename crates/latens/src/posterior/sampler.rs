//! A parallel-tempered, affine-invariant ensemble sampler.
//!
//! Each temperature holds an ensemble of walkers moved by the stretch move of
//! Goodman & Weare (2010, Comm. App. Math. Comp. Sci. 5, 65), in the
//! two-halves form that lets one half be updated in parallel (Foreman-Mackey
//! et al. 2013, PASP 125, 306), with a share of mode-hopping
//! differential-evolution moves (see [`SamplerSettings::mode_hop`]).
//! Neighbouring temperatures exchange walkers (parallel tempering); during
//! burn-in the ladder adapts so that the exchange rates between neighbours
//! become equal (after Vousden, Farr & Mandel 2016, MNRAS 455, 1919; here
//! the hottest finite temperature stays fixed and the log-temperature gaps
//! are rescaled to keep it so). The last rung has inverse temperature 0 and
//! samples the prior, so that the evidence follows by thermodynamic
//! integration over the ladder.
//!
//! The sampler is written in the same shape as the least-squares solver: a
//! [`SamplerState`] goes into [`advance`] and comes out one step later; the
//! driver [`run`] owns the loop, the progress report, the stop request and
//! the checkpoints. Every random number of a step comes from a generator
//! seeded by (seed, run, step), so a run resumed from a checkpoint repeats
//! the uninterrupted run exactly.

// Walker arrays are indexed in step with each other, as in the equations.
#![allow(clippy::needless_range_loop)]

use crate::progress::{Observer, Stage};
use std::path::Path;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// A probability density to sample: a prior and a likelihood, both as logs.
pub trait Target: Sync {
    fn dim(&self) -> usize;
    /// ln prior density at `x`; `-inf` outside the prior's support.
    fn log_prior(&self, x: &[f64]) -> f64;
    /// ln likelihood at `x` (only asked where the prior is finite); `None`
    /// excludes the point (treated as outside the prior's support).
    fn log_likelihood(&self, x: &[f64]) -> Option<f64>;
}

/// How the sampler runs.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SamplerSettings {
    /// Walkers per temperature (even, at least twice the dimension).
    pub n_walkers: usize,
    /// Rungs of the ladder, the prior rung (inverse temperature 0) included;
    /// 1 gives a plain ensemble sampler without evidence.
    pub n_temperatures: usize,
    /// Hottest finite temperature.
    pub max_temperature: f64,
    pub n_steps: usize,
    /// Steps discarded as burn-in (the ladder adapts during them).
    pub burn_in: usize,
    /// Keep the cold chain every `thin` steps.
    pub thin: usize,
    /// Whether the ladder adapts during burn-in.
    pub adapt: bool,
    /// Scale a of the stretch move's g(z) ~ 1/sqrt(z) on [1/a, a].
    pub stretch_scale: f64,
    /// Share of the moves that are mode hops instead of stretches: the
    /// differential-evolution move with gamma = 1 (ter Braak 2006, Stat.
    /// Comput. 16, 239), y = x + (x_j - x_k) for two walkers j, k of the
    /// other half; when j and k sit in different modes it carries x from
    /// one mode to the other in one step, so the modes' weights settle even
    /// where no stretch or exchange bridges them.
    #[serde(default)]
    pub mode_hop: f64,
    pub seed: u64,
}

impl Default for SamplerSettings {
    fn default() -> Self {
        SamplerSettings {
            n_walkers: 32,
            n_temperatures: 12,
            max_temperature: 1e5,
            n_steps: 2000,
            burn_in: 800,
            thin: 4,
            adapt: true,
            stretch_scale: 2.0,
            mode_hop: 0.1,
            seed: 1,
        }
    }
}

impl SamplerSettings {
    /// Checks the settings for a target of dimension `dim`.
    pub fn check(&self, dim: usize) -> Result<(), String> {
        if self.n_walkers % 2 != 0 || self.n_walkers < 2 * dim.max(1) {
            return Err(format!("walkers: need an even number of at least {}, got {}", 2 * dim.max(1), self.n_walkers));
        }
        if self.n_temperatures == 0 || self.thin == 0 || self.n_steps <= self.burn_in {
            return Err(format!(
                "need at least one temperature, thin >= 1 and more steps ({}) than burn-in steps ({})",
                self.n_steps, self.burn_in
            ));
        }
        if !(self.max_temperature > 1.0 && self.stretch_scale > 1.0) {
            return Err("the hottest temperature and the stretch scale must exceed 1".into());
        }
        Ok(())
    }

    /// The starting ladder: inverse temperatures from 1 down geometrically to
    /// 1/max_temperature, then 0.
    pub fn initial_betas(&self) -> Vec<f64> {
        let n = self.n_temperatures;
        match n {
            1 => vec![1.0],
            2 => vec![1.0, 0.0],
            _ => {
                let finite = n - 1;
                let mut b: Vec<f64> = (0..finite)
                    .map(|i| self.max_temperature.powf(-(i as f64) / (finite as f64 - 1.0).max(1.0)))
                    .collect();
                b.push(0.0);
                b
            }
        }
    }
}

/// Everything a run needs to continue: positions, ladder, counters and the
/// kept chain. Serialisable, for checkpoints.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SamplerState {
    /// Which independent run this is (enters the random streams).
    pub run: u64,
    pub step: usize,
    pub dim: usize,
    pub n_walkers: usize,
    pub betas: Vec<f64>,
    /// Positions, [temperature][walker][dim] flattened.
    pub x: Vec<f64>,
    pub log_l: Vec<f64>,
    pub log_p: Vec<f64>,
    /// Stretch moves accepted and proposed per temperature, after burn-in.
    pub accepted: Vec<u64>,
    pub proposed: Vec<u64>,
    /// Exchanges accepted and proposed per neighbouring pair, after burn-in.
    pub swaps_accepted: Vec<u64>,
    pub swaps_proposed: Vec<u64>,
    /// Ensemble mean of ln L per temperature, one entry per step after
    /// burn-in ([temperature][step]).
    pub mean_log_l: Vec<Vec<f64>>,
    /// Per step after burn-in, for each rung k >= 1: the log of the walkers'
    /// mean of exp((beta_{k-1} - beta_k) ln L) (the stepping-stone ratio of
    /// Xie et al. 2011, Syst. Biol. 60, 150), [rung][step].
    pub stone_log_ratio: Vec<Vec<f64>>,
    /// The cold chain every `thin` steps, burn-in included:
    /// [kept step][walker][dim] flattened, with ln L and the step numbers.
    pub chain: Vec<f64>,
    pub chain_log_l: Vec<f64>,
    pub chain_steps: Vec<usize>,
}

/// Why a sampler could not start or go on.
#[derive(Debug, thiserror::Error)]
pub enum SamplerError {
    #[error("sampler settings: {0}")]
    Settings(String),
    #[error("a starting walker lies outside the prior or the likelihood's support (temperature {0}, walker {1})")]
    BadStart(usize, usize),
    #[error("stopped at step {step} of {of}{}", match checkpoint {
        Some(c) => format!("; the checkpoint {c} resumes it"),
        None => "; nothing was saved".to_string(),
    })]
    Interrupted { step: usize, of: usize, checkpoint: Option<String> },
    #[error("checkpoint {0}: {1}")]
    Checkpoint(String, String),
}

fn tempered(beta: f64, log_p: f64, log_l: f64) -> f64 {
    if beta == 0.0 { log_p } else { log_p + beta * log_l }
}

fn evaluate(target: &dyn Target, x: &[f64]) -> (f64, f64) {
    let lp = target.log_prior(x);
    if !lp.is_finite() {
        return (f64::NEG_INFINITY, f64::NEG_INFINITY);
    }
    // A likelihood of exactly zero excludes the point like the prior would.
    match target.log_likelihood(x) {
        Some(ll) if ll.is_finite() => (lp, ll),
        _ => (f64::NEG_INFINITY, f64::NEG_INFINITY),
    }
}

/// A 64-bit mix (splitmix64's finaliser) to derive independent seeds.
fn mix(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9e37_79b9_7f4a_7c15);
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

impl SamplerState {
    /// A state from starting positions, one per walker per temperature
    /// ([temperature][walker] of length-dim vectors).
    pub fn new(
        target: &dyn Target,
        settings: &SamplerSettings,
        run: u64,
        start: &[Vec<Vec<f64>>],
    ) -> Result<SamplerState, SamplerError> {
        let dim = target.dim();
        settings.check(dim).map_err(SamplerError::Settings)?;
        let betas = settings.initial_betas();
        let (nt, nw) = (betas.len(), settings.n_walkers);
        if start.len() != nt || start.iter().any(|t| t.len() != nw || t.iter().any(|w| w.len() != dim)) {
            return Err(SamplerError::Settings(format!(
                "starting positions: need {nt} temperatures of {nw} walkers of dimension {dim}"
            )));
        }
        let x: Vec<f64> = start.iter().flatten().flatten().copied().collect();
        let evals: Vec<(f64, f64)> =
            (0..nt * nw).into_par_iter().map(|i| evaluate(target, &x[i * dim..][..dim])).collect();
        for (i, (lp, ll)) in evals.iter().enumerate() {
            if !lp.is_finite() || !ll.is_finite() && betas[i / nw] > 0.0 {
                return Err(SamplerError::BadStart(i / nw, i % nw));
            }
        }
        let mut state = SamplerState {
            run,
            step: 0,
            dim,
            n_walkers: nw,
            betas,
            x,
            log_p: evals.iter().map(|e| e.0).collect(),
            log_l: evals.iter().map(|e| e.1).collect(),
            accepted: vec![0; nt],
            proposed: vec![0; nt],
            swaps_accepted: vec![0; nt.saturating_sub(1)],
            swaps_proposed: vec![0; nt.saturating_sub(1)],
            mean_log_l: vec![Vec::new(); nt],
            stone_log_ratio: vec![Vec::new(); nt],
            chain: Vec::new(),
            chain_log_l: Vec::new(),
            chain_steps: Vec::new(),
        };
        state.keep(settings);
        Ok(state)
    }

    fn n_temperatures(&self) -> usize {
        self.betas.len()
    }

    fn walker(&self, t: usize, w: usize) -> &[f64] {
        &self.x[(t * self.n_walkers + w) * self.dim..][..self.dim]
    }

    fn keep(&mut self, settings: &SamplerSettings) {
        if self.step % settings.thin == 0 {
            let cold = &self.x[..self.n_walkers * self.dim];
            self.chain.extend_from_slice(cold);
            self.chain_log_l.extend_from_slice(&self.log_l[..self.n_walkers]);
            self.chain_steps.push(self.step);
        }
    }

    /// The cold chain's kept positions after burn-in, one vector per sample.
    pub fn posterior_samples(&self, burn_in: usize) -> Vec<(Vec<f64>, f64)> {
        let (nw, d) = (self.n_walkers, self.dim);
        let mut out = Vec::new();
        for (k, &s) in self.chain_steps.iter().enumerate() {
            if s < burn_in {
                continue;
            }
            for w in 0..nw {
                let i = k * nw + w;
                out.push((self.chain[i * d..][..d].to_vec(), self.chain_log_l[i]));
            }
        }
        out
    }

    /// One parameter's kept cold chain after burn-in, per walker.
    pub fn walker_series(&self, burn_in: usize, param: usize) -> Vec<Vec<f64>> {
        let (nw, d) = (self.n_walkers, self.dim);
        let rows: Vec<usize> = (0..self.chain_steps.len()).filter(|&k| self.chain_steps[k] >= burn_in).collect();
        (0..nw).map(|w| rows.iter().map(|&k| self.chain[(k * nw + w) * d + param]).collect()).collect()
    }
}

/// Advances a state by one step: two half-ensemble stretch moves at every
/// temperature, then exchanges between neighbouring temperatures, then
/// (during burn-in) the ladder's adaptation.
pub fn advance(mut s: SamplerState, target: &dyn Target, settings: &SamplerSettings) -> SamplerState {
    let mut rng = StdRng::seed_from_u64(mix(mix(settings.seed) ^ mix(s.run.wrapping_add(1) << 32) ^ s.step as u64));
    let (nt, nw, d) = (s.n_temperatures(), s.n_walkers, s.dim);
    let half = nw / 2;
    let a = settings.stretch_scale;
    let counting = s.step >= settings.burn_in;
    for h in 0..2 {
        let (mine, other) = if h == 0 { (0..half, half..nw) } else { (half..nw, 0..half) };
        // Draw every random number first, in a fixed order.
        struct Proposal {
            t: usize,
            w: usize,
            z: f64,
            u: f64,
            y: Vec<f64>,
        }
        let mut proposals = Vec::with_capacity(nt * half);
        for t in 0..nt {
            for w in mine.clone() {
                let c = other.start + rng.random_range(0..half);
                let r: f64 = rng.random();
                let u: f64 = rng.random();
                let xw = s.walker(t, w);
                if settings.mode_hop > 0.0 && rng.random::<f64>() < settings.mode_hop {
                    // Mode hop: y = x + (x_c - x_k), with a small jitter
                    // (1e-4 of the difference, symmetric) so that the move
                    // is not confined to a lattice. The proposal is
                    // symmetric: z = 1 leaves the Jacobian term at zero.
                    let mut k = other.start + rng.random_range(0..half - 1);
                    if k >= c {
                        k += 1;
                    }
                    let (xc, xk) = (s.walker(t, c), s.walker(t, k));
                    let y: Vec<f64> = (0..d)
                        .map(|i| {
                            let jitter = 1e-4 * (2.0 * rng.random::<f64>() - 1.0);
                            xw[i] + (xc[i] - xk[i]) * (1.0 + jitter)
                        })
                        .collect();
                    proposals.push(Proposal { t, w, z: 1.0, u, y });
                } else {
                    let z = ((a - 1.0) * r + 1.0).powi(2) / a;
                    let xc = s.walker(t, c);
                    let y: Vec<f64> = (0..d).map(|i| xc[i] + z * (xw[i] - xc[i])).collect();
                    proposals.push(Proposal { t, w, z, u, y });
                }
            }
        }
        let evals: Vec<(f64, f64)> = proposals.par_iter().map(|p| evaluate(target, &p.y)).collect();
        for (p, (lp, ll)) in proposals.iter().zip(evals) {
            let i = p.t * nw + p.w;
            let beta = s.betas[p.t];
            let new = tempered(beta, lp, ll);
            let old = tempered(beta, s.log_p[i], s.log_l[i]);
            let log_alpha = (d as f64 - 1.0) * p.z.ln() + new - old;
            if counting {
                s.proposed[p.t] += 1;
            }
            if new.is_finite() && (log_alpha >= 0.0 || p.u.ln() < log_alpha) {
                s.x[i * d..][..d].copy_from_slice(&p.y);
                s.log_p[i] = lp;
                s.log_l[i] = ll;
                if counting {
                    s.accepted[p.t] += 1;
                }
            }
        }
    }
    // Exchanges, from the hottest pair down.
    let mut rates = vec![0.0; nt.saturating_sub(1)];
    for t in (1..nt).rev() {
        let mut perm: Vec<usize> = (0..nw).collect();
        for i in (1..nw).rev() {
            let j = rng.random_range(0..=i);
            perm.swap(i, j);
        }
        let mut n_acc = 0;
        for w in 0..nw {
            let (hot, cold) = (t * nw + perm[w], (t - 1) * nw + w);
            let log_alpha = (s.betas[t - 1] - s.betas[t]) * (s.log_l[hot] - s.log_l[cold]);
            let u: f64 = rng.random();
            if !log_alpha.is_nan() && (log_alpha >= 0.0 || u.ln() < log_alpha) {
                for k in 0..d {
                    s.x.swap(hot * d + k, cold * d + k);
                }
                s.log_l.swap(hot, cold);
                s.log_p.swap(hot, cold);
                n_acc += 1;
            }
        }
        rates[t - 1] = n_acc as f64 / nw as f64;
        if counting {
            s.swaps_accepted[t - 1] += n_acc;
            s.swaps_proposed[t - 1] += nw as u64;
        }
    }
    if settings.adapt && !counting && nt > 3 {
        adapt_ladder(&mut s.betas, &rates, s.step, settings.max_temperature);
    }
    if counting {
        for t in 0..nt {
            let m = s.log_l[t * nw..][..nw].iter().sum::<f64>() / nw as f64;
            s.mean_log_l[t].push(m);
            if t > 0 {
                let db = s.betas[t - 1] - s.betas[t];
                let terms: Vec<f64> = s.log_l[t * nw..][..nw].iter().map(|l| db * l).collect();
                s.stone_log_ratio[t].push(log_mean_exp(&terms));
            }
        }
    }
    s.step += 1;
    s.keep(settings);
    s
}

/// One adaptation of the ladder's finite rungs: each log-temperature gap
/// grows where its exchange rate is above the mean and shrinks where it is
/// below, with a gain decaying as t0/(t + t0); the gaps are then rescaled so
/// that the hottest finite temperature stays put (no gap wider than twice
/// the even spacing).
fn adapt_ladder(betas: &mut [f64], rates: &[f64], step: usize, t_max: f64) {
    const NU: f64 = 10.0;
    const T0: f64 = 100.0;
    let finite = betas.len() - 1;
    let gaps = finite - 1;
    let kappa = T0 / (NU * (step as f64 + T0));
    let mean = rates[..gaps].iter().sum::<f64>() / gaps as f64;
    let mut ln_t: Vec<f64> = betas[..finite].iter().map(|b| -b.ln()).collect();
    let mut g: Vec<f64> = (0..gaps).map(|i| (ln_t[i + 1] - ln_t[i]) * (kappa * (rates[i] - mean)).exp()).collect();
    // No gap may grow beyond twice the even spacing in ln T: the evidence's
    // quadrature needs rungs all along the ladder, not only where the
    // exchanges are hardest.
    let even = t_max.ln() / gaps as f64;
    for _ in 0..3 {
        let total: f64 = g.iter().sum();
        g.iter_mut().for_each(|x| *x = (*x * t_max.ln() / total).min(2.0 * even));
    }
    let total: f64 = g.iter().sum();
    g.iter_mut().for_each(|x| *x *= t_max.ln() / total);
    for i in 0..gaps {
        ln_t[i + 1] = ln_t[i] + g[i];
    }
    for i in 1..finite {
        betas[i] = (-ln_t[i]).exp();
    }
}

/// A checkpoint on disk: the settings, a fingerprint of the problem, and
/// the states of every run.
#[derive(Serialize, Deserialize)]
struct CheckpointFile {
    fingerprint: String,
    settings: SamplerSettings,
    states: Vec<SamplerState>,
}

/// Where and how often the driver saves its progress.
pub struct Checkpoint<'a> {
    pub path: &'a Path,
    pub every: usize,
    /// Identifies the problem (data, priors): a checkpoint of another
    /// problem is refused.
    pub fingerprint: String,
}

impl Checkpoint<'_> {
    fn save(&self, settings: &SamplerSettings, states: &[SamplerState]) -> Result<(), SamplerError> {
        let file = CheckpointFile {
            fingerprint: self.fingerprint.clone(),
            settings: settings.clone(),
            states: states.to_vec(),
        };
        let text = serde_json::to_vec(&file)
            .map_err(|e| SamplerError::Checkpoint(self.path.display().to_string(), e.to_string()))?;
        crate::io::write_atomically(self.path, &text)
            .map_err(|e| SamplerError::Checkpoint(self.path.display().to_string(), e.to_string()))
    }

    /// The states saved at `path`, if they belong to this problem and these
    /// settings.
    pub fn load(&self, settings: &SamplerSettings) -> Result<Vec<SamplerState>, SamplerError> {
        let name = self.path.display().to_string();
        let bytes = std::fs::read(self.path).map_err(|e| SamplerError::Checkpoint(name.clone(), e.to_string()))?;
        let file: CheckpointFile =
            serde_json::from_slice(&bytes).map_err(|e| SamplerError::Checkpoint(name.clone(), e.to_string()))?;
        if file.fingerprint != self.fingerprint {
            return Err(SamplerError::Checkpoint(
                name,
                "it was made for other data or other priors; start afresh without --resume".into(),
            ));
        }
        if file.settings != *settings {
            return Err(SamplerError::Checkpoint(
                name,
                "it was made with other sampler settings (walkers, temperatures, steps or seed); use the same ones"
                    .into(),
            ));
        }
        Ok(file.states)
    }
}

/// Runs independent states to `settings.n_steps`, one step of each in turn.
/// Reports to `observer` as `stage` (steps done by the slowest run), saves a
/// checkpoint every `checkpoint.every` steps and, when the observer asks to
/// stop, saves one and returns [`SamplerError::Interrupted`].
pub fn run(
    target: &dyn Target,
    settings: &SamplerSettings,
    states: Vec<SamplerState>,
    checkpoint: Option<&Checkpoint>,
    stage: Stage,
    observer: &dyn Observer,
) -> Result<Vec<SamplerState>, SamplerError> {
    observer.begin(stage, settings.n_steps as u64);
    let result = drive(target, settings, states, checkpoint, observer);
    observer.finish();
    result
}

fn drive(
    target: &dyn Target,
    settings: &SamplerSettings,
    mut states: Vec<SamplerState>,
    checkpoint: Option<&Checkpoint>,
    observer: &dyn Observer,
) -> Result<Vec<SamplerState>, SamplerError> {
    loop {
        let step = states.iter().map(|s| s.step).min().unwrap_or(settings.n_steps);
        observer.advance(step as u64);
        if step >= settings.n_steps {
            return Ok(states);
        }
        if observer.stop_requested() {
            let Some(c) = checkpoint else {
                return Err(SamplerError::Interrupted { step, of: settings.n_steps, checkpoint: None });
            };
            c.save(settings, &states)?;
            return Err(SamplerError::Interrupted {
                step,
                of: settings.n_steps,
                checkpoint: Some(c.path.display().to_string()),
            });
        }
        states = states
            .into_iter()
            .map(|s| if s.step < settings.n_steps { advance(s, target, settings) } else { s })
            .collect();
        if let Some(c) = checkpoint
            && c.every > 0
            && (step + 1) % c.every == 0
        {
            c.save(settings, &states)?;
        }
    }
}

/// Integrated autocorrelation time of a set of equally long series (one per
/// walker), from their mean normalised autocorrelation function with Sokal's
/// automatic window (the smallest M with M >= 5 tau(M)), as recommended by
/// Goodman & Weare (2010) and used by emcee. In units of the series' spacing.
pub fn autocorrelation_time(series: &[Vec<f64>]) -> f64 {
    let n = series.iter().map(|s| s.len()).min().unwrap_or(0);
    if n < 4 {
        return f64::NAN;
    }
    let mut rho = vec![0.0; n / 2];
    let mut used = 0;
    for s in series {
        let mean = s[..n].iter().sum::<f64>() / n as f64;
        let c: Vec<f64> = s[..n].iter().map(|v| v - mean).collect();
        let c0 = c.iter().map(|v| v * v).sum::<f64>();
        if c0 <= 0.0 {
            continue;
        }
        used += 1;
        // Lags only as far as the window can need them.
        for lag in 0..n / 2 {
            let acf: f64 = (0..n - lag).map(|i| c[i] * c[i + lag]).sum::<f64>() / c0;
            rho[lag] += acf;
        }
    }
    if used == 0 {
        return 1.0;
    }
    rho.iter_mut().for_each(|r| *r /= used as f64);
    let mut tau = 1.0;
    for m in 1..n / 2 {
        tau += 2.0 * rho[m];
        if m as f64 >= 5.0 * tau {
            return tau.max(1.0);
        }
    }
    // The window never closed: the series is too short to measure tau.
    tau.max(n as f64 / 10.0)
}

/// Split R-hat (Gelman et al. 2013, Bayesian Data Analysis, 3rd ed., sec.
/// 11.4) of one parameter over independent runs: each run's series is cut
/// in two halves, and the potential scale reduction of those chains is
/// returned.
pub fn split_r_hat(runs: &[Vec<f64>]) -> f64 {
    let mut chains: Vec<&[f64]> = Vec::new();
    for r in runs {
        let h = r.len() / 2;
        if h >= 2 {
            chains.push(&r[..h]);
            chains.push(&r[h..2 * h]);
        }
    }
    let m = chains.len();
    if m < 2 {
        return f64::NAN;
    }
    let n = chains.iter().map(|c| c.len()).min().unwrap_or(0) as f64;
    let means: Vec<f64> = chains.iter().map(|c| c[..n as usize].iter().sum::<f64>() / n).collect();
    let grand = means.iter().sum::<f64>() / m as f64;
    let b = n / (m as f64 - 1.0) * means.iter().map(|x| (x - grand).powi(2)).sum::<f64>();
    let w = chains
        .iter()
        .zip(&means)
        .map(|(c, mu)| c[..n as usize].iter().map(|x| (x - mu).powi(2)).sum::<f64>() / (n - 1.0))
        .sum::<f64>()
        / m as f64;
    if w <= 0.0 {
        return if b <= 0.0 { 1.0 } else { f64::INFINITY };
    }
    (((n - 1.0) / n * w + b / n) / w).sqrt()
}

fn log_mean_exp(v: &[f64]) -> f64 {
    let m = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !m.is_finite() {
        return m;
    }
    m + (v.iter().map(|x| (x - m).exp()).sum::<f64>() / v.len() as f64).ln()
}

/// The stepping-stone estimate of ln(Z_{beta_{k-1}} / Z_{beta_k}) from rung
/// k's samples, and its error (delta method, with the autocorrelation time
/// of the per-step ratios).
fn stone(state: &SamplerState, k: usize) -> (f64, f64) {
    let series = &state.stone_log_ratio[k];
    let n = series.len() as f64;
    let m = series.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !m.is_finite() || series.is_empty() {
        return (f64::NEG_INFINITY, f64::INFINITY);
    }
    let r: Vec<f64> = series.iter().map(|x| (x - m).exp()).collect();
    let mean = r.iter().sum::<f64>() / n;
    let var = r.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0).max(1.0);
    let tau = autocorrelation_time(std::slice::from_ref(&r));
    let tau = if tau.is_finite() { tau } else { n };
    (m + mean.ln(), (var * tau / n).sqrt() / mean)
}

/// Rank-normalised split R-hat (Vehtari, Gelman, Simpson, Carpenter &
/// Bürkner 2021, Bayesian Analysis 16, 667): the larger of the split R-hat
/// of the normal scores of the pooled ranks (the bulk) and of the same for
/// |x - median| (folded: sensitive to differences of scale and in the
/// tails, which the plain split R-hat of means misses).
pub fn rank_normalized_r_hat(runs: &[Vec<f64>]) -> f64 {
    let scores = |runs: &[Vec<f64>]| -> Vec<Vec<f64>> {
        let mut all: Vec<(f64, usize, usize)> =
            runs.iter().enumerate().flat_map(|(r, v)| v.iter().enumerate().map(move |(i, &x)| (x, r, i))).collect();
        all.sort_by(|a, b| a.0.total_cmp(&b.0));
        let n = all.len() as f64;
        let mut out: Vec<Vec<f64>> = runs.iter().map(|v| vec![0.0; v.len()]).collect();
        for (rank, &(_, r, i)) in all.iter().enumerate() {
            // Blom's plotting position, then the standard normal quantile.
            out[r][i] = normal_quantile((rank as f64 + 1.0 - 0.375) / (n + 0.25));
        }
        out
    };
    let mut pooled: Vec<f64> = runs.iter().flatten().copied().collect();
    if pooled.len() < 8 {
        return f64::NAN;
    }
    pooled.sort_by(f64::total_cmp);
    let median = pooled[pooled.len() / 2];
    let folded: Vec<Vec<f64>> = runs.iter().map(|v| v.iter().map(|x| (x - median).abs()).collect()).collect();
    split_r_hat(&scores(runs)).max(split_r_hat(&scores(&folded)))
}

/// The standard normal quantile, by bisection on the cumulative
/// distribution (ample for rank normalisation).
fn normal_quantile(p: f64) -> f64 {
    let (mut lo, mut hi) = (-12.0, 12.0);
    for _ in 0..80 {
        let mid = 0.5 * (lo + hi);
        if crate::perturber::sensitivity::normal_cdf(mid) < p {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// ln evidence by thermodynamic integration, ln Z = integral over beta in
/// [0, 1] of <ln L>_beta. Between finite rungs the rule is the trapezoid in
/// ln(beta) applied to beta <ln L>_beta (exact where <ln L> ~ -d/(2 beta),
/// the regime of a well-measured parameter, where the plain trapezoid in
/// beta needs many rungs). From the hottest finite rung down to the prior
/// (beta = 0), where <ln L> can fall by many orders of magnitude and no
/// quadrature is safe, the stepping-stone ratio E_prior[L^beta_min] is used
/// instead (Xie et al. 2011). The error: the Monte Carlo error of each
/// rung's mean (variance and autocorrelation time of its per-step means)
/// through the rule's weights, the stepping-stone error, and the
/// discretisation error, estimated as the difference from the same rule on
/// every other rung (as ptemcee does), in quadrature.
pub fn thermodynamic_evidence(state: &SamplerState) -> (f64, f64) {
    let nt = state.betas.len();
    if nt < 2 || state.mean_log_l.iter().any(|m| m.is_empty()) {
        return (f64::NAN, f64::NAN);
    }
    let b = &state.betas;
    let finite = if b[nt - 1] == 0.0 { nt - 1 } else { nt };
    let means: Vec<f64> = state.mean_log_l.iter().map(|m| m.iter().sum::<f64>() / m.len() as f64).collect();
    let weights = |idx: &[usize]| -> Vec<f64> {
        let mut w = vec![0.0; nt];
        for pair in idx.windows(2) {
            let (i, j) = (pair[0], pair[1]);
            let h = 0.5 * (b[i].ln() - b[j].ln());
            w[i] += h * b[i];
            w[j] += h * b[j];
        }
        w
    };
    let rule = |idx: &[usize]| -> f64 { weights(idx).iter().zip(&means).map(|(w, m)| w * m).sum() };
    let all: Vec<usize> = (0..finite).collect();
    let mut half: Vec<usize> = (0..finite).step_by(2).collect();
    if *half.last().unwrap_or(&0) != finite - 1 {
        half.push(finite - 1);
    }
    let (tail, tail_err) = if finite < nt { stone(state, nt - 1) } else { (0.0, 0.0) };
    let z = rule(&all) + tail;
    let discretisation = (rule(&all) - rule(&half)).abs();
    let w = weights(&all);
    let mut var = tail_err * tail_err;
    for k in 0..finite {
        let series = &state.mean_log_l[k];
        let n = series.len() as f64;
        let mu = means[k];
        let v = series.iter().map(|x| (x - mu).powi(2)).sum::<f64>() / (n - 1.0).max(1.0);
        let tau = autocorrelation_time(std::slice::from_ref(series));
        let tau = if tau.is_finite() { tau } else { n };
        var += w[k] * w[k] * v * tau / n;
    }
    (z, (var + discretisation * discretisation).sqrt())
}

/// ln evidence by stepping stones over the whole ladder, with its error: a
/// cross-check of [`thermodynamic_evidence`].
pub fn stepping_stone_evidence(state: &SamplerState) -> (f64, f64) {
    let nt = state.betas.len();
    if nt < 2 || state.stone_log_ratio[1..].iter().any(|m| m.is_empty()) {
        return (f64::NAN, f64::NAN);
    }
    let (mut z, mut var) = (0.0, 0.0);
    for k in 1..nt {
        let (r, e) = stone(state, k);
        z += r;
        var += e * e;
    }
    (z, var.sqrt())
}

/// Combines the evidence of independent runs: their mean, with the larger
/// of the propagated error and the runs' scatter.
pub fn combined_evidence(states: &[SamplerState], method: fn(&SamplerState) -> (f64, f64)) -> (f64, f64) {
    let each: Vec<(f64, f64)> = states.iter().map(method).collect();
    let n = each.len() as f64;
    if each.is_empty() {
        return (f64::NAN, f64::NAN);
    }
    let mean = each.iter().map(|e| e.0).sum::<f64>() / n;
    let propagated = (each.iter().map(|e| e.1 * e.1).sum::<f64>()).sqrt() / n;
    let scatter = if each.len() > 1 {
        (each.iter().map(|e| (e.0 - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt() / n.sqrt()
    } else {
        0.0
    };
    (mean, propagated.max(scatter))
}
