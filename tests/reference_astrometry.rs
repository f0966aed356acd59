//! The observation model and the reference-orbit fit against skyfield (PyPI)
//! and JPL DE421 (PyPI skyfield-data); chi-square tails against scipy.
//! Fixtures made by tests/data/astrometry/gen.py.

mod common;
use common::*;

use latens::astrometry::site_geocentric_au;
use latens::dynamics::ForceModel;
use latens::ephemeris::{Body, SpkFile};
use latens::io::observations::{SiteTable, read_observations};
use latens::reference::{ReferenceSettings, fit_reference_orbit};
use latens::stats::chi_square_survival;
use latens::time::parse_utc_iso;
use latens::units::AU_KM;

#[test]
fn site_positions_match_skyfield_to_a_kilometre() {
    // skyfield includes nutation, polar motion and UT1 - UTC; Latens
    // neglects them (documented: up to about 1 km).
    let sites = SiteTable::read(&data_path("astrometry/sites.csv")).unwrap();
    let site = sites.get("hollow-ridge").unwrap();
    let mut worst: f64 = 0.0;
    for row in read_rows("astrometry/site_gcrs.csv") {
        let e = parse_utc_iso(&row["epoch_utc"]).unwrap();
        let p = site_geocentric_au(site, e) * AU_KM;
        let d =
            ((p.x - num(&row, "x_km")).powi(2) + (p.y - num(&row, "y_km")).powi(2) + (p.z - num(&row, "z_km")).powi(2))
                .sqrt();
        worst = worst.max(d);
    }
    eprintln!("site position vs skyfield: worst {worst:.3} km");
    assert!(worst < 1.0, "{worst} km");
}

#[test]
fn chi_square_tail_matches_scipy() {
    for row in read_rows("astrometry/chi2_sf.csv") {
        let (x, dof, want) = (num(&row, "x"), num(&row, "dof"), num(&row, "sf"));
        let got = chi_square_survival(x, dof);
        compare(&format!("Q({x}, {dof})"), got, want, 1e-9 * want.max(1e-300) + 1e-15, "");
    }
}

fn saturn_model(without: Option<Body>) -> ForceModel {
    // Saturn is the tracked body here, and the tracked body is massless in
    // Latens's equations: its own GM goes into the central term instead
    // (-(mu_sun + mu_saturn) r / r^3, the two-body term of a massive body).
    let others = [
        Body::Mercury,
        Body::Venus,
        Body::EarthMoonBarycenter,
        Body::Mars,
        Body::Jupiter,
        Body::Uranus,
        Body::Neptune,
        Body::Pluto,
    ];
    let known: Vec<Body> = others.into_iter().filter(|b| Some(*b) != without).collect();
    let mut m = ForceModel::with_known(&known);
    m.gm_sun_au3_per_day2 += Body::Saturn.gm_au3_per_day2();
    m
}

#[test]
fn saturn_from_de421_fits_to_the_noise_and_shows_jupiter_when_it_is_left_out() {
    let sites = SiteTable::read(&data_path("astrometry/sites.csv")).unwrap();
    let obs = read_observations(&data_path("astrometry/saturn.csv"), &sites, 3).unwrap();
    let eph = SpkFile::open(&data_path("de421/excerpt.bsp")).unwrap();
    let settings = ReferenceSettings::default();

    let full = fit_reference_orbit(&obs, &sites, &saturn_model(None), &eph, &settings, None).unwrap();
    let per_dof = full.chi2 / full.dof as f64;
    let scatter = (2.0 / full.dof as f64).sqrt();
    eprintln!(
        "Saturn, all planets: chi2/dof = {per_dof:.3} (dof {}), RMS {:.4}\" / {:.4}\", {} rejected, start: {}",
        full.dof, full.rms_ra_arcsec, full.rms_dec_arcsec, full.n_rejected, full.start
    );
    // Within 4 standard deviations of a chi-square per degree of freedom.
    assert!((per_dof - 1.0).abs() < 4.0 * scatter, "chi2/dof {per_dof}");
    assert!(full.n_rejected <= 2);

    let without = fit_reference_orbit(&obs, &sites, &saturn_model(Some(Body::Jupiter)), &eph, &settings, None).unwrap();
    eprintln!(
        "Saturn without Jupiter: chi2/dof = {:.1}, RMS {:.3}\" / {:.3}\", {} rejected",
        without.chi2 / without.dof as f64,
        without.rms_ra_arcsec,
        without.rms_dec_arcsec,
        without.n_rejected
    );
    // Jupiter's pull on Saturn over 23 years cannot be absorbed by Saturn's
    // own orbit: residuals far above the 0.05" noise.
    assert!(without.rms_ra_arcsec.hypot(without.rms_dec_arcsec) > 1.0);
}
