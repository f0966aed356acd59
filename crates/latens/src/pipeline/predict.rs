//! Prediction: where each sky mode of a posterior will be, date by date, for
//! scheduling the search.
//!
//! Each posterior sample moves on a two-body orbit about the Sun; over the
//! year or two of a search campaign the planets change a distant
//! perturber's place by far less than the posterior's spread. The modes are
//! those of the sky products (the same map built from the same samples).

use super::{DerivedSample, PipelineError, SUN_WARNING_DEG, SearchGeometry, geometry_at};
use crate::ephemeris::Ephemeris;
use crate::frames::{angular_separation, tangent};
use crate::perturber::KeplerOrbit;
use crate::posterior::quantiles;
use crate::skymap::observe::{magnitude_range, motion};
use crate::skymap::{SkyMap, lon_lat};
use crate::units::RAD_PER_DEG;
use crate::vec3::Vec3;

/// Samples followed per mode.
const PER_MODE: usize = 400;

/// A posterior sample as prediction needs it.
#[derive(Clone, Copy, Debug)]
pub struct OrbitSample {
    pub mass_earth: f64,
    pub orbit: KeplerOrbit,
    /// Geocentric direction at the search epoch (for the modes).
    pub direction: Vec3,
}

impl OrbitSample {
    /// From a posterior sample, its orbit about a centre of `gm_sun` at
    /// `epoch_tdb_days` (None for an unbound one).
    pub fn from_derived(d: &DerivedSample, gm_sun: f64, epoch_tdb_days: f64) -> Option<OrbitSample> {
        let orbit =
            KeplerOrbit::from_state(gm_sun, d.sample.position_au, d.sample.velocity_au_per_day, epoch_tdb_days)?;
        Some(OrbitSample { mass_earth: d.sample.mass_earth(), orbit, direction: d.direction })
    }
}

/// One mode's place at one date.
#[derive(Clone, Debug, PartialEq)]
pub struct Prediction {
    /// 1-based, as in the sky products.
    pub mode: usize,
    pub t_tdb_days: f64,
    pub ra_deg: f64,
    pub dec_deg: f64,
    /// 1-sigma ellipse of the samples' directions: semi-axes (deg) and the
    /// major axis's position angle (deg east of north).
    pub ellipse_major_deg: f64,
    pub ellipse_minor_deg: f64,
    pub ellipse_pa_deg: f64,
    /// V magnitude: 5th percentile of the bright end, 95th of the faint.
    pub v_mag_bright: f64,
    pub v_mag_faint: f64,
    pub motion_arcsec_per_hour: f64,
    pub motion_pa_deg: f64,
    pub solar_elongation_deg: f64,
    /// Within the safety limit of the Sun (see [`SUN_WARNING_DEG`]).
    pub near_sun: bool,
}

/// Places of every mode holding at least 1% of the samples, at `steps`
/// dates `step_days` apart from `start_tdb_days`, seen from the Earth of
/// `earth`.
pub fn predict(
    samples: &[OrbitSample],
    earth: &dyn Ephemeris,
    start_tdb_days: f64,
    step_days: f64,
    steps: usize,
) -> Result<Vec<Prediction>, PipelineError> {
    if !(step_days.is_finite() && step_days > 0.0) {
        return Err(PipelineError::Input(format!("--step-days must be positive, got {step_days}")));
    }
    let directions: Vec<Vec3> = samples.iter().map(|s| s.direction).collect();
    let map = SkyMap::from_directions(&directions);
    let modes = map.modes(0.9);
    let listed: Vec<usize> = (0..modes.probability.len()).filter(|&m| modes.probability[m] >= 0.01).collect();
    let mut out = Vec::new();
    for &m in &listed {
        let members: Vec<&OrbitSample> =
            samples.iter().zip(&modes.sample_mode).filter(|(_, k)| **k == Some(m)).map(|(s, _)| s).collect();
        let stride = (members.len() / PER_MODE).max(1);
        let members: Vec<&OrbitSample> = members.into_iter().step_by(stride).collect();
        for k in 0..steps {
            let t = start_tdb_days + k as f64 * step_days;
            let search = SearchGeometry::new(earth, t)?;
            let (gb, ga) = (geometry_at(earth, t - 0.5)?, geometry_at(earth, t + 0.5)?);
            let mut dirs = Vec::new();
            let (mut bright, mut faint, mut rates) = (Vec::new(), Vec::new(), Vec::new());
            let (mut ps, mut pc) = (0.0, 0.0);
            for s in &members {
                let (d, delta, r, _) = search.place_at(&s.orbit, t, &search.geometry);
                let (a, _, _, _) = search.place_at(&s.orbit, t - 0.5, &gb);
                let (b, _, _, _) = search.place_at(&s.orbit, t + 0.5, &ga);
                let (rate, pa) = motion(a, b, 24.0);
                let (vb, vf) = magnitude_range(s.mass_earth, r, delta);
                dirs.push(d);
                bright.push(vb);
                faint.push(vf);
                rates.push(rate);
                ps += pa.to_radians().sin();
                pc += pa.to_radians().cos();
            }
            let centre = dirs.iter().fold(Vec3::ZERO, |a, d| a + *d).unit();
            let (major, minor, angle) = ellipse(centre, &dirs);
            let (ra, dec) = lon_lat(centre);
            let sun = -search.geometry.observer_au;
            let elongation = angular_separation(centre, sun) / RAD_PER_DEG;
            out.push(Prediction {
                mode: m + 1,
                t_tdb_days: t,
                ra_deg: ra / RAD_PER_DEG,
                dec_deg: dec / RAD_PER_DEG,
                ellipse_major_deg: major,
                ellipse_minor_deg: minor,
                ellipse_pa_deg: angle,
                v_mag_bright: quantiles(&bright, &[0.05])[0],
                v_mag_faint: quantiles(&faint, &[0.95])[0],
                motion_arcsec_per_hour: quantiles(&rates, &[0.5])[0],
                motion_pa_deg: ps.atan2(pc).to_degrees().rem_euclid(360.0),
                solar_elongation_deg: elongation,
                near_sun: elongation < SUN_WARNING_DEG,
            });
        }
    }
    Ok(out)
}

/// The 1-sigma ellipse of directions about their centre, in the tangent
/// plane: semi-axes (degrees) and the major axis's position angle (degrees
/// east of north).
fn ellipse(centre: Vec3, dirs: &[Vec3]) -> (f64, f64, f64) {
    let pts: Vec<(f64, f64)> = dirs.iter().filter_map(|d| tangent(centre, *d)).collect();
    let n = pts.len().max(1) as f64;
    let (mx, my) = pts.iter().fold((0.0, 0.0), |a, p| (a.0 + p.0 / n, a.1 + p.1 / n));
    let (mut sxx, mut syy, mut sxy) = (0.0, 0.0, 0.0);
    for p in &pts {
        sxx += (p.0 - mx).powi(2) / n;
        syy += (p.1 - my).powi(2) / n;
        sxy += (p.0 - mx) * (p.1 - my) / n;
    }
    let tr = sxx + syy;
    let det = sxx * syy - sxy * sxy;
    let disc = (tr * tr / 4.0 - det).max(0.0).sqrt();
    let (l1, l2) = (tr / 2.0 + disc, (tr / 2.0 - disc).max(0.0));
    // Angle of the major axis from north (y) towards east (x).
    let angle = 0.5 * (2.0 * sxy).atan2(syy - sxx);
    (l1.sqrt(), l2.sqrt(), angle.to_degrees().rem_euclid(180.0))
}
