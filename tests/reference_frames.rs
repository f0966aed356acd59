//! Frames and angles against ERFA (PyPI package pyerfa), fixtures made by
//! tests/data/frames/gen.py.

mod common;
use common::*;

use latens::frames::{
    RaDec, angular_separation_radec, ecliptic_lonlat_from_icrf, rotation_from_icrf_to_ecliptic, vector_from_radec,
};

#[test]
fn icrf_to_ecliptic_matrix_matches_erfa_ecm06() {
    let text = std::fs::read_to_string(data_path("frames/ecliptic_matrix.csv")).unwrap();
    let want: Vec<f64> = text.trim().split(',').map(|s| s.parse().unwrap()).collect();
    let m = rotation_from_icrf_to_ecliptic();
    for i in 0..3 {
        for j in 0..3 {
            // 1e-14 rad is 2 microarcseconds.
            compare(&format!("m[{i}][{j}]"), m.0[i][j], want[3 * i + j], 1e-14, "");
        }
    }
}

#[test]
fn ecliptic_coordinates_match_erfa_eqec06() {
    for row in read_rows("frames/radec_to_ecliptic.csv") {
        let v = vector_from_radec(RaDec { ra_rad: num(&row, "ra"), dec_rad: num(&row, "dec") });
        let got = ecliptic_lonlat_from_icrf(v);
        let dlon = latens::units::wrap_pi(got.lon_rad - num(&row, "lon")) * num(&row, "lat").cos();
        compare("longitude (on the sky)", dlon / MAS_RAD, 0.0, 1e-3, "mas");
        compare("latitude", (got.lat_rad - num(&row, "lat")) / MAS_RAD, 0.0, 1e-3, "mas");
    }
}

#[test]
fn separations_match_erfa_seps_from_microarcseconds_to_antipodes() {
    for row in read_rows("frames/separations.csv") {
        let a = RaDec { ra_rad: num(&row, "ra1"), dec_rad: num(&row, "dec1") };
        let b = RaDec { ra_rad: num(&row, "ra2"), dec_rad: num(&row, "dec2") };
        let want = num(&row, "sep");
        let got = angular_separation_radec(a, b);
        // Relative 1e-9 for tiny separations (ERFA uses the same atan2 form),
        // else 1e-15 rad absolute (0.2 nano-arcseconds).
        let tol = (want * 1e-9).max(1e-15);
        compare("separation", got, want, tol, "rad");
    }
}
