//! `latens sensitivity`: the detection-probability map over perturber mass
//! and distance, in shards for job arrays, and `latens sensitivity merge`.

use std::path::{Path, PathBuf};

use anyhow::Context;

use super::CliError;
use super::args::{SensitivityArgs, SensitivityCommand};
use latens::io::results::SensitivityFile;
use latens::io::write_atomically;
use latens::perturber::search::SearchSettings;
use latens::perturber::sensitivity::{Cell, SensitivitySettings, SkyCellMass, SkyPlan, contour};
use latens::pipeline::{
    EphemerisSource, SensitivityMap, SensitivityPlan, SensitivityShare, Study, TrackedArc, merge_sensitivity,
    parse_known, sensitivity, sensitivity_share,
};
use latens_charts::sensitivity_chart::SensitivityChart;

const HEADER: &str =
    "mass_earth,distance_au,detection_probability,n_trials,median_delta_chi2,mass_index,distance_index";

fn parse_pair<T: std::str::FromStr>(text: &str, sep: char, what: &str) -> Result<(T, T), CliError> {
    let bad = || CliError::bad_input(anyhow::anyhow!("{what}: cannot read `{text}`"));
    let (a, b) = text.split_once(sep).ok_or_else(bad)?;
    Ok((a.trim().parse().map_err(|_| bad())?, b.trim().parse().map_err(|_| bad())?))
}

pub(super) fn run(args: &SensitivityArgs) -> Result<(), CliError> {
    if let Some(SensitivityCommand::Merge { dirs, out }) = &args.command {
        return merge(dirs, out.as_ref().unwrap_or(&args.out));
    }
    let Some(input) = &args.input else {
        return Err(CliError::bad_input(anyhow::anyhow!("give --obs FILE (or use `latens sensitivity merge DIR...`)")));
    };
    let mass = super::parse_range(&args.mass_earth, "--mass-earth")?;
    let distance = super::parse_range(&args.distance_au, "--distance-au")?;
    let grid: (usize, usize) = parse_pair(&args.grid, ':', "--grid")?;
    let shard = match &args.shard {
        Some(text) => Some(parse_pair::<usize>(text, '/', "--shard")?),
        None => None,
    };
    let plan = SensitivityPlan {
        map: SensitivitySettings {
            mass_earth: mass,
            distance_au: distance,
            n_masses: grid.0,
            n_distances: grid.1,
            n_trials: args.trials,
            near_ecliptic_deg: args.near_ecliptic,
            seed: args.seed,
            min_separation_au: SearchSettings::default().min_separation_au,
        },
        false_alarm_probability: args.fap,
        search: SearchSettings {
            n_null: args.nulls,
            seed: args.seed,
            n_directions: args.directions,
            n_distances: args.distances,
            // The threshold from a search of the same band, as
            // `latens infer --near-ecliptic` would search.
            near_ecliptic_deg: args.near_ecliptic,
            ..SearchSettings::default()
        },
        shard,
        sky: args.sky_map.map(|order| SkyPlan { order, trials_per_cell: args.sky_trials }),
    };
    plan.check()?;
    let known = parse_known(&input.known).map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
    let tracked = input.tracked().map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
    let source = EphemerisSource::parse(&input.ephemeris);
    let files = input.obs_files().map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
    if files.len() > 1 && args.orbit.as_ref().is_some_and(|o| !o.is_dir()) {
        return Err(CliError::bad_input(anyhow::anyhow!(
            "--orbit FIT_JSON places one planned schedule on one orbit; --obs gives {} files (give --orbit DIR holding each body's orbit as NAME.json or NAME/fit.json)",
            files.len()
        )));
    }
    let study = match &args.orbit {
        None => {
            // One body, or a population mapped together.
            let mut arcs: Vec<TrackedArc> = files
                .iter()
                .map(|f| TrackedArc::load_all(f, input.sites.as_deref(), &known, tracked.clone()))
                .collect::<Result<Vec<_>, _>>()?
                .into_iter()
                .flatten()
                .collect();
            super::infer::own_bodies(input, &mut arcs)?;
            Study::new(arcs, &source, None)?
        }
        Some(orbit_dir) if orbit_dir.is_dir() => {
            // A population of planned schedules, each body on its own orbit.
            let mut arcs = files
                .iter()
                .map(|f| TrackedArc::load_schedule(f, input.sites.as_deref(), &known, tracked.clone()))
                .collect::<Result<Vec<_>, _>>()?;
            super::infer::own_bodies(input, &mut arcs)?;
            let orbits = arcs.iter().map(|a| body_orbit(orbit_dir, &a.name)).collect::<Result<Vec<_>, _>>()?;
            let mut study = Study::new(arcs, &source, None)?;
            for (k, (t0, state)) in orbits.iter().enumerate() {
                study.place_on_orbit(k, *t0, state)?;
            }
            study
        }
        Some(orbit_path) => {
            let obs = input.single_obs("sensitivity").map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
            if input.has_named_bodies() {
                return Err(CliError::bad_input(anyhow::anyhow!(
                    "--tracked-mass/--kind BODY=VALUE: --orbit maps one planned body; give the plain value"
                )));
            }
            let (t0, state) = read_orbit(orbit_path)?;
            let arc = TrackedArc::load_schedule(&obs, input.sites.as_deref(), &known, tracked)?;
            let mut study = Study::new(vec![arc], &source, None)?;
            // Positions the planned survey would measure of this orbit (no noise).
            study.place_on_orbit(0, t0, &state)?;
            study
        }
    };
    let about = plan.file(study.bodies.iter().map(|b| b.name.clone()).collect());
    let bars = crate::cli::progress::Bars::new();
    match shard {
        Some((k, n)) => {
            let share = sensitivity_share(&study, &plan, &bars)?;
            std::fs::create_dir_all(&args.out)
                .map_err(|e| CliError::failed(anyhow::anyhow!("creating {}: {e}", args.out.display())))?;
            let [json, csv] = share.write(&args.out, &about)?;
            say!(
                "Shard {k} of {n}: {} of the threshold search's {} hypotheses and the trials of {} distances written to {} and {}",
                share.nulls.n_in_shard,
                share.nulls.n_hypotheses,
                share.amplitudes.len(),
                csv.display(),
                json.display()
            );
            say!("Join the shards with: latens sensitivity merge DIR... --out DIR");
        }
        None => {
            let map = sensitivity(&study, &plan, &bars)?;
            let meta = SensitivityFile { threshold_delta_chi2: Some(map.threshold_delta_chi2), ..about };
            write_products(&args.out, &map, &meta).map_err(CliError::failed)?;
        }
    }
    Ok(())
}

fn json_text(meta: &SensitivityFile) -> String {
    serde_json::to_string_pretty(meta).unwrap_or_default() + "\n"
}

/// One line of sensitivity.csv (shards and merged maps alike).
fn csv_row(c: &Cell) -> String {
    format!(
        "{},{},{:.6},{},{:.4},{},{}\n",
        c.mass_earth,
        c.distance_au,
        c.detection_probability,
        c.n_trials,
        c.median_delta_chi2,
        c.mass_index,
        c.distance_index
    )
}

/// Body `name`'s orbit in `dir`: `NAME.json` or `NAME/fit.json` (the
/// layout `latens infer` writes for a joint study's bodies).
fn body_orbit(dir: &Path, name: &str) -> Result<(f64, [f64; 6]), CliError> {
    let candidates = [dir.join(format!("{name}.json")), dir.join(name).join("fit.json")];
    match candidates.iter().find(|p| p.is_file()) {
        Some(p) => read_orbit(p),
        None => Err(CliError::bad_input(anyhow::anyhow!(
            "--orbit {}: no orbit for the body {name} (looked for {} and {})",
            dir.display(),
            candidates[0].display(),
            candidates[1].display()
        ))),
    }
}

/// The reference epoch (TDB days after J2000.0) and heliocentric ICRF state
/// from a fit.json of `latens residuals`.
pub(super) fn read_orbit(path: &Path) -> Result<(f64, [f64; 6]), CliError> {
    let file = path.display().to_string();
    let fit: latens::io::results::FitHead =
        latens::io::results::read_json(path).map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
    let (jd, state) = (fit.orbit.epoch_tdb_jd, fit.orbit.state_icrf);
    if !(jd.is_finite() && state.iter().all(|x| x.is_finite())) {
        return Err(CliError::bad_input(anyhow::anyhow!(
            "{file}: fields `orbit.epoch_tdb_jd` and `orbit.state_icrf` must hold finite numbers"
        )));
    }
    Ok((jd - latens::units::J2000_JD, state))
}

fn write_products(out: &Path, whole: &SensitivityMap, meta: &SensitivityFile) -> anyhow::Result<()> {
    let cells = &whole.cells;
    let threshold = meta.threshold_delta_chi2.unwrap_or(f64::NAN);
    let mut csv = format!("{HEADER}\n");
    for c in cells {
        csv.push_str(&csv_row(c));
    }
    let c50 = contour(cells, 0.5);
    let c90 = contour(cells, 0.9);
    let c95 = contour(cells, 0.95);
    let keep = |c: &[(f64, Option<f64>)]| c.iter().filter_map(|(d, m)| m.map(|m| (*d, m))).collect::<Vec<_>>();
    let map: Vec<(f64, f64, f64)> =
        cells.iter().map(|c| (c.distance_au, c.mass_earth, c.detection_probability)).collect();
    let chart = SensitivityChart {
        cells: &map,
        contour_50: keep(&c50),
        contour_90: keep(&c90),
        exclusion_95: keep(&c95),
        title: format!("Detection probability (threshold delta chi2 {threshold:.1})"),
    };
    std::fs::create_dir_all(out).with_context(|| format!("creating {}", out.display()))?;
    super::write_chart(out, "sensitivity", |tmp| chart.draw_png(tmp), || chart.draw_svg())?;
    write_atomically(&out.join("sensitivity.csv"), csv.as_bytes())?;
    write_atomically(&out.join("sensitivity.json"), json_text(meta).as_bytes())?;
    say!("Mass detected with 50% / 90% probability, and excluded at 95% if nothing is detected:");
    for ((d, m50), ((_, m90), (_, m95))) in c50.iter().zip(c90.iter().zip(&c95)).step_by((c50.len() / 8).max(1)) {
        let f = |m: &Option<f64>| m.map_or("beyond the grid".to_string(), |m| format!("{m:.3} Earth masses"));
        say!("  at {d:7.1} au: {} / {} / {}", f(m50), f(m90), f(m95));
    }
    let sky = if whole.sky.is_empty() {
        String::new()
    } else {
        write_sky(out, &whole.sky)?;
        format!(", sensitivity_sky.csv (the sky map){}", super::and_chart("sensitivity_sky"))
    };
    say!(
        "Files written in {}: sensitivity.csv (the map), sensitivity.json (its settings and threshold){}{sky}",
        out.display(),
        super::and_chart("sensitivity")
    );
    Ok(())
}

/// Joins shard files into the full map: every shard's settings
/// (sensitivity.part-K-of-N.json) must agree; missing or repeated shards
/// or distances are refused. The threshold comes from the null maxima of
/// all the shards together, so the result is the unsharded map's.
fn merge(dirs: &[PathBuf], out: &Path) -> Result<(), CliError> {
    let (about, shares) = SensitivityShare::read_dirs(dirs)?;
    let map = merge_sensitivity(&shares, about.false_alarm_probability)?;
    let meta = SensitivityFile { threshold_delta_chi2: Some(map.threshold_delta_chi2), ..about };
    write_products(out, &map, &meta).map_err(CliError::failed)
}

const SKY_HEADER: &str =
    "distance_au,healpix_order,cell,ra_deg,dec_deg,ecliptic_lat_deg,n_trials,mass50_earth,mass90_earth,distance_index";

/// sensitivity_sky.csv (one row per distance and HEALPix cell; a mass the
/// map's range does not reach is an empty field) and its chart.
fn write_sky(out: &Path, sky: &[SkyCellMass]) -> anyhow::Result<()> {
    let mut csv = format!("{SKY_HEADER}\n");
    let opt = |m: Option<f64>| m.map_or(String::new(), |m| format!("{m:.4}"));
    for c in sky {
        let (ra, dec, lat) = c.centre_deg();
        csv.push_str(&format!(
            "{},{},{},{:.4},{:.4},{:.4},{},{},{},{}\n",
            c.distance_au,
            c.order,
            c.cell,
            ra,
            dec,
            lat,
            c.n_trials,
            opt(c.mass50_earth),
            opt(c.mass90_earth),
            c.distance_index
        ));
    }
    let chart = latens_charts::sky_sensitivity_chart::SkySensitivityChart::new(sky);
    super::write_chart(out, "sensitivity_sky", |tmp| chart.draw_png(tmp), || chart.draw_svg())?;
    write_atomically(&out.join("sensitivity_sky.csv"), csv.as_bytes())?;
    Ok(())
}
