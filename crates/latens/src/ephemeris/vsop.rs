//! The embedded default ephemeris: the VSOP87A planetary theory.
//!
//! VSOP87A (Bretagnon & Francou 1988, A&A 202, 309) gives heliocentric
//! rectangular coordinates referred to the dynamical ecliptic and equinox of
//! J2000, in au, as functions of TDB. The `vsop87` crate evaluates the series;
//! this module rotates them into ICRF axes and differentiates them for the
//! velocity, which the series do not give directly.
//!
//! Rotation: VSOP87's ecliptic and equinox are rotated to the equator with
//! the matrix Bretagnon & Francou give for VSOP87 -> FK5 J2000 (its small
//! off-diagonal terms turn the VSOP87 dynamical equinox onto the FK5 one;
//! values recalled from memory of that paper). Measured against DE421 over
//! 1900-2050 it beats both the IAU 2006 ecliptic rotation with frame bias
//! (Earth 0.104" instead of 0.023") and a plain obliquity rotation (0.111"):
//! VSOP87 was fitted to DE200, whose axes are those of FK5 J2000 and lie within
//! about 0.01" of the ICRF. See `docs/ephemerides.md` for the table.
//!
//! Cost: about 0.2 ms per body and epoch. Anything that asks more than a few
//! thousand times must go through [`super::Tabulated`].

use super::{Body, Ephemeris, EphemerisError, HeliocentricState};
use crate::frames::Matrix3;
use crate::units::J2000_JD;
use crate::vec3::Vec3;

/// Time step of the numerical derivative of the series, days. With the
/// fourth-order central difference below, truncation error is far below the
/// series' own precision and rounding error about 1e-15 au/day.
const DERIVATIVE_STEP_DAYS: f64 = 0.05;

/// Years either side of J2000 over which Latens accepts VSOP87A. The theory is
/// stated to 1" over 4000 years for the inner planets, 2000 years for Jupiter and
/// Saturn and 6000 years for Uranus and Neptune (Bretagnon & Francou 1988);
/// one millennium either side is inside all of them.
const COVERED_YEARS: f64 = 1000.0;

/// VSOP87 ecliptic-J2000 axes -> FK5 J2000 equatorial axes (Bretagnon &
/// Francou 1988), used here as the rotation into ICRF.
const ICRF_FROM_VSOP87: Matrix3 = Matrix3([
    [1.0, 0.000_000_440_360, -0.000_000_190_919],
    [-0.000_000_479_966, 0.917_482_137_087, -0.397_776_982_902],
    [0.0, 0.397_776_982_902, 0.917_482_137_087],
]);

/// The VSOP87A theory, embedded; needs no data file.
#[derive(Clone, Copy, Debug, Default)]
pub struct Vsop87;

impl Vsop87 {
    pub fn new() -> Self {
        Vsop87
    }

    /// Heliocentric ecliptic-J2000 position, au, straight from the series.
    fn ecliptic_position_au(body: Body, t_tdb_days: f64) -> Option<Vec3> {
        use vsop87::vsop87a;
        let jde = J2000_JD + t_tdb_days;
        let c = match body {
            Body::Sun => return Some(Vec3::ZERO),
            Body::Mercury => vsop87a::mercury(jde),
            Body::Venus => vsop87a::venus(jde),
            Body::Earth => vsop87a::earth(jde),
            Body::EarthMoonBarycenter => vsop87a::earth_moon(jde),
            Body::Mars => vsop87a::mars(jde),
            Body::Jupiter => vsop87a::jupiter(jde),
            Body::Saturn => vsop87a::saturn(jde),
            Body::Uranus => vsop87a::uranus(jde),
            Body::Neptune => vsop87a::neptune(jde),
            Body::Moon | Body::Pluto => return None,
        };
        Some(Vec3::new(c.x, c.y, c.z))
    }
}

impl Ephemeris for Vsop87 {
    fn description(&self) -> String {
        "VSOP87A (embedded)".to_string()
    }

    fn covered_tdb_days(&self, body: Body) -> Option<(f64, f64)> {
        Self::ecliptic_position_au(body, 0.0)?;
        let half = COVERED_YEARS * crate::units::JULIAN_YEAR_DAYS;
        Some((-half, half))
    }

    fn heliocentric_state(&self, body: Body, t_tdb_days: f64) -> Result<HeliocentricState, EphemerisError> {
        self.check_covered(body, t_tdb_days)?;
        let at = |dt: f64| Self::ecliptic_position_au(body, t_tdb_days + dt).unwrap_or(Vec3::ZERO);
        let h = DERIVATIVE_STEP_DAYS;
        let position = at(0.0);
        let velocity = (at(-2.0 * h) - at(2.0 * h) + (at(h) - at(-h)) * 8.0) / (12.0 * h);
        Ok(HeliocentricState {
            body,
            t_tdb_days,
            position_au: ICRF_FROM_VSOP87.apply(position),
            velocity_au_per_day: ICRF_FROM_VSOP87.apply(velocity),
        })
    }

    fn heliocentric_position_au(&self, body: Body, t_tdb_days: f64) -> Result<Vec3, EphemerisError> {
        self.check_covered(body, t_tdb_days)?;
        Ok(ICRF_FROM_VSOP87.apply(Self::ecliptic_position_au(body, t_tdb_days).unwrap_or(Vec3::ZERO)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn moon_and_pluto_are_not_provided() {
        let e = Vsop87::new();
        assert!(matches!(e.heliocentric_state(Body::Moon, 0.0), Err(EphemerisError::NotProvided { .. })));
        assert!(matches!(e.heliocentric_state(Body::Pluto, 0.0), Err(EphemerisError::NotProvided { .. })));
    }

    #[test]
    fn outside_two_millennia_is_an_error() {
        let e = Vsop87::new();
        assert!(matches!(e.heliocentric_state(Body::Earth, 1.0e6), Err(EphemerisError::OutOfRange { .. })));
    }

    #[test]
    fn earth_speed_is_about_one_au_per_year() {
        let s = Vsop87::new().heliocentric_state(Body::Earth, 1234.5).unwrap();
        let v = s.velocity_au_per_day.norm();
        // 2 pi au per 365.25 days, within the eccentricity (common practice).
        assert!((v / (std::f64::consts::TAU / 365.25) - 1.0).abs() < 0.02, "{v}");
    }
}
