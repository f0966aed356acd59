//! The sensitivity map: the tidal slope at large distance, and shards that
//! merge into exactly the unsharded map.

use std::path::PathBuf;
use std::process::Command;

use latens::dynamics::kepler::{Elements, state_from_elements};
use latens::dynamics::{ForceModel, InitialState};
use latens::ephemeris::Vsop87;
use latens::frames::icrf_from_ecliptic;
use latens::io::observations::SiteTable;
use latens::perturber::LinearKernel;
use latens::perturber::sensitivity::{SensitivitySettings, compute_cells, contour};
use latens::reference::{ReferenceSettings, fit_reference_orbit, observing_geometry};
use latens::simulate::{SurveyPlan, simulate_survey};
use latens::units::{GM_SUN_AU3_PER_DAY2, RAD_PER_DEG};

#[test]
fn half_detection_mass_grows_as_distance_cubed_far_out() {
    // Physics (common practice): far beyond the tracked body a perturber acts
    // through its tide, GM / d^3, so the mass detected with 50% probability
    // scales as d^3: slope 3 in log-log.
    let t0 = 8766.0;
    let model = ForceModel::outer_planets_with_inner_folded();
    let mut bodies = latens::astrometry::observer_ephemeris_bodies();
    bodies.extend(model.ephemeris_bodies());
    bodies.sort();
    bodies.dedup();
    let eph = model.tabulate(&Vsop87::new(), &bodies, (t0 - 11.0 * 365.25, t0 + 11.0 * 365.25)).unwrap();
    let el = Elements::from_semi_major_axis(44.0, 0.1, 12.0 * RAD_PER_DEG, 1.4, 2.6, 0.35).unwrap();
    let (r, v) = state_from_elements(GM_SUN_AU3_PER_DAY2, &el).unwrap();
    let init = InitialState {
        t0_tdb_days: t0,
        tracked_position_au: icrf_from_ecliptic(r),
        tracked_velocity_au_per_day: icrf_from_ecliptic(v),
        perturbers: vec![],
    };
    let sites = SiteTable::new();
    let times = (0..1040).map(|k| t0 - 3652.5 + 7.0 * k as f64).collect();
    let plan = SurveyPlan {
        times_tdb_days: times,
        site: "geocenter".into(),
        sigma_arcsec: 0.05,
        add_noise: true,
        min_elongation_deg: 90.0,
        seed: 4,
    };
    let obs = simulate_survey(&plan, &init, &model, &eph, &sites).unwrap();
    let fit = fit_reference_orbit(
        &obs,
        &sites,
        &model,
        &eph,
        &ReferenceSettings { epoch_tdb_days: Some(t0), ..Default::default() },
        None,
    )
    .unwrap();
    let geometry = observing_geometry(&obs, &sites, &eph).unwrap();
    let kernel = LinearKernel::build(&fit, &obs, geometry, &model, &eph).unwrap();
    let settings = SensitivitySettings {
        mass_earth: (1.0, 1e6),
        distance_au: (200.0, 800.0),
        n_masses: 60,
        n_distances: 5,
        n_trials: 200,
        max_ecliptic_latitude_deg: None,
        seed: 3,
        min_separation_au: 2.0,
    };
    let cells: Vec<(usize, usize)> = (0..5).flat_map(|d| (0..60).map(move |m| (m, d))).collect();
    let map = compute_cells(&kernel, &settings, 25.0, &cells, &|_| {});
    let c50: Vec<(f64, f64)> =
        contour(&map, 0.5).into_iter().filter_map(|(d, m)| m.map(|m| (d.ln(), m.ln()))).collect();
    assert_eq!(c50.len(), 5, "{c50:?}");
    // Least-squares slope of ln m50 against ln d.
    let n = c50.len() as f64;
    let (mx, my) = (c50.iter().map(|p| p.0).sum::<f64>() / n, c50.iter().map(|p| p.1).sum::<f64>() / n);
    let slope =
        c50.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum::<f64>() / c50.iter().map(|p| (p.0 - mx).powi(2)).sum::<f64>();
    eprintln!("slope of the 50% contour, 200-800 au: {slope:.3}");
    assert!((slope - 3.0).abs() < 0.2, "{slope}");
}

fn latens() -> Command {
    Command::new(env!("CARGO_BIN_EXE_latens"))
}

#[test]
fn four_shards_merge_into_the_unsharded_map() {
    let dir = std::env::temp_dir().join(format!("latens-shards-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    let demo = dir.join("demo");
    assert!(latens().args(["demo", "--out"]).arg(&demo).output().unwrap().status.success());
    let common = |out: &PathBuf, shard: Option<&str>| {
        let mut c = latens();
        c.args(["sensitivity", "--obs"])
            .arg(demo.join("observations.csv"))
            .arg("--sites")
            .arg(demo.join("sites.csv"))
            .args([
                "--grid",
                "6:5",
                "--trials",
                "6",
                "--nulls",
                "40",
                "--directions",
                "24",
                "--distances",
                "4",
                "--seed",
                "5",
                "--out",
            ])
            .arg(out);
        if let Some(s) = shard {
            c.args(["--shard", s]);
        }
        let o = c.output().unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    };
    let whole = dir.join("whole");
    common(&whole, None);
    let parts = dir.join("parts");
    for k in 1..=4 {
        common(&parts, Some(&format!("{k}/4")));
    }
    let merged = dir.join("merged");
    let o = latens().args(["sensitivity", "merge"]).arg(&parts).arg("--out").arg(&merged).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let a = std::fs::read_to_string(whole.join("sensitivity.csv")).unwrap();
    let b = std::fs::read_to_string(merged.join("sensitivity.csv")).unwrap();
    assert_eq!(a, b, "merged shards differ from the unsharded map");
    assert!(merged.join("sensitivity.png").exists());
    // A missing shard is refused.
    std::fs::remove_file(parts.join("sensitivity.part-2-of-4.csv")).unwrap();
    let o = latens().args(["sensitivity", "merge"]).arg(&parts).arg("--out").arg(dir.join("bad")).output().unwrap();
    assert_eq!(o.status.code(), Some(2));
    std::fs::remove_dir_all(&dir).unwrap();
}
