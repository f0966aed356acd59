//! What a planner needs beyond the position: galactic latitude, brightness,
//! and the geometry of observing.

use crate::vec3::Vec3;

/// Rotation from ICRS to galactic coordinates (rows: the galactic axes in
/// ICRS), as defined for the Hipparcos catalogue (ESA 1997, vol. 1, sec.
/// 1.5.3; the values recalled from memory and checked against skyfield's
/// galactic frame in `tests/reference_sky.rs`).
const ICRS_TO_GALACTIC: [[f64; 3]; 3] = [
    [-0.054_875_560_416_215_4, -0.873_437_090_234_885, -0.483_835_015_548_713_2],
    [0.494_109_427_875_583_7, -0.444_829_629_960_011_2, 0.746_982_244_497_219],
    [-0.867_666_149_019_004_7, -0.198_076_373_431_201_5, 0.455_983_776_175_066_9],
];

/// Galactic longitude and latitude (degrees) of an ICRS unit vector.
pub fn galactic_lon_lat_deg(d: Vec3) -> (f64, f64) {
    let m = ICRS_TO_GALACTIC;
    let g = [0, 1, 2].map(|i| m[i][0] * d.x + m[i][1] * d.y + m[i][2] * d.z);
    let lon = g[1].atan2(g[0]).to_degrees().rem_euclid(360.0);
    (lon, g[2].clamp(-1.0, 1.0).asin().to_degrees())
}

/// The ICRS unit vector of a galactic direction (degrees).
pub fn icrs_from_galactic_deg(lon: f64, lat: f64) -> Vec3 {
    let (l, b) = (lon.to_radians(), lat.to_radians());
    let g = [b.cos() * l.cos(), b.cos() * l.sin(), b.sin()];
    let m = ICRS_TO_GALACTIC;
    Vec3::new(
        m[0][0] * g[0] + m[1][0] * g[1] + m[2][0] * g[2],
        m[0][1] * g[0] + m[1][1] * g[1] + m[2][1] * g[2],
        m[0][2] * g[0] + m[1][2] * g[1] + m[2][2] * g[2],
    )
}

/// Fields closer than this to the galactic plane are flagged as crowded
/// (degrees; common practice for faint moving-object searches).
pub const CROWDED_LATITUDE_DEG: f64 = 15.0;

/// Bulk densities assumed for turning a mass into a size, g/cm^3: from
/// ice-rich (1.0) to Earth-like (5.5) (common practice).
pub const DENSITY_RANGE_G_CM3: (f64, f64) = (1.0, 5.5);
/// Geometric albedos assumed: from dark, red outer-solar-system surfaces
/// (0.1) to ice giants' and fresh ice (0.5) (common practice).
pub const ALBEDO_RANGE: (f64, f64) = (0.1, 0.5);

/// Diameter (km) of a sphere of `mass_earth` Earth masses and density
/// `g_cm3`.
pub fn diameter_km(mass_earth: f64, g_cm3: f64) -> f64 {
    const EARTH_MASS_KG: f64 = 5.972_2e24; // IAU 2015 nominal GM_E / G (common practice)
    let volume_m3 = mass_earth * EARTH_MASS_KG / (g_cm3 * 1000.0);
    2.0 * (3.0 * volume_m3 / (4.0 * std::f64::consts::PI)).cbrt() / 1000.0
}

/// Absolute magnitude H of a body of diameter `d_km` and geometric albedo
/// `p`: D = 1329 km / sqrt(p) 10^(-H/5) (the standard relation, e.g.
/// Pravec & Harris 2007, Icarus 190, 250, eq. 2).
pub fn absolute_magnitude(d_km: f64, albedo: f64) -> f64 {
    5.0 * (1329.0 / (d_km * albedo.sqrt())).log10()
}

/// Apparent V magnitude at heliocentric distance `r_au` and geocentric
/// distance `delta_au`, V = H + 5 log10(r delta), the phase term left out (at
/// the phase angles of bodies beyond 20 au, below 3 deg, it adds about 0.1
/// mag or less).
pub fn apparent_magnitude(h: f64, r_au: f64, delta_au: f64) -> f64 {
    h + 5.0 * (r_au * delta_au).log10()
}

/// The brightest and faintest V of a body of `mass_earth` at the given
/// distances, over the density and albedo ranges.
pub fn magnitude_range(mass_earth: f64, r_au: f64, delta_au: f64) -> (f64, f64) {
    let bright = absolute_magnitude(diameter_km(mass_earth, DENSITY_RANGE_G_CM3.0), ALBEDO_RANGE.1);
    let faint = absolute_magnitude(diameter_km(mass_earth, DENSITY_RANGE_G_CM3.1), ALBEDO_RANGE.0);
    (apparent_magnitude(bright, r_au, delta_au), apparent_magnitude(faint, r_au, delta_au))
}

/// Sky motion between two unit vectors `hours` apart: rate (arcsec per hour)
/// and position angle (degrees east of north).
pub fn motion(a: Vec3, b: Vec3, hours: f64) -> (f64, f64) {
    let rate = crate::frames::angular_separation(a, b).to_degrees() * 3600.0 / hours;
    // Local east and north at a.
    let north_pole = Vec3::new(0.0, 0.0, 1.0);
    let east = north_pole.cross(a).unit();
    let north = a.cross(east);
    let d = b - a;
    let pa = d.dot(east).atan2(d.dot(north)).to_degrees().rem_euclid(360.0);
    (rate, pa)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn galactic_axes_are_orthonormal_and_invert() {
        let m = ICRS_TO_GALACTIC;
        for i in 0..3 {
            for j in 0..3 {
                let d: f64 = (0..3).map(|k| m[i][k] * m[j][k]).sum();
                assert!((d - if i == j { 1.0 } else { 0.0 }).abs() < 1e-12);
            }
        }
        let v = icrs_from_galactic_deg(123.0, -45.0);
        let (l, b) = galactic_lon_lat_deg(v);
        assert!((l - 123.0).abs() < 1e-9 && (b + 45.0).abs() < 1e-9);
    }

    #[test]
    fn brightness_relation_worked_values() {
        // The relation's definition: a 1329 km body of albedo 1 has H = 0;
        // a body of albedo 0.25 and H = 15 is 2.658 km across (Pravec &
        // Harris 2007, eq. 2, evaluated by hand).
        assert!(absolute_magnitude(1329.0, 1.0).abs() < 1e-12);
        assert!((absolute_magnitude(2.658, 0.25) - 15.0).abs() < 1e-3);
        // The Earth's mass at its own mean density (5.51 g/cm^3) gives the
        // Earth's mean diameter, 12 742 km (IAU nominal radius 6371 km).
        assert!((diameter_km(1.0, 5.513) - 12_742.0).abs() < 15.0);
    }

    #[test]
    fn motion_along_ra_points_east() {
        let a = Vec3::new(1.0, 0.0, 0.0);
        let b = Vec3::new(1.0, 1e-6, 0.0).unit();
        let (rate, pa) = motion(a, b, 1.0);
        assert!((rate - 1e-6f64.atan().to_degrees() * 3600.0).abs() < 1e-9);
        assert!((pa - 90.0).abs() < 1e-6);
    }
}
