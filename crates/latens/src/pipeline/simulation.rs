//! Simulation of a scenario: what its survey would measure of its tracked
//! body, from the full nonlinear model (the hidden perturber included) with
//! seeded noise, and the truth to judge a search against. For the demo,
//! examples and calibration; real data carry no truth.

use super::{PipelineError, force_model, geometry_at, parse_known};
use crate::astrometry::astrometric_direction;
use crate::dynamics::kepler::{Elements, propagate, state_from_elements};
use crate::dynamics::{ForceModel, InitialState, Perturber, PropagationSettings, Propagator};
use crate::ephemeris::{Body, Ephemeris, Tabulated, Vsop87};
use crate::frames::{angular_separation, icrf_from_ecliptic, radec_from_vector};
use crate::io::observations::{Observation, Site, SiteTable};
use crate::io::results::{PlaceFile, TruthBodyFile, TruthFile};
use crate::io::scenario::ScenarioFile;
use crate::simulate::{SurveyPlan, simulate_survey};
use crate::time::{epoch_from_tdb_days, parse_epoch, tdb_days_from_j2000, utc_iso_from_epoch};
use crate::units::{GM_SUN_AU3_PER_DAY2, J2000_JD, RAD_PER_ARCSEC, RAD_PER_DEG};
use crate::vec3::Vec3;

/// Spacing of the track's positions, days (a month).
pub const TRACK_SPACING_DAYS: f64 = 30.4375;

/// The tracked body's place at one date of the monthly track.
#[derive(Clone, Copy, Debug)]
pub struct TrackPoint {
    pub t_tdb_days: f64,
    pub ra_deg: f64,
    pub dec_deg: f64,
    pub heliocentric_distance_au: f64,
    pub geocentric_distance_au: f64,
    pub solar_elongation_deg: f64,
    /// How far the known planets move the body from its two-body orbit.
    pub planetary_shift_arcsec: f64,
}

/// A simulated scenario.
pub struct SimulatedScenario {
    /// The reference epoch of the scenario's orbits, TDB days since J2000.0.
    pub t_ref: f64,
    pub initial: InitialState,
    /// The force model of the known planets (the perturber is in `initial`).
    pub model: ForceModel,
    pub ephemeris: Tabulated,
    pub sites: SiteTable,
    /// The survey's observations in time order.
    pub observations: Vec<Observation>,
    pub track: Vec<TrackPoint>,
    pub truth: TruthFile,
    /// Largest shift of the body by the known planets over the track, arcsec.
    pub largest_planetary_shift_arcsec: f64,
}

fn bad(e: impl std::fmt::Display) -> PipelineError {
    PipelineError::Input(e.to_string())
}

fn elements_state(
    what: &str,
    (a, e, i, node, peri, m): (f64, f64, f64, f64, f64, f64),
) -> Result<(Vec3, Vec3), PipelineError> {
    let el =
        Elements::from_semi_major_axis(a, e, i * RAD_PER_DEG, node * RAD_PER_DEG, peri * RAD_PER_DEG, m * RAD_PER_DEG)
            .map_err(|err| bad(format!("{what}: {err}")))?;
    let (r, v) = state_from_elements(GM_SUN_AU3_PER_DAY2, &el).map_err(|err| bad(format!("{what}: {err}")))?;
    Ok((icrf_from_ecliptic(r), icrf_from_ecliptic(v)))
}

fn when(text: &str, what: &str) -> Result<f64, PipelineError> {
    parse_epoch(text).map(tdb_days_from_j2000).map_err(|e| bad(format!("{what}: {e}")))
}

/// Simulates every tracked body of a scenario (the `[tracked]` one first,
/// then `[[more_bodies]]`): each as [`simulate_scenario`] would, the same
/// survey and hidden perturber, its own noise (body k uses the survey's
/// seed plus 1000 k). The first result's truth lists the other bodies.
pub fn simulate_population(s: &ScenarioFile, name: &str) -> Result<Vec<SimulatedScenario>, PipelineError> {
    let bodies = s.all_bodies();
    let one_body = |k: usize, search_epoch: Option<String>| {
        let mut one = s.clone();
        one.tracked = bodies[k].clone();
        one.more_bodies.clear();
        one.survey.seed = s.survey.seed.wrapping_add(1000 * k as u64);
        if search_epoch.is_some() {
            one.search.epoch = search_epoch;
        }
        simulate_scenario(&one, &format!("{name} ({})", bodies[k].name))
    };
    let mut out: Vec<SimulatedScenario> = (0..bodies.len()).map(|k| one_body(k, None)).collect::<Result<_, _>>()?;
    // The truth's place at the search epoch a joint study takes by default:
    // the last observation of any body (the first body alone may end
    // earlier). Its observations do not change beyond rounding (same seed).
    if s.search.epoch.is_none() {
        let last = out.iter().flat_map(|o| o.observations.last()).map(|o| o.t_tdb_days).fold(f64::MIN, f64::max);
        let first_last = out[0].observations.last().map_or(last, |o| o.t_tdb_days);
        if last > first_last {
            out[0] = one_body(0, Some(format!("JD {:.9} TDB", J2000_JD + last)))?;
        }
    }
    let more: Vec<_> = out[1..].iter().map(|o| o.truth.tracked.clone()).collect();
    out[0].truth.more_bodies = more;
    out[0].truth.n_observations = out.iter().map(|o| o.observations.len()).sum();
    Ok(out)
}

/// Simulates a scenario's survey (`name` is the scenario file's name, for
/// messages): the observations from the full model with the hidden
/// perturber and seeded noise, the body's monthly track and the truth.
pub fn simulate_scenario(s: &ScenarioFile, name: &str) -> Result<SimulatedScenario, PipelineError> {
    let t_ref = when(&s.tracked.epoch, &format!("{name}: tracked.epoch"))?;
    let t_start = when(&s.survey.start, &format!("{name}: survey.start"))?;
    let t_end = when(&s.survey.end, &format!("{name}: survey.end"))?;
    if t_end <= t_start {
        return Err(bad(format!("{name}: survey.end must come after survey.start")));
    }
    if (t_end - t_start) / s.survey.visit_every_days > 200_000.0 {
        return Err(bad(format!("{name}: survey.visit_every_days gives too many visits")));
    }
    let search_epoch = match &s.search.epoch {
        Some(t) => Some(when(t, &format!("{name}: search.epoch"))?),
        None => None,
    };
    let known = parse_known(&s.model.known).map_err(|e| bad(format!("{name}: model.known: {e}")))?;
    let model = force_model(&known);
    let span_end = search_epoch.unwrap_or(t_end).max(t_end).max(t_ref);
    let span_start = t_start.min(t_ref);
    let ephemeris = model
        .tabulate(&Vsop87::new(), &[Body::Earth], (span_start - 2.0, span_end + 2.0))
        .map_err(|e| bad(format!("{name}: {e}")))?;
    let t = &s.tracked;
    let (r0, v0) = elements_state(
        &format!("{name}: tracked"),
        (t.a_au, t.e, t.inc_deg, t.node_deg, t.peri_deg, t.mean_anomaly_deg),
    )?;
    let hidden = match &s.perturber {
        Some(p) => {
            let (r, v) = elements_state(
                &format!("{name}: perturber"),
                (p.a_au, p.e, p.inc_deg, p.node_deg, p.peri_deg, p.mean_anomaly_deg),
            )?;
            vec![Perturber {
                gm_au3_per_day2: p.mass_earth * crate::units::GM_EARTH_MASS_AU3_PER_DAY2,
                position_au: r,
                velocity_au_per_day: v,
            }]
        }
        None => vec![],
    };
    let initial = InitialState {
        t0_tdb_days: t_ref,
        tracked_position_au: r0,
        tracked_velocity_au_per_day: v0,
        perturbers: hidden,
    };

    // The survey: visits rotating through the sites, a little varied in time of night.
    let mut sites = SiteTable::new();
    for site in &s.survey.sites {
        sites.insert(Site {
            name: site.name.clone(),
            lon_deg: site.lon_deg,
            lat_deg: site.lat_deg,
            height_m: site.height_m,
        });
    }
    let n_sites = s.survey.sites.len();
    let mut per_site: Vec<Vec<f64>> = vec![Vec::new(); n_sites];
    let (mut tv, mut k) = (t_start, 0usize);
    while tv <= t_end {
        per_site[k % n_sites].push(tv + 0.05 * (k % 5) as f64);
        tv += s.survey.visit_every_days;
        k += 1;
    }
    let mut observations = Vec::new();
    for (j, times) in per_site.into_iter().enumerate() {
        let plan = SurveyPlan {
            times_tdb_days: times,
            site: s.survey.sites[j].name.clone(),
            sigma_arcsec: s.survey.sigma_arcsec,
            add_noise: true,
            min_elongation_deg: s.survey.min_elongation_deg,
            seed: s.survey.seed.wrapping_add(j as u64),
        };
        observations.extend(
            simulate_survey(&plan, &initial, &model, &ephemeris, &sites)
                .map_err(PipelineError::failed("simulation"))?,
        );
    }
    observations.sort_by(|a, b| a.t_tdb_days.total_cmp(&b.t_tdb_days));
    if observations.len() < 3 {
        return Err(bad(format!(
            "{name}: the survey makes only {} observations (is the body ever far enough from the Sun?)",
            observations.len()
        )));
    }
    // The monthly track, and how far the known planets move the body.
    let mut epochs = Vec::new();
    let mut te = t_start;
    while te <= t_end + 1e-9 {
        epochs.push(te);
        te += TRACK_SPACING_DAYS;
    }
    let search_t = search_epoch.unwrap_or_else(|| observations.last().map_or(t_end, |o| o.t_tdb_days));
    let mut all = epochs.clone();
    all.push(search_t);
    let trajectory = Propagator::new(&model, &ephemeris, PropagationSettings::fast())
        .and_then(|mut p| p.propagate(&initial, &all))
        .map_err(PipelineError::failed("simulation"))?;
    let mut track = Vec::with_capacity(epochs.len());
    let mut largest: f64 = 0.0;
    for (e, &t) in epochs.iter().enumerate() {
        let r = trajectory.tracked[e].position_au;
        let (r_two_body, _) =
            propagate(GM_SUN_AU3_PER_DAY2, r0, v0, t - t_ref).map_err(PipelineError::failed("simulation"))?;
        let earth = ephemeris.heliocentric_position_au(Body::Earth, t).map_err(PipelineError::failed("simulation"))?;
        let geo = r - earth;
        let d = radec_from_vector(geo);
        let shift = angular_separation(geo, r_two_body - earth) / RAD_PER_ARCSEC;
        largest = largest.max(shift);
        track.push(TrackPoint {
            t_tdb_days: t,
            ra_deg: d.ra_rad / RAD_PER_DEG,
            dec_deg: d.dec_rad / RAD_PER_DEG,
            heliocentric_distance_au: r.norm(),
            geocentric_distance_au: geo.norm(),
            solar_elongation_deg: angular_separation(geo, -earth) / RAD_PER_DEG,
            planetary_shift_arcsec: shift,
        });
    }

    // The truth.
    let body_file =
        |name: &str, mass: Option<f64>, el: (f64, f64, f64, f64, f64, f64), r: Vec3, v: Vec3| TruthBodyFile {
            name: name.into(),
            mass_earth: mass,
            frame: crate::dynamics::kepler::OUTPUT_FRAME.into(),
            a_au: el.0,
            e: el.1,
            inc_deg: el.2,
            node_deg: el.3,
            peri_deg: el.4,
            mean_anomaly_deg: el.5,
            state_icrf: [r.x, r.y, r.z, v.x, v.y, v.z],
            at_search_epoch: None,
        };
    let mut perturber = s.perturber.as_ref().map(|p| {
        body_file(
            &p.name,
            Some(p.mass_earth),
            (p.a_au, p.e, p.inc_deg, p.node_deg, p.peri_deg, p.mean_anomaly_deg),
            initial.perturbers[0].position_au,
            initial.perturbers[0].velocity_au_per_day,
        )
    });
    if let Some(p) = perturber.as_mut() {
        let last = all.len() - 1;
        let pr = trajectory.perturbers[0][last].position_au;
        let pv = trajectory.perturbers[0][last].velocity_au_per_day;
        let earth =
            ephemeris.heliocentric_position_au(Body::Earth, search_t).map_err(PipelineError::failed("simulation"))?;
        let g = geometry_at(&ephemeris, search_t)?;
        let (rho, _, radec) = astrometric_direction(&g, search_t, pr, pv);
        p.at_search_epoch = Some(PlaceFile {
            epoch_utc: utc_iso_from_epoch(epoch_from_tdb_days(search_t)),
            ra_deg: radec.ra_rad / RAD_PER_DEG,
            dec_deg: radec.dec_rad / RAD_PER_DEG,
            distance_au: rho.norm(),
            heliocentric_distance_au: pr.norm(),
            solar_elongation_deg: angular_separation(rho, -earth) / RAD_PER_DEG,
        });
    }
    let truth = TruthFile {
        scenario: s.name.clone(),
        description: s.description.clone(),
        epoch_utc: utc_iso_from_epoch(epoch_from_tdb_days(t_ref)),
        epoch_tdb_jd: J2000_JD + t_ref,
        tracked: body_file(
            &s.tracked.name,
            None,
            (t.a_au, t.e, t.inc_deg, t.node_deg, t.peri_deg, t.mean_anomaly_deg),
            r0,
            v0,
        ),
        more_bodies: Vec::new(),
        perturber,
        survey: s.survey.name.clone(),
        n_observations: observations.len(),
        sigma_arcsec: s.survey.sigma_arcsec,
        seed: s.survey.seed,
        known_bodies: s.model.known.clone(),
    };
    Ok(SimulatedScenario {
        t_ref,
        sites,
        track,
        initial,
        model,
        ephemeris,
        observations,
        truth,
        largest_planetary_shift_arcsec: largest,
    })
}
