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
use latens::ephemeris::Vsop87;
use latens::frames::icrf_from_ecliptic;
use latens::io::write_atomically;
use latens::perturber::KeplerOrbit;
use latens::pipeline::{OrbitSample, predict};
use latens::time::{epoch_from_tdb_days, parse_epoch, tdb_days_from_j2000, utc_iso_from_epoch};
use latens::units::{GM_SUN_AU3_PER_DAY2, J2000_JD, RAD_PER_DEG};

fn bad(e: impl std::fmt::Display) -> CliError {
    CliError::bad_input(anyhow::anyhow!("{e}"))
}

/// The samples of posterior.csv as orbits at `epoch` about a central mass
/// of GM `gm` (the summary's; the Sun's in summaries that do not record it).
fn read_samples(path: &Path, epoch: f64, gm: f64) -> Result<Vec<OrbitSample>, CliError> {
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
        // The elements are written with the Sun's GM (docs/formats.md):
        // that GM gives back the sample's state; the orbit then moves about
        // the model's central mass, as in the search and the sampler.
        let (r, vel) = state_from_elements(GM_SUN_AU3_PER_DAY2, &el)
            .map_err(|e| bad(format!("{}:{line}: elements: {e}", path.display())))?;
        let orbit = KeplerOrbit::from_state(gm, icrf_from_ecliptic(r), icrf_from_ecliptic(vel), epoch)
            .ok_or_else(|| bad(format!("{}:{line}: the orbit is not bound", path.display())))?;
        out.push(OrbitSample { mass_earth: v[0], orbit, direction: latens::frames::vector_from_radec_deg(v[7], v[8]) });
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
    let gm = summary.settings.as_ref().and_then(|s| s.central_gm_au3_per_day2).unwrap_or(GM_SUN_AU3_PER_DAY2);
    if !(gm.is_finite() && gm > 0.0) {
        return Err(bad(format!(
            "{}: field `settings.central_gm_au3_per_day2` is not a positive number",
            summary_path.display()
        )));
    }
    let samples = read_samples(&args.from.join("posterior.csv"), epoch, gm)?;
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
    let predictions = predict(&samples, &earth, start, args.step_days, steps)?;
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
    for p in &predictions {
        w.write_record([
            p.mode.to_string(),
            utc_iso_from_epoch(epoch_from_tdb_days(p.t_tdb_days)),
            format!("{:.5}", p.ra_deg),
            format!("{:.5}", p.dec_deg),
            format!("{:.4}", p.ellipse_major_deg),
            format!("{:.4}", p.ellipse_minor_deg),
            format!("{:.1}", p.ellipse_pa_deg),
            format!("{:.2}", p.v_mag_bright),
            format!("{:.2}", p.v_mag_faint),
            format!("{:.3}", p.motion_arcsec_per_hour),
            format!("{:.1}", p.motion_pa_deg),
            format!("{:.2}", p.solar_elongation_deg),
            p.near_sun.to_string(),
        ])
        .map_err(fail)?;
    }
    let near_sun_rows = predictions.iter().filter(|p| p.near_sun).count();
    let n_modes = predictions.iter().map(|p| p.mode).collect::<std::collections::BTreeSet<_>>().len();
    let bytes = w.into_inner().map_err(|e| CliError::failed(anyhow::anyhow!("{e}")))?;
    std::fs::create_dir_all(&out_dir)
        .map_err(|e| CliError::failed(anyhow::anyhow!("creating {}: {e}", out_dir.display())))?;
    write_atomically(&out_dir.join("predict.csv"), &bytes).map_err(CliError::failed)?;
    say!(
        "Predicted {} mode(s) at {steps} dates from {} to {} ({} days apart)",
        n_modes,
        &utc_iso_from_epoch(epoch_from_tdb_days(start))[..10],
        &utc_iso_from_epoch(epoch_from_tdb_days(start + (steps - 1) as f64 * args.step_days))[..10],
        args.step_days
    );
    if near_sun_rows > 0 {
        say!(
            "warning: {near_sun_rows} predicted places lie within 45 deg of the Sun (near_sun = true): pointing a telescope or any optics near the Sun can blind and destroy eyes and instruments; such fields are observable only in twilight, if at all"
        );
    }
    say!("Files written in {}:", out_dir.display());
    say!("  predict.csv          per mode and date: centre, 1-sigma ellipse, V range, motion, solar elongation");
    Ok(())
}
