//! The profile-likelihood sky region of a simulation against its truth:
//! whether the 50% and 90% confidence regions hold the true place, their
//! areas, the drop at the truth's pixel below the best, and the time taken
//! (tests/coverage/demo_seeds.sh, docs/validation.md).
//!
//! `cargo run --release --example profile_coverage -- DIR [ORDER MARGIN
//! ITERATIONS]` (defaults: the library's), DIR a
//! `latens simulate` output of a scenario with the demo's force model
//! (Jupiter to Neptune), searched at `infer`'s defaults without nulls.
use latens::dynamics::TrackedBody;
use latens::perturber::profile::{ProfileSettings, Vantage, sky_profile};
use latens::pipeline::{DetectionSettings, EphemerisSource, SearchGeometry, Study, TrackedArc, detect, parse_known};
use std::path::Path;

fn main() {
    let mut args = std::env::args().skip(1);
    let dir = args.next().expect("a simulation directory");
    let d = ProfileSettings::default();
    let order: u8 = args.next().map_or(d.order, |o| o.parse().expect("an order"));
    let margin: f64 = args.next().map_or(d.margin, |o| o.parse().expect("a margin"));
    let polish_iterations: u64 = args.next().map_or(d.polish_iterations, |o| o.parse().expect("iterations"));
    let dir = Path::new(&dir);
    let known = parse_known("jupiter,saturn,uranus,neptune").unwrap();
    let arc =
        TrackedArc::load(&dir.join("observations.csv"), Some(&dir.join("sites.csv")), &known, TrackedBody::massless())
            .unwrap();
    let study = Study::new(vec![arc], &EphemerisSource::parse("builtin"), None).unwrap();
    let mut settings = DetectionSettings { search: Default::default(), reject_sigma: Some(10.0), start_orbit: None };
    settings.search.n_null = 0;
    let started = std::time::Instant::now();
    let det = detect(&study, &settings, &latens::progress::Quiet).unwrap();
    let detect_s = started.elapsed().as_secs_f64();
    let (kernel, _) = det.posterior_kernel();
    let search = SearchGeometry::new(study.wide.as_ref(), study.search_epoch_tdb_days).unwrap();
    let vantage = Vantage { epoch_tdb_days: search.epoch, observer_au: search.geometry.observer_au };
    let started = std::time::Instant::now();
    let profile_settings = ProfileSettings { order, margin, polish_iterations };
    let seeds: Vec<_> = det.basins.iter().map(|b| b.hypothesis).collect();
    let profile =
        sky_profile(kernel, vantage, &settings.search, 0.6, &profile_settings, &seeds, &latens::progress::Quiet);
    let profile_s = started.elapsed().as_secs_f64();
    let t: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(dir.join("truth.json")).unwrap()).unwrap();
    let p = &t["perturber"]["at_search_epoch"];
    let truth = latens::frames::vector_from_radec_deg(p["ra_deg"].as_f64().unwrap(), p["dec_deg"].as_f64().unwrap());
    let below = profile.best - profile.at(truth);
    let (r50, r90) = (profile.region(0.5), profile.region(0.9));
    println!(
        "{}: best {:.1} (basin {:.1}); truth's pixel {:.2} below; in 50% {} / 90% {}; areas {:.0} / {:.0} sq deg; \
         {} evaluations, {} polished, profile {:.1} s, detection {:.1} s",
        dir.display(),
        profile.best,
        det.basins.first().map_or(f64::NAN, |b| b.delta_chi2),
        below,
        below <= latens::perturber::profile::profile_threshold(0.5),
        below <= latens::perturber::profile::profile_threshold(0.9),
        profile.area_deg2(&r50),
        profile.area_deg2(&r90),
        profile.n_evaluations,
        profile.n_polished,
        profile_s,
        detect_s
    );
}
