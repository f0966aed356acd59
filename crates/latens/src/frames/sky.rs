//! Directions: Cartesian <-> spherical, and the angle between two directions.

use crate::units::wrap_two_pi;
use crate::vec3::Vec3;

/// Right ascension and declination, radians, in the frame of the vector they
/// came from (ICRF unless a name says otherwise). `ra_rad` is in [0, 2 pi).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RaDec {
    pub ra_rad: f64,
    pub dec_rad: f64,
}

/// Ecliptic longitude in [0, 2 pi) and latitude, radians (IAU 2006 ecliptic of J2000).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct EclipticLonLat {
    pub lon_rad: f64,
    pub lat_rad: f64,
}

/// The spherical direction of a Cartesian vector (its length is dropped).
/// `atan2` for both angles keeps full precision near the poles.
pub fn radec_from_vector(v: Vec3) -> RaDec {
    let rho = v.x.hypot(v.y);
    RaDec { ra_rad: wrap_two_pi(v.y.atan2(v.x)), dec_rad: v.z.atan2(rho) }
}

/// The unit vector of a spherical direction.
pub fn vector_from_radec(d: RaDec) -> Vec3 {
    let (sd, cd) = d.dec_rad.sin_cos();
    let (sa, ca) = d.ra_rad.sin_cos();
    Vec3::new(cd * ca, cd * sa, sd)
}

/// The unit vector of a direction given in degrees.
pub fn vector_from_radec_deg(ra_deg: f64, dec_deg: f64) -> Vec3 {
    vector_from_radec(RaDec { ra_rad: ra_deg.to_radians(), dec_rad: dec_deg.to_radians() })
}

/// The angle between two vectors, radians, in [0, pi].
///
/// `atan2(|a x b|, a . b)` is accurate everywhere; `acos(a . b)` loses half its
/// digits near 0 and near pi (a separation of 1 mas would come out as 0 or
/// about 2 mas). Reference: the same formula as SOFA's eraSepp.
pub fn angular_separation(a: Vec3, b: Vec3) -> f64 {
    a.cross(b).norm().atan2(a.dot(b))
}

/// The angle between two spherical directions, radians, in [0, pi].
pub fn angular_separation_radec(a: RaDec, b: RaDec) -> f64 {
    angular_separation(vector_from_radec(a), vector_from_radec(b))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::units::RAD_PER_MAS;

    #[test]
    fn round_trip_direction() {
        for (ra, dec) in [
            (0.0, 0.0),
            (6.0, -1.2),
            (3.0, std::f64::consts::FRAC_PI_2 - 1e-7),
            (1.0, 1e-7 - std::f64::consts::FRAC_PI_2),
        ] {
            let d = radec_from_vector(vector_from_radec(RaDec { ra_rad: ra, dec_rad: dec }));
            assert!((d.ra_rad - ra).abs() < 1e-9 && (d.dec_rad - dec).abs() < 1e-15);
        }
    }

    #[test]
    fn tiny_separation_is_not_lost() {
        let a = RaDec { ra_rad: 1.0, dec_rad: 0.5 };
        let b = RaDec { ra_rad: 1.0, dec_rad: 0.5 + RAD_PER_MAS };
        let s = angular_separation_radec(a, b);
        assert!((s / RAD_PER_MAS - 1.0).abs() < 1e-6, "{}", s / RAD_PER_MAS);
    }
}
