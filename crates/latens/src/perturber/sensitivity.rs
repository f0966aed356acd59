//! Sensitivity: which perturber masses at which distances these observations
//! could have revealed.
//!
//! For each heliocentric distance of the grid, `n_trials` perturber
//! configurations are drawn (an isotropic direction, or near the ecliptic; a
//! bound orbit through that point with a random orbit-plane orientation and a
//! tangential speed between 0.75 and 1.25 times circular, so a random phase
//! along a random orbit). Through the linear kernel each gives the amplitude
//! A = |s'| of its orbit-projected, whitened signal per unit GM, the same for
//! every mass. With the mass profiled, the statistic at the true hypothesis
//! is (m A + z)^2 for m A + z > 0, z standard normal (the noise's projection
//! on the signal), so the detection probability at threshold T is
//! Phi(m A - sqrt T), averaged over the trials. T is the chi-square drop that
//! the search of `latens infer` exceeds on noise alone with the chosen
//! false-alarm probability (from its null simulations). Counting only the
//! true hypothesis makes the map slightly conservative: the real search may
//! also win through a neighbouring hypothesis.
//!
//! Randomness is seeded per distance and trial, so any slice of the cells
//! (a shard) gives the same numbers as the whole map.

use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};

use super::kernel::{KeplerOrbit, SignalKernel};
use crate::vec3::Vec3;

/// The map's grid and draws.
#[derive(Clone, Debug, PartialEq)]
pub struct SensitivitySettings {
    pub mass_earth: (f64, f64),
    pub distance_au: (f64, f64),
    pub n_masses: usize,
    pub n_distances: usize,
    pub n_trials: usize,
    /// Orbits within this many degrees of the ecliptic only (inclination
    /// at most this, prograde or retrograde; None: isotropic), as
    /// [`super::search::SearchSettings::near_ecliptic_deg`].
    pub near_ecliptic_deg: Option<f64>,
    pub seed: u64,
    /// Hypotheses passing closer than this to the tracked body are redrawn, au.
    pub min_separation_au: f64,
}

/// One cell of the map.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Cell {
    pub mass_index: usize,
    pub distance_index: usize,
    pub mass_earth: f64,
    pub distance_au: f64,
    pub detection_probability: f64,
    pub n_trials: usize,
    /// Median over the trials of the noise-free chi-square drop (m A)^2.
    pub median_delta_chi2: f64,
}

/// The detection probability over the map as an array, masses by
/// distances (rows along the mass grid of `settings`, columns along its
/// distance grid; NaN for cells not in `cells`, as in one shard), with the
/// masses (Earth masses) and distances (au) of the rows and columns.
pub fn probability_grid(
    settings: &SensitivitySettings,
    cells: &[Cell],
) -> (ndarray::Array1<f64>, ndarray::Array1<f64>, ndarray::Array2<f64>) {
    let (nm, nd) = (settings.n_masses, settings.n_distances);
    let masses = ndarray::Array1::from_iter((0..nm).map(|i| log_grid(settings.mass_earth, nm, i)));
    let distances = ndarray::Array1::from_iter((0..nd).map(|i| log_grid(settings.distance_au, nd, i)));
    let mut p = ndarray::Array2::from_elem((nm, nd), f64::NAN);
    for c in cells {
        if c.mass_index < nm && c.distance_index < nd {
            p[(c.mass_index, c.distance_index)] = c.detection_probability;
        }
    }
    (masses, distances, p)
}

fn log_grid(range: (f64, f64), n: usize, i: usize) -> f64 {
    if n <= 1 {
        return (range.0 * range.1).sqrt();
    }
    range.0 * (range.1 / range.0).powf(i as f64 / (n - 1) as f64)
}

/// Standard normal cumulative distribution (Abramowitz & Stegun 7.1.26 for
/// erf, error below 1.5e-7; common practice).
pub fn normal_cdf(x: f64) -> f64 {
    let z = x.abs() / std::f64::consts::SQRT_2;
    let t = 1.0 / (1.0 + 0.327_591_1 * z);
    let poly =
        t * (0.254_829_592 + t * (-0.284_496_736 + t * (1.421_413_741 + t * (-1.453_152_027 + t * 1.061_405_429))));
    let erf = 1.0 - poly * (-z * z).exp();
    if x >= 0.0 { 0.5 * (1.0 + erf) } else { 0.5 * (1.0 - erf) }
}

/// One drawn perturber configuration: heliocentric ICRF state at the
/// reference epoch and its signal amplitude per unit GM.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Configuration {
    pub position_au: Vec3,
    pub velocity_au_per_day: Vec3,
    pub amplitude_per_gm: f64,
}

/// The configurations drawn at distance index `di` (seeded by distance
/// index, so every shard draws the same ones).
pub fn configurations<K: SignalKernel + ?Sized>(
    kernel: &K,
    settings: &SensitivitySettings,
    di: usize,
) -> Vec<Configuration> {
    let d = log_grid(settings.distance_au, settings.n_distances, di);
    let pole = super::search::ecliptic_pole();
    let mut rng = rand::rngs::StdRng::seed_from_u64(settings.seed.wrapping_mul(0x9E37_79B9).wrapping_add(di as u64));
    let mut out = Vec::with_capacity(settings.n_trials);
    let mut signal = vec![0.0; kernel.n_residuals()];
    let mut attempts = 0;
    while out.len() < settings.n_trials && attempts < 50 * settings.n_trials {
        attempts += 1;
        let (r, v) = draw_state(settings, pole, d, kernel.central_gm(), &mut rng);
        if let Some(c) = configuration(kernel, settings, r, v, &mut signal) {
            out.push(c);
        }
    }
    out
}

/// One perturber state at heliocentric distance `d` as the map draws them:
/// an isotropic direction (or an orbit plane within the band, the position
/// anywhere on it) and a tangential speed of 0.75-1.25 times circular.
fn draw_state(
    settings: &SensitivitySettings,
    pole: Vec3,
    d: f64,
    central_gm: f64,
    rng: &mut rand::rngs::StdRng,
) -> (Vec3, Vec3) {
    let (dir, t) = match settings.near_ecliptic_deg {
        Some(band) => super::search::draw_in_band(band, rng),
        None => {
            let mut g = || -> f64 { StandardNormal.sample(rng) };
            let dir = Vec3::new(g(), g(), g()).unit();
            let mut e1 = pole.cross(dir);
            if e1.norm() < 1e-9 {
                e1 = Vec3::new(1.0, 0.0, 0.0).cross(dir);
            }
            let e1 = e1.unit();
            let e2 = dir.cross(e1);
            let psi = std::f64::consts::TAU * rand_unit(rng);
            (dir, e1 * psi.cos() + e2 * psi.sin())
        }
    };
    let speed = (0.75 + 0.5 * rand_unit(rng)) * (central_gm / d).sqrt();
    (dir * d, t * speed)
}

/// The configuration of a drawn state through the kernel (None when it is
/// not a bound orbit or passes within the closest allowed approach).
fn configuration<K: SignalKernel + ?Sized>(
    kernel: &K,
    settings: &SensitivitySettings,
    r: Vec3,
    v: Vec3,
    signal: &mut [f64],
) -> Option<Configuration> {
    let orbit = KeplerOrbit::from_state(kernel.central_gm(), r, v, kernel.epoch_tdb_days())?;
    if kernel.signal(&orbit, signal) < settings.min_separation_au {
        return None;
    }
    kernel.project(signal);
    Some(Configuration {
        position_au: r,
        velocity_au_per_day: v,
        amplitude_per_gm: signal.iter().map(|x| x * x).sum::<f64>().sqrt(),
    })
}

/// A sky map's trials: distance index, HEALPix cell, each trial's
/// amplitude per Earth mass.
pub type SkyTrials = Vec<(usize, u64, Vec<f64>)>;

/// Where on the sky the population could detect a perturber: HEALPix
/// cells (nested, ICRF) of one order and trials drawn in each.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SkyPlan {
    /// HEALPix order of the cells (0: 12 cells of 3438 sq deg; 1: 48 of
    /// 859; 2: 192 of 215; 3: 768 of 54).
    pub order: u8,
    /// Trials drawn in each cell at each distance.
    pub trials_per_cell: usize,
}

/// The trials of a sky map at distance index `di`: draws as the map's
/// (same band, speeds and closest approach), each kept in the cell of its
/// heliocentric direction until every cell holds `trials_per_cell` (cells
/// the band keeps out stay empty). Seeded by distance index, so shards
/// draw the same trials. Returns (cell, each trial's amplitude per Earth
/// mass) for the cells with trials.
pub fn sky_amplitudes<K: SignalKernel + ?Sized>(
    kernel: &K,
    settings: &SensitivitySettings,
    plan: &SkyPlan,
    di: usize,
) -> Vec<(u64, Vec<f64>)> {
    let d = log_grid(settings.distance_au, settings.n_distances, di);
    let pole = super::search::ecliptic_pole();
    let n_cells = 12usize << (2 * plan.order as usize);
    let mut rng = rand::rngs::StdRng::seed_from_u64(
        settings.seed.wrapping_mul(0x2545_F491).wrapping_add(di as u64) ^ (u64::from(plan.order) << 40),
    );
    let gm_earth = crate::units::GM_EARTH_MASS_AU3_PER_DAY2;
    let mut cells: Vec<Vec<f64>> = vec![Vec::new(); n_cells];
    let mut open = n_cells;
    let mut signal = vec![0.0; kernel.n_residuals()];
    let cap = 60 * n_cells * plan.trials_per_cell.max(1);
    let mut attempts = 0;
    while open > 0 && attempts < cap {
        attempts += 1;
        let (r, v) = draw_state(settings, pole, d, kernel.central_gm(), &mut rng);
        let (lon, lat) = crate::skymap::lon_lat(r.unit());
        let cell = cdshealpix::nested::hash(plan.order, lon, lat) as usize;
        if cells[cell].len() >= plan.trials_per_cell {
            continue;
        }
        if let Some(c) = configuration(kernel, settings, r, v, &mut signal) {
            cells[cell].push(c.amplitude_per_gm * gm_earth);
            if cells[cell].len() == plan.trials_per_cell {
                open -= 1;
            }
        }
    }
    cells.into_iter().enumerate().filter(|(_, a)| !a.is_empty()).map(|(i, a)| (i as u64, a)).collect()
}

/// One cell of the sky map at one distance.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SkyCellMass {
    pub distance_index: usize,
    pub distance_au: f64,
    pub order: u8,
    /// Nested HEALPix index (ICRF) of the cell.
    pub cell: u64,
    pub n_trials: usize,
    /// The masses (Earth masses) detected with 50% and 90% probability by
    /// a perturber in this cell (None: not within the map's mass range; the
    /// lower end of the range when already reached there).
    pub mass50_earth: Option<f64>,
    pub mass90_earth: Option<f64>,
}

impl SkyCellMass {
    /// The cell's centre: right ascension and declination (ICRF, degrees)
    /// and ecliptic latitude (degrees).
    pub fn centre_deg(&self) -> (f64, f64, f64) {
        let c = crate::skymap::cell_centre(self.order, self.cell);
        let (ra, dec) = crate::skymap::lon_lat(c);
        let lat = crate::frames::ecliptic_lonlat_from_icrf(c).lat_rad;
        (ra.to_degrees(), dec.to_degrees(), lat.to_degrees())
    }
}

/// The smallest mass within `range` (Earth masses) whose detection
/// probability, averaged over trials with amplitudes `amps` per Earth
/// mass, reaches `level` at threshold sqrt_t^2 (bisection in log mass: the
/// probability rises with the mass).
pub fn mass_at_level(amps: &[f64], sqrt_t: f64, level: f64, range: (f64, f64)) -> Option<f64> {
    let p = |m: f64| amps.iter().map(|a| normal_cdf(m * a - sqrt_t)).sum::<f64>() / amps.len().max(1) as f64;
    if amps.is_empty() || p(range.1) < level {
        return None;
    }
    if p(range.0) >= level {
        return Some(range.0);
    }
    let (mut lo, mut hi) = (range.0.ln(), range.1.ln());
    for _ in 0..60 {
        let mid = 0.5 * (lo + hi);
        if p(mid.exp()) >= level { hi = mid } else { lo = mid }
    }
    Some(hi.exp())
}

/// The sky map's cells from the trials' amplitudes (distance index, cell,
/// amplitudes per Earth mass) at the detection threshold.
pub fn sky_cells(
    settings: &SensitivitySettings,
    order: u8,
    threshold_delta_chi2: f64,
    amplitudes: &[(usize, u64, Vec<f64>)],
) -> Vec<SkyCellMass> {
    let sqrt_t = threshold_delta_chi2.max(0.0).sqrt();
    amplitudes
        .iter()
        .map(|(di, cell, amps)| SkyCellMass {
            distance_index: *di,
            distance_au: log_grid(settings.distance_au, settings.n_distances, *di),
            order,
            cell: *cell,
            n_trials: amps.len(),
            mass50_earth: mass_at_level(amps, sqrt_t, 0.5, settings.mass_earth),
            mass90_earth: mass_at_level(amps, sqrt_t, 0.9, settings.mass_earth),
        })
        .collect()
}

/// Signal amplitudes (per unit GM) of the trials at distance index `di`.
pub fn trial_amplitudes<K: SignalKernel + ?Sized>(kernel: &K, settings: &SensitivitySettings, di: usize) -> Vec<f64> {
    configurations(kernel, settings, di).iter().map(|c| c.amplitude_per_gm).collect()
}

/// Detection probability of one configuration with GM `gm` at threshold `threshold_delta_chi2`.
pub fn detection_probability(amplitude_per_gm: f64, gm: f64, threshold_delta_chi2: f64) -> f64 {
    normal_cdf(gm * amplitude_per_gm - threshold_delta_chi2.max(0.0).sqrt())
}

/// The mass grid value at index `i` (Earth masses).
pub fn grid_mass_earth(settings: &SensitivitySettings, i: usize) -> f64 {
    log_grid(settings.mass_earth, settings.n_masses, i)
}

/// The distance grid value at index `i` (au).
pub fn grid_distance_au(settings: &SensitivitySettings, i: usize) -> f64 {
    log_grid(settings.distance_au, settings.n_distances, i)
}

fn rand_unit(rng: &mut rand::rngs::StdRng) -> f64 {
    use rand::RngExt;
    rng.random::<f64>()
}

/// The cells with indices in `cells` (mass index, distance index).
pub fn compute_cells<K: SignalKernel + ?Sized>(
    kernel: &K,
    settings: &SensitivitySettings,
    threshold_delta_chi2: f64,
    cells: &[(usize, usize)],
    observer: &dyn crate::progress::Observer,
) -> Vec<Cell> {
    let mut distances: Vec<usize> = cells.iter().map(|c| c.1).collect();
    distances.sort();
    distances.dedup();
    let amplitudes = trial_amplitudes_at(kernel, settings, &distances, observer);
    let all = cells_from_amplitudes(settings, threshold_delta_chi2, &amplitudes);
    cells
        .iter()
        .filter_map(|&(m, d)| all.iter().find(|c| (c.mass_index, c.distance_index) == (m, d)).copied())
        .collect()
}

/// Each trial's noise-free square root of the chi-square drop per Earth
/// mass (the amplitude per unit GM times one Earth mass's GM), at the
/// distance indices `distances`, in parallel over distances.
pub fn trial_amplitudes_at<K: SignalKernel + ?Sized>(
    kernel: &K,
    settings: &SensitivitySettings,
    distances: &[usize],
    observer: &dyn crate::progress::Observer,
) -> Vec<(usize, Vec<f64>)> {
    use rayon::prelude::*;
    let gm_earth = crate::units::GM_EARTH_MASS_AU3_PER_DAY2;
    let done = std::sync::atomic::AtomicUsize::new(0);
    observer.begin(crate::progress::Stage::Sensitivity, distances.len() as u64);
    let amplitudes = distances
        .par_iter()
        .map(|&di| {
            let a = trial_amplitudes(kernel, settings, di).into_iter().map(|a| a * gm_earth).collect();
            observer.advance(done.fetch_add(1, std::sync::atomic::Ordering::Relaxed) as u64 + 1);
            (di, a)
        })
        .collect();
    observer.finish();
    amplitudes
}

/// Every cell of the mass grid at the distances of `amplitudes` (distance
/// index, each trial's amplitude per Earth mass): the detection
/// probability Phi(m a - sqrt T) averaged over the trials, and the median
/// noise-free drop (m a)^2.
pub fn cells_from_amplitudes(
    settings: &SensitivitySettings,
    threshold_delta_chi2: f64,
    amplitudes: &[(usize, Vec<f64>)],
) -> Vec<Cell> {
    let sqrt_t = threshold_delta_chi2.max(0.0).sqrt();
    let mut out = Vec::with_capacity(amplitudes.len() * settings.n_masses);
    for (di, amps) in amplitudes {
        for mi in 0..settings.n_masses {
            let m = log_grid(settings.mass_earth, settings.n_masses, mi);
            let n = amps.len();
            let p = if n == 0 { 0.0 } else { amps.iter().map(|a| normal_cdf(m * a - sqrt_t)).sum::<f64>() / n as f64 };
            let mut d2: Vec<f64> = amps.iter().map(|a| (m * a).powi(2)).collect();
            d2.sort_by(f64::total_cmp);
            out.push(Cell {
                mass_index: mi,
                distance_index: *di,
                mass_earth: m,
                distance_au: log_grid(settings.distance_au, settings.n_distances, *di),
                detection_probability: p,
                n_trials: n,
                median_delta_chi2: if n == 0 { 0.0 } else { d2[n / 2] },
            });
        }
    }
    out
}

/// For each distance, the mass (log-interpolated along the mass axis) at
/// which the detection probability first reaches `level`; None where it never
/// does within the grid.
pub fn contour(cells: &[Cell], level: f64) -> Vec<(f64, Option<f64>)> {
    let mut by_distance: std::collections::BTreeMap<usize, Vec<&Cell>> = Default::default();
    for c in cells {
        by_distance.entry(c.distance_index).or_default().push(c);
    }
    by_distance
        .into_values()
        .map(|mut col| {
            col.sort_by_key(|c| c.mass_index);
            let d = col[0].distance_au;
            let mut found = None;
            for w in col.windows(2) {
                let (a, b) = (w[0], w[1]);
                if a.detection_probability < level && b.detection_probability >= level {
                    let f = (level - a.detection_probability) / (b.detection_probability - a.detection_probability);
                    found = Some((a.mass_earth.ln() + f * (b.mass_earth.ln() - a.mass_earth.ln())).exp());
                    break;
                }
            }
            if found.is_none() && col.first().is_some_and(|c| c.detection_probability >= level) {
                found = Some(col[0].mass_earth);
            }
            (d, found)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_grid_puts_each_cell_in_its_place_and_leaves_the_others_empty() {
        let settings = SensitivitySettings {
            mass_earth: (1.0, 100.0),
            distance_au: (10.0, 1000.0),
            n_masses: 3,
            n_distances: 3,
            n_trials: 1,
            near_ecliptic_deg: None,
            seed: 1,
            min_separation_au: 1.0,
        };
        let cell = |m: usize, d: usize, p: f64| Cell {
            mass_index: m,
            distance_index: d,
            mass_earth: log_grid(settings.mass_earth, 3, m),
            distance_au: log_grid(settings.distance_au, 3, d),
            detection_probability: p,
            n_trials: 1,
            median_delta_chi2: 0.0,
        };
        let (masses, distances, p) = probability_grid(&settings, &[cell(0, 2, 0.25), cell(2, 1, 0.75)]);
        // Log-spaced ends and middle: 1, 10, 100 Earth masses; 10, 100, 1000 au.
        assert!((masses[1] - 10.0).abs() < 1e-9 && (distances[2] - 1000.0).abs() < 1e-9);
        assert_eq!((p[(0, 2)], p[(2, 1)]), (0.25, 0.75));
        assert_eq!(p.iter().filter(|v| v.is_nan()).count(), 7);
    }

    #[test]
    fn normal_cdf_matches_known_values() {
        // Phi(0) = 0.5, Phi(1.96) = 0.975, Phi(-1) = 0.158655 (common practice).
        assert!((normal_cdf(0.0) - 0.5).abs() < 1e-7);
        assert!((normal_cdf(1.959_964) - 0.975).abs() < 2e-7);
        assert!((normal_cdf(-1.0) - 0.158_655_25).abs() < 2e-7);
    }
}
