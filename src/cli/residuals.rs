//! `latens residuals`: the reference orbit and its O-C residuals.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use anyhow::Context;

use super::CliError;
use super::args::ResidualsArgs;
use latens::dynamics::ForceModel;
use latens::ephemeris::Ephemeris;
use latens::io::observations::{InputError, Observation, SiteTable, read_observations};
use latens::io::results::{FitFile, OrbitFile, SolverFile, TrendFile};
use latens::io::write_atomically;
use latens::pipeline::EphemerisSource;
use latens::reference::{ReferenceFit, ReferenceSettings, fit_reference_orbit};
use latens::stats::chi_square_survival;
use latens::time::{parse_epoch, tdb_days_from_j2000};
use latens::units::JULIAN_YEAR_DAYS;
use latens_charts::residual_chart::ResidualChart;

/// The force model and the tracked body from `--known`, `--tracked-mass`
/// and `--kind`. A tracked planet cannot also be a known body.
pub(super) fn model_from_input(
    input: &super::args::InputArgs,
) -> Result<(ForceModel, latens::dynamics::TrackedBody), CliError> {
    let known = latens::pipeline::parse_known(&input.known).map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
    if input.has_named_bodies() {
        return Err(CliError::bad_input(anyhow::anyhow!(
            "--tracked-mass/--kind BODY=VALUE give one body of several its own value (infer, sensitivity); this command takes one body: give the plain value"
        )));
    }
    let tracked = input.tracked().map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
    if let Some(b) = tracked.named
        && known.contains(&b)
    {
        return Err(CliError::bad_input(anyhow::anyhow!(
            "--tracked-mass {b}: {b} is also in --known; the tracked body cannot pull on itself (leave it out of --known)"
        )));
    }
    let model = latens::pipeline::force_model(&known).with_tracked_gm(tracked.gm_au3_per_day2);
    Ok((model, tracked))
}

/// The ephemeris: the embedded VSOP87A tabulated over the observed span, or
/// an SPK file. Every observation must lie inside its coverage.
pub(super) fn load_ephemeris(
    spec: &str,
    model: &ForceModel,
    observations: &[Observation],
) -> Result<Box<dyn Ephemeris>, CliError> {
    EphemerisSource::parse(spec).for_arc(model, observations).map_err(super::pipeline_error)
}

pub(super) fn read_inputs(obs: &Path, sites: Option<&PathBuf>) -> Result<(Vec<Observation>, SiteTable), CliError> {
    let sites = match sites {
        Some(p) => SiteTable::read(p).map_err(input_error)?,
        None => SiteTable::new(),
    };
    let observations = read_observations(obs, &sites, 3).map_err(input_error)?;
    tell_input_notes(obs, &observations);
    Ok((observations, sites))
}

/// Tells, before any fit, what in an observation file is odd but not wrong:
/// unused columns (a note) and dates far from the rest of the arc (a
/// warning: most often a typing error in the year).
pub(super) fn tell_input_notes(file: &Path, observations: &[Observation]) {
    for note in latens::io::observations::column_notes(file) {
        super::note(&note);
    }
    for warning in latens::io::observations::date_outliers(observations) {
        eprintln!("warning: {warning}");
    }
}

fn input_error(e: InputError) -> CliError {
    CliError::bad_input(e)
}

pub(super) fn run(args: &ResidualsArgs) -> Result<(), CliError> {
    let obs = args.input.single_obs("residuals").map_err(|e| CliError::bad_input(anyhow::anyhow!(e)))?;
    // A starting orbit (read before any work): its state, carried on a
    // two-body orbit to the reference epoch when that differs; the fit
    // refines it.
    let start = args.start_orbit.as_deref().map(super::sensitivity::read_orbit).transpose()?;
    let (observations, sites) = read_inputs(&obs, args.input.sites.as_ref())?;
    let (model, _tracked) = model_from_input(&args.input)?;
    let ephemeris = load_ephemeris(&args.input.ephemeris, &model, &observations)?;
    let epoch = match &args.epoch {
        Some(text) => Some(tdb_days_from_j2000(
            parse_epoch(text).map_err(|e| CliError::bad_input(anyhow::anyhow!("--epoch: {e}")))?,
        )),
        None => None,
    };
    let epoch = epoch.or(start.map(|(t, _)| t));
    let start_state = match start {
        Some((t, s)) => Some(
            latens::reference::carried_start(&model, t, s, epoch.unwrap_or(t))
                .map_err(|e| CliError::bad_input(anyhow::anyhow!("--start-orbit: {e}")))?,
        ),
        None => None,
    };
    let settings = ReferenceSettings { epoch_tdb_days: epoch, ..ReferenceSettings::default() };
    let fit = fit_reference_orbit(&observations, &sites, &model, ephemeris.as_ref(), &settings, start_state)
        .map_err(CliError::failed)?;

    let files = ResidualProducts::build(&fit, &observations, &model, ephemeris.description());
    files.write(&args.out).map_err(CliError::failed)?;
    super::report(&files.summary);
    say!("Files written in {}:", args.out.display());
    say!(
        "  fit.json         the orbit (heliocentric ecliptic J2000 elements, ICRF state, covariance) and fit statistics"
    );
    say!("  residuals.csv    O-C of every observation: RA*cos(Dec) and Dec in arcsec, sigmas, used or set aside");
    if let Some(name) = super::chart_name("residuals") {
        say!("  {name:<16} the O-C chart");
    }
    Ok(())
}

/// Everything `latens residuals` writes, built in memory before any file is
/// touched.
pub(crate) struct ResidualProducts {
    pub fit_json: String,
    pub residuals_csv: String,
    pub summary: String,
    chart_years: Vec<f64>,
    chart_ra: Vec<f64>,
    chart_dec: Vec<f64>,
    chart_sra: Vec<f64>,
    chart_sdec: Vec<f64>,
    chart_used: Vec<bool>,
    chart_title: String,
    chart_subtitle: String,
    /// chi2/dof, RMS in RA cos(Dec) and Dec (arcsec): a body's line in an
    /// overview.
    pub fit_stats: (f64, f64, f64),
}

/// A p-value for people: three significant digits, or a bound below the
/// smallest representable value.
fn format_p(p: f64) -> String {
    if p < 1e-300 {
        "< 1e-300".to_string()
    } else if p < 1e-3 {
        format!("{p:.1e}")
    } else {
        format!("{p:.3}")
    }
}

/// Weighted linear trend: slope (per year) and its formal error.
fn trend(years: &[f64], values: &[f64], sigmas: &[f64], used: &[bool]) -> (f64, f64) {
    let (mut sw, mut swt, mut swtt, mut swv, mut swtv) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for k in 0..years.len() {
        if !used[k] {
            continue;
        }
        let w = 1.0 / (sigmas[k] * sigmas[k]);
        sw += w;
        swt += w * years[k];
        swtt += w * years[k] * years[k];
        swv += w * values[k];
        swtv += w * years[k] * values[k];
    }
    let det = sw * swtt - swt * swt;
    if det <= 0.0 {
        return (0.0, f64::INFINITY);
    }
    ((sw * swtv - swt * swv) / det, (sw / det).sqrt())
}

/// The `orbit` block of fit.json (and of infer's summary.json).
pub(crate) fn orbit_file(fit: &ReferenceFit) -> OrbitFile {
    fit.orbit_file()
}

impl ResidualProducts {
    pub(crate) fn build(
        fit: &ReferenceFit,
        observations: &[Observation],
        model: &ForceModel,
        ephemeris: String,
    ) -> Self {
        let years: Vec<f64> = observations.iter().map(|o| 2000.0 + o.t_tdb_days / JULIAN_YEAR_DAYS).collect();
        let ra: Vec<f64> = fit.residuals.iter().map(|r| r.ra_arcsec).collect();
        let dec: Vec<f64> = fit.residuals.iter().map(|r| r.dec_arcsec).collect();
        let sra: Vec<f64> = observations.iter().map(|o| o.sigma_ra_arcsec).collect();
        let sdec: Vec<f64> = observations.iter().map(|o| o.sigma_dec_arcsec).collect();
        let used: Vec<bool> = fit.residuals.iter().map(|r| r.used).collect();
        let (ra_slope, ra_sigma) = trend(&years, &ra, &sra, &used);
        let (dec_slope, dec_sigma) = trend(&years, &dec, &sdec, &used);
        let p_value = chi_square_survival(fit.chi2, fit.dof as f64);
        let chi2_per_dof = fit.chi2 / fit.dof.max(1) as f64;

        let file = FitFile {
            n_obs: observations.len(),
            n_used: fit.n_used,
            n_rejected: fit.n_rejected,
            chi2: fit.chi2,
            dof: fit.dof,
            chi2_per_dof,
            p_value,
            rms_ra_arcsec: fit.rms_ra_arcsec,
            rms_dec_arcsec: fit.rms_dec_arcsec,
            known_bodies: model.known.iter().map(|k| k.body.name().to_string()).collect(),
            folded_into_sun: model.folded.iter().map(|k| k.body.name().to_string()).collect(),
            ephemeris,
            orbit: orbit_file(fit),
            trend: TrendFile {
                ra_mas_per_year: ra_slope * 1000.0,
                ra_sigma_mas_per_year: ra_sigma * 1000.0,
                dec_mas_per_year: dec_slope * 1000.0,
                dec_sigma_mas_per_year: dec_sigma * 1000.0,
            },
            solver: SolverFile {
                start: fit.start.clone(),
                iterations: fit.iterations,
                termination: format!("{:?}", fit.termination),
                condition_number: fit.condition_number,
            },
            warnings: fit.warnings.clone(),
        };
        let fit_json = serde_json::to_string_pretty(&file).unwrap_or_default() + "\n";

        let mut csv = String::from(
            "epoch_utc,ra_resid_arcsec,dec_resid_arcsec,sigma_ra_arcsec,sigma_dec_arcsec,used,site,chi2\n",
        );
        for (o, r) in observations.iter().zip(&fit.residuals) {
            let _ = writeln!(
                csv,
                "{},{:.6},{:.6},{},{},{},{},{:.4}",
                o.epoch_text, r.ra_arcsec, r.dec_arcsec, o.sigma_ra_arcsec, o.sigma_dec_arcsec, r.used, o.site, r.chi2
            );
        }

        let mut summary = String::new();
        let _ = writeln!(
            summary,
            "Reference orbit at {} (JD {:.1} TDB), heliocentric ecliptic J2000:",
            file.orbit.epoch_utc, file.orbit.epoch_tdb_jd
        );
        let _ = writeln!(
            summary,
            "  a = {:.6} +/- {:.2e} au, e = {:.6} +/- {:.1e}, i = {:.5} +/- {:.1e} deg",
            file.orbit.a_au,
            file.orbit.sigma_a_au,
            file.orbit.e,
            file.orbit.sigma_e,
            file.orbit.inc_deg,
            file.orbit.sigma_inc_deg
        );
        let _ = writeln!(
            summary,
            "  {} of {} observations used ({} set aside); chi-square {:.1} for {} degrees of freedom ({:.3} per degree)",
            fit.n_used,
            observations.len(),
            fit.n_rejected,
            fit.chi2,
            fit.dof,
            chi2_per_dof
        );
        let _ = writeln!(
            summary,
            "  RMS of the O-C: {:.3}\" in RA*cos(Dec), {:.3}\" in Dec",
            fit.rms_ra_arcsec, fit.rms_dec_arcsec
        );
        let verdict = if p_value > 0.01 {
            format!("consistent with noise at the stated uncertainties (p = {})", format_p(p_value))
        } else if p_value > 1e-6 {
            format!(
                "marginally larger than the stated uncertainties allow (p = {}): look at the chart",
                format_p(p_value)
            )
        } else {
            format!(
                "NOT consistent with noise (p = {}): either the uncertainties are understated, the model misses a force, or the astrometry has systematic errors",
                format_p(p_value)
            )
        };
        let _ = writeln!(summary, "  The residuals are {verdict}.");
        let significant = |s: f64, e: f64| if (s / e).abs() > 3.0 { " (significant)" } else { "" };
        let _ = writeln!(
            summary,
            "  Linear trend of the residuals: RA {:+.2} +/- {:.2} mas/yr{}, Dec {:+.2} +/- {:.2} mas/yr{}",
            file.trend.ra_mas_per_year,
            file.trend.ra_sigma_mas_per_year,
            significant(ra_slope, ra_sigma),
            file.trend.dec_mas_per_year,
            file.trend.dec_sigma_mas_per_year,
            significant(dec_slope, dec_sigma)
        );
        for w in &fit.warnings {
            let _ = writeln!(summary, "  warning: {w}");
        }
        let chart_title = format!(
            "O-C residuals: chi2/dof = {chi2_per_dof:.3} ({} dof, p = {}); RMS {:.3}\" in RA cos(Dec), {:.3}\" in Dec",
            fit.dof,
            format_p(p_value),
            fit.rms_ra_arcsec,
            fit.rms_dec_arcsec
        );
        let chart_subtitle = format!(
            "{} observations, {} set aside; orbit fitted under the Sun{}; error bars 1 sigma",
            observations.len(),
            fit.n_rejected,
            if model.known.is_empty() {
                " alone".to_string()
            } else {
                format!(
                    " and {}",
                    model.known.iter().map(|k| capitalised(k.body.name())).collect::<Vec<_>>().join(", ")
                )
            }
        );
        ResidualProducts {
            fit_json,
            residuals_csv: csv,
            summary,
            chart_years: years,
            chart_ra: ra,
            chart_dec: dec,
            chart_sra: sra,
            chart_sdec: sdec,
            chart_used: used,
            chart_title,
            chart_subtitle,
            fit_stats: (chi2_per_dof, fit.rms_ra_arcsec, fit.rms_dec_arcsec),
        }
    }

    /// The residual chart's data (for `residuals.png` and overviews).
    pub(crate) fn chart(&self) -> ResidualChart<'_> {
        ResidualChart {
            years: &self.chart_years,
            ra_arcsec: &self.chart_ra,
            dec_arcsec: &self.chart_dec,
            sigma_ra_arcsec: &self.chart_sra,
            sigma_dec_arcsec: &self.chart_sdec,
            used: &self.chart_used,
            title: self.chart_title.clone(),
            subtitle: self.chart_subtitle.clone(),
        }
    }

    /// Writes the files; each appears whole or not at all.
    pub(crate) fn write(&self, out: &Path) -> anyhow::Result<()> {
        let chart = self.chart();
        std::fs::create_dir_all(out).with_context(|| format!("creating {}", out.display()))?;
        super::write_chart(out, "residuals", |tmp| chart.draw_png(tmp), || chart.draw_svg())?;
        write_atomically(&out.join("residuals.csv"), self.residuals_csv.as_bytes())?;
        write_atomically(&out.join("fit.json"), self.fit_json.as_bytes())?;
        Ok(())
    }
}

/// A body's name as a proper noun ("jupiter" -> "Jupiter").
pub(crate) fn capitalised(name: &str) -> String {
    let mut c = name.chars();
    c.next().map(|f| f.to_uppercase().chain(c).collect()).unwrap_or_default()
}
