//! Reference frames and directions on the sky.
//!
//! Two frames matter to Latens: the ICRF (equatorial; all dynamics and
//! astrometry happen here) and the mean ecliptic and equinox of J2000 (IAU 2006),
//! in which orbital elements are shown to people. Both are inertial, so the
//! rotation between them is one constant matrix.
//!
//! The ICRF -> ecliptic matrix at J2000.0 is, with the IAU 2006
//! Fukushima-Williams precession angles at their J2000.0 values,
//! `R3(-psi_bar) R1(phi_bar) R3(gamma_bar)` (the product `R1(eps_A) * fw2m(...)`
//! of SOFA's eraEcm06 collapses to this at J2000.0). That matrix includes the
//! frame bias between the ICRS and the dynamical J2000 equator. The constants
//! are those of Hilton et al. (2006, Celest. Mech. Dyn. Astron. 94, 351) as
//! coded in SOFA's eraPfw06 (recalled from memory, checked against ERFA's
//! eraEcm06 in `tests/reference_frames.rs` to 1e-14).

mod sky;

pub use sky::{
    EclipticLonLat, RaDec, angular_separation, angular_separation_radec, radec_from_vector, vector_from_radec,
    vector_from_radec_deg,
};

use std::sync::LazyLock;

use crate::units::RAD_PER_ARCSEC;
use crate::vec3::Vec3;

/// A 3x3 rotation matrix, row-major, acting on column vectors.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Matrix3(pub [[f64; 3]; 3]);

impl Matrix3 {
    pub const IDENTITY: Matrix3 = Matrix3([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]]);

    /// Rotation of the coordinate axes about x by `angle_rad` (SOFA's R1).
    pub fn rotation_about_x(angle_rad: f64) -> Matrix3 {
        let (s, c) = angle_rad.sin_cos();
        Matrix3([[1.0, 0.0, 0.0], [0.0, c, s], [0.0, -s, c]])
    }

    /// Rotation of the coordinate axes about y by `angle_rad` (SOFA's R2).
    pub fn rotation_about_y(angle_rad: f64) -> Matrix3 {
        let (s, c) = angle_rad.sin_cos();
        Matrix3([[c, 0.0, -s], [0.0, 1.0, 0.0], [s, 0.0, c]])
    }

    /// Rotation of the coordinate axes about z by `angle_rad` (SOFA's R3).
    pub fn rotation_about_z(angle_rad: f64) -> Matrix3 {
        let (s, c) = angle_rad.sin_cos();
        Matrix3([[c, s, 0.0], [-s, c, 0.0], [0.0, 0.0, 1.0]])
    }

    pub fn transpose(&self) -> Matrix3 {
        let m = &self.0;
        Matrix3([[m[0][0], m[1][0], m[2][0]], [m[0][1], m[1][1], m[2][1]], [m[0][2], m[1][2], m[2][2]]])
    }

    /// The product `self * other` (apply `other` first).
    pub fn then_after(&self, other: &Matrix3) -> Matrix3 {
        let mut out = [[0.0; 3]; 3];
        for (i, row) in out.iter_mut().enumerate() {
            for (j, cell) in row.iter_mut().enumerate() {
                *cell = (0..3).map(|k| self.0[i][k] * other.0[k][j]).sum();
            }
        }
        Matrix3(out)
    }

    pub fn apply(&self, v: Vec3) -> Vec3 {
        let m = &self.0;
        Vec3::new(
            m[0][0] * v.x + m[0][1] * v.y + m[0][2] * v.z,
            m[1][0] * v.x + m[1][1] * v.y + m[1][2] * v.z,
            m[2][0] * v.x + m[2][1] * v.y + m[2][2] * v.z,
        )
    }
}

/// IAU 2006 Fukushima-Williams angle gamma_bar at J2000.0, arcsec.
const FW_GAMMA_BAR_J2000_ARCSEC: f64 = -0.052_928;
/// IAU 2006 Fukushima-Williams angle phi_bar at J2000.0, arcsec.
const FW_PHI_BAR_J2000_ARCSEC: f64 = 84_381.412_819;
/// IAU 2006 Fukushima-Williams angle psi_bar at J2000.0, arcsec.
const FW_PSI_BAR_J2000_ARCSEC: f64 = -0.041_775;

static ECLIPTIC_FROM_ICRF: LazyLock<Matrix3> = LazyLock::new(|| {
    Matrix3::rotation_about_z(-FW_PSI_BAR_J2000_ARCSEC * RAD_PER_ARCSEC)
        .then_after(&Matrix3::rotation_about_x(FW_PHI_BAR_J2000_ARCSEC * RAD_PER_ARCSEC))
        .then_after(&Matrix3::rotation_about_z(FW_GAMMA_BAR_J2000_ARCSEC * RAD_PER_ARCSEC))
});
static ICRF_FROM_ECLIPTIC: LazyLock<Matrix3> = LazyLock::new(|| ECLIPTIC_FROM_ICRF.transpose());

/// The rotation matrix from ICRF axes to the IAU 2006 ecliptic and equinox of J2000.
pub fn rotation_from_icrf_to_ecliptic() -> Matrix3 {
    *ECLIPTIC_FROM_ICRF
}

/// Rotates a vector from ICRF axes to ecliptic-J2000 axes.
pub fn ecliptic_from_icrf(v_icrf: Vec3) -> Vec3 {
    ECLIPTIC_FROM_ICRF.apply(v_icrf)
}

/// Rotates a vector from ecliptic-J2000 axes to ICRF axes.
pub fn icrf_from_ecliptic(v_ecliptic: Vec3) -> Vec3 {
    ICRF_FROM_ECLIPTIC.apply(v_ecliptic)
}

/// Ecliptic longitude and latitude (IAU 2006 ecliptic of J2000) of an ICRF direction.
pub fn ecliptic_lonlat_from_icrf(v_icrf: Vec3) -> EclipticLonLat {
    let d = radec_from_vector(ecliptic_from_icrf(v_icrf));
    EclipticLonLat { lon_rad: d.ra_rad, lat_rad: d.dec_rad }
}

/// The ICRF unit vector of an ecliptic longitude and latitude (IAU 2006, J2000).
pub fn icrf_from_ecliptic_lonlat(lonlat: EclipticLonLat) -> Vec3 {
    icrf_from_ecliptic(vector_from_radec(RaDec { ra_rad: lonlat.lon_rad, dec_rad: lonlat.lat_rad }))
}

/// Tangent-plane (gnomonic) coordinates, degrees, of `d` about `c`: x
/// towards increasing RA (east, drawn to the left), y towards north.
pub fn tangent(c: Vec3, d: Vec3) -> Option<(f64, f64)> {
    let cosd = c.dot(d);
    if cosd <= 1e-6 {
        return None;
    }
    let pole = Vec3::new(0.0, 0.0, 1.0);
    let east = pole.cross(c);
    let east = if east.norm() > 1e-12 { east.unit() } else { Vec3::new(0.0, 1.0, 0.0) };
    let north = c.cross(east);
    Some(((d.dot(east) / cosd).atan().to_degrees(), (d.dot(north) / cosd).atan().to_degrees()))
}

/// The direction at tangent-plane coordinates (degrees) about `c`.
pub fn from_tangent(c: Vec3, x: f64, y: f64) -> Vec3 {
    let pole = Vec3::new(0.0, 0.0, 1.0);
    let east = pole.cross(c);
    let east = if east.norm() > 1e-12 { east.unit() } else { Vec3::new(0.0, 1.0, 0.0) };
    let north = c.cross(east);
    (c + east * x.to_radians().tan() + north * y.to_radians().tan()).unit()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rotation_is_orthonormal() {
        let m = rotation_from_icrf_to_ecliptic();
        let p = m.then_after(&m.transpose());
        for i in 0..3 {
            for j in 0..3 {
                let want = if i == j { 1.0 } else { 0.0 };
                assert!((p.0[i][j] - want).abs() < 1e-15);
            }
        }
    }

    #[test]
    fn ecliptic_pole_is_at_the_obliquity_from_the_equatorial_pole() {
        let pole = icrf_from_ecliptic(Vec3::new(0.0, 0.0, 1.0));
        let tilt = pole.z.acos() / RAD_PER_ARCSEC;
        // IAU 2006 obliquity 84381.406" plus at most a few tens of mas of frame bias.
        assert!((tilt - crate::units::OBLIQUITY_J2000_ARCSEC).abs() < 0.05, "{tilt}");
    }

    #[test]
    fn round_trip_between_frames() {
        let v = Vec3::new(0.3, -7.0, 2.2);
        let back = icrf_from_ecliptic(ecliptic_from_icrf(v));
        assert!((back - v).norm() < 1e-14);
    }
}
