//! The search products of `latens infer`: the sky map, the credible regions
//! as MOCs, the modes with their brightness, motion and observability
//! (modes.csv), and the search chart.

use std::fmt::Write as _;
use std::path::Path;

use super::CliError;
use super::infer::Truth;
use super::posterior::save_chart;
use latens::frames::{angular_separation, icrf_from_ecliptic};
use latens::io::results::{ModeFile, SkyFile};
use latens::io::write_atomically;
use latens::pipeline::{
    Best, ConfidenceRegion, Detection, Explanation, PosteriorRun, SUN_WARNING_DEG, SkyProducts, Study,
    confidence_region, sky_products_at,
};
use latens::skymap::observe::icrs_from_galactic_deg;
use latens::skymap::{self, DEG2_PER_SR, SkyMap};
use latens::vec3::Vec3;
use latens_charts::search_chart::{SearchChart, SkyCell, ZoomPanel, from_tangent, tangent};

pub(super) struct Outcome {
    pub sky: SkyFile,
    pub text: String,
    pub warnings: Vec<String>,
    pub files: Vec<(String, &'static str)>,
}

/// Computes the sky products of a posterior, writes them into `out` and
/// says where to look.
pub(super) fn run(
    out: &Path,
    study: &Study,
    detection: &Detection,
    run: &PosteriorRun,
    explanation: &Explanation,
    truth: Option<&Truth>,
    with_confidence: bool,
) -> Result<Outcome, CliError> {
    let (kernel, _) = detection.posterior_kernel();
    let bars = crate::cli::progress::Bars::new();
    let confidence = with_confidence
        .then(|| confidence_region(study, kernel, &detection.settings.search, &detection.basins, run, &bars))
        .transpose()?;
    let found = Found {
        t0: kernel.epoch_tdb_days,
        gm_sun: kernel.central_gm(),
        basins: &detection.basins,
        confidence: confidence.as_ref(),
    };
    run_at(out, study, &found, run, explanation, truth)
}

/// What a search found, for its sky products: the posterior's states are
/// at `t0` (TDB days) about a central body of GM `gm_sun`; the search's
/// `basins`; the profile likelihood's `confidence` regions (unless
/// skipped).
pub(super) struct Found<'a> {
    pub t0: f64,
    pub gm_sun: f64,
    pub basins: &'a [latens::perturber::search::Scored],
    pub confidence: Option<&'a ConfidenceRegion>,
}

/// [`run`] for any search (one body's or a joint study's).
pub(super) fn run_at(
    out: &Path,
    study: &Study,
    found: &Found,
    run: &PosteriorRun,
    explanation: &Explanation,
    truth: Option<&Truth>,
) -> Result<Outcome, CliError> {
    let mut text = String::new();
    let fail = |e: String| CliError::failed(anyhow::anyhow!(e));
    let mut products = sky_products_at(study, found.t0, found.gm_sun, found.basins, run)?;
    let confidence = found.confidence;
    if let Some(c) = confidence {
        products.add_confidence(c);
    }
    let SkyProducts { map, region50: r50, region90: r90, mode_of_leaf: comp, sun, sky, warnings } = products;
    let (area50, area90, modes, safety) = (sky.area50_deg2, sky.area90_deg2, &sky.modes, &sky.safety_warning);
    let epoch_text = sky.search_epoch_utc.clone();

    // Files: the map, the regions, the modes, the chart.
    let map_fits = skymap::fits::multi_order_map(
        &map.leaves,
        &[("DATE-OBS", skymap::fits::fits_string(&epoch_text[..19.min(epoch_text.len())]), "search epoch (UTC)")],
    );
    write_atomically(&out.join("skymap.fits"), &map_fits).map_err(CliError::failed)?;
    for (name, region) in [("region50", &r50), ("region90", &r90)] {
        let moc = map.moc(region);
        write_atomically(&out.join(format!("{name}.fits")), &skymap::moc_fits(&moc).map_err(fail)?)
            .map_err(CliError::failed)?;
        write_atomically(&out.join(format!("{name}.json")), &skymap::moc_json(&moc).map_err(fail)?)
            .map_err(CliError::failed)?;
    }
    for (name, region, c) in
        confidence.iter().flat_map(|c| [("confidence50", &c.region50, c), ("confidence90", &c.region90, c)])
    {
        let moc = c.moc(region);
        write_atomically(&out.join(format!("{name}.fits")), &skymap::moc_fits(&moc).map_err(fail)?)
            .map_err(CliError::failed)?;
        write_atomically(&out.join(format!("{name}.json")), &skymap::moc_json(&moc).map_err(fail)?)
            .map_err(CliError::failed)?;
    }
    write_modes_csv(out, modes)?;
    let mut chart = build_chart(&map, &r50, &r90, &comp, modes, sun, &epoch_text, area50, area90, safety.clone());
    chart.truth =
        truth.map(|t| (latens::frames::vector_from_radec_deg(t.ra_deg, t.dec_deg), format!("{} (truth)", t.name)));
    chart.cautions = cautions(run.diagnostics.converged, explanation);
    chart.left_out = sky
        .basins
        .iter()
        .filter(|b| b.left_out())
        .map(|b| (latens::frames::vector_from_radec_deg(b.ra_deg, b.dec_deg), format!("basin {}", b.basin)))
        .collect();
    chart.confidence90 = confidence.map_or(Vec::new(), |c| c.outline(&c.region90));
    save_chart(out, "search_chart", SearchChart::SIZE, |a| chart.draw(a), |a| chart.draw(a))?;

    let _ = writeln!(
        text,
        "Search region at {}: 50% within {area50:.0} sq deg, 90% within {area90:.0} sq deg, in {} mode(s)",
        &epoch_text[..10.min(epoch_text.len())],
        modes.len()
    );
    let listed: Vec<&ModeFile> = modes.iter().filter(|m| m.probability >= 0.01).take(5).collect();
    for m in &listed {
        let _ = writeln!(
            text,
            "  mode {}: {:.0}% at RA {:.2} deg, Dec {:+.2} deg ({:.0} sq deg at 90%), {:.0}-{:.0} au away, V {:.1} to {:.1}, moving {:.2}\"/h toward PA {:.0} deg, {:.0} deg from the Sun{}",
            m.mode,
            100.0 * m.probability,
            m.ra_deg,
            m.dec_deg,
            m.area90_deg2,
            m.geocentric_distance_au[1],
            m.geocentric_distance_au[2],
            m.v_mag_range[0],
            m.v_mag_range[1],
            m.motion_arcsec_per_hour,
            m.motion_position_angle_deg,
            m.solar_elongation_deg,
            if m.months_elongation_over_90.is_empty() {
                String::from("; never beyond 90 deg from the Sun in the next year")
            } else {
                format!("; beyond 90 deg from the Sun in {}", m.months_elongation_over_90.join(" "))
            }
        );
    }
    if let Some(c) = &sky.confidence {
        let _ = writeln!(
            text,
            "Confidence region (profile likelihood: where some perturber the prior allows fits within {:.2} of the best, \
             whatever the prior's volume there): 50% within {:.0} sq deg, 90% within {:.0} sq deg, {:.0}% of it outside \
             the 90% credible region",
            c.threshold90,
            c.area50_deg2,
            c.area90_deg2,
            100.0 * c.outside_credible90
        );
    }
    if let (Some(t), Some(confidence)) = (truth, confidence) {
        let d = latens::frames::vector_from_radec_deg(t.ra_deg, t.dec_deg);
        let below = confidence.profile.best - confidence.profile.at(d);
        let _ = writeln!(
            text,
            "  The true place ({}) lies {:.2} below the best in the profile: {} the 90% confidence region",
            t.name,
            below,
            if below <= latens::perturber::profile::profile_threshold(0.9) { "inside" } else { "outside" }
        );
    }
    if modes.len() > listed.len() {
        let rest: f64 = modes.iter().skip(listed.len()).map(|m| m.probability).sum();
        let _ = writeln!(
            text,
            "  ... and {} smaller modes holding {:.1}% together (modes.csv)",
            modes.len() - listed.len(),
            100.0 * rest
        );
    }
    Ok(Outcome {
        sky,
        text,
        warnings,
        files: [
            ("skymap.fits".to_string(), "the posterior's multi-order HEALPix map (UNIQ, PROBDENSITY per sr)"),
            ("region50/90.fits (.json)".into(), "the 50% and 90% credible regions as IVOA MOCs"),
        ]
        .into_iter()
        .chain(confidence.map(|_| {
            (
                "confidence50/90.fits (.json)".to_string(),
                "the 50% and 90% confidence regions (profile likelihood, no prior volume) as IVOA MOCs",
            )
        }))
        .chain([(
            "modes.csv".to_string(),
            "each sky mode: centre, areas, distances, brightness, motion, when observable",
        )])
        .chain(
            super::chart_name("search_chart")
                .map(|name| (name, "where to point: the whole sky and a zoom on each major mode")),
        )
        .collect(),
    })
}

fn write_modes_csv(out: &Path, modes: &[ModeFile]) -> Result<(), CliError> {
    let fail = |e: String| CliError::failed(anyhow::anyhow!(e));
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record([
        "mode",
        "probability",
        "ra_deg",
        "dec_deg",
        "area50_deg2",
        "area90_deg2",
        "helio_au_median",
        "helio_au_p05",
        "helio_au_p95",
        "geo_au_median",
        "geo_au_p05",
        "geo_au_p95",
        "mass_earth_median",
        "mass_earth_p05",
        "mass_earth_p95",
        "v_mag_bright",
        "v_mag_faint",
        "motion_arcsec_per_hour",
        "motion_pa_deg",
        "solar_elongation_deg",
        "months_elongation_over_90",
        "galactic_lat_deg",
        "crowded_field",
        "near_sun",
    ])
    .map_err(|e| fail(e.to_string()))?;
    for m in modes {
        let mut row: Vec<String> = vec![m.mode.to_string()];
        row.extend(
            [m.probability, m.ra_deg, m.dec_deg, m.area50_deg2, m.area90_deg2]
                .iter()
                .chain(&m.heliocentric_distance_au)
                .chain(&m.geocentric_distance_au)
                .chain(&m.mass_earth)
                .chain(&m.v_mag_range)
                .chain(&[m.motion_arcsec_per_hour, m.motion_position_angle_deg, m.solar_elongation_deg])
                .map(|v| format!("{v:.6}")),
        );
        row.push(m.months_elongation_over_90.join(" "));
        row.push(format!("{:.3}", m.galactic_latitude_deg));
        row.push(m.crowded_field.to_string());
        row.push(m.near_sun.to_string());
        w.write_record(&row).map_err(|e| fail(e.to_string()))?;
    }
    let bytes = w.into_inner().map_err(|e| fail(e.to_string()))?;
    write_atomically(&out.join("modes.csv"), &bytes).map_err(CliError::failed)
}

#[allow(clippy::too_many_arguments)]
fn build_chart(
    map: &SkyMap,
    r50: &[usize],
    r90: &[usize],
    comp: &[usize],
    modes: &[ModeFile],
    sun: Vec3,
    epoch: &str,
    area50: f64,
    area90: f64,
    warning: Option<String>,
) -> SearchChart {
    let cell = |i: usize, layer: u8| {
        let l = &map.leaves[i];
        let v = cdshealpix::nested::vertices(l.order, l.ipix);
        let (clon, clat) = cdshealpix::nested::center(l.order, l.ipix);
        let u = skymap::unit_from_lon_lat;
        SkyCell { corners: v.iter().map(|&p| u(p)).collect(), centre: u((clon, clat)), layer }
    };
    let mut cells: Vec<SkyCell> = Vec::new();
    // The zone within 45 deg of the Sun, at order 5.
    let order = 5u8;
    for ipix in 0..cdshealpix::nested::n_hash(order) {
        let c = skymap::unit_from_lon_lat(cdshealpix::nested::center(order, ipix));
        if angular_separation(c, sun).to_degrees() < SUN_WARNING_DEG {
            let v = cdshealpix::nested::vertices(order, ipix);
            let corners = v.iter().map(|&p| skymap::unit_from_lon_lat(p)).collect();
            cells.push(SkyCell { corners, centre: c, layer: 2 });
        }
    }
    cells.extend(r90.iter().map(|&i| cell(i, 0)));
    cells.extend(r50.iter().map(|&i| cell(i, 1)));
    let ecliptic: Vec<Vec3> = (0..=720)
        .map(|k| {
            let l = (k as f64 * 0.5).to_radians();
            icrf_from_ecliptic(Vec3::new(l.cos(), l.sin(), 0.0))
        })
        .collect();
    let galactic_plane: Vec<Vec3> = (0..=720).map(|k| icrs_from_galactic_deg(k as f64 * 0.5, 0.0)).collect();
    let unit = latens::frames::vector_from_radec_deg;
    let marks = modes
        .iter()
        .filter(|m| m.probability >= 0.01)
        .take(6)
        .map(|m| (unit(m.ra_deg, m.dec_deg), format!("mode {}", m.mode)))
        .collect();
    // Zoom panels: up to three modes with at least 5% probability.
    let mut zooms = Vec::new();
    let level = |region: &[usize]| region.iter().map(|&i| map.leaves[i].density()).fold(f64::INFINITY, f64::min);
    let (level50, level90) = (level(r50) / DEG2_PER_SR, level(r90) / DEG2_PER_SR);
    for m in modes.iter().filter(|m| m.probability >= 0.05).take(3) {
        let centre = unit(m.ra_deg, m.dec_deg);
        // The panel spans the mode's 90% leaves.
        let comp_id = r90
            .iter()
            .zip(comp)
            .find(|(i, _)| {
                let c =
                    skymap::unit_from_lon_lat(cdshealpix::nested::center(map.leaves[**i].order, map.leaves[**i].ipix));
                angular_separation(c, centre).to_degrees() < 1e-9 + (m.area90_deg2.sqrt())
            })
            .map(|(_, &c)| c);
        let mut reach: f64 = 0.5;
        for (k, &i) in r90.iter().enumerate() {
            if Some(comp[k]) != comp_id {
                continue;
            }
            let l = &map.leaves[i];
            for p in cdshealpix::nested::vertices(l.order, l.ipix) {
                let v = skymap::unit_from_lon_lat(p);
                if let Some((x, y)) = tangent(centre, v) {
                    reach = reach.max(x.abs()).max(y.abs());
                }
            }
        }
        let half = (reach * 1.15).min(40.0);
        let n = 120;
        let raster: Vec<Vec<f64>> = (0..n)
            .map(|j| {
                (0..n)
                    .map(|i| {
                        let x = -half + (i as f64 + 0.5) * 2.0 * half / n as f64;
                        let y = -half + (j as f64 + 0.5) * 2.0 * half / n as f64;
                        map.leaf_of(from_tangent(centre, x, y)).map_or(0.0, |k| map.leaves[k].density() / DEG2_PER_SR)
                    })
                    .collect()
            })
            .collect();
        zooms.push(ZoomPanel {
            title: format!(
                "mode {}: {:.0}%, centre RA {}, Dec {:+.1}°; {:.0} sq deg at 90%",
                m.mode,
                100.0 * m.probability,
                latens_charts::search_chart::ra_hm(m.ra_deg),
                m.dec_deg,
                m.area90_deg2
            ),
            centre,
            half_width_deg: half,
            raster,
            level50,
            level90,
        });
    }
    SearchChart {
        title: format!("Where to look for the perturber on {}", &epoch[..10.min(epoch.len())]),
        subtitle: format!(
            "Geocentric astrometric RA/Dec (ICRF). Credible regions: 50% in {area50:.0} sq deg, 90% in {area90:.0} sq deg; {} mode(s).",
            modes.len()
        ),
        cells,
        sun,
        ecliptic,
        galactic_plane,
        marks,
        zooms,
        warning: warning.map(|w| format!("WARNING: {w}")).unwrap_or_default(),
        cautions: Vec::new(),
        truth: None,
        left_out: Vec::new(),
        confidence90: Vec::new(),
    }
}

/// What the chart must say before anyone points a telescope by it: the
/// sampler did not converge, or the data prefer another explanation (or
/// none) to a perturber.
fn cautions(converged: bool, explanation: &Explanation) -> Vec<String> {
    let mut out = Vec::new();
    if !converged {
        out.push(
            "NOT CONVERGED: the sampler's diagnostics fail (summary.json); this region may be wrong in size and place. \
             Run longer (--posterior-steps, --runs) before planning observations by it."
                .to_string(),
        );
    }
    match &explanation.best {
        Best::Perturber => {}
        Best::Alternative(name) => out.push(format!(
            "ANOTHER EXPLANATION IS PREFERRED: {name} fits the data better than an unseen perturber; \
             this region only says where a perturber would be if there were one."
        )),
        Best::Undecided => out.push(format!(
            "UNDECIDED: the data do not clearly prefer a perturber over {}; this region holds only if a perturber is the cause.",
            explanation.runner_up
        )),
        Best::NoneNeeded => out.push(
            "NO EXTRA EFFECT NEEDED: noise alone explains the data as well; this region is where a perturber would be if there were one."
                .to_string(),
        ),
    }
    out
}
