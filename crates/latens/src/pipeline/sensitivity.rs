//! Survey sensitivity: which perturber masses at which distances the
//! observations (or a planned schedule) would reveal, at the detection
//! threshold `detect` uses for these very data.

use std::path::{Path, PathBuf};

use super::{PipelineError, Study};
use crate::io::results::SensitivityFile;
use crate::io::write_atomically;
use crate::perturber::search::{NullShare, SearchSettings, null_maxima_share};
use crate::perturber::sensitivity::{
    Cell, SensitivitySettings, SkyCellMass, SkyPlan, SkyTrials, cells_from_amplitudes, probability_grid,
    sky_amplitudes, sky_cells, trial_amplitudes_at,
};
use crate::perturber::{LinearKernel, SignalKernel};
use crate::progress::Observer;
use crate::reference::{ReferenceSettings, fit_reference_orbit, observing_geometry};

/// How the sensitivity map is made.
#[derive(Clone, Debug)]
pub struct SensitivityPlan {
    /// The map: mass and distance ranges, grid, trials per distance, the
    /// direction band, the seed.
    pub map: SensitivitySettings,
    /// The false-alarm probability that defines a detection.
    pub false_alarm_probability: f64,
    /// The search whose noise-only maxima set the threshold (grid and
    /// number of null simulations).
    pub search: SearchSettings,
    /// Only the cells of shard K of N (1-based), for job arrays.
    pub shard: Option<(usize, usize)>,
    /// Also map where on the sky (within the band, when one is given) a
    /// perturber at each distance would be detected: HEALPix cells and
    /// trials per cell.
    pub sky: Option<SkyPlan>,
}

impl SensitivityPlan {
    /// Checks the plan before any work.
    pub fn check(&self) -> Result<(), PipelineError> {
        let m = &self.map;
        let bad = |t: &str| Err(PipelineError::Input(t.into()));
        if !(m.mass_earth.0 > 0.0 && m.mass_earth.1 > m.mass_earth.0 && m.distance_au.0 > 0.0)
            || m.distance_au.1 <= m.distance_au.0
        {
            return bad("--mass-earth and --distance-au need 0 < MIN < MAX");
        }
        if m.n_masses < 2
            || m.n_distances < 2
            || m.n_trials < 1
            || !(self.false_alarm_probability > 0.0 && self.false_alarm_probability < 1.0)
        {
            return bad("--grid needs at least 2:2, --trials at least 1, --fap in (0, 1)");
        }
        if self.search.n_directions < 12 || self.search.n_distances < 2 || self.search.n_null < 20 {
            return bad("--directions >= 12, --distances >= 2 and --nulls >= 20 are needed");
        }
        if let Err(e) = self.search.check_band() {
            return Err(PipelineError::Input(format!("--near-ecliptic: {e}")));
        }
        if let Some(b) = m.near_ecliptic_deg
            && self.search.near_ecliptic_deg != Some(b)
        {
            return bad("the map's band and its threshold search's band must agree");
        }
        if let Some(sky) = self.sky
            && (sky.order > 3 || sky.trials_per_cell == 0)
        {
            return bad("--sky-map needs a HEALPix order of 0 to 3 and --sky-trials at least 1");
        }
        if let Some((k, n)) = self.shard
            && (n == 0 || k == 0 || k > n)
        {
            return Err(PipelineError::Input(format!("--shard K/N needs 1 <= K <= N, got {k}/{n}")));
        }
        Ok(())
    }

    /// The distance indices whose trials shard K of N draws (every N-th,
    /// starting at K - 1; all of them unsharded).
    pub fn distance_indices(&self) -> Vec<usize> {
        let (k, n) = self.shard.unwrap_or((1, 1));
        (0..self.map.n_distances).filter(|d| d % n == k - 1).collect()
    }
}

/// A sensitivity map.
#[derive(Clone, Debug)]
pub struct SensitivityMap {
    /// The detection threshold on the chi-square drop for these data.
    pub threshold_delta_chi2: f64,
    pub cells: Vec<Cell>,
    pub settings: SensitivitySettings,
    /// The sky map (empty unless the plan asked for one): per distance and
    /// HEALPix cell, the masses detected with 50% and 90% probability.
    pub sky: Vec<SkyCellMass>,
}

impl SensitivityMap {
    /// Masses (rows), distances (columns) and the detection probability.
    pub fn grid(&self) -> (ndarray::Array1<f64>, ndarray::Array1<f64>, ndarray::Array2<f64>) {
        probability_grid(&self.settings, &self.cells)
    }
}

/// Shard K of N of a sensitivity map: its slice of the threshold search's
/// null simulations (every N-th hypothesis of the grid, the same noise in
/// every shard) and the trials of every N-th distance. The detection
/// threshold is known only once all shards are in: [`merge_sensitivity`].
#[derive(Clone, Debug, PartialEq)]
pub struct SensitivityShare {
    pub settings: SensitivitySettings,
    pub nulls: NullShare,
    /// Per distance index of this shard, each trial's noise-free square
    /// root of the chi-square drop per Earth mass of the perturber (the
    /// drop of a perturber of m Earth masses is (m a)^2).
    pub amplitudes: Vec<(usize, Vec<f64>)>,
    /// The sky map's trials at this shard's distances (distance index,
    /// HEALPix cell, each trial's amplitude per Earth mass) and its plan.
    pub sky: Option<(SkyPlan, SkyTrials)>,
}

/// Maps the detection probability over mass and distance: the reference
/// fit, the kernel, the threshold from the search's maxima on noise alone,
/// then the cells. A study of several bodies maps what they reveal
/// together: their kernels at one common epoch side by side (the joint
/// kernel of [`super::detect_joint`]), the threshold from the joint
/// search's nulls, and each trial's signal amplitude over all bodies.
/// The plan's shard is ignored: the whole map is made (in one piece, the
/// same numbers as its shards merged).
pub fn sensitivity(
    study: &Study,
    plan: &SensitivityPlan,
    observer: &dyn Observer,
) -> Result<SensitivityMap, PipelineError> {
    let whole = SensitivityPlan { shard: None, ..plan.clone() };
    let share = sensitivity_share(study, &whole, observer)?;
    merge_sensitivity(&[share], plan.false_alarm_probability)
}

/// Shard K of N (the plan's; 1 of 1 when none) of a sensitivity map.
/// Every shard fits every body and builds the kernels (a few per cent of
/// a shard's work on large populations); the hypotheses of the threshold
/// search, its costly part, are split evenly.
pub fn sensitivity_share(
    study: &Study,
    plan: &SensitivityPlan,
    observer: &dyn Observer,
) -> Result<SensitivityShare, PipelineError> {
    plan.check()?;
    if study.bodies.len() > 1 {
        let (_, _, kernel) = super::joint::fit_bodies(study, observer)?;
        let zeros = vec![0.0; kernel.n_residuals()];
        return Ok(share_with(&kernel.with_residuals(&zeros), plan, observer));
    }
    let arc = study.single()?;
    let ephemeris = study.ephemeris.as_ref();
    observer.note("Fitting the reference orbit and building the kernel...");
    let null =
        fit_reference_orbit(&arc.observations, &arc.sites, &arc.model, ephemeris, &ReferenceSettings::default(), None)
            .map_err(PipelineError::failed("reference fit"))?;
    let geometry = observing_geometry(&arc.observations, &arc.sites, ephemeris)
        .map_err(PipelineError::failed("observing geometry"))?;
    let kernel = LinearKernel::build(&null, &arc.observations, geometry, &arc.model, ephemeris)
        .map_err(PipelineError::failed("linear kernel"))?;
    let zeros = vec![0.0; kernel.n_residuals()];
    Ok(share_with(&kernel.with_residuals(&zeros), plan, observer))
}

/// One shard of a plan through any kernel (one body's or several bodies').
fn share_with<K: SignalKernel + ?Sized>(
    kernel: &K,
    plan: &SensitivityPlan,
    observer: &dyn Observer,
) -> SensitivityShare {
    // The detection threshold of `detect` for these data: the (1 - fap)
    // quantile of its search maxima on noise alone (the kernel comes with
    // zero residuals: only the null simulations are run).
    observer.note("Calibrating the detection threshold with null simulations of the search...");
    let nulls = null_maxima_share(kernel, &plan.search, plan.shard.unwrap_or((1, 1)), observer);
    let settings = SensitivitySettings { min_separation_au: plan.search.min_separation_au, ..plan.map.clone() };
    let amplitudes = trial_amplitudes_at(kernel, &settings, &plan.distance_indices(), observer);
    let sky = plan.sky.map(|sky_plan| {
        use rayon::prelude::*;
        let trials: SkyTrials = plan
            .distance_indices()
            .par_iter()
            .flat_map_iter(|&di| {
                sky_amplitudes(kernel, &settings, &sky_plan, di).into_iter().map(move |(cell, a)| (di, cell, a))
            })
            .collect();
        (sky_plan, trials)
    });
    SensitivityShare { settings, nulls, amplitudes, sky }
}

/// The whole map from all its shards (in any order): the threshold from
/// the null maxima over every shard's hypotheses, then every cell from
/// its distance's trials. Refuses shards of different maps, a missing or
/// repeated shard, and distances missing or drawn twice.
pub fn merge_sensitivity(
    shares: &[SensitivityShare],
    false_alarm_probability: f64,
) -> Result<SensitivityMap, PipelineError> {
    let bad = |t: String| Err(PipelineError::Input(t));
    let Some(first) = shares.first() else { return bad("no shards to merge".into()) };
    if shares.iter().any(|s| s.settings != first.settings) {
        return bad("the shards were made with different map settings".into());
    }
    let nulls: Vec<&NullShare> = shares.iter().map(|s| &s.nulls).collect();
    let Some(maxima) = NullShare::combine(&nulls) else {
        let have: Vec<String> = nulls.iter().map(|s| format!("{}/{}", s.shard.0, s.shard.1)).collect();
        return bad(format!(
            "the shards must be 1/N to N/N of one N, each with the same number of null simulations; got {}",
            have.join(", ")
        ));
    };
    let mut amplitudes: Vec<(usize, Vec<f64>)> = shares.iter().flat_map(|s| s.amplitudes.iter().cloned()).collect();
    amplitudes.sort_by_key(|a| a.0);
    let nd = first.settings.n_distances;
    if amplitudes.len() != nd || amplitudes.iter().enumerate().any(|(i, a)| a.0 != i) {
        return bad(format!("the shards hold the trials of {} distances for a grid of {nd}", amplitudes.len()));
    }
    let threshold = threshold_from_maxima(&maxima, false_alarm_probability);
    let cells = cells_from_amplitudes(&first.settings, threshold, &amplitudes);
    let sky = match &first.sky {
        None => Vec::new(),
        Some((sky_plan, _)) => {
            if shares.iter().any(|s| s.sky.as_ref().map(|x| x.0) != Some(*sky_plan)) {
                return bad("the shards were made with different sky maps (or some without one)".into());
            }
            let mut trials: SkyTrials =
                shares.iter().flat_map(|s| s.sky.as_ref().map(|x| x.1.clone()).unwrap_or_default()).collect();
            trials.sort_by_key(|t| (t.0, t.1));
            sky_cells(&first.settings, sky_plan.order, threshold, &trials)
        }
    };
    Ok(SensitivityMap { threshold_delta_chi2: threshold, cells, settings: first.settings.clone(), sky })
}

/// The header of a shard's CSV: each trial's amplitude.
const SHARD_HEADER: &str = "distance_index,distance_au,trial,amplitude_per_earth_mass";
/// The header of a shard's sky-map trials.
const SKY_HEADER: &str = "distance_index,cell,trial,amplitude_per_earth_mass";

impl SensitivityPlan {
    /// What sensitivity.json (or a shard's JSON) records of this plan for
    /// the bodies `bodies` (no threshold yet).
    pub fn file(&self, bodies: Vec<String>) -> SensitivityFile {
        let m = &self.map;
        SensitivityFile {
            threshold_delta_chi2: None,
            false_alarm_probability: self.false_alarm_probability,
            seed: m.seed,
            mass_earth: [m.mass_earth.0, m.mass_earth.1],
            distance_au: [m.distance_au.0, m.distance_au.1],
            grid: [m.n_masses, m.n_distances],
            trials: m.n_trials,
            near_ecliptic_deg: m.near_ecliptic_deg,
            nulls: self.search.n_null,
            directions: self.search.n_directions,
            distances: self.search.n_distances,
            min_separation_au: self.search.min_separation_au,
            bodies,
            shard: self.shard.map(|(k, n)| [k, n]),
            sky_order: self.sky.map(|p| p.order),
            sky_trials: self.sky.map(|p| p.trials_per_cell),
            hypotheses: None,
            distance_indices: None,
            null_maxima: None,
        }
    }
}

/// A shard's sky-map trials (`sensitivity_sky.part-K-of-N.csv`), grouped
/// by distance index and cell; every distance must be one of `indices`.
fn read_sky_trials(path: &Path, indices: &[usize]) -> Result<SkyTrials, PipelineError> {
    let bad = |t: String| PipelineError::Input(t);
    let text = std::fs::read_to_string(path).map_err(|e| bad(format!("{}: {e}", path.display())))?;
    let mut out: SkyTrials = Vec::new();
    for (i, line) in text.lines().enumerate() {
        if i == 0 && line == SKY_HEADER || line.trim().is_empty() {
            continue;
        }
        let here = |what: &str| bad(format!("{}:{}: {what}", path.display(), i + 1));
        let f: Vec<&str> = line.split(',').collect();
        if f.len() != 4 {
            return Err(here(&format!("expected 4 fields ({SKY_HEADER}), found {}", f.len())));
        }
        let di: usize = f[0].parse().map_err(|_| here("field distance_index is not an index"))?;
        let cell: u64 = f[1].parse().map_err(|_| here("field cell is not a HEALPix index"))?;
        let a: f64 = f[3]
            .parse()
            .ok()
            .filter(|a: &f64| a.is_finite())
            .ok_or_else(|| here("field amplitude_per_earth_mass is not a number"))?;
        if !indices.contains(&di) {
            return Err(here(&format!("distance index {di} is not among the shard's")));
        }
        match out.last_mut() {
            Some(last) if last.0 == di && last.1 == cell => last.2.push(a),
            _ => out.push((di, cell, vec![a])),
        }
    }
    Ok(out)
}

impl SensitivityShare {
    /// The file name of shard K of N (`sensitivity.part-K-of-N`, without
    /// its extension).
    pub fn stem(&self) -> String {
        format!("sensitivity.part-{}-of-{}", self.nulls.shard.0, self.nulls.shard.1)
    }

    /// The file name of the shard's sky-map trials (without extension).
    pub fn sky_stem(&self) -> String {
        format!("sensitivity_sky.part-{}-of-{}", self.nulls.shard.0, self.nulls.shard.1)
    }

    /// Writes the shard into `dir` as `sensitivity.part-K-of-N.json` (the
    /// plan's settings `about`, the shard's hypotheses, distances and null
    /// maxima) and `.csv` (each trial's amplitude); returns the two paths.
    pub fn write(&self, dir: &Path, about: &SensitivityFile) -> Result<[PathBuf; 2], PipelineError> {
        let meta = SensitivityFile {
            threshold_delta_chi2: None,
            shard: Some([self.nulls.shard.0, self.nulls.shard.1]),
            hypotheses: Some([self.nulls.n_in_shard, self.nulls.n_hypotheses]),
            distance_indices: Some(self.amplitudes.iter().map(|a| a.0).collect()),
            null_maxima: Some(self.nulls.maxima.clone()),
            ..about.clone()
        };
        let mut csv = format!("{SHARD_HEADER}\n");
        for (di, amps) in &self.amplitudes {
            let d = crate::perturber::sensitivity::grid_distance_au(&self.settings, *di);
            for (t, a) in amps.iter().enumerate() {
                csv.push_str(&format!("{di},{d},{t},{a}\n"));
            }
        }
        let json = serde_json::to_string_pretty(&meta).map_err(PipelineError::failed("shard file"))? + "\n";
        if let Some((_, trials)) = &self.sky {
            let mut sky = format!("{SKY_HEADER}\n");
            for (di, cell, amps) in trials {
                for (t, a) in amps.iter().enumerate() {
                    sky.push_str(&format!("{di},{cell},{t},{a}\n"));
                }
            }
            write_atomically(&dir.join(format!("{}.csv", self.sky_stem())), sky.as_bytes())
                .map_err(PipelineError::failed("writing a shard"))?;
        }
        let stem = self.stem();
        let paths = [dir.join(format!("{stem}.json")), dir.join(format!("{stem}.csv"))];
        write_atomically(&paths[0], json.as_bytes()).map_err(PipelineError::failed("writing a shard"))?;
        write_atomically(&paths[1], csv.as_bytes()).map_err(PipelineError::failed("writing a shard"))?;
        Ok(paths)
    }

    /// Reads every shard (`sensitivity.part-*.json` with its `.csv`) in
    /// `dirs`; refuses shards whose settings differ (naming both files) and
    /// malformed lines (naming the file, the line and the field). Returns
    /// the settings they share and the shards.
    pub fn read_dirs(dirs: &[PathBuf]) -> Result<(SensitivityFile, Vec<SensitivityShare>), PipelineError> {
        let bad = |t: String| PipelineError::Input(t);
        let mut common: Option<(SensitivityFile, PathBuf)> = None;
        let mut shares = Vec::new();
        for dir in dirs {
            let entries = std::fs::read_dir(dir).map_err(|e| bad(format!("{}: {e}", dir.display())))?;
            let mut parts: Vec<PathBuf> = entries
                .filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|p| {
                    p.file_name().is_some_and(|n| n.to_string_lossy().starts_with("sensitivity.part-"))
                        && p.extension().is_some_and(|x| x == "json")
                })
                .collect();
            parts.sort();
            for side in parts {
                let meta: SensitivityFile = crate::io::results::read_json(&side).map_err(bad)?;
                let name = side.display();
                let same = meta.common();
                match &common {
                    None => common = Some((same, side.clone())),
                    Some((first, path)) if *first != same => {
                        return Err(bad(format!("{name}: made with other settings than {}", path.display())));
                    }
                    _ => {}
                }
                let (Some([k, n]), Some(hyp), Some(maxima), Some(indices)) =
                    (meta.shard, meta.hypotheses, meta.null_maxima.clone(), meta.distance_indices.clone())
                else {
                    return Err(bad(format!(
                        "{name}: not a shard of the present format (fields `shard`, `hypotheses`, `null_maxima`, `distance_indices`)"
                    )));
                };
                let table = side.with_extension("csv");
                let text = std::fs::read_to_string(&table).map_err(|e| bad(format!("{}: {e}", table.display())))?;
                let mut amplitudes: Vec<(usize, Vec<f64>)> = indices.iter().map(|&d| (d, Vec::new())).collect();
                for (i, line) in text.lines().enumerate() {
                    if i == 0 && line == SHARD_HEADER || line.trim().is_empty() {
                        continue;
                    }
                    let here = |what: String| bad(format!("{}:{}: {what}", table.display(), i + 1));
                    let f: Vec<&str> = line.split(',').collect();
                    if f.len() != 4 {
                        return Err(here(format!("expected 4 fields ({SHARD_HEADER}), found {}", f.len())));
                    }
                    let di: usize = f[0].parse().map_err(|_| here("field distance_index is not an index".into()))?;
                    let a: f64 = f[3]
                        .parse()
                        .ok()
                        .filter(|a: &f64| a.is_finite())
                        .ok_or_else(|| here("field amplitude_per_earth_mass is not a number".into()))?;
                    match amplitudes.iter_mut().find(|x| x.0 == di) {
                        Some(x) => x.1.push(a),
                        None => return Err(here(format!("distance index {di} is not among the shard's"))),
                    }
                }
                let settings = SensitivitySettings {
                    mass_earth: (meta.mass_earth[0], meta.mass_earth[1]),
                    distance_au: (meta.distance_au[0], meta.distance_au[1]),
                    n_masses: meta.grid[0],
                    n_distances: meta.grid[1],
                    n_trials: meta.trials,
                    near_ecliptic_deg: meta.near_ecliptic_deg,
                    seed: meta.seed,
                    min_separation_au: meta.min_separation_au,
                };
                let sky = match (meta.sky_order, meta.sky_trials) {
                    (Some(order), Some(trials_per_cell)) => {
                        let path = dir.join(format!("sensitivity_sky.part-{k}-of-{n}.csv"));
                        Some((SkyPlan { order, trials_per_cell }, read_sky_trials(&path, &indices)?))
                    }
                    _ => None,
                };
                shares.push(SensitivityShare {
                    settings,
                    nulls: NullShare {
                        shard: (k, n),
                        maxima,
                        n_hypotheses: hyp[1],
                        n_in_shard: hyp[0],
                        subspace_dimension: 0,
                        subspace_energy: f64::NAN,
                    },
                    amplitudes,
                    sky,
                });
            }
        }
        match common {
            Some((meta, _)) => Ok((meta, shares)),
            None => Err(bad("no sensitivity.part-*.json files in the given directories".into())),
        }
    }
}

/// The (1 - fap) quantile of the search maxima on noise alone: the
/// chi-square drop the search exceeds by chance with probability fap.
pub fn threshold_from_maxima(maxima: &[f64], false_alarm_probability: f64) -> f64 {
    let mut m = maxima.to_vec();
    m.sort_by(f64::total_cmp);
    if m.is_empty() {
        return 0.0;
    }
    let q = ((1.0 - false_alarm_probability) * m.len() as f64).ceil() as usize;
    m[q.clamp(1, m.len()) - 1]
}

impl Study {
    /// Puts the observations of body `index` on the orbit with heliocentric
    /// ICRF `state` at `epoch_tdb_days` (noise-free places a planned survey
    /// would measure), for the sensitivity of a schedule.
    pub fn place_on_orbit(&mut self, index: usize, epoch_tdb_days: f64, state: &[f64; 6]) -> Result<(), PipelineError> {
        let Some(arc) = self.bodies.get_mut(index) else {
            return Err(PipelineError::Input(format!("the study has no body {index}")));
        };
        // The orbit's epoch may lie far from the schedule (a survey planned
        // years after the fit): the planets must cover both.
        let covering = self.source.for_arc_and(&arc.model, &arc.observations, &[epoch_tdb_days])?;
        let ephemeris = covering.as_ref();
        let geometry = observing_geometry(&arc.observations, &arc.sites, ephemeris)
            .map_err(PipelineError::failed("observing geometry"))?;
        let mut orbit =
            crate::reference::OrbitModel::new(&arc.observations, geometry, epoch_tdb_days, &arc.model, ephemeris)
                .map_err(PipelineError::failed("orbit model"))?;
        let predicted = orbit.predict_settled(state).map_err(PipelineError::failed("orbit model"))?;
        drop(orbit);
        for (o, p) in arc.observations.iter_mut().zip(&predicted) {
            o.ra_rad = p.radec.ra_rad;
            o.dec_rad = p.radec.dec_rad;
        }
        Ok(())
    }
}
