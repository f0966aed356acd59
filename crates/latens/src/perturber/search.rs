//! The grid search over perturber hypotheses, the basins it finds, and the
//! false-alarm probability of the best one by null simulation.
//!
//! Hypotheses: the perturber's heliocentric position at the reference epoch
//! on equal-area directions over the whole sky (a Fibonacci lattice) times
//! log-spaced distances, and bound velocities through that point: tangential
//! speeds of a few multiples of the circular speed (so the point is an apsis)
//! in several orbit-plane orientations, which include prograde, retrograde and
//! polar orbits. The mass is profiled in closed form (see [`super::kernel`]).
//!
//! False alarms: in the linear model the chi-square drop of every hypothesis
//! is the square of a projection of the whitened noise on its normalised,
//! orbit-projected signal u. The u of all hypotheses lie close to a subspace
//! of a few tens of dimensions, found by an SVD of a sample of them; with
//! their coordinates c in that subspace, one null realisation is one draw z
//! of independent unit normals and its search maximum is max (c.z)^2 over
//! hypotheses with c.z > 0 (mass >= 0). This includes the look-elsewhere
//! effect exactly, up to the signal energy outside the subspace (reported).

use argmin::core::{CostFunction, Error as ArgminError, Executor, State};
use argmin::solver::neldermead::NelderMead;
use faer::Mat;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;

use super::kernel::{KeplerOrbit, SignalKernel};
use crate::frames::icrf_from_ecliptic;
use crate::progress::{Observer, Stage};
use crate::vec3::Vec3;

/// The search's ranges and resolution.
#[derive(Clone, Debug, PartialEq)]
pub struct SearchSettings {
    /// Perturber mass range, Earth masses (the profiled mass is capped at the top).
    pub mass_earth: (f64, f64),
    /// Heliocentric distance range at the reference epoch, au.
    pub distance_au: (f64, f64),
    pub n_directions: usize,
    pub n_distances: usize,
    /// Orbit-plane orientations about the radius vector.
    pub n_orientations: usize,
    /// Tangential speeds as multiples of the circular speed (each below sqrt 2).
    pub speed_factors: Vec<f64>,
    /// Hypotheses passing closer than this to the tracked body are skipped, au
    /// (first-order theory is weakest there).
    pub min_separation_au: f64,
    /// Basins are kept within this chi-square of the best.
    pub basin_delta_chi2: f64,
    pub max_basins: usize,
    /// Directions at least this far apart (degrees) count as separate basins.
    pub basin_separation_deg: f64,
    pub n_null: usize,
    pub seed: u64,
    /// The false-alarm probability below which a perturber counts as
    /// detected (default 0.0027, 3 sigma); at least 1/level nulls are needed.
    pub fap_level: f64,
    /// A direction prior: only perturbers on orbits that keep within this
    /// many degrees of the ecliptic (inclination at most this, prograde, or
    /// at least 180 minus this, retrograde) are searched and sampled; the
    /// grid's positions and orbit planes all satisfy it, and the null
    /// simulations search the same hypotheses. None: every orbit.
    pub near_ecliptic_deg: Option<f64>,
}

impl Default for SearchSettings {
    /// Broad defaults: 0.01 to 5000 Earth masses, 5 to 500 au, 768
    /// directions, 20 distances, 8 orientations x 3 speeds (0.75, 1, 1.25 of
    /// circular): 368 640 hypotheses; 1000 null realisations.
    fn default() -> Self {
        SearchSettings {
            mass_earth: (0.01, 5000.0),
            distance_au: (5.0, 500.0),
            n_directions: 768,
            n_distances: 20,
            n_orientations: 8,
            speed_factors: vec![0.75, 1.0, 1.25],
            min_separation_au: 2.0,
            basin_delta_chi2: 25.0,
            max_basins: 8,
            basin_separation_deg: 20.0,
            n_null: 1000,
            seed: 1,
            fap_level: crate::pipeline::DETECTION_FAP,
            near_ecliptic_deg: None,
        }
    }
}

impl SearchSettings {
    /// The band must be a latitude in (0, 90] degrees.
    pub fn check_band(&self) -> Result<(), String> {
        match self.near_ecliptic_deg {
            Some(b) if !(b > 0.0 && b <= 90.0) => {
                Err(format!("the band about the ecliptic must be within (0, 90] degrees, got {b}"))
            }
            _ => Ok(()),
        }
    }

    /// Whether a heliocentric ICRF state lies in the searched region: the
    /// distance range and, when given, an orbit within the band.
    pub fn contains(&self, position_au: Vec3, velocity_au_per_day: Vec3) -> bool {
        (self.distance_au.0..=self.distance_au.1).contains(&position_au.norm())
            && orbit_in_band(position_au, velocity_au_per_day, self.near_ecliptic_deg)
    }
}

/// The ecliptic's north pole in ICRF.
pub fn ecliptic_pole() -> Vec3 {
    icrf_from_ecliptic(Vec3::new(0.0, 0.0, 1.0))
}

/// Whether the orbit through a heliocentric ICRF state keeps within
/// `band_deg` of the ecliptic: |cos i| >= cos(band), prograde or
/// retrograde (then every point of the orbit, this one included, lies at
/// an ecliptic latitude of at most `band_deg`). Always, when None.
pub fn orbit_in_band(position_au: Vec3, velocity_au_per_day: Vec3, band_deg: Option<f64>) -> bool {
    let Some(band) = band_deg else { return true };
    let n = position_au.cross(velocity_au_per_day);
    let nn = n.norm();
    nn > 0.0 && n.dot(ecliptic_pole()).abs() >= nn * band.to_radians().cos() - 1e-12
}

/// The share of isotropic orbit planes within `band_deg` of the ecliptic
/// (prograde or retrograde): 1 - cos(band), or 1 when None. The orbit
/// normal of an isotropic position and roll is isotropic, and the two
/// polar caps of half-angle `band` hold 1 - cos(band) of the sphere.
pub fn band_fraction(band_deg: Option<f64>) -> f64 {
    band_deg.map_or(1.0, |b| 1.0 - b.clamp(0.0, 90.0).to_radians().cos())
}

/// A position direction and a tangential unit vector of motion drawn
/// uniformly among orbits within `band_deg` of the ecliptic: the orbit
/// normal isotropic within the two polar caps (|cos i| uniform on
/// [cos band, 1], prograde or retrograde alike, node uniform), the
/// position uniform around the orbit. Equal to an isotropic position and
/// roll conditioned on the band.
pub fn draw_in_band(band_deg: f64, rng: &mut impl rand::Rng) -> (Vec3, Vec3) {
    let c = band_deg.clamp(0.0, 90.0).to_radians().cos();
    let cos_i = c + (1.0 - c) * rng.random::<f64>();
    let cos_i = if rng.random::<bool>() { cos_i } else { -cos_i };
    let sin_i = (1.0f64 - cos_i * cos_i).max(0.0).sqrt();
    let node = std::f64::consts::TAU * rng.random::<f64>();
    let u = std::f64::consts::TAU * rng.random::<f64>();
    // Ecliptic frame: the node's direction and the in-plane direction 90
    // degrees along the orbit from it.
    let a = Vec3::new(node.cos(), node.sin(), 0.0);
    let b = Vec3::new(-node.sin() * cos_i, node.cos() * cos_i, sin_i);
    let dir = a * u.cos() + b * u.sin();
    let along = b * u.cos() - a * u.sin();
    (icrf_from_ecliptic(dir), icrf_from_ecliptic(along))
}

/// The half-width (radians) of the roll angles about a position direction
/// whose orbit planes lie within `band_deg` of the ecliptic, around each of
/// the prograde (roll 0, eastward) and retrograde (roll pi) directions of
/// the grid's tangent basis: |cos roll| >= cos(band) / cos(latitude). None
/// when the position itself lies outside the band.
pub fn band_roll_half_width(dir: Vec3, band_deg: f64) -> Option<f64> {
    let sin_lat = dir.unit().dot(ecliptic_pole()).clamp(-1.0, 1.0);
    let cos_lat = (1.0 - sin_lat * sin_lat).sqrt();
    let c = band_deg.to_radians().cos() / cos_lat.max(1e-300);
    (c <= 1.0).then(|| c.acos())
}

/// One perturber hypothesis: heliocentric ICRF state at the reference epoch.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Hypothesis {
    pub position_au: Vec3,
    pub velocity_au_per_day: Vec3,
}

/// A hypothesis's score.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Scored {
    pub hypothesis: Hypothesis,
    /// Chi-square drop against the null model (with the mass profiled).
    pub delta_chi2: f64,
    /// Profiled GM, au^3/day^2.
    pub gm_au3_per_day2: f64,
    pub closest_approach_au: f64,
}

impl Scored {
    pub fn mass_earth(&self) -> f64 {
        self.gm_au3_per_day2 / crate::units::GM_EARTH_MASS_AU3_PER_DAY2
    }
}

/// What the search found.
#[derive(Clone, Debug)]
pub struct SearchResult {
    pub n_hypotheses: usize,
    /// The largest chi-square drop on the grid itself: the detection statistic,
    /// comparable with the null maxima (which are grid maxima too).
    pub grid_best_delta_chi2: f64,
    pub n_skipped_close: usize,
    /// The best hypothesis and the distinct basins within the threshold (the
    /// best first).
    pub basins: Vec<Scored>,
    /// Null realisations: the search maximum of each.
    pub null_maxima: Vec<f64>,
    /// Dimension of the signal subspace and the share of signal energy it holds
    /// (averaged over the hypotheses).
    pub subspace_dimension: usize,
    pub subspace_energy: f64,
}

impl SearchResult {
    pub fn best(&self) -> Option<&Scored> {
        self.basins.first()
    }

    /// False-alarm probability of the grid's best chi-square drop: the share
    /// of null realisations whose grid maximum is at least as large,
    /// (k + 1)/(n + 1).
    pub fn false_alarm_probability(&self) -> f64 {
        let best = self.grid_best_delta_chi2;
        let k = self.null_maxima.iter().filter(|&&m| m >= best).count();
        (k as f64 + 1.0) / (self.null_maxima.len() as f64 + 1.0)
    }
}

/// Unit vectors of a Fibonacci lattice: `n` nearly equal-area directions.
pub fn fibonacci_directions(n: usize) -> Vec<Vec3> {
    fibonacci_zone(n, 1.0)
}

/// A Fibonacci lattice of `n` nearly equal-area directions on the zone
/// |z| <= `top` (z uniform, longitude by the golden angle); the whole
/// sphere when `top` is 1.
fn fibonacci_zone(n: usize, top: f64) -> Vec<Vec3> {
    let golden = std::f64::consts::PI * (3.0 - 5.0f64.sqrt());
    (0..n)
        .map(|k| {
            let z = top * (1.0 - (2.0 * k as f64 + 1.0) / n as f64);
            let rho = (1.0 - z * z).sqrt();
            let phi = golden * k as f64;
            Vec3::new(rho * phi.cos(), rho * phi.sin(), z)
        })
        .collect()
}

/// `n` nearly equal-area directions within `max_deg` of the ecliptic: a
/// Fibonacci lattice on the band (ecliptic z uniform on +-sin(max_deg),
/// longitude by the golden angle), in ICRF.
pub fn band_directions(n: usize, max_deg: f64) -> Vec<Vec3> {
    fibonacci_zone(n, max_deg.clamp(0.0, 90.0).to_radians().sin()).into_iter().map(icrf_from_ecliptic).collect()
}

/// The grid's directions: the whole sky, or the band when one is given
/// (the same number of directions, so the band is searched more finely).
pub fn search_directions(settings: &SearchSettings) -> Vec<Vec3> {
    match settings.near_ecliptic_deg {
        // The lattice's top row sits half a step inside the band.
        Some(b) => band_directions(settings.n_directions, b),
        None => fibonacci_directions(settings.n_directions),
    }
}

/// The orbit-plane roll angles about `dir` the grid takes: evenly around
/// the circle, or with a band, half of them spread over the prograde
/// planes within it and half over the retrograde ones.
fn orientations(settings: &SearchSettings, dir: Vec3) -> Vec<f64> {
    let n = settings.n_orientations.max(1);
    let Some(band) = settings.near_ecliptic_deg else {
        return (0..n).map(|o| std::f64::consts::TAU * o as f64 / n as f64).collect();
    };
    let w = band_roll_half_width(dir, band).unwrap_or(0.0);
    let per_side = (n / 2).max(1);
    (0..2)
        .flat_map(|side| {
            (0..per_side)
                .map(move |j| side as f64 * std::f64::consts::PI + w * (2.0 * (j as f64 + 0.5) / per_side as f64 - 1.0))
        })
        .collect()
}

/// All hypotheses of the grid, in a fixed order (directions outermost).
pub fn hypotheses(settings: &SearchSettings, gm_sun: f64) -> Vec<Hypothesis> {
    let pole = ecliptic_pole();
    let (d0, d1) = settings.distance_au;
    let mut out = Vec::new();
    for dir in search_directions(settings) {
        // Tangent basis: e1 eastward along the ecliptic (prograde), e2 north.
        let mut e1 = pole.cross(dir);
        if e1.norm() < 1e-9 {
            e1 = Vec3::new(1.0, 0.0, 0.0).cross(dir);
        }
        let e1 = e1.unit();
        let e2 = dir.cross(e1);
        let rolls = orientations(settings, dir);
        for i in 0..settings.n_distances {
            let f = if settings.n_distances > 1 { i as f64 / (settings.n_distances - 1) as f64 } else { 0.5 };
            let dist = d0 * (d1 / d0).powf(f);
            let vc = (gm_sun / dist).sqrt();
            for &psi in &rolls {
                let t = e1 * psi.cos() + e2 * psi.sin();
                for &s in &settings.speed_factors {
                    out.push(Hypothesis { position_au: dir * dist, velocity_au_per_day: t * (vc * s) });
                }
            }
        }
    }
    out
}

/// Scores one hypothesis; `scratch` has the kernel's residual length.
/// Returns the score and the normalised projected signal in `scratch`.
pub fn score<K: SignalKernel + ?Sized>(
    kernel: &K,
    h: &Hypothesis,
    gm_max: f64,
    min_sep: f64,
    scratch: &mut [f64],
) -> Option<Scored> {
    let orbit =
        KeplerOrbit::from_state(kernel.central_gm(), h.position_au, h.velocity_au_per_day, kernel.epoch_tdb_days())?;
    let closest = kernel.signal_up_to(&orbit, gm_max, scratch);
    if closest < min_sep {
        return None;
    }
    kernel.project(scratch);
    let (delta, gm) = kernel.profile(scratch, gm_max);
    Some(Scored { hypothesis: *h, delta_chi2: delta, gm_au3_per_day2: gm, closest_approach_au: closest })
}

/// Runs the grid search, the basin selection and the null simulations.
/// Reports to `observer` as [`Stage::Search`](crate::progress::Stage)
/// (hypotheses done); it runs to the end whatever the observer asks.
pub fn grid_search<K: SignalKernel + ?Sized>(
    kernel: &K,
    settings: &SearchSettings,
    observer: &dyn Observer,
) -> SearchResult {
    let gm_earth = crate::units::GM_EARTH_MASS_AU3_PER_DAY2;
    let gm_max = settings.mass_earth.1 * gm_earth;
    let hyps = hypotheses(settings, kernel.central_gm());
    observer.begin(Stage::Search, hyps.len() as u64);

    // The signal subspace, from a sample of hypotheses.
    let basis = signal_subspace(kernel, &hyps, settings, gm_max);
    let k = basis.ncols();

    // Score every hypothesis and its coordinates in the subspace.
    let results = score_all(kernel, &basis, &hyps, gm_max, settings.min_separation_au, observer);

    let n_skipped = results.iter().filter(|r| r.0.is_none()).count();
    let scored: Vec<Scored> = results.iter().filter_map(|r| r.0).collect();
    let coords: Vec<&Vec<f32>> = results.iter().filter(|r| r.0.is_some()).map(|r| &r.1).collect();
    let energy = results.iter().filter(|r| r.0.is_some()).map(|r| r.2).sum::<f64>() / scored.len().max(1) as f64;

    // Seeds: the best cells of distinct regions (10 deg, or a factor 1.5 in
    // distance), each refined continuously through the kernel; the grid is
    // coarse, and the best basin can hide between its points.
    let mut order: Vec<usize> = (0..scored.len()).collect();
    order.sort_by(|&a, &b| scored[b].delta_chi2.total_cmp(&scored[a].delta_chi2));
    let grid_best = order.first().map_or(0.0, |&i| scored[i].delta_chi2);
    let seeds = distinct(order.iter().map(|&i| scored[i]), 10.0, 1.5, f64::INFINITY, 64);
    let mut refined: Vec<Scored> = seeds.par_iter().map(|s| refine_in_kernel(kernel, s, gm_max, settings)).collect();
    refined.sort_by(|a, b| b.delta_chi2.total_cmp(&a.delta_chi2));
    let basins = distinct(
        refined.into_iter(),
        settings.basin_separation_deg,
        2.0,
        settings.basin_delta_chi2,
        settings.max_basins,
    );

    // Null realisations, in parallel over nulls (reported every 16).
    if settings.n_null > 0 {
        observer.begin(Stage::Nulls, settings.n_null as u64);
    }
    let nulls_done = std::sync::atomic::AtomicUsize::new(0);
    let null_maxima: Vec<f64> = (0..settings.n_null)
        .into_par_iter()
        .map(|r| {
            let mut rng =
                rand::rngs::StdRng::seed_from_u64(settings.seed.wrapping_mul(1_000_003).wrapping_add(r as u64));
            let z: Vec<f32> = (0..k)
                .map(|_| {
                    let v: f64 = StandardNormal.sample(&mut rng);
                    v as f32
                })
                .collect();
            let best = null_maximum(&coords, &z);
            let n = nulls_done.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
            if n % 16 == 0 || n == settings.n_null {
                observer.advance(n as u64);
            }
            best
        })
        .collect();
    if settings.n_null > 0 {
        observer.finish();
    }

    SearchResult {
        n_hypotheses: hyps.len(),
        grid_best_delta_chi2: grid_best,
        n_skipped_close: n_skipped,
        basins,
        null_maxima,
        subspace_dimension: k,
        subspace_energy: energy,
    }
}

/// The most numbers a chunk of signals (hypotheses scored, or null
/// realisations drawn) holds at once, 256 MB: each chunk streams the whole
/// subspace basis through one product, so for long signals (thousands of
/// bodies) the chunk must be wide for the product to be bound by arithmetic
/// rather than by memory: at 600 000 residuals a chunk of 53 signals
/// instead of 13 took a 1000-body shard from 692 s to 235 s
/// (docs/performance.md).
const CHUNK_NUMBERS: usize = 32_000_000;

/// Scores every hypothesis of `hyps` with its coordinates in the subspace
/// `basis` ([`score_chunk`] over chunks of at most [`CHUNK_NUMBERS`], in
/// parallel), reporting to `observer` and finishing its stage.
fn score_all<K: SignalKernel + ?Sized>(
    kernel: &K,
    basis: &Mat<f64>,
    hyps: &[Hypothesis],
    gm_max: f64,
    min_separation_au: f64,
    observer: &dyn Observer,
) -> Vec<(Option<Scored>, Vec<f32>, f64)> {
    let chunk = (CHUNK_NUMBERS / kernel.n_residuals().max(1)).clamp(8, 256);
    let done = std::sync::atomic::AtomicUsize::new(0);
    let results = hyps
        .par_chunks(chunk)
        .flat_map_iter(|hs| {
            let out = score_chunk(kernel, basis, hs, gm_max, min_separation_au);
            let n = done.fetch_add(hs.len(), std::sync::atomic::Ordering::Relaxed) + hs.len();
            observer.advance(n as u64);
            out.into_iter()
        })
        .collect();
    observer.finish();
    results
}

/// Scores a chunk of hypotheses and gives each scored one's normalised
/// coordinates in the subspace `basis` and the share of its energy they
/// hold. The coordinates of a chunk come from one matrix product (basis^T
/// times the chunk's signals, through faer), which for a joint kernel of
/// many bodies costs far more than the scoring itself when done one signal
/// at a time.
fn score_chunk<K: SignalKernel + ?Sized>(
    kernel: &K,
    basis: &Mat<f64>,
    hs: &[Hypothesis],
    gm_max: f64,
    min_separation_au: f64,
) -> Vec<(Option<Scored>, Vec<f32>, f64)> {
    let (n_res, k) = (kernel.n_residuals(), basis.ncols());
    let mut scratch = vec![0.0; n_res];
    let mut signals = Mat::<f64>::zeros(n_res, hs.len());
    let mut norms = vec![0.0; hs.len()];
    let scored: Vec<Option<Scored>> = hs
        .iter()
        .enumerate()
        .map(|(j, h)| {
            let s = score(kernel, h, gm_max, min_separation_au, &mut scratch)?;
            norms[j] = scratch.iter().map(|x| x * x).sum::<f64>().sqrt();
            for (i, x) in scratch.iter().enumerate() {
                signals[(i, j)] = *x;
            }
            Some(s)
        })
        .collect();
    let coords = if k > 0 { basis.transpose() * &signals } else { Mat::zeros(0, hs.len()) };
    scored
        .into_iter()
        .enumerate()
        .map(|(j, s)| match s {
            Some(s) => {
                let norm = norms[j];
                let mut c = vec![0.0f32; k];
                let mut energy = 0.0;
                if norm > 0.0 {
                    for (i, ci) in c.iter_mut().enumerate() {
                        let v = coords[(i, j)] / norm;
                        *ci = v as f32;
                        energy += v * v;
                    }
                }
                (Some(s), c, energy)
            }
            None => (None, Vec::new(), 0.0),
        })
        .collect()
}

/// The largest (c.w)^2 with c.w > 0 over the coordinates `coords` (the
/// chi-square drop of the best hypothesis, mass >= 0, for the noise whose
/// coordinates in the subspace are `w`).
fn null_maximum(coords: &[&Vec<f32>], w: &[f32]) -> f64 {
    let mut best = 0.0f32;
    for c in coords {
        let t: f32 = c.iter().zip(w).map(|(a, b)| a * b).sum();
        if t > best {
            best = t;
        }
    }
    f64::from(best) * f64::from(best)
}

/// One share of the search's null simulations: the maxima over one slice
/// of the grid's hypotheses (see [`null_maxima_share`]).
#[derive(Clone, Debug, PartialEq)]
pub struct NullShare {
    /// Shard K of N (1-based) of the hypotheses: those whose index in the
    /// grid's order is K - 1 modulo N.
    pub shard: (usize, usize),
    /// The search maximum over this shard's hypotheses of each null
    /// realisation (0 when no hypothesis fits with a positive mass).
    pub maxima: Vec<f64>,
    /// Hypotheses in the whole grid and in this shard.
    pub n_hypotheses: usize,
    pub n_in_shard: usize,
    /// Dimension of the signal subspace and the share of signal energy it
    /// holds (averaged over this shard's hypotheses).
    pub subspace_dimension: usize,
    pub subspace_energy: f64,
}

impl NullShare {
    /// The maxima of the whole search from the maxima of all its shards:
    /// each realisation's maximum over the shards (the same noise in every
    /// shard, so this is the maximum over the whole grid). None unless the
    /// shards are exactly 1..N of one N, each with as many realisations.
    pub fn combine(shares: &[&NullShare]) -> Option<Vec<f64>> {
        let n = shares.first()?.shard.1;
        let mut seen: Vec<usize> = shares.iter().map(|s| s.shard.0).collect();
        seen.sort();
        let len = shares[0].maxima.len();
        if seen != (1..=n).collect::<Vec<_>>() || shares.iter().any(|s| s.shard.1 != n || s.maxima.len() != len) {
            return None;
        }
        Some((0..len).map(|r| shares.iter().map(|s| s.maxima[r]).fold(0.0, f64::max)).collect())
    }
}

/// The search's null simulations alone (no search of the data), over shard
/// K of N of the grid's hypotheses: the maxima that set the detection
/// threshold, computed in pieces for job arrays.
///
/// Each realisation draws white noise z in the whole space of whitened
/// residuals (seeded by realisation, so every shard draws the same noise)
/// and takes its coordinates B^T z in the signal subspace B (the same
/// sample of the whole grid in every shard). Since B is orthonormal those
/// coordinates are independent unit normals, as the draw of
/// [`grid_search`]; unlike that draw, they do not depend on the signs or
/// the rotation the SVD picks for B, so every shard sees the same noise
/// field whatever its rounding, and the maximum over the shards' maxima is
/// the whole grid's maximum.
pub fn null_maxima_share<K: SignalKernel + ?Sized>(
    kernel: &K,
    settings: &SearchSettings,
    shard: (usize, usize),
    observer: &dyn Observer,
) -> NullShare {
    let (k_shard, n_shards) = (shard.0.max(1), shard.1.max(1));
    let gm_max = settings.mass_earth.1 * crate::units::GM_EARTH_MASS_AU3_PER_DAY2;
    let hyps = hypotheses(settings, kernel.central_gm());
    let mine: Vec<Hypothesis> =
        hyps.iter().enumerate().filter(|(i, _)| i % n_shards == k_shard - 1).map(|(_, h)| *h).collect();
    let n_res = kernel.n_residuals();
    observer.begin(Stage::Search, mine.len() as u64);
    let basis = signal_subspace(kernel, &hyps, settings, gm_max);
    let k = basis.ncols();
    let results = score_all(kernel, &basis, &mine, gm_max, settings.min_separation_au, observer);
    let coords: Vec<&Vec<f32>> = results.iter().filter(|r| r.0.is_some()).map(|r| &r.1).collect();
    let energy = results.iter().filter(|r| r.0.is_some()).map(|r| r.2).sum::<f64>() / coords.len().max(1) as f64;

    if settings.n_null > 0 {
        observer.begin(Stage::Nulls, settings.n_null as u64);
    }
    let mut maxima = Vec::with_capacity(settings.n_null);
    let block = (CHUNK_NUMBERS / n_res.max(1)).clamp(1, 64);
    let all: Vec<usize> = (0..settings.n_null).collect();
    for rs in all.chunks(block) {
        let draws: Vec<Vec<f64>> = rs
            .par_iter()
            .map(|&r| {
                let mut rng = rand::rngs::StdRng::seed_from_u64(
                    settings.seed.wrapping_mul(2_000_003).wrapping_add(r as u64) ^ 0x6e75_6c6c,
                );
                (0..n_res).map(|_| StandardNormal.sample(&mut rng)).collect()
            })
            .collect();
        let z = Mat::<f64>::from_fn(n_res, rs.len(), |i, j| draws[j][i]);
        drop(draws);
        let w = if k > 0 { basis.transpose() * &z } else { Mat::zeros(0, rs.len()) };
        let found: Vec<f64> = (0..rs.len())
            .into_par_iter()
            .map(|j| {
                let wj: Vec<f32> = (0..k).map(|i| w[(i, j)] as f32).collect();
                null_maximum(&coords, &wj)
            })
            .collect();
        maxima.extend(found);
        observer.advance(maxima.len() as u64);
    }
    if settings.n_null > 0 {
        observer.finish();
    }
    NullShare {
        shard: (k_shard, n_shards),
        maxima,
        n_hypotheses: hyps.len(),
        n_in_shard: mine.len(),
        subspace_dimension: k,
        subspace_energy: energy,
    }
}

/// From candidates sorted best first, those distinct from every earlier kept
/// one (directions more than `sep_deg` apart, or distances more than a
/// factor `ratio` apart), within `window` of the best, at most `max`.
pub fn distinct(
    candidates: impl Iterator<Item = Scored>,
    sep_deg: f64,
    ratio: f64,
    window: f64,
    max: usize,
) -> Vec<Scored> {
    let cos_sep = sep_deg.to_radians().cos();
    let mut kept: Vec<Scored> = Vec::new();
    for s in candidates {
        if kept.len() >= max || kept.first().is_some_and(|b| s.delta_chi2 < b.delta_chi2 - window) {
            break;
        }
        let dir = s.hypothesis.position_au.unit();
        let dist = s.hypothesis.position_au.norm();
        let new = kept.iter().all(|b| {
            let far = b.hypothesis.position_au.unit().dot(dir) < cos_sep;
            far || (b.hypothesis.position_au.norm() / dist).ln().abs() > ratio.ln()
        });
        if new {
            kept.push(s);
        }
    }
    kept
}

/// The kernel's chi-square drop as a cost for Nelder-Mead, in scaled
/// coordinates: position in units of the start's distance, velocity in
/// units of its speed.
struct KernelCost<'k, K: ?Sized> {
    kernel: &'k K,
    r0: f64,
    v0: f64,
    gm_max: f64,
    /// The searched region (distance range and band): a hard bound.
    settings: &'k SearchSettings,
}

impl<K: SignalKernel + ?Sized> CostFunction for KernelCost<'_, K> {
    type Param = Vec<f64>;
    type Output = f64;

    fn cost(&self, p: &Self::Param) -> Result<f64, ArgminError> {
        let h = Hypothesis {
            position_au: Vec3::new(p[0], p[1], p[2]) * self.r0,
            velocity_au_per_day: Vec3::new(p[3], p[4], p[5]) * self.v0,
        };
        if !self.settings.contains(h.position_au, h.velocity_au_per_day) {
            return Ok(0.0);
        }
        let mut scratch = vec![0.0; self.kernel.n_residuals()];
        Ok(score(self.kernel, &h, self.gm_max, self.settings.min_separation_au, &mut scratch)
            .map_or(0.0, |s| -s.delta_chi2))
    }
}

/// Improves a grid cell by Nelder-Mead (argmin) on its 6-dimensional state
/// through the kernel; keeps the cell when nothing better is found.
fn refine_in_kernel<K: SignalKernel + ?Sized>(
    kernel: &K,
    start: &Scored,
    gm_max: f64,
    settings: &SearchSettings,
) -> Scored {
    let (r, v) = (start.hypothesis.position_au, start.hypothesis.velocity_au_per_day);
    let (r0, v0) = (r.norm(), v.norm());
    let p0 = vec![r.x / r0, r.y / r0, r.z / r0, v.x / v0, v.y / v0, v.z / v0];
    let mut simplex = vec![p0.clone()];
    for i in 0..6 {
        let mut p = p0.clone();
        p[i] += if i < 3 { 0.04 } else { 0.08 };
        simplex.push(p);
    }
    let cost = KernelCost { kernel, r0, v0, gm_max, settings };
    let Ok(solver) = NelderMead::new(simplex).with_sd_tolerance(1e-4) else {
        return *start;
    };
    let Ok(res) = Executor::new(cost, solver).configure(|s| s.max_iters(600)).run() else {
        return *start;
    };
    let Some(best) = res.state().get_best_param() else {
        return *start;
    };
    let h = Hypothesis {
        position_au: Vec3::new(best[0], best[1], best[2]) * r0,
        velocity_au_per_day: Vec3::new(best[3], best[4], best[5]) * v0,
    };
    let mut scratch = vec![0.0; kernel.n_residuals()];
    let inside = settings.contains(h.position_au, h.velocity_au_per_day);
    match score(kernel, &h, gm_max, settings.min_separation_au, &mut scratch) {
        Some(s) if inside && s.delta_chi2 > start.delta_chi2 => s,
        _ => *start,
    }
}

/// An orthonormal basis (columns) of the subspace holding the normalised,
/// projected signals: the leading left singular vectors of a sample of them,
/// as many as hold 99.99% of the sample's energy (at most 120).
fn signal_subspace<K: SignalKernel + ?Sized>(
    kernel: &K,
    hyps: &[Hypothesis],
    settings: &SearchSettings,
    gm_max: f64,
) -> Mat<f64> {
    let n_res = kernel.n_residuals();
    // About 1000 signals, fewer for populations of many bodies (at most
    // 250 million numbers, the cost of computing it twice below, but never
    // fewer than 300 signals).
    let target = (250_000_000 / n_res.max(1)).clamp(300, 1000);
    let stride = (hyps.len() / target).max(1);
    let picked: Vec<&Hypothesis> = hyps.iter().step_by(stride).collect();
    // The sample's norms first (the whole signal of each, one at a time);
    // then its normalised signals a block of rows (bodies) at a time, never
    // the whole sample at once.
    let sample: Vec<(KeplerOrbit, f64)> = picked
        .par_iter()
        .filter_map(|h| {
            let mut s = vec![0.0; n_res];
            score(kernel, h, gm_max, settings.min_separation_au, &mut s)?;
            let norm = s.iter().map(|x| x * x).sum::<f64>().sqrt();
            let orbit = KeplerOrbit::from_state(
                kernel.central_gm(),
                h.position_au,
                h.velocity_au_per_day,
                kernel.epoch_tdb_days(),
            )?;
            (norm > 0.0).then_some((orbit, norm))
        })
        .collect();
    let n_sample = sample.len();
    if n_sample == 0 {
        return Mat::zeros(n_res, 0);
    }
    // Consecutive parts in blocks of about CHUNK_NUMBERS / 4 numbers of the
    // sample (at least one part a block).
    let parts = kernel.parts();
    let mut blocks: Vec<std::ops::Range<usize>> = Vec::new();
    let mut start = 0;
    for (i, p) in parts.iter().enumerate() {
        let rows = p.end - parts[start].start;
        if rows * n_sample >= CHUNK_NUMBERS / 4 || i + 1 == parts.len() {
            blocks.push(start..i + 1);
            start = i + 1;
        }
    }
    // The sample's rows of a block of parts, normalised (rows x sample).
    let rows_of = |block: &std::ops::Range<usize>| -> Mat<f64> {
        let first = parts[block.start].start;
        let n_rows = parts[block.end - 1].end - first;
        let columns: Vec<Vec<f64>> = sample
            .par_iter()
            .map(|(orbit, norm)| {
                let mut c = vec![0.0; n_rows];
                for p in block.clone() {
                    let r = parts[p].clone();
                    kernel.projected_part(p, orbit, gm_max, &mut c[r.start - first..r.end - first]);
                }
                c.iter_mut().for_each(|x| *x /= norm);
                c
            })
            .collect();
        Mat::<f64>::from_fn(n_rows, n_sample, |i, j| columns[j][i])
    };
    // The leading left singular vectors of the sample M from its Gram
    // matrix G = M^T M = V S^2 V^T, a sum over blocks of rows: U = M V S^-1,
    // again a block of rows at a time. Only G, one block and the basis are
    // held: the sample itself (a 1000-body shard: 2 GB, 416 signals of
    // 600 000 residuals) never is, at the cost of computing it twice (the
    // sample is under 2% of a shard's hypotheses; docs/performance.md).
    // The vectors kept have S^2 at least 1e-6 of the largest at 99.99% of
    // the energy, where the Gram matrix's rounding (1e-16 of the largest)
    // should leave them orthonormal to about 1e-10 (an estimate from the
    // usual eigenvector error bound, not measured; `tests/perturber.rs`
    // checks what it feeds: the null maxima against the exact search
    // maxima).
    let mut g = Mat::<f64>::zeros(n_sample, n_sample);
    for block in &blocks {
        let m = rows_of(block);
        g += m.transpose() * &m;
    }
    let Ok(eig) = g.self_adjoint_eigen(faer::Side::Lower) else {
        return Mat::zeros(n_res, 0);
    };
    let lambda = eig.S().column_vector();
    let mut order: Vec<usize> = (0..n_sample).collect();
    order.sort_by(|&a, &b| lambda[b].total_cmp(&lambda[a]));
    let total: f64 = order.iter().map(|&i| lambda[i].max(0.0)).sum();
    let mut acc = 0.0;
    let mut k = 0;
    for &i in &order {
        if lambda[i] <= 0.0 {
            break;
        }
        acc += lambda[i];
        k += 1;
        if acc >= 0.9999 * total || k >= 120 {
            break;
        }
    }
    let v = eig.U();
    let scaled = Mat::<f64>::from_fn(n_sample, k, |i, j| v[(i, order[j])] / lambda[order[j]].sqrt());
    let mut basis = Mat::<f64>::zeros(n_res, k);
    for block in &blocks {
        let first = parts[block.start].start;
        let rows = rows_of(block);
        let n_rows = rows.nrows();
        basis.as_mut().subrows_mut(first, n_rows).copy_from(rows * &scaled);
    }
    basis
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::frames::ecliptic_from_icrf;

    fn latitude_deg(dir: Vec3) -> f64 {
        ecliptic_from_icrf(dir.unit()).z.asin().to_degrees()
    }

    fn inclination_deg(r: Vec3, v: Vec3) -> f64 {
        ecliptic_from_icrf(r.cross(v).unit()).z.acos().to_degrees()
    }

    #[test]
    fn band_grid_holds_only_orbits_within_the_band() {
        let settings = SearchSettings {
            n_directions: 200,
            n_distances: 3,
            near_ecliptic_deg: Some(12.0),
            ..SearchSettings::default()
        };
        let hyps = hypotheses(&settings, crate::units::GM_SUN_AU3_PER_DAY2);
        assert_eq!(hyps.len(), 200 * 3 * 8 * 3);
        for h in &hyps {
            let i = inclination_deg(h.position_au, h.velocity_au_per_day);
            assert!(i <= 12.0 + 1e-9 || i >= 168.0 - 1e-9, "inclination {i}");
            assert!(latitude_deg(h.position_au).abs() <= 12.0 + 1e-9);
            assert!(orbit_in_band(h.position_au, h.velocity_au_per_day, settings.near_ecliptic_deg));
        }
        // Both senses of motion, and the band's whole width of latitudes
        // (equal area: about as many directions above 6 deg as the band's
        // area there, (sin 12 - sin 6) / sin 12 = 49.7%).
        assert!(hyps.iter().any(|h| inclination_deg(h.position_au, h.velocity_au_per_day) > 90.0));
        let dirs = band_directions(200, 12.0);
        let high = dirs.iter().filter(|d| latitude_deg(**d).abs() > 6.0).count();
        assert!((high as f64 / 200.0 - 0.497).abs() < 0.02, "{high}");
    }

    #[test]
    fn band_fraction_is_the_share_of_isotropic_orbit_planes() {
        // Independent of the closed form 1 - cos(band): integrate over the
        // position's latitude b (density cos b / 2) the share of uniform
        // roll angles whose plane stays in the band, (2/pi) acos(cos B / cos b)
        // (midpoint rule on a fine grid).
        for band in [5.0f64, 20.0, 60.0, 90.0] {
            let bb = band.to_radians();
            let n = 200_000;
            let h = 2.0 * bb / n as f64;
            let integral: f64 = (0..n)
                .map(|k| {
                    let b = -bb + (k as f64 + 0.5) * h;
                    let c = (bb.cos() / b.cos()).min(1.0);
                    0.5 * b.cos() * std::f64::consts::FRAC_2_PI * c.acos() * h
                })
                .sum();
            assert!((integral - band_fraction(Some(band))).abs() < 1e-4, "{band}: {integral}");
        }
        assert_eq!(band_fraction(None), 1.0);
    }

    #[test]
    fn draws_in_the_band_are_isotropic_orbits_conditioned_on_it() {
        // The constructive draw against rejection from isotropic states:
        // the same distribution of |latitude| (quartiles within 0.3 deg).
        let mut rng = rand::rngs::StdRng::seed_from_u64(5);
        let band = 25.0;
        let mut drawn: Vec<f64> = (0..20_000)
            .map(|_| {
                let (d, t) = draw_in_band(band, &mut rng);
                assert!(orbit_in_band(d, t, Some(band)));
                assert!(d.dot(t).abs() < 1e-12);
                latitude_deg(d).abs()
            })
            .collect();
        let mut rejected = Vec::new();
        while rejected.len() < 20_000 {
            let g = |rng: &mut rand::rngs::StdRng| -> f64 { StandardNormal.sample(rng) };
            let d = Vec3::new(g(&mut rng), g(&mut rng), g(&mut rng)).unit();
            let v = Vec3::new(g(&mut rng), g(&mut rng), g(&mut rng));
            let t = v - d * d.dot(v);
            if orbit_in_band(d, t, Some(band)) {
                rejected.push(latitude_deg(d).abs());
            }
        }
        drawn.sort_by(f64::total_cmp);
        rejected.sort_by(f64::total_cmp);
        for q in [5_000, 10_000, 15_000] {
            assert!((drawn[q] - rejected[q]).abs() < 0.3, "quantile {q}: {} vs {}", drawn[q], rejected[q]);
        }
    }

    #[test]
    fn band_is_checked() {
        let bad = SearchSettings { near_ecliptic_deg: Some(0.0), ..SearchSettings::default() };
        assert!(bad.check_band().is_err());
        let bad = SearchSettings { near_ecliptic_deg: Some(91.0), ..SearchSettings::default() };
        assert!(bad.check_band().is_err());
        assert!(SearchSettings::default().check_band().is_ok());
    }
}
