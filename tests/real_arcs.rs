//! `latens infer` on real planetary arcs, through the command line a user
//! runs: places of real planets from JPL ephemerides (DE421 via skyfield;
//! fixtures and their generator in tests/data/realarcs/), one real planet
//! left out of the model, the tracked planet's own GM given by name.
//!
//! Measured (2026-12-02, default grid, seed 1) on every fixture, for the
//! record (docs/validation.md carries the table):
//! - Uranus 1930-2020 at 0.5", Neptune hidden: delta chi2 7.9e5, refined
//!   fit chi2 1042 for 1114 dof, 15.1 +- 1.0 Earth masses (Neptune 17.15),
//!   best place 1.2 deg from Neptune, the truth inside the 90% region.
//! - Neptune 1900-2024 at 0.5", Uranus (inside the tracked orbit) hidden:
//!   delta chi2 4.8e4, 15.9 Earth masses (Uranus 14.5), 2.8 deg off, inside
//!   the 90% region.
//! - Uranus 1690-1845 at 10"-2" (DE405), Neptune hidden: delta chi2 4887,
//!   20.6 +- 3.2 Earth masses, best place 7.9 deg off; the true Neptune
//!   scores only 1.9 above the best in chi-square, but the posterior puts
//!   it outside its 90% region (open: the prior volume along the
//!   mass-distance ridge; not asserted here).
//! - Pluto 1930-2020 at 0.3", Neptune hidden: a weak detection (delta chi2
//!   248) with a 1275 sq deg region holding the truth; no non-gravitational
//!   alternative for a dwarf planet.
//! - Saturn 1950-2020 at 0.3" with every planet known: no detection.

mod common;
use common::*;

use std::path::{Path, PathBuf};
use std::process::Command;

fn infer(obs: &str, extra: &[&str], out: &Path) -> serde_json::Value {
    let o = Command::new(env!("CARGO_BIN_EXE_latens"))
        .args(["infer", "--obs"])
        .arg(data_path(&format!("realarcs/{obs}")))
        .args(extra)
        .args(["--nulls", "371", "--out"])
        .arg(out)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap()).unwrap()
}

fn temp_dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("latens-real-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    d
}

fn unit(ra: f64, dec: f64) -> latens::vec3::Vec3 {
    let (a, d) = (ra.to_radians(), dec.to_radians());
    latens::vec3::Vec3::new(d.cos() * a.cos(), d.cos() * a.sin(), d.sin())
}

/// Neptune's GM in Earth masses (Latens's DE440 constants).
fn neptune_mass_earth() -> f64 {
    latens::ephemeris::Body::Neptune.gm_au3_per_day2()
        / (latens::units::EARTH_MASS_SOLAR * latens::units::GM_SUN_AU3_PER_DAY2)
}

#[test]
fn neptune_from_ninety_years_of_uranus() {
    let truth = read_rows("realarcs/truth.csv").into_iter().find(|r| r["case"] == "uranus_1930_2020").unwrap();
    let dir = temp_dir("uranus");
    let v = infer(
        "uranus_1930_2020.csv",
        &["--known", "jupiter,saturn", "--tracked-mass", "uranus", "--search-epoch", &truth["search_epoch_utc"]],
        &dir,
    );
    assert_eq!(v["detection"]["detected"], true, "{}", v["detection"]);
    assert_eq!(v["tracked"]["kind"], "planet");
    assert_eq!(v["tracked"]["nongrav_prior_au_per_day2"], 0.0);
    // Nothing set aside: against the model with the perturber these data are clean.
    assert_eq!(v["outliers"]["set_aside"].as_array().unwrap().len(), 0, "{}", v["outliers"]);
    // The strong regime: the kernel was recentred on the refined solution,
    // and the refined fit is as good as the noise (chi2 near its dof).
    let stage = &v["nonlinear_stage"];
    let dof = v["null_model"]["dof"].as_f64().unwrap();
    assert!(stage["chi2_at_centre"].as_f64().unwrap() < 1.2 * dof, "{stage}");
    let mass = v["refined_best_fit"]["mass_earth"].as_f64().unwrap();
    assert!((mass / neptune_mass_earth() - 1.0).abs() < 0.2, "mass {mass}");
    // The truth in the 90% region (the MOC the command wrote).
    let d = unit(num(&truth, "ra_deg"), num(&truth, "dec_deg"));
    let moc = std::fs::read_to_string(dir.join("region90.json")).unwrap();
    assert!(latens::skymap::moc_json_contains(&moc, d).unwrap(), "Neptune outside the 90% region");
    // The best place within 2 deg (measured 1.2; the target for arcs with
    // delta chi2 in the thousands is 0.5 deg, not yet reached).
    let b = &v["basins"][0];
    let sep = unit(b["ra_deg"].as_f64().unwrap(), b["dec_deg"].as_f64().unwrap()).dot(d).clamp(-1.0, 1.0).acos();
    assert!(sep.to_degrees() < 2.0, "best basin {:.2} deg from Neptune", sep.to_degrees());
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn saturn_with_every_planet_known_gives_upper_limits_not_a_region() {
    let dir = temp_dir("saturn");
    let v = infer("saturn_1950_2020.csv", &["--known", "jupiter,uranus,neptune", "--tracked-mass", "saturn"], &dir);
    assert_eq!(v["detection"]["detected"], false, "{}", v["detection"]);
    assert!(!dir.join("search_chart.png").exists() && !dir.join("region90.json").exists());
    assert!(v["sky"].is_null());
    let limits = v["upper_limits"].as_array().unwrap();
    assert!(!limits.is_empty());
    // Nothing beats noise alone, and nothing is called decisive.
    assert_eq!(v["explanation"]["best"], "no extra effect (noise alone)", "{}", v["explanation"]);
    // No annual-systematic warning on clean data.
    assert!(!v["warnings"].as_array().unwrap().iter().any(|w| w.as_str().unwrap().contains("one-year")));
    std::fs::remove_dir_all(&dir).unwrap();
}
