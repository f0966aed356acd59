//! The sky products of a posterior: where to look at the search epoch.

use super::{DerivedSample, Detection, PipelineError, PosteriorRun, SearchGeometry, Study, geometry_at, next_months};
use crate::astrometry::ObservingGeometry;
use crate::frames::angular_separation;
use crate::io::results::ConfidenceFile;
use crate::io::results::{BasinStandingFile, ModeFile, SkyFile};
use crate::perturber::KeplerOrbit;
use crate::perturber::kernel::SignalKernel;
use crate::perturber::profile::{ProfileSettings, SkyProfile, Vantage, profile_threshold, sky_profile};
use crate::perturber::search::{Hypothesis, Scored, SearchSettings};
use crate::posterior::quantiles;
use crate::progress::Observer;
use crate::skymap::observe::{
    ALBEDO_RANGE, CROWDED_LATITUDE_DEG, DENSITY_RANGE_G_CM3, galactic_lon_lat_deg, magnitude_range, motion,
};
use crate::skymap::{self, DEG2_PER_SR, SkyMap};
use crate::time::{epoch_from_tdb_days, utc_iso_from_epoch};
use crate::vec3::Vec3;
use moc::moc::range::RangeMOC;
use moc::qty::Hpx;

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
    sky_products_at(study, kernel.epoch_tdb_days, kernel.central_gm(), &detection.basins, run)
}

/// Within this much of the best chi-square drop a solution is as good a
/// fit as the data can tell: the 90% quantile of chi-square with 7
/// degrees of freedom (the perturber's mass and state), 12.02
/// (scipy.stats.chi2.ppf(0.9, 7) = 12.017; using the joint confidence
/// region over all fitted parameters is common practice).
pub const AS_GOOD_DELTA_CHI2: f64 = 12.02;

/// The eccentricity of a basin's orbit about a central body of GM
/// `gm_central` (the one the posterior's prior limits): above 1 when
/// unbound, NaN for a radial or degenerate state.
pub fn basin_eccentricity(basin: &Scored, gm_central: f64) -> f64 {
    let h = &basin.hypothesis;
    crate::dynamics::kepler::elements_from_state(gm_central, h.position_au, h.velocity_au_per_day)
        .map_or(f64::NAN, |el| el.eccentricity)
}

/// [`sky_products`] of a posterior whose perturber states are at `t0`
/// (TDB days) about a central body of GM `gm_sun`: any study's, one body's
/// or several bodies' together; `basins` are the search's (best first),
/// each judged against the posterior.
pub fn sky_products_at(
    study: &Study,
    t0: f64,
    gm_sun: f64,
    basins: &[Scored],
    run: &PosteriorRun,
) -> Result<SkyProducts, PipelineError> {
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

    let standing = basin_standing(basins, t0, gm_sun, run, &search, &map, &r90);
    warnings.extend(left_out(&standing, &run.summary.mass_earth));

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
        basins: standing,
        confidence: None,
    };
    Ok(SkyProducts { map, region50: r50, region90: r90, mode_of_leaf: comp, sun, sky, warnings })
}

/// The confidence regions of a detection: the profile likelihood over the
/// sky at the search epoch ([`crate::perturber::profile`]) and its 50% and
/// 90% regions.
pub struct ConfidenceRegion {
    pub profile: SkyProfile,
    /// Nested pixels (at `profile.order`) of the 50% and 90% regions.
    pub region50: Vec<u64>,
    pub region90: Vec<u64>,
}

impl ConfidenceRegion {
    /// A region as a MOC.
    pub fn moc(&self, pixels: &[u64]) -> RangeMOC<u64, Hpx<u64>> {
        RangeMOC::from_cells(self.profile.order, pixels.iter().map(|&p| (self.profile.order, p)), None)
    }

    /// The outline of a region: the edges of its pixels that border a
    /// pixel outside it, each as its two end points.
    pub fn outline(&self, pixels: &[u64]) -> Vec<(Vec3, Vec3)> {
        use cdshealpix::compass_point::MainWind;
        let order = self.profile.order;
        let inside: std::collections::HashSet<u64> = pixels.iter().copied().collect();
        let mut edges = Vec::new();
        for &ipix in pixels {
            // Vertices S, E, N, W; the edge from each to the next faces the
            // neighbour SE, NE, NW, SW.
            let v = cdshealpix::nested::vertices(order, ipix).map(skymap::unit_from_lon_lat);
            let around = cdshealpix::nested::neighbours(order, ipix, false);
            for (k, wind) in [MainWind::SE, MainWind::NE, MainWind::NW, MainWind::SW].into_iter().enumerate() {
                if around.get(wind).is_none_or(|n| !inside.contains(n)) {
                    edges.push((v[k], v[(k + 1) % 4]));
                }
            }
        }
        edges
    }
}

/// The profile likelihood over the sky of a posterior's kernel, within its
/// prior (mass and distance ranges, eccentricity, closest approach) and
/// the search's direction band; grown from the search's `basins` and a
/// spread of the posterior's samples. `t0`, `gm`: as for [`sky_products_at`].
pub fn confidence_region<K: SignalKernel + ?Sized + Sync>(
    study: &Study,
    kernel: &K,
    search: &SearchSettings,
    basins: &[Scored],
    run: &PosteriorRun,
    observer: &dyn Observer,
) -> Result<ConfidenceRegion, PipelineError> {
    let geometry = SearchGeometry::new(study.wide.as_ref(), study.search_epoch_tdb_days)?;
    let vantage = Vantage { epoch_tdb_days: geometry.epoch, observer_au: geometry.geometry.observer_au };
    let prior = &run.summary.prior;
    let bounds = SearchSettings {
        mass_earth: (prior.mass_earth_log_uniform[0], prior.mass_earth_log_uniform[1]),
        distance_au: (prior.heliocentric_distance_au_log_uniform[0], prior.heliocentric_distance_au_log_uniform[1]),
        min_separation_au: prior.min_separation_au,
        ..search.clone()
    };
    // Up to 256 of the samples, spread over the chain.
    let stride = (run.samples.len() / 256).max(1);
    let seeds: Vec<Hypothesis> = basins
        .iter()
        .map(|b| b.hypothesis)
        .chain(run.samples.iter().step_by(stride).map(|s| Hypothesis {
            position_au: s.sample.position_au,
            velocity_au_per_day: s.sample.velocity_au_per_day,
        }))
        .collect();
    let profile =
        sky_profile(kernel, vantage, &bounds, prior.max_eccentricity, &ProfileSettings::default(), &seeds, observer);
    if !profile.best.is_finite() {
        return Err(PipelineError::failure(
            "confidence region",
            "the profile likelihood found no perturber the prior allows",
        ));
    }
    let (region50, region90) = (profile.region(0.5), profile.region(0.9));
    Ok(ConfidenceRegion { profile, region50, region90 })
}

impl SkyProducts {
    /// Records the confidence regions beside the credible ones: their
    /// areas, the share of the 90% confidence region outside the 90%
    /// credible region, and a warning when that share is large.
    pub fn add_confidence(&mut self, c: &ConfidenceRegion) {
        let p = &c.profile;
        let (area50, area90) = (p.area_deg2(&c.region50), p.area_deg2(&c.region90));
        let credible: std::collections::HashSet<usize> = self.region90.iter().copied().collect();
        let outside = c
            .region90
            .iter()
            .filter(|&&ipix| {
                let centre = skymap::unit_from_lon_lat(cdshealpix::nested::center(p.order, ipix));
                self.map.leaf_of(centre).is_none_or(|leaf| !credible.contains(&leaf))
            })
            .count() as f64
            / c.region90.len().max(1) as f64;
        self.sky.confidence = Some(ConfidenceFile {
            method: "profile likelihood over the sky: the best chi-square drop of any perturber the prior allows \
                     (mass, distance, eccentricity, closest approach, direction band) whose geocentric place at the \
                     search epoch lies in the pixel; a region holds the pixels within the quantile of chi-square \
                     with 2 degrees of freedom of the best (Wilks 1938); it leans on no prior volume"
                .into(),
            order: p.order,
            best_delta_chi2: p.best,
            threshold50: profile_threshold(0.5),
            threshold90: profile_threshold(0.9),
            area50_deg2: area50,
            area90_deg2: area90,
            outside_credible90: outside,
            n_pixels: p.delta_chi2.len(),
            n_evaluations: p.n_evaluations,
        });
        // Wilks's threshold assumes one regular maximum: with several
        // distinct basins about as good, the best of them overshoots the
        // truth's by more than chi-square with 2 degrees of freedom allows.
        let rivals =
            self.sky.basins.iter().filter(|b| b.in_prior && b.delta_chi2 >= p.best - profile_threshold(0.9)).count();
        if rivals >= 2 {
            self.warnings.push(format!(
                "{rivals} distinct basins in the prior fit within {:.2} of the best: with several maxima about as good, \
                 the best overshoots the true one by more than the confidence region's threshold allows (it assumes \
                 one regular maximum), so the 90% confidence region can be too tight; search the credible and the \
                 confidence regions together (on a real arc with four such basins the hidden planet lay 6.4 below the \
                 best, outside the confidence region and inside the credible one; docs/validation.md)",
                profile_threshold(0.9)
            ));
        }
        if outside > 0.25 {
            self.warnings.push(format!(
                "{:.0}% of the 90% confidence region ({area90:.0} sq deg: places where some perturber the prior allows \
                 fits within {:.2} in chi-square of the best) lies outside the 90% credible region: the posterior \
                 weighs those places down by prior volume, not by fit; if the credible region is searched in vain, \
                 search the rest of the confidence region (confidence90.fits) too",
                100.0 * outside,
                profile_threshold(0.9)
            ));
        }
    }
}

/// Where each basin stands against the posterior: its place at the search
/// epoch, whether the prior allows it, whether it fits about as well as the
/// best, and whether the 95% mass interval and the 90% region hold it.
fn basin_standing(
    basins: &[Scored],
    t0: f64,
    gm_sun: f64,
    run: &PosteriorRun,
    search: &SearchGeometry,
    map: &SkyMap,
    region90: &[usize],
) -> Vec<BasinStandingFile> {
    let Some(best) = basins.first().map(|b| b.delta_chi2) else { return Vec::new() };
    let e_max = run.summary.prior.max_eccentricity;
    let mass = &run.summary.mass_earth;
    let inside: std::collections::HashSet<usize> = region90.iter().copied().collect();
    basins
        .iter()
        .enumerate()
        .map(|(k, b)| {
            let h = &b.hypothesis;
            let place = KeplerOrbit::from_state(gm_sun, h.position_au, h.velocity_au_per_day, t0)
                .map(|orbit| search.place_at(&orbit, search.epoch, &search.geometry).0);
            let (ra_deg, dec_deg) = place.map_or((f64::NAN, f64::NAN), |d| {
                let (ra, dec) = skymap::lon_lat(d);
                (ra.to_degrees(), dec.to_degrees())
            });
            let eccentricity = basin_eccentricity(b, gm_sun);
            BasinStandingFile {
                basin: k + 1,
                delta_chi2: b.delta_chi2,
                mass_earth: b.mass_earth(),
                ra_deg,
                dec_deg,
                eccentricity,
                // The prior's limit is closed; a basin polished onto it is in.
                in_prior: eccentricity <= e_max * (1.0 + 1e-9),
                as_good_as_best: b.delta_chi2 >= best - AS_GOOD_DELTA_CHI2,
                in_mass_interval95: (mass.lo95..=mass.hi95).contains(&b.mass_earth()),
                in_region90: place.and_then(|d| map.leaf_of(d)).is_some_and(|leaf| inside.contains(&leaf)),
            }
        })
        .collect()
}

/// Warnings for basins inside the prior that fit about as well as the best
/// but that the posterior leaves out: outside its central 95% mass
/// interval or outside the 90% sky region. The posterior weighs each
/// solution by its prior volume as well as its fit, and a light perturber
/// passing close to the body fits sharply where heavier, farther ones fit
/// broadly; measured on the demo scenario over noise seeds
/// (docs/validation.md), the true planet was often such a basin.
fn left_out(standing: &[BasinStandingFile], mass: &crate::io::results::IntervalFile) -> Vec<String> {
    let best = standing.first().map_or(0.0, |b| b.delta_chi2);
    standing
        .iter()
        .filter(|b| b.left_out())
        .filter_map(|b| {
            let what = match (b.in_mass_interval95, b.in_region90) {
                (false, false) => {
                    format!("the 95% mass interval ({:.2}-{:.2}) and the 90% region", mass.lo95, mass.hi95)
                }
                (false, true) => format!("the 95% mass interval ({:.2}-{:.2})", mass.lo95, mass.hi95),
                (true, false) => "the 90% region".to_string(),
                (true, true) => return None,
            };
            Some(format!(
                "basin {} ({:.2} Earth masses, RA {:.2} deg, Dec {:+.2} deg) fits within {:.1} in chi-square of the best \
                 (within {AS_GOOD_DELTA_CHI2}, as good as these data can tell) but lies outside {what}: the posterior \
                 weighs solutions by their prior volume too, and heavier, farther perturbers fit more broadly than a \
                 light one passing close to the body; if the region is searched in vain, look there too",
                b.basin,
                b.mass_earth,
                b.ra_deg,
                b.dec_deg,
                best - b.delta_chi2
            ))
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::io::results::IntervalFile;

    fn standing(basin: usize, delta_chi2: f64, mass_earth: f64, flags: [bool; 3]) -> BasinStandingFile {
        let [in_prior, in_mass_interval95, in_region90] = flags;
        BasinStandingFile {
            basin,
            delta_chi2,
            mass_earth,
            ra_deg: 45.0,
            dec_deg: 41.8,
            eccentricity: if in_prior { 0.3 } else { 0.8 },
            in_prior,
            as_good_as_best: delta_chi2 >= 100.0 - AS_GOOD_DELTA_CHI2,
            in_mass_interval95,
            in_region90,
        }
    }

    /// Basins as good as the best (within 12.02) and inside the prior are
    /// named when the posterior leaves them out, by mass or by place; a
    /// worse fit or one beyond the prior's eccentricity is not.
    #[test]
    fn basins_as_good_as_the_best_that_the_posterior_leaves_out_are_named() {
        let mass = IntervalFile { median: 20.0, lo68: 10.0, hi68: 30.0, lo95: 5.0, hi95: 50.0 };
        let all = [
            standing(1, 100.0, 10.0, [true, true, true]),
            standing(2, 95.0, 2.0, [true, false, true]),  // too light
            standing(3, 95.0, 1.0, [false, false, true]), // beyond the prior's e
            standing(4, 80.0, 1.0, [true, false, false]), // a worse fit
            standing(5, 98.0, 10.0, [true, true, false]), // elsewhere on the sky
            standing(6, 99.0, 1.0, [true, false, false]), // both
        ];
        let w = left_out(&all, &mass);
        assert_eq!(w.len(), 3, "{w:#?}");
        assert!(w[0].starts_with("basin 2 (2.00 Earth masses") && w[0].contains("95% mass interval (5.00-50.00)"));
        assert!(!w[0].contains("90% region"), "{}", w[0]);
        assert!(w[1].starts_with("basin 5 ") && w[1].contains("within 2.0 in chi-square"));
        assert!(w[1].contains("outside the 90% region"), "{}", w[1]);
        assert!(w[2].starts_with("basin 6 ") && w[2].contains("interval (5.00-50.00) and the 90% region"));
    }

    fn region(pixels: &[u64]) -> ConfidenceRegion {
        let profile = SkyProfile {
            order: 4,
            delta_chi2: pixels.iter().map(|&p| (p, 10.0)).collect(),
            best: 10.0,
            n_evaluations: 0,
            n_polished: 0,
        };
        ConfidenceRegion { profile, region50: pixels.to_vec(), region90: pixels.to_vec() }
    }

    /// A region's outline is the edges it shares with no other of its
    /// pixels: four for one pixel, six for two neighbours; each edge joins
    /// two of the pixels' corners (cdshealpix vertices).
    #[test]
    fn a_confidence_region_is_outlined_by_its_outer_edges() {
        let one = region(&[1000]);
        let edges = one.outline(&[1000]);
        assert_eq!(edges.len(), 4);
        let corners = cdshealpix::nested::vertices(4, 1000).map(skymap::unit_from_lon_lat);
        for (a, b) in &edges {
            assert!(
                corners.iter().any(|c| (*c - *a).norm() < 1e-12) && corners.iter().any(|c| (*c - *b).norm() < 1e-12)
            );
        }
        // A neighbour across an edge (south-east) shares it: six edges; one
        // across a corner (south) shares none: eight.
        let around = cdshealpix::nested::neighbours(4, 1000, false);
        let next = *around.get(cdshealpix::compass_point::MainWind::SE).unwrap();
        let two = region(&[1000, next]);
        assert_eq!(two.outline(&[1000, next]).len(), 6);
        let corner = *around.get(cdshealpix::compass_point::MainWind::S).unwrap();
        assert_eq!(region(&[1000, corner]).outline(&[1000, corner]).len(), 8);
        // The MOC holds both pixels and nothing else.
        let moc = two.moc(&[1000, next]);
        let area = skymap::moc_area_deg2(&moc);
        assert!((area - 2.0 * two.profile.area_deg2(&[1000])).abs() < 1e-9);
    }

    /// The eccentricity a basin is judged by is its orbit's about the
    /// given central mass: a circular speed gives 0, a speed of sqrt(1.5)
    /// times it at the same place gives e = 0.5 (vis-viva: at periapsis
    /// v^2 = GM (1 + e) / r, common practice).
    #[test]
    fn a_basins_eccentricity_is_about_the_central_mass() {
        let gm = crate::units::GM_SUN_AU3_PER_DAY2;
        let r = 50.0;
        let v_circ = (gm / r).sqrt();
        let basin = |speed: f64| Scored {
            hypothesis: crate::perturber::search::Hypothesis {
                position_au: Vec3::new(r, 0.0, 0.0),
                velocity_au_per_day: Vec3::new(0.0, speed, 0.0),
            },
            delta_chi2: 10.0,
            gm_au3_per_day2: 1e-9,
            closest_approach_au: 5.0,
        };
        assert!(basin_eccentricity(&basin(v_circ), gm).abs() < 1e-12);
        assert!((basin_eccentricity(&basin(v_circ * 1.5f64.sqrt()), gm) - 0.5).abs() < 1e-12);
        // Twice the circular speed: unbound, e = v^2 r / GM - 1 = 3, never in a prior.
        assert!((basin_eccentricity(&basin(v_circ * 2.0), gm) - 3.0).abs() < 1e-12);
    }
}
