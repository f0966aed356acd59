//! `latens demo`: the built-in invented scenario.
//!
//! The scenario is invented: a distant minor body, here called Vesk, followed
//! by an invented survey. So far the demo runs the stages that exist (times,
//! frames, the embedded ephemeris, the N-body propagation) and says plainly
//! what it did and what it did not.

use std::fmt::Write as _;

use anyhow::Context;

use super::CliError;
use super::args::DemoArgs;
use crate::dynamics::kepler::{Elements, elements_from_state, propagate, state_from_elements};
use crate::dynamics::{ForceModel, InitialState, PropagationSettings, Propagator};
use crate::ephemeris::{Body, Ephemeris, Vsop87};
use crate::frames::{angular_separation, ecliptic_from_icrf, icrf_from_ecliptic, radec_from_vector};
use crate::io::write_atomically;
use crate::time::{epoch_from_tdb_days, parse_epoch, tdb_days_from_j2000, utc_iso_from_epoch};
use crate::units::{GM_SUN_AU3_PER_DAY2, RAD_PER_ARCSEC, RAD_PER_DEG};

/// The invented tracked body's osculating heliocentric elements (ecliptic
/// J2000) at the scenario's reference epoch.
struct InventedBody {
    name: &'static str,
    reference_epoch: &'static str,
    a_au: f64,
    e: f64,
    i_deg: f64,
    node_deg: f64,
    peri_deg: f64,
    mean_anomaly_deg: f64,
}

const VESK: InventedBody = InventedBody {
    name: "Vesk",
    reference_epoch: "JD 2460370.5 TDB",
    a_au: 44.0,
    e: 0.12,
    i_deg: 17.3,
    node_deg: 112.4,
    peri_deg: 281.0,
    mean_anomaly_deg: 35.0,
};

/// First and last night of the invented survey, and the spacing of its visits.
const SURVEY_START_UTC: &str = "2014-03-01T06:00:00Z";
const SURVEY_END_UTC: &str = "2034-03-01T06:00:00Z";
const VISIT_SPACING_DAYS: f64 = 30.4375;

pub(super) fn run(args: &DemoArgs) -> Result<(), CliError> {
    let body = &VESK;
    let t_ref = tdb_days_from_j2000(parse_epoch(body.reference_epoch).map_err(CliError::failed)?);
    let t_start = tdb_days_from_j2000(parse_epoch(SURVEY_START_UTC).map_err(CliError::failed)?);
    let t_end = tdb_days_from_j2000(parse_epoch(SURVEY_END_UTC).map_err(CliError::failed)?);

    let elements = Elements::from_semi_major_axis(
        body.a_au,
        body.e,
        body.i_deg * RAD_PER_DEG,
        body.node_deg * RAD_PER_DEG,
        body.peri_deg * RAD_PER_DEG,
        body.mean_anomaly_deg * RAD_PER_DEG,
    )
    .map_err(CliError::failed)?;
    let (r_ecl, v_ecl) = state_from_elements(GM_SUN_AU3_PER_DAY2, &elements).map_err(CliError::failed)?;
    let (r0, v0) = (icrf_from_ecliptic(r_ecl), icrf_from_ecliptic(v_ecl));

    let mut epochs = Vec::new();
    let mut t = t_start;
    while t <= t_end + 1e-9 {
        epochs.push(t);
        t += VISIT_SPACING_DAYS;
    }
    // The Sun with the inner planets folded in, Jupiter..Neptune from the
    // embedded ephemeris, tabulated once; the Earth for the observer.
    let model = ForceModel::outer_planets_with_inner_folded();
    let ephemeris =
        model.tabulate(&Vsop87::new(), &[Body::Earth], (t_start - 1.0, t_end + 1.0)).map_err(CliError::failed)?;
    let initial = InitialState {
        t0_tdb_days: t_ref,
        tracked_position_au: r0,
        tracked_velocity_au_per_day: v0,
        perturbers: Vec::new(),
    };
    let trajectory = Propagator::new(&model, &ephemeris, PropagationSettings::fast())
        .and_then(|mut p| p.propagate(&initial, &epochs))
        .map_err(CliError::failed)?;

    let mut csv = String::from(
        "epoch_utc,t_tdb_days,ra_deg,dec_deg,heliocentric_distance_au,geocentric_distance_au,solar_elongation_deg,planetary_shift_arcsec\n",
    );
    let mut largest_shift_arcsec: f64 = 0.0;
    for (e, &t) in epochs.iter().enumerate() {
        let r = trajectory.tracked[e].position_au;
        let (r_two_body, _) = propagate(GM_SUN_AU3_PER_DAY2, r0, v0, t - t_ref).map_err(CliError::failed)?;
        let earth = ephemeris.heliocentric_position_au(Body::Earth, t).map_err(CliError::failed)?;
        let geo = r - earth;
        let d = radec_from_vector(geo);
        let elongation = angular_separation(geo, -earth) / RAD_PER_DEG;
        // How far the giant planets have moved the body on the sky, compared
        // with a two-body orbit about the Sun from the same starting state.
        let shift = angular_separation(geo, r_two_body - earth) / RAD_PER_ARCSEC;
        largest_shift_arcsec = largest_shift_arcsec.max(shift);
        let _ = writeln!(
            csv,
            "{},{:.6},{:.7},{:.7},{:.6},{:.6},{:.3},{:.4}",
            utc_iso_from_epoch(epoch_from_tdb_days(t)),
            t,
            d.ra_rad / RAD_PER_DEG,
            d.dec_rad / RAD_PER_DEG,
            r.norm(),
            geo.norm(),
            elongation,
            shift
        );
    }
    let visits = epochs.len();
    let track_path = args.out.join("track.csv");
    write_atomically(&track_path, csv.as_bytes()).context("writing the demo track").map_err(CliError::failed)?;

    // Round trip of the elements through the ICRF state, as a visible check.
    let back = elements_from_state(GM_SUN_AU3_PER_DAY2, ecliptic_from_icrf(r0), ecliptic_from_icrf(v0))
        .map_err(CliError::failed)?;

    println!("Latens demo: invented scenario, tracked body {}", body.name);
    println!(
        "  reference orbit (heliocentric ecliptic J2000, at {}): a = {:.3} au, e = {:.4}, i = {:.3} deg",
        utc_iso_from_epoch(epoch_from_tdb_days(t_ref)),
        back.semi_major_axis_au(),
        back.eccentricity,
        back.inclination_rad / RAD_PER_DEG
    );
    println!("  embedded ephemeris: {}", ephemeris.description());
    println!(
        "  propagated under the Sun (inner planets folded in) and Jupiter..Neptune: {} steps, {} force evaluations",
        trajectory.stats.steps, trajectory.stats.force_evaluations
    );
    println!(
        "  computed {visits} geocentric positions, one every {VISIT_SPACING_DAYS} days from {SURVEY_START_UTC} to {SURVEY_END_UTC}"
    );
    println!(
        "  the giant planets move {} by up to {largest_shift_arcsec:.1} arcsec from a two-body orbit about the Sun",
        body.name
    );
    println!("What this demo did not do yet: light time, observations with noise, the orbit fit, the perturber");
    println!("search and the search products. Those stages are not built yet; positions here are geometric.");
    println!("Files written:");
    println!(
        "  {}  geocentric RA/Dec (ICRF), distances, solar elongation and the planets' shift of {} at each visit",
        track_path.display(),
        body.name
    );
    Ok(())
}
