//! The perturber's posterior through the linear kernel: parameters, prior,
//! likelihood and starting walkers.
//!
//! Parameters: x = (ln(m / M_earth), r, v), the perturber's heliocentric
//! ICRF position (au) and velocity (au/year) at the reference epoch.
//!
//! Prior (stated in docs/method.md):
//! - mass log-uniform on [m_min, m_max];
//! - position isotropic with a log-uniform heliocentric distance on
//!   [d_min, d_max]: density 1 / (4 pi r^3 ln(d_max/d_min));
//! - velocity uniform over the bound velocities whose two-body orbit about
//!   the Sun has eccentricity at most e_max: density
//!   1 / (F(e_max) 4/3 pi v_esc(r)^3), where F is the share of the escape
//!   ball with e <= e_max (the same at every r, computed once by quadrature);
//! - hypotheses passing within `min_separation_au` of the tracked body are
//!   excluded (the linear kernel does not hold there); the prior is not
//!   renormalised for that small volume.
//!
//! Likelihood: the tracked body's orbit correction enters linearly with a
//! flat prior, so it is marginalised by projecting it out; with whitened
//! residuals y and the projected signal m s of the perturber,
//! ln L = m s.y - m^2 s.s / 2 (the chi-square drop over 2, relative to the
//! null model; the log-determinant of the marginalisation is the same for
//! every hypothesis and for the null model, and cancels).

use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};

use super::sampler::Target;
use crate::perturber::{KeplerOrbit, LinearKernel, Scored};
use crate::units::{EARTH_MASS_SOLAR, GM_SUN_AU3_PER_DAY2, JULIAN_YEAR_DAYS};
use crate::vec3::Vec3;

/// Dimension of the perturber's parameter vector.
pub const DIM: usize = 7;

/// GM of one Earth mass, au^3/day^2.
pub fn gm_earth() -> f64 {
    EARTH_MASS_SOLAR * GM_SUN_AU3_PER_DAY2
}

/// The prior's ranges.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PerturberPrior {
    pub mass_earth: (f64, f64),
    pub distance_au: (f64, f64),
    pub max_eccentricity: f64,
    pub min_separation_au: f64,
}

/// Share of the ball |v| < v_esc whose orbits have e <= e_max (independent
/// of r, as e depends only on |v|/v_circ and the angle between r and v):
/// e^2 = 1 - (2 - u^2) u^2 sin^2(psi), u = |v|/v_circ. Midpoint quadrature
/// in (u, cos psi), exact to about 1e-5.
pub fn bound_share(e_max: f64) -> f64 {
    const N: usize = 1200;
    let umax = 2f64.sqrt();
    let (mut inside, mut all) = (0.0, 0.0);
    for i in 0..N {
        let u = (i as f64 + 0.5) / N as f64 * umax;
        for j in 0..N {
            let c = -1.0 + (j as f64 + 0.5) / N as f64 * 2.0;
            let e2 = 1.0 - (2.0 - u * u) * u * u * (1.0 - c * c);
            all += u * u;
            if e2 <= e_max * e_max {
                inside += u * u;
            }
        }
    }
    inside / all
}

/// The perturber's posterior for one kernel and prior.
pub struct PerturberPosterior<'k> {
    pub kernel: &'k LinearKernel,
    pub prior: PerturberPrior,
    ln_bound_share: f64,
    gm_sun: f64,
}

/// A sample in physical units.
#[derive(Clone, Copy, Debug)]
pub struct PerturberSample {
    pub gm_au3_per_day2: f64,
    pub position_au: Vec3,
    pub velocity_au_per_day: Vec3,
}

impl PerturberSample {
    pub fn mass_earth(&self) -> f64 {
        self.gm_au3_per_day2 / gm_earth()
    }
    pub fn to_params(&self) -> Vec<f64> {
        let v = self.velocity_au_per_day * JULIAN_YEAR_DAYS;
        vec![self.mass_earth().ln(), self.position_au.x, self.position_au.y, self.position_au.z, v.x, v.y, v.z]
    }
    pub fn from_params(x: &[f64]) -> PerturberSample {
        PerturberSample {
            gm_au3_per_day2: x[0].exp() * gm_earth(),
            position_au: Vec3::new(x[1], x[2], x[3]),
            velocity_au_per_day: Vec3::new(x[4], x[5], x[6]) / JULIAN_YEAR_DAYS,
        }
    }
}

impl<'k> PerturberPosterior<'k> {
    pub fn new(kernel: &'k LinearKernel, prior: PerturberPrior) -> Self {
        PerturberPosterior {
            kernel,
            prior,
            ln_bound_share: bound_share(prior.max_eccentricity).ln(),
            gm_sun: kernel.central_gm(),
        }
    }

    fn eccentricity(&self, r: Vec3, v: Vec3) -> f64 {
        let h = r.cross(v);
        let e_vec = v.cross(h) / self.gm_sun - r / r.norm();
        e_vec.norm()
    }

    /// A draw from the prior (rejection sampling for the velocity).
    pub fn draw_prior(&self, rng: &mut impl rand::Rng) -> Vec<f64> {
        let p = &self.prior;
        loop {
            let ln_m = p.mass_earth.0.ln() + rng.random::<f64>() * (p.mass_earth.1 / p.mass_earth.0).ln();
            let r = (p.distance_au.0.ln() + rng.random::<f64>() * (p.distance_au.1 / p.distance_au.0).ln()).exp();
            let dir = random_unit(rng);
            let pos = dir * r;
            let v_esc = (2.0 * self.gm_sun / r).sqrt();
            for _ in 0..1000 {
                let v = random_unit(rng) * (v_esc * rng.random::<f64>().cbrt());
                if self.eccentricity(pos, v) <= p.max_eccentricity {
                    let x = PerturberSample {
                        gm_au3_per_day2: ln_m.exp() * gm_earth(),
                        position_au: pos,
                        velocity_au_per_day: v,
                    }
                    .to_params();
                    if self.log_likelihood(&x).is_some() {
                        return x;
                    }
                    break;
                }
            }
        }
    }

    /// Starting walkers for every rung: the cold rungs start in the grid's
    /// basins, shared out in proportion to their weight (half in proportion
    /// to the basin's likelihood, half evenly, so every basin is explored),
    /// scattered a little; a rung at inverse temperature beta draws each
    /// walker from the prior with probability 1 - beta^(1/4) instead.
    pub fn starting_walkers(
        &self,
        basins: &[Scored],
        betas: &[f64],
        n_walkers: usize,
        seed: u64,
    ) -> Vec<Vec<Vec<f64>>> {
        let mut rng = rand::rngs::StdRng::seed_from_u64(seed ^ 0x5eed_57a7);
        let best = basins.iter().map(|b| b.delta_chi2).fold(f64::NEG_INFINITY, f64::max);
        let lik: Vec<f64> = basins.iter().map(|b| (0.5 * (b.delta_chi2 - best)).exp()).collect();
        let total: f64 = lik.iter().sum();
        let weights: Vec<f64> = lik.iter().map(|l| 0.5 * l / total + 0.5 / basins.len() as f64).collect();
        betas
            .iter()
            .map(|&beta| {
                (0..n_walkers)
                    .map(|_| {
                        let from_prior = basins.is_empty() || rng.random::<f64>() > beta.powf(0.25);
                        if from_prior {
                            return self.draw_prior(&mut rng);
                        }
                        let mut u = rng.random::<f64>();
                        let mut k = 0;
                        while k + 1 < weights.len() && u > weights[k] {
                            u -= weights[k];
                            k += 1;
                        }
                        self.scatter_around(&basins[k], &mut rng)
                    })
                    .collect()
            })
            .collect()
    }

    fn scatter_around(&self, b: &Scored, rng: &mut impl rand::Rng) -> Vec<f64> {
        let gm = b.gm_au3_per_day2.max(self.prior.mass_earth.0 * gm_earth() * 1.01);
        for _ in 0..200 {
            let n = |rng: &mut dyn rand::Rng| -> f64 { StandardNormal.sample(rng) };
            let r = b.hypothesis.position_au;
            let v = b.hypothesis.velocity_au_per_day;
            let pos = r + Vec3::new(n(rng), n(rng), n(rng)) * (0.01 * r.norm());
            let vel = v + Vec3::new(n(rng), n(rng), n(rng)) * (0.01 * v.norm());
            let mut x = PerturberSample { gm_au3_per_day2: gm, position_au: pos, velocity_au_per_day: vel }.to_params();
            x[0] += 0.05 * n(rng);
            if self.log_prior(&x).is_finite() && self.log_likelihood(&x).is_some() {
                return x;
            }
        }
        self.draw_prior(rng)
    }
}

fn random_unit(rng: &mut impl rand::Rng) -> Vec3 {
    loop {
        let v = Vec3::new(
            StandardNormal.sample(&mut *rng),
            StandardNormal.sample(&mut *rng),
            StandardNormal.sample(&mut *rng),
        );
        let n = v.norm();
        if n > 1e-12 {
            return v / n;
        }
    }
}

impl Target for PerturberPosterior<'_> {
    fn dim(&self) -> usize {
        DIM
    }

    fn log_prior(&self, x: &[f64]) -> f64 {
        let p = &self.prior;
        let (m0, m1) = (p.mass_earth.0.ln(), p.mass_earth.1.ln());
        if !(x[0] >= m0 && x[0] <= m1) {
            return f64::NEG_INFINITY;
        }
        let r = Vec3::new(x[1], x[2], x[3]);
        let rn = r.norm();
        if !(rn >= p.distance_au.0 && rn <= p.distance_au.1) {
            return f64::NEG_INFINITY;
        }
        // Velocity in au/day; the density is per (au/year)^3.
        let v = Vec3::new(x[4], x[5], x[6]) / JULIAN_YEAR_DAYS;
        let v_esc = (2.0 * self.gm_sun / rn).sqrt();
        if v.norm() >= v_esc || self.eccentricity(r, v) > p.max_eccentricity {
            return f64::NEG_INFINITY;
        }
        let v_esc_per_year = v_esc * JULIAN_YEAR_DAYS;
        let four_pi = 4.0 * std::f64::consts::PI;
        -(m1 - m0).ln()
            - (four_pi * rn.powi(3) * (p.distance_au.1 / p.distance_au.0).ln()).ln()
            - self.ln_bound_share
            - (four_pi / 3.0 * v_esc_per_year.powi(3)).ln()
    }

    fn log_likelihood(&self, x: &[f64]) -> Option<f64> {
        let s = PerturberSample::from_params(x);
        let orbit =
            KeplerOrbit::from_state(self.gm_sun, s.position_au, s.velocity_au_per_day, self.kernel.epoch_tdb_days)?;
        thread_local! {
            static SIGNAL: std::cell::RefCell<Vec<f64>> = const { std::cell::RefCell::new(Vec::new()) };
        }
        SIGNAL.with(|buf| {
            let buf = &mut *buf.borrow_mut();
            buf.resize(self.kernel.n_residuals(), 0.0);
            let closest = self.kernel.signal(&orbit, buf);
            if closest < self.prior.min_separation_au {
                return None;
            }
            self.kernel.project(buf);
            let (sy, ss) = self.kernel.signal_products(buf);
            let m = s.gm_au3_per_day2;
            Some(m * sy - 0.5 * m * m * ss)
        })
    }
}
