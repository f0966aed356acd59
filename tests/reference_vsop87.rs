//! The embedded VSOP87A ephemeris against JPL DE421 over 1900-2050.
//! Fixture tests/data/de421/helio_1900_2050.csv: DE421 (PyPI skyfield-data)
//! heliocentric ICRF states read with jplephem (PyPI) by tests/data/de421/gen.py.
//! The bounds are the measured maxima (table in docs/ephemerides.md) rounded
//! up by about 20%, so a regression in the rotation or the series shows.

mod common;
use common::*;

use latens::ephemeris::{Body, Ephemeris, Vsop87};
use latens::frames::angular_separation;
use latens::units::J2000_JD;
use latens::vec3::Vec3;

struct Bound {
    body: Body,
    naif: i32,
    max_angle_arcsec: f64,
    max_distance_km: f64,
    max_speed_mm_s: f64,
}

#[test]
fn vsop87_matches_de421_1900_2050() {
    let bounds = [
        Bound { body: Body::Mercury, naif: 199, max_angle_arcsec: 0.05, max_distance_km: 12.0, max_speed_mm_s: 14.0 },
        Bound { body: Body::Venus, naif: 299, max_angle_arcsec: 0.03, max_distance_km: 16.0, max_speed_mm_s: 6.0 },
        Bound { body: Body::Earth, naif: 399, max_angle_arcsec: 0.03, max_distance_km: 20.0, max_speed_mm_s: 9.0 },
        Bound { body: Body::Mars, naif: 499, max_angle_arcsec: 0.052, max_distance_km: 61.0, max_speed_mm_s: 8.0 },
        Bound { body: Body::Jupiter, naif: 5, max_angle_arcsec: 0.37, max_distance_km: 1330.0, max_speed_mm_s: 26.0 },
        Bound { body: Body::Saturn, naif: 6, max_angle_arcsec: 0.32, max_distance_km: 2300.0, max_speed_mm_s: 38.0 },
        Bound { body: Body::Uranus, naif: 7, max_angle_arcsec: 1.9, max_distance_km: 26000.0, max_speed_mm_s: 136.0 },
        Bound { body: Body::Neptune, naif: 8, max_angle_arcsec: 2.6, max_distance_km: 57500.0, max_speed_mm_s: 133.0 },
    ];
    let rows = read_rows("de421/helio_1900_2050.csv");
    let vsop = Vsop87::new();
    let mut failures = Vec::new();
    eprintln!("body      max angle (\")  max distance (km)  max speed error (mm/s)");
    for b in &bounds {
        let (mut angle, mut dist, mut speed): (f64, f64, f64) = (0.0, 0.0, 0.0);
        let mut n = 0;
        for row in rows.iter().filter(|r| num(r, "naif") as i32 == b.naif) {
            let t = num(row, "jd_tdb") - J2000_JD;
            let want_p = Vec3::new(num(row, "x_au"), num(row, "y_au"), num(row, "z_au"));
            let want_v = Vec3::new(num(row, "vx_au_d"), num(row, "vy_au_d"), num(row, "vz_au_d"));
            let got = vsop.heliocentric_state(b.body, t).unwrap();
            angle = angle.max(angular_separation(got.position_au, want_p) / ARCSEC_RAD);
            dist = dist.max((got.position_au - want_p).norm() * 149_597_870.7);
            speed = speed.max((got.velocity_au_per_day - want_v).norm() * 149_597_870.7e6 / 86400.0);
            n += 1;
        }
        assert_eq!(n, 301, "{}", b.body);
        eprintln!("{:<9} {angle:>13.4}  {dist:>17.1}  {speed:>22.1}", b.body.name());
        if angle > b.max_angle_arcsec || dist > b.max_distance_km || speed > b.max_speed_mm_s {
            failures.push(format!("{}: {angle:.4}\" {dist:.1} km {speed:.1} mm/s", b.body));
        }
    }
    assert!(failures.is_empty(), "beyond the recorded bounds: {failures:?}");
}
