//! The impostors: other explanations of drifting residuals that a perturber
//! must beat before anyone points a telescope.
//!
//! 1. Errors in the known planets' GMs, with Gaussian priors of their
//!    published uncertainties times an inflation factor.
//! 2. A non-gravitational acceleration of the tracked body,
//!    A1 R + A2 T + A3 N scaled by (1 au / r)^2 (radial, transverse,
//!    normal; the inverse-square form of Marsden, Sekanina & Yeomans 1973,
//!    AJ 78, 211, without their sublimation curve, which matters only near
//!    the Sun).
//! 3. A systematic astrometric offset, a constant (RA cos Dec, Dec) shift
//!    per observing site, or per decade when there is one site.
//!
//! Each is linear in its parameters to first order, so each is a linear
//! Gaussian model of the whitened residuals: with the projected columns A
//! (per prior standard deviation, so the prior is N(0, I)), F = A^T A and
//! b = A^T y, the Bayes factor against the null model is closed-form,
//!   ln B = b^T (I + F)^-1 b / 2 - ln det(I + F) / 2,
//! and the best fit lowers the chi-square by b^T F^+ b. The tracked body's
//! orbit correction is marginalised as for the perturber (projected out).

use faer::{Mat, Side};

use crate::dynamics::ForceModel;
use crate::ephemeris::{Body, Ephemeris};
use crate::io::observations::Observation;
use crate::perturber::LinearKernel;
use crate::reference::whiten;
use crate::units::JULIAN_YEAR_DAYS;
use crate::vec3::Vec3;

/// Prior widths of the impostor models.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ImpostorPriors {
    /// Multiplies the published GM uncertainties.
    pub gm_inflation: f64,
    /// Standard deviation of each non-gravitational component at 1 au,
    /// au/day^2; 0 when the tracked body cannot have one (the model is then
    /// not offered).
    pub nongrav_au_per_day2: f64,
    /// Standard deviation of each systematic offset, arcsec.
    pub offset_arcsec: f64,
    /// In a joint study, each body's non-gravitational prior from its own
    /// kind ([`nongrav_prior_for`]) instead of `nongrav_au_per_day2` (which
    /// then applies to one-body studies only): bodies of several kinds.
    pub nongrav_from_kind: bool,
}

impl Default for ImpostorPriors {
    /// GM uncertainties times 1000: the published ones are formal and
    /// modern; an error in an older or different mass set, or in a
    /// reduction, can be far larger, and the test must give that
    /// explanation a fair chance. Non-gravitational components of 1e-8
    /// au/day^2 at 1 au (the order of comets' fitted A1, A2: common
    /// practice). Offsets of 0.2 arcsec (the size of zonal errors of pre-Gaia
    /// catalogues; common practice).
    fn default() -> Self {
        ImpostorPriors { gm_inflation: 1000.0, nongrav_au_per_day2: 1e-8, offset_arcsec: 0.2, nongrav_from_kind: false }
    }
}

/// The width of the non-gravitational prior for a kind of tracked body,
/// au/day^2 at 1 au (0: not a possible explanation).
///
/// - Planets and dwarf planets: 0. Thermal recoil scales as 1/(diameter)
///   and is about 1e-14 au/day^2 at 1 au for a 1 km body (Farnocchia et al.
///   2013, Icarus 224, 1, their A2 values for near-Earth asteroids; from
///   memory): below 1e-17 for bodies of hundreds of km, and a further
///   factor r^-2 smaller at their distances. Nothing outgasses there.
/// - Small bodies: 1e-13, covering the thermal recoil of sub-km bodies
///   (same source) with room to spare.
/// - Comets: 1e-8, the order of fitted A1 and A2 of active comets
///   (Marsden, Sekanina & Yeomans 1973, AJ 78, 211; from memory).
pub fn nongrav_prior_for(kind: crate::dynamics::BodyKind) -> f64 {
    use crate::dynamics::BodyKind;
    match kind {
        BodyKind::Planet | BodyKind::DwarfPlanet => 0.0,
        BodyKind::SmallBody => 1e-13,
        BodyKind::Comet => 1e-8,
    }
}

/// Published 1-sigma uncertainty of a planetary system's GM, km^3/s^2.
/// From memory, order of magnitude only: Jupiter from Juno (Durante et al.
/// 2020), Saturn from Cassini (Jacobson et al. 2006), Uranus (Jacobson
/// 2014), Neptune (Jacobson 2009); the inner planets far smaller relative
/// to their effect here.
pub fn published_gm_sigma_km3_per_s2(body: Body) -> Option<f64> {
    match body {
        Body::Jupiter => Some(1.0),
        Body::Saturn => Some(1.0),
        Body::Uranus => Some(4.4),
        Body::Neptune => Some(10.0),
        _ => None,
    }
}

/// A linear alternative model: its projected, whitened columns per prior
/// standard deviation, and what each parameter is.
#[derive(Clone, Debug)]
pub struct LinearModel {
    pub name: String,
    pub description: String,
    /// Parameter names and the size of one prior standard deviation in the
    /// unit named.
    pub parameters: Vec<(String, f64, String)>,
    pub columns: Vec<Vec<f64>>,
}

/// How well a linear model explains the residuals.
#[derive(Clone, Debug)]
pub struct Comparison {
    pub name: String,
    pub description: String,
    pub n_parameters: usize,
    /// Chi-square drop of the best fit (no prior).
    pub delta_chi2: f64,
    pub ln_bayes_factor: f64,
    /// Posterior mean and standard deviation of each parameter, in its unit.
    pub estimates: Vec<(String, f64, f64, String)>,
}

/// GM offsets of the known planets the model carries as separate bodies.
pub fn gm_model(
    kernel: &LinearKernel,
    model: &ForceModel,
    ephemeris: &dyn Ephemeris,
    priors: &ImpostorPriors,
) -> Option<LinearModel> {
    let mut parameters = Vec::new();
    let mut columns = Vec::new();
    for k in &model.known {
        let Some(sigma_km) = published_gm_sigma_km3_per_s2(k.body) else { continue };
        let sigma = crate::units::gm_au3_per_day2_from_km3_per_s2(sigma_km) * priors.gm_inflation;
        let times = kernel.node_times();
        let planet: Option<Vec<Vec3>> =
            times.iter().map(|&t| ephemeris.heliocentric_position_au(k.body, t).ok()).collect();
        let planet = planet?;
        let mut col = vec![0.0; kernel.n_residuals()];
        kernel.signal_of(
            |i, _, r, _| {
                let p = planet[i];
                let d = p - r;
                (d / d.norm().powi(3) - p / p.norm().powi(3)) * sigma
            },
            &mut col,
        );
        kernel.project(&mut col);
        parameters.push((format!("{} GM offset", k.body.name()), sigma_km * priors.gm_inflation, "km^3/s^2".into()));
        columns.push(col);
    }
    (!columns.is_empty()).then(|| LinearModel {
        name: "known-planet masses".into(),
        description: format!(
            "the known planets' GMs are off (Gaussian priors: published uncertainties x {})",
            priors.gm_inflation
        ),
        parameters,
        columns,
    })
}

/// A non-gravitational acceleration A1 R + A2 T + A3 N times (1 au / r)^2.
pub fn nongravitational_model(kernel: &LinearKernel, priors: &ImpostorPriors) -> LinearModel {
    let sigma = priors.nongrav_au_per_day2;
    let names = ["A1 (radial)", "A2 (transverse)", "A3 (normal)"];
    let columns = (0..3)
        .map(|c| {
            let mut col = vec![0.0; kernel.n_residuals()];
            kernel.signal_of(
                |_, _, r, v| {
                    let rn = r.norm();
                    let radial = r / rn;
                    let normal = r.cross(v).unit();
                    let transverse = normal.cross(radial);
                    let axis = [radial, transverse, normal][c];
                    axis * (sigma / (rn * rn))
                },
                &mut col,
            );
            kernel.project(&mut col);
            col
        })
        .collect();
    LinearModel {
        name: "non-gravitational acceleration".into(),
        description:
            "the tracked body feels a small non-gravitational push falling off as 1/r^2 (outgassing, radiation)".into(),
        parameters: names.iter().map(|n| (n.to_string(), sigma, "au/day^2 at 1 au".into())).collect(),
        columns,
    }
}

/// Constant offsets per site (several sites) or per decade (one site).
pub fn offset_model(kernel: &LinearKernel, observations: &[Observation], priors: &ImpostorPriors) -> LinearModel {
    let mut sites: Vec<&str> = observations.iter().map(|o| o.site.as_str()).collect();
    sites.sort_unstable();
    sites.dedup();
    let by_site = sites.len() > 1;
    let key = |o: &Observation| -> String {
        if by_site {
            format!("site {}", o.site)
        } else {
            let year = 2000.0 + o.t_tdb_days / JULIAN_YEAR_DAYS;
            let decade = (year / 10.0).floor() as i64 * 10;
            format!("{decade}s")
        }
    };
    let mut groups: Vec<String> = observations.iter().map(key).collect();
    groups.sort();
    groups.dedup();
    let sigma = priors.offset_arcsec;
    let mut parameters = Vec::new();
    let mut columns = Vec::new();
    for g in &groups {
        for (c, coord) in ["RA cos Dec", "Dec"].iter().enumerate() {
            let mut col = vec![0.0; kernel.n_residuals()];
            for (k, o) in observations.iter().enumerate() {
                if kernel.used[k] && key(o) == *g {
                    let unit = if c == 0 { (sigma, 0.0) } else { (0.0, sigma) };
                    let (w1, w2) = whiten(o, unit);
                    col[2 * k] = w1;
                    col[2 * k + 1] = w2;
                }
            }
            kernel.project(&mut col);
            parameters.push((format!("{coord} offset, {g}"), sigma, "arcsec".into()));
            columns.push(col);
        }
    }
    LinearModel {
        name: "systematic astrometric offsets".into(),
        description: format!(
            "the astrometry carries a constant offset per {} (catalogue or reduction errors)",
            if by_site { "site" } else { "decade" }
        ),
        parameters,
        columns,
    }
}

/// Fits and weighs a linear model against the whitened residuals.
pub fn compare(kernel: &LinearKernel, model: &LinearModel) -> Comparison {
    compare_with(&kernel.residuals, model)
}

/// Fits and weighs a linear model against whitened residuals `y` (the
/// model's columns laid out as `y` is: one body's, or several bodies' side
/// by side).
pub fn compare_with(y: &[f64], model: &LinearModel) -> Comparison {
    let k = model.columns.len();
    let dot = |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>();
    let f = Mat::from_fn(k, k, |i, j| dot(&model.columns[i], &model.columns[j]));
    let b: Vec<f64> = model.columns.iter().map(|c| dot(c, y)).collect();
    let fail = |why: &str| Comparison {
        name: model.name.clone(),
        description: format!("{} ({why})", model.description),
        n_parameters: k,
        delta_chi2: 0.0,
        ln_bayes_factor: 0.0,
        estimates: Vec::new(),
    };
    let Ok(eig) = f.self_adjoint_eigen(Side::Lower) else {
        return fail("its normal matrix could not be decomposed");
    };
    let (lambda, q) = (eig.S().column_vector(), eig.U());
    let lmax = (0..k).map(|i| lambda[i]).fold(0.0, f64::max);
    let (mut ln_b, mut delta, mut ln_det) = (0.0, 0.0, 0.0);
    let mut mean = vec![0.0; k];
    let mut var = vec![0.0; k];
    for j in 0..k {
        let l = lambda[j].max(0.0);
        let qb: f64 = (0..k).map(|i| q[(i, j)] * b[i]).sum();
        ln_b += 0.5 * qb * qb / (1.0 + l);
        ln_det += (1.0 + l).ln();
        if l > 1e-10 * lmax {
            delta += qb * qb / l;
        }
        for i in 0..k {
            mean[i] += q[(i, j)] * qb / (1.0 + l);
            var[i] += q[(i, j)] * q[(i, j)] / (1.0 + l);
        }
    }
    ln_b -= 0.5 * ln_det;
    Comparison {
        name: model.name.clone(),
        description: model.description.clone(),
        n_parameters: k,
        delta_chi2: delta,
        ln_bayes_factor: ln_b,
        estimates: model
            .parameters
            .iter()
            .zip(mean.iter().zip(&var))
            .map(|((n, s, u), (m, v))| (n.clone(), m * s, v.sqrt() * s, u.clone()))
            .collect(),
    }
}

/// Strength of evidence for a log10 Bayes factor, on the scale of Kass &
/// Raftery (1995, JASA 90, 773), who adapt Jeffreys (1961).
pub fn strength(log10_bayes_factor: f64) -> &'static str {
    match log10_bayes_factor {
        x if x < 0.5 => "barely worth mentioning",
        x if x < 1.0 => "substantial",
        x if x < 2.0 => "strong",
        _ => "decisive",
    }
}
