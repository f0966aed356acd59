//! The linear kernel's chi-square drop at a simulation's true perturber,
//! against the basins the search finds: how far below the best fit the
//! truth lies (tests/coverage/demo_seeds.sh, docs/validation.md).
//!
//! `cargo run --release --example truth_score -- DIR`, DIR a `latens
//! simulate` output of a scenario with the demo's force model (Jupiter to
//! Neptune).
use latens::dynamics::TrackedBody;
use latens::perturber::kernel::{KeplerOrbit, SignalKernel};
use latens::perturber::search::{Hypothesis, score};
use latens::pipeline::{DetectionSettings, EphemerisSource, Study, TrackedArc, detect, parse_known};
use latens::vec3::Vec3;
use std::path::Path;

fn main() {
    let dir = std::env::args().nth(1).unwrap();
    let dir = Path::new(&dir);
    let known = parse_known("jupiter,saturn,uranus,neptune").unwrap();
    let arc =
        TrackedArc::load(&dir.join("observations.csv"), Some(&dir.join("sites.csv")), &known, TrackedBody::massless())
            .unwrap();
    let study = Study::new(vec![arc], &EphemerisSource::parse("builtin"), None).unwrap();
    let mut settings = DetectionSettings { search: Default::default(), reject_sigma: Some(10.0), start_orbit: None };
    settings.search.n_null = 0;
    settings.search.n_directions = 96;
    settings.search.n_distances = 8;
    let det = detect(&study, &settings, &latens::progress::Quiet).unwrap();
    let t: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(dir.join("truth.json")).unwrap()).unwrap();
    let p = &t["perturber"];
    let s: Vec<f64> = p["state_icrf"].as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).collect();
    let t0 = t["epoch_tdb_jd"].as_f64().unwrap() - 2451545.0;
    let k = &det.kernel;
    let gm = k.central_gm();
    let orbit = KeplerOrbit::from_state(gm, Vec3::new(s[0], s[1], s[2]), Vec3::new(s[3], s[4], s[5]), t0).unwrap();
    let te = k.epoch_tdb_days();
    let mut g = 0.0;
    let r = orbit.position(te, &mut g);
    let h = 0.5;
    let v = (orbit.position(te + h, &mut g) - orbit.position(te - h, &mut g)) / (2.0 * h);
    let mut scratch = vec![0.0; k.n_residuals()];
    let gm_earth = latens::units::GM_EARTH_MASS_AU3_PER_DAY2;
    let sc =
        score(k, &Hypothesis { position_au: r, velocity_au_per_day: v }, 5000.0 * gm_earth, 0.0, &mut scratch).unwrap();
    println!(
        "truth: kernel delta chi2 {:.1} with profiled mass {:.2} (true {}), closest {:.1} au",
        sc.delta_chi2,
        sc.mass_earth(),
        p["mass_earth"],
        sc.closest_approach_au
    );
    // At the true mass.
    let mut sig = vec![0.0; k.n_residuals()];
    k.signal(&KeplerOrbit::from_state(gm, r, v, te).unwrap(), &mut sig);
    k.project(&mut sig);
    let (sy, ss) = k.signal_products(&sig);
    let m = p["mass_earth"].as_f64().unwrap() * gm_earth;
    println!("truth at its true mass: delta chi2 {:.1}", 2.0 * m * sy - m * m * ss);
    for b in det.basins.iter().take(5) {
        println!("basin: delta chi2 {:.1}, mass {:.2}", b.delta_chi2, b.mass_earth());
    }
    println!("null chi2 {:.1} dof {}", det.null.chi2, det.null.dof);
}
