//! `latens simulate SCENARIO.toml --out DIR`: the observations a scenario's
//! survey would make of its tracked body, from the full nonlinear model
//! (the hidden perturber included) with seeded noise, plus the truth.
//!
//! Writes `observations.csv` (Latens CSV), `sites.csv`, `truth.json` and
//! `track.csv` (the body's monthly geocentric track); a scenario with
//! several tracked bodies also writes `bodies/NAME.csv` for each.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use super::CliError;
use latens::dynamics::{ForceModel, InitialState};
use latens::ephemeris::Tabulated;
use latens::io::observations::Observation;
use latens::io::results::TruthFile;
use latens::io::scenario::{ScenarioFile, read};
use latens::io::write_atomically;
use latens::pipeline::simulate_population;
use latens::time::{epoch_from_tdb_days, utc_iso_from_epoch};

/// A simulated scenario, written out and ready for the other stages.
pub(super) struct Simulated {
    pub observations_path: PathBuf,
    pub sites_path: PathBuf,
    pub t_ref: f64,
    pub initial: InitialState,
    pub model: ForceModel,
    pub ephemeris: Tabulated,
    pub observations: Vec<Observation>,
    pub truth: TruthFile,
    /// Largest shift of the body by the known planets over the track, arcsec.
    pub largest_planetary_shift_arcsec: f64,
}

/// The observations as Latens CSV (the scenario, noise and seed are in
/// truth.json, so the file holds nothing but the table).
/// The file name of a body's observations in a population's `bodies/`.
pub(super) fn body_file_name(name: &str) -> String {
    format!("{}.csv", name.replace(' ', "_"))
}

/// Simulates a scenario and writes it into `out` (`name` is the scenario
/// file's name, for messages): observations.csv, sites.csv, track.csv and
/// truth.json; with `[[more_bodies]]`, also bodies/NAME.csv for every
/// tracked body (the first one's is observations.csv again).
pub(super) fn simulate(s: &ScenarioFile, name: &str, out: &Path) -> Result<Simulated, CliError> {
    let mut all = simulate_population(s, name)?;
    std::fs::create_dir_all(out).map_err(|e| CliError::failed(anyhow::anyhow!("creating {}: {e}", out.display())))?;
    if all.len() > 1 {
        let dir = out.join("bodies");
        std::fs::create_dir_all(&dir)
            .map_err(|e| CliError::failed(anyhow::anyhow!("creating {}: {e}", dir.display())))?;
        for (sim, body) in all.iter().zip(s.all_bodies()) {
            write_atomically(
                &dir.join(body_file_name(&body.name)),
                latens::io::observations::observations_csv(&sim.observations).as_bytes(),
            )
            .map_err(CliError::failed)?;
        }
    }
    let sim = all.swap_remove(0);
    let csv = latens::io::observations::observations_csv(&sim.observations);
    let observations_path = out.join("observations.csv");
    let sites_path = out.join("sites.csv");
    write_atomically(&observations_path, csv.as_bytes()).map_err(CliError::failed)?;
    let mut sites_csv = String::from("name,lon_deg,lat_deg,height_m\n");
    for site in &s.survey.sites {
        let _ = writeln!(sites_csv, "{},{},{},{}", site.name, site.lon_deg, site.lat_deg, site.height_m);
    }
    write_atomically(&sites_path, sites_csv.as_bytes()).map_err(CliError::failed)?;
    let mut track = String::from(
        "epoch_utc,t_tdb_days,ra_deg,dec_deg,heliocentric_distance_au,geocentric_distance_au,solar_elongation_deg,planetary_shift_arcsec\n",
    );
    for p in &sim.track {
        let _ = writeln!(
            track,
            "{},{:.6},{:.7},{:.7},{:.6},{:.6},{:.3},{:.4}",
            utc_iso_from_epoch(epoch_from_tdb_days(p.t_tdb_days)),
            p.t_tdb_days,
            p.ra_deg,
            p.dec_deg,
            p.heliocentric_distance_au,
            p.geocentric_distance_au,
            p.solar_elongation_deg,
            p.planetary_shift_arcsec
        );
    }
    write_atomically(&out.join("track.csv"), track.as_bytes()).map_err(CliError::failed)?;
    let json = serde_json::to_string_pretty(&sim.truth).map_err(|e| CliError::failed(anyhow::anyhow!(e)))? + "\n";
    write_atomically(&out.join("truth.json"), json.as_bytes()).map_err(CliError::failed)?;
    Ok(Simulated {
        observations_path,
        sites_path,
        t_ref: sim.t_ref,
        initial: sim.initial,
        model: sim.model,
        ephemeris: sim.ephemeris,
        observations: sim.observations,
        truth: sim.truth,
        largest_planetary_shift_arcsec: sim.largest_planetary_shift_arcsec,
    })
}

/// `latens simulate`.
pub(super) fn run(args: &super::args::SimulateArgs) -> Result<(), CliError> {
    let scenario = read(&args.scenario).map_err(CliError::bad_input)?;
    let sim = simulate(&scenario, &args.scenario.display().to_string(), &args.out)?;
    let names: Vec<String> = scenario.all_bodies().into_iter().map(|b| b.name).collect();
    say!(
        "Simulated {} observations of {} from {} ({}), seed {}",
        sim.truth.n_observations,
        names.join(", "),
        scenario.survey.name,
        scenario.name,
        scenario.survey.seed
    );
    match &sim.truth.perturber {
        Some(p) => say!(
            "  with the hidden perturber {} ({} Earth masses); its true place is in truth.json",
            p.name,
            p.mass_earth.unwrap_or(0.0)
        ),
        None => say!("  with no hidden perturber"),
    }
    say!("Files written in {}:", args.out.display());
    say!(
        "  observations.csv     the simulated astrometry of {} (Latens CSV), input to residuals, infer, sensitivity",
        names[0]
    );
    if names.len() > 1 {
        say!(
            "  bodies/              one such file per tracked body; `latens infer --obs DIR/bodies` searches them jointly"
        );
    }
    say!("  sites.csv            the survey's sites");
    say!("  truth.json           the true orbits, and the perturber's true place at the search epoch");
    say!("  track.csv            the body's monthly geocentric track and the planets' shift of it");
    Ok(())
}
