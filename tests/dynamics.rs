//! The propagator against real data (DE421), a published fact (the 1PN
//! perihelion advance of Mercury), finite differences of itself, and physical
//! invariants.

mod common;
use common::*;

use latens::dynamics::kepler::{Elements, elements_from_state, state_from_elements};
use latens::dynamics::{ForceModel, InitialState, Perturber, PropagationSettings, Propagator};
use latens::ephemeris::{Body, Ephemeris, EphemerisError, HeliocentricState, SpkFile, Tabulated, Vsop87};
use latens::units::{EARTH_MASS_SOLAR, GM_SUN_AU3_PER_DAY2, RAD_PER_ARCSEC, RAD_PER_DEG};
use latens::vec3::Vec3;

fn de421() -> SpkFile {
    SpkFile::open(&data_path("de421/excerpt.bsp")).unwrap()
}

#[test]
fn jupiter_from_its_de421_state_follows_de421_for_20_years() {
    // Source: JPL DE421 (PyPI skyfield-data), excerpt 2000-2025. Jupiter is
    // propagated as a massive body from its DE421 state at 2012-01-01; every
    // other planet (and Pluto) is read from DE421.
    //
    // What the model leaves out bounds the agreement: DE421 also has the Moon
    // separately from the Earth (folded here into the Earth-Moon barycentre,
    // an error far below the rest), 343 asteroids (Ceres alone moves Jupiter by
    // tens of km over decades), solar relativity and oblateness. Measured here:
    // see the print; the bound is about twice that.
    let eph = de421();
    let model = ForceModel::with_known(&[
        Body::Mercury,
        Body::Venus,
        Body::EarthMoonBarycenter,
        Body::Mars,
        Body::Saturn,
        Body::Uranus,
        Body::Neptune,
        Body::Pluto,
    ])
    .with_relativity(true);
    let t0 = 4383.5; // 2012-01-01T12:00 TDB
    let j = eph.heliocentric_state(Body::Jupiter, t0).unwrap();
    let init = InitialState {
        t0_tdb_days: t0,
        // A massless far-away companion: the propagator always carries a tracked body.
        tracked_position_au: Vec3::new(40.0, 0.0, 0.0),
        tracked_velocity_au_per_day: Vec3::new(0.0, 0.0027, 0.0),
        perturbers: vec![Perturber {
            gm_au3_per_day2: Body::Jupiter.gm_au3_per_day2(),
            position_au: j.position_au,
            velocity_au_per_day: j.velocity_au_per_day,
        }],
    };
    let epochs: Vec<f64> = (0..=80).map(|k| t0 - 3652.5 + 91.3125 * k as f64).collect();
    let traj =
        Propagator::new(&model, &eph, PropagationSettings::default()).unwrap().propagate(&init, &epochs).unwrap();
    let mut worst_km: f64 = 0.0;
    for (e, &t) in epochs.iter().enumerate() {
        let want = eph.heliocentric_state(Body::Jupiter, t).unwrap().position_au;
        worst_km = worst_km.max((traj.perturbers[0][e].position_au - want).norm() * 149_597_870.7);
    }
    eprintln!("Jupiter vs DE421 over 20 years: worst {worst_km:.1} km");
    // Measured 32.5 km (2026-12-01).
    assert!(worst_km < 65.0, "{worst_km} km");
}

#[test]
fn mercury_perihelion_advances_43_arcsec_per_century_from_relativity() {
    // Published fact: the 1PN solar term advances Mercury's perihelion by
    // about 43"/century (Einstein 1915; 42.98" is the standard value).
    // Mercury's a and e from memory (a = 0.387098 au, e = 0.205630).
    let el = Elements::from_semi_major_axis(
        0.387_098,
        0.205_630,
        7.0 * RAD_PER_DEG,
        48.3 * RAD_PER_DEG,
        29.1 * RAD_PER_DEG,
        0.0,
    )
    .unwrap();
    let (r, v) = state_from_elements(GM_SUN_AU3_PER_DAY2, &el).unwrap();
    let eph = Vsop87::new();
    let model = ForceModel::sun_only().with_relativity(true);
    let init =
        InitialState { t0_tdb_days: 0.0, tracked_position_au: r, tracked_velocity_au_per_day: v, perturbers: vec![] };
    let century = 36_525.0;
    let traj = Propagator::new(&model, &eph, PropagationSettings { tolerance: 1e-12, ..Default::default() })
        .unwrap()
        .propagate(&init, &[century])
        .unwrap();
    let end =
        elements_from_state(GM_SUN_AU3_PER_DAY2, traj.tracked[0].position_au, traj.tracked[0].velocity_au_per_day)
            .unwrap();
    // Longitude of perihelion (node + argument), the angle that precesses.
    let advance = latens::units::wrap_pi(end.node_rad + end.periapsis_arg_rad - el.node_rad - el.periapsis_arg_rad)
        / RAD_PER_ARCSEC;
    eprintln!("Mercury's perihelion advance from the 1PN term: {advance:.2}\"/century");
    assert!((advance - 42.98).abs() < 0.5, "{advance}");
}

/// A planet on a circular orbit in the xy plane: an ephemeris for the
/// restricted three-body test.
struct CircularPlanet {
    radius_au: f64,
    rate_rad_per_day: f64,
}

impl Ephemeris for CircularPlanet {
    fn description(&self) -> String {
        "circular test planet".into()
    }
    fn covered_tdb_days(&self, body: Body) -> Option<(f64, f64)> {
        (body == Body::Jupiter).then_some((-1e9, 1e9))
    }
    fn heliocentric_state(&self, body: Body, t: f64) -> Result<HeliocentricState, EphemerisError> {
        self.check_covered(body, t)?;
        let (s, c) = (self.rate_rad_per_day * t).sin_cos();
        let w = self.rate_rad_per_day * self.radius_au;
        Ok(HeliocentricState {
            body,
            t_tdb_days: t,
            position_au: Vec3::new(self.radius_au * c, self.radius_au * s, 0.0),
            velocity_au_per_day: Vec3::new(-w * s, w * c, 0.0),
        })
    }
}

#[test]
fn jacobi_constant_is_kept_in_the_circular_restricted_three_body_problem() {
    // Physical invariant (common practice): in the circular restricted
    // three-body problem the Jacobi integral E - n L_z, in barycentric inertial
    // coordinates, is constant for the massless body.
    let mu_s = GM_SUN_AU3_PER_DAY2;
    let mu_p = 1e-3 * mu_s;
    let a = 5.2;
    let n = ((mu_s + mu_p) / (a * a * a)).sqrt();
    let eph = CircularPlanet { radius_au: a, rate_rad_per_day: n };
    let model = ForceModel {
        gm_sun_au3_per_day2: mu_s,
        folded: vec![],
        known: vec![latens::dynamics::KnownBody { body: Body::Jupiter, gm_au3_per_day2: mu_p }],
        relativity: false,
        tracked_gm_au3_per_day2: 0.0,
    };
    let init = InitialState {
        t0_tdb_days: 0.0,
        // A nearly circular orbit at 12 au, clear of the planet at 5.2 au.
        tracked_position_au: Vec3::new(8.0, -9.0, 0.5),
        tracked_velocity_au_per_day: Vec3::new(0.003_71, 0.003_29, 0.000_1),
        perturbers: vec![],
    };
    let jacobi = |t: f64, r_h: Vec3, v_h: Vec3| {
        let p = eph.heliocentric_state(Body::Jupiter, t).unwrap();
        let m = mu_s + mu_p;
        let sun = -(mu_p / m) * p.position_au;
        let sun_v = -(mu_p / m) * p.velocity_au_per_day;
        let planet = sun + p.position_au;
        let (r, v) = (r_h + sun, v_h + sun_v);
        0.5 * v.norm_squared() - mu_s / (r - sun).norm() - mu_p / (r - planet).norm() - n * (r.x * v.y - r.y * v.x)
    };
    let epochs: Vec<f64> = (1..=20).map(|k| 365.25 * 50.0 * k as f64).collect();
    let traj =
        Propagator::new(&model, &eph, PropagationSettings::default()).unwrap().propagate(&init, &epochs).unwrap();
    let c0 = jacobi(0.0, init.tracked_position_au, init.tracked_velocity_au_per_day);
    let mut worst: f64 = 0.0;
    for (e, &t) in epochs.iter().enumerate() {
        let c = jacobi(t, traj.tracked[e].position_au, traj.tracked[e].velocity_au_per_day);
        worst = worst.max(((c - c0) / c0).abs());
    }
    eprintln!("Jacobi constant over 1000 years: worst relative drift {worst:.1e}");
    assert!(worst < 1e-11, "{worst:e}");
}

/// Perturbed W1-like configurations for the finite-difference checks.
fn configurations() -> Vec<InitialState> {
    let mut out = Vec::new();
    let gm_earth = EARTH_MASS_SOLAR * GM_SUN_AU3_PER_DAY2;
    for (k, (a_t, a_p, m_earth)) in
        [(44.0, 75.0, 5.0), (38.0, 55.0, 20.0), (60.0, 250.0, 300.0)].into_iter().enumerate()
    {
        let kk = k as f64;
        let t_el =
            Elements::from_semi_major_axis(a_t, 0.1, (12.0 + 9.0 * kk) * RAD_PER_DEG, 1.0 + kk, 2.0, 0.5 + kk).unwrap();
        let p_el = Elements::from_semi_major_axis(a_p, 0.2, (25.0 + 30.0 * kk) * RAD_PER_DEG, 3.0, 0.3 * kk, 4.0 - kk)
            .unwrap();
        let (rt, vt) = state_from_elements(GM_SUN_AU3_PER_DAY2, &t_el).unwrap();
        let (rp, vp) = state_from_elements(GM_SUN_AU3_PER_DAY2, &p_el).unwrap();
        out.push(InitialState {
            t0_tdb_days: 7000.0,
            tracked_position_au: rt,
            tracked_velocity_au_per_day: vt,
            perturbers: vec![Perturber {
                gm_au3_per_day2: m_earth * gm_earth,
                position_au: rp,
                velocity_au_per_day: vp,
            }],
        });
    }
    out
}

/// The giant planets as REBOUND integrated them (fixture of reference_nbody.rs).
fn rebound_planets() -> Tabulated {
    let rows = read_rows("nbody/planets_plain.csv");
    let bodies = [(5, Body::Jupiter), (6, Body::Saturn), (7, Body::Uranus), (8, Body::Neptune)];
    let samples = bodies
        .iter()
        .map(|&(naif, body)| {
            let mine: Vec<_> = rows.iter().filter(|r| num(r, "naif") as i32 == naif).collect();
            let first = num(mine[0], "t_tdb_days");
            let pos = mine.iter().map(|r| Vec3::new(num(r, "x_au"), num(r, "y_au"), num(r, "z_au"))).collect();
            (body, first, 40.0, pos)
        })
        .collect();
    Tabulated::from_samples("REBOUND planets", samples).unwrap()
}

fn with_param(init: &InitialState, param: usize, delta: f64) -> InitialState {
    let mut s = init.clone();
    let add = |v: &mut Vec3, c: usize| match c {
        0 => v.x += delta,
        1 => v.y += delta,
        _ => v.z += delta,
    };
    match param {
        0..=2 => add(&mut s.tracked_position_au, param),
        3..=5 => add(&mut s.tracked_velocity_au_per_day, param - 3),
        6..=8 => add(&mut s.perturbers[0].position_au, param - 6),
        9..=11 => add(&mut s.perturbers[0].velocity_au_per_day, param - 9),
        _ => s.perturbers[0].gm_au3_per_day2 += delta,
    }
    s
}

#[test]
fn variational_partials_match_central_finite_differences_for_all_13_parameters() {
    // The giant planets from REBOUND's smooth solution (tests/data/nbody), so
    // that the finite differences are not blurred by the short-period terms of
    // the VSOP87 series.
    let span = (7000.0 - 15.0 * 365.25, 7000.0 + 15.0 * 365.25);
    let model = ForceModel::with_known(&[Body::Jupiter, Body::Saturn, Body::Uranus, Body::Neptune]);
    let eph = rebound_planets();
    let epochs: Vec<f64> = (0..=10).map(|k| span.0 + (span.1 - span.0) * k as f64 / 10.0).collect();
    let mut worst: f64 = 0.0;
    let (mut resolved, mut noise_limited) = ([0usize; 13], 0usize);
    for init in configurations() {
        let settings = PropagationSettings { partials: true, tolerance: 1e-11, ..Default::default() };
        let traj = Propagator::new(&model, &eph, settings).unwrap().propagate(&init, &epochs).unwrap();
        // The plain propagations replay one step plan, so the differences see a
        // smooth function of the parameters.
        let plain = PropagationSettings { reuse_steps: true, tolerance: 1e-11, ..Default::default() };
        let mut prop = Propagator::new(&model, &eph, plain).unwrap();
        prop.propagate(&init, &epochs).unwrap();
        for (param, resolved_here) in resolved.iter_mut().enumerate() {
            let h = match param {
                0..=2 => 1e-3,
                3..=5 => 1e-6,
                6..=8 => 0.5,
                9..=11 => 5e-5,
                _ => 0.1 * init.perturbers[0].gm_au3_per_day2,
            };
            // Fourth-order central differences: [8(f(+h) - f(-h)) - (f(+2h) - f(-2h))] / 12h.
            let runs: Vec<_> = [h, -h, 2.0 * h, -2.0 * h]
                .iter()
                .map(|&d| prop.propagate(&with_param(&init, param, d), &epochs).unwrap())
                .collect();
            let component = |t: &latens::dynamics::Trajectory, e: usize, c: usize| {
                if c < 3 {
                    t.tracked[e].position_au.to_array()[c]
                } else {
                    t.tracked[e].velocity_au_per_day.to_array()[c - 3]
                }
            };
            for e in 0..epochs.len() {
                let fd: Vec<f64> = (0..6)
                    .map(|c| {
                        let f = |k: usize| component(&runs[k], e, c);
                        (8.0 * (f(0) - f(1)) - (f(2) - f(3))) / (12.0 * h)
                    })
                    .collect();
                let var: Vec<f64> = (0..6).map(|c| traj.tracked_partial(e, c, param)).collect();
                // Relative to the size of this parameter's position (or
                // velocity) column, plus the rounding noise of the differenced
                // propagations (measured up to 6e-14 au in a 40 au position;
                // allowed 1e-13 au and 1e-16 au/day, times 18/12 for the
                // four-point formula) divided by h. The perturber's partials
                // are small (1e-8..1e-4), so part of them is decided at that
                // noise level; the REBOUND comparison in reference_nbody.rs
                // (5e-15) tests them closely.
                for (block, noise) in [(0..3, 1e-13), (3..6, 1e-16)] {
                    let scale = var[block.clone()].iter().map(|x| x * x).sum::<f64>().sqrt();
                    let floor = 1.5 * noise / h;
                    for c in block {
                        let diff = (fd[c] - var[c]).abs();
                        assert!(
                            diff <= 1e-6 * scale + floor,
                            "parameter {param}, epoch {e}, component {c}: variational {} vs finite difference {}",
                            var[c],
                            fd[c]
                        );
                        if scale > 0.0 && floor < 1e-6 * scale {
                            worst = worst.max(diff / scale);
                            *resolved_here += 1;
                        } else {
                            noise_limited += 1;
                        }
                    }
                }
            }
        }
    }
    eprintln!(
        "variational vs finite differences: worst relative difference {worst:.1e} where resolved at 1e-6; \
         resolved comparisons per parameter {resolved:?}, {noise_limited} more decided at the noise floor"
    );
    // Every parameter must have been tested at the 1e-6 level somewhere.
    assert!(resolved.iter().all(|&n| n >= 10), "a parameter was never resolved at 1e-6: {resolved:?}");
}
