//! The study: what is observed, how it is modelled, and where the planets
//! are, gathered once.

use std::path::{Path, PathBuf};

use super::PipelineError;
use crate::astrometry::observer_ephemeris_bodies;
use crate::dynamics::{ForceModel, KnownBody, TrackedBody};
use crate::ephemeris::{Body, Ephemeris, SpkFile, Vsop87};
use crate::io::observations::{Observation, SiteTable, read_observations, read_schedule};

/// The inner planets, folded into the Sun when not listed as known bodies.
const INNER: [Body; 4] = [Body::Mercury, Body::Venus, Body::EarthMoonBarycenter, Body::Mars];

/// Parses a list of known bodies: `none`, or comma-separated body names.
pub fn parse_known(text: &str) -> Result<Vec<Body>, String> {
    if text.trim().eq_ignore_ascii_case("none") {
        return Ok(Vec::new());
    }
    let mut out = Vec::new();
    for name in text.split(',') {
        let body = Body::from_name(name).ok_or_else(|| {
            format!(
                "unknown body `{}` in --known (use none, or names from: {})",
                name.trim(),
                Body::ALL.iter().filter(|b| **b != Body::Sun).map(|b| b.name()).collect::<Vec<_>>().join(", ")
            )
        })?;
        if body == Body::Sun {
            return Err("the Sun is always in the model; list planets only".into());
        }
        if !out.contains(&body) {
            out.push(body);
        }
    }
    Ok(out)
}

/// The force model for a list of known bodies: with none, the Sun alone;
/// otherwise the listed bodies, with the inner planets that are not listed
/// folded into the Sun (right for bodies well outside the orbit of Mars; list
/// them for anything that comes closer).
pub fn force_model(known: &[Body]) -> ForceModel {
    if known.is_empty() {
        return ForceModel::sun_only();
    }
    let mut model = ForceModel::with_known(known);
    let lists_earth = known.iter().any(|b| matches!(b, Body::Earth | Body::Moon | Body::EarthMoonBarycenter));
    model.folded = INNER
        .iter()
        .filter(|b| !(known.contains(b) || (lists_earth && **b == Body::EarthMoonBarycenter)))
        .map(|&b| KnownBody { body: b, gm_au3_per_day2: b.gm_au3_per_day2() })
        .collect();
    model
}

/// Where the planets come from.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum EphemerisSource {
    /// The embedded VSOP87A, tabulated over each arc.
    Builtin,
    /// A JPL SPK file (DE4xx).
    Spk(PathBuf),
}

impl EphemerisSource {
    /// `builtin` or the path of an SPK file.
    pub fn parse(text: &str) -> EphemerisSource {
        if text == "builtin" { EphemerisSource::Builtin } else { EphemerisSource::Spk(PathBuf::from(text)) }
    }

    /// The planets over the observed span of `observations` for `model`:
    /// the embedded VSOP87A tabulated, or the SPK file. Every observation
    /// must lie inside the coverage (the error names its file, line and
    /// field).
    pub fn for_arc(
        &self,
        model: &ForceModel,
        observations: &[Observation],
    ) -> Result<Box<dyn Ephemeris>, PipelineError> {
        self.for_arc_and(model, observations, &[])
    }

    /// As [`EphemerisSource::for_arc`], also covering the epochs `also`
    /// (TDB days; e.g. the epoch of an orbit to propagate from).
    pub fn for_arc_and(
        &self,
        model: &ForceModel,
        observations: &[Observation],
        also: &[f64],
    ) -> Result<Box<dyn Ephemeris>, PipelineError> {
        let times = observations.iter().map(|o| o.t_tdb_days).chain(also.iter().copied());
        let (first, last) = times.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), t| (a.min(t), b.max(t)));
        let (first, last) = if first.is_finite() { (first, last) } else { (0.0, 0.0) };
        // Light leaves a body 170 au away a day before it arrives.
        let span = (first - 2.0, last + 1.0);
        let mut needed = observer_ephemeris_bodies();
        for b in model.ephemeris_bodies() {
            if !needed.contains(&b) {
                needed.push(b);
            }
        }
        match self {
            EphemerisSource::Builtin => {
                let source = Vsop87::new();
                for &b in &needed {
                    if source.covered_tdb_days(b).is_none() {
                        return Err(PipelineError::Input(format!(
                            "the built-in ephemeris has no {b}; give a JPL SPK file with --ephemeris FILE.bsp"
                        )));
                    }
                }
                for o in observations {
                    if let Err(e) = source.check_covered(Body::Earth, o.t_tdb_days) {
                        return Err(PipelineError::Input(format!("{}: field `epoch_utc`: {e}", o.source)));
                    }
                }
                for &t in also {
                    source.check_covered(Body::Earth, t).map_err(|e| PipelineError::Input(e.to_string()))?;
                }
                Ok(Box::new(
                    model.tabulate(&source, &needed, span).map_err(PipelineError::failed("tabulating the planets"))?,
                ))
            }
            EphemerisSource::Spk(path) => {
                let spk = SpkFile::open(path).map_err(|e| PipelineError::Input(e.to_string()))?;
                for o in observations {
                    for &b in &needed {
                        for t in [o.t_tdb_days - 2.0, o.t_tdb_days] {
                            if let Err(e) = spk.check_covered(b, t) {
                                return Err(PipelineError::Input(format!("{}: field `epoch_utc`: {e}", o.source)));
                            }
                        }
                    }
                }
                for &t in also {
                    for &b in &needed {
                        spk.check_covered(b, t).map_err(|e| PipelineError::Input(e.to_string()))?;
                    }
                }
                // Every needed body once: a segment in a frame Latens cannot
                // use is the file's fault, told before any work.
                if let Some(o) = observations.first() {
                    for &b in &needed {
                        spk.heliocentric_state(b, o.t_tdb_days).map_err(|e| PipelineError::Input(e.to_string()))?;
                    }
                }
                Ok(Box::new(spk))
            }
        }
    }

    /// The planets anywhere the source covers (for a search epoch outside
    /// the arcs).
    pub fn wide(&self) -> Result<Box<dyn Ephemeris>, PipelineError> {
        match self {
            EphemerisSource::Builtin => Ok(Box::new(Vsop87::new())),
            EphemerisSource::Spk(path) => {
                Ok(Box::new(SpkFile::open(path).map_err(|e| PipelineError::Input(e.to_string()))?))
            }
        }
    }
}

/// One tracked body: its observations and how it is modelled.
pub struct TrackedArc {
    /// The body's name in every output (the file it came from when nothing
    /// else names it).
    pub name: String,
    /// Observations in time order, each naming its source (file and line).
    pub observations: Vec<Observation>,
    pub sites: SiteTable,
    /// Its own GM and kind (planet, dwarf planet, small body, comet).
    pub tracked: TrackedBody,
    /// The Sun, the known planets and the body's own GM.
    pub model: ForceModel,
    /// The sources of observations left out by hand before any fit.
    pub excluded_by_hand: Vec<String>,
}

impl TrackedArc {
    /// Reads a tracked body's observations (and the sites they name) and
    /// builds its force model: the Sun, the `known` bodies and the body's
    /// own GM. A planet tracked cannot also be a known body.
    pub fn load(
        observations: &Path,
        sites: Option<&Path>,
        known: &[Body],
        tracked: TrackedBody,
    ) -> Result<TrackedArc, PipelineError> {
        let (sites, model) = Self::setting(sites, known, &tracked)?;
        let list = read_observations(observations, &sites, 3)?;
        Ok(TrackedArc {
            name: observations.file_stem().map_or("tracked body".into(), |s| s.to_string_lossy().into_owned()),
            observations: list,
            sites,
            model,
            tracked,
            excluded_by_hand: Vec::new(),
        })
    }

    /// A tracked body from observations held in memory (Latens CSV or ADES
    /// PSV text, as a file would hold them), named `name`; messages name
    /// `name` as the file, with the text's own line numbers.
    pub fn from_text(
        name: &str,
        text: &str,
        sites: SiteTable,
        known: &[Body],
        tracked: TrackedBody,
    ) -> Result<TrackedArc, PipelineError> {
        let (_, model) = Self::setting(None, known, &tracked)?;
        let list = crate::io::observations::parse_observations(text, name, &sites, 3)?;
        Ok(TrackedArc {
            name: name.to_string(),
            observations: list,
            sites,
            model,
            tracked,
            excluded_by_hand: Vec::new(),
        })
    }

    /// Gives this body its own GM and kind (a study of bodies of several
    /// kinds): the force model takes the GM. A planet named by its GM is
    /// left out of its own model's known bodies (it cannot pull on itself),
    /// while the other bodies of the study keep feeling it: in a joint
    /// study of several planets, `--known` lists them all.
    pub fn set_tracked(&mut self, tracked: TrackedBody) -> Result<(), PipelineError> {
        if let Some(b) = tracked.named {
            self.model.known.retain(|k| k.body != b);
        }
        self.model = self.model.clone().with_tracked_gm(tracked.gm_au3_per_day2);
        self.tracked = tracked;
        Ok(())
    }

    /// The sites and the force model of an arc, the tracked body checked
    /// against the known planets.
    fn setting(
        sites: Option<&Path>,
        known: &[Body],
        tracked: &TrackedBody,
    ) -> Result<(SiteTable, ForceModel), PipelineError> {
        if let Some(b) = tracked.named
            && known.contains(&b)
        {
            return Err(PipelineError::Input(format!(
                "--tracked-mass {b}: {b} is also in --known; the tracked body cannot pull on itself (leave it out of --known)"
            )));
        }
        let sites = match sites {
            Some(p) => SiteTable::read(p)?,
            None => SiteTable::new(),
        };
        Ok((sites, force_model(known).with_tracked_gm(tracked.gm_au3_per_day2)))
    }

    /// Reads every body a file holds: one arc per designation in a file
    /// with a designation column (ADES `permID`/`provID`/`trkSub`, Latens
    /// CSV `body`), named by it; otherwise one arc named after the file.
    pub fn load_all(
        observations: &Path,
        sites: Option<&Path>,
        known: &[Body],
        tracked: TrackedBody,
    ) -> Result<Vec<TrackedArc>, PipelineError> {
        let (sites, model) = Self::setting(sites, known, &tracked)?;
        let lists = crate::io::observations::read_bodies(observations, &sites, 3)?;
        let stem = observations.file_stem().map_or("tracked body".into(), |s| s.to_string_lossy().into_owned());
        Ok(lists
            .into_iter()
            .map(|(name, list)| TrackedArc {
                name: name.unwrap_or_else(|| stem.clone()),
                observations: list,
                sites: sites.clone(),
                tracked: tracked.clone(),
                model: model.clone(),
                excluded_by_hand: Vec::new(),
            })
            .collect())
    }

    /// Reads a planned schedule (epochs, sigmas, sites; no positions) for
    /// the sensitivity of a survey; put it on an orbit with
    /// [`Study::place_on_orbit`] once the study is built.
    pub fn load_schedule(
        schedule: &Path,
        sites: Option<&Path>,
        known: &[Body],
        tracked: TrackedBody,
    ) -> Result<TrackedArc, PipelineError> {
        let sites = match sites {
            Some(p) => SiteTable::read(p)?,
            None => SiteTable::new(),
        };
        let list = read_schedule(schedule, &sites, 3)?;
        Ok(TrackedArc {
            name: schedule.file_stem().map_or("planned body".into(), |s| s.to_string_lossy().into_owned()),
            observations: list,
            sites,
            model: force_model(known).with_tracked_gm(tracked.gm_au3_per_day2),
            tracked,
            excluded_by_hand: Vec::new(),
        })
    }

    /// Leaves out the observations whose source lines are in `lines` (line
    /// numbers of the observation file). Every line must hold an
    /// observation, and at least 3 must remain.
    pub fn exclude_lines(&mut self, lines: &[usize]) -> Result<(), PipelineError> {
        let line_of = |o: &Observation| o.source.rsplit_once(':').and_then(|(_, l)| l.parse::<usize>().ok());
        for l in lines {
            if !self.observations.iter().any(|o| line_of(o) == Some(*l)) {
                let file = self.observations.first().map_or("", |o| o.file());
                return Err(PipelineError::Input(format!("line {l} of {file} holds no observation")));
            }
        }
        self.exclude_where(|o| line_of(o).is_some_and(|l| lines.contains(&l))).map(|_| ())
    }

    /// Leaves out by hand every observation `leave` picks (a date range, a
    /// site); returns how many. Refused when fewer than 3 would remain.
    pub fn exclude_where(&mut self, leave: impl Fn(&Observation) -> bool) -> Result<usize, PipelineError> {
        let leaving = self.observations.iter().filter(|o| leave(o)).count();
        if self.observations.len() - leaving < 3 {
            return Err(PipelineError::Input(format!("leaving out {leaving} observation(s) leaves fewer than 3")));
        }
        let (out, kept): (Vec<Observation>, Vec<Observation>) =
            std::mem::take(&mut self.observations).into_iter().partition(|o| leave(o));
        self.observations = kept;
        self.excluded_by_hand.extend(out.into_iter().map(|o| o.source));
        Ok(leaving)
    }
}

/// Everything a study needs. Several tracked bodies may share one
/// perturber; the stages built so far take one body and say so when given
/// more.
pub struct Study {
    pub bodies: Vec<TrackedArc>,
    /// Planets over every observed arc (fast, tabulated where possible).
    pub ephemeris: Box<dyn Ephemeris>,
    /// Planets at the search epoch, which may lie outside the arcs.
    pub wide: Box<dyn Ephemeris>,
    /// Where on the sky the perturber is wanted, TDB days since J2000.
    pub search_epoch_tdb_days: f64,
    /// Where the ephemerides came from (for spans the arcs do not cover).
    pub source: EphemerisSource,
}

impl Study {
    /// A study of `bodies` with the planets from `source`, over every arc
    /// and at the search epoch (default: the last observation).
    pub fn new(
        bodies: Vec<TrackedArc>,
        source: &EphemerisSource,
        search_epoch_tdb_days: Option<f64>,
    ) -> Result<Study, PipelineError> {
        let all: Vec<Observation> = {
            let mut v: Vec<Observation> = bodies.iter().flat_map(|b| b.observations.iter().cloned()).collect();
            v.sort_by(|a, b| a.t_tdb_days.total_cmp(&b.t_tdb_days));
            v
        };
        let Some(first) = bodies.first() else {
            return Err(PipelineError::Input("the study has no tracked body".into()));
        };
        // One ephemeris for every arc, with every body any model needs.
        let mut model = first.model.clone();
        for b in &bodies[1..] {
            for k in &b.model.known {
                if !model.known.iter().any(|m| m.body == k.body) {
                    model.known.push(*k);
                }
            }
        }
        let ephemeris = source.for_arc(&model, &all)?;
        let search_epoch = search_epoch_tdb_days.unwrap_or_else(|| all.last().map_or(0.0, |o| o.t_tdb_days));
        let wide = source.wide()?;
        for b in [Body::Earth, Body::Jupiter] {
            wide.check_covered(b, search_epoch).map_err(|e| PipelineError::Input(format!("--search-epoch: {e}")))?;
        }
        Ok(Study { bodies, ephemeris, wide, search_epoch_tdb_days: search_epoch, source: source.clone() })
    }

    /// The single tracked body of a one-body study.
    pub fn single(&self) -> Result<&TrackedArc, PipelineError> {
        match self.bodies.as_slice() {
            [one] => Ok(one),
            [] => Err(PipelineError::Input("the study has no tracked body".into())),
            more => Err(PipelineError::Input(format!(
                "the study has {} tracked bodies; this stage takes one (a joint study of several bodies is not built yet)",
                more.len()
            ))),
        }
    }
}
