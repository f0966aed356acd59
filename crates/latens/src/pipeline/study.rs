//! The study: what is observed, how it is modelled, and where the planets
//! are, gathered once.

use super::PipelineError;
use crate::dynamics::{ForceModel, TrackedBody};
use crate::ephemeris::Ephemeris;
use crate::io::observations::{Observation, SiteTable};

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
    /// Leaves out the observations whose source lines are in `lines` (line
    /// numbers of the observation file). Every line must hold an
    /// observation, and at least 3 must remain.
    pub fn exclude_lines(&mut self, lines: &[usize]) -> Result<(), PipelineError> {
        let line_of = |o: &Observation| o.source.rsplit_once(':').and_then(|(_, l)| l.parse::<usize>().ok());
        for l in lines {
            if !self.observations.iter().any(|o| line_of(o) == Some(*l)) {
                let file = self.observations.first().and_then(|o| o.source.rsplit_once(':')).map_or("", |(f, _)| f);
                return Err(PipelineError::Input(format!("line {l} of {file} holds no observation")));
            }
        }
        let leaving = self.observations.iter().filter(|o| line_of(o).is_some_and(|l| lines.contains(&l))).count();
        if self.observations.len() - leaving < 3 {
            return Err(PipelineError::Input(format!("leaving out {leaving} observation(s) leaves fewer than 3")));
        }
        let (out, kept): (Vec<Observation>, Vec<Observation>) = std::mem::take(&mut self.observations)
            .into_iter()
            .partition(|o| line_of(o).is_some_and(|l| lines.contains(&l)));
        self.observations = kept;
        self.excluded_by_hand.extend(out.into_iter().map(|o| o.source));
        Ok(())
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
}

impl Study {
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
