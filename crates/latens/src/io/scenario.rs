//! Scenario files (TOML): an invented or planned situation to simulate: a
//! tracked body, the force model, a survey (sites, dates, cadence, errors,
//! seed), an optional hidden perturber, and the search's priors. Documented
//! key by key in `docs/formats.md`.

use serde::Deserialize;

use super::observations::InputError;

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ScenarioFile {
    pub name: String,
    #[serde(default)]
    pub description: String,
    pub tracked: BodyFile,
    /// Further tracked bodies followed by the same survey and pulled by the
    /// same perturber (`[[more_bodies]]`), for joint studies.
    #[serde(default)]
    pub more_bodies: Vec<MoreBodyFile>,
    #[serde(default)]
    pub model: ModelFile,
    pub survey: SurveyFile,
    pub perturber: Option<PerturberFile>,
    #[serde(default)]
    pub search: SearchFile,
}

/// Osculating heliocentric elements, ecliptic and equinox J2000, at `epoch`.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BodyFile {
    pub name: String,
    /// ISO UTC or `JD <days> TDB`; also the reference epoch of the fit.
    pub epoch: String,
    pub a_au: f64,
    pub e: f64,
    pub inc_deg: f64,
    pub node_deg: f64,
    pub peri_deg: f64,
    pub mean_anomaly_deg: f64,
}

/// A further tracked body: osculating heliocentric elements, ecliptic and
/// equinox J2000, at the `[tracked]` body's epoch.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct MoreBodyFile {
    pub name: String,
    pub a_au: f64,
    pub e: f64,
    pub inc_deg: f64,
    pub node_deg: f64,
    pub peri_deg: f64,
    pub mean_anomaly_deg: f64,
}

impl ScenarioFile {
    /// Every tracked body, the `[tracked]` one first, each with the epoch
    /// of its elements.
    pub fn all_bodies(&self) -> Vec<BodyFile> {
        let mut out = vec![self.tracked.clone()];
        out.extend(self.more_bodies.iter().map(|b| BodyFile {
            name: b.name.clone(),
            epoch: self.tracked.epoch.clone(),
            a_au: b.a_au,
            e: b.e,
            inc_deg: b.inc_deg,
            node_deg: b.node_deg,
            peri_deg: b.peri_deg,
            mean_anomaly_deg: b.mean_anomaly_deg,
        }));
        out
    }
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ModelFile {
    /// Known planets, as `--known` takes them.
    #[serde(default = "default_known")]
    pub known: String,
}

fn default_known() -> String {
    "jupiter,saturn,uranus,neptune".into()
}

impl Default for ModelFile {
    fn default() -> Self {
        ModelFile { known: default_known() }
    }
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SurveyFile {
    pub name: String,
    pub start: String,
    pub end: String,
    /// Days between visits; visits rotate through the sites.
    pub visit_every_days: f64,
    pub sigma_arcsec: f64,
    /// Visits with the body closer to the Sun than this are skipped.
    #[serde(default = "default_elongation")]
    pub min_elongation_deg: f64,
    pub seed: u64,
    pub sites: Vec<SiteFile>,
}

fn default_elongation() -> f64 {
    90.0
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SiteFile {
    pub name: String,
    pub lon_deg: f64,
    pub lat_deg: f64,
    pub height_m: f64,
}

/// The hidden perturber: mass and elements at the tracked body's epoch.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PerturberFile {
    pub name: String,
    pub mass_earth: f64,
    pub a_au: f64,
    pub e: f64,
    pub inc_deg: f64,
    pub node_deg: f64,
    pub peri_deg: f64,
    pub mean_anomaly_deg: f64,
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SearchFile {
    /// When to give sky positions; default: the last observation.
    pub epoch: Option<String>,
    #[serde(default = "default_mass")]
    pub mass_earth: [f64; 2],
    #[serde(default = "default_distance")]
    pub distance_au: [f64; 2],
    #[serde(default = "default_eccentricity")]
    pub max_eccentricity: f64,
}

fn default_mass() -> [f64; 2] {
    [0.01, 5000.0]
}
fn default_distance() -> [f64; 2] {
    [5.0, 500.0]
}
fn default_eccentricity() -> f64 {
    0.6
}

impl Default for SearchFile {
    fn default() -> Self {
        SearchFile {
            epoch: None,
            mass_earth: default_mass(),
            distance_au: default_distance(),
            max_eccentricity: default_eccentricity(),
        }
    }
}

fn invalid(file: &str, field: &str, why: impl Into<String>) -> InputError {
    InputError { file: file.into(), line: 0, field: Some(field.into()), message: why.into() }
}

/// Parses and checks a scenario; `file` names it in messages.
pub fn parse(text: &str, file: &str) -> Result<ScenarioFile, InputError> {
    let s: ScenarioFile = toml::from_str(text).map_err(|e| {
        let line = e.span().map_or(0, |span| text[..span.start.min(text.len())].lines().count().max(1));
        InputError { file: file.into(), line, field: None, message: e.message().to_string() }
    })?;
    let positive = |v: f64, field: &str| -> Result<(), InputError> {
        if v.is_finite() && v > 0.0 { Ok(()) } else { Err(invalid(file, field, format!("must be positive, got {v}"))) }
    };
    let mut names = std::collections::HashSet::new();
    for (k, b) in s.all_bodies().iter().enumerate() {
        let key = if k == 0 { "tracked".to_string() } else { format!("more_bodies[{}]", k - 1) };
        positive(b.a_au, &format!("{key}.a_au"))?;
        if !(0.0..1.0).contains(&b.e) {
            return Err(invalid(file, &format!("{key}.e"), format!("must lie in [0, 1), got {}", b.e)));
        }
        if !names.insert(b.name.to_lowercase()) {
            return Err(invalid(file, &format!("{key}.name"), format!("the name `{}` is used twice", b.name)));
        }
        let safe = !b.name.is_empty() && b.name.chars().all(|c| c.is_ascii_alphanumeric() || "-_ ".contains(c));
        if !safe {
            return Err(invalid(
                file,
                &format!("{key}.name"),
                format!("`{}`: use letters, digits, spaces, - and _ (it names the body's file)", b.name),
            ));
        }
    }
    positive(s.survey.visit_every_days, "survey.visit_every_days")?;
    positive(s.survey.sigma_arcsec, "survey.sigma_arcsec")?;
    if s.survey.sites.is_empty() {
        return Err(invalid(file, "survey.sites", "at least one site is needed"));
    }
    for site in &s.survey.sites {
        if !(-90.0..=90.0).contains(&site.lat_deg) || !site.lon_deg.is_finite() || !site.height_m.is_finite() {
            return Err(invalid(file, "survey.sites", format!("site {}: latitude must lie in [-90, 90]", site.name)));
        }
    }
    if let Some(p) = &s.perturber {
        positive(p.mass_earth, "perturber.mass_earth")?;
        positive(p.a_au, "perturber.a_au")?;
        if !(0.0..1.0).contains(&p.e) {
            return Err(invalid(file, "perturber.e", format!("must lie in [0, 1), got {}", p.e)));
        }
    }
    for (v, f) in [(s.search.mass_earth, "search.mass_earth"), (s.search.distance_au, "search.distance_au")] {
        if !(v[0] > 0.0 && v[1] > v[0] && v[1].is_finite()) {
            return Err(invalid(file, f, format!("must be [min, max] with 0 < min < max, got {v:?}")));
        }
    }
    if !(s.search.max_eccentricity > 0.0 && s.search.max_eccentricity < 1.0) {
        return Err(invalid(file, "search.max_eccentricity", "must lie in (0, 1)"));
    }
    Ok(s)
}

/// Reads and checks a scenario file.
pub fn read(path: &std::path::Path) -> Result<ScenarioFile, InputError> {
    let file = path.display().to_string();
    let text = std::fs::read_to_string(path).map_err(|e| InputError {
        file: file.clone(),
        line: 0,
        field: None,
        message: format!("cannot read: {e}"),
    })?;
    parse(&text, &file)
}
