//! The sky products of a posterior: where to look at the search epoch.

use super::{DerivedSample, Detection, PipelineError, PosteriorRun, SearchGeometry, Study, geometry_at, next_months};
use crate::astrometry::ObservingGeometry;
use crate::frames::angular_separation;
use crate::io::results::{ModeFile, SkyFile};
use crate::perturber::KeplerOrbit;
use crate::posterior::quantiles;
use crate::skymap::observe::{
    ALBEDO_RANGE, CROWDED_LATITUDE_DEG, DENSITY_RANGE_G_CM3, galactic_lon_lat_deg, magnitude_range, motion,
};
use crate::skymap::{self, DEG2_PER_SR, SkyMap};
use crate::time::{epoch_from_tdb_days, utc_iso_from_epoch};
use crate::vec3::Vec3;

/// Solar elongation below which a field gets the safety warning, degrees.
pub const SUN_WARNING_DEG: f64 = 45.0;

/// What the sky stage found.
pub struct SkyProducts {
    /// The multi-order map of the posterior's sky density.
    pub map: SkyMap,
    /// Leaves (indices into `map.leaves`) of the 50% and 90% regions.
    pub region50: Vec<usize>,
    pub region90: Vec<usize>,
    /// For each leaf of `region90`, the mode it belongs to.
    pub mode_of_leaf: Vec<usize>,
    /// The direction of the Sun at the search epoch.
    pub sun: Vec3,
    /// The summary (areas, modes, the Sun, the safety warning).
    pub sky: SkyFile,
    pub warnings: Vec<String>,
}

/// The search products of a posterior: the sky map, its 50% and 90%
/// credible regions, the modes with what an observer needs of each, and the
/// safety and crowding warnings.
pub fn sky_products(study: &Study, detection: &Detection, run: &PosteriorRun) -> Result<SkyProducts, PipelineError> {
    let (kernel, _) = detection.posterior_kernel();
    sky_products_at(study, kernel.epoch_tdb_days, kernel.central_gm(), run)
}

/// [`sky_products`] of a posterior whose perturber states are at `t0`
/// (TDB days) about a central body of GM `gm_sun`: any study's, one body's
/// or several bodies' together.
pub fn sky_products_at(study: &Study, t0: f64, gm_sun: f64, run: &PosteriorRun) -> Result<SkyProducts, PipelineError> {
    let samples = run.samples.as_slice();
    let wide = study.wide.as_ref();
    let search = SearchGeometry::new(wide, study.search_epoch_tdb_days)?;
    let mut warnings = Vec::new();
    let directions: Vec<Vec3> = samples.iter().map(|s| s.direction).collect();
    let map = SkyMap::from_directions(&directions);
    let r50 = map.credible_leaves(0.5);
    let found = map.modes(0.9);
    let r90 = found.region.clone();
    let (area50, area90) = (map.area_deg2(&r50), map.area_deg2(&r90));
    let comp = found.mode_of_leaf.clone();
    let n_modes = found.probability.len();
    let in50: std::collections::HashSet<usize> = r50.iter().copied().collect();
    let sample_mode: Vec<usize> = found.sample_mode.iter().map(|m| m.unwrap_or(usize::MAX)).collect();
    let sun = -search.geometry.observer_au.unit();
    let months = next_months(search.epoch);
    let month_geometry: Vec<(ObservingGeometry, String)> =
        months.iter().filter_map(|(t, label)| geometry_at(wide, *t).ok().map(|g| (g, label.clone()))).collect();
    let (g_before, g_after) = (geometry_at(wide, search.epoch - 0.5)?, geometry_at(wide, search.epoch + 0.5)?);

    let mut modes: Vec<ModeFile> = Vec::new();
    for m in 0..n_modes {
        let members: Vec<&DerivedSample> =
            samples.iter().zip(&sample_mode).filter(|(_, k)| **k == m).map(|(s, _)| s).collect();
        let leaves: Vec<usize> = r90.iter().zip(&comp).filter(|(_, c)| **c == m).map(|(&i, _)| i).collect();
        let probability: f64 = leaves.iter().map(|&i| map.leaves[i].probability).sum();
        if members.is_empty() {
            continue;
        }
        let centre = members.iter().fold(Vec3::ZERO, |a, s| a + s.direction).unit();
        let (ra, dec) = skymap::lon_lat(centre);
        let q = |f: &dyn Fn(&DerivedSample) -> f64| -> [f64; 3] {
            let v: Vec<f64> = members.iter().map(|s| f(s)).collect();
            let q = quantiles(&v, &[0.5, 0.05, 0.95]);
            [q[0], q[1], q[2]]
        };
        let (bright, faint): (Vec<f64>, Vec<f64>) = members
            .iter()
            .map(|s| magnitude_range(s.sample.mass_earth(), s.heliocentric_distance_au, s.distance_au))
            .unzip();
        // Motion and elongation over the year, on up to 64 of the mode's samples.
        let stride = (members.len() / 64).max(1);
        let mut rates = Vec::new();
        let (mut pa_sin, mut pa_cos) = (0.0, 0.0);
        let mut elong_by_month = vec![Vec::new(); month_geometry.len()];
        for s in members.iter().step_by(stride) {
            let Some(orbit) = KeplerOrbit::from_state(gm_sun, s.sample.position_au, s.sample.velocity_au_per_day, t0)
            else {
                continue;
            };
            let (a, _, _, _) = search.place_at(&orbit, search.epoch - 0.5, &g_before);
            let (b, _, _, _) = search.place_at(&orbit, search.epoch + 0.5, &g_after);
            let (rate, pa) = motion(a, b, 24.0);
            rates.push(rate);
            pa_sin += pa.to_radians().sin();
            pa_cos += pa.to_radians().cos();
            for (k, (g, _)) in month_geometry.iter().enumerate() {
                let (_, _, _, elong) = search.place_at(&orbit, g.t_tdb_days, g);
                elong_by_month[k].push(elong);
            }
        }
        let observable: Vec<String> = month_geometry
            .iter()
            .zip(&elong_by_month)
            .filter(|(_, e)| quantiles(e, &[0.5])[0] > 90.0)
            .map(|((_, label), _)| label.clone())
            .collect();
        let elongation = angular_separation(centre, sun).to_degrees();
        let (_, b) = galactic_lon_lat_deg(centre);
        modes.push(ModeFile {
            mode: 0,
            probability,
            ra_deg: ra.to_degrees(),
            dec_deg: dec.to_degrees(),
            area50_deg2: leaves.iter().filter(|i| in50.contains(i)).map(|&i| map.leaves[i].area_sr()).sum::<f64>()
                * DEG2_PER_SR,
            area90_deg2: map.area_deg2(&leaves),
            heliocentric_distance_au: q(&|s| s.heliocentric_distance_au),
            geocentric_distance_au: q(&|s| s.distance_au),
            mass_earth: q(&|s| s.sample.mass_earth()),
            v_mag_range: [quantiles(&bright, &[0.05])[0], quantiles(&faint, &[0.95])[0]],
            motion_arcsec_per_hour: quantiles(&rates, &[0.5])[0],
            motion_position_angle_deg: pa_sin.atan2(pa_cos).to_degrees().rem_euclid(360.0),
            solar_elongation_deg: elongation,
            months_elongation_over_90: observable,
            galactic_latitude_deg: b,
            crowded_field: b.abs() < CROWDED_LATITUDE_DEG,
            near_sun: elongation < SUN_WARNING_DEG || members.iter().any(|s| s.elongation_deg < SUN_WARNING_DEG),
        });
    }
    for (k, m) in modes.iter_mut().enumerate() {
        m.mode = k + 1;
    }
    let near: Vec<&ModeFile> = modes.iter().filter(|m| m.near_sun).collect();
    let safety = (!near.is_empty()).then(|| {
        let names: Vec<String> = near.iter().map(|m| m.mode.to_string()).collect();
        format!(
            "part of the search region (mode {}) lies within {SUN_WARNING_DEG:.0} deg of the Sun at the search epoch: pointing a telescope or any optics near the Sun can blind and destroy eyes and instruments; such fields are observable only in twilight, if at all",
            names.join(", ")
        )
    });
    if let Some(w) = &safety {
        warnings.push(w.clone());
    }
    for m in &modes {
        if m.crowded_field && m.probability >= 0.05 {
            warnings.push(format!(
                "mode {} lies at galactic latitude {:+.0} deg: a crowded star field, where a faint moving target is hard to pick out",
                m.mode, m.galactic_latitude_deg
            ));
        }
    }

    let (sra, sdec) = skymap::lon_lat(sun);
    let epoch_text = utc_iso_from_epoch(epoch_from_tdb_days(search.epoch));
    let sky = SkyFile {
        search_epoch_utc: epoch_text,
        area50_deg2: area50,
        area90_deg2: area90,
        modes,
        brightness_assumptions: format!(
            "diameter from the mass at bulk density {}-{} g/cm^3; geometric albedo {}-{}; H from D = 1329 km / sqrt(p) 10^(-H/5) (Pravec & Harris 2007); V = H + 5 log10(r delta), phase term left out",
            DENSITY_RANGE_G_CM3.0, DENSITY_RANGE_G_CM3.1, ALBEDO_RANGE.0, ALBEDO_RANGE.1
        ),
        sun_ra_deg: sra.to_degrees(),
        sun_dec_deg: sdec.to_degrees(),
        safety_warning: safety,
    };
    Ok(SkyProducts { map, region50: r50, region90: r90, mode_of_leaf: comp, sun, sky, warnings })
}
