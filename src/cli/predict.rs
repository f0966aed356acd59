//! `latens predict --from DIR`: where each sky mode of an `infer` result
//! will be, date by date, for scheduling the search (predict.csv).
//!
//! Each posterior sample's orbit (its elements in posterior.csv) moves on a
//! two-body orbit about the Sun; over the year or two of a search campaign
//! the planets change a distant perturber's place by far less than the
//! posterior's spread. The Earth comes from the embedded VSOP87A. The modes
//! are those of `infer` (the same map built from the same samples).

use std::path::{Path, PathBuf};

use super::CliError;
use super::args::PredictArgs;
use latens::dynamics::kepler::{Elements, state_from_elements};
use latens::ephemeris::{Ephemeris, Vsop87};
use latens::frames::{angular_separation, icrf_from_ecliptic};
use latens::io::write_atomically;
use latens::perturber::KeplerOrbit;
use latens::pipeline::{SearchGeometry, geometry_at};
use latens::posterior::quantiles;
use latens::skymap::observe::{magnitude_range, motion};
use latens::skymap::{SkyMap, lon_lat};
use latens::time::{epoch_from_tdb_days, parse_epoch, tdb_days_from_j2000, utc_iso_from_epoch};
use latens::units::{GM_SUN_AU3_PER_DAY2, J2000_JD, RAD_PER_DEG};
use latens::vec3::Vec3;
use latens_charts::search_chart::tangent;

/// Samples followed per mode.
const PER_MODE: usize = 400;

struct Sample {
    mass_earth: f64,
    orbit: KeplerOrbit,
    direction: Vec3,
}

fn bad(e: impl std::fmt::Display) -> CliError {
    CliError::bad_input(anyhow::anyhow!("{e}"))
}

fn read_samples(path: &Path, epoch: f64) -> Result<Vec<Sample>, CliError> {
    let mut reader = csv::Reader::from_path(path).map_err(|e| bad(format!("{}: {e}", path.display())))?;
    let headers = reader.headers().map_err(|e| bad(format!("{}: {e}", path.display())))?.clone();
    let col = |name: &str| -> Result<usize, CliError> {
        headers.iter().position(|h| h == name).ok_or_else(|| bad(format!("{}: no column `{name}`", path.display())))
    };
    let names = ["mass_earth", "a_au", "e", "inc_deg", "node_deg", "peri_deg", "mean_anomaly_deg", "ra_deg", "dec_deg"];
    let idx: Vec<usize> = names.iter().map(|n| col(n)).collect::<Result<_, _>>()?;
    let mut out = Vec::new();
    for (k, record) in reader.records().enumerate() {
        let line = k + 2;
        let record = record.map_err(|e| bad(format!("{}:{line}: {e}", path.display())))?;
        let mut v = [0.0; 9];
        for (j, &i) in idx.iter().enumerate() {
            let text = record.get(i).unwrap_or("");
            v[j] = text.trim().parse::<f64>().ok().filter(|x| x.is_finite()).ok_or_else(|| {
                bad(format!("{}:{line}: field `{}`: not a number: `{text}`", path.display(), names[j]))
            })?;
        }
        let el = Elements::from_semi_major_axis(
            v[1],
            v[2],
            v[3] * RAD_PER_DEG,
            v[4] * RAD_PER_DEG,
            v[5] * RAD_PER_DEG,
            v[6] * RAD_PER_DEG,
        )
        .map_err(|e| bad(format!("{}:{line}: elements: {e}", path.display())))?;
        let (r, vel) = state_from_elements(GM_SUN_AU3_PER_DAY2, &el)
            .map_err(|e| bad(format!("{}:{line}: elements: {e}", path.display())))?;
        let orbit = KeplerOrbit::from_state(GM_SUN_AU3_PER_DAY2, icrf_from_ecliptic(r), icrf_from_ecliptic(vel), epoch)
            .ok_or_else(|| bad(format!("{}:{line}: the orbit is not bound", path.display())))?;
        out.push(Sample { mass_earth: v[0], orbit, direction: latens::frames::vector_from_radec_deg(v[7], v[8]) });
    }
    if out.is_empty() {
        return Err(bad(format!("{}: no samples", path.display())));
    }
    Ok(out)
}

fn date(text: &str, what: &str) -> Result<f64, CliError> {
    parse_epoch(text).map(tdb_days_from_j2000).map_err(|e| bad(format!("{what}: {e}")))
}

pub(super) fn run(args: &PredictArgs) -> Result<(), CliError> {
    let summary_path = args.from.join("summary.json");
    let summary: latens::io::results::SummaryHead = latens::io::results::read_json(&summary_path).map_err(bad)?;
    let epoch = summary.null_model.orbit.epoch_tdb_jd - J2000_JD;
    if !epoch.is_finite() {
        return Err(bad(format!("{}: field `null_model.orbit.epoch_tdb_jd` is not a number", summary_path.display())));
    }
    let search_epoch = date(&summary.search_epoch_utc, &format!("{}: search_epoch_utc", summary_path.display()))?;
    let samples = read_samples(&args.from.join("posterior.csv"), epoch)?;
    let start = match &args.start {
        Some(t) => date(t, "--start")?,
        None => search_epoch,
    };
    let end = match &args.end {
        Some(t) => date(t, "--end")?,
        None => start + 365.25,
    };
    if !(args.step_days.is_finite() && args.step_days > 0.0) {
        return Err(bad(format!("--step-days must be positive, got {}", args.step_days)));
    }
    if end < start {
        return Err(bad("--end is before --start"));
    }
    let steps = ((end - start) / args.step_days).floor() as usize + 1;
    if steps > 100_000 {
        return Err(bad(format!("{steps} dates asked for; use a larger --step-days")));
    }
    let earth = Vsop87::new();
    // The modes, as `infer` found them.
    let directions: Vec<Vec3> = samples.iter().map(|s| s.direction).collect();
    let map = SkyMap::from_directions(&directions);
    let modes = map.modes(0.9);
    let out_dir: PathBuf = args.out.clone().unwrap_or_else(|| args.from.clone());
    let mut w = csv::Writer::from_writer(Vec::new());
    let fail = |e: csv::Error| CliError::failed(anyhow::anyhow!(e));
    w.write_record([
        "mode",
        "epoch_utc",
        "ra_deg",
        "dec_deg",
        "ellipse_major_deg",
        "ellipse_minor_deg",
        "ellipse_pa_deg",
        "v_mag_bright",
        "v_mag_faint",
        "motion_arcsec_per_hour",
        "motion_pa_deg",
        "solar_elongation_deg",
        "near_sun",
    ])
    .map_err(fail)?;
    let mut near_sun_rows = 0;
    let listed: Vec<usize> = (0..modes.probability.len()).filter(|&m| modes.probability[m] >= 0.01).collect();
    for &m in &listed {
        let members: Vec<&Sample> =
            samples.iter().zip(&modes.sample_mode).filter(|(_, k)| **k == Some(m)).map(|(s, _)| s).collect();
        let stride = (members.len() / PER_MODE).max(1);
        let members: Vec<&Sample> = members.into_iter().step_by(stride).collect();
        for k in 0..steps {
            let t = start + k as f64 * args.step_days;
            let search = SearchGeometry::new(&earth as &dyn Ephemeris, t)?;
            let (gb, ga) = (geometry_at(&earth, t - 0.5)?, geometry_at(&earth, t + 0.5)?);
            let mut dirs = Vec::new();
            let (mut bright, mut faint, mut rates) = (Vec::new(), Vec::new(), Vec::new());
            let (mut ps, mut pc) = (0.0, 0.0);
            for s in &members {
                let (d, delta, r, _) = search.place_at(&s.orbit, t, &search.geometry);
                let (a, _, _, _) = search.place_at(&s.orbit, t - 0.5, &gb);
                let (b, _, _, _) = search.place_at(&s.orbit, t + 0.5, &ga);
                let (rate, pa) = motion(a, b, 24.0);
                let (vb, vf) = magnitude_range(s.mass_earth, r, delta);
                dirs.push(d);
                bright.push(vb);
                faint.push(vf);
                rates.push(rate);
                ps += pa.to_radians().sin();
                pc += pa.to_radians().cos();
            }
            let centre = dirs.iter().fold(Vec3::ZERO, |a, d| a + *d).unit();
            let (major, minor, angle) = ellipse(centre, &dirs);
            let (ra, dec) = lon_lat(centre);
            let sun = -search.geometry.observer_au;
            let elongation = angular_separation(centre, sun) / RAD_PER_DEG;
            let near = elongation < 45.0;
            near_sun_rows += usize::from(near);
            w.write_record([
                (m + 1).to_string(),
                utc_iso_from_epoch(epoch_from_tdb_days(t)),
                format!("{:.5}", ra / RAD_PER_DEG),
                format!("{:.5}", dec / RAD_PER_DEG),
                format!("{major:.4}"),
                format!("{minor:.4}"),
                format!("{angle:.1}"),
                format!("{:.2}", quantiles(&bright, &[0.05])[0]),
                format!("{:.2}", quantiles(&faint, &[0.95])[0]),
                format!("{:.3}", quantiles(&rates, &[0.5])[0]),
                format!("{:.1}", ps.atan2(pc).to_degrees().rem_euclid(360.0)),
                format!("{elongation:.2}"),
                near.to_string(),
            ])
            .map_err(fail)?;
        }
    }
    let bytes = w.into_inner().map_err(|e| CliError::failed(anyhow::anyhow!("{e}")))?;
    std::fs::create_dir_all(&out_dir)
        .map_err(|e| CliError::failed(anyhow::anyhow!("creating {}: {e}", out_dir.display())))?;
    write_atomically(&out_dir.join("predict.csv"), &bytes).map_err(CliError::failed)?;
    println!(
        "Predicted {} mode(s) at {steps} dates from {} to {} ({} days apart)",
        listed.len(),
        &utc_iso_from_epoch(epoch_from_tdb_days(start))[..10],
        &utc_iso_from_epoch(epoch_from_tdb_days(start + (steps - 1) as f64 * args.step_days))[..10],
        args.step_days
    );
    if near_sun_rows > 0 {
        println!(
            "warning: {near_sun_rows} predicted places lie within 45 deg of the Sun (near_sun = true): pointing a telescope or any optics near the Sun can blind and destroy eyes and instruments; such fields are observable only in twilight, if at all"
        );
    }
    println!("Files written in {}:", out_dir.display());
    println!("  predict.csv          per mode and date: centre, 1-sigma ellipse, V range, motion, solar elongation");
    Ok(())
}

/// The 1-sigma ellipse of directions about their centre, in the tangent
/// plane: semi-axes (degrees) and the major axis's position angle (degrees
/// east of north).
fn ellipse(centre: Vec3, dirs: &[Vec3]) -> (f64, f64, f64) {
    let pts: Vec<(f64, f64)> = dirs.iter().filter_map(|d| tangent(centre, *d)).collect();
    let n = pts.len().max(1) as f64;
    let (mx, my) = pts.iter().fold((0.0, 0.0), |a, p| (a.0 + p.0 / n, a.1 + p.1 / n));
    let (mut sxx, mut syy, mut sxy) = (0.0, 0.0, 0.0);
    for p in &pts {
        sxx += (p.0 - mx).powi(2) / n;
        syy += (p.1 - my).powi(2) / n;
        sxy += (p.0 - mx) * (p.1 - my) / n;
    }
    let tr = sxx + syy;
    let det = sxx * syy - sxy * sxy;
    let disc = (tr * tr / 4.0 - det).max(0.0).sqrt();
    let (l1, l2) = (tr / 2.0 + disc, (tr / 2.0 - disc).max(0.0));
    // Angle of the major axis from north (y) towards east (x).
    let angle = 0.5 * (2.0 * sxy).atan2(syy - sxx);
    (l1.sqrt(), l2.sqrt(), angle.to_degrees().rem_euclid(180.0))
}
