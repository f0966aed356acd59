//! `latens sensitivity`: the detection-probability map over perturber mass
//! and distance, in shards for job arrays, and `latens sensitivity merge`.

use std::path::{Path, PathBuf};

use anyhow::Context;

use super::CliError;
use super::args::{SensitivityArgs, SensitivityCommand};
use latens::io::results::SensitivityFile;
use latens::io::write_atomically;
use latens::perturber::search::SearchSettings;
use latens::perturber::sensitivity::{Cell, SensitivitySettings, contour};
use latens::pipeline::{EphemerisSource, SensitivityPlan, Study, TrackedArc, parse_known, sensitivity};
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
    let map = sensitivity(&study, &plan, &crate::cli::progress::Bars::new())?;
    let (threshold, cells) = (map.threshold_delta_chi2, &map.cells);

    let meta = SensitivityFile {
        threshold_delta_chi2: threshold,
        false_alarm_probability: args.fap,
        seed: args.seed,
        mass_earth: [mass.0, mass.1],
        distance_au: [distance.0, distance.1],
        grid: [grid.0, grid.1],
        trials: args.trials,
        near_ecliptic_deg: args.near_ecliptic,
        nulls: args.nulls,
        directions: args.directions,
        distances: args.distances,
        bodies: study.bodies.iter().map(|b| b.name.clone()).collect(),
        shard: shard.map(|(k, n)| [k, n]),
    };
    let mut csv = format!("{HEADER}\n");
    for c in cells {
        csv.push_str(&csv_row(c));
    }
    match shard {
        Some((k, n)) => {
            std::fs::create_dir_all(&args.out)
                .map_err(|e| CliError::failed(anyhow::anyhow!("creating {}: {e}", args.out.display())))?;
            let path = args.out.join(format!("sensitivity.part-{k}-of-{n}.csv"));
            write_atomically(&path.with_extension("json"), json_text(&meta).as_bytes()).map_err(CliError::failed)?;
            write_atomically(&path, csv.as_bytes()).map_err(CliError::failed)?;
            say!(
                "Shard {k} of {n}: {} cells written to {} (settings in {})",
                cells.len(),
                path.display(),
                path.with_extension("json").display()
            );
            say!("Join the shards with: latens sensitivity merge DIR... --out DIR");
        }
        None => {
            write_products(&args.out, &csv, cells, &meta).map_err(CliError::failed)?;
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

fn write_products(out: &Path, csv: &str, cells: &[Cell], meta: &SensitivityFile) -> anyhow::Result<()> {
    let threshold = meta.threshold_delta_chi2;
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
    say!(
        "Files written in {}: sensitivity.csv (the map), sensitivity.json (its settings and threshold){}",
        out.display(),
        super::and_chart("sensitivity")
    );
    Ok(())
}

/// Joins shard files into the full map: every shard's settings
/// (sensitivity.part-K-of-N.json) must agree; missing or repeated cells are
/// refused.
fn merge(dirs: &[PathBuf], out: &Path) -> Result<(), CliError> {
    let mut settings: Option<(SensitivityFile, PathBuf)> = None;
    let mut cells: Vec<Cell> = Vec::new();
    for dir in dirs {
        let entries = std::fs::read_dir(dir)
            .with_context(|| format!("reading {}", dir.display()))
            .map_err(CliError::bad_input)?;
        let mut parts: Vec<PathBuf> = entries
            .filter_map(|e| e.ok().map(|e| e.path()))
            .filter(|p| {
                p.file_name().is_some_and(|n| n.to_string_lossy().starts_with("sensitivity.part-"))
                    && p.extension().is_some_and(|x| x == "csv")
            })
            .collect();
        parts.sort();
        for part in parts {
            let side = part.with_extension("json");
            let meta: SensitivityFile =
                latens::io::results::read_json(&side).map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
            let same = SensitivityFile { shard: None, ..meta.clone() };
            match &settings {
                None => settings = Some((same, side.clone())),
                Some((first, first_path)) if *first != same => {
                    return Err(CliError::bad_input(anyhow::anyhow!(
                        "{}: made with other settings than {}",
                        side.display(),
                        first_path.display()
                    )));
                }
                _ => {}
            }
            let text = std::fs::read_to_string(&part)
                .with_context(|| format!("reading {}", part.display()))
                .map_err(CliError::bad_input)?;
            for (i, line) in text.lines().enumerate() {
                let bad = |what: &str| CliError::bad_input(anyhow::anyhow!("{}:{}: {what}", part.display(), i + 1));
                if line == HEADER || line.trim().is_empty() {
                    continue;
                }
                let f: Vec<&str> = line.split(',').collect();
                if f.len() != 7 {
                    return Err(bad("expected 7 fields"));
                }
                let num = |k: usize| f[k].parse::<f64>().map_err(|_| bad(&format!("field {} is not a number", k + 1)));
                let idx =
                    |k: usize| f[k].parse::<usize>().map_err(|_| bad(&format!("field {} is not an index", k + 1)));
                cells.push(Cell {
                    mass_earth: num(0)?,
                    distance_au: num(1)?,
                    detection_probability: num(2)?,
                    n_trials: idx(3)?,
                    median_delta_chi2: num(4)?,
                    mass_index: idx(5)?,
                    distance_index: idx(6)?,
                });
            }
        }
    }
    let Some((meta, _)) = settings else {
        return Err(CliError::bad_input(anyhow::anyhow!("no sensitivity.part-*.csv files in the given directories")));
    };
    cells.sort_by_key(|c| (c.distance_index, c.mass_index));
    let n_mass = cells.iter().map(|c| c.mass_index).max().map_or(0, |m| m + 1);
    let n_dist = cells.iter().map(|c| c.distance_index).max().map_or(0, |d| d + 1);
    if cells.len() != n_mass * n_dist
        || [n_mass, n_dist] != meta.grid
        || cells.windows(2).any(|w| (w[0].distance_index, w[0].mass_index) == (w[1].distance_index, w[1].mass_index))
    {
        return Err(CliError::bad_input(anyhow::anyhow!(
            "the shards hold {} cells for a {} x {} grid: some are missing or repeated",
            cells.len(),
            meta.grid[0],
            meta.grid[1]
        )));
    }
    let mut csv = format!("{HEADER}\n");
    for c in &cells {
        csv.push_str(&csv_row(c));
    }
    write_products(out, &csv, &cells, &meta).map_err(CliError::failed)
}
