//! Physical constants and unit conversions, each with its source.
//!
//! Inside Latens lengths are in au, times in days (TDB), angles in radians and
//! gravitational parameters (GM) in au^3/day^2. Every constant carries its unit
//! in its name. Conversions to people's units (km, arcsec, degrees, UTC) happen
//! only at the edges (`io`, `cli`, `report`).

/// The astronomical unit in km, exact by definition (IAU 2012 Resolution B2).
pub const AU_KM: f64 = 149_597_870.700;
/// The astronomical unit in metres (IAU 2012 Resolution B2).
pub const AU_M: f64 = AU_KM * 1000.0;
/// Seconds in a day (SI day of 86400 s; the day of the TDB/TT scales).
pub const DAY_S: f64 = 86_400.0;
/// Days in a Julian year (IAU usage, common practice).
pub const JULIAN_YEAR_DAYS: f64 = 365.25;
/// Speed of light in vacuum, km/s, exact by definition of the metre (SI, 1983).
pub const C_KM_PER_S: f64 = 299_792.458;
/// Speed of light in au/day.
pub const C_AU_PER_DAY: f64 = C_KM_PER_S * DAY_S / AU_KM;
/// TAI - TT in seconds: TT = TAI + 32.184 s exactly (IAU 1991 Resolution A4).
pub const TAI_MINUS_TT_S: f64 = -32.184;
/// Julian date of the J2000.0 epoch, 2000-01-01T12:00:00 (TT or TDB).
pub const J2000_JD: f64 = 2_451_545.0;

/// Mean obliquity of the ecliptic at J2000.0, IAU 2006 precession
/// (Hilton et al. 2006, Celest. Mech. Dyn. Astron. 94, 351): 84381.406 arcsec.
pub const OBLIQUITY_J2000_ARCSEC: f64 = 84_381.406;

/// WGS84 equatorial radius of the Earth, metres (NIMA TR8350.2, 3rd ed.).
pub const EARTH_EQUATORIAL_RADIUS_M: f64 = 6_378_137.0;
/// WGS84 flattening of the Earth (NIMA TR8350.2, 3rd ed.).
pub const EARTH_FLATTENING: f64 = 1.0 / 298.257_223_563;

/// Converts a GM in km^3/s^2 to au^3/day^2.
pub const fn gm_au3_per_day2_from_km3_per_s2(gm_km3_per_s2: f64) -> f64 {
    gm_km3_per_s2 * DAY_S * DAY_S / (AU_KM * AU_KM * AU_KM)
}

// Gravitational parameters of the JPL DE440 ephemeris, km^3/s^2
// (Park, Folkner, Williams & Boggs 2021, AJ 161, 105, table of constants).
// These values were written down from memory of that table; the Sun's value is
// checked in a test against the copy that skyfield (PyPI) carries in
// skyfield/constants.py. A planet "system" value includes its satellites, which
// is what a distant body feels from a planet's barycentre.

/// GM of the Sun, km^3/s^2 (DE440).
pub const GM_SUN_KM3_PER_S2: f64 = 132_712_440_041.279_42;
/// GM of Mercury, km^3/s^2 (DE440).
pub const GM_MERCURY_KM3_PER_S2: f64 = 22_031.868_551;
/// GM of Venus, km^3/s^2 (DE440).
pub const GM_VENUS_KM3_PER_S2: f64 = 324_858.592;
/// GM of the Earth alone, km^3/s^2 (DE440).
pub const GM_EARTH_KM3_PER_S2: f64 = 398_600.435_507;
/// GM of the Moon, km^3/s^2 (DE440).
pub const GM_MOON_KM3_PER_S2: f64 = 4_902.800_118;
/// GM of the Mars system, km^3/s^2 (DE440).
pub const GM_MARS_SYSTEM_KM3_PER_S2: f64 = 42_828.375_816;
/// GM of the Jupiter system, km^3/s^2 (DE440).
pub const GM_JUPITER_SYSTEM_KM3_PER_S2: f64 = 126_712_764.1;
/// GM of the Saturn system, km^3/s^2 (DE440).
pub const GM_SATURN_SYSTEM_KM3_PER_S2: f64 = 37_940_584.841_8;
/// GM of the Uranus system, km^3/s^2 (DE440).
pub const GM_URANUS_SYSTEM_KM3_PER_S2: f64 = 5_794_556.4;
/// GM of the Neptune system, km^3/s^2 (DE440).
pub const GM_NEPTUNE_SYSTEM_KM3_PER_S2: f64 = 6_836_527.100_58;
/// GM of the Pluto system, km^3/s^2 (DE440).
pub const GM_PLUTO_SYSTEM_KM3_PER_S2: f64 = 975.5;

/// GM of the Sun in au^3/day^2.
pub const GM_SUN_AU3_PER_DAY2: f64 = gm_au3_per_day2_from_km3_per_s2(GM_SUN_KM3_PER_S2);

/// Mass of the Earth in solar masses (ratio of DE440 GMs).
pub const EARTH_MASS_SOLAR: f64 = GM_EARTH_KM3_PER_S2 / GM_SUN_KM3_PER_S2;

/// GM of one Earth mass in au^3/day^2: the unit in which perturber and
/// tracked-body masses are given (Earth masses) turned into the dynamics'
/// units. Perturber GMs are this times the mass in Earth masses everywhere.
pub const GM_EARTH_MASS_AU3_PER_DAY2: f64 = EARTH_MASS_SOLAR * GM_SUN_AU3_PER_DAY2;

/// Radians per degree.
pub const RAD_PER_DEG: f64 = std::f64::consts::PI / 180.0;
/// Radians per arcsecond.
pub const RAD_PER_ARCSEC: f64 = RAD_PER_DEG / 3600.0;
/// Radians per milliarcsecond.
pub const RAD_PER_MAS: f64 = RAD_PER_ARCSEC / 1000.0;

/// Wraps an angle into [0, 2 pi).
pub fn wrap_two_pi(angle_rad: f64) -> f64 {
    let w = angle_rad.rem_euclid(std::f64::consts::TAU);
    // rem_euclid can return TAU itself for tiny negative inputs.
    if w >= std::f64::consts::TAU { 0.0 } else { w }
}

/// Wraps an angle into [-pi, pi).
pub fn wrap_pi(angle_rad: f64) -> f64 {
    // Angles already in range are returned untouched: shifting by pi and back
    // would round away the low digits of tiny angles.
    if (-std::f64::consts::PI..std::f64::consts::PI).contains(&angle_rad) {
        return angle_rad;
    }
    let w = wrap_two_pi(angle_rad + std::f64::consts::PI) - std::f64::consts::PI;
    if w >= std::f64::consts::PI { -std::f64::consts::PI } else { w }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gm_sun_matches_skyfield_constant() {
        // skyfield (PyPI) 1.55, skyfield/constants.py: GM_SUN_DE440_km3_s2.
        let skyfield: f64 = "132712440041.279419".parse().unwrap();
        assert!((GM_SUN_KM3_PER_S2 - skyfield).abs() < 1e-3);
    }

    #[test]
    fn gm_sun_in_internal_units_is_near_gaussian_constant_squared() {
        // The IAU 1976 Gaussian gravitational constant k = 0.01720209895 defined
        // the old au so that GM_sun = k^2 au^3/day^2; with the 2012 fixed au the
        // two agree to about 1e-9 relative (common practice).
        let k2 = 0.017_202_098_95_f64.powi(2);
        assert!(((GM_SUN_AU3_PER_DAY2 - k2) / k2).abs() < 1e-8);
    }

    #[test]
    fn low_earth_orbit_speed_is_about_7_8_km_per_s() {
        // Common practice: circular speed in low Earth orbit is about 7.8 km/s
        // (about 17,500 mph), e.g. at 300 km altitude.
        let r_km = EARTH_EQUATORIAL_RADIUS_M / 1000.0 + 300.0;
        let v = (GM_EARTH_KM3_PER_S2 / r_km).sqrt();
        assert!((v - 7.73).abs() < 0.1, "{v}");
        let mph = v * 3600.0 / 1.609_344;
        assert!((mph - 17_500.0).abs() < 500.0, "{mph}");
    }

    #[test]
    fn wrapping_stays_in_range() {
        for x in [-1e-18, -7.0, 0.0, 3.2, 100.0, -std::f64::consts::PI] {
            let w = wrap_two_pi(x);
            assert!((0.0..std::f64::consts::TAU).contains(&w));
            let p = wrap_pi(x);
            assert!((-std::f64::consts::PI..std::f64::consts::PI).contains(&p));
        }
    }
}
