//! The profile likelihood over the sky: for each HEALPix pixel of the sky
//! at the search epoch, the largest chi-square drop of any perturber the
//! prior allows whose geocentric place is there, its mass profiled in
//! closed form and its distance and velocity optimised.
//!
//! Why: the posterior weighs each solution by its prior volume as well as
//! its fit, so its credible region can leave out a place where a light
//! perturber passing close to the body fits as well as any (measured on the
//! demo scenario, docs/validation.md). A confidence region from the profile
//! likelihood leans on no prior volume: by Wilks's theorem (Wilks 1938, Ann.
//! Math. Stat. 9, 60) the drop from the best fit to the best fit with the
//! sky place held follows chi-square with 2 degrees of freedom, so the
//! places within -2 ln(1 - p) of the best (4.61 at 90%, 1.39 at 50%; the
//! quantile of chi-square with 2 degrees of freedom in closed form) hold
//! the true place with probability p when the fit is regular. The prior
//! still bounds what is searched (mass and distance ranges, eccentricity,
//! the direction band, the closest approach), but not how much of it fits.
//!
//! Construction: a pixel's profile is the best drop over the perturber's
//! heliocentric distance d and its velocity (three components, in units of
//! the circular speed at d) with its geocentric direction at the search
//! epoch held at the pixel's centre u (the perturber then sits at O + rho u,
//! O the observer, |O + rho u| = d); each such state goes back to the
//! reference epoch on its two-body orbit and is scored through the kernel.
//! A pixel is polished by Nelder-Mead (argmin) over those four numbers.
//! The profile is smooth across the sky, so a pixel's optimum is a good
//! start for its neighbours: the map grows outwards from seeds (the
//! search's basins, and whatever states the caller adds, such as posterior
//! samples), best first, into every pixel that a neighbour's optimum brings
//! within the region's threshold plus a margin; pixels never reached keep
//! no value and lie outside every region. Light time and aberration (under
//! a minute of arc) are left out of the construction: far below the
//! pixels' size.

use argmin::core::{CostFunction, Error as ArgminError, Executor, State};
use argmin::solver::neldermead::NelderMead;
use cdshealpix::nested;
use rayon::prelude::*;

use super::kernel::{KeplerOrbit, SignalKernel};
use super::search::{Hypothesis, SearchSettings, ecliptic_pole, score};
use crate::progress::{Observer, Stage};
use crate::skymap::{DEG2_PER_SR, pixel_area_sr, unit_from_lon_lat};
use crate::vec3::Vec3;

/// The resolution and reach of the profile.
#[derive(Clone, Debug, PartialEq)]
pub struct ProfileSettings {
    /// HEALPix order of the map (4: 3072 pixels of 13.4 sq deg), taken
    /// finer where the region is small.
    pub order: u8,
    /// How far below the best (beyond the 90% threshold) the map keeps
    /// growing, in chi-square: a pixel whose start fits worse than this is
    /// not polished.
    pub margin: f64,
    /// Nelder-Mead iterations of each pixel's polish.
    pub polish_iterations: u64,
}

impl Default for ProfileSettings {
    fn default() -> Self {
        ProfileSettings { order: 4, margin: 5.0, polish_iterations: 150 }
    }
}

/// Where the observer is when the sky places are given.
#[derive(Clone, Copy, Debug)]
pub struct Vantage {
    /// The search epoch, TDB days from J2000.
    pub epoch_tdb_days: f64,
    /// The observer's heliocentric ICRF position then, au.
    pub observer_au: Vec3,
}

/// The profile over the sky at one HEALPix order.
#[derive(Clone, Debug)]
pub struct SkyProfile {
    pub order: u8,
    /// Per pixel reached (nested index): the largest drop found. Pixels not
    /// here were never brought near the region.
    pub delta_chi2: std::collections::HashMap<u64, f64>,
    /// The best drop over the sky.
    pub best: f64,
    /// Kernel evaluations spent.
    pub n_evaluations: usize,
    /// Pixels polished.
    pub n_polished: usize,
}

/// The chi-square drop within which a sky place belongs to the `level`
/// confidence region: the quantile of chi-square with 2 degrees of freedom,
/// -2 ln(1 - level).
pub fn profile_threshold(level: f64) -> f64 {
    -2.0 * (1.0 - level).ln()
}

impl SkyProfile {
    /// The pixels (nested indices) of the `level` confidence region.
    pub fn region(&self, level: f64) -> Vec<u64> {
        let cut = self.best - profile_threshold(level);
        let mut pixels: Vec<u64> = self.delta_chi2.iter().filter(|(_, x)| **x >= cut).map(|(&p, _)| p).collect();
        pixels.sort_unstable();
        pixels
    }

    /// Area of a set of pixels, square degrees.
    pub fn area_deg2(&self, pixels: &[u64]) -> f64 {
        pixels.len() as f64 * pixel_area_sr(self.order) * DEG2_PER_SR
    }

    /// The drop at a sky direction's pixel (negative infinity where the
    /// map never reached).
    pub fn at(&self, d: Vec3) -> f64 {
        let (lon, lat) = crate::skymap::lon_lat(d);
        self.delta_chi2.get(&nested::hash(self.order, lon, lat)).copied().unwrap_or(f64::NEG_INFINITY)
    }
}

/// What the prior allows of a state at the reference epoch: the search's
/// distance range and band, and an eccentricity about the central mass of
/// at most `max_e`.
struct Allowed<'a> {
    settings: &'a SearchSettings,
    gm: f64,
    max_e: f64,
}

impl Allowed<'_> {
    fn contains(&self, h: &Hypothesis) -> bool {
        self.settings.contains(h.position_au, h.velocity_au_per_day)
            && crate::dynamics::kepler::elements_from_state(self.gm, h.position_au, h.velocity_au_per_day)
                .is_ok_and(|el| el.eccentricity <= self.max_e)
    }
}

/// A state at the search epoch, (position, velocity), carried to the
/// kernel's reference epoch on its two-body orbit.
/// An orbit's position and velocity at `t`, the velocity by a central
/// difference over a day: relative error of order (n h)^2, far below 1e-9
/// for any bound perturber beyond a few au.
fn state_at(orbit: &KeplerOrbit, t: f64) -> (Vec3, Vec3) {
    let mut guess = f64::NAN;
    let r = orbit.position(t, &mut guess);
    let v = (orbit.position(t + 0.5, &mut guess) - orbit.position(t - 0.5, &mut guess)) / 1.0;
    (r, v)
}

/// `gm`: the central mass's; `t0`: the reference epoch (TDB days).
fn to_reference(gm: f64, t0: f64, t_search: f64, r: Vec3, v: Vec3) -> Option<Hypothesis> {
    let orbit = KeplerOrbit::from_state(gm, r, v, t_search)?;
    let (position_au, velocity_au_per_day) = state_at(&orbit, t0);
    Some(Hypothesis { position_au, velocity_au_per_day })
}

/// One pixel's frame: the direction and the tangent basis (e1 eastward
/// along the ecliptic, e2 north of it) of the perturber at distance d.
fn place(vantage: &Vantage, u: Vec3, d: f64) -> Option<(Vec3, Vec3, Vec3)> {
    let o = vantage.observer_au;
    let b = o.dot(u);
    let disc = b * b - o.norm_squared() + d * d;
    if disc < 0.0 {
        return None;
    }
    let rho = -b + disc.sqrt();
    if rho <= 0.0 {
        return None;
    }
    let r = o + u * rho;
    let dir = r.unit();
    let mut e1 = ecliptic_pole().cross(dir);
    if e1.norm() < 1e-9 {
        e1 = Vec3::new(1.0, 0.0, 0.0).cross(dir);
    }
    let e1 = e1.unit();
    Some((r, e1, dir.cross(e1)))
}

/// The pixel's polish: parameters (ln d, a, b, c) with the velocity
/// v_circ(d) (a r^ + b e1 + c e2); minus the drop, 0 outside the prior.
struct PixelCost<'a, K: ?Sized> {
    kernel: &'a K,
    vantage: Vantage,
    u: Vec3,
    allowed: &'a Allowed<'a>,
    gm_max: f64,
}

impl<K: ?Sized> Clone for PixelCost<'_, K> {
    fn clone(&self) -> Self {
        *self
    }
}
impl<K: ?Sized> Copy for PixelCost<'_, K> {}

impl<K: SignalKernel + ?Sized> PixelCost<'_, K> {
    fn hypothesis(&self, p: &[f64]) -> Option<Hypothesis> {
        let d = p[0].exp();
        let (r, e1, e2) = place(&self.vantage, self.u, d)?;
        let vc = (self.kernel.central_gm() / d).sqrt();
        let v = (r.unit() * p[1] + e1 * p[2] + e2 * p[3]) * vc;
        to_reference(self.kernel.central_gm(), self.kernel.epoch_tdb_days(), self.vantage.epoch_tdb_days, r, v)
    }

    fn drop(&self, p: &[f64], scratch: &mut [f64]) -> Option<f64> {
        let h = self.hypothesis(p)?;
        if !self.allowed.contains(&h) {
            return None;
        }
        score(self.kernel, &h, self.gm_max, self.allowed.settings.min_separation_au, scratch).map(|s| s.delta_chi2)
    }
}

impl<K: SignalKernel + ?Sized> CostFunction for PixelCost<'_, K> {
    type Param = Vec<f64>;
    type Output = f64;

    fn cost(&self, p: &Self::Param) -> Result<f64, ArgminError> {
        let mut scratch = vec![0.0; self.kernel.n_residuals()];
        Ok(self.drop(p, &mut scratch).map_or(0.0, |d| -d))
    }
}

/// A state at the reference epoch as a start in its own pixel: the pixel
/// and the four numbers (ln d, and the velocity in units of the circular
/// speed along r^, e1, e2) at the search epoch.
fn as_start(gm: f64, t0: f64, vantage: &Vantage, order: u8, h: &Hypothesis) -> Option<(u64, Vec<f64>)> {
    let orbit = KeplerOrbit::from_state(gm, h.position_au, h.velocity_au_per_day, t0)?;
    let (r, v) = state_at(&orbit, vantage.epoch_tdb_days);
    let u = (r - vantage.observer_au).unit();
    let (lon, lat) = crate::skymap::lon_lat(u);
    let d = r.norm();
    let (_, e1, e2) = place(vantage, u, d)?;
    let vc = (gm / d).sqrt();
    Some((nested::hash(order, lon, lat), vec![d.ln(), v.dot(r.unit()) / vc, v.dot(e1) / vc, v.dot(e2) / vc]))
}

/// The map's machinery: scoring and polishing the pixels of any order.
struct Profiler<'a, K: ?Sized> {
    kernel: &'a K,
    vantage: Vantage,
    allowed: Allowed<'a>,
    gm_max: f64,
    iterations: u64,
}

/// A drop and the parameters that reach it.
type Optimum = (f64, Vec<f64>);

/// Each pixel's optimum.
type Found = std::collections::HashMap<u64, Optimum>;

impl<K: SignalKernel + ?Sized + Sync> Profiler<'_, K> {
    fn cost(&self, order: u8, ipix: u64) -> PixelCost<'_, K> {
        PixelCost {
            kernel: self.kernel,
            vantage: self.vantage,
            u: unit_from_lon_lat(nested::center(order, ipix)),
            allowed: &self.allowed,
            gm_max: self.gm_max,
        }
    }

    fn eval(&self, order: u8, ipix: u64, p: &[f64]) -> Option<f64> {
        let mut scratch = vec![0.0; self.kernel.n_residuals()];
        self.cost(order, ipix).drop(p, &mut scratch)
    }

    /// Nelder-Mead from `p0` (worth `x0`): the better of the two and the
    /// evaluations spent.
    /// `scale`: the first simplex's size (1 from a grid point, less from a
    /// neighbour's optimum, which lies close).
    fn polish(&self, order: u8, ipix: u64, x0: f64, p0: Vec<f64>, scale: f64) -> (f64, Vec<f64>, usize) {
        let mut simplex = vec![p0.clone()];
        for (i, step) in [0.15, 0.1, 0.1, 0.1].into_iter().enumerate() {
            let mut p = p0.clone();
            p[i] += step * scale;
            simplex.push(p);
        }
        // Converged when the simplex's drops agree to 0.01 in chi-square,
        // far inside the regions' thresholds.
        let Ok(solver) = NelderMead::new(simplex).with_sd_tolerance(1e-2) else { return (x0, p0, 0) };
        let Ok(res) = Executor::new(self.cost(order, ipix), solver)
            .configure(|s| s.max_iters(self.iterations).counting(true))
            .run()
        else {
            return (x0, p0, 0);
        };
        let n = res.state().get_func_counts().values().sum::<u64>() as usize;
        match res.state().get_best_param() {
            Some(p) if -res.state().get_best_cost() > x0 => (-res.state().get_best_cost(), p.clone(), n),
            _ => (x0, p0, n),
        }
    }

    /// Every pixel of `order`: a small grid (6 distances over the search's
    /// range x 4 orbit-plane orientations x 2 tangential speeds), then the
    /// polish from its best.
    fn coarse(&self, order: u8, search: &SearchSettings, evaluations: &mut usize) -> Found {
        let (d0, d1) = search.distance_au;
        let (nd, nr, speeds) = (6, 4, [0.85, 1.15]);
        let grid: Vec<Vec<f64>> = (0..nd)
            .flat_map(|i| {
                let d = d0 * (d1 / d0).powf(i as f64 / (nd - 1) as f64);
                (0..nr).flat_map(move |k| {
                    let psi = std::f64::consts::TAU * k as f64 / nr as f64;
                    speeds.map(|s| vec![d.ln(), 0.0, s * psi.cos(), s * psi.sin()])
                })
            })
            .collect();
        let found: Vec<(u64, Option<Optimum>, usize)> = (0..nested::n_hash(order))
            .into_par_iter()
            .map(|ipix| {
                let best = grid
                    .iter()
                    .filter_map(|p| self.eval(order, ipix, p).map(|x| (x, p)))
                    .max_by(|a, b| a.0.total_cmp(&b.0));
                match best {
                    Some((x0, p0)) => {
                        let (x, p, n) = self.polish(order, ipix, x0, p0.clone(), 1.0);
                        (ipix, Some((x, p)), grid.len() + n)
                    }
                    None => (ipix, None, grid.len()),
                }
            })
            .collect();
        *evaluations += found.iter().map(|f| f.2).sum::<usize>();
        found.into_iter().filter_map(|(i, v, _)| v.map(|v| (i, v))).collect()
    }

    /// Grows the map at `order` from `starts` (the value of the pixel the
    /// parameters come from, pixel, parameters), best first: a pixel is
    /// polished from a start whose source fits better than the pixel does
    /// so far (by 1; a neighbour's optimum is near its own on a smooth
    /// profile, however poorly it fits at first), at most 3 times; each
    /// improved pixel's optimum goes to its neighbours; a start whose
    /// source lies below `best - reach` is dropped. Returns the pixels
    /// reached.
    fn flood(
        &self,
        order: u8,
        mut starts: Vec<(f64, u64, Vec<f64>)>,
        reach: f64,
        evaluations: &mut usize,
        polished: &mut usize,
        observer: &dyn Observer,
    ) -> Found {
        let mut values = Found::new();
        let mut tries: std::collections::HashMap<u64, usize> = std::collections::HashMap::new();
        let mut best = f64::NEG_INFINITY;
        loop {
            let cut = best.max(starts.iter().map(|s| s.0).fold(f64::NEG_INFINITY, f64::max)) - reach;
            starts.sort_by(|a, b| b.0.total_cmp(&a.0));
            let mut round: Vec<(u64, Vec<f64>)> = Vec::new();
            let mut taken = std::collections::HashSet::new();
            for (source, ipix, p) in starts.drain(..) {
                let known = values.get(&ipix).map_or(f64::NEG_INFINITY, |v| v.0);
                if source >= cut
                    && source > known + 1.0
                    && tries.get(&ipix).copied().unwrap_or(0) < 3
                    && taken.insert(ipix)
                {
                    round.push((ipix, p));
                }
            }
            if round.is_empty() {
                break;
            }
            for (ipix, _) in &round {
                *tries.entry(*ipix).or_insert(0) += 1;
            }
            let results: Vec<(u64, Option<Optimum>, usize)> = round
                .into_par_iter()
                .map(|(ipix, p0)| match self.eval(order, ipix, &p0) {
                    Some(x0) => {
                        let (x, p, n) = self.polish(order, ipix, x0, p0, 0.3);
                        (ipix, Some((x, p)), n + 1)
                    }
                    None => (ipix, None, 1),
                })
                .collect();
            *polished += results.len();
            observer.advance(*polished as u64);
            let mut grown = Vec::new();
            for (ipix, result, n) in results {
                *evaluations += n;
                let Some((x, p)) = result else { continue };
                let known = values.get(&ipix).map_or(f64::NEG_INFINITY, |v| v.0);
                if x > known + 0.01 {
                    best = best.max(x);
                    values.insert(ipix, (x, p));
                    grown.push(ipix);
                }
            }
            starts = grown
                .iter()
                .flat_map(|&ipix| {
                    let (x, p) = &values[&ipix];
                    nested::neighbours(order, ipix, false).values_vec().into_iter().map(move |n| (*x, n, p.clone()))
                })
                .collect();
        }
        values
    }

    /// Starts at `order` from a map at `order - k`: each pixel's optimum in
    /// each of its children, for the pixels within `window` of the best.
    fn children(found: &Found, from: u8, order: u8, window: f64) -> Vec<(f64, u64, Vec<f64>)> {
        let best = found.values().map(|v| v.0).fold(f64::NEG_INFINITY, f64::max);
        let shift = 2 * u32::from(order - from);
        found
            .iter()
            .filter(|(_, v)| v.0 >= best - window)
            .flat_map(|(&ipix, v)| ((ipix << shift)..((ipix + 1) << shift)).map(move |c| (v.0, c, v.1.clone())))
            .collect()
    }
}

/// The profile likelihood over the sky at the search epoch (see the
/// module's text). First every pixel of order 3 (768) from a small grid
/// and a polish; their optima, and `seeds` (states at the kernel's
/// reference epoch: the search's basins, posterior samples), start the map
/// at `settings.order`, grown until no pixel within the 90% threshold plus
/// `settings.margin` of the best gains; while the 90% region holds fewer
/// than 48 pixels the map is taken one order finer (to order 9 at most,
/// 0.013 sq deg) from the pixels within the threshold plus 5. `max_e`: the
/// prior's eccentricity limit; the search's settings give the mass and
/// distance ranges, the band and the closest approach. Reports to
/// `observer` as [`Stage::Profile`] (pixels polished).
pub fn sky_profile<K: SignalKernel + ?Sized + Sync>(
    kernel: &K,
    vantage: Vantage,
    search: &SearchSettings,
    max_e: f64,
    settings: &ProfileSettings,
    seeds: &[Hypothesis],
    observer: &dyn Observer,
) -> SkyProfile {
    const COARSE: u8 = 3;
    let profiler = Profiler {
        kernel,
        vantage,
        allowed: Allowed { settings: search, gm: kernel.central_gm(), max_e },
        gm_max: search.mass_earth.1 * crate::units::GM_EARTH_MASS_AU3_PER_DAY2,
        iterations: settings.polish_iterations,
    };
    let (mut evaluations, mut polished) = (0, 0);
    observer.begin(Stage::Profile, 0);
    let coarse = profiler.coarse(COARSE, search, &mut evaluations);
    polished += coarse.len();
    let mut order = settings.order.max(COARSE);
    let mut starts = Profiler::<K>::children(&coarse, COARSE, order, f64::INFINITY);
    evaluations += seeds.len();
    starts.extend(
        seeds
            .par_iter()
            .filter_map(|h| {
                let (ipix, p) = as_start(kernel.central_gm(), kernel.epoch_tdb_days(), &vantage, order, h)?;
                profiler.eval(order, ipix, &p).map(|x| (x, ipix, p))
            })
            .collect::<Vec<_>>(),
    );
    let reach = profile_threshold(0.9) + settings.margin;
    let mut found = profiler.flood(order, starts, reach, &mut evaluations, &mut polished, observer);
    loop {
        let best = found.values().map(|v| v.0).fold(f64::NEG_INFINITY, f64::max);
        let in90 = found.values().filter(|v| v.0 >= best - profile_threshold(0.9)).count();
        if in90 >= 48 || order >= 9 {
            break;
        }
        let starts = Profiler::<K>::children(&found, order, order + 1, profile_threshold(0.9) + 5.0);
        order += 1;
        found = profiler.flood(order, starts, profile_threshold(0.9) + 5.0, &mut evaluations, &mut polished, observer);
    }
    observer.finish();
    let best = found.values().map(|v| v.0).fold(f64::NEG_INFINITY, f64::max);
    SkyProfile {
        order,
        delta_chi2: found.into_iter().map(|(k, v)| (k, v.0)).collect(),
        best,
        n_evaluations: evaluations,
        n_polished: polished,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The thresholds are the quantiles of chi-square with 2 degrees of
    /// freedom: scipy.stats.chi2.ppf(0.5, 2) = 1.3862943611198906 and
    /// chi2.ppf(0.9, 2) = 4.605170185988091 (values from scipy, recalled
    /// from memory; the closed form -2 ln(1 - p) is exact).
    #[test]
    fn thresholds_are_the_chi_square_quantiles_with_two_degrees_of_freedom() {
        assert!((profile_threshold(0.5) - 1.386_294_361_119_890_6).abs() < 1e-12);
        assert!((profile_threshold(0.9) - 4.605_170_185_988_091).abs() < 1e-12);
    }

    fn vantage() -> Vantage {
        Vantage { epoch_tdb_days: 12_000.0, observer_au: Vec3::new(0.3, -0.9, -0.4) }
    }

    /// A pixel's frame puts the perturber at the asked heliocentric
    /// distance, seen from the observer along the pixel's direction.
    #[test]
    fn a_pixel_places_the_perturber_along_its_direction_at_the_distance() {
        let v = vantage();
        let u = unit_from_lon_lat(nested::center(4, 1234));
        for d in [5.0, 40.0, 700.0] {
            let (r, e1, e2) = place(&v, u, d).unwrap();
            assert!((r.norm() - d).abs() < 1e-9 * d);
            assert!(((r - v.observer_au).unit() - u).norm() < 1e-12);
            // A right-handed tangent basis.
            assert!(
                e1.dot(r).abs() < 1e-9 * d && e2.dot(r).abs() < 1e-9 * d && (e1.cross(e2) - r.unit()).norm() < 1e-12
            );
        }
    }

    /// A state made from a pixel's parameters, carried to the reference
    /// epoch and read back as a start, gives the same pixel and parameters.
    #[test]
    fn a_state_read_back_as_a_start_gives_its_pixel_and_parameters() {
        let v = vantage();
        let gm = crate::units::GM_SUN_AU3_PER_DAY2;
        let (order, ipix, t0) = (5, 4321, 11_000.0);
        let u = unit_from_lon_lat(nested::center(order, ipix));
        let p = [35f64.ln(), 0.1, 0.9, -0.2];
        let (r, e1, e2) = place(&v, u, p[0].exp()).unwrap();
        let vc = (gm / p[0].exp()).sqrt();
        let vel = (r.unit() * p[1] + e1 * p[2] + e2 * p[3]) * vc;
        let h = to_reference(gm, t0, v.epoch_tdb_days, r, vel).unwrap();
        // A thousand days earlier the perturber was elsewhere.
        assert!((h.position_au - r).norm() > 0.1);
        let (back, q) = as_start(gm, t0, &v, order, &h).unwrap();
        assert_eq!(back, ipix);
        for k in 0..4 {
            assert!((q[k] - p[k]).abs() < 1e-6, "{k}: {} vs {}", q[k], p[k]);
        }
    }
}
