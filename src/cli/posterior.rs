//! The posterior stage of `latens infer` as the command line shows it: runs
//! the library's stage with progress bars and Ctrl-C, prints its findings
//! and writes posterior.csv and the corner and trace charts.

use std::fmt::Write as _;
use std::path::Path;

use super::CliError;
use super::args::InferArgs;
use super::infer::Truth;
use latens::io::write_atomically;
use latens::pipeline::{
    DerivedSample, Detection, JointDetection, JointPosteriorOutcome, PipelineError, PosteriorOutcome, PosteriorRun,
    PosteriorSettings, Study, posterior, posterior_joint,
};
use latens::posterior::impostors::{self, ImpostorPriors};
use latens::units::RAD_PER_DEG;
use latens_charts::posterior_chart::{Column, CornerChart, TraceChart, render_png, render_svg};

/// The posterior stage's settings from the arguments (checked before any
/// work starts).
pub(super) fn settings(
    args: &InferArgs,
    out: &Path,
    kind: latens::dynamics::BodyKind,
) -> Result<PosteriorSettings, CliError> {
    let s = PosteriorSettings {
        walkers: args.walkers,
        temperatures: args.temperatures,
        steps: args.posterior_steps,
        runs: args.runs,
        seed: args.seed,
        max_eccentricity: args.max_eccentricity,
        alternatives: ImpostorPriors {
            gm_inflation: args.gm_prior_inflation,
            nongrav_au_per_day2: args.nongrav_prior.unwrap_or(impostors::nongrav_prior_for(kind)),
            offset_arcsec: args.offset_prior,
            nongrav_from_kind: args.nongrav_prior.is_none(),
        },
        sample: !args.no_posterior,
        checkpoint: Some(out.join("checkpoint.json")),
        resume: args.resume.is_some(),
    };
    s.check().map_err(super::pipeline_error)?;
    Ok(s)
}

/// What the stage shows `infer`.
pub(super) struct Outcome {
    pub result: PosteriorOutcome,
    pub text: String,
    pub files: Vec<(String, &'static str)>,
}

impl Outcome {
    /// Equally weighted samples (empty without a posterior).
    pub fn samples(&self) -> &[DerivedSample] {
        self.result.run.as_ref().map_or(&[], |r| r.samples.as_slice())
    }
}

/// Runs the stage, writes its files into `out` and says what it found.
pub(super) fn run(
    out: &Path,
    study: &Study,
    detection: &Detection,
    settings: &PosteriorSettings,
    truth: Option<&Truth>,
) -> Result<Outcome, CliError> {
    let bars = super::progress::Bars::interruptible();
    let result = posterior(study, detection, settings, &bars).map_err(|e| stopped(e, out))?;
    let mut text = String::new();
    let mut files = Vec::new();
    if let Some(run) = &result.run {
        write_run(out, run, &mut text, &mut files, truth)?;
    }
    let _ = writeln!(text, "Explanation: {}", result.explanation.text);
    Ok(Outcome { result, text, files })
}

/// The files a stage wrote: name and what it holds.
pub(super) type Files = Vec<(String, &'static str)>;

/// Runs the posterior of a joint study, writes its files into `out` and
/// says what it found (the bodies' own orbit corrections included).
pub(super) fn run_joint(
    out: &Path,
    study: &Study,
    detection: &JointDetection,
    settings: &PosteriorSettings,
    truth: Option<&Truth>,
) -> Result<(JointPosteriorOutcome, String, Files), CliError> {
    let bars = super::progress::Bars::interruptible();
    let result = posterior_joint(study, detection, settings, &bars).map_err(|e| stopped(e, out))?;
    let mut text = String::new();
    let mut files = Vec::new();
    if let Some(run) = &result.run {
        write_run(out, run, &mut text, &mut files, truth)?;
        let _ = writeln!(
            text,
            "Each body's fitted orbit under the perturber moves at the reference epoch by (median, 68%):"
        );
        for c in &result.corrections {
            let _ = writeln!(
                text,
                "  {:<20} {:>10.0} km ({:.0} to {:.0}), {:>8.3} m/s ({:.3} to {:.3})",
                c.name,
                c.position_km.median,
                c.position_km.lo68,
                c.position_km.hi68,
                c.velocity_m_per_s.median,
                c.velocity_m_per_s.lo68,
                c.velocity_m_per_s.hi68
            );
        }
    }
    let _ = writeln!(text, "Explanation: {}", result.explanation.text);
    Ok((result, text, files))
}

/// An interrupted stage says how to finish it; any other error as it is.
fn stopped(e: PipelineError, out: &Path) -> CliError {
    match e {
        PipelineError::Interrupted { step, of, checkpoint: Some(checkpoint) } => CliError::failed(anyhow::anyhow!(
            "interrupted at step {step} of {of}; the progress is saved in {checkpoint}: run the same command with --resume {} to finish it",
            out.display()
        )),
        e => super::pipeline_error(e),
    }
}

/// Writes a run's samples and charts and describes the run.
fn write_run(
    out: &Path,
    run: &PosteriorRun,
    text: &mut String,
    files: &mut Vec<(String, &'static str)>,
    truth: Option<&Truth>,
) -> Result<(), CliError> {
    std::fs::create_dir_all(out).map_err(|e| CliError::failed(anyhow::anyhow!("creating {}: {e}", out.display())))?;
    write_posterior_files(out, run, truth)?;
    files.push((
        "posterior.csv".into(),
        "equally weighted posterior samples: mass, elements, sky position at the search epoch",
    ));
    if let Some(name) = super::chart_name("posterior_corner") {
        files.push((name, "the posterior of mass, distance and sky position, pair by pair"));
    }
    if let Some(name) = super::chart_name("posterior_trace") {
        files.push((name, "walkers' paths through the sampler's steps (a convergence check by eye)"));
    }
    let pf = &run.summary;
    let _ = writeln!(
        text,
        "Posterior ({} samples, {}): mass {:.2} Earth masses (68%: {:.2} to {:.2}); {:.0} au away at the search epoch (68%: {:.0} to {:.0}); \
         centred at RA {:.2} deg, Dec {:+.2} deg, half the samples within {:.1} deg",
        pf.n_samples,
        run.source.name(),
        pf.mass_earth.median,
        pf.mass_earth.lo68,
        pf.mass_earth.hi68,
        pf.distance_au.median,
        pf.distance_au.lo68,
        pf.distance_au.hi68,
        pf.mean_ra_deg,
        pf.mean_dec_deg,
        pf.sky_radius_deg.median
    );
    if let Some(ev) = &run.evidence {
        let _ = writeln!(
            text,
            "Evidence for a perturber: log10 Bayes factor {:.1} +- {:.1} against none",
            ev.log10_bayes_factor, ev.log10_bayes_factor_error
        );
    }
    let d = &run.diagnostics;
    let _ = writeln!(
        text,
        "Sampler: {} likelihood evaluations in {:.1} s, {:.0} effective samples; {}",
        d.likelihood_evaluations, d.sampling_seconds, d.effective_samples, d.advice
    );
    Ok(())
}

fn write_posterior_files(out: &Path, run: &PosteriorRun, truth: Option<&Truth>) -> Result<(), CliError> {
    let (derived, states, settings) = (run.samples.as_slice(), run.states.as_slice(), &run.sampler);
    let fail = |e: String| CliError::failed(anyhow::anyhow!(e));
    // posterior.csv is a view of the run's sample table.
    let table = run.table();
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(&table.columns).map_err(|e| fail(e.to_string()))?;
    for row in table.values.rows() {
        w.write_record(row.iter().map(|v| format!("{v:e}"))).map_err(|e| fail(e.to_string()))?;
    }
    let bytes = w.into_inner().map_err(|e| fail(e.to_string()))?;
    write_atomically(&out.join("posterior.csv"), &bytes).map_err(CliError::failed)?;

    let (ra, ra_centre) = unwrap_ra(derived);
    let ra_truth = truth.map(|t| ra_centre + (t.ra_deg - ra_centre + 540.0).rem_euclid(360.0) - 180.0);
    let marked = truth.map_or(String::new(), |t| format!("; orange: {}, the simulation's truth", t.name));
    let corner = CornerChart {
        title: format!(
            "Posterior of the perturber ({} samples; sky position at the search epoch)\nBlue: median and 68% interval (diagonal), 68% and 95% credible regions (pairs){marked}",
            derived.len()
        ),
        columns: vec![
            Column {
                label: "mass (Earth masses)".into(),
                values: derived.iter().map(|d| d.sample.mass_earth().log10()).collect(),
                marker: truth.map(|t| t.mass_earth.log10()),
                log10: true,
            },
            Column {
                label: "distance from Earth (au)".into(),
                values: derived.iter().map(|d| d.distance_au).collect(),
                marker: truth.map(|t| t.distance_au),
                log10: false,
            },
            Column { label: "RA (deg)".into(), values: ra, marker: ra_truth, log10: false },
            Column {
                label: "Dec (deg)".into(),
                values: derived.iter().map(|d| d.dec_deg).collect(),
                marker: truth.map(|t| t.dec_deg),
                log10: false,
            },
        ],
    };
    save_chart(out, "posterior_corner", CornerChart::SIZE, |a| corner.draw(a), |a| corner.draw(a))?;

    let s = &states[0];
    let d = s.dim;
    let walkers: Vec<usize> = (0..s.n_walkers).step_by((s.n_walkers / 8).max(1)).collect();
    let series = |f: &dyn Fn(&[f64]) -> f64| -> Vec<Vec<(f64, f64)>> {
        walkers
            .iter()
            .map(|&w| {
                s.chain_steps
                    .iter()
                    .enumerate()
                    .map(|(k, &step)| (step as f64, f(&s.chain[(k * s.n_walkers + w) * d..][..d])))
                    .collect()
            })
            .collect()
    };
    let trace = TraceChart {
        title: format!("Sampler trace: {} of {} walkers of run 1, cold chain", walkers.len(), s.n_walkers),
        burn_in: settings.burn_in,
        panels: vec![
            ("log10 mass (Earth masses)".into(), series(&|x| x[0] / std::f64::consts::LN_10)),
            (
                "distance from the Sun at the reference epoch (au)".into(),
                series(&|x| (x[1] * x[1] + x[2] * x[2] + x[3] * x[3]).sqrt()),
            ),
        ],
    };
    save_chart(out, "posterior_trace", TraceChart::SIZE, |a| trace.draw(a), |a| trace.draw(a))?;
    Ok(())
}

/// RA values unwrapped around their circular mean, so a cloud straddling
/// 0 h stays in one piece on the chart; and that mean.
fn unwrap_ra(derived: &[DerivedSample]) -> (Vec<f64>, f64) {
    let (s, c) = derived.iter().fold((0.0, 0.0), |(s, c), d| {
        let a = d.ra_deg * RAD_PER_DEG;
        (s + a.sin(), c + a.cos())
    });
    let centre = s.atan2(c) / RAD_PER_DEG;
    (derived.iter().map(|d| centre + (d.ra_deg - centre + 540.0).rem_euclid(360.0) - 180.0).collect(), centre)
}

/// Writes a chart as PNG (through a temporary file) and SVG.
pub(super) fn save_chart<P, S>(out: &Path, stem: &str, size: (u32, u32), png: P, svg: S) -> Result<(), CliError>
where
    P: FnOnce(&latens_charts::PngArea<'_>) -> Result<(), String>,
    S: FnOnce(&latens_charts::SvgArea<'_>) -> Result<(), String>,
{
    super::write_chart(out, stem, |tmp| render_png(tmp, size, png), || render_svg(size, svg)).map_err(CliError::failed)
}
