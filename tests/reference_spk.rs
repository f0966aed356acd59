//! The SPK reader against jplephem (PyPI) on an excerpt of JPL DE421 (from the
//! PyPI package skyfield-data); fixtures made by tests/data/de421/gen.py.

mod common;
use common::*;

use latens::ephemeris::{Body, Ephemeris, EphemerisError, SpkFile};

fn excerpt() -> SpkFile {
    SpkFile::open(&data_path("de421/excerpt.bsp")).unwrap()
}

#[test]
fn every_segment_matches_jplephem_to_a_millimetre() {
    let spk = excerpt();
    let rows = read_rows("de421/spk_states.csv");
    assert!(rows.len() >= 200 * 15);
    let (mut worst_pos_m, mut worst_vel_mm_s): (f64, f64) = (0.0, 0.0);
    for row in &rows {
        let et = num(row, "et_s");
        let target = num(row, "target") as i32;
        let center = num(row, "center") as i32;
        // Evaluate the single segment: chain both ends to the barycentre.
        let (p, v) = spk.state_km(target, center, et).unwrap();
        let dp =
            ((p.x - num(row, "x_km")).powi(2) + (p.y - num(row, "y_km")).powi(2) + (p.z - num(row, "z_km")).powi(2))
                .sqrt();
        let dv = ((v.x - num(row, "vx_km_s")).powi(2)
            + (v.y - num(row, "vy_km_s")).powi(2)
            + (v.z - num(row, "vz_km_s")).powi(2))
        .sqrt();
        worst_pos_m = worst_pos_m.max(dp * 1000.0);
        worst_vel_mm_s = worst_vel_mm_s.max(dv * 1e6);
    }
    eprintln!("SPK vs jplephem: max position error {worst_pos_m:.3e} m, velocity {worst_vel_mm_s:.3e} mm/s");
    // Required: 1 m. Both evaluate the same Chebyshev series; the measured 7 mm
    // is the float rounding of positions of 5e9 km (Pluto), 1.4e-15 relative.
    assert!(worst_pos_m <= 1e-2, "position off by {worst_pos_m} m");
    assert!(worst_vel_mm_s <= 1e-3, "velocity off by {worst_vel_mm_s} mm/s");
}

#[test]
fn type_3_segment_is_read() {
    let spk = excerpt();
    assert!(spk.segments().iter().any(|s| s.data_type == 3 && s.target == 90005));
}

#[test]
fn heliocentric_earth_chains_emb_and_sun() {
    // Earth - Sun = (EMB - SSB) + (Earth - EMB) - (Sun - SSB), from the fixture rows.
    let spk = excerpt();
    let rows = read_rows("de421/spk_states.csv");
    let et = num(&rows[5], "et_s");
    let pick = |t: i32, c: i32| {
        let r = rows
            .iter()
            .find(|r| num(r, "et_s") == et && num(r, "target") as i32 == t && num(r, "center") as i32 == c)
            .unwrap();
        [num(r, "x_km"), num(r, "y_km"), num(r, "z_km")]
    };
    let (emb, earth, sun) = (pick(3, 0), pick(399, 3), pick(10, 0));
    let s = spk.heliocentric_state(Body::Earth, et / 86400.0).unwrap();
    for k in 0..3 {
        let want_au = (emb[k] + earth[k] - sun[k]) / 149_597_870.7;
        compare("heliocentric Earth", s.position_au.to_array()[k], want_au, METRE_AU, "au");
    }
}

#[test]
fn out_of_coverage_names_body_epoch_and_span() {
    let spk = excerpt();
    let err = spk.heliocentric_state(Body::Jupiter, 20_000.0).unwrap_err();
    assert!(matches!(err, EphemerisError::OutOfRange { .. }));
    let text = err.to_string();
    assert!(
        text.contains("jupiter")
            && text.contains("2054-")
            && text.contains("2000-01-01")
            && text.contains("2025-01-01"),
        "{text}"
    );
    let err = spk.heliocentric_state(Body::Pluto, 0.0);
    assert!(err.is_ok(), "Pluto barycentre is in DE421");
}

#[test]
fn not_an_spk_file_is_a_clear_error() {
    let err = SpkFile::open(&data_path("time/utc_tdb.csv")).unwrap_err().to_string();
    assert!(err.contains("utc_tdb.csv") && err.contains("not an SPK file"), "{err}");
    let err = SpkFile::open(&data_path("de421/missing.bsp")).unwrap_err().to_string();
    assert!(err.contains("missing.bsp"), "{err}");
}
