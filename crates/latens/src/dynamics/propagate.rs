//! "Where are these bodies, and how do their positions depend on the initial
//! conditions, at these TDB epochs?"
//!
//! A [`Propagator`] integrates the tracked body and any perturbers from a
//! reference epoch forwards and backwards to every requested epoch, reading
//! the epochs off each step's interpolant (dense output), and optionally
//! integrates the variational equations alongside for the partial
//! derivatives of the tracked body's state with respect to its own initial
//! state and each perturber's initial state and GM.
//!
//! Step plans: with `reuse_steps`, the steps chosen by the first propagation
//! of an arc are kept and replayed by later propagations of the same arc, with
//! the known planets' positions at their nodes cached. A fitter then sees the
//! model as a smooth function of its parameters (adaptive step choices would
//! add step-to-step noise to finite differences) and pays for the ephemeris
//! once. A replayed step whose error estimate the adaptive control would have
//! rejected (the orbit has moved too far from the one the plan was made for)
//! makes the propagator plan afresh; `PropagationStats::replans` counts these.

use super::PropagationError;
use super::forces::{ForceModel, GravitySystem, NodeCache};
use super::integrator::{GaussRadau, SecondOrderSystem, StepOutcome};
use crate::ephemeris::Ephemeris;
use crate::vec3::Vec3;

/// A massive body propagated with the tracked body: heliocentric ICRF state
/// at the reference epoch and its GM.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Perturber {
    pub gm_au3_per_day2: f64,
    pub position_au: Vec3,
    pub velocity_au_per_day: Vec3,
}

impl Perturber {
    /// Its heliocentric ICRF state (x, y, z, vx, vy, vz), au and au/day.
    pub fn state(&self) -> [f64; 6] {
        let (r, v) = (self.position_au, self.velocity_au_per_day);
        [r.x, r.y, r.z, v.x, v.y, v.z]
    }
}

/// Heliocentric ICRF states of the propagated bodies at the reference epoch.
#[derive(Clone, Debug, PartialEq)]
pub struct InitialState {
    pub t0_tdb_days: f64,
    pub tracked_position_au: Vec3,
    pub tracked_velocity_au_per_day: Vec3,
    pub perturbers: Vec<Perturber>,
}

/// A heliocentric ICRF position (au) and velocity (au/day).
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct StateVector {
    pub position_au: Vec3,
    pub velocity_au_per_day: Vec3,
}

/// How to propagate.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PropagationSettings {
    /// Step-size tolerance: the relative size of the last term of the
    /// acceleration polynomial in each step (IAS15's epsilon). The default,
    /// 1e-9, is the machine-precision class; [`PropagationSettings::fast`]
    /// (1e-6) is enough for astrometry (see docs/performance.md).
    pub tolerance: f64,
    /// Integrate the variational equations for partial derivatives.
    pub partials: bool,
    /// Keep and replay the step plan of an arc (see the module documentation).
    pub reuse_steps: bool,
    /// Give up after this many steps.
    pub max_steps: usize,
}

impl Default for PropagationSettings {
    fn default() -> Self {
        PropagationSettings { tolerance: 1e-9, partials: false, reuse_steps: false, max_steps: 1_000_000 }
    }
}

impl PropagationSettings {
    /// Settings for fitting and searching: tolerance 1e-6. On the reference
    /// workload W1(a) (44 au body, 30 years, VSOP87 planets) this keeps the
    /// tracked body within 0.003 mas of a tolerance-1e-11 run at a sixth of the
    /// cost of the default (see docs/performance.md).
    pub fn fast() -> Self {
        PropagationSettings { tolerance: 1e-6, ..PropagationSettings::default() }
    }
}

/// The work a propagation did.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct PropagationStats {
    pub steps: u64,
    pub rejected_steps: u64,
    pub force_evaluations: u64,
    pub corrector_iterations: u64,
    pub ephemeris_evaluations: u64,
    /// Times a replayed step plan was found too coarse and remade.
    pub replans: u64,
}

/// States (and partials) at the requested epochs, in the order requested.
#[derive(Clone, Debug, PartialEq)]
pub struct Trajectory {
    pub epochs_tdb_days: Vec<f64>,
    pub tracked: Vec<StateVector>,
    /// `perturbers[k][e]`: perturber k at epoch e.
    pub perturbers: Vec<Vec<StateVector>>,
    /// Number of parameters of the partials (0 without partials): the tracked
    /// body's initial position and velocity (6), then for each perturber its
    /// initial position and velocity (6) and its GM in au^3/day^2 (1).
    pub n_params: usize,
    /// d(tracked state)/d(parameter), per epoch, row-major 6 x n_params.
    partials: Vec<f64>,
    pub stats: PropagationStats,
}

impl Trajectory {
    /// The 6 x n_params matrix of partial derivatives of the tracked body's
    /// state (x, y, z, vx, vy, vz) at epoch index `e`, row-major.
    pub fn tracked_partials(&self, e: usize) -> &[f64] {
        &self.partials[e * 6 * self.n_params..(e + 1) * 6 * self.n_params]
    }

    /// d(component of the tracked state)/d(parameter) at epoch index `e`.
    pub fn tracked_partial(&self, e: usize, component: usize, param: usize) -> f64 {
        self.tracked_partials(e)[component * self.n_params + param]
    }
}

/// The shortest step the propagator accepts, days (about 0.9 us).
const MIN_STEP_DAYS: f64 = 1e-11;

#[derive(Clone, Debug, Default)]
struct StepPlan {
    t0: f64,
    /// Step lengths of the forward and the backward leg.
    forward: Vec<f64>,
    backward: Vec<f64>,
}

/// Propagates orbits under a force model; reusable across calls.
pub struct Propagator<'a> {
    model: &'a ForceModel,
    ephemeris: &'a dyn Ephemeris,
    settings: PropagationSettings,
    plan: Option<StepPlan>,
    cache: NodeCache,
    /// Heliocentric states of the integration origin at output epochs (kept
    /// with a step plan).
    origin_cache: std::collections::HashMap<u64, (Vec3, Vec3)>,
}

impl<'a> Propagator<'a> {
    pub fn new(
        model: &'a ForceModel,
        ephemeris: &'a dyn Ephemeris,
        settings: PropagationSettings,
    ) -> Result<Self, PropagationError> {
        if !(settings.tolerance.is_finite() && settings.tolerance > 0.0 && settings.tolerance < 1.0) {
            return Err(PropagationError::Invalid(format!("tolerance {} must lie in (0, 1)", settings.tolerance)));
        }
        Ok(Propagator {
            model,
            ephemeris,
            settings,
            plan: None,
            cache: NodeCache::new(),
            origin_cache: Default::default(),
        })
    }

    pub fn settings(&self) -> &PropagationSettings {
        &self.settings
    }

    /// Forgets any recorded step plan and cached planet positions.
    pub fn forget_plan(&mut self) {
        self.plan = None;
        self.cache.clear();
        self.origin_cache.clear();
    }

    /// Propagates `initial` to each of `epochs_tdb_days` (any order; before and
    /// after the reference epoch).
    pub fn propagate(
        &mut self,
        initial: &InitialState,
        epochs_tdb_days: &[f64],
    ) -> Result<Trajectory, PropagationError> {
        validate(initial, epochs_tdb_days)?;
        let t0 = initial.t0_tdb_days;
        let reuse = self.settings.reuse_steps && self.plan.as_ref().is_some_and(|p| p.t0 == t0);
        if !reuse {
            self.cache.clear();
        }
        let result = self.run(initial, epochs_tdb_days, reuse);
        match result {
            Err(PlanOutcome::TooCoarse) => {
                // Replan adaptively from scratch.
                self.forget_plan();
                let mut out = self.run(initial, epochs_tdb_days, false).map_err(PlanOutcome::into_error)?;
                out.stats.replans += 1;
                Ok(out)
            }
            other => other.map_err(PlanOutcome::into_error),
        }
    }

    fn run(&mut self, initial: &InitialState, epochs: &[f64], replay: bool) -> Result<Trajectory, PlanOutcome> {
        let t0 = initial.t0_tdb_days;
        let mut masses = vec![self.model.tracked_gm_au3_per_day2];
        masses.extend(initial.perturbers.iter().map(|p| p.gm_au3_per_day2));
        let settings = self.settings;
        let model = self.model;
        let replayed_plan = if replay { self.plan.clone() } else { None };
        let use_cache = self.settings.reuse_steps;
        let cache = if use_cache { Some(&mut self.cache) } else { None };
        let mut system = GravitySystem::new(self.model, self.ephemeris, masses, self.settings.partials, cache);
        let nb = system.n_bodies();
        let n_params = system.n_params();
        let dim = system.dim();

        // Initial x and v relative to the integration origin, with the
        // variational identity for the state parameters.
        let (origin_p, origin_v) = model.origin_heliocentric_state(self.ephemeris, t0)?;
        let mut x0 = vec![0.0; dim];
        let mut v0 = vec![0.0; dim];
        x0[0..3].copy_from_slice(&(initial.tracked_position_au - origin_p).to_array());
        v0[0..3].copy_from_slice(&(initial.tracked_velocity_au_per_day - origin_v).to_array());
        for (k, p) in initial.perturbers.iter().enumerate() {
            x0[3 * (k + 1)..3 * (k + 2)].copy_from_slice(&(p.position_au - origin_p).to_array());
            v0[3 * (k + 1)..3 * (k + 2)].copy_from_slice(&(p.velocity_au_per_day - origin_v).to_array());
        }
        if n_params > 0 {
            let block = 3 * nb;
            for body in 0..nb {
                let first_param = if body == 0 { 0 } else { 6 + 7 * (body - 1) };
                for c in 0..3 {
                    x0[block * (1 + first_param + c) + 3 * body + c] = 1.0;
                    v0[block * (1 + first_param + 3 + c) + 3 * body + c] = 1.0;
                }
            }
        }

        let mut out = Trajectory {
            epochs_tdb_days: epochs.to_vec(),
            tracked: vec![StateVector::default(); epochs.len()],
            perturbers: vec![vec![StateVector::default(); epochs.len()]; nb - 1],
            n_params,
            partials: vec![0.0; epochs.len() * 6 * n_params],
            stats: PropagationStats::default(),
        };
        let mut forward: Vec<usize> = (0..epochs.len()).filter(|&i| epochs[i] >= t0).collect();
        forward.sort_by(|&a, &b| epochs[a].total_cmp(&epochs[b]));
        let mut backward: Vec<usize> = (0..epochs.len()).filter(|&i| epochs[i] < t0).collect();
        backward.sort_by(|&a, &b| epochs[b].total_cmp(&epochs[a]));

        let mut integrator = GaussRadau::new(dim, self.settings.tolerance);
        let mut new_plan = StepPlan { t0, ..StepPlan::default() };
        for (leg_index, order) in [(0, &forward), (1, &backward)] {
            if order.is_empty() {
                continue;
            }
            let replayed =
                replayed_plan.as_ref().map(|p| if leg_index == 0 { p.forward.clone() } else { p.backward.clone() });
            integrator.reset();
            let steps = Self::leg(
                &settings,
                model,
                &mut system,
                &mut integrator,
                initial,
                &x0,
                &v0,
                order,
                epochs,
                replayed.as_deref(),
                &mut out,
            )?;
            if leg_index == 0 {
                new_plan.forward = steps;
            } else {
                new_plan.backward = steps;
            }
        }
        // Back to heliocentric states.
        if !model.folded.is_empty() {
            for (e, &t) in epochs.iter().enumerate() {
                let (op, ov) = match self.origin_cache.get(&t.to_bits()) {
                    Some(&o) => o,
                    None => {
                        let o = model.origin_heliocentric_state(self.ephemeris, t)?;
                        if settings.reuse_steps {
                            self.origin_cache.insert(t.to_bits(), o);
                        }
                        o
                    }
                };
                let shift = |s: &mut StateVector| {
                    s.position_au += op;
                    s.velocity_au_per_day += ov;
                };
                shift(&mut out.tracked[e]);
                out.perturbers.iter_mut().for_each(|p| shift(&mut p[e]));
            }
        }
        out.stats.force_evaluations = integrator.evaluations;
        out.stats.corrector_iterations = integrator.iterations;
        out.stats.ephemeris_evaluations = system.ephemeris_evaluations;
        drop(system);
        if self.settings.reuse_steps && !replay {
            self.plan = Some(new_plan);
        }
        Ok(out)
    }

    /// Integrates one leg (forwards or backwards) through the epochs `order`
    /// (sorted in the direction of travel) and returns the steps it took.
    #[allow(clippy::too_many_arguments)]
    fn leg(
        settings: &PropagationSettings,
        model: &ForceModel,
        system: &mut GravitySystem<'_>,
        integrator: &mut GaussRadau,
        initial: &InitialState,
        x0: &[f64],
        v0: &[f64],
        order: &[usize],
        epochs: &[f64],
        replayed: Option<&[f64]>,
        out: &mut Trajectory,
    ) -> Result<Vec<f64>, PlanOutcome> {
        let t0 = initial.t0_tdb_days;
        let t_end = epochs[*order.last().unwrap_or(&0)];
        let direction = if t_end >= t0 { 1.0 } else { -1.0 };
        let mut x = x0.to_vec();
        let mut v = v0.to_vec();
        let mut t = t0;
        let mut next = 0usize; // index into `order`
        // Epochs equal to t0 are the initial state itself.
        while next < order.len() && epochs[order[next]] == t {
            record(out, order[next], &x, &v, system.n_bodies());
            next += 1;
        }
        let mut taken = Vec::new();
        let mut dt = direction * initial_step_days(initial, model).min((t_end - t0).abs().max(1e-6));
        let mut scratch_x = vec![0.0; x.len()];
        let mut scratch_v = vec![0.0; v.len()];
        let mut plan_index = 0usize;
        while next < order.len() {
            if taken.len() >= settings.max_steps {
                return Err(PlanOutcome::Failed(PropagationError::TooManySteps { max_steps: settings.max_steps }));
            }
            // Replay the plan while it lasts; epochs past its end (a fitter's
            // light-time epochs move by seconds) are reached adaptively.
            let planned = replayed.and_then(|plan| plan.get(plan_index).copied());
            let adaptive = planned.is_none();
            if let Some(d) = planned {
                dt = d;
            }
            // Land the last step on the last epoch, so the planets are never
            // needed beyond the arc; earlier epochs come from dense output.
            if adaptive && (t + dt - t_end) * direction > 0.0 {
                dt = t_end - t;
            }
            let t_start = t;
            match integrator.step(system, t, &mut x, &mut v, dt, adaptive)? {
                StepOutcome::Rejected { retry_dt, .. } => {
                    out.stats.rejected_steps += 1;
                    // Below a microsecond no astrometric question is being
                    // answered any more: a collision or a numerical failure.
                    if retry_dt.abs() < MIN_STEP_DAYS || !retry_dt.is_finite() {
                        return Err(PlanOutcome::Failed(PropagationError::StepSizeUnderflow {
                            t_tdb_days: t,
                            dt_days: retry_dt,
                        }));
                    }
                    dt = retry_dt;
                    continue;
                }
                StepOutcome::Accepted { next_dt, error, .. } => {
                    if !adaptive && !integrator.is_acceptable(error) {
                        return Err(PlanOutcome::TooCoarse);
                    }
                    out.stats.steps += 1;
                    taken.push(dt);
                    plan_index += 1;
                    t = t_start + dt;
                    // Dense output for every epoch inside this step.
                    while next < order.len() && (epochs[order[next]] - t) * direction <= 0.0 {
                        let tau = (epochs[order[next]] - t_start) / dt;
                        integrator.interpolate(tau, &mut scratch_x, &mut scratch_v);
                        record(out, order[next], &scratch_x, &scratch_v, system.n_bodies());
                        next += 1;
                    }
                    if !x.iter().all(|c| c.is_finite()) {
                        return Err(PlanOutcome::Failed(PropagationError::NonFinite { t_tdb_days: t }));
                    }
                    if adaptive {
                        dt = next_dt;
                    }
                }
            }
        }
        Ok(taken)
    }
}

/// Why a run stopped without a result.
enum PlanOutcome {
    TooCoarse,
    Failed(PropagationError),
}

impl PlanOutcome {
    fn into_error(self) -> PropagationError {
        match self {
            PlanOutcome::Failed(e) => e,
            PlanOutcome::TooCoarse => PropagationError::Invalid("step plan too coarse after replanning".into()),
        }
    }
}

impl From<PropagationError> for PlanOutcome {
    fn from(e: PropagationError) -> Self {
        PlanOutcome::Failed(e)
    }
}

/// Copies the propagated states (and partials) at one epoch into `out`.
fn record(out: &mut Trajectory, e: usize, x: &[f64], v: &[f64], nb: usize) {
    let body = |i: usize| StateVector {
        position_au: Vec3::new(x[3 * i], x[3 * i + 1], x[3 * i + 2]),
        velocity_au_per_day: Vec3::new(v[3 * i], v[3 * i + 1], v[3 * i + 2]),
    };
    out.tracked[e] = body(0);
    for k in 1..nb {
        out.perturbers[k - 1][e] = body(k);
    }
    let np = out.n_params;
    if np > 0 {
        let block = 3 * nb;
        let rows = &mut out.partials[e * 6 * np..(e + 1) * 6 * np];
        for p in 0..np {
            let base = block * (1 + p);
            for c in 0..3 {
                rows[c * np + p] = x[base + c];
                rows[(3 + c) * np + p] = v[base + c];
            }
        }
    }
}

/// A first step of a hundredth of the shortest orbital period involved (the
/// step control adapts from there within a step or two).
fn initial_step_days(initial: &InitialState, model: &ForceModel) -> f64 {
    let mu = model.central_gm_au3_per_day2();
    let period = |r: f64| std::f64::consts::TAU * (r * r * r / mu).sqrt();
    let mut shortest = period(initial.tracked_position_au.norm());
    for p in &initial.perturbers {
        shortest = shortest.min(period(p.position_au.norm()));
    }
    (shortest / 100.0).max(1e-3)
}

fn validate(initial: &InitialState, epochs: &[f64]) -> Result<(), PropagationError> {
    let bad = |what: &str| Err(PropagationError::Invalid(what.to_string()));
    if !initial.t0_tdb_days.is_finite() {
        return bad("the reference epoch is not finite");
    }
    if !initial.tracked_position_au.is_finite()
        || !initial.tracked_velocity_au_per_day.is_finite()
        || initial.tracked_position_au.norm() == 0.0
    {
        return bad("the tracked body's initial state must be finite and away from the Sun");
    }
    for (k, p) in initial.perturbers.iter().enumerate() {
        if !p.position_au.is_finite() || !p.velocity_au_per_day.is_finite() || p.position_au.norm() == 0.0 {
            return bad(&format!("perturber {k}: the initial state must be finite and away from the Sun"));
        }
        if !(p.gm_au3_per_day2.is_finite() && p.gm_au3_per_day2 >= 0.0) {
            return bad(&format!("perturber {k}: GM must be finite and not negative"));
        }
    }
    if epochs.iter().any(|t| !t.is_finite()) {
        return bad("an output epoch is not finite");
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dynamics::kepler;
    use crate::ephemeris::Vsop87;
    use crate::units::GM_SUN_AU3_PER_DAY2;

    fn tracked() -> InitialState {
        InitialState {
            t0_tdb_days: 1000.0,
            tracked_position_au: Vec3::new(30.0, -20.0, 8.0),
            tracked_velocity_au_per_day: Vec3::new(0.0012, 0.0019, 0.0004),
            perturbers: vec![],
        }
    }

    #[test]
    fn sun_only_equals_kepler_forwards_and_backwards() {
        let model = ForceModel::sun_only();
        let eph = Vsop87::new();
        let mut p = Propagator::new(&model, &eph, PropagationSettings::default()).unwrap();
        let init = tracked();
        let epochs = [1000.0, -3000.0, 12_000.0, 1000.5, 900.0, 5000.0];
        let traj = p.propagate(&init, &epochs).unwrap();
        for (e, &t) in epochs.iter().enumerate() {
            let (r, v) = kepler::propagate(
                GM_SUN_AU3_PER_DAY2,
                init.tracked_position_au,
                init.tracked_velocity_au_per_day,
                t - init.t0_tdb_days,
            )
            .unwrap();
            let s = traj.tracked[e];
            assert!((s.position_au - r).norm() < 1e-10, "{t}: {:e}", (s.position_au - r).norm());
            assert!((s.velocity_au_per_day - v).norm() < 1e-13);
        }
        assert!(traj.stats.steps > 0 && traj.stats.force_evaluations > traj.stats.steps);
    }

    #[test]
    fn replayed_plan_gives_the_same_answer_without_ephemeris_calls() {
        let model = ForceModel::outer_planets_with_inner_folded();
        let eph = model.tabulate(&Vsop87::new(), &[], (-2001.0, 5601.0)).unwrap();
        let settings = PropagationSettings { reuse_steps: true, ..PropagationSettings::default() };
        let mut p = Propagator::new(&model, &eph, settings).unwrap();
        let init = tracked();
        let epochs: Vec<f64> = (0..20).map(|k| -2000.0 + 400.0 * k as f64).collect();
        let first = p.propagate(&init, &epochs).unwrap();
        let mut moved = init.clone();
        moved.tracked_position_au.x += 1e-6;
        let second = p.propagate(&moved, &epochs).unwrap();
        assert!(first.stats.ephemeris_evaluations > 0);
        assert_eq!(second.stats.ephemeris_evaluations, 0);
        assert_eq!(second.stats.steps, first.stats.steps);
        let shift = (second.tracked[19].position_au - first.tracked[19].position_au).norm();
        assert!(shift > 1e-7 && shift < 1e-4, "{shift}");
    }

    #[test]
    fn bad_requests_are_refused() {
        let model = ForceModel::sun_only();
        let eph = Vsop87::new();
        let mut p = Propagator::new(&model, &eph, PropagationSettings::default()).unwrap();
        let mut init = tracked();
        assert!(p.propagate(&init, &[f64::NAN]).is_err());
        init.tracked_position_au = Vec3::ZERO;
        assert!(p.propagate(&init, &[0.0]).is_err());
        assert!(Propagator::new(&model, &eph, PropagationSettings { tolerance: 0.0, ..Default::default() }).is_err());
    }
}
