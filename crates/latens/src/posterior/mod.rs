//! The perturber's posterior: where can it be, how heavy, and is it a
//! perturber at all?
//!
//! - [`sampler`]: the parallel-tempered ensemble sampler, its diagnostics,
//!   the evidence by thermodynamic integration, checkpoints.
//! - [`model`]: the perturber's prior and linear-kernel likelihood.
//! - [`impostors`]: the alternative explanations (planet masses,
//!   non-gravitational push, astrometric offsets) and their Bayes factors.
//! - this module: the check of the linear samples against the full
//!   nonlinear model (importance weights) and summaries of samples.

pub mod impostors;
pub mod model;
pub mod sampler;

use std::sync::Mutex;

use rand::{RngExt, SeedableRng};
use rayon::prelude::*;

pub use model::{PerturberPosterior, PerturberPrior, PerturberSample};
pub use sampler::{SamplerSettings, SamplerState, Target};

use crate::astrometry::ObservingGeometry;
use crate::dynamics::{ForceModel, Perturber, PropagationError, PropagationSettings};
use crate::ephemeris::Ephemeris;
use crate::io::observations::Observation;
use crate::perturber::{LinearKernel, SignalKernel};
use crate::reference::{OrbitModel, ReferenceFit, residual_arcsec_between, whiten};

/// The full nonlinear likelihood of a perturber sample: each tracked body
/// and the perturber integrated together under the Sun and the known
/// planets, the difference from the null model's predictions whitened and
/// projected like the kernel's signal (so the orbit correction is
/// marginalised the same way). For several bodies sharing one perturber
/// ([`NonlinearLikelihood::joint`]) the bodies' log-likelihoods add, as
/// their independent residuals do.
pub struct NonlinearLikelihood<'a> {
    bodies: Vec<BodyLikelihood<'a>>,
    /// Sum over bodies of (|y_null|^2 - |y'|^2) / 2, with y' the kernel's
    /// residuals: zero for a null kernel, the constant that puts a
    /// recentred kernel's likelihood on the same footing otherwise.
    offset: f64,
}

/// One body's part of the nonlinear likelihood.
struct BodyLikelihood<'a> {
    kernel: &'a LinearKernel,
    observations: &'a [Observation],
    state: [f64; 6],
    base: Vec<crate::reference::Prediction>,
    emission: Vec<f64>,
    models: Vec<Mutex<OrbitModel<'a>>>,
    /// The null model's whitened, projected residuals.
    null_residuals: Vec<f64>,
}

/// What one body's nonlinear model is built from: its null fit, its kernel
/// (null or recentred), its observations, their geometry and its force
/// model.
pub struct BodyModel<'a, 'g> {
    pub null: &'g ReferenceFit,
    pub kernel: &'a LinearKernel,
    pub observations: &'a [Observation],
    pub geometry: &'g [ObservingGeometry],
    pub model: &'a ForceModel,
}

impl<'a> BodyLikelihood<'a> {
    /// The body's part and its share of the offset.
    fn new(body: BodyModel<'a, '_>, ephemeris: &'a dyn Ephemeris) -> Result<(Self, f64), PropagationError> {
        let BodyModel { null, kernel, observations, geometry, model } = body;
        let settings = PropagationSettings { partials: false, reuse_steps: false, ..PropagationSettings::fast() };
        let make = || {
            OrbitModel::with_settings(observations, geometry.to_vec(), null.epoch_tdb_days, model, ephemeris, settings)
        };
        let mut first = make()?;
        let base = first.predict_settled(&null.state)?;
        let emission = first.emission_epochs().to_vec();
        let mut models = vec![Mutex::new(first)];
        for _ in 1..rayon::current_num_threads() {
            models.push(Mutex::new(make()?));
        }
        let mut null_residuals = vec![0.0; 2 * observations.len()];
        crate::reference::whitened_residuals(observations, &base, &kernel.used, &mut null_residuals);
        kernel.project(&mut null_residuals);
        let y0: f64 = null_residuals.iter().map(|x| x * x).sum();
        let y1: f64 = kernel.residuals.iter().map(|x| x * x).sum();
        let part = BodyLikelihood { kernel, observations, state: null.state, base, emission, models, null_residuals };
        Ok((part, 0.5 * (y0 - y1)))
    }

    /// s.y - s.s/2 of the sample's projected nonlinear signal.
    fn log_likelihood(&self, perturber: Perturber) -> Option<f64> {
        let slot = rayon::current_thread_index().unwrap_or(0) % self.models.len();
        let mut m = self.models[slot].lock().ok()?;
        m.set_emission_epochs(&self.emission);
        m.perturbers = vec![perturber];
        let p = m.predict(&self.state, false).ok()?;
        drop(m);
        let n = self.observations.len();
        let mut signal = vec![0.0; 2 * n];
        for k in 0..n {
            if !self.kernel.used[k] {
                continue;
            }
            let d = residual_arcsec_between(&p[k].radec, &self.base[k].radec);
            let (w1, w2) = whiten(&self.observations[k], d);
            signal[2 * k] = w1;
            signal[2 * k + 1] = w2;
        }
        self.kernel.project(&mut signal);
        let ss: f64 = signal.iter().map(|x| x * x).sum();
        let sy: f64 = signal.iter().zip(&self.null_residuals).map(|(a, b)| a * b).sum();
        Some(sy - 0.5 * ss)
    }
}

impl<'a> NonlinearLikelihood<'a> {
    /// One tracked body's nonlinear likelihood.
    pub fn new(
        null: &ReferenceFit,
        kernel: &'a LinearKernel,
        observations: &'a [Observation],
        geometry: &[ObservingGeometry],
        model: &'a ForceModel,
        ephemeris: &'a dyn Ephemeris,
    ) -> Result<Self, PropagationError> {
        Self::joint(vec![BodyModel { null, kernel, observations, geometry, model }], ephemeris)
    }

    /// Several bodies sharing one perturber: the sum of their
    /// log-likelihoods (each body integrated with the perturber on its
    /// own; the bodies do not pull on each other, as in the kernel).
    pub fn joint(bodies: Vec<BodyModel<'a, '_>>, ephemeris: &'a dyn Ephemeris) -> Result<Self, PropagationError> {
        let mut parts = Vec::with_capacity(bodies.len());
        let mut offset = 0.0;
        for body in bodies {
            let (part, share) = BodyLikelihood::new(body, ephemeris)?;
            parts.push(part);
            offset += share;
        }
        Ok(NonlinearLikelihood { bodies: parts, offset })
    }

    /// ln L (the chi-square drop over 2) of a sample; `None` when a
    /// propagation fails (a close encounter, say).
    pub fn log_likelihood(&self, s: &PerturberSample) -> Option<f64> {
        let perturber = Perturber {
            gm_au3_per_day2: s.gm_au3_per_day2,
            position_au: s.position_au,
            velocity_au_per_day: s.velocity_au_per_day,
        };
        let mut total = -self.offset;
        for body in &self.bodies {
            total += body.log_likelihood(perturber)?;
        }
        Some(total)
    }
}

/// The nonlinear posterior: the linear model's prior with the nonlinear
/// likelihood, for MCMC steps where the importance weights collapse.
pub struct NonlinearPosterior<'p, 'a, K: SignalKernel + ?Sized = LinearKernel> {
    pub linear: &'p PerturberPosterior<'p, K>,
    pub likelihood: &'p NonlinearLikelihood<'a>,
}

impl<K: SignalKernel + ?Sized> Target for NonlinearPosterior<'_, '_, K> {
    fn dim(&self) -> usize {
        model::DIM
    }
    fn log_prior(&self, x: &[f64]) -> f64 {
        self.linear.log_prior(x)
    }
    fn log_likelihood(&self, x: &[f64]) -> Option<f64> {
        // The close-approach exclusion of the linear model.
        self.linear.log_likelihood(x)?;
        self.likelihood.log_likelihood(&PerturberSample::from_params(x))
    }
}

/// Importance weights of linear-model samples under the nonlinear model:
/// ln w = ln L_nonlinear - ln L_linear, evaluated in parallel; samples whose
/// propagation fails get weight 0.
pub fn importance_log_weights(samples: &[(Vec<f64>, f64)], nonlinear: &NonlinearLikelihood) -> Vec<f64> {
    samples
        .par_iter()
        .map(|(x, ll)| match nonlinear.log_likelihood(&PerturberSample::from_params(x)) {
            Some(nl) => nl - ll,
            None => f64::NEG_INFINITY,
        })
        .collect()
}

/// Kish's effective sample size of importance weights given as logs.
pub fn effective_sample_size(log_w: &[f64]) -> f64 {
    let max = log_w.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !max.is_finite() {
        return 0.0;
    }
    let w: Vec<f64> = log_w.iter().map(|l| (l - max).exp()).collect();
    let s: f64 = w.iter().sum();
    let s2: f64 = w.iter().map(|x| x * x).sum();
    s * s / s2
}

/// Systematic resampling: `n` indices drawn in proportion to the weights
/// (given as logs), seeded.
pub fn resample(log_w: &[f64], n: usize, seed: u64) -> Vec<usize> {
    let max = log_w.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let w: Vec<f64> = log_w.iter().map(|l| (l - max).exp()).collect();
    let total: f64 = w.iter().sum();
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    let u0: f64 = rng.random::<f64>() / n as f64;
    let mut out = Vec::with_capacity(n);
    let (mut acc, mut i) = (w.first().copied().unwrap_or(0.0) / total, 0);
    for k in 0..n {
        let u = u0 + k as f64 / n as f64;
        while u > acc && i + 1 < w.len() {
            i += 1;
            acc += w[i] / total;
        }
        out.push(i);
    }
    out
}

/// Quantiles (linear interpolation between order statistics) of values.
pub fn quantiles(values: &[f64], probs: &[f64]) -> Vec<f64> {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return vec![f64::NAN; probs.len()];
    }
    v.sort_by(f64::total_cmp);
    probs
        .iter()
        .map(|&p| {
            let h = p.clamp(0.0, 1.0) * (v.len() - 1) as f64;
            let (lo, hi) = (h.floor() as usize, h.ceil() as usize);
            v[lo] + (h - lo as f64) * (v[hi] - v[lo])
        })
        .collect()
}
