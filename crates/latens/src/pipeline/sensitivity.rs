//! Survey sensitivity: which perturber masses at which distances the
//! observations (or a planned schedule) would reveal, at the detection
//! threshold `detect` uses for these very data.

use super::{PipelineError, Study};
use crate::perturber::search::SearchSettings;
use crate::perturber::sensitivity::{Cell, SensitivitySettings, compute_cells, probability_grid};
use crate::perturber::{LinearKernel, SignalKernel, grid_search};
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
        if let Some((k, n)) = self.shard
            && (n == 0 || k == 0 || k > n)
        {
            return Err(PipelineError::Input(format!("--shard K/N needs 1 <= K <= N, got {k}/{n}")));
        }
        Ok(())
    }

    /// The (mass index, distance index) cells this plan computes.
    pub fn cells(&self) -> Vec<(usize, usize)> {
        let (nm, nd) = (self.map.n_masses, self.map.n_distances);
        let all = (0..nd).flat_map(|d| (0..nm).map(move |m| (m, d)));
        match self.shard {
            Some((k, n)) => all.enumerate().filter(|(i, _)| i % n == k - 1).map(|(_, c)| c).collect(),
            None => all.collect(),
        }
    }
}

/// A sensitivity map (or one shard of it).
#[derive(Clone, Debug)]
pub struct SensitivityMap {
    /// The detection threshold on the chi-square drop for these data.
    pub threshold_delta_chi2: f64,
    pub cells: Vec<Cell>,
    pub settings: SensitivitySettings,
}

impl SensitivityMap {
    /// Masses (rows), distances (columns) and the detection probability
    /// (NaN for cells outside this shard).
    pub fn grid(&self) -> (ndarray::Array1<f64>, ndarray::Array1<f64>, ndarray::Array2<f64>) {
        probability_grid(&self.settings, &self.cells)
    }
}

/// Maps the detection probability over mass and distance: the reference
/// fit, the kernel, the threshold from the search's maxima on noise alone,
/// then the cells. A study of several bodies maps what they reveal
/// together: their kernels at one common epoch side by side (the joint
/// kernel of [`super::detect_joint`]), the threshold from the joint
/// search's nulls, and each trial's signal amplitude over all bodies.
pub fn sensitivity(
    study: &Study,
    plan: &SensitivityPlan,
    observer: &dyn Observer,
) -> Result<SensitivityMap, PipelineError> {
    plan.check()?;
    if study.bodies.len() > 1 {
        let (_, _, kernel) = super::joint::fit_bodies(study, observer)?;
        let zeros = vec![0.0; kernel.n_residuals()];
        return Ok(map_with(&kernel.with_residuals(&zeros), plan, observer));
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
    Ok(map_with(&kernel.with_residuals(&zeros), plan, observer))
}

/// The map of a plan through any kernel (one body's or several bodies').
fn map_with<K: SignalKernel + ?Sized>(kernel: &K, plan: &SensitivityPlan, observer: &dyn Observer) -> SensitivityMap {
    // The detection threshold of `detect` for these data: the (1 - fap)
    // quantile of its search maxima on noise alone (the null simulations
    // draw their own noise: the kernel comes with zero residuals, so the
    // search of the data themselves costs nothing).
    observer.note("Calibrating the detection threshold with null simulations of the search...");
    let nulls = grid_search(kernel, &plan.search, &crate::progress::Quiet);
    let mut maxima = nulls.null_maxima.clone();
    maxima.sort_by(f64::total_cmp);
    let q = ((1.0 - plan.false_alarm_probability) * maxima.len() as f64).ceil() as usize;
    let threshold = maxima[q.clamp(1, maxima.len()) - 1];
    let settings = SensitivitySettings { min_separation_au: plan.search.min_separation_au, ..plan.map.clone() };
    let cells = compute_cells(kernel, &settings, threshold, &plan.cells(), observer);
    SensitivityMap { threshold_delta_chi2: threshold, cells, settings }
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
