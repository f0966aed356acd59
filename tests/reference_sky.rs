//! Galactic coordinates and solar elongation against skyfield (PyPI) with
//! DE421 (PyPI skyfield-data); fixtures made by tests/data/sky/gen.py.

mod common;

use common::{compare, num, read_rows};
use latens::ephemeris::{Body, Ephemeris, Vsop87};
use latens::frames::angular_separation;
use latens::skymap::observe::galactic_lon_lat_deg;
use latens::vec3::Vec3;

fn unit(ra_deg: f64, dec_deg: f64) -> Vec3 {
    let (a, d) = (ra_deg.to_radians(), dec_deg.to_radians());
    Vec3::new(d.cos() * a.cos(), d.cos() * a.sin(), d.sin())
}

#[test]
fn galactic_coordinates_match_skyfield() {
    for row in read_rows("sky/galactic.csv") {
        let (l, b) = galactic_lon_lat_deg(unit(num(&row, "ra_deg"), num(&row, "dec_deg")));
        // 1e-5 deg (36 mas): skyfield's galactic frame differs from the
        // Hipparcos matrix by a few mas (measured: 9 mas at most), far
        // below what a search field cares about.
        compare("galactic latitude", b, num(&row, "b_deg"), 1e-5, "deg");
        let dl = ((l - num(&row, "l_deg") + 540.0).rem_euclid(360.0) - 180.0) * b.to_radians().cos();
        compare("galactic longitude x cos b", dl, 0.0, 1e-5, "deg");
    }
}

#[test]
fn solar_elongation_matches_skyfield() {
    // Latens takes the Sun's direction as minus the Earth's heliocentric
    // position (VSOP87A), without light time or aberration: up to about 30"
    // from skyfield's astrometric Sun; 0.01 deg is ample for planning.
    let vsop = Vsop87::new();
    for row in read_rows("sky/elongation.csv") {
        let t = num(&row, "jd_tdb") - 2_451_545.0;
        let earth = vsop.heliocentric_position_au(Body::Earth, t).unwrap();
        let e = angular_separation(unit(num(&row, "ra_deg"), num(&row, "dec_deg")), -earth).to_degrees();
        compare("solar elongation", e, num(&row, "elongation_deg"), 0.01, "deg");
    }
}
