//! The job as a library: one [`Study`] value holds everything a study needs
//! (the tracked bodies with their observations, sites, kinds and force
//! models; the ephemerides for the arcs and for the search epoch), loaded
//! once and passed to typed stages. Each stage returns a typed result; the
//! command line (and any other caller) turns results into text and files.
//!
//! Stages built here: [`detect`] (reference fit, linear kernel, grid
//! search with null simulations, refinement on the full model, the kernel
//! recentred in the strong regime, outliers judged against the best model,
//! the annual-systematic check and the verdict) and [`posterior`] (the
//! alternatives, the sampler, convergence, evidence, the nonlinear check,
//! the explanation) and [`sky_products`] (map, credible regions, modes,
//! safety) and [`sensitivity`] (the detection-probability map of the
//! data or of a planned schedule), and [`predict`] (each mode's place,
//! date by date).
//!
//! Long stages report to a [`crate::progress::Observer`] the caller passes.

mod detection;
mod joint;
mod joint_posterior;
mod posterior;
mod predict;
mod sensitivity;
mod simulation;
mod sky;
mod study;
mod table;

pub use detection::{
    AnnualCheck, DETECTION_FAP, Detection, DetectionSettings, OutlierJudge, OutlierReport, Verdict, detect,
    linearisation_error,
};
pub use joint::{
    AloneResult, BodyEvidence, BodyFit, JointDetection, JointSettings, LeaveOneOut, detect_joint, fit_bodies,
    joint_epoch,
};
pub use joint_posterior::{BodyCorrection, JointPosteriorOutcome, posterior_joint};
pub use posterior::{
    Best, DerivedSample, Explanation, PERTURBER, PosteriorOutcome, PosteriorRun, PosteriorSettings, SAMPLE_COLUMNS,
    SampleSource, SearchGeometry, geometry_at, next_months, posterior,
};
pub use predict::{OrbitSample, Prediction, predict};
pub use sensitivity::{
    SensitivityMap, SensitivityPlan, SensitivityShare, merge_sensitivity, sensitivity, sensitivity_share,
    threshold_from_maxima,
};
pub use simulation::{SimulatedScenario, TRACK_SPACING_DAYS, TrackPoint, simulate_population, simulate_scenario};
pub use sky::{
    AS_GOOD_DELTA_CHI2, ConfidenceRegion, SUN_WARNING_DEG, SkyProducts, basin_eccentricity, confidence_region,
    sky_products, sky_products_at,
};
pub use study::{EphemerisSource, Study, TrackedArc, force_model, parse_known};
pub use table::Table;

/// Why a stage could not finish.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    /// The study or the settings do not make sense (nothing was computed).
    #[error("{0}")]
    Input(String),
    /// An input file is wrong; the error names the file, line and field.
    #[error(transparent)]
    File(#[from] crate::io::observations::InputError),
    /// The caller asked the work to stop; the checkpoint (if any) resumes it.
    #[error("stopped at step {step} of {of}{}", match checkpoint {
        Some(c) => format!("; the checkpoint {c} resumes it"),
        None => "; nothing was saved".to_string(),
    })]
    Interrupted { step: usize, of: usize, checkpoint: Option<String> },
    /// A computation failed on valid input; the error of the part that
    /// failed is kept as the source (its type and its own chain).
    #[error("{stage}")]
    Failed {
        stage: &'static str,
        #[source]
        source: Box<dyn std::error::Error + Send + Sync + 'static>,
    },
}

impl PipelineError {
    /// A closure mapping an error of `stage` to [`PipelineError::Failed`],
    /// keeping it as the source.
    pub(crate) fn failed<E: std::error::Error + Send + Sync + 'static>(
        stage: &'static str,
    ) -> impl Fn(E) -> PipelineError {
        move |e| PipelineError::Failed { stage, source: Box::new(e) }
    }

    /// A failure of `stage` described in words.
    pub(crate) fn failure(stage: &'static str, text: impl Into<String>) -> PipelineError {
        PipelineError::Failed { stage, source: text.into().into() }
    }
}
