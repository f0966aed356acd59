//! `latens infer` with several tracked bodies: one perturber searched
//! jointly over all their residuals (see `latens::pipeline::detect_joint`).
//!
//! Writes `summary.json` (the joint verdict, each body's share, the basins
//! and the search without the strongest body), `bodies.csv` (one row per
//! body) and, per body, its reference fit under `bodies/NAME/` as
//! `latens residuals` writes it.

use std::fmt::Write as _;
use std::path::Path;

use super::CliError;
use super::infer::InferPlan;
use super::residuals::{ResidualProducts, orbit_file};
use latens_charts::residual_chart::ResidualOverview;

/// Bodies drawn in the residual overview at most.
const OVERVIEW_ROWS: usize = 24;
use latens::dynamics::kepler::{OUTPUT_FRAME, OutputElements};
use latens::io::results::{
    DetectionFile, JointBasinFile, JointBodyFile, JointRefinedBodyFile, JointRefinedFile, JointSummaryFile,
    LeaveOneOutFile, NonlinearStageFile, OutlierFile, RefinedSolutionFile, SearchStatsFile,
};
use latens::io::write_atomically;
use latens::perturber::{KeplerOrbit, Scored, SignalKernel};
use latens::pipeline::{
    JointDetection, JointPosteriorOutcome, JointSettings, SUN_WARNING_DEG, SearchGeometry, Study, TrackedArc,
    detect_joint,
};
use latens::time::{epoch_from_tdb_days, utc_iso_from_epoch};
use latens::units::{J2000_JD, RAD_PER_DEG};

/// What a joint run does not give yet.
const NOT_COMPUTED: [&str; 1] = ["prediction (latens predict takes one body's summary)"];

/// Runs a joint study of the plan's bodies and writes its files.
pub(super) fn execute(plan: &InferPlan, arcs: Vec<TrackedArc>) -> Result<(), CliError> {
    let out = plan.out.as_path();
    let sources: Vec<String> =
        arcs.iter().map(|a| a.observations.first().map_or("", |o| o.file()).to_string()).collect();
    let study = Study::new(arcs, &plan.ephemeris, plan.search_epoch)?;
    let settings = JointSettings {
        search: plan.detection.search.clone(),
        each_alone: true,
        leave_one_out: true,
        reject_sigma: plan.detection.reject_sigma,
    };
    let found = detect_joint(&study, &settings, &crate::cli::progress::Bars::new())?;
    let detected = found.verdict.detected();

    // The shared perturber's posterior; where to look only for a detection.
    let truth = super::infer::Truth::at_epoch(plan.truth.as_ref(), study.search_epoch_tdb_days);
    let (posterior, posterior_text, mut files) =
        super::posterior::run_joint(out, &study, &found, &plan.posterior, truth.as_ref())?;
    let samples = posterior.run.as_ref().map_or(&[][..], |r| r.samples.as_slice());
    let upper_limits =
        if detected { Vec::new() } else { super::infer::upper_limits(samples, settings.search.distance_au) };
    let sky = match &posterior.run {
        Some(run) if detected && !run.samples.is_empty() => {
            let (kernel, _) = found.posterior_kernel();
            let bars = crate::cli::progress::Bars::new();
            let confidence = plan
                .confidence_region
                .then(|| {
                    latens::pipeline::confidence_region(
                        &study,
                        kernel,
                        &found.settings.search,
                        &found.basins,
                        run,
                        &bars,
                    )
                })
                .transpose()?;
            let sky_inputs = super::search::Found {
                t0: kernel.epoch_tdb_days(),
                gm_sun: kernel.central_gm(),
                basins: &found.basins,
                confidence: confidence.as_ref(),
            };
            Some(super::search::run_at(out, &study, &sky_inputs, run, &posterior.explanation, truth.as_ref())?)
        }
        _ => None,
    };
    if let Some(s) = &sky {
        files.extend(s.files.iter().cloned());
    }

    let search = SearchGeometry::new(study.wide.as_ref(), study.search_epoch_tdb_days)?;
    let basins: Vec<JointBasinFile> = found.basins.iter().filter_map(|b| basin_file(b, &found, &search)).collect();
    let mut warnings = found.warnings();
    warnings.extend(posterior.warnings.iter().cloned());
    if let Some(s) = &sky {
        warnings.extend(s.warnings.iter().cloned());
    }
    for (k, b) in basins.iter().enumerate() {
        if detected && b.solar_elongation_deg < SUN_WARNING_DEG {
            warnings.push(super::infer::sun_warning(k + 1, b.solar_elongation_deg));
        }
    }
    let best = found.best_delta_chi2();
    let total_part: f64 = found.evidence.iter().map(|e| e.delta_chi2_at_best).sum();
    let model = &study.bodies[0].model;
    let bodies: Vec<JointBodyFile> = found
        .bodies
        .iter()
        .zip(&found.evidence)
        .zip(&sources)
        .enumerate()
        .map(|(k, ((b, e), file))| JointBodyFile {
            name: b.name.clone(),
            file: file.clone(),
            n_observations: b.observations.len(),
            kind: study.bodies[k].tracked.kind.name().into(),
            tracked_mass_earth: study.bodies[k].tracked.gm_au3_per_day2 / latens::units::GM_EARTH_MASS_AU3_PER_DAY2,
            null_chi2: b.null.chi2,
            null_dof: b.null.dof,
            n_set_aside: b.set_aside.len(),
            delta_chi2_at_best: e.delta_chi2_at_best,
            share_of_best: if total_part > 0.0 { e.delta_chi2_at_best / total_part } else { 0.0 },
            alone_delta_chi2: e.alone.map(|a| a.delta_chi2),
            alone_false_alarm_probability: e.alone.map(|a| a.false_alarm_probability),
            orbit_correction_km: posterior.corrections.get(k).map(|c| c.position_km),
            orbit_correction_m_per_s: posterior.corrections.get(k).map(|c| c.velocity_m_per_s),
            alternatives: posterior.body_alternatives.get(k).cloned().unwrap_or_default(),
            orbit: orbit_file(&b.null),
        })
        .collect();
    let s = &plan.detection.search;
    let summary = JointSummaryFile {
        study: "joint".into(),
        n_bodies: bodies.len(),
        reference_epoch_utc: utc_iso_from_epoch(epoch_from_tdb_days(found.epoch_tdb_days)),
        reference_epoch_tdb_jd: J2000_JD + found.epoch_tdb_days,
        search_epoch_utc: utc_iso_from_epoch(epoch_from_tdb_days(study.search_epoch_tdb_days)),
        seed: s.seed,
        settings: super::infer::settings_file(s, model, study.ephemeris.description()),
        bodies,
        detection: DetectionFile {
            delta_chi2: best,
            false_alarm_probability: found.false_alarm_probability(),
            n_null_simulations: found.search.null_maxima.len(),
            largest_null_delta_chi2: found.search.null_maxima.iter().copied().fold(0.0, f64::max),
            detected,
            verdict: verdict_with_explanation(found.verdict_text(), detected, &posterior),
        },
        search: SearchStatsFile {
            n_hypotheses: found.search.n_hypotheses,
            n_skipped_close_approach: found.search.n_skipped_close,
            signal_subspace_dimension: found.search.subspace_dimension,
            signal_subspace_energy: found.search.subspace_energy,
        },
        basins,
        leave_one_out: found.leave_one_out.as_ref().map(|l| LeaveOneOutFile {
            left_out: found.bodies[l.body].name.clone(),
            delta_chi2: l.delta_chi2,
            false_alarm_probability: l.false_alarm_probability,
            detected: l.false_alarm_probability < settings.search.fap_level,
        }),
        refined_best_fit: found.refined.as_ref().map(|r| refined_file(r, &found)),
        nonlinear_stage: found.centred.as_ref().map(|c| NonlinearStageFile {
            rounds: found.rounds,
            chi2_at_centre: c.chi2_at_centre,
            delta_chi2_at_centre: found.bodies.iter().map(|b| b.null.chi2).sum::<f64>() - c.chi2_at_centre,
            note: "every body's linear kernel recentred on the refined full-model solution (its residuals under the \
                   full model plus the kernel's signal of that solution), so the linear model is exact at the centre; \
                   the basins and the posterior come from the search on them"
                .into(),
        }),
        posterior: posterior.run.as_ref().map(|r| r.summary.clone()),
        evidence: posterior.run.as_ref().and_then(|r| r.evidence.clone()),
        alternatives: posterior.alternatives.clone(),
        explanation: Some(posterior.explanation.file()),
        diagnostics: posterior.run.as_ref().map(|r| r.diagnostics.clone()),
        sky: sky.as_ref().map(|s| s.sky.clone()),
        upper_limits,
        outliers: OutlierFile {
            threshold_sigma: settings.reject_sigma,
            judged_against: found.judged_against.describe().into(),
            excluded_by_hand: study.bodies.iter().flat_map(|a| a.excluded_by_hand.iter().cloned()).collect(),
            set_aside: found.bodies.iter().flat_map(|b| b.set_aside.iter().cloned()).collect(),
        },
        not_computed: NOT_COMPUTED.iter().map(|s| s.to_string()).collect(),
        warnings,
    };
    write_outputs(out, &summary, &found, &study).map_err(CliError::failed)?;
    let sky_text = sky.as_ref().map_or("", |s| s.text.as_str());
    super::report(&report(&summary, out, &posterior_text, sky_text, &files));
    Ok(())
}

/// The verdict, with the explanation when the data prefer another one.
fn verdict_with_explanation(mut verdict: String, detected: bool, posterior: &JointPosteriorOutcome) -> String {
    if detected && posterior.run.as_ref().is_some_and(|r| r.evidence.is_some()) {
        verdict.push_str(&super::infer::explanation_clause(&posterior.explanation, false));
    }
    verdict
}

/// A basin's orbit and its place at the search epoch (`None` if unbound).
fn basin_file(b: &Scored, found: &JointDetection, search: &SearchGeometry) -> Option<JointBasinFile> {
    let h = &b.hypothesis;
    let t0 = found.epoch_tdb_days;
    let orbit = KeplerOrbit::from_state(found.kernel.central_gm(), h.position_au, h.velocity_au_per_day, t0)?;
    let el = OutputElements::from_icrf_state(h.position_au, h.velocity_au_per_day).ok()?;
    let (direction, distance, heliocentric, elongation) = search.place_at(&orbit, search.epoch, &search.geometry);
    let radec = latens::frames::radec_from_vector(direction);
    let (r, v) = (h.position_au, h.velocity_au_per_day);
    Some(JointBasinFile {
        delta_chi2: b.delta_chi2,
        mass_earth: b.mass_earth(),
        frame: OUTPUT_FRAME.into(),
        epoch_tdb_jd: J2000_JD + t0,
        elements: el,
        state_icrf: [r.x, r.y, r.z, v.x, v.y, v.z],
        ra_deg: radec.ra_rad / RAD_PER_DEG,
        dec_deg: radec.dec_rad / RAD_PER_DEG,
        distance_au: distance,
        heliocentric_distance_au: heliocentric,
        solar_elongation_deg: elongation,
        closest_approach_au: b.closest_approach_au,
    })
}

/// A body's directory name: its name with path separators, spaces and
/// other characters a file system may refuse replaced by `_`.
fn dir_name(name: &str) -> String {
    let safe: String = name.chars().map(|c| if c.is_alphanumeric() || "-_.+".contains(c) { c } else { '_' }).collect();
    if safe.trim_matches('.').is_empty() { format!("body_{safe}") } else { safe }
}

/// A CSV field, quoted when it holds a separator, a quote or a line break.
fn field(text: &str) -> String {
    if text.contains([',', '"', '\n', '\r']) { format!("\"{}\"", text.replace('"', "\"\"")) } else { text.into() }
}

fn write_outputs(out: &Path, summary: &JointSummaryFile, found: &JointDetection, study: &Study) -> anyhow::Result<()> {
    std::fs::create_dir_all(out).map_err(|e| anyhow::anyhow!("creating {}: {e}", out.display()))?;
    let json = serde_json::to_string_pretty(summary)? + "\n";
    write_atomically(&out.join("summary.json"), json.as_bytes())?;
    let opt = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v:.6e}"));
    let mut csv = String::from(
        "name,file,n_observations,null_chi2,null_dof,delta_chi2_at_best,share_of_best,alone_delta_chi2,alone_false_alarm_probability,orbit_correction_km_median,orbit_correction_m_per_s_median,nongrav_log10_bayes_factor,kind,tracked_mass_earth,n_set_aside\n",
    );
    for b in &summary.bodies {
        let nongrav =
            b.alternatives.iter().find(|a| a.name.starts_with("non-gravitational")).map(|a| a.log10_bayes_factor);
        let _ = writeln!(
            csv,
            "{},{},{},{:.4},{},{:.4},{:.4},{},{},{},{},{},{},{:.6e},{}",
            field(&b.name),
            field(&b.file),
            b.n_observations,
            b.null_chi2,
            b.null_dof,
            b.delta_chi2_at_best,
            b.share_of_best,
            opt(b.alone_delta_chi2),
            opt(b.alone_false_alarm_probability),
            opt(b.orbit_correction_km.map(|c| c.median)),
            opt(b.orbit_correction_m_per_s.map(|c| c.median)),
            opt(nongrav),
            b.kind,
            b.tracked_mass_earth,
            b.n_set_aside
        );
    }
    write_atomically(&out.join("bodies.csv"), csv.as_bytes())?;
    let mut products = Vec::new();
    for (b, arc) in found.bodies.iter().zip(&study.bodies) {
        let dir = out.join("bodies").join(dir_name(&b.name));
        std::fs::create_dir_all(&dir).map_err(|e| anyhow::anyhow!("creating {}: {e}", dir.display()))?;
        let p = ResidualProducts::build(&b.null, &b.observations, &arc.model, study.ephemeris.description());
        p.write(&dir)?;
        products.push((b.name.as_str(), p));
    }
    // The overview: every body's O-C on one page; past OVERVIEW_ROWS
    // bodies, those whose residuals fit worst (largest chi2/dof).
    let n = products.len();
    products.sort_by(|a, b| b.1.fit_stats.0.total_cmp(&a.1.fit_stats.0));
    products.truncate(OVERVIEW_ROWS);
    products.sort_by_key(|(name, _)| found.bodies.iter().position(|b| b.name == *name));
    let overview = ResidualOverview {
        title: format!("O-C of {n} bodies under the null model (no perturber)"),
        subtitle: if n > OVERVIEW_ROWS {
            format!("the {OVERVIEW_ROWS} of {n} bodies that fit worst (largest chi2/dof); every body in bodies/NAME/")
        } else {
            "each body's orbit fitted alone; one time axis, each row on its own scale".into()
        },
        rows: products
            .iter()
            .map(|(name, p)| {
                let (c, ra, dec) = p.fit_stats;
                (format!("{name}: chi2/dof {c:.2}, RMS {ra:.3}\" / {dec:.3}\""), p.chart())
            })
            .collect(),
    };
    super::write_chart(out, "residuals_overview", |tmp| overview.draw_png(tmp), || overview.draw_svg())?;
    Ok(())
}

/// The report printed at the end.
fn report(
    s: &JointSummaryFile,
    out: &Path,
    posterior_text: &str,
    sky_text: &str,
    files: &[(String, &'static str)],
) -> String {
    let mut text = String::new();
    let _ = writeln!(
        text,
        "Joint study of {} tracked bodies, reference orbits at {} (one epoch for all)",
        s.n_bodies, s.reference_epoch_utc
    );
    let _ = writeln!(text, "Verdict: {}", s.detection.verdict);
    let _ = writeln!(
        text,
        "  {:<20} {:>6} {:>12} {:>10} {:>12} {:>10}",
        "body", "obs", "null chi2", "share", "alone dchi2", "alone FAP"
    );
    for b in &s.bodies {
        let _ = writeln!(
            text,
            "  {:<20} {:>6} {:>12.1} {:>9.0}% {:>12} {:>10}",
            b.name,
            b.n_observations,
            b.null_chi2,
            100.0 * b.share_of_best,
            b.alone_delta_chi2.map_or("-".into(), |v| format!("{v:.1}")),
            b.alone_false_alarm_probability.map_or("-".into(), |v| format!("{v:.3}"))
        );
    }
    for (k, b) in s.basins.iter().enumerate() {
        let _ = writeln!(
            text,
            "  basin {}: delta chi2 {:.1}, {:.2} Earth masses {:.0} au from the Sun at the reference epoch; at the search epoch \
             RA {:.2} deg, Dec {:+.2} deg, {:.0} au away, {:.0} deg from the Sun",
            k + 1,
            b.delta_chi2,
            b.mass_earth,
            b.heliocentric_distance_au,
            b.ra_deg,
            b.dec_deg,
            b.distance_au,
            b.solar_elongation_deg
        );
    }
    if let Some(r) = &s.refined_best_fit {
        let _ = writeln!(
            text,
            "  refined on the full model (every body's orbit refitted): delta chi2 {:.1}, {:.2} +/- {:.2} Earth masses, a {:.1} au, e {:.3}, i {:.1} deg; {}",
            r.solution.delta_chi2,
            r.solution.mass_earth,
            r.solution.mass_sigma_earth,
            r.solution.elements.a_au,
            r.solution.elements.e,
            r.solution.elements.inc_deg,
            r.solution.note
        );
    }
    if let Some(n) = &s.nonlinear_stage {
        let _ = writeln!(
            text,
            "  every body's kernel recentred on the refined solution ({} round(s)): the basins and the posterior come from it",
            n.rounds
        );
    }
    text.push_str(posterior_text);
    text.push_str(sky_text);
    for w in &s.warnings {
        let _ = writeln!(text, "Warning: {w}");
    }
    if !s.not_computed.is_empty() {
        let _ = writeln!(text, "Not computed in a joint study yet: {}.", s.not_computed.join("; "));
    }
    let _ = writeln!(text, "Files written in {}:", out.display());
    let _ = writeln!(
        text,
        "  summary.json    the joint verdict, each body's share, the basins, the search without the strongest body"
    );
    let _ = writeln!(
        text,
        "  bodies.csv      one row per body: observations, null chi-square, share of the signal, the body searched alone"
    );
    let _ = writeln!(
        text,
        "  bodies/NAME/    each body's reference fit (fit.json, residuals.csv{})",
        super::and_chart("residuals")
    );
    if let Some(name) = super::chart_name("residuals_overview") {
        let _ = writeln!(text, "  {name}  every body's O-C on one page (the worst-fitting {OVERVIEW_ROWS} past that)");
    }
    for (name, what) in files {
        let _ = writeln!(text, "  {name:<15} {what}");
    }
    text
}

/// The refined joint solution as `summary.json` gives it.
fn refined_file(r: &latens::perturber::joint_refine::JointRefinement, found: &JointDetection) -> JointRefinedFile {
    let null_chi2: f64 = found.bodies.iter().map(|b| b.null.chi2).sum();
    JointRefinedFile {
        solution: RefinedSolutionFile::new(
            &r.perturber,
            r.chi2,
            null_chi2,
            r.gm_sigma,
            found.epoch_tdb_days,
            r.iterations,
            r.condition_number,
            &r.note,
        ),
        orbit_fitted: r.orbit_fitted,
        bodies: found
            .bodies
            .iter()
            .zip(&r.chi2_by_body)
            .map(|(b, &chi2)| JointRefinedBodyFile { name: b.name.clone(), chi2, delta_chi2: b.null.chi2 - chi2 })
            .collect(),
    }
}
