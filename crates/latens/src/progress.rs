//! How a long stage tells its caller how far it has got, and learns that the
//! caller wants it to stop: an [`Observer`] the caller passes in (the
//! solver/observer split of the argmin crate, whose executor reports to
//! observers the caller attaches). The library never draws a progress bar
//! or installs a signal handler; the `latens` binary implements the
//! observer with indicatif and the ctrlc crate, a notebook binding with its
//! own widgets and KeyboardInterrupt.

/// A long stage of the pipeline, as an observer is told of it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Stage {
    /// The grid search over perturber hypotheses; units: hypotheses.
    Search,
    /// The noise-only simulations of the search (false-alarm probability);
    /// units: simulations.
    Nulls,
    /// The posterior sampler on the linear kernel; units: steps.
    Sampling,
    /// The sampler restarted on the full nonlinear model; units: steps.
    NonlinearSampling,
    /// The sensitivity map; units: distances.
    Sensitivity,
    /// The profile likelihood over the sky; units: pixels.
    Profile,
}

impl Stage {
    /// What the stage does, in a few words.
    pub fn describe(self) -> &'static str {
        match self {
            Stage::Search => "searching",
            Stage::Nulls => "simulating noise-only data",
            Stage::Sampling => "sampling the posterior",
            Stage::NonlinearSampling => "sampling on the nonlinear model",
            Stage::Sensitivity => "mapping",
            Stage::Profile => "profiling the sky",
        }
    }

    /// The units its progress is counted in.
    pub fn unit(self) -> &'static str {
        match self {
            Stage::Search => "hypotheses",
            Stage::Nulls => "simulations",
            Stage::Sampling | Stage::NonlinearSampling => "steps",
            Stage::Sensitivity => "distances",
            Stage::Profile => "pixels",
        }
    }
}

/// Receives a long stage's progress and may ask it to stop. Called from
/// worker threads, hence `Sync`. Every method has a do-nothing default.
pub trait Observer: Sync {
    /// A stage begins, with `total` units of work.
    fn begin(&self, stage: Stage, total: u64) {
        let _ = (stage, total);
    }
    /// `done` units of the current stage are finished (not always in
    /// increasing order when threads report).
    fn advance(&self, done: u64) {
        let _ = done;
    }
    /// The current stage has ended (finished, stopped or failed).
    fn finish(&self) {}
    /// A short message on what the work is doing now ("Refining the best
    /// solution..."), for a log or a status line.
    fn note(&self, text: &str) {
        let _ = text;
    }
    /// Whether the caller asks the work to stop. Stages that can stop
    /// cleanly (the sampler, which saves a checkpoint first) check it
    /// between units of work; the others run to the end.
    fn stop_requested(&self) -> bool {
        false
    }
}

/// An observer that shows nothing and never asks to stop.
#[derive(Clone, Copy, Debug, Default)]
pub struct Quiet;

impl Observer for Quiet {}
