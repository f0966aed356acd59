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

const T0: f64 = 8766.0;

/// The model, a tabulated ephemeris over 2013-2035 and the tracked body's
/// ecliptic state (44 au, e = 0.1, i = 12 deg) shared by the tests below.
fn scenario() -> (ForceModel, latens::ephemeris::Tabulated, (latens::vec3::Vec3, latens::vec3::Vec3)) {
    let model = ForceModel::outer_planets_with_inner_folded();
    let mut bodies = latens::astrometry::observer_ephemeris_bodies();
    bodies.extend(model.ephemeris_bodies());
    bodies.sort();
    bodies.dedup();
    let eph = model.tabulate(&Vsop87::new(), &bodies, (T0 - 11.0 * 365.25, T0 + 11.0 * 365.25)).unwrap();
    let el = Elements::from_semi_major_axis(44.0, 0.1, 12.0 * RAD_PER_DEG, 1.4, 2.6, 0.35).unwrap();
    (model, eph, state_from_elements(GM_SUN_AU3_PER_DAY2, &el).unwrap())
}

/// The kernel of the tracked body observed `n` times every `step_days`
/// over ten years before T0 (0.05" noise, seeded), fitted without a perturber.
fn unperturbed_kernel(n: usize, step_days: f64, seed: u64) -> LinearKernel {
    let (model, eph, (r, v)) = scenario();
    let init = InitialState {
        t0_tdb_days: T0,
        tracked_position_au: icrf_from_ecliptic(r),
        tracked_velocity_au_per_day: icrf_from_ecliptic(v),
        perturbers: vec![],
    };
    let sites = SiteTable::new();
    let plan = SurveyPlan {
        times_tdb_days: (0..n).map(|k| T0 - 3652.5 + step_days * k as f64).collect(),
        site: "geocenter".into(),
        sigma_arcsec: 0.05,
        add_noise: true,
        min_elongation_deg: 90.0,
        seed,
    };
    let obs = simulate_survey(&plan, &init, &model, &eph, &sites).unwrap();
    let settings = ReferenceSettings { epoch_tdb_days: Some(T0), ..Default::default() };
    let fit = fit_reference_orbit(&obs, &sites, &model, &eph, &settings, None).unwrap();
    let geometry = observing_geometry(&obs, &sites, &eph).unwrap();
    LinearKernel::build(&fit, &obs, geometry, &model, &eph).unwrap()
}

#[test]
fn half_detection_mass_grows_as_distance_cubed_far_out() {
    // Physics (common practice): far beyond the tracked body a perturber acts
    // through its tide, GM / d^3, so the mass detected with 50% probability
    // scales as d^3: slope 3 in log-log.
    let kernel = unperturbed_kernel(1040, 7.0, 4);
    let settings = SensitivitySettings {
        mass_earth: (1.0, 1e6),
        distance_au: (200.0, 800.0),
        n_masses: 60,
        n_distances: 5,
        n_trials: 200,
        near_ecliptic_deg: None,
        seed: 3,
        min_separation_au: 2.0,
    };
    let cells: Vec<(usize, usize)> = (0..5).flat_map(|d| (0..60).map(move |m| (m, d))).collect();
    let map = compute_cells(&kernel, &settings, 25.0, &cells, &latens::progress::Quiet);
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

    // Near-ecliptic draws stay within their latitude band.
    let near = SensitivitySettings { near_ecliptic_deg: Some(10.0), n_trials: 50, ..settings };
    let confs = latens::perturber::sensitivity::configurations(&kernel, &near, 2);
    assert_eq!(confs.len(), 50);
    for c in &confs {
        let lat = latens::frames::ecliptic_lonlat_from_icrf(c.position_au).lat_rad.to_degrees();
        assert!(lat.abs() <= 10.0 + 1e-9, "latitude {lat}");
    }
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
                "--sky-map",
                "1",
                "--sky-trials",
                "2",
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
    // The sky map too: every cell of order 1 at each of the 5 distances
    // (most hold their 2 trials), the same merged as whole; the masses
    // empty where the range does not reach them (pandas reads NaN).
    let sky = std::fs::read_to_string(whole.join("sensitivity_sky.csv")).unwrap();
    assert_eq!(sky, std::fs::read_to_string(merged.join("sensitivity_sky.csv")).unwrap());
    assert!(sky.starts_with("distance_au,healpix_order,cell,ra_deg,dec_deg,"), "{}", &sky[..80]);
    assert!((200..=241).contains(&sky.lines().count()), "{} lines", sky.lines().count());
    assert!(sky.lines().all(|l| l.split(',').count() == 10));
    assert!(merged.join("sensitivity_sky.png").exists() && parts.join("sensitivity_sky.part-2-of-4.csv").exists());
    // The CSV holds only its table (header first, no comment lines: pandas,
    // the csv module and spreadsheets read it with default settings); the
    // settings and the threshold are in the JSON beside it.
    assert!(a.starts_with("mass_earth,distance_au,detection_probability,"), "{}", &a[..80.min(a.len())]);
    assert!(a.lines().all(|l| l.split(',').count() == 7));
    let meta = |p: std::path::PathBuf| -> serde_json::Value {
        serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
    };
    let (m_whole, m_merged) = (meta(whole.join("sensitivity.json")), meta(merged.join("sensitivity.json")));
    assert_eq!(m_whole, m_merged);
    assert!(m_whole["threshold_delta_chi2"].as_f64().unwrap() > 0.0);
    let part = meta(parts.join("sensitivity.part-3-of-4.json"));
    assert_eq!(part["shard"], serde_json::json!([3, 4]));
    // Each shard holds a quarter of the threshold search's hypotheses (24
    // directions x 4 distances x 8 orientations x 3 speeds) and its
    // distances' trials; the threshold waits for the merge.
    assert_eq!(part["hypotheses"], serde_json::json!([576, 2304]));
    assert_eq!(part["null_maxima"].as_array().unwrap().len(), 40);
    assert!(part["threshold_delta_chi2"].is_null());
    assert!(merged.join("sensitivity.png").exists());
    // A planned schedule (epochs and sigmas only) with an orbit from fit.json.
    let text = std::fs::read_to_string(demo.join("observations.csv")).unwrap();
    let mut schedule = String::from("epoch_utc,sigma_ra_arcsec,sigma_dec_arcsec,site\n");
    for line in text.lines().filter(|l| !l.starts_with('#')).skip(1).step_by(3) {
        let f: Vec<&str> = line.split(',').collect();
        schedule.push_str(&format!("{},0.03,0.03,{}\n", f[0], f[5]));
    }
    std::fs::write(dir.join("schedule.csv"), schedule).unwrap();
    let planned = |orbit: &std::path::Path| {
        latens()
            .args(["sensitivity", "--obs"])
            .arg(dir.join("schedule.csv"))
            .arg("--orbit")
            .arg(orbit)
            .arg("--sites")
            .arg(demo.join("sites.csv"))
            .args([
                "--grid",
                "4:3",
                "--trials",
                "4",
                "--nulls",
                "30",
                "--directions",
                "24",
                "--distances",
                "3",
                "--out",
            ])
            .arg(dir.join("planned"))
            .output()
            .unwrap()
    };
    let o = planned(&demo.join("residuals/fit.json"));
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let rows = std::fs::read_to_string(dir.join("planned/sensitivity.csv")).unwrap();
    assert_eq!(rows.lines().filter(|l| !l.starts_with('#')).count(), 1 + 12);
    let o = planned(&demo.join("sites.csv"));
    assert_eq!(o.status.code(), Some(2), "a non-JSON orbit file must be refused");
    // A survey planned years after the fit (its orbit's epoch outside the
    // schedule's span): the planets must cover both.
    let mut future = String::from("epoch_utc,sigma_ra_arcsec,sigma_dec_arcsec,site\n");
    for line in text.lines().filter(|l| !l.starts_with('#')).skip(1).step_by(3) {
        let f: Vec<&str> = line.split(',').collect();
        let year: i32 = f[0][..4].parse().unwrap();
        future.push_str(&format!("{}{},0.03,0.03,{}\n", year + 28, &f[0][4..], f[5]));
    }
    std::fs::write(dir.join("schedule.csv"), future).unwrap();
    let o = planned(&demo.join("residuals/fit.json"));
    assert!(o.status.success(), "a schedule after the fit: {}", String::from_utf8_lossy(&o.stderr));
    // A shard made with other settings is refused.
    let side = parts.join("sensitivity.part-4-of-4.json");
    let original = std::fs::read_to_string(&side).unwrap();
    std::fs::write(&side, original.replace("\"trials\": 6", "\"trials\": 7")).unwrap();
    let o = latens().args(["sensitivity", "merge"]).arg(&parts).arg("--out").arg(dir.join("bad")).output().unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("other settings"), "{}", String::from_utf8_lossy(&o.stderr));
    std::fs::write(&side, original).unwrap();
    // A shard's table missing, then the whole shard: both refused, by name.
    let merge_bad = || {
        let o = latens().args(["sensitivity", "merge"]).arg(&parts).arg("--out").arg(dir.join("bad")).output().unwrap();
        assert_eq!(o.status.code(), Some(2));
        assert!(!dir.join("bad").join("sensitivity.csv").exists());
        String::from_utf8_lossy(&o.stderr).to_string()
    };
    std::fs::remove_file(parts.join("sensitivity.part-2-of-4.csv")).unwrap();
    let e = merge_bad();
    assert!(e.contains("sensitivity.part-2-of-4.csv"), "{e}");
    std::fs::remove_file(parts.join("sensitivity.part-2-of-4.json")).unwrap();
    let e = merge_bad();
    assert!(e.contains("1/N to N/N") && e.contains("4/4"), "{e}");
    std::fs::remove_dir_all(&dir).unwrap();
}

/// Injects perturbers drawn exactly as the map draws them into fully
/// simulated data, runs the whole search on each, and compares the number
/// of detections with the map's expectation (Poisson-binomial z-score).
fn injection_recovery(per_cell: usize) -> (f64, f64, usize) {
    use latens::dynamics::Perturber;
    use latens::perturber::search::SearchSettings;
    use latens::perturber::sensitivity::{configurations, detection_probability};
    use latens::units::EARTH_MASS_SOLAR;
    let t0 = T0;
    let (model, eph, (r, v)) = scenario();
    let sites = SiteTable::new();
    let base = InitialState {
        t0_tdb_days: t0,
        tracked_position_au: icrf_from_ecliptic(r),
        tracked_velocity_au_per_day: icrf_from_ecliptic(v),
        perturbers: vec![],
    };
    let plan = |seed: u64| SurveyPlan {
        times_tdb_days: (0..520).map(|k| t0 - 3652.5 + 14.0 * k as f64).collect(),
        site: "geocenter".into(),
        sigma_arcsec: 0.05,
        add_noise: true,
        min_elongation_deg: 90.0,
        seed,
    };
    let search = SearchSettings {
        n_directions: 48,
        n_distances: 6,
        n_orientations: 4,
        n_null: 150,
        ..SearchSettings::default()
    };
    let fap = 0.05;
    let pipeline = |obs: &[latens::io::observations::Observation]| {
        let fit = fit_reference_orbit(
            obs,
            &sites,
            &model,
            &eph,
            &ReferenceSettings { epoch_tdb_days: Some(t0), ..Default::default() },
            None,
        )
        .unwrap();
        let geometry = observing_geometry(obs, &sites, &eph).unwrap();
        LinearKernel::build(&fit, obs, geometry, &model, &eph).unwrap()
    };
    // The map for the base (unperturbed) data, with the search's own threshold.
    let kernel = pipeline(&simulate_survey(&plan(1), &base, &model, &eph, &sites).unwrap());
    let zeros = vec![0.0; kernel.n_residuals()];
    let mut maxima =
        latens::perturber::grid_search(&kernel.with_residuals(&zeros), &search, &latens::progress::Quiet).null_maxima;
    maxima.sort_by(f64::total_cmp);
    let threshold = maxima[((1.0 - fap) * maxima.len() as f64).ceil() as usize - 1];
    let settings = SensitivitySettings {
        mass_earth: (1.0, 1000.0),
        distance_au: (20.0, 80.0),
        n_masses: 25,
        n_distances: 3,
        n_trials: per_cell,
        near_ecliptic_deg: None,
        seed: 8,
        min_separation_au: 2.0,
    };
    let cells: Vec<(usize, usize)> = (0..3).flat_map(|d| (0..25).map(move |m| (m, d))).collect();
    let map = compute_cells(&kernel, &settings, threshold, &cells, &latens::progress::Quiet);
    let gm_earth = EARTH_MASS_SOLAR * GM_SUN_AU3_PER_DAY2;
    let (mut detected, mut expected, mut variance, mut runs) = (0.0, 0.0, 0.0, 0usize);
    for di in 0..3 {
        let confs = configurations(&kernel, &settings, di);
        for level in [0.5, 0.9] {
            let Some((_, Some(mass))) = contour(&map, level).into_iter().nth(di) else { continue };
            for (k, c) in confs.iter().enumerate() {
                let gm = mass * gm_earth;
                let p = detection_probability(c.amplitude_per_gm, gm, threshold);
                let init = InitialState {
                    perturbers: vec![Perturber {
                        gm_au3_per_day2: gm,
                        position_au: c.position_au,
                        velocity_au_per_day: c.velocity_au_per_day,
                    }],
                    ..base.clone()
                };
                let obs = simulate_survey(
                    &plan(100 + (di * 100 + k) as u64 + (level * 10.0) as u64 * 1000),
                    &init,
                    &model,
                    &eph,
                    &sites,
                )
                .unwrap();
                let k2 = pipeline(&obs);
                let found = latens::perturber::grid_search(&k2, &search, &latens::progress::Quiet)
                    .false_alarm_probability()
                    < fap;
                detected += f64::from(u8::from(found));
                expected += p;
                variance += p * (1.0 - p);
                runs += 1;
            }
        }
    }
    (detected, expected, runs).into_z(variance)
}

trait IntoZ {
    fn into_z(self, variance: f64) -> (f64, f64, usize);
}
impl IntoZ for (f64, f64, usize) {
    fn into_z(self, variance: f64) -> (f64, f64, usize) {
        let z = (self.0 - self.1) / variance.max(1e-9).sqrt();
        eprintln!(
            "injection-recovery: {} detections in {} injections, the map expects {:.1} (z = {z:.2})",
            self.0, self.2, self.1
        );
        (z, self.1, self.2)
    }
}

#[test]
fn map_agrees_with_the_full_search_on_injected_perturbers_quick() {
    // 6 cells (the 50% and 90% masses at 20, 40 and 80 au) x 2 injections.
    let (z, _, runs) = injection_recovery(2);
    assert!(runs >= 10);
    // The map counts only the true hypothesis, so the search may do a little
    // better (z > 0); it must not do clearly worse, nor far better.
    assert!((-3.0..3.5).contains(&z), "z = {z}");
}

#[test]
#[ignore = "slow: 6 cells x 12 full-pipeline injections (a few minutes)"]
fn map_agrees_with_the_full_search_on_injected_perturbers() {
    let (z, _, _) = injection_recovery(12);
    assert!((-3.0..3.5).contains(&z), "z = {z}");
}

#[test]
fn the_sky_map_of_a_far_perturber_is_symmetric_through_the_sun() {
    // Physics (common practice): far beyond the tracked body a perturber
    // acts through its tide, G M (3 n (n.r) - r) / d^3 for a perturber in
    // direction n at distance d, the same for n and -n; the next term
    // (octupole), odd in n, is smaller by about r/d. So the signal power a
    // perturber makes, cell by cell of the sky map, must be nearly the same
    // in antipodal cells, the more so the farther out (about 2 r/d in
    // power: ~11% at 800 au and ~3% at 3200 au for this body at 44 au),
    // while it varies strongly from cell to cell (the tide's pattern
    // against the body's orbit).
    use latens::perturber::sensitivity::{SkyPlan, sky_amplitudes};
    let kernel = unperturbed_kernel(520, 14.0, 6);
    let map = SensitivitySettings {
        mass_earth: (1.0, 1e6),
        distance_au: (800.0, 3200.0),
        n_masses: 10,
        n_distances: 2,
        n_trials: 1,
        near_ecliptic_deg: None,
        seed: 9,
        min_separation_au: 2.0,
    };
    let sky = SkyPlan { order: 1, trials_per_cell: 200 };
    let asymmetry = |di: usize| -> (f64, f64) {
        let cells = sky_amplitudes(&kernel, &map, &sky, di);
        assert_eq!(cells.len(), 48, "every cell of order 1 holds trials");
        assert!(cells.iter().all(|c| c.1.len() == 200));
        // The mean squared signal per cell (the noise-free chi-square drop).
        let power: std::collections::HashMap<u64, f64> =
            cells.iter().map(|(c, a)| (*c, a.iter().map(|x| x * x).sum::<f64>() / a.len() as f64)).collect();
        let mut log_ratios: Vec<f64> = power
            .iter()
            .map(|(&c, &p)| {
                let centre = latens::skymap::cell_centre(1, c);
                let (lon, lat) = latens::skymap::lon_lat(centre * -1.0);
                (p / power[&cdshealpix::nested::hash(1, lon, lat)]).ln().abs()
            })
            .collect();
        log_ratios.sort_by(f64::total_cmp);
        let (lo, hi) = power.values().fold((f64::INFINITY, 0.0f64), |(a, b), &p| (a.min(p), b.max(p)));
        (log_ratios[log_ratios.len() / 2], hi / lo)
    };
    let (near, span_near) = asymmetry(0);
    let (far, span) = asymmetry(1);
    eprintln!(
        "sky map: antipodal cells differ by a median {:.1}% in signal power at 800 au and {:.1}% at 3200 au; cells span a factor {span_near:.1} and {span:.1}",
        100.0 * (near.exp() - 1.0),
        100.0 * (far.exp() - 1.0)
    );
    assert!(span > 2.0, "the sky map hardly varies over the sky: {span:.2}");
    assert!(far < 0.08, "antipodal cells differ by {:.1}% in median at 3200 au", 100.0 * (far.exp() - 1.0));
    assert!(far < 0.6 * near, "the asymmetry does not shrink outwards: {near:.3} at 800 au, {far:.3} at 3200 au");
}
