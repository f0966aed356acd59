//! The job through the library's pipeline, as a Rust caller (or a binding)
//! runs it: a study loaded once, typed stages, an observer for progress; and
//! the same study through `latens infer`, which must give the same numbers,
//! because the command line is a view of the library's results. Real data:
//! Uranus 1930-2020 from JPL DE421 (tests/data/realarcs/, made by gen.py),
//! Neptune left out of the model.

mod common;
use common::*;

use std::path::Path;
use std::process::Command;
use std::sync::Mutex;

use latens::dynamics::TrackedBody;
use latens::ephemeris::Vsop87;
use latens::perturber::SearchSettings;
use latens::pipeline::{
    Best, DetectionSettings, EphemerisSource, OrbitSample, PipelineError, PosteriorSettings, SAMPLE_COLUMNS, Study,
    TrackedArc, Verdict, detect, parse_known, posterior, predict, sky_products,
};
use latens::posterior::impostors::{ImpostorPriors, nongrav_prior_for};
use latens::progress::{Observer, Stage};
use latens::time::{parse_epoch, tdb_days_from_j2000};

/// Records what a stage tells its observer.
#[derive(Default)]
struct Record {
    begun: Mutex<Vec<(Stage, u64)>>,
    furthest: Mutex<Vec<u64>>,
    notes: Mutex<Vec<String>>,
}

impl Observer for Record {
    fn begin(&self, stage: Stage, total: u64) {
        self.begun.lock().unwrap().push((stage, total));
        self.furthest.lock().unwrap().push(0);
    }
    fn advance(&self, done: u64) {
        let mut f = self.furthest.lock().unwrap();
        if let Some(last) = f.last_mut() {
            *last = (*last).max(done);
        }
    }
    fn note(&self, text: &str) {
        self.notes.lock().unwrap().push(text.to_string());
    }
}

// Small settings, the same for the library and the command line.
const DIRECTIONS: usize = 96;
const DISTANCES: usize = 6;
const NULLS: usize = 371;
const STEPS: usize = 400;
const WALKERS: usize = 24;
const TEMPERATURES: usize = 4;
const SEED: u64 = 3;

fn uranus_study() -> Study {
    let known = parse_known("jupiter,saturn").unwrap();
    let tracked = TrackedBody::parse("uranus", None).unwrap();
    let arc = TrackedArc::load(&data_path("realarcs/uranus_1930_2020.csv"), None, &known, tracked).unwrap();
    let search = tdb_days_from_j2000(parse_epoch("2020-01-01T00:00:00Z").unwrap());
    Study::new(vec![arc], &EphemerisSource::Builtin, Some(search)).unwrap()
}

fn detection_settings() -> DetectionSettings {
    DetectionSettings {
        search: SearchSettings {
            mass_earth: (0.01, 5000.0),
            distance_au: (5.0, 500.0),
            n_null: NULLS,
            seed: SEED,
            n_directions: DIRECTIONS,
            n_distances: DISTANCES,
            ..SearchSettings::default()
        },
        reject_sigma: Some(10.0),
        start_orbit: None,
    }
}

fn posterior_settings(study: &Study) -> PosteriorSettings {
    PosteriorSettings {
        walkers: WALKERS,
        temperatures: TEMPERATURES,
        steps: STEPS,
        runs: 2,
        seed: SEED,
        max_eccentricity: 0.6,
        alternatives: ImpostorPriors {
            gm_inflation: 1000.0,
            nongrav_au_per_day2: nongrav_prior_for(study.bodies[0].tracked.kind),
            nongrav_from_kind: false,
            offset_arcsec: 0.2,
        },
        sample: true,
        checkpoint: None,
        resume: false,
    }
}

fn cli_infer(out: &Path) -> serde_json::Value {
    let o = Command::new(env!("CARGO_BIN_EXE_latens"))
        .args(["infer", "--obs"])
        .arg(data_path("realarcs/uranus_1930_2020.csv"))
        .args(["--known", "jupiter,saturn", "--tracked-mass", "uranus", "--search-epoch", "2020-01-01T00:00:00Z"])
        .args(["--directions", &DIRECTIONS.to_string(), "--distances", &DISTANCES.to_string()])
        .args(["--nulls", &NULLS.to_string(), "--seed", &SEED.to_string()])
        .args(["--posterior-steps", &STEPS.to_string(), "--walkers", &WALKERS.to_string()])
        .args(["--temperatures", &TEMPERATURES.to_string(), "--out"])
        .arg(out)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap()).unwrap()
}

#[test]
fn the_library_pipeline_and_the_command_line_give_the_same_answer() {
    let study = uranus_study();
    let record = Record::default();
    let detection = detect(&study, &detection_settings(), &record).unwrap();
    // The observer heard the grid search from its first to its last hypothesis.
    let begun = record.begun.lock().unwrap().clone();
    assert_eq!(begun[0], (Stage::Search, detection.search.n_hypotheses as u64));
    assert_eq!(record.furthest.lock().unwrap()[0], detection.search.n_hypotheses as u64);
    // Then the noise-only simulations, counted to the last.
    assert_eq!(begun[1], (Stage::Nulls, detection_settings().search.n_null as u64));
    assert_eq!(record.furthest.lock().unwrap()[1], detection_settings().search.n_null as u64);
    assert!(record.notes.lock().unwrap().iter().any(|n| n.starts_with("Fitting the reference orbit")));
    assert_eq!(detection.verdict, Verdict::Detected, "{}", detection.verdict_text());
    // Neptune: 17.15 Earth masses (DE440 GM, Latens's table).
    let refined = detection.refined.as_ref().expect("refined on the full model");
    let neptune = latens::ephemeris::Body::Neptune.gm_au3_per_day2();
    assert!((refined.perturber.gm_au3_per_day2 / neptune - 1.0).abs() < 0.2);
    // The residual table: one row per observation used, in order.
    let residuals = detection.null.residual_table(&detection.observations);
    assert_eq!(residuals.n_rows(), detection.observations.len());
    assert_eq!(residuals.column("ra_arcsec").unwrap()[0], detection.null.residuals[0].ra_arcsec);

    let outcome = posterior(&study, &detection, &posterior_settings(&study), &record).unwrap();
    assert_eq!(outcome.explanation.best, Best::Perturber, "{}", outcome.explanation.text);
    let run = outcome.run.as_ref().expect("sampled");
    let sky = sky_products(&study, &detection, run).unwrap();
    let begun = record.begun.lock().unwrap().clone();
    assert!(begun.contains(&(Stage::Sampling, STEPS as u64)), "{begun:?}");

    // The same study through the command line.
    let dir = std::env::temp_dir().join(format!("latens-pipeline-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    let v = cli_infer(&dir);
    assert_eq!(v["null_model"]["chi2"].as_f64().unwrap(), detection.null.chi2);
    assert_eq!(v["detection"]["delta_chi2"].as_f64().unwrap(), detection.best_delta_chi2());
    assert_eq!(v["detection"]["false_alarm_probability"].as_f64().unwrap(), detection.false_alarm_probability());
    assert!(v["detection"]["verdict"].as_str().unwrap().starts_with(&detection.verdict_text()));
    assert_eq!(v["refined_best_fit"]["chi2"].as_f64().unwrap(), refined.chi2);
    assert_eq!(v["posterior"]["mass_earth"]["median"].as_f64().unwrap(), run.summary.mass_earth.median);
    assert_eq!(v["sky"]["area90_deg2"].as_f64().unwrap(), sky.sky.area90_deg2);
    // posterior.csv is the run's sample table, value for value (written
    // with 11 significant digits).
    let rows = read_rows_at(&dir.join("posterior.csv"));
    let table = run.table();
    assert_eq!(table.columns, SAMPLE_COLUMNS.to_vec());
    assert_eq!(rows.len(), table.n_rows());
    for (row, values) in rows.iter().zip(table.values.rows()) {
        for (name, want) in SAMPLE_COLUMNS.iter().zip(values) {
            let got: f64 = row[*name].parse().unwrap();
            // Written as the shortest text that reads back to the same float.
            assert_eq!(got.to_bits(), want.to_bits(), "{name}: {got} against {want}");
        }
    }
    // Prediction: the library's stage on the run's samples against `latens
    // predict` on the files (which rebuilds the orbits from posterior.csv's
    // elements about the central GM summary.json records, and writes places
    // to 5 decimals).
    let o = Command::new(env!("CARGO_BIN_EXE_latens"))
        .args(["predict", "--from"])
        .arg(&dir)
        .args(["--start", "2020-01-01T00:00:00Z", "--end", "2020-03-01T00:00:00Z", "--step-days", "30"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let (kernel, _) = detection.posterior_kernel();
    let samples: Vec<OrbitSample> = run
        .samples
        .iter()
        .filter_map(|d| OrbitSample::from_derived(d, kernel.central_gm(), kernel.epoch_tdb_days))
        .collect();
    assert_eq!(samples.len(), run.samples.len());
    let places = predict(&samples, &Vsop87::new(), study.search_epoch_tdb_days, 30.0, 3).unwrap();
    let rows = read_rows_at(&dir.join("predict.csv"));
    assert_eq!(rows.len(), places.len());
    for (row, p) in rows.iter().zip(&places) {
        assert_eq!(row["mode"].parse::<usize>().unwrap(), p.mode);
        for (name, want, tol) in [
            ("ra_deg", p.ra_deg, 2e-5),
            ("dec_deg", p.dec_deg, 2e-5),
            ("ellipse_major_deg", p.ellipse_major_deg, 1e-3),
            ("solar_elongation_deg", p.solar_elongation_deg, 1e-2),
        ] {
            let got: f64 = row[name].parse().unwrap();
            assert!((got - want).abs() <= tol, "predict.csv {name}: {got} against the library's {want}");
        }
    }
    std::fs::remove_dir_all(&dir).unwrap();
}

fn read_rows_at(path: &Path) -> Vec<std::collections::HashMap<String, String>> {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    let header: Vec<String> = lines.next().unwrap().split(',').map(str::to_string).collect();
    lines.map(|l| header.iter().cloned().zip(l.split(',').map(str::to_string)).collect()).collect()
}

#[test]
fn stages_for_one_body_refuse_a_study_of_two_and_say_why() {
    let known = parse_known("jupiter,saturn").unwrap();
    let load = |name: &str, mass: &str| {
        TrackedArc::load(
            &data_path(&format!("realarcs/{name}.csv")),
            None,
            &known,
            TrackedBody::parse(mass, None).unwrap(),
        )
        .unwrap()
    };
    let study = Study::new(
        vec![load("uranus_1930_2020", "uranus"), load("neptune_1900_2024", "neptune")],
        &EphemerisSource::Builtin,
        None,
    )
    .unwrap();
    // One ephemeris covers both arcs (1900-2024).
    assert_eq!(study.bodies.len(), 2);
    match detect(&study, &detection_settings(), &latens::progress::Quiet) {
        Err(PipelineError::Input(text)) => assert!(text.contains("2 tracked bodies"), "{text}"),
        Err(e) => panic!("wrong error: {e}"),
        Ok(_) => panic!("a two-body study was taken by a one-body stage"),
    }
}

#[test]
fn a_tracked_planet_cannot_also_be_a_known_one() {
    let known = parse_known("jupiter,saturn,uranus").unwrap();
    let tracked = TrackedBody::parse("uranus", None).unwrap();
    match TrackedArc::load(&data_path("realarcs/uranus_1930_2020.csv"), None, &known, tracked) {
        Err(PipelineError::Input(text)) => assert!(text.contains("cannot pull on itself"), "{text}"),
        _ => panic!("accepted"),
    }
}
