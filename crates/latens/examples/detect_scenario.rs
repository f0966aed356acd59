//! Detection through the library alone, without the `latens` binary: an
//! invented scenario's survey is simulated, loaded as a study, and searched
//! for an unseen perturber.
//!
//! ```sh
//! cargo run --release -p latens --example detect_scenario              # scenarios/demo.toml
//! cargo run --release -p latens --example detect_scenario -- FILE.toml
//! ```
//!
//! (Built by `cargo test`; a coarse grid keeps it to seconds.)

use std::path::PathBuf;

use latens::dynamics::TrackedBody;
use latens::io::scenario;
use latens::perturber::SearchSettings;
use latens::pipeline::{
    DetectionSettings, EphemerisSource, Study, TrackedArc, detect, force_model, parse_known, simulate_scenario,
};
use latens::progress::{Observer, Stage};
use latens::time::{parse_epoch, tdb_days_from_j2000};

/// Prints what the stages say, and where the grid search has got to.
struct Log;

impl Observer for Log {
    fn begin(&self, stage: Stage, total: u64) {
        eprintln!("  {} ({total} {})", stage.describe(), stage.unit());
    }
    fn note(&self, text: &str) {
        eprintln!("  {text}");
    }
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let path = std::env::args_os()
        .nth(1)
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../scenarios/demo.toml"));
    let scenario = scenario::read(&path)?;
    println!("Scenario: {} (invented)", scenario.name);

    // The survey's observations, in memory (no files).
    let sim = simulate_scenario(&scenario, &path.display().to_string())?;
    println!("Simulated {} observations of {}", sim.observations.len(), scenario.tracked.name);

    // The study: one tracked body, the known planets, the embedded ephemeris.
    let known = parse_known(&scenario.model.known)?;
    let arc = TrackedArc {
        name: scenario.tracked.name.clone(),
        observations: sim.observations,
        sites: sim.sites,
        tracked: TrackedBody::massless(),
        model: force_model(&known),
        excluded_by_hand: Vec::new(),
    };
    let search_epoch = scenario.search.epoch.as_deref().map(parse_epoch).transpose()?.map(tdb_days_from_j2000);
    let study = Study::new(vec![arc], &EphemerisSource::Builtin, search_epoch)?;

    // Detection on a coarse grid.
    let s = &scenario.search;
    let settings = DetectionSettings {
        search: SearchSettings {
            mass_earth: (s.mass_earth[0], s.mass_earth[1]),
            distance_au: (s.distance_au[0], s.distance_au[1]),
            n_null: 371,
            seed: scenario.survey.seed,
            n_directions: 192,
            n_distances: 8,
            ..SearchSettings::default()
        },
        reject_sigma: Some(10.0),
        start_orbit: None,
    };
    let detection = detect(&study, &settings, &Log)?;
    println!("Verdict: {}", detection.verdict_text());
    if let Some(r) = &detection.refined {
        let gm_earth = latens::units::GM_EARTH_MASS_AU3_PER_DAY2;
        println!(
            "Refined on the full model: {:.2} Earth masses, {:.1} au from the Sun at the reference epoch (chi-square {:.1} for {} dof)",
            r.perturber.gm_au3_per_day2 / gm_earth,
            r.perturber.position_au.norm(),
            r.chi2,
            detection.null.dof
        );
    }
    if let Some(p) = &sim.truth.perturber {
        println!(
            "The truth (which detection was not told): {} Earth masses at a = {:.1} au. One best fit sits somewhere on \
             the mass-distance ridge; the posterior stage (latens::pipeline::posterior) gives the ranges.",
            p.mass_earth.unwrap_or(0.0),
            p.a_au
        );
    }
    Ok(())
}
