//! `latens demo`: the whole job on the built-in invented scenario
//! (`scenarios/demo.toml`, embedded in the binary): simulate the survey,
//! fit the reference orbit, search for a perturber and judge it, sample its
//! posterior, make the search products, and map the survey's sensitivity;
//! then search an invented population of twelve bodies jointly.
//!
//! The scenario is invented: the distant minor body Vesk, followed for twenty
//! years by the invented Tessel Peak survey, pulled by the invented planet
//! Orla. The demo knows the truth and says, at the end, how the search did
//! against it; a user's data carry no such answer.

use std::path::Path;

use super::CliError;
use super::args::{DemoArgs, InputArgs, SensitivityArgs};
use super::residuals::ResidualProducts;
use latens::io::observations::{SiteTable, read_observations};
use latens::io::scenario::parse;
use latens::reference::{ReferenceSettings, fit_reference_orbit};
use latens::time::{epoch_from_tdb_days, utc_iso_from_epoch};
use latens::vec3::Vec3;

/// The demo scenario, as shipped in `scenarios/demo.toml`.
const SCENARIO: &str = include_str!("../../scenarios/demo.toml");

/// The joint section's population, as shipped in `scenarios/population.toml`.
const POPULATION: &str = include_str!("../../scenarios/population.toml");

pub(super) fn run(args: &DemoArgs) -> Result<(), CliError> {
    let started = std::time::Instant::now();
    // The scenario (checked before any work): the built-in one or the
    // user's, with the seed given.
    let (mut scenario, scenario_name) = match &args.scenario {
        Some(path) => {
            let text = std::fs::read_to_string(path)
                .map_err(|e| CliError::bad_input(anyhow::anyhow!("--scenario {}: {e}", path.display())))?;
            let name = path.display().to_string();
            (parse(&text, &name).map_err(CliError::bad_input)?, name)
        }
        None => (
            parse(SCENARIO, "scenarios/demo.toml (built in)").map_err(CliError::failed)?,
            "scenarios/demo.toml".to_string(),
        ),
    };
    if let Some(seed) = args.seed {
        scenario.survey.seed = seed;
    }
    let (demo_seed, own_scenario) = (args.seed, args.scenario.is_some());
    let out = &args.out;
    say!("Latens demo: {} (invented)", scenario.name);
    say!("  {}", scenario.description);

    // 1. The survey's observations, from the full model with noise.
    let sim = super::simulate::simulate(&scenario, &scenario_name, out)?;
    say!(
        "1. Simulated {} observations of {} by the {} ({}\" noise, seed {}), {} to {}; the giant planets move {} by up to {:.0}\" from a two-body orbit",
        sim.observations.len(),
        scenario.tracked.name,
        scenario.survey.name,
        scenario.survey.sigma_arcsec,
        scenario.survey.seed,
        &scenario.survey.start[..10],
        &scenario.survey.end[..10],
        scenario.tracked.name,
        sim.largest_planetary_shift_arcsec
    );
    if let Some(p) = &scenario.perturber {
        say!(
            "   The positions include the pull of the hidden planet {} ({} Earth masses), which nothing downstream is told about.",
            p.name,
            p.mass_earth
        );
    }

    // 2. The reference orbit and its residuals, as `latens residuals` does.
    let sites = SiteTable::read(&sim.sites_path).map_err(CliError::failed)?;
    let observations = read_observations(&sim.observations_path, &sites, 3).map_err(CliError::failed)?;
    let fit = fit_reference_orbit(
        &observations,
        &sites,
        &sim.model,
        &sim.ephemeris,
        &ReferenceSettings { epoch_tdb_days: Some(sim.t_ref), ..ReferenceSettings::default() },
        None,
    )
    .map_err(CliError::failed)?;
    let products = ResidualProducts::build(
        &fit,
        &observations,
        &sim.model,
        latens::ephemeris::Ephemeris::description(&sim.ephemeris),
    );
    let residual_dir = out.join("residuals");
    products.write(&residual_dir).map_err(CliError::failed)?;
    let recovered = Vec3::new(fit.state[0], fit.state[1], fit.state[2]);
    say!("2. Fitted the reference orbit from the observations alone ({}):", fit.start);
    for line in products.summary.lines() {
        say!("   {line}");
    }
    say!(
        "   the fitted position is {:.0} km from the true one",
        (recovered - sim.initial.tracked_position_au).norm() * latens::units::AU_KM
    );

    // 3. The search, the verdict, the posterior and the search products.
    say!("3. Searching the residuals for an unseen perturber (latens infer):");
    let input = InputArgs {
        obs: vec![sim.observations_path.clone()],
        sites: Some(sim.sites_path.clone()),
        known: scenario.model.known.clone(),
        ephemeris: "builtin".into(),
        tracked_mass: Vec::new(),
        kind: Vec::new(),
    };
    let search_dir = out.join("search");
    let s = &scenario.search;
    // The command's own defaults, with the scenario's search settings put
    // in typed (the grid, sampler and priors of the alternatives as a user
    // gets them; 500 noise-only searches for the false-alarm probability).
    let mut args = match <super::Args as clap::Parser>::try_parse_from([
        std::ffi::OsStr::new("latens"),
        "infer".as_ref(),
        "--obs".as_ref(),
        sim.observations_path.as_os_str(),
        "--out".as_ref(),
        search_dir.as_os_str(),
    ]) {
        Ok(super::Args { command: super::Command::Infer(a), .. }) => a,
        _ => return Err(CliError::failed(anyhow::anyhow!("the infer command's defaults did not parse"))),
    };
    args.input = input.clone();
    args.search_epoch = s.epoch.clone();
    args.nulls = 500;
    args.seed = scenario.survey.seed;
    args.max_eccentricity = s.max_eccentricity;
    // The demo knows the truth: its charts mark it.
    if scenario.perturber.is_some() {
        args.truth = Some(out.join("truth.json"));
    }
    let mut plan = super::infer::InferPlan::from_args(&args)?;
    plan.detection.search.mass_earth = (s.mass_earth[0], s.mass_earth[1]);
    plan.detection.search.distance_au = (s.distance_au[0], s.distance_au[1]);
    let summary = super::infer::execute(&plan)?;
    let truth_check = truth_against_region(&sim.truth, &search_dir);

    // 4. What the survey could have revealed at all.
    say!("4. Mapping which perturber masses at which distances this survey could reveal (latens sensitivity):");
    let sensitivity_dir = out.join("sensitivity");
    super::sensitivity::run(&SensitivityArgs {
        command: None,
        input: Some(input),
        mass_earth: "0.1:10000".into(),
        distance_au: "10:1000".into(),
        grid: "24:24".into(),
        trials: 48,
        fap: latens::pipeline::DETECTION_FAP,
        near_ecliptic: None,
        orbit: None,
        nulls: 500,
        directions: 768,
        distances: 20,
        shard: None,
        // Where on the sky: 48 cells of 860 sq deg, 16 perturbers each.
        sky_map: Some(1),
        sky_trials: 16,
        seed: scenario.survey.seed,
        out: sensitivity_dir.clone(),
    })?;

    // 5. Many bodies, one perturber.
    say!(
        "5. Twelve other bodies, one hidden planet that hardly any of them shows alone (latens infer with a directory of files):"
    );
    let joint = if !own_scenario {
        Some(joint_section(out, demo_seed)?)
    } else {
        say!("   (left out: the joint section runs on the built-in population only)");
        None
    };

    // In plain words.
    say!();
    say!("In short:");
    say!("  {}", summary.detection.verdict);
    if let Some(ex) = &summary.explanation {
        say!("  {}", ex.text);
    }
    if let (Some(p), Some(sky)) = (&summary.posterior, &summary.sky) {
        say!(
            "  The perturber weighs {:.1} Earth masses (68%: {:.1} to {:.1}) and is {:.0} au away (68%: {:.0} to {:.0}); to find it, search {:.0} square degrees (90%) on {}.",
            p.mass_earth.median,
            p.mass_earth.lo68,
            p.mass_earth.hi68,
            p.distance_au.median,
            p.distance_au.lo68,
            p.distance_au.hi68,
            sky.area90_deg2,
            &sky.search_epoch_utc[..10]
        );
    }
    if let Some(text) = &truth_check {
        say!("  {text}");
    }
    if let Some(joint) = &joint {
        say!("  Twelve bodies together: {}", joint.0);
        if let Some(text) = &joint.1 {
            say!("  {text}");
        }
    }
    say!("  The demo took {:.0} s.", started.elapsed().as_secs_f64());
    say!("Files written in {}:", out.display());
    let chart = |stem: &str| super::chart_name(&format!("search/{stem}"));
    let list = [
        Some((
            "observations.csv, sites.csv".to_string(),
            "the simulated survey (input for every other command)".to_string(),
        )),
        Some((
            "truth.json".into(),
            "what the simulation put in: the true orbits and the hidden planet's true place".into(),
        )),
        Some(("track.csv".into(), "the tracked body's monthly geocentric track and the planets' shift of it".into())),
        Some((
            "residuals/".into(),
            format!("fit.json, residuals.csv{}: the reference orbit and its O-C", super::and_chart("residuals")),
        )),
        Some((
            "search/summary.json".into(),
            "the verdict, the posterior summary, the evidence and the alternative explanations".into(),
        )),
        Some(("search/null_fit.json".into(), "the reference orbit (no perturber) the search started from".into())),
        chart("residuals_null_vs_best").map(|n| (n, "O-C without and with the best perturber".into())),
        Some((
            "search/posterior.csv".into(),
            format!(
                "posterior samples{}",
                if super::chart_name("x").is_some() { "; corner and trace charts (posterior_*)" } else { "" }
            ),
        )),
        chart("search_chart").map(|n| (n, "where to point, the whole sky and a zoom on each mode".into())),
        Some((
            "search/skymap.fits, region50/90.*".into(),
            "the sky map and the credible regions as MOCs (for Aladin, mocpy, astropy)".into(),
        )),
        Some((
            "search/confidence50/90.*".into(),
            "the confidence regions of the profile likelihood (no prior volume) as MOCs".into(),
        )),
        Some((
            "search/modes.csv".into(),
            "each sky mode: centre, area, distance, brightness, motion, when observable".into(),
        )),
        Some((
            "sensitivity/".into(),
            format!(
                "sensitivity.csv, .json{}: what this survey could have revealed, and with which settings",
                super::and_chart("sensitivity")
            ),
        )),
        Some(("population/bodies/".into(), "the twelve bodies' simulated observations, one file each".into())),
        Some((
            "population/search/".into(),
            "the joint study: summary.json, bodies.csv, posterior and search products".into(),
        )),
    ];
    for (name, what) in list.into_iter().flatten() {
        if joint.is_none() && name.starts_with("population/") {
            continue;
        }
        say!("  {name:<38} {what}");
    }
    say!("Next: `latens predict --from {}` gives each mode's place date by date for scheduling.", search_dir.display());
    Ok(())
}

/// The joint section: simulates the invented population and searches its
/// bodies together through `latens infer` with a directory of files (a
/// coarser grid than the command's default, to keep the demo short).
/// Returns the joint verdict and the check against the truth.
fn joint_section(out: &Path, seed: Option<u64>) -> Result<(String, Option<String>), CliError> {
    let mut scenario = parse(POPULATION, "scenarios/population.toml (built in)").map_err(CliError::failed)?;
    if let Some(seed) = seed {
        scenario.survey.seed = seed;
    }
    let dir = out.join("population");
    let sim = super::simulate::simulate(&scenario, "scenarios/population.toml", &dir)?;
    let bodies = scenario.all_bodies();
    say!(
        "   Simulated {} bodies ({} observations together) with the pull of {}, {} Earth masses at {} au",
        bodies.len(),
        sim.truth.n_observations,
        scenario.perturber.as_ref().map_or("nothing", |p| p.name.as_str()),
        scenario.perturber.as_ref().map_or(0.0, |p| p.mass_earth),
        scenario.perturber.as_ref().map_or(0.0, |p| p.a_au)
    );
    let search_dir = dir.join("search");
    let bodies_dir = dir.join("bodies");
    let argv: Vec<std::ffi::OsString> = vec![
        "latens".into(),
        "infer".into(),
        "--obs".into(),
        bodies_dir.into_os_string(),
        "--sites".into(),
        sim.sites_path.clone().into_os_string(),
        "--known".into(),
        scenario.model.known.clone().into(),
        "--directions".into(),
        "192".into(),
        "--distances".into(),
        "12".into(),
        "--nulls".into(),
        "400".into(),
        "--seed".into(),
        scenario.survey.seed.to_string().into(),
        "--truth".into(),
        dir.join("truth.json").into_os_string(),
        "--out".into(),
        search_dir.clone().into_os_string(),
    ];
    let args = match <super::Args as clap::Parser>::try_parse_from(argv) {
        Ok(super::Args { command: super::Command::Infer(a), .. }) => a,
        _ => return Err(CliError::failed(anyhow::anyhow!("the joint infer arguments did not parse"))),
    };
    super::infer::run(&args)?;
    let summary: serde_json::Value = std::fs::read_to_string(search_dir.join("summary.json"))
        .ok()
        .and_then(|t| serde_json::from_str(&t).ok())
        .unwrap_or_default();
    let verdict = summary["detection"]["verdict"].as_str().unwrap_or("(no summary written)").to_string();
    Ok((verdict, truth_against_region(&sim.truth, &search_dir)))
}

/// Says whether the hidden planet's true place lies in the 50% and 90%
/// regions (the demo knows the truth; a user would not).
fn truth_against_region(truth: &latens::io::results::TruthFile, search_dir: &Path) -> Option<String> {
    let place = truth.perturber.as_ref()?.at_search_epoch.as_ref()?;
    let dir = latens::frames::vector_from_radec_deg(place.ra_deg, place.dec_deg);
    let inside = |name: &str| {
        std::fs::read_to_string(search_dir.join(name))
            .ok()
            .and_then(|text| latens::skymap::moc_json_contains(&text, dir).ok())
    };
    let (in50, in90) = (inside("region50.json")?, inside("region90.json")?);
    let confidence = match inside("confidence90.json") {
        Some(true) => "; the 90% confidence region (profile likelihood, no prior volume) holds it",
        Some(false) => "; the 90% confidence region (profile likelihood, no prior volume) does not hold it either",
        None => "",
    };
    let name = &truth.perturber.as_ref()?.name;
    Some(format!(
        "The hidden planet {name} is really at RA {:.2} deg, Dec {:+.2} deg on {}: {}{confidence}.",
        place.ra_deg,
        place.dec_deg,
        utc_iso_from_epoch(epoch_from_tdb_days(latens::time::tdb_days_from_j2000(
            latens::time::parse_epoch(&place.epoch_utc).unwrap_or_else(|_| epoch_from_tdb_days(0.0))
        )))
        .get(..10)
        .unwrap_or(""),
        if in50 {
            "inside the 50% region".to_string()
        } else if in90 {
            "inside the 90% region (outside the 50%)".to_string()
        } else {
            "outside the 90% region: the regions hold the truth at their stated rates on average over perturbers \
             drawn from the prior, not for every planet; a light one passing close to the body, whose fit is sharp \
             where heavier, farther ones fit broadly, is missed more often (docs/validation.md measures both)"
                .to_string()
        }
    ))
}
