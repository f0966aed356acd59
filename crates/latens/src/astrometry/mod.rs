//! The observation model: from heliocentric states to what an observer
//! measures, an astrometric RA/Dec.
//!
//! Astrometric means: the direction from the observer at the time of
//! observation to where the body was when the light left it (light time
//! iterated), in ICRF axes, with no aberration and no light bending; the
//! reference stars' positions carry those effects equally, so they cancel.
//!
//! Light travels in the barycentric frame. With heliocentric states the
//! direction is
//!
//!   rho = r(t - tau) - O(t) - V_sun tau,     tau = |rho| / c,
//!
//! where V_sun is the Sun's barycentric velocity (about 13 m/s); leaving out
//! the last term would shift a body 40 au away by about 10 mas.
//!
//! Observing sites: WGS84 geodetic coordinates to an Earth-fixed vector,
//! rotated by the Greenwich mean sidereal time (UT1 taken as UTC) and by the
//! IAU 1976 precession to J2000 axes. Neglected: nutation (up to 17", moving a
//! site by up to 0.5 km), polar motion (0.5", 15 m), UT1 - UTC (up to 0.9 s,
//! 0.4 km at the equator) and the 23 mas frame bias. Together at most about
//! 1 km: 0.2 mas for a body 1 au away, 0.005 mas at 40 au.

use hifitime::Epoch;

use crate::ephemeris::{Body, Ephemeris, EphemerisError};
use crate::frames::{Matrix3, RaDec, radec_from_vector};
use crate::io::observations::Site;
use crate::time::tt_seconds_from_j2000;
use crate::units::{
    AU_M, C_AU_PER_DAY, DAY_S, EARTH_EQUATORIAL_RADIUS_M, EARTH_FLATTENING, RAD_PER_ARCSEC, RAD_PER_DEG, TAI_MINUS_TT_S,
};
use crate::vec3::Vec3;

/// Planets whose masses set the Sun's barycentric motion (Pluto is added
/// when the ephemeris has it).
const BARYCENTRE_BODIES: [Body; 8] = [
    Body::Mercury,
    Body::Venus,
    Body::EarthMoonBarycenter,
    Body::Mars,
    Body::Jupiter,
    Body::Saturn,
    Body::Uranus,
    Body::Neptune,
];

/// The Sun's velocity relative to the solar-system barycentre, au/day, ICRF:
/// V_sun = -sum mu_i V_i / (mu_sun + sum mu_i) over the planets (exact for
/// point masses; the asteroids' share is about 1e-3 of it).
pub fn sun_barycentric_velocity(ephemeris: &dyn Ephemeris, t_tdb_days: f64) -> Result<Vec3, EphemerisError> {
    let mut total = Body::Sun.gm_au3_per_day2();
    let mut momentum = Vec3::ZERO;
    for body in BARYCENTRE_BODIES.iter().copied().chain(std::iter::once(Body::Pluto)) {
        if body == Body::Pluto && ephemeris.covered_tdb_days(body).is_none() {
            continue;
        }
        let s = ephemeris.heliocentric_state(body, t_tdb_days)?;
        momentum += s.velocity_au_per_day * body.gm_au3_per_day2();
        total += body.gm_au3_per_day2();
    }
    Ok(-momentum / total)
}

/// Bodies an ephemeris must provide for [`sun_barycentric_velocity`] and for
/// observers on the Earth.
pub fn observer_ephemeris_bodies() -> Vec<Body> {
    let mut b = BARYCENTRE_BODIES.to_vec();
    b.push(Body::Earth);
    b
}

/// Universal time (taken as UTC) as days after J2000.0 (JD 2451545.0 UT).
fn ut_days_from_j2000(epoch: Epoch) -> f64 {
    let leap = epoch.leap_seconds(true).unwrap_or(crate::time::TAI_MINUS_UTC_BEFORE_1972_S);
    (tt_seconds_from_j2000(epoch) + TAI_MINUS_TT_S - leap) / DAY_S
}

/// Greenwich mean sidereal time, radians, with UT1 taken as UTC (IAU 1982
/// expression as given by Meeus, *Astronomical Algorithms*, eq. 12.4; from
/// memory).
pub fn gmst_rad(epoch: Epoch) -> f64 {
    let d = ut_days_from_j2000(epoch);
    let t = d / 36_525.0;
    let deg = 280.460_618_37 + 360.985_647_366_29 * d + 0.000_387_933 * t * t - t * t * t / 38_710_000.0;
    crate::units::wrap_two_pi(deg * RAD_PER_DEG)
}

/// The IAU 1976 precession matrix from the mean equator and equinox of J2000
/// to those of date (Lieske et al. 1977, A&A 58, 1; angles from memory):
/// P = R3(-z) R2(theta) R3(-zeta).
pub fn precession_from_j2000(epoch: Epoch) -> Matrix3 {
    let t = tt_seconds_from_j2000(epoch) / (DAY_S * 36_525.0);
    let zeta = (2306.2181 * t + 0.301_88 * t * t + 0.017_998 * t * t * t) * RAD_PER_ARCSEC;
    let z = (2306.2181 * t + 1.094_68 * t * t + 0.018_203 * t * t * t) * RAD_PER_ARCSEC;
    let theta = (2004.3109 * t - 0.426_65 * t * t - 0.041_833 * t * t * t) * RAD_PER_ARCSEC;
    Matrix3::rotation_about_z(-z)
        .then_after(&Matrix3::rotation_about_y(theta))
        .then_after(&Matrix3::rotation_about_z(-zeta))
}

/// The Earth-fixed position of a site, metres (WGS84).
pub fn site_earth_fixed_m(site: &Site) -> Vec3 {
    let (lat, lon) = (site.lat_deg * RAD_PER_DEG, site.lon_deg * RAD_PER_DEG);
    let e2 = EARTH_FLATTENING * (2.0 - EARTH_FLATTENING);
    let n = EARTH_EQUATORIAL_RADIUS_M / (1.0 - e2 * lat.sin().powi(2)).sqrt();
    Vec3::new(
        (n + site.height_m) * lat.cos() * lon.cos(),
        (n + site.height_m) * lat.cos() * lon.sin(),
        (n * (1.0 - e2) + site.height_m) * lat.sin(),
    )
}

/// The geocentric ICRF position of a site at `epoch`, au (see the module
/// documentation for what is neglected).
pub fn site_geocentric_au(site: &Site, epoch: Epoch) -> Vec3 {
    let fixed = site_earth_fixed_m(site);
    let of_date = Matrix3::rotation_about_z(-gmst_rad(epoch)).apply(fixed);
    precession_from_j2000(epoch).transpose().apply(of_date) / AU_M
}

/// The heliocentric ICRF position of an observer (au): the Earth's centre,
/// plus the site's offset when there is one.
pub fn observer_heliocentric_au(
    ephemeris: &dyn Ephemeris,
    site: Option<&Site>,
    epoch: Epoch,
    t_tdb_days: f64,
) -> Result<Vec3, EphemerisError> {
    let earth = ephemeris.heliocentric_position_au(Body::Earth, t_tdb_days)?;
    Ok(match site {
        Some(s) => earth + site_geocentric_au(s, epoch),
        None => earth,
    })
}

/// Everything about one observation that does not depend on the orbit.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ObservingGeometry {
    pub t_tdb_days: f64,
    pub observer_au: Vec3,
    pub sun_barycentric_velocity_au_per_day: Vec3,
}

/// The astrometric direction from the observer, given the body's state at a
/// guessed emission time `t_guess` (position and velocity); light time is
/// solved by moving along that velocity, which is exact to (dt)^2 times the
/// acceleration (below 1e-15 au once the guess is within seconds).
///
/// Returns the direction vector rho (au), the light time (days) and the RA/Dec.
pub fn astrometric_direction(
    geometry: &ObservingGeometry,
    t_guess: f64,
    position_au: Vec3,
    velocity_au_per_day: Vec3,
) -> (Vec3, f64, RaDec) {
    let mut tau = (position_au - geometry.observer_au).norm() / C_AU_PER_DAY;
    let mut rho = Vec3::ZERO;
    for _ in 0..4 {
        let t_emit = geometry.t_tdb_days - tau;
        let r = position_au + velocity_au_per_day * (t_emit - t_guess);
        rho = r - geometry.observer_au - geometry.sun_barycentric_velocity_au_per_day * tau;
        tau = rho.norm() / C_AU_PER_DAY;
    }
    (rho, tau, radec_from_vector(rho))
}

/// Partial derivatives of (RA*cos(Dec), Dec) with respect to the direction
/// vector rho (radians per au).
pub fn radec_partials(rho: Vec3) -> ([f64; 3], [f64; 3]) {
    let d = rho.norm();
    let rd = radec_from_vector(rho);
    let (sa, ca) = rd.ra_rad.sin_cos();
    let (sd, cd) = rd.dec_rad.sin_cos();
    ([-sa / d, ca / d, 0.0], [-sd * ca / d, -sd * sa / d, cd / d])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn partials_match_finite_differences() {
        let rho = Vec3::new(12.0, -30.0, 7.5);
        let (pa, pd) = radec_partials(rho);
        let base = radec_from_vector(rho);
        let h = 1e-6;
        for k in 0..3 {
            let mut e = [0.0; 3];
            e[k] = h;
            let moved = radec_from_vector(rho + Vec3::from_array(e));
            let dra = crate::units::wrap_pi(moved.ra_rad - base.ra_rad) * base.dec_rad.cos() / h;
            let ddec = (moved.dec_rad - base.dec_rad) / h;
            assert!((dra - pa[k]).abs() < 1e-9 && (ddec - pd[k]).abs() < 1e-9);
        }
    }

    #[test]
    fn gmst_at_j2000_matches_the_published_value() {
        // GMST at 2000-01-01T12:00 UT1 is 280.46061837 deg (Meeus eq. 12.4,
        // from memory): the constant term of the expression.
        let e = crate::time::parse_utc_iso("2000-01-01T12:00:00Z").unwrap();
        let g = gmst_rad(e) / RAD_PER_DEG;
        assert!((g - 280.460_618_37).abs() < 1e-6, "{g}");
    }

    #[test]
    fn site_on_the_equator_at_the_prime_meridian_has_the_equatorial_radius() {
        let s = Site { name: "x".into(), lon_deg: 0.0, lat_deg: 0.0, height_m: 0.0 };
        assert!((site_earth_fixed_m(&s).norm() - EARTH_EQUATORIAL_RADIUS_M).abs() < 1e-6);
        let pole = Site { name: "p".into(), lon_deg: 0.0, lat_deg: 90.0, height_m: 0.0 };
        // WGS84 polar radius 6356752.314 m (common practice).
        assert!((site_earth_fixed_m(&pole).z - 6_356_752.314).abs() < 0.01);
    }
}
