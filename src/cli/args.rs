//! Command-line arguments as clap structures.

use std::path::PathBuf;

use clap::{Parser, Subcommand};

/// Latens: does the drift of a tracked body's orbit betray an unseen mass, and
/// where should a telescope look for it?
#[derive(Debug, Parser)]
#[command(name = "latens", version, about, long_about = TOP_ABOUT, after_long_help = TOP_AFTER)]
pub struct Args {
    #[command(subcommand)]
    pub command: Command,
    /// Worker threads for the parallel stages (default: one per core).
    #[arg(long, value_name = "N", global = true)]
    pub threads: Option<usize>,
    /// Which chart files to write: png, svg, both or none.
    #[arg(long, value_enum, value_name = "FORMATS", global = true, default_value = "both")]
    pub charts: ChartFormats,
    /// No report on standard output, no progress or notes: the files are
    /// the result (for scripts). Warnings still go to standard error, and
    /// errors as always.
    #[arg(long, short = 'q', global = true)]
    pub quiet: bool,
    /// As --quiet, then one JSON document on standard output: the command,
    /// the output directory, the files written (as outputs.json lists them)
    /// and the command's main result (infer: summary.json, residuals:
    /// fit.json, sensitivity: sensitivity.json, simulate: truth.json).
    #[arg(long, global = true)]
    pub json: bool,
}

/// The chart files the commands write (`--charts`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum ChartFormats {
    /// PNG and SVG.
    Both,
    /// PNG only (raster, for reading).
    Png,
    /// SVG only (vector, for papers).
    Svg,
    /// No charts (tables and JSON only, for scripts).
    None,
}

const TOP_ABOUT: &str = "\
Latens reads the astrometric observations of a tracked body (or of several), fits its orbit under \
the Sun and the known planets, and decides whether the leftover drift of the O-C residuals means \
an unseen mass is pulling on it. If so it fits that perturber's mass and orbit (a grid search \
through a linearised kernel, then Levenberg-Marquardt, then a tempered MCMC), weighs it against \
the other explanations (known-planet masses, a non-gravitational push, astrometric offsets), and \
gives the posterior region of the sky where a telescope should look. It also says which perturber \
masses at which distances the data could or could not have revealed.";

const TOP_AFTER: &str = "\
The workflow:
  1. latens residuals --obs OBS.csv --sites SITES.csv    fit the orbit; look at the O-C
  2. latens infer     --obs OBS.csv --sites SITES.csv    is there a perturber? where?
  3. latens predict   --from output/infer                 each sky mode's place, date by date
  4. latens sensitivity --obs OBS.csv --sites SITES.csv  what these data could have revealed
  latens simulate SCENARIO.toml makes invented observations to try it all on;
  latens demo runs the whole chain on a built-in invented scenario.

Every command writes into --out DIR (an index of what it wrote is DIR/outputs.json) and exits
0 on success, 1 when a computation fails, 2 on bad input or arguments (with the file, line and
field named). File formats: docs/formats.md; the method: docs/method.md.
Safety: a search region near the Sun carries a warning; pointing a telescope or any optics near
the Sun can destroy eyes and instruments.";

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run the built-in invented scenario end to end and write what it makes.
    #[command(
        long_about = "Run the built-in invented scenario end to end and write what it makes.\n\n\
            The demo simulates an invented survey of an invented distant body with an invented planet \
            pulling on it, fits the orbit, finds the planet, samples its posterior, draws where to \
            look, maps the survey's sensitivity, and searches an invented population of twelve \
            bodies jointly. It needs no input files and takes about two minutes on two cores.",
        after_long_help = "Examples:\n  latens demo\n  latens demo --out /tmp/demo --seed 7\n  latens demo --scenario scenarios/demo.toml --out /tmp/mine"
    )]
    Demo(DemoArgs),
    /// Fit the tracked body's reference orbit and show its O-C residuals.
    #[command(
        long_about = "Fit the tracked body's reference orbit and show its O-C residuals.\n\n\
            The orbit is fitted under the Sun and the --known planets (Gauss's method for a start, \
            then Levenberg-Marquardt on the full N-body model with light time); outliers are set \
            aside and re-admitted as the fit settles. The summary says whether the residuals are \
            consistent with the stated uncertainties, and their linear trend. Start here: residuals \
            far beyond noise are what `latens infer` looks into.",
        after_long_help = "Examples:\n  \
            latens residuals --obs obs.csv --sites sites.csv\n  \
            latens residuals --obs obs.psv --known jupiter,saturn,uranus,neptune,pluto --epoch 2020-01-01T00:00:00Z\n  \
            latens residuals --obs planet.csv --tracked-mass uranus --known jupiter,saturn,neptune --ephemeris de440.bsp\n\n\
            --known names: mercury, venus, earth, moon, earth-moon, mars, jupiter, saturn, uranus, \
            neptune, pluto (or none)."
    )]
    Residuals(ResidualsArgs),
    /// Search for an unseen perturber in the residuals and judge whether it is real.
    #[command(
        long_about = "Search for an unseen perturber in the residuals and judge whether it is real.\n\n\
            A grid of perturber hypotheses (directions x distances x orbit orientations x speeds) is \
            scored through a linearised kernel with the mass profiled; null simulations of the same \
            search on noise alone give the false-alarm probability (the look-elsewhere effect \
            included), and a detection needs it below --fap-level (0.0027, 3 sigma). The best solution is refined on the \
            full model; the perturber's posterior is sampled (tempered ensemble MCMC) and weighed \
            against the alternatives; for a detection, the sky map, the 50% and 90% credible regions \
            and their modes say where to look. Several --obs (or a directory) search several bodies \
            jointly for one shared perturber. --near-ecliptic DEG restricts the search and the posterior \
            to orbits within DEG of the ecliptic.",
        after_long_help = "Examples:\n  \
            latens infer --obs obs.csv --sites sites.csv\n  \
            latens infer --obs obs.csv --sites sites.csv --mass-earth 1:100 --distance-au 30:300 --seed 7\n  \
            latens infer --obs obs.csv --sites sites.csv --near-ecliptic 20   (a near-ecliptic planet)\n  \
            latens infer --obs population/ --sites sites.csv --out output/joint\n  \
            latens infer --obs obs.csv --sites sites.csv --resume output/infer   (after Ctrl-C)\n\n\
            --known names: mercury, venus, earth, moon, earth-moon, mars, jupiter, saturn, uranus, \
            neptune, pluto (or none)."
    )]
    Infer(InferArgs),
    /// Map which perturber masses at which distances the observations could reveal.
    #[command(
        long_about = "Map which perturber masses at which distances the observations could reveal.\n\n\
            For each cell of mass and distance, perturbers in random directions, orientations and \
            phases are drawn and their signal through the kernel compared with the detection \
            threshold that `latens infer`'s search has on noise alone. The map gives the mass \
            detected with 50% and 90% probability at each distance, and the mass excluded at 95% \
            when nothing is found. With --orbit, --obs is a planned schedule (epochs and sigmas \
            only), for designing a survey. --shard K/N and `sensitivity merge` spread the map over \
            a cluster's job array.",
        after_long_help = "Examples:\n  \
            latens sensitivity --obs obs.csv --sites sites.csv\n  \
            latens sensitivity --obs plan.csv --orbit output/residuals/fit.json --sites sites.csv --near-ecliptic 20\n  \
            latens sensitivity --obs obs.csv --sites sites.csv --shard 3/16 --out shards\n  \
            latens sensitivity merge shards --out output/sensitivity"
    )]
    Sensitivity(SensitivityArgs),
    /// Simulate a scenario's survey (observations from the full model with seeded noise, and the truth).
    #[command(
        long_about = "Simulate a scenario's survey: observations from the full N-body model with seeded \
            noise, and the truth kept aside.\n\n\
            A scenario file (TOML; docs/formats.md, scenarios/) describes invented tracked bodies, an \
            optional hidden perturber, the known planets and a survey (dates, cadence, sites, \
            sigmas, seed). The observations it writes are input for every other command; truth.json \
            says what the answer should be.",
        after_long_help = "Examples:\n  \
            latens simulate scenarios/demo.toml\n  \
            latens simulate scenarios/population.toml --out output/population"
    )]
    Simulate(SimulateArgs),
    /// Predict where each sky mode of an `infer` result will be, for scheduling the search.
    #[command(
        long_about = "Predict where each sky mode of an `infer` result will be, for scheduling the search.\n\n\
            The posterior samples of each mode holding at least 1% of them are moved along their \
            orbits to each date: the mode's centre, its error ellipse, the brightness range, the \
            motion and the solar elongation (places within 45 deg of the Sun are flagged: pointing \
            a telescope there can destroy eyes and instruments).",
        after_long_help = "Examples:\n  \
            latens predict --from output/infer\n  \
            latens predict --from output/infer --start 2027-01-01 --end 2027-12-31 --step-days 14"
    )]
    Predict(PredictArgs),
}

#[derive(Debug, clap::Args)]
pub struct SimulateArgs {
    /// The scenario file (TOML; see docs/formats.md and scenarios/).
    #[arg(value_name = "SCENARIO.toml")]
    pub scenario: PathBuf,
    /// Directory to write into (created if missing).
    #[arg(long, value_name = "DIR", default_value = "output/simulate")]
    pub out: PathBuf,
}

#[derive(Debug, clap::Args)]
pub struct PredictArgs {
    /// Output directory of `latens infer` (reads summary.json and posterior.csv).
    #[arg(long, value_name = "DIR")]
    pub from: PathBuf,
    /// First date (ISO UTC or `JD <days> TDB`); default: the search epoch.
    #[arg(long, value_name = "DATE")]
    pub start: Option<String>,
    /// Last date; default: a year after the start.
    #[arg(long, value_name = "DATE")]
    pub end: Option<String>,
    /// Days between predictions.
    #[arg(long, value_name = "N", default_value_t = 7.0)]
    pub step_days: f64,
    /// Where to write predict.csv; default: the --from directory.
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
}

#[derive(Debug, clap::Args)]
#[command(args_conflicts_with_subcommands = true)]
pub struct SensitivityArgs {
    #[command(subcommand)]
    pub command: Option<SensitivityCommand>,
    #[command(flatten)]
    pub input: Option<InputArgs>,
    /// Mass range of the map, Earth masses (log-spaced).
    #[arg(long, value_name = "MIN:MAX", default_value = "0.1:10000")]
    pub mass_earth: String,
    /// Heliocentric distance range of the map, au (log-spaced).
    #[arg(long, value_name = "MIN:MAX", default_value = "10:1000")]
    pub distance_au: String,
    /// Cells: masses by distances.
    #[arg(long, value_name = "NMASS:NDIST", default_value = "40:40")]
    pub grid: String,
    /// Perturber configurations drawn per distance.
    #[arg(long, value_name = "N", default_value_t = 64)]
    pub trials: usize,
    /// False-alarm probability that defines a detection (as in `latens infer`).
    #[arg(long, value_name = "P", default_value_t = 0.0027)]
    pub fap: f64,
    /// Only perturbers on orbits inclined at most DEG degrees to the ecliptic
    /// (prograde or retrograde), with the threshold from a search of the same
    /// orbits, as `latens infer --near-ecliptic` (default: isotropic).
    #[arg(long, value_name = "DEG")]
    pub near_ecliptic: Option<f64>,
    /// Null simulations for the detection threshold.
    #[arg(long, value_name = "N", default_value_t = 1000)]
    pub nulls: usize,
    /// Directions of the search grid whose false alarms set the threshold
    /// (as `latens infer --directions`).
    #[arg(long, value_name = "N", default_value_t = 768)]
    pub directions: usize,
    /// Distances of that search grid (as `latens infer --distances`).
    #[arg(long, value_name = "N", default_value_t = 20)]
    pub distances: usize,
    /// Treat --obs as a planned schedule (epoch_utc, sigmas, optional site;
    /// no positions needed) and compute the positions from this orbit: the
    /// fit.json of `latens residuals`. For designing a survey before it is
    /// observed.
    #[arg(long, value_name = "FIT_JSON")]
    pub orbit: Option<PathBuf>,
    /// Compute only shard K of N (every N-th hypothesis of the threshold's
    /// null simulations, every N-th distance's trials), for a job array;
    /// `latens sensitivity merge` joins the shards (same numbers as an
    /// unsharded run).
    #[arg(long, value_name = "K/N")]
    pub shard: Option<String>,
    /// Also map where on the sky a perturber at each distance would be
    /// detected: the masses detected with 50% and 90% probability in each
    /// HEALPix cell of this order (0: 12 cells, 1: 48, 2: 192, 3: 768), in
    /// sensitivity_sky.csv and its chart (within the --near-ecliptic band
    /// when one is given).
    #[arg(long, value_name = "ORDER")]
    pub sky_map: Option<u8>,
    /// Perturber configurations drawn in each cell of the sky map at each
    /// distance.
    #[arg(long, value_name = "N", default_value_t = 16)]
    pub sky_trials: usize,
    /// Seed of all random draws.
    #[arg(long, value_name = "N", default_value_t = 1)]
    pub seed: u64,
    /// Directory to write into.
    #[arg(long, value_name = "DIR", default_value = "output/sensitivity")]
    pub out: PathBuf,
}

#[derive(Debug, Subcommand)]
pub enum SensitivityCommand {
    /// Join shard files (sensitivity.part-K-of-N.csv) into the full map.
    Merge {
        /// Directories holding the shard files.
        #[arg(required = true)]
        dirs: Vec<PathBuf>,
        /// Directory to write the merged map into.
        #[arg(long, value_name = "DIR")]
        out: Option<PathBuf>,
    },
}

/// What every fitting command reads: observations, sites, force model, ephemeris.
#[derive(Debug, Clone, clap::Args)]
pub struct InputArgs {
    /// Observations: Latens CSV or IAU ADES (PSV or XML; see docs/formats.md).
    /// `infer` takes several tracked bodies that share one perturber:
    /// repeat --obs, or give a directory holding one file per body (.csv,
    /// .psv or .xml); each body is named after its file.
    #[arg(long, value_name = "FILE|DIR", required = true)]
    pub obs: Vec<PathBuf>,
    /// Observing sites: CSV with name, lon_deg, lat_deg, height_m (or name, lon_deg,
    /// rho_cos_phi, rho_sin_phi: geocentric parallax constants).
    #[arg(long, value_name = "FILE")]
    pub sites: Option<PathBuf>,
    /// Planets in the model, comma-separated, or `none` for a two-body orbit.
    /// Inner planets not listed are folded into the Sun.
    #[arg(long, value_name = "LIST", default_value = "jupiter,saturn,uranus,neptune")]
    pub known: String,
    /// `builtin` (VSOP87A, no file needed) or a JPL SPK file (types 2 and 3).
    #[arg(long, value_name = "builtin|FILE", default_value = "builtin")]
    pub ephemeris: String,
    /// The tracked body's own mass: a planet's name (its GM is used, e.g.
    /// `uranus`) or a number of Earth masses; 0 (the default) for a small
    /// body. With several bodies, `BODY=MASS` gives one body its own
    /// (repeat it; a plain value applies to the others); a planet named so
    /// is left out of its own model's --known planets, the others still
    /// feel it.
    #[arg(long, value_name = "[BODY=]NAME|EARTH_MASSES")]
    pub tracked_mass: Vec<String>,
    /// What the tracked body is: planet, dwarf-planet, small-body or comet
    /// (decides which alternative explanations are possible). Default: from
    /// --tracked-mass (a named planet is a planet, otherwise a small body).
    /// With several bodies, `BODY=KIND` gives one body its own (repeat it).
    #[arg(long, value_name = "[BODY=]KIND")]
    pub kind: Vec<String>,
}

/// A plain value (for every body not named) and `BODY=VALUE` entries.
type Entries<'a> = (Option<&'a str>, Vec<(&'a str, &'a str)>);

/// `--tracked-mass` or `--kind` entries: a plain value (for every body
/// not named) and `BODY=VALUE` ones.
fn split_entries<'a>(option: &str, entries: &'a [String]) -> Result<Entries<'a>, String> {
    let mut plain = None;
    let mut named: Vec<(&str, &str)> = Vec::new();
    for e in entries {
        match e.split_once('=') {
            Some((body, value)) => {
                let body = body.trim();
                if body.is_empty() {
                    return Err(format!("{option} {e}: a body's name is missing before `=`"));
                }
                if named.iter().any(|(b, _)| *b == body) {
                    return Err(format!("{option}: {body} is given twice"));
                }
                named.push((body, value.trim()));
            }
            None if plain.is_some() => {
                return Err(format!(
                    "{option}: two values for every body ({} and {e}); give one, and BODY=VALUE for a body of its own",
                    plain.unwrap_or_default()
                ));
            }
            None => plain = Some(e.as_str()),
        }
    }
    Ok((plain, named))
}

impl InputArgs {
    /// The tracked body for every body not named by a `BODY=` entry; the
    /// named ones' values are checked too (before any work).
    pub fn tracked(&self) -> Result<latens::dynamics::TrackedBody, String> {
        for (option, entries) in [("--tracked-mass", &self.tracked_mass), ("--kind", &self.kind)] {
            for (body, _) in split_entries(option, entries)?.1 {
                self.tracked_for(body)?;
            }
        }
        self.tracked_for("")
    }

    /// The tracked body `name` (its `BODY=` entries, else the plain ones).
    pub fn tracked_for(&self, name: &str) -> Result<latens::dynamics::TrackedBody, String> {
        let (mass, masses) = split_entries("--tracked-mass", &self.tracked_mass)?;
        let (kind, kinds) = split_entries("--kind", &self.kind)?;
        let own = |list: &[(&str, &'_ str)]| list.iter().find(|(b, _)| *b == name).map(|(_, v)| v.to_string());
        let mass = own(&masses).or(mass.map(str::to_string)).unwrap_or_else(|| "0".into());
        let kind = own(&kinds).or(kind.map(str::to_string));
        latens::dynamics::TrackedBody::parse(&mass, kind.as_deref())
            .map_err(|e| if name.is_empty() { e } else { format!("{name}: {e}") })
    }

    /// Whether any `BODY=` entry is given.
    pub fn has_named_bodies(&self) -> bool {
        self.tracked_mass.iter().chain(&self.kind).any(|e| e.contains('='))
    }

    /// Every `BODY=` entry names one of `bodies` (checked once they are
    /// read, before any fit).
    pub fn check_named_bodies(&self, bodies: &[&str]) -> Result<(), String> {
        for (option, entries) in [("--tracked-mass", &self.tracked_mass), ("--kind", &self.kind)] {
            let (_, named) = split_entries(option, entries)?;
            for (b, _) in named {
                if !bodies.contains(&b) {
                    return Err(format!("{option} {b}=...: no body is called {b} (the bodies: {})", bodies.join(", ")));
                }
            }
        }
        Ok(())
    }

    /// The observation files: each --obs, directories expanded to their
    /// .csv, .psv and .xml files in name order.
    pub fn obs_files(&self) -> Result<Vec<PathBuf>, String> {
        let mut out = Vec::new();
        for p in &self.obs {
            if p.is_dir() {
                let entries = std::fs::read_dir(p).map_err(|e| format!("--obs {}: cannot read: {e}", p.display()))?;
                let mut files: Vec<PathBuf> = entries
                    .filter_map(|e| e.ok().map(|e| e.path()))
                    .filter(|f| {
                        f.is_file()
                            && f.extension()
                                .is_some_and(|x| ["csv", "psv", "xml"].iter().any(|e| x.eq_ignore_ascii_case(e)))
                    })
                    .collect();
                files.sort();
                if files.is_empty() {
                    return Err(format!("--obs {}: the directory holds no .csv, .psv or .xml file", p.display()));
                }
                out.extend(files);
            } else {
                out.push(p.clone());
            }
        }
        Ok(out)
    }

    /// The one observation file of a command that takes one body.
    pub fn single_obs(&self, command: &str) -> Result<PathBuf, String> {
        match self.obs_files()?.as_slice() {
            [one] => Ok(one.clone()),
            more => Err(format!(
                "`latens {command}` takes one tracked body; --obs gives {} files (only `infer` searches several bodies jointly)",
                more.len()
            )),
        }
    }
}

#[derive(Debug, clap::Args)]
pub struct InferArgs {
    #[command(flatten)]
    pub input: InputArgs,
    /// When to give the perturber's sky position (ISO UTC or `JD <days> TDB`);
    /// default: the last observation.
    #[arg(long, value_name = "DATE")]
    pub search_epoch: Option<String>,
    /// Perturber mass range searched, Earth masses.
    #[arg(long, value_name = "MIN:MAX", default_value = "0.01:5000")]
    pub mass_earth: String,
    /// Perturber heliocentric distance range searched, au.
    #[arg(long, value_name = "MIN:MAX", default_value = "5:500")]
    pub distance_au: String,
    /// Null simulations for the false-alarm probability.
    #[arg(long, value_name = "N", default_value_t = 1000)]
    pub nulls: usize,
    /// The false-alarm probability below which a perturber counts as
    /// detected (0.0027 is 3 sigma; 5.7e-7, 5 sigma, needs 1.8 million
    /// nulls). At least 1/P null simulations are needed.
    #[arg(long, value_name = "P", default_value_t = latens::pipeline::DETECTION_FAP)]
    pub fap_level: f64,
    /// Directions of the grid (equal-area over the whole sky, or over the
    /// band of --near-ecliptic).
    #[arg(long, value_name = "N", default_value_t = 768)]
    pub directions: usize,
    /// A direction prior: search and sample only perturbers on orbits
    /// inclined at most DEG degrees to the ecliptic (or at least 180 - DEG,
    /// retrograde), which keep within DEG of it. The null simulations
    /// search the same orbits. Default: every orbit.
    #[arg(long, value_name = "DEG")]
    pub near_ecliptic: Option<f64>,
    /// Log-spaced distances of the grid.
    #[arg(long, value_name = "N", default_value_t = 20)]
    pub distances: usize,
    /// Seed of the null simulations: the same seed gives the same files.
    #[arg(long, value_name = "N", default_value_t = 1)]
    pub seed: u64,
    /// Directory to write into (created if missing).
    #[arg(long, value_name = "DIR", default_value = "output/infer")]
    pub out: PathBuf,
    /// Skip the posterior sampling (grid search and refinement only).
    #[arg(long)]
    pub no_posterior: bool,
    /// Skip the confidence regions of the profile likelihood over the sky
    /// (confidence50/90.fits), which lean on no prior volume: saves a few
    /// seconds per body; the credible regions are made as before.
    #[arg(long)]
    pub no_confidence_region: bool,
    /// Steps of the posterior sampler (the first 40% are burn-in).
    #[arg(long, value_name = "N", default_value_t = 1500)]
    pub posterior_steps: usize,
    /// Walkers per temperature (even, at least 14).
    #[arg(long, value_name = "N", default_value_t = 32)]
    pub walkers: usize,
    /// Rungs of the temperature ladder, the prior rung included.
    #[arg(long, value_name = "N", default_value_t = 16)]
    pub temperatures: usize,
    /// Independent sampler runs (for the split R-hat; at least 2 to check convergence).
    #[arg(long, value_name = "N", default_value_t = 2)]
    pub runs: usize,
    /// Largest perturber eccentricity the prior allows (eccentricity uniform from 0 to it).
    #[arg(long, value_name = "E", default_value_t = 0.6)]
    pub max_eccentricity: f64,
    /// Prior width of the known planets' GM offsets, as a multiple of their published uncertainties.
    #[arg(long, value_name = "X", default_value_t = 1000.0)]
    pub gm_prior_inflation: f64,
    /// Prior width of each non-gravitational component at 1 au, au/day^2
    /// (scaled by 1/r^2). Default from --kind: none for planets and dwarf
    /// planets (nothing outgasses or recoils measurably), 1e-13 for small
    /// bodies (thermal recoil), 1e-8 for comets (outgassing).
    #[arg(long, value_name = "A")]
    pub nongrav_prior: Option<f64>,
    /// Prior width of each systematic astrometric offset, arcsec.
    #[arg(long, value_name = "ARCSEC", default_value_t = 0.2)]
    pub offset_prior: f64,
    /// Continue an interrupted run from DIR/checkpoint.json (DIR becomes the output directory).
    #[arg(long, value_name = "DIR")]
    pub resume: Option<PathBuf>,
    /// Set aside observations whose residual exceeds this many sigma (in the
    /// two coordinates together) against the best model, the perturber
    /// included when one is detected; `off` keeps every observation.
    #[arg(long, value_name = "SIGMA|off", default_value = "10")]
    pub reject_sigma: String,
    /// Observations to leave out by hand: line numbers of the observation
    /// file, comma-separated (ranges as A-B).
    #[arg(long, value_name = "LINES")]
    pub exclude: Option<String>,
    /// Start the reference fit from this orbit (a fit.json of `latens
    /// residuals`) instead of Gauss's method: for arcs where no preliminary
    /// orbit is found. One tracked body only.
    #[arg(long, value_name = "FIT_JSON")]
    pub start_orbit: Option<PathBuf>,
    /// Observations to leave out by date: FROM..TO (UTC dates or times,
    /// inclusive); repeat for several ranges.
    #[arg(long, value_name = "FROM..TO")]
    pub exclude_dates: Vec<String>,
    /// Observations to leave out by site code; repeat for several sites.
    #[arg(long, value_name = "SITE")]
    pub exclude_site: Vec<String>,
    /// The truth.json of `latens simulate`: mark the true perturber (mass,
    /// distance, place) on the posterior and search charts. For simulations;
    /// the fit never sees it.
    #[arg(long, value_name = "TRUTH_JSON")]
    pub truth: Option<PathBuf>,
}

#[derive(Debug, clap::Args)]
pub struct ResidualsArgs {
    #[command(flatten)]
    pub input: InputArgs,
    /// Reference epoch of the orbit (ISO UTC or `JD <days> TDB`); default: mid-arc,
    /// or the starting orbit's epoch.
    #[arg(long, value_name = "DATE")]
    pub epoch: Option<String>,
    /// Start the fit from this orbit (a fit.json, e.g. of an earlier run or
    /// a shorter arc) instead of Gauss's method: for arcs where no
    /// preliminary orbit is found.
    #[arg(long, value_name = "FIT_JSON")]
    pub start_orbit: Option<PathBuf>,
    /// Directory to write into (created if missing).
    #[arg(long, value_name = "DIR", default_value = "output/residuals")]
    pub out: PathBuf,
}

#[derive(Debug, clap::Args)]
pub struct DemoArgs {
    /// Directory to write into (created if missing).
    #[arg(long, value_name = "DIR", default_value = "output/demo")]
    pub out: PathBuf,
    /// The noise seed of the simulated surveys (and of the searches and
    /// samplers that follow), instead of the scenarios' own: another
    /// realisation of the same sky.
    #[arg(long, value_name = "N")]
    pub seed: Option<u64>,
    /// Run steps 1 to 4 on this scenario (TOML, as `latens simulate` reads)
    /// instead of the built-in one; the joint section is left out.
    #[arg(long, value_name = "SCENARIO_TOML")]
    pub scenario: Option<PathBuf>,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn demo_takes_an_output_directory() {
        let a = Args::try_parse_from(["latens", "demo", "--out", "x/y"]).unwrap();
        let Command::Demo(d) = a.command else { panic!("not demo") };
        assert_eq!(d.out, PathBuf::from("x/y"));
        assert_eq!((d.seed, d.scenario), (None, None));
        let a = Args::try_parse_from(["latens", "demo", "--seed", "7", "--scenario", "s.toml"]).unwrap();
        let Command::Demo(d) = a.command else { panic!("not demo") };
        assert_eq!((d.seed, d.scenario), (Some(7), Some(PathBuf::from("s.toml"))));
        let a = Args::try_parse_from(["latens", "demo"]).unwrap();
        let Command::Demo(d) = a.command else { panic!("not demo") };
        assert_eq!(d.out, PathBuf::from("output/demo"));
    }

    #[test]
    fn residuals_needs_observations_and_has_defaults() {
        assert!(Args::try_parse_from(["latens", "residuals"]).is_err());
        let a = Args::try_parse_from(["latens", "residuals", "--obs", "o.csv"]).unwrap();
        let Command::Residuals(r) = a.command else { panic!("not residuals") };
        assert_eq!(r.input.known, "jupiter,saturn,uranus,neptune");
        assert_eq!(r.input.ephemeris, "builtin");
    }

    #[test]
    fn unknown_subcommands_are_refused() {
        assert!(Args::try_parse_from(["latens", "frobnicate"]).is_err());
    }

    #[test]
    fn clap_definition_is_consistent() {
        use clap::CommandFactory;
        Args::command().debug_assert();
    }
}
