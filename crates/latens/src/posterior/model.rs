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
//! - velocity: eccentricity of the two-body orbit about the Sun uniform on
//!   [0, e_max], and given e, the velocity spread as in a uniform ball of
//!   bound velocities (true anomaly f with density proportional to
//!   1/sqrt(1 + e cos f), the orbit plane's roll about r uniform). In
//!   velocity space that is the density 1 / (pi e_max e K(e) v_c(r)^3),
//!   v_c = sqrt(GM/r), K(e) = integral over f of (1 + e cos f)^(-1/2)
//!   (derivation in docs/method.md). A uniform ball alone would give
//!   e the density ~ e K(e) (near zero at e = 0), a prior against the
//!   near-circular orbits planets have, which pushed real-data posteriors
//!   along the mass-distance ridge to eccentric far orbits;
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
use crate::perturber::{KeplerOrbit, LinearKernel, Scored, SignalKernel};
use crate::units::JULIAN_YEAR_DAYS;
use crate::vec3::Vec3;

/// Dimension of the perturber's parameter vector.
pub const DIM: usize = 7;

/// GM of one Earth mass, au^3/day^2.
pub fn gm_earth() -> f64 {
    crate::units::GM_EARTH_MASS_AU3_PER_DAY2
}

/// The prior's ranges.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PerturberPrior {
    pub mass_earth: (f64, f64),
    pub distance_au: (f64, f64),
    pub max_eccentricity: f64,
    pub min_separation_au: f64,
    /// A direction prior: orbits within this many degrees of the ecliptic
    /// (prograde or retrograde), the whole prior conditioned on it; None:
    /// every orbit.
    pub near_ecliptic_deg: Option<f64>,
}

/// K(e) = integral over f in [0, 2 pi) of (1 + e cos f)^(-1/2) for
/// 0 <= e < 1: 4/sqrt(1+e) times the complete elliptic integral of the
/// first kind with parameter m = 2e/(1+e), computed by the
/// arithmetic-geometric mean, K(m) = pi / (2 AGM(1, sqrt(1-m))) (Abramowitz
/// & Stegun 17.6), so K(e) = 2 pi / (sqrt(1+e) AGM(1, sqrt((1-e)/(1+e)))).
pub fn anomaly_integral(e: f64) -> f64 {
    let (mut a, mut g) = (1.0f64, ((1.0 - e) / (1.0 + e)).sqrt());
    while (a - g).abs() > 1e-15 * a {
        let next = 0.5 * (a + g);
        g = (a * g).sqrt();
        a = next;
    }
    2.0 * std::f64::consts::PI / ((1.0 + e).sqrt() * a)
}

/// Smallest eccentricity the velocity density is evaluated at: the density
/// grows as 1/e toward circular orbits (integrably); the floor keeps a
/// walker started on an exactly circular grid orbit from sitting on an
/// unbounded density, and changes the prior's total by less than 1e-4.
const E_FLOOR: f64 = 1e-4;

/// ln of the prior density of the velocity `v` (au/day) at heliocentric
/// position `r` (au), per (au/day)^3: -infinity outside the bound orbits
/// with e <= e_max.
pub fn velocity_log_density(r: Vec3, v: Vec3, gm_sun: f64, e_max: f64) -> f64 {
    let rn = r.norm();
    if v.norm_squared() >= 2.0 * gm_sun / rn {
        return f64::NEG_INFINITY;
    }
    let h = r.cross(v);
    let e = (v.cross(h) / gm_sun - r / rn).norm();
    if e > e_max {
        return f64::NEG_INFINITY;
    }
    let e = e.max(E_FLOOR);
    let v_c = (gm_sun / rn).sqrt();
    -(std::f64::consts::PI * e_max * e * anomaly_integral(e) * v_c.powi(3)).ln()
}

/// A velocity (au/day) drawn from the prior at heliocentric position `r`:
/// e uniform on [0, e_max], the true anomaly by rejection from its
/// conditional density, the orbit plane's roll about r uniform.
pub fn draw_velocity(r: Vec3, gm_sun: f64, e_max: f64, rng: &mut impl rand::Rng) -> Vec3 {
    let e = rng.random::<f64>() * e_max;
    // f with density proportional to (1 + e cos f)^(-1/2): accept a
    // uniform f with probability sqrt((1 - e) / (1 + e cos f)).
    let f = loop {
        let f = rng.random::<f64>() * std::f64::consts::TAU;
        if rng.random::<f64>() <= ((1.0 - e) / (1.0 + e * f.cos())).sqrt() {
            break f;
        }
    };
    // In units of the circular speed: radial e sin f / sqrt(1 + e cos f),
    // tangential sqrt(1 + e cos f).
    let q = 1.0 + e * f.cos();
    let (u_r, u_t) = (e * f.sin() / q.sqrt(), q.sqrt());
    let dir = r.unit();
    let t1 = dir.cross(if dir.x.abs() < 0.9 { Vec3::new(1.0, 0.0, 0.0) } else { Vec3::new(0.0, 1.0, 0.0) }).unit();
    let t2 = dir.cross(t1);
    let roll = rng.random::<f64>() * std::f64::consts::TAU;
    (dir * u_r + (t1 * roll.cos() + t2 * roll.sin()) * u_t) * (gm_sun / r.norm()).sqrt()
}

/// The perturber's posterior for one kernel and prior.
///
/// The kernel is one body's ([`LinearKernel`], the default) or several
/// bodies' together ([`crate::perturber::JointKernel`]).
pub struct PerturberPosterior<'k, K: SignalKernel + ?Sized = LinearKernel> {
    pub kernel: &'k K,
    pub prior: PerturberPrior,
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

impl<'k, K: SignalKernel + ?Sized> PerturberPosterior<'k, K> {
    pub fn new(kernel: &'k K, prior: PerturberPrior) -> Self {
        PerturberPosterior { kernel, prior, gm_sun: kernel.central_gm() }
    }

    /// A draw from the prior: e uniform, the true anomaly by rejection from
    /// its conditional density, the orbit plane's roll uniform.
    pub fn draw_prior(&self, rng: &mut impl rand::Rng) -> Vec<f64> {
        let p = &self.prior;
        loop {
            let ln_m = p.mass_earth.0.ln() + rng.random::<f64>() * (p.mass_earth.1 / p.mass_earth.0).ln();
            let r = (p.distance_au.0.ln() + rng.random::<f64>() * (p.distance_au.1 / p.distance_au.0).ln()).exp();
            let dir = random_unit(rng);
            let pos = dir * r;
            let v = draw_velocity(pos, self.gm_sun, p.max_eccentricity, rng);
            // The band by rejection (1 - cos(band) of the draws pass).
            if !crate::perturber::search::orbit_in_band(pos, v, p.near_ecliptic_deg) {
                continue;
            }
            let x =
                PerturberSample { gm_au3_per_day2: ln_m.exp() * gm_earth(), position_au: pos, velocity_au_per_day: v }
                    .to_params();
            if self.log_likelihood(&x).is_some() {
                return x;
            }
        }
    }

    /// Starting walkers for every rung: the cold rungs start in the grid's
    /// basins, shared out in proportion to their weight (half in proportion
    /// to the basin's likelihood, half evenly, so every basin is explored;
    /// with `evenly`, all evenly), scattered a little; a rung at inverse
    /// temperature beta draws each walker from the prior with probability
    /// 1 - beta^(1/4) instead. Runs started with the two different shares
    /// let the split R-hat see modes whose weights have not settled: runs
    /// started alike can agree while both are wrong.
    pub fn starting_walkers(
        &self,
        basins: &[Scored],
        betas: &[f64],
        n_walkers: usize,
        seed: u64,
        evenly: bool,
    ) -> Vec<Vec<Vec<f64>>> {
        let mut rng = rand::rngs::StdRng::seed_from_u64(seed ^ 0x5eed_57a7);
        let best = basins.iter().map(|b| b.delta_chi2).fold(f64::NEG_INFINITY, f64::max);
        let lik: Vec<f64> = basins.iter().map(|b| (0.5 * (b.delta_chi2 - best)).exp()).collect();
        let total: f64 = lik.iter().sum();
        let share = if evenly { 0.0 } else { 0.5 };
        let weights: Vec<f64> = lik.iter().map(|l| share * l / total + (1.0 - share) / basins.len() as f64).collect();
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

impl<K: SignalKernel + ?Sized> Target for PerturberPosterior<'_, K> {
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
        // The band: the prior conditioned on it, so divided by its share.
        if !crate::perturber::search::orbit_in_band(r, v, p.near_ecliptic_deg) {
            return f64::NEG_INFINITY;
        }
        let band = crate::perturber::search::band_fraction(p.near_ecliptic_deg);
        -(m1 - m0).ln()
            - (4.0 * std::f64::consts::PI * band * rn.powi(3) * (p.distance_au.1 / p.distance_au.0).ln()).ln()
            + velocity_log_density(r, v, self.gm_sun, p.max_eccentricity)
            - 3.0 * JULIAN_YEAR_DAYS.ln()
    }

    fn log_likelihood(&self, x: &[f64]) -> Option<f64> {
        let s = PerturberSample::from_params(x);
        let orbit =
            KeplerOrbit::from_state(self.gm_sun, s.position_au, s.velocity_au_per_day, self.kernel.epoch_tdb_days())?;
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::units::GM_SUN_AU3_PER_DAY2;
    use rand::SeedableRng;

    #[test]
    fn anomaly_integral_matches_scipy() {
        // Reference: 4/sqrt(1+e) * scipy.special.ellipk(2e/(1+e)), scipy 1.x,
        // cross-checked by scipy.integrate.quad of (1 + e cos f)^(-1/2).
        for (e, k) in [
            (0.0, std::f64::consts::TAU),
            (0.3, 6.394779439685456),
            (0.6, 6.819501255891668),
            (0.95, 9.259326968719552),
        ] {
            assert!((anomaly_integral(e) - k).abs() < 1e-12, "{e}: {} vs {k}", anomaly_integral(e));
        }
    }

    /// The velocity density integrates to one over the escape ball
    /// (midpoint quadrature in radial and tangential speed, the roll
    /// contributing 2 pi u_t), and the eccentricity it implies is uniform.
    #[test]
    fn velocity_density_is_normalised_with_uniform_eccentricity() {
        let gm = GM_SUN_AU3_PER_DAY2;
        let r = Vec3::new(20.0, -7.0, 3.0);
        let v_c = (gm / r.norm()).sqrt();
        let dir = r.unit();
        let t = dir.cross(Vec3::new(0.0, 0.0, 1.0)).unit();
        let e_max = 0.6;
        let n = 1500;
        let umax = 2f64.sqrt();
        let (mut total, mut below_03) = (0.0, 0.0);
        for i in 0..2 * n {
            let u_r = -umax + (i as f64 + 0.5) / n as f64 * umax;
            for j in 0..n {
                let u_t = (j as f64 + 0.5) / n as f64 * umax;
                let v = (dir * u_r + t * u_t) * v_c;
                let ld = velocity_log_density(r, v, gm, e_max);
                if ld.is_finite() {
                    let w = ld.exp() * 2.0 * std::f64::consts::PI * u_t * v_c.powi(3) * (umax / n as f64).powi(2);
                    total += w;
                    let h = r.cross(v);
                    if (v.cross(h) / gm - dir).norm() < 0.3 {
                        below_03 += w;
                    }
                }
            }
        }
        assert!((total - 1.0).abs() < 5e-3, "total {total}");
        assert!((below_03 - 0.5).abs() < 5e-3, "share below e = 0.3: {below_03}");
    }

    /// Draws have uniform eccentricity and the radial-speed distribution the
    /// density gives (compared by importance weights on the uniform ball).
    #[test]
    fn draws_follow_the_density() {
        let gm = GM_SUN_AU3_PER_DAY2;
        let r = Vec3::new(-3.0, 40.0, 11.0);
        let e_max = 0.6;
        let mut rng = rand::rngs::StdRng::seed_from_u64(7);
        let n = 40_000;
        let (mut e_sum, mut radial_sum) = (0.0, 0.0);
        for _ in 0..n {
            let v = draw_velocity(r, gm, e_max, &mut rng);
            assert!(velocity_log_density(r, v, gm, e_max).is_finite());
            let h = r.cross(v);
            e_sum += (v.cross(h) / gm - r.unit()).norm();
            radial_sum += (v.dot(r.unit()) / (gm / r.norm()).sqrt()).abs();
        }
        // Uniform e on [0, 0.6]: mean 0.3, sd 0.6/sqrt(12) per draw.
        let sd = 0.6 / 12f64.sqrt() / (n as f64).sqrt();
        assert!((e_sum / n as f64 - 0.3).abs() < 4.0 * sd, "mean e {}", e_sum / n as f64);
        // The same mean |u_r| by weighting uniform draws in the ball.
        let v_esc = (2.0 * gm / r.norm()).sqrt();
        let ball = 4.0 / 3.0 * std::f64::consts::PI * v_esc.powi(3);
        let (mut w_sum, mut wr_sum) = (0.0, 0.0);
        for _ in 0..400_000 {
            let v = random_unit(&mut rng) * (v_esc * rng.random::<f64>().cbrt());
            let ld = velocity_log_density(r, v, gm, e_max);
            if ld.is_finite() {
                let w = ld.exp() * ball;
                w_sum += w;
                wr_sum += w * (v.dot(r.unit()) / (gm / r.norm()).sqrt()).abs();
            }
        }
        let (a, b) = (radial_sum / n as f64, wr_sum / w_sum);
        assert!((a - b).abs() < 0.01 * a.max(b) + 2e-3, "mean |u_r|: draws {a}, weighted ball {b}");
    }

    /// A kernel with no data: the likelihood is flat, so the posterior is
    /// the prior (for checks of the prior alone).
    struct Flat;

    impl SignalKernel for Flat {
        fn epoch_tdb_days(&self) -> f64 {
            0.0
        }
        fn central_gm(&self) -> f64 {
            GM_SUN_AU3_PER_DAY2
        }
        fn n_residuals(&self) -> usize {
            0
        }
        fn residuals(&self) -> &[f64] {
            &[]
        }
        fn signal(&self, _orbit: &KeplerOrbit, _out: &mut [f64]) -> f64 {
            f64::INFINITY
        }
        fn project(&self, _signal: &mut [f64]) {}
    }

    /// The band prior is the whole prior conditioned on orbits within the
    /// band: whole-sky draws land in it 1 - cos(band) of the time (the
    /// roll about the position is uniform), band draws all do, and inside
    /// it the density is the whole prior's divided by that share.
    #[test]
    fn the_band_prior_is_the_whole_prior_conditioned_on_it() {
        let band = 20.0f64;
        let range = PerturberPrior {
            mass_earth: (1.0, 100.0),
            distance_au: (10.0, 200.0),
            max_eccentricity: 0.6,
            min_separation_au: 0.0,
            near_ecliptic_deg: None,
        };
        let whole = PerturberPosterior::new(&Flat, range);
        let banded = PerturberPosterior::new(&Flat, PerturberPrior { near_ecliptic_deg: Some(band), ..range });
        let mut rng = rand::rngs::StdRng::seed_from_u64(11);
        let n = 40_000;
        let share = 1.0 - band.to_radians().cos();
        let mut inside = 0;
        for _ in 0..n {
            let x = whole.draw_prior(&mut rng);
            let (lw, lb) = (whole.log_prior(&x), banded.log_prior(&x));
            assert!(lw.is_finite());
            if lb.is_finite() {
                inside += 1;
                assert!((lb - lw + share.ln()).abs() < 1e-9, "{lb} {lw}");
            }
            let y = banded.draw_prior(&mut rng);
            assert!(banded.log_prior(&y).is_finite());
        }
        let sd = (share * (1.0 - share) / n as f64).sqrt();
        let got = inside as f64 / n as f64;
        assert!((got - share).abs() < 4.0 * sd, "{got} of whole-sky draws in the band, expected {share}");
    }
}
