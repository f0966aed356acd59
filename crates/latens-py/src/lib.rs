//! The Python face of the `latens` library: the pipeline's stages as
//! functions, their results as classes with numpy arrays and plain dicts.
//!
//! This crate only converts. Every number comes from the library through
//! the same stage functions the `latens` command calls, with the same
//! settings types; what a Python user may set is what the command line may
//! set, under the same names. Long stages run with the interpreter released
//! (`Python::detach`) and report to a [`latens::progress::Observer`] that
//! calls back into Python for progress and checks for KeyboardInterrupt;
//! no signal handler is installed.
//!
//! The pure-Python layer (`python/latens/__init__.py`) adds the DataFrame
//! and astropy conversions and the `to_pandas()` helpers.

use std::path::PathBuf;
use std::sync::Mutex;
use std::time::{Duration, Instant};

use numpy::{IntoPyArray, PyArray1, PyArray2};
use pyo3::create_exception;
use pyo3::exceptions::{PyException, PyKeyboardInterrupt};
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyList};

use latens::dynamics::TrackedBody;
use latens::io::observations::SiteTable;
use latens::perturber::sensitivity::SensitivitySettings;
use latens::perturber::{SearchSettings, SignalKernel};
use latens::pipeline::{
    BodyCorrection, DETECTION_FAP, Detection, DetectionSettings, EphemerisSource, JointDetection, JointSettings,
    OrbitSample, PipelineError, PosteriorOutcome, PosteriorSettings, SensitivityMap, SensitivityPlan, SkyProducts,
    Study, TrackedArc,
};
use latens::posterior::impostors::{self, ImpostorPriors};
use latens::progress::{Observer, Stage};
use latens::time::{epoch_from_tdb_days, parse_epoch, tdb_days_from_j2000, utc_iso_from_epoch};

create_exception!(
    _native,
    LatensError,
    PyException,
    "Every error Latens raises (besides KeyboardInterrupt) is one of these."
);
create_exception!(
    _native,
    InputError,
    LatensError,
    "Bad input: a file (or table) with a wrong line or field, or a setting out of range. \
     Attributes `file`, `line` (1-based; 0 for the input as a whole) and `field` (or None) locate it."
);
create_exception!(
    _native,
    FitError,
    LatensError,
    "A computation failed on valid input (a fit that found no orbit, a propagation that broke down). \
     Attribute `stage` names the part that failed."
);
create_exception!(
    _native,
    NotConvergedError,
    FitError,
    "An iterative computation stopped without converging (its message says which)."
);

/// A library error as the Python exception of its kind.
fn to_py(py: Python<'_>, e: PipelineError) -> PyErr {
    match e {
        PipelineError::File(f) => {
            let err = InputError::new_err(f.to_string());
            let value = err.value(py);
            let _ = value.setattr("file", f.file.clone());
            let _ = value.setattr("line", f.line);
            let _ = value.setattr("field", f.field.clone());
            err
        }
        PipelineError::Input(text) => {
            let err = InputError::new_err(text);
            let value = err.value(py);
            let _ = value.setattr("file", py.None());
            let _ = value.setattr("line", py.None());
            let _ = value.setattr("field", py.None());
            err
        }
        PipelineError::Interrupted { step, of, checkpoint } => PyKeyboardInterrupt::new_err(match checkpoint {
            Some(c) => {
                format!("stopped at step {step} of {of}; the progress is saved in {c}: call again with resume=True")
            }
            None => format!("stopped at step {step} of {of}; nothing was saved"),
        }),
        PipelineError::Failed { stage, source } => {
            let mut text = format!("{stage}: {source}");
            let mut cause = source.source();
            while let Some(c) = cause {
                text.push_str(&format!(": {c}"));
                cause = c.source();
            }
            let err =
                if text.contains("converge") { NotConvergedError::new_err(text) } else { FitError::new_err(text) };
            let _ = err.value(py).setattr("stage", stage);
            err
        }
    }
}

/// A bad setting, before any work.
fn bad_setting(py: Python<'_>, text: impl Into<String>) -> PyErr {
    to_py(py, PipelineError::Input(text.into()))
}

/// JSON text as Python objects (dicts, lists, numbers).
fn json_value<'py, T: serde::Serialize>(py: Python<'py>, value: &T) -> PyResult<Bound<'py, PyAny>> {
    let text = serde_json::to_string(value).map_err(|e| LatensError::new_err(e.to_string()))?;
    py.import("json")?.call_method1("loads", (text,))
}

/// A dict of named numpy columns from a library table.
fn table_dict<'py>(py: Python<'py>, table: &latens::pipeline::Table) -> PyResult<Bound<'py, PyDict>> {
    let d = PyDict::new(py);
    for (k, name) in table.columns.iter().enumerate() {
        d.set_item(*name, table.values.column(k).to_owned().into_pyarray(py))?;
    }
    Ok(d)
}

/// A pandas DataFrame of named columns (pandas imported on demand).
fn frame<'py>(py: Python<'py>, columns: Bound<'py, PyDict>) -> PyResult<Bound<'py, PyAny>> {
    py.import("pandas")?.getattr("DataFrame")?.call1((columns,))
}

/// A date as TDB days since J2000.0: ISO UTC text or `JD <days> TDB`.
fn tdb_days(py: Python<'_>, text: &str, what: &str) -> PyResult<f64> {
    parse_epoch(text).map(tdb_days_from_j2000).map_err(|e| bad_setting(py, format!("{what}: {e}")))
}

fn range(py: Python<'_>, r: (f64, f64), what: &str) -> PyResult<(f64, f64)> {
    if r.0.is_finite() && r.1.is_finite() && r.0 > 0.0 && r.1 > r.0 {
        Ok(r)
    } else {
        Err(bad_setting(py, format!("{what} needs 0 < min < max, got ({}, {})", r.0, r.1)))
    }
}

// ---------------------------------------------------------------------------
// Progress and KeyboardInterrupt through the library's observer.

/// Calls `progress(stage, done, total)` every 1% of the stage or 0.2 s, whichever comes first, logs notes to
/// the `latens` logger, and asks the stage to stop on KeyboardInterrupt
/// (or when the callback raises); the exception is kept and raised when the
/// stage returns.
struct PyObserver {
    callback: Option<Py<PyAny>>,
    /// The stage, its total, and the last report (time, units done).
    state: Mutex<(Option<Stage>, u64, Instant, u64)>,
    error: Mutex<Option<PyErr>>,
}

impl PyObserver {
    fn new(callback: Option<Py<PyAny>>) -> PyObserver {
        PyObserver { callback, state: Mutex::new((None, 0, Instant::now(), 0)), error: Mutex::new(None) }
    }

    fn call(&self, stage: Stage, done: u64, total: u64) {
        let Some(cb) = &self.callback else { return };
        Python::attach(|py| {
            if let Err(e) = cb.call1(py, (stage.describe(), done, total)) {
                self.keep(e);
            }
        });
    }

    fn keep(&self, e: PyErr) {
        let mut slot = self.error.lock().unwrap_or_else(|p| p.into_inner());
        if slot.is_none() {
            *slot = Some(e);
        }
    }

    /// The stage's result, or the exception raised while it ran.
    fn outcome<T>(self, py: Python<'_>, result: Result<T, PipelineError>) -> PyResult<T> {
        let kept = self.error.into_inner().unwrap_or_else(|p| p.into_inner());
        match (result, kept) {
            (Ok(v), None) => Ok(v),
            (Ok(_), Some(e)) => Err(e),
            (Err(PipelineError::Interrupted { checkpoint, .. }), Some(e)) => {
                if let Some(c) = checkpoint {
                    let note = format!("latens: the progress is saved in {c}; call again with resume=True to finish");
                    let _ = e.value(py).call_method1("add_note", (note,));
                }
                Err(e)
            }
            (Err(e), _) => Err(to_py(py, e)),
        }
    }
}

impl Observer for PyObserver {
    fn begin(&self, stage: Stage, total: u64) {
        {
            let mut s = self.state.lock().unwrap_or_else(|p| p.into_inner());
            *s = (Some(stage), total, Instant::now(), 0);
        }
        self.call(stage, 0, total);
    }

    fn advance(&self, done: u64) {
        let due = {
            let mut s = self.state.lock().unwrap_or_else(|p| p.into_inner());
            if s.2.elapsed() >= Duration::from_millis(200) || done >= s.3 + s.1.div_ceil(100) {
                s.2 = Instant::now();
                s.3 = done;
                s.0.map(|stage| (stage, s.1))
            } else {
                None
            }
        };
        if let Some((stage, total)) = due {
            self.call(stage, done, total);
        }
    }

    fn finish(&self) {
        let (stage, total) = {
            let s = self.state.lock().unwrap_or_else(|p| p.into_inner());
            (s.0, s.1)
        };
        if let Some(stage) = stage {
            self.call(stage, total, total);
        }
    }

    fn note(&self, text: &str) {
        Python::attach(|py| {
            let logged = py
                .import("logging")
                .and_then(|l| l.call_method1("getLogger", ("latens",)))
                .and_then(|l| l.call_method1("info", (text,)));
            if let Err(e) = logged {
                self.keep(e);
            }
        });
    }

    fn stop_requested(&self) -> bool {
        if self.error.lock().map(|e| e.is_some()).unwrap_or(true) {
            return true;
        }
        // Runs Python's signal handlers: the default SIGINT handler raises
        // KeyboardInterrupt (on the main thread, where stages check this).
        match Python::attach(|py| py.check_signals()) {
            Ok(()) => false,
            Err(e) => {
                self.keep(e);
                true
            }
        }
    }
}

// ---------------------------------------------------------------------------
// The study.

/// What is observed, how it is modelled and where the planets are, read
/// once and passed to every stage. Build it with `latens.Study(...)`, which
/// accepts files and pandas DataFrames.
#[pyclass(module = "latens._native", name = "Study", frozen)]
struct PyStudy {
    inner: Study,
}

#[pymethods]
impl PyStudy {
    /// Study(files, texts, sites_file=None, sites_text=None, known=..., ephemeris="builtin",
    /// tracked_mass="0", kind=None, search_epoch=None, own_masses=[], own_kinds=[])
    ///
    /// The low-level constructor; use `latens.Study`. `files` are observation
    /// files (Latens CSV or ADES PSV; a file with a designation column holds
    /// several bodies); `texts` are (name, text) pairs of the same formats;
    /// `own_masses` and `own_kinds` are (body, value) pairs for bodies of
    /// their own mass or kind.
    #[new]
    #[pyo3(signature = (files, texts, sites_file=None, sites_text=None, known="jupiter,saturn,uranus,neptune", ephemeris="builtin", tracked_mass="0", kind=None, search_epoch=None, own_masses=Vec::new(), own_kinds=Vec::new()))]
    #[allow(clippy::too_many_arguments)]
    fn new(
        py: Python<'_>,
        files: Vec<PathBuf>,
        texts: Vec<(String, String)>,
        sites_file: Option<PathBuf>,
        sites_text: Option<String>,
        known: &str,
        ephemeris: &str,
        tracked_mass: &str,
        kind: Option<&str>,
        search_epoch: Option<&str>,
        own_masses: Vec<(String, String)>,
        own_kinds: Vec<(String, String)>,
    ) -> PyResult<PyStudy> {
        let known = latens::pipeline::parse_known(known).map_err(|e| bad_setting(py, e))?;
        let tracked = TrackedBody::parse(tracked_mass, kind).map_err(|e| bad_setting(py, e))?;
        // A body of its own mass or kind: the plain values fill what it
        // does not say.
        let own = |name: &str| -> Option<Result<TrackedBody, String>> {
            let mass = own_masses.iter().find(|(b, _)| b == name).map(|(_, v)| v.as_str());
            let own_kind = own_kinds.iter().find(|(b, _)| b == name).map(|(_, v)| v.as_str());
            (mass.is_some() || own_kind.is_some()).then(|| {
                TrackedBody::parse(mass.unwrap_or(tracked_mass), own_kind.or(kind)).map_err(|e| format!("{name}: {e}"))
            })
        };
        for (name, _) in own_masses.iter().chain(&own_kinds) {
            if let Some(Err(e)) = own(name) {
                return Err(bad_setting(py, e));
            }
        }
        let search_epoch = search_epoch.map(|t| tdb_days(py, t, "search_epoch")).transpose()?;
        let source = EphemerisSource::parse(ephemeris);
        let result = py.detach(|| -> Result<Study, PipelineError> {
            let sites = match (&sites_file, &sites_text) {
                (Some(p), _) => SiteTable::read(p)?,
                (None, Some(t)) => SiteTable::parse(t, "<sites>")?,
                (None, None) => SiteTable::new(),
            };
            let mut arcs = Vec::new();
            for f in &files {
                arcs.extend(TrackedArc::load_all(f, sites_file.as_deref(), &known, tracked.clone())?.into_iter().map(
                    |mut a| {
                        a.sites = sites.clone();
                        a
                    },
                ));
            }
            for (name, text) in &texts {
                arcs.push(TrackedArc::from_text(name, text, sites.clone(), &known, tracked.clone())?);
            }
            for (name, _) in own_masses.iter().chain(&own_kinds) {
                if !arcs.iter().any(|a| &a.name == name) {
                    let names: Vec<&str> = arcs.iter().map(|a| a.name.as_str()).collect();
                    return Err(PipelineError::Input(format!(
                        "no body is called {name} (the bodies: {})",
                        names.join(", ")
                    )));
                }
            }
            for arc in &mut arcs {
                if let Some(Ok(t)) = own(&arc.name) {
                    arc.set_tracked(t)?;
                }
            }
            Study::new(arcs, &source, search_epoch)
        });
        result.map(|inner| PyStudy { inner }).map_err(|e| to_py(py, e))
    }

    /// The tracked bodies' names, in order.
    #[getter]
    fn body_names(&self) -> Vec<String> {
        self.inner.bodies.iter().map(|b| b.name.clone()).collect()
    }

    /// When the perturber's sky position is given: TDB days since J2000.0.
    #[getter]
    fn search_epoch_tdb_days(&self) -> f64 {
        self.inner.search_epoch_tdb_days
    }

    /// The search epoch as ISO UTC text.
    #[getter]
    fn search_epoch_utc(&self) -> String {
        utc_iso_from_epoch(epoch_from_tdb_days(self.inner.search_epoch_tdb_days))
    }

    /// Where the planets come from, in words.
    #[getter]
    fn ephemeris(&self) -> String {
        self.inner.ephemeris.description()
    }

    /// observations(body=0) -> dict of columns
    ///
    /// The observations of one body as read (time order): `epoch_utc`
    /// (text as given), `t_tdb_days`, `ra_deg`, `dec_deg`,
    /// `sigma_ra_arcsec`, `sigma_dec_arcsec`, `corr`, `site`, `source`
    /// (file:line).
    #[pyo3(signature = (body=0))]
    fn observations<'py>(&self, py: Python<'py>, body: usize) -> PyResult<Bound<'py, PyDict>> {
        let arc =
            self.inner.bodies.get(body).ok_or_else(|| bad_setting(py, format!("the study has no body {body}")))?;
        let o = &arc.observations;
        let d = PyDict::new(py);
        let col = |f: &dyn Fn(&latens::io::observations::Observation) -> f64| o.iter().map(f).collect::<Vec<f64>>();
        d.set_item("epoch_utc", o.iter().map(|x| x.epoch_text.clone()).collect::<Vec<_>>())?;
        d.set_item("t_tdb_days", col(&|x| x.t_tdb_days).into_pyarray(py))?;
        d.set_item("ra_deg", col(&|x| x.ra_rad.to_degrees()).into_pyarray(py))?;
        d.set_item("dec_deg", col(&|x| x.dec_rad.to_degrees()).into_pyarray(py))?;
        d.set_item("sigma_ra_arcsec", col(&|x| x.sigma_ra_arcsec).into_pyarray(py))?;
        d.set_item("sigma_dec_arcsec", col(&|x| x.sigma_dec_arcsec).into_pyarray(py))?;
        d.set_item("corr", col(&|x| x.corr).into_pyarray(py))?;
        d.set_item("site", o.iter().map(|x| x.site.clone()).collect::<Vec<_>>())?;
        d.set_item("source", o.iter().map(|x| x.source.clone()).collect::<Vec<_>>())?;
        Ok(d)
    }

    fn __repr__(&self) -> String {
        let n: usize = self.inner.bodies.iter().map(|b| b.observations.len()).sum();
        format!(
            "<latens.Study: {} ({} observations), search epoch {}>",
            self.body_names().join(", "),
            n,
            self.search_epoch_utc()
        )
    }
}

// ---------------------------------------------------------------------------
// The reference fit.

/// The reference orbit of one body and its O-C residuals.
#[pyclass(module = "latens._native", name = "ReferenceFit", frozen)]
struct PyReferenceFit {
    fit: latens::reference::ReferenceFit,
    table: latens::pipeline::Table,
}

#[pymethods]
impl PyReferenceFit {
    /// The fit's chi-square.
    #[getter]
    fn chi2(&self) -> f64 {
        self.fit.chi2
    }
    /// Degrees of freedom of the fit.
    #[getter]
    fn dof(&self) -> usize {
        self.fit.dof
    }
    /// Reference epoch, TDB days since J2000.0.
    #[getter]
    fn epoch_tdb_days(&self) -> f64 {
        self.fit.epoch_tdb_days
    }
    /// Heliocentric ICRF state at the epoch: x, y, z (au), vx, vy, vz (au/day).
    #[getter]
    fn state<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        self.fit.state.to_vec().into_pyarray(py)
    }
    /// Covariance of `state`, 6 x 6.
    #[getter]
    fn covariance<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyArray2<f64>>> {
        let a = ndarray::Array2::from_shape_vec((6, 6), self.fit.covariance.clone())
            .map_err(|e| LatensError::new_err(e.to_string()))?;
        Ok(a.into_pyarray(py))
    }
    /// RMS of the O-C in RA*cos(Dec), arcsec.
    #[getter]
    fn rms_ra_arcsec(&self) -> f64 {
        self.fit.rms_ra_arcsec
    }
    /// RMS of the O-C in Dec, arcsec.
    #[getter]
    fn rms_dec_arcsec(&self) -> f64 {
        self.fit.rms_dec_arcsec
    }
    /// Observations the fit used.
    #[getter]
    fn n_used(&self) -> usize {
        self.fit.n_used
    }
    /// Observations set aside as outliers.
    #[getter]
    fn n_rejected(&self) -> usize {
        self.fit.n_rejected
    }
    /// Warnings for the reader, in words.
    #[getter]
    fn warnings(&self) -> Vec<String> {
        self.fit.warnings.clone()
    }
    /// The orbit as fit.json gives it: osculating heliocentric elements
    /// (ecliptic J2000; a_au, e, inc_deg, node_deg, peri_deg,
    /// mean_anomaly_deg) with their formal sigmas, the epoch, the ICRF
    /// state and its covariance.
    #[getter]
    fn orbit<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        json_value(py, &self.fit.orbit_file())
    }
    /// The O-C residuals, one entry per observation: `t_tdb_days`,
    /// `ra_arcsec` (RA*cos Dec), `dec_arcsec`, the sigmas, `chi2`, `used`.
    #[getter]
    fn residuals<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        table_dict(py, &self.table)
    }
    /// The residuals as a pandas DataFrame.
    fn to_pandas<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        frame(py, self.residuals(py)?)
    }
    /// Everything as plain Python values (JSON-ready): chi2, dof, RMS,
    /// counts, the orbit, warnings.
    fn to_dict<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let d = PyDict::new(py);
        d.set_item("chi2", self.fit.chi2)?;
        d.set_item("dof", self.fit.dof)?;
        d.set_item("rms_ra_arcsec", self.fit.rms_ra_arcsec)?;
        d.set_item("rms_dec_arcsec", self.fit.rms_dec_arcsec)?;
        d.set_item("n_used", self.fit.n_used)?;
        d.set_item("n_rejected", self.fit.n_rejected)?;
        d.set_item("orbit", self.orbit(py)?)?;
        d.set_item("warnings", self.fit.warnings.clone())?;
        Ok(d)
    }
    fn __repr__(&self) -> String {
        format!(
            "<latens.ReferenceFit: chi-square {:.1} for {} dof, RMS {:.3}\" / {:.3}\">",
            self.fit.chi2, self.fit.dof, self.fit.rms_ra_arcsec, self.fit.rms_dec_arcsec
        )
    }
}

/// reference_fit(study, body=0, epoch=None) -> ReferenceFit
///
/// Fits one body's orbit under the Sun and the study's known planets
/// (the reference, no perturber), as `latens residuals` does. `epoch`:
/// ISO UTC or `JD <days> TDB`; default the whole TDB day nearest mid-arc.
#[pyfunction]
#[pyo3(signature = (study, body=0, epoch=None))]
fn reference_fit(py: Python<'_>, study: &PyStudy, body: usize, epoch: Option<&str>) -> PyResult<PyReferenceFit> {
    let arc = study.inner.bodies.get(body).ok_or_else(|| bad_setting(py, format!("the study has no body {body}")))?;
    let epoch = epoch.map(|t| tdb_days(py, t, "epoch")).transpose()?;
    let settings = latens::reference::ReferenceSettings { epoch_tdb_days: epoch, ..Default::default() };
    let eph = study.inner.ephemeris.as_ref();
    let fit = py
        .detach(|| {
            latens::reference::fit_reference_orbit(&arc.observations, &arc.sites, &arc.model, eph, &settings, None)
        })
        .map_err(|e| to_py(py, PipelineError::Failed { stage: "reference fit", source: Box::new(e) }))?;
    let table = fit.residual_table(&arc.observations);
    Ok(PyReferenceFit { fit, table })
}

// ---------------------------------------------------------------------------
// Detection.

/// The perturber search's result: the grid search with its null
/// simulations, the refinement, the outliers and the verdict.
#[pyclass(module = "latens._native", name = "Detection", frozen)]
struct PyDetection {
    inner: Detection,
}

#[pymethods]
impl PyDetection {
    /// The best chi-square drop against the null model.
    #[getter]
    fn delta_chi2(&self) -> f64 {
        self.inner.best_delta_chi2()
    }
    /// The share of null simulations whose best drop reached it.
    #[getter]
    fn false_alarm_probability(&self) -> f64 {
        self.inner.false_alarm_probability()
    }
    /// Whether the false-alarm probability is below the detection threshold (0.0027).
    #[getter]
    fn detected(&self) -> bool {
        self.inner.verdict.detected()
    }
    /// The verdict in a sentence, as `latens infer` prints it.
    #[getter]
    fn verdict(&self) -> String {
        self.inner.verdict_text()
    }
    /// Warnings for the reader, in words.
    #[getter]
    fn warnings(&self) -> Vec<String> {
        self.inner.warnings()
    }
    /// The null model's (reference) chi-square and degrees of freedom.
    #[getter]
    fn null_chi2(&self) -> f64 {
        self.inner.null.chi2
    }
    /// The null model's degrees of freedom.
    #[getter]
    fn null_dof(&self) -> usize {
        self.inner.null.dof
    }
    /// The best search drop of every null simulation.
    #[getter]
    fn null_maxima<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        self.inner.search.null_maxima.clone().into_pyarray(py)
    }
    /// Perturber hypotheses searched.
    #[getter]
    fn n_hypotheses(&self) -> usize {
        self.inner.search.n_hypotheses
    }
    /// The null model's residuals (see ReferenceFit.residuals).
    #[getter]
    fn residuals<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        table_dict(py, &self.inner.null.residual_table(&self.inner.observations))
    }
    /// The sources (file:line) of observations set aside as outliers.
    #[getter]
    fn set_aside(&self) -> Vec<String> {
        self.inner.outliers.set_aside.clone()
    }
    /// The search's basins, best first: `delta_chi2`, `mass_earth`, the
    /// perturber's heliocentric ICRF `position_au` and
    /// `velocity_au_per_day` at the reference epoch, `closest_approach_au`.
    #[getter]
    fn basins<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyList>> {
        let list = PyList::empty(py);
        for b in &self.inner.basins {
            let d = PyDict::new(py);
            d.set_item("delta_chi2", b.delta_chi2)?;
            d.set_item("mass_earth", b.mass_earth())?;
            let (r, v) = (b.hypothesis.position_au, b.hypothesis.velocity_au_per_day);
            d.set_item("position_au", [r.x, r.y, r.z].to_vec().into_pyarray(py))?;
            d.set_item("velocity_au_per_day", [v.x, v.y, v.z].to_vec().into_pyarray(py))?;
            d.set_item("closest_approach_au", b.closest_approach_au)?;
            list.append(d)?;
        }
        Ok(list)
    }
    /// The null model's residuals as a pandas DataFrame.
    fn to_pandas<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        frame(py, self.residuals(py)?)
    }
    /// The detection as plain Python values (JSON-ready).
    fn to_dict<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let d = PyDict::new(py);
        d.set_item("delta_chi2", self.delta_chi2())?;
        d.set_item("false_alarm_probability", self.false_alarm_probability())?;
        d.set_item("detected", self.detected())?;
        d.set_item("verdict", self.verdict())?;
        d.set_item("null_chi2", self.null_chi2())?;
        d.set_item("null_dof", self.null_dof())?;
        d.set_item("n_hypotheses", self.n_hypotheses())?;
        d.set_item("n_null_simulations", self.inner.search.null_maxima.len())?;
        d.set_item("null_orbit", json_value(py, &self.inner.null.orbit_file())?)?;
        let basins = PyList::empty(py);
        for b in self.basins(py)?.iter() {
            let b = b.cast_into::<PyDict>()?;
            for key in ["position_au", "velocity_au_per_day"] {
                if let Some(v) = b.get_item(key)? {
                    b.set_item(key, v.call_method0("tolist")?)?;
                }
            }
            basins.append(b)?;
        }
        d.set_item("basins", basins)?;
        d.set_item("set_aside", self.set_aside())?;
        d.set_item("warnings", self.warnings())?;
        Ok(d)
    }
    fn __repr__(&self) -> String {
        format!(
            "<latens.Detection: delta chi2 {:.1}, false-alarm probability {:.2e}, {}>",
            self.delta_chi2(),
            self.false_alarm_probability(),
            if self.detected() { "detected" } else { "not detected" }
        )
    }
}

/// detect(study, mass_earth=(0.01, 5000), distance_au=(5, 500), nulls=1000, directions=768,
/// distances=20, seed=1, reject_sigma=10.0, near_ecliptic=None, progress=None) -> Detection
///
/// Searches the study for an unseen perturber, as `latens infer`
/// does before its posterior: the reference fit, the linear kernel, the
/// grid search over `directions` x `distances` (x orientations x speeds)
/// hypotheses with the mass profiled, `nulls` null simulations for the
/// false-alarm probability (look-elsewhere included), the refinement on
/// the full model, outliers judged against the best model
/// (`reject_sigma`, None keeps every observation) and the verdict. The
/// same seed gives the same numbers as the command line. `near_ecliptic`
/// (degrees) is a direction prior: only perturbers within that band about
/// the ecliptic are searched (and later sampled), as `--near-ecliptic`.
///
/// A study of several bodies is searched jointly for one shared perturber
/// and gives a JointDetection (each body also searched alone, and the
/// search repeated without the strongest body; outliers judged against
/// the best joint solution, as `reject_sigma` says).
#[pyfunction]
#[pyo3(signature = (study, mass_earth=(0.01, 5000.0), distance_au=(5.0, 500.0), nulls=1000, directions=768, distances=20, seed=1, reject_sigma=Some(10.0), near_ecliptic=None, progress=None))]
#[allow(clippy::too_many_arguments)]
fn detect(
    py: Python<'_>,
    study: &PyStudy,
    mass_earth: (f64, f64),
    distance_au: (f64, f64),
    nulls: usize,
    directions: usize,
    distances: usize,
    seed: u64,
    reject_sigma: Option<f64>,
    near_ecliptic: Option<f64>,
    progress: Option<Py<PyAny>>,
) -> PyResult<Py<PyAny>> {
    let mut settings =
        detection_settings(py, mass_earth, distance_au, nulls, directions, distances, seed, reject_sigma)?;
    settings.search.near_ecliptic_deg = near_ecliptic;
    settings.search.check_band().map_err(|e| bad_setting(py, format!("near_ecliptic: {e}")))?;
    let observer = PyObserver::new(progress);
    if study.inner.bodies.len() > 1 {
        let joint = JointSettings {
            search: settings.search,
            each_alone: true,
            leave_one_out: true,
            reject_sigma: settings.reject_sigma,
        };
        let result = py.detach(|| latens::pipeline::detect_joint(&study.inner, &joint, &observer));
        let inner = observer.outcome(py, result)?;
        return Ok(Py::new(py, PyJointDetection { inner })?.into_any());
    }
    let result = py.detach(|| latens::pipeline::detect(&study.inner, &settings, &observer));
    let inner = observer.outcome(py, result)?;
    Ok(Py::new(py, PyDetection { inner })?.into_any())
}

#[allow(clippy::too_many_arguments)]
fn detection_settings(
    py: Python<'_>,
    mass_earth: (f64, f64),
    distance_au: (f64, f64),
    nulls: usize,
    directions: usize,
    distances: usize,
    seed: u64,
    reject_sigma: Option<f64>,
) -> PyResult<DetectionSettings> {
    let min_nulls = (1.0 / DETECTION_FAP).ceil() as usize;
    if nulls < min_nulls {
        return Err(bad_setting(
            py,
            format!(
                "nulls must be at least {min_nulls} for a false-alarm probability below {DETECTION_FAP}, got {nulls}"
            ),
        ));
    }
    if directions < 12 || distances < 2 {
        return Err(bad_setting(py, "directions must be at least 12 and distances at least 2"));
    }
    if let Some(r) = reject_sigma
        && !(r.is_finite() && r > 0.0)
    {
        return Err(bad_setting(py, format!("reject_sigma must be positive (or None), got {r}")));
    }
    let search = SearchSettings {
        mass_earth: range(py, mass_earth, "mass_earth")?,
        distance_au: range(py, distance_au, "distance_au")?,
        n_null: nulls,
        seed,
        n_directions: directions,
        n_distances: distances,
        ..SearchSettings::default()
    };
    Ok(DetectionSettings { search, reject_sigma, start_orbit: None })
}

/// A joint search of several tracked bodies for one shared perturber: the
/// joint chi-square drop and its false-alarm probability, each body's part
/// of it, each body searched alone and the search without the strongest
/// body (as `latens infer` with several bodies).
#[pyclass(module = "latens._native", name = "JointDetection", frozen)]
struct PyJointDetection {
    inner: JointDetection,
}

#[pymethods]
impl PyJointDetection {
    /// The best joint chi-square drop against the bodies' null models.
    #[getter]
    fn delta_chi2(&self) -> f64 {
        self.inner.best_delta_chi2()
    }
    /// The share of null simulations of the joint search that reached it.
    #[getter]
    fn false_alarm_probability(&self) -> f64 {
        self.inner.false_alarm_probability()
    }
    /// Whether the joint false-alarm probability is below the threshold.
    #[getter]
    fn detected(&self) -> bool {
        self.inner.verdict.detected()
    }
    /// The verdict in a sentence, with which bodies carry the signal.
    #[getter]
    fn verdict(&self) -> String {
        self.inner.verdict_text()
    }
    /// Warnings for the reader, in words.
    #[getter]
    fn warnings(&self) -> Vec<String> {
        self.inner.warnings()
    }
    /// The best search drop of every null simulation of the joint search.
    #[getter]
    fn null_maxima<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        self.inner.search.null_maxima.clone().into_pyarray(py)
    }
    /// Perturber hypotheses searched.
    #[getter]
    fn n_hypotheses(&self) -> usize {
        self.inner.search.n_hypotheses
    }
    /// Per body, in the study's order: `name`, `n_observations`,
    /// `null_chi2`, `null_dof`, `set_aside` (its outliers, as file:line),
    /// `delta_chi2_at_best` (its part of the best
    /// joint drop), `alone_delta_chi2` and `alone_false_alarm_probability`
    /// (its own search), `orbit` (its reference fit, as fit.json).
    #[getter]
    fn bodies<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyList>> {
        let list = PyList::empty(py);
        for (b, e) in self.inner.bodies.iter().zip(&self.inner.evidence) {
            let d = PyDict::new(py);
            d.set_item("name", &b.name)?;
            d.set_item("n_observations", b.observations.len())?;
            d.set_item("null_chi2", b.null.chi2)?;
            d.set_item("null_dof", b.null.dof)?;
            d.set_item("set_aside", b.set_aside.clone())?;
            d.set_item("delta_chi2_at_best", e.delta_chi2_at_best)?;
            d.set_item("alone_delta_chi2", e.alone.map(|a| a.delta_chi2))?;
            d.set_item("alone_false_alarm_probability", e.alone.map(|a| a.false_alarm_probability))?;
            d.set_item("orbit", json_value(py, &b.null.orbit_file())?)?;
            list.append(d)?;
        }
        Ok(list)
    }
    /// The search without the body carrying most of the signal: `body`
    /// (its name), `delta_chi2`, `false_alarm_probability`; None when not run.
    #[getter]
    fn leave_one_out<'py>(&self, py: Python<'py>) -> PyResult<Option<Bound<'py, PyDict>>> {
        let Some(l) = &self.inner.leave_one_out else { return Ok(None) };
        let d = PyDict::new(py);
        d.set_item("body", &self.inner.bodies[l.body].name)?;
        d.set_item("delta_chi2", l.delta_chi2)?;
        d.set_item("false_alarm_probability", l.false_alarm_probability)?;
        Ok(Some(d))
    }
    /// The bodies' table as a pandas DataFrame (without the orbits; the
    /// observations set aside counted, `n_set_aside`, as in bodies.csv).
    fn to_pandas<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        let rows = self.bodies(py)?;
        for (row, b) in rows.iter().zip(&self.inner.bodies) {
            let row = row.cast_into::<PyDict>()?;
            row.del_item("orbit")?;
            row.del_item("set_aside")?;
            row.set_item("n_set_aside", b.set_aside.len())?;
        }
        py.import("pandas")?.getattr("DataFrame")?.call1((rows,))
    }
    /// The joint detection as plain Python values (JSON-ready).
    fn to_dict<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let d = PyDict::new(py);
        d.set_item("delta_chi2", self.delta_chi2())?;
        d.set_item("false_alarm_probability", self.false_alarm_probability())?;
        d.set_item("detected", self.detected())?;
        d.set_item("verdict", self.verdict())?;
        d.set_item("n_hypotheses", self.n_hypotheses())?;
        d.set_item("n_null_simulations", self.inner.search.null_maxima.len())?;
        d.set_item("bodies", self.bodies(py)?)?;
        d.set_item("leave_one_out", self.leave_one_out(py)?)?;
        d.set_item("warnings", self.warnings())?;
        Ok(d)
    }
    fn __repr__(&self) -> String {
        format!(
            "<latens.JointDetection: {} bodies, delta chi2 {:.1}, false-alarm probability {:.2e}, {}>",
            self.inner.bodies.len(),
            self.delta_chi2(),
            self.false_alarm_probability(),
            if self.detected() { "detected" } else { "not detected" }
        )
    }
}

/// The detection of either kind a stage was given, with what the later
/// stages need of it: its posterior kernel's epoch and central GM.
enum Found<'a> {
    One(&'a Detection),
    Joint(&'a JointDetection),
}

impl Found<'_> {
    fn of<'a>(py: Python<'_>, detection: &'a Bound<'_, PyAny>) -> PyResult<Found<'a>> {
        // Frozen classes lend their contents for as long as the object is held.
        if let Ok(d) = detection.cast::<PyDetection>() {
            return Ok(Found::One(&d.get().inner));
        }
        if let Ok(d) = detection.cast::<PyJointDetection>() {
            return Ok(Found::Joint(&d.get().inner));
        }
        Err(bad_setting(py, "detection must be the result of latens.detect"))
    }

    /// The posterior's reference epoch (TDB days) and central GM.
    fn epoch_and_gm(&self) -> (f64, f64) {
        match self {
            Found::One(d) => {
                let (k, _) = d.posterior_kernel();
                (k.epoch_tdb_days, k.central_gm())
            }
            Found::Joint(d) => (d.kernel.epoch_tdb_days(), SignalKernel::central_gm(&d.kernel)),
        }
    }

    /// The search's basins, best first.
    fn basins(&self) -> &[latens::perturber::search::Scored] {
        match self {
            Found::One(d) => &d.basins,
            Found::Joint(d) => &d.basins,
        }
    }
}

// ---------------------------------------------------------------------------
// Posterior.

/// The perturber's posterior and the alternatives weighed against it.
#[pyclass(module = "latens._native", name = "Posterior", frozen)]
struct PyPosterior {
    inner: PosteriorOutcome,
    /// A joint study's per-body parts (empty for one body).
    corrections: Vec<BodyCorrection>,
    body_alternatives: Vec<(String, Vec<latens::io::results::ImpostorFile>)>,
}

#[pymethods]
impl PyPosterior {
    /// The column names of `samples_array`.
    #[getter]
    fn columns(&self) -> Vec<&'static str> {
        latens::pipeline::SAMPLE_COLUMNS.to_vec()
    }
    /// Equally weighted samples as a 2-D array (rows: samples; columns:
    /// `columns`), exactly the numbers of posterior.csv. Empty without a run.
    #[getter]
    fn samples_array<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray2<f64>> {
        match &self.inner.run {
            Some(r) => r.table().values.into_pyarray(py),
            None => ndarray::Array2::<f64>::zeros((0, latens::pipeline::SAMPLE_COLUMNS.len())).into_pyarray(py),
        }
    }
    /// The samples as a dict of numpy arrays, one per column: mass_earth,
    /// the osculating elements at the reference epoch (a_au, e, inc_deg,
    /// node_deg, peri_deg, mean_anomaly_deg), ra_deg, dec_deg and
    /// distance_au at the search epoch, log_likelihood.
    #[getter]
    fn samples<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        match &self.inner.run {
            Some(r) => table_dict(py, &r.table()),
            None => Ok(PyDict::new(py)),
        }
    }
    /// The posterior summary (medians and intervals) as in summary.json.
    #[getter]
    fn summary<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        match &self.inner.run {
            Some(r) => json_value(py, &r.summary),
            None => Ok(py.None().into_bound(py)),
        }
    }
    /// Convergence diagnostics (R-hat, effective sizes, acceptance, ...).
    #[getter]
    fn diagnostics<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        match &self.inner.run {
            Some(r) => json_value(py, &r.diagnostics),
            None => Ok(py.None().into_bound(py)),
        }
    }
    /// Whether the diagnostics call the run converged.
    #[getter]
    fn converged(&self) -> bool {
        self.inner.run.as_ref().is_some_and(|r| r.diagnostics.converged)
    }
    /// The evidence (thermodynamic integration) of the perturber model.
    #[getter]
    fn evidence<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        match self.inner.run.as_ref().and_then(|r| r.evidence.as_ref()) {
            Some(e) => json_value(py, e),
            None => Ok(py.None().into_bound(py)),
        }
    }
    /// The alternative explanations weighed on the null kernel.
    #[getter]
    fn alternatives<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        json_value(py, &self.inner.alternatives)
    }
    /// Which explanation the data favour, in words.
    #[getter]
    fn explanation(&self) -> String {
        self.inner.explanation.text.clone()
    }
    /// The explanation as summary.json gives it.
    #[getter]
    fn explanation_detail<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        json_value(py, &self.inner.explanation.file())
    }
    /// A joint study's per-body orbit corrections under the perturber:
    /// `name`, `position_km` and `velocity_m_per_s` (median and intervals)
    /// at the reference epoch. Empty for one body.
    #[getter]
    fn corrections<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyList>> {
        let list = PyList::empty(py);
        for c in &self.corrections {
            let d = PyDict::new(py);
            d.set_item("name", &c.name)?;
            d.set_item("position_km", json_value(py, &c.position_km)?)?;
            d.set_item("velocity_m_per_s", json_value(py, &c.velocity_m_per_s)?)?;
            list.append(d)?;
        }
        Ok(list)
    }
    /// A joint study's per-body alternatives (non-gravitational push,
    /// astrometric offsets), by body name. Empty for one body.
    #[getter]
    fn body_alternatives<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let d = PyDict::new(py);
        for (name, alts) in &self.body_alternatives {
            d.set_item(name, json_value(py, alts)?)?;
        }
        Ok(d)
    }
    /// Warnings for the reader, in words.
    #[getter]
    fn warnings(&self) -> Vec<String> {
        self.inner.warnings.clone()
    }
    /// The samples as a pandas DataFrame (the columns of posterior.csv).
    fn to_pandas<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        frame(py, self.samples(py)?)
    }
    /// Summary, diagnostics, evidence, alternatives and the explanation as
    /// plain Python values (JSON-ready; the samples are left out).
    fn to_dict<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let d = PyDict::new(py);
        d.set_item("n_samples", self.inner.run.as_ref().map_or(0, |r| r.samples.len()))?;
        d.set_item("converged", self.converged())?;
        d.set_item("summary", self.summary(py)?)?;
        d.set_item("diagnostics", self.diagnostics(py)?)?;
        d.set_item("evidence", self.evidence(py)?)?;
        d.set_item("alternatives", self.alternatives(py)?)?;
        d.set_item("explanation", self.explanation_detail(py)?)?;
        d.set_item("warnings", self.warnings())?;
        Ok(d)
    }
    fn __repr__(&self) -> String {
        match &self.inner.run {
            Some(r) => format!(
                "<latens.Posterior: {} samples, {}>",
                r.samples.len(),
                if r.diagnostics.converged { "converged" } else { "NOT converged" }
            ),
            None => "<latens.Posterior: alternatives only, no samples>".into(),
        }
    }
}

/// posterior(study, detection, steps=1500, walkers=32, temperatures=16, runs=2, seed=1,
/// max_eccentricity=0.6, gm_prior_inflation=1000, nongrav_prior=None, offset_prior=0.2,
/// sample=True, checkpoint=None, resume=False, progress=None) -> Posterior
///
/// The perturber's posterior, as `latens infer` runs it: the alternatives
/// (known-planet masses, a non-gravitational push, astrometric offsets),
/// the tempered ensemble sampler (`runs` runs, `temperatures` rungs,
/// `walkers` per rung, the first 40% of `steps` burn-in), convergence,
/// evidence and the explanation. `nongrav_prior` defaults from the
/// study's body kind. With `checkpoint` (a file path) the sampler saves its
/// progress there; a KeyboardInterrupt stops it cleanly after saving, and
/// `resume=True` continues from the file to the same samples.
#[pyfunction]
#[pyo3(signature = (study, detection, steps=1500, walkers=32, temperatures=16, runs=2, seed=1, max_eccentricity=0.6, gm_prior_inflation=1000.0, nongrav_prior=None, offset_prior=0.2, sample=true, checkpoint=None, resume=false, progress=None))]
#[allow(clippy::too_many_arguments)]
fn posterior(
    py: Python<'_>,
    study: &PyStudy,
    detection: &Bound<'_, PyAny>,
    steps: usize,
    walkers: usize,
    temperatures: usize,
    runs: usize,
    seed: u64,
    max_eccentricity: f64,
    gm_prior_inflation: f64,
    nongrav_prior: Option<f64>,
    offset_prior: f64,
    sample: bool,
    checkpoint: Option<PathBuf>,
    resume: bool,
    progress: Option<Py<PyAny>>,
) -> PyResult<PyPosterior> {
    let found = Found::of(py, detection)?;
    let kind = study.inner.bodies.first().map(|b| b.tracked.kind).ok_or_else(|| bad_setting(py, "no body"))?;
    for (v, name) in [
        (gm_prior_inflation, "gm_prior_inflation"),
        (nongrav_prior.unwrap_or(1.0), "nongrav_prior"),
        (offset_prior, "offset_prior"),
        (max_eccentricity, "max_eccentricity"),
    ] {
        if !(v.is_finite() && v > 0.0) || (name == "max_eccentricity" && v >= 1.0) {
            return Err(bad_setting(py, format!("{name} must be positive (and below 1 for an eccentricity), got {v}")));
        }
    }
    if resume && checkpoint.as_ref().is_none_or(|c| !c.is_file()) {
        return Err(bad_setting(py, "resume=True needs checkpoint= naming an existing checkpoint file"));
    }
    let settings = PosteriorSettings {
        walkers,
        temperatures,
        steps,
        runs,
        seed,
        max_eccentricity,
        alternatives: ImpostorPriors {
            gm_inflation: gm_prior_inflation,
            nongrav_au_per_day2: nongrav_prior.unwrap_or(impostors::nongrav_prior_for(kind)),
            nongrav_from_kind: nongrav_prior.is_none(),
            offset_arcsec: offset_prior,
        },
        sample,
        checkpoint,
        resume,
    };
    settings.check().map_err(|e| to_py(py, e))?;
    let observer = PyObserver::new(progress);
    match found {
        Found::One(d) => {
            let result = py.detach(|| latens::pipeline::posterior(&study.inner, d, &settings, &observer));
            let inner = observer.outcome(py, result)?;
            Ok(PyPosterior { inner, corrections: Vec::new(), body_alternatives: Vec::new() })
        }
        Found::Joint(d) => {
            let result = py.detach(|| latens::pipeline::posterior_joint(&study.inner, d, &settings, &observer));
            let j = observer.outcome(py, result)?;
            let names = study.inner.bodies.iter().map(|b| b.name.clone());
            Ok(PyPosterior {
                inner: PosteriorOutcome {
                    alternatives: j.alternatives,
                    explanation: j.explanation,
                    run: j.run,
                    warnings: j.warnings,
                },
                corrections: j.corrections,
                body_alternatives: names.zip(j.body_alternatives).collect(),
            })
        }
    }
}

// ---------------------------------------------------------------------------
// Sky products.

/// Where to look: the posterior's multi-order HEALPix map, its 50% and 90%
/// credible regions (MOCs) and the modes.
#[pyclass(module = "latens._native", name = "Sky", frozen)]
struct PySky {
    inner: SkyProducts,
    confidence: latens::pipeline::ConfidenceRegion,
    epoch_utc: String,
}

#[pymethods]
impl PySky {
    /// NUNIQ pixel numbers of the map's leaves (order and pixel together).
    #[getter]
    fn uniq<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<u64>> {
        self.inner.map.leaves.iter().map(|l| l.uniq()).collect::<Vec<_>>().into_pyarray(py)
    }
    /// Probability per steradian of each leaf (the PROBDENSITY column).
    #[getter]
    fn probdensity<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        self.inner.map.leaves.iter().map(|l| l.density()).collect::<Vec<_>>().into_pyarray(py)
    }
    /// Probability of each leaf (sums to 1).
    #[getter]
    fn probability<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        self.inner.map.leaves.iter().map(|l| l.probability).collect::<Vec<_>>().into_pyarray(py)
    }
    /// NUNIQ numbers of the leaves of the 50% credible region.
    #[getter]
    fn region50<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<u64>> {
        self.inner.region50.iter().map(|&k| self.inner.map.leaves[k].uniq()).collect::<Vec<_>>().into_pyarray(py)
    }
    /// NUNIQ numbers of the leaves of the 90% credible region.
    #[getter]
    fn region90<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<u64>> {
        self.inner.region90.iter().map(|&k| self.inner.map.leaves[k].uniq()).collect::<Vec<_>>().into_pyarray(py)
    }
    /// Areas, modes (place, probability, brightness, observability), the
    /// Sun and the safety warning, as summary.json's `sky`.
    #[getter]
    fn summary<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        json_value(py, &self.inner.sky)
    }
    /// Where each basin of the search stands against the posterior, best
    /// first: `basin`, `delta_chi2`, `mass_earth`, `ra_deg`, `dec_deg`,
    /// `eccentricity` (about the central mass), `in_prior`,
    /// `as_good_as_best` (within 12.02 in chi-square), `in_mass_interval95`,
    /// `in_region90`. A basin in the prior and as good as the best but
    /// outside the interval or the region is named in `warnings`: look
    /// there too if the region is searched in vain.
    #[getter]
    fn basins<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        json_value(py, &self.inner.sky.basins)
    }
    /// Warnings: the safety warning near the Sun, crowded fields, and
    /// basins as good as the best that the posterior leaves out.
    #[getter]
    fn warnings(&self) -> Vec<String> {
        self.inner.warnings.clone()
    }
    /// write_map(path): the multi-order map as FITS (UNIQ, PROBDENSITY),
    /// as `latens infer` writes skymap.fits. Written to a temporary file,
    /// then renamed.
    fn write_map(&self, py: Python<'_>, path: PathBuf) -> PyResult<()> {
        let text = &self.epoch_utc;
        let bytes = latens::skymap::fits::multi_order_map(
            &self.inner.map.leaves,
            &[("DATE-OBS", latens::skymap::fits::fits_string(&text[..19.min(text.len())]), "search epoch (UTC)")],
        );
        latens::io::write_atomically(&path, &bytes).map_err(|e| to_py(py, PipelineError::Input(e.to_string())))
    }
    /// write_region(path, level=0.9, format="fits"): the 50% or 90% region
    /// as an IVOA MOC, FITS or JSON.
    #[pyo3(signature = (path, level=0.9, format="fits"))]
    fn write_region(&self, py: Python<'_>, path: PathBuf, level: f64, format: &str) -> PyResult<()> {
        let leaves = if (level - 0.5).abs() < 1e-9 {
            &self.inner.region50
        } else if (level - 0.9).abs() < 1e-9 {
            &self.inner.region90
        } else {
            return Err(bad_setting(py, format!("level must be 0.5 or 0.9, got {level}")));
        };
        let moc = self.inner.map.moc(leaves);
        write_moc(py, &path, &moc, format)
    }
    /// write_confidence(path, level=0.9, format="fits"): the 50% or 90%
    /// confidence region (profile likelihood: where some perturber the
    /// prior allows fits within 1.39 or 4.61 of the best in chi-square,
    /// whatever the prior's volume there) as an IVOA MOC, FITS or JSON.
    #[pyo3(signature = (path, level=0.9, format="fits"))]
    fn write_confidence(&self, py: Python<'_>, path: PathBuf, level: f64, format: &str) -> PyResult<()> {
        let c = &self.confidence;
        let pixels = if (level - 0.5).abs() < 1e-9 {
            &c.region50
        } else if (level - 0.9).abs() < 1e-9 {
            &c.region90
        } else {
            return Err(bad_setting(py, format!("level must be 0.5 or 0.9, got {level}")));
        };
        write_moc(py, &path, &c.moc(pixels), format)
    }
    /// The profile likelihood's best chi-square drop in each pixel it
    /// reached: a dict with `order` (HEALPix, nested) and numpy arrays
    /// `ipix` and `delta_chi2`.
    #[getter]
    fn profile<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let p = &self.confidence.profile;
        let mut pairs: Vec<(u64, f64)> = p.delta_chi2.iter().map(|(&k, &v)| (k, v)).collect();
        pairs.sort_unstable_by_key(|x| x.0);
        let d = PyDict::new(py);
        d.set_item("order", p.order)?;
        d.set_item("ipix", pairs.iter().map(|x| x.0).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("delta_chi2", pairs.iter().map(|x| x.1).collect::<Vec<_>>().into_pyarray(py))?;
        Ok(d)
    }
    /// The map's leaves as a pandas DataFrame: uniq, probdensity, probability.
    fn to_pandas<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        let d = PyDict::new(py);
        d.set_item("uniq", self.uniq(py))?;
        d.set_item("probdensity", self.probdensity(py))?;
        d.set_item("probability", self.probability(py))?;
        frame(py, d)
    }
    /// The sky summary as plain Python values (JSON-ready).
    fn to_dict<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        self.summary(py)
    }
    fn __repr__(&self) -> String {
        format!(
            "<latens.Sky: {} leaves, 50% region {} leaves, 90% region {} leaves>",
            self.inner.map.leaves.len(),
            self.inner.region50.len(),
            self.inner.region90.len()
        )
    }
}

/// Writes a MOC as FITS or JSON (temporary file, then rename).
fn write_moc(py: Python<'_>, path: &std::path::Path, moc: &latens::skymap::Moc, format: &str) -> PyResult<()> {
    let bytes = match format {
        "fits" => latens::skymap::moc_fits(moc),
        "json" => latens::skymap::moc_json(moc),
        f => return Err(bad_setting(py, format!("format must be \"fits\" or \"json\", got {f:?}"))),
    }
    .map_err(LatensError::new_err)?;
    latens::io::write_atomically(path, &bytes).map_err(|e| to_py(py, PipelineError::Input(e.to_string())))
}

/// sky_products(study, detection, posterior, progress=None) -> Sky
///
/// The search products of a posterior, as `latens infer` makes them: the
/// kernel-density sky map, the 50% and 90% credible regions, the modes,
/// the 50% and 90% confidence regions of the profile likelihood over the
/// sky (which lean on no prior volume), and the warning when a region lies
/// near the Sun (pointing a telescope there can destroy eyes and
/// instruments).
#[pyfunction]
#[pyo3(signature = (study, detection, posterior, progress=None))]
fn sky_products(
    py: Python<'_>,
    study: &PyStudy,
    detection: &Bound<'_, PyAny>,
    posterior: &PyPosterior,
    progress: Option<Py<PyAny>>,
) -> PyResult<PySky> {
    let found = Found::of(py, detection)?;
    let (t0, gm) = found.epoch_and_gm();
    let Some(run) = &posterior.inner.run else {
        return Err(bad_setting(py, "the posterior has no samples (sample=False, or no basin to sample)"));
    };
    let basins = found.basins();
    let observer = PyObserver::new(progress);
    let result = py.detach(|| {
        let mut products = latens::pipeline::sky_products_at(&study.inner, t0, gm, basins, run)?;
        let confidence = match found {
            Found::One(d) => {
                let (kernel, _) = d.posterior_kernel();
                latens::pipeline::confidence_region(&study.inner, kernel, &d.settings.search, basins, run, &observer)
            }
            Found::Joint(d) => {
                let (kernel, _) = d.posterior_kernel();
                latens::pipeline::confidence_region(&study.inner, kernel, &d.settings.search, basins, run, &observer)
            }
        }?;
        products.add_confidence(&confidence);
        Ok((products, confidence))
    });
    let (inner, confidence) = observer.outcome(py, result)?;
    Ok(PySky {
        inner,
        confidence,
        epoch_utc: utc_iso_from_epoch(epoch_from_tdb_days(study.inner.search_epoch_tdb_days)),
    })
}

// ---------------------------------------------------------------------------
// Prediction.

/// predict(study, detection, posterior, start=None, end=None, step_days=7.0) -> dict of columns
///
/// Where each sky mode holding at least 1% of the samples will be, date by
/// date (as `latens predict`): `mode`, `t_tdb_days`, `epoch_utc`, `ra_deg`,
/// `dec_deg`, the error ellipse, the V magnitude range, the motion, the
/// solar elongation and `near_sun` (within the safety limit: pointing a
/// telescope there can destroy eyes and instruments). Default dates: a
/// year from the search epoch.
#[pyfunction]
#[pyo3(signature = (study, detection, posterior, start=None, end=None, step_days=7.0))]
fn predict<'py>(
    py: Python<'py>,
    study: &PyStudy,
    detection: &Bound<'_, PyAny>,
    posterior: &PyPosterior,
    start: Option<&str>,
    end: Option<&str>,
    step_days: f64,
) -> PyResult<Bound<'py, PyDict>> {
    let Some(run) = &posterior.inner.run else {
        return Err(bad_setting(py, "the posterior has no samples (sample=False, or no basin to sample)"));
    };
    let start = match start {
        Some(t) => tdb_days(py, t, "start")?,
        None => study.inner.search_epoch_tdb_days,
    };
    let end = match end {
        Some(t) => tdb_days(py, t, "end")?,
        None => start + 365.25,
    };
    if !(step_days.is_finite() && step_days > 0.0) || end < start {
        return Err(bad_setting(py, "step_days must be positive and end not before start"));
    }
    let steps = ((end - start) / step_days).floor() as usize + 1;
    if steps > 100_000 {
        return Err(bad_setting(py, format!("{steps} dates asked for; use a larger step_days")));
    }
    let (t0, gm) = Found::of(py, detection)?.epoch_and_gm();
    let samples: Vec<OrbitSample> = run.samples.iter().filter_map(|d| OrbitSample::from_derived(d, gm, t0)).collect();
    let earth = latens::ephemeris::Vsop87::new();
    let p =
        py.detach(|| latens::pipeline::predict(&samples, &earth, start, step_days, steps)).map_err(|e| to_py(py, e))?;
    let d = PyDict::new(py);
    let col = |f: &dyn Fn(&latens::pipeline::Prediction) -> f64| p.iter().map(f).collect::<Vec<f64>>();
    d.set_item("mode", p.iter().map(|x| x.mode as i64).collect::<Vec<_>>().into_pyarray(py))?;
    d.set_item("t_tdb_days", col(&|x| x.t_tdb_days).into_pyarray(py))?;
    d.set_item(
        "epoch_utc",
        p.iter().map(|x| utc_iso_from_epoch(epoch_from_tdb_days(x.t_tdb_days))).collect::<Vec<_>>(),
    )?;
    d.set_item("ra_deg", col(&|x| x.ra_deg).into_pyarray(py))?;
    d.set_item("dec_deg", col(&|x| x.dec_deg).into_pyarray(py))?;
    d.set_item("ellipse_major_deg", col(&|x| x.ellipse_major_deg).into_pyarray(py))?;
    d.set_item("ellipse_minor_deg", col(&|x| x.ellipse_minor_deg).into_pyarray(py))?;
    d.set_item("ellipse_pa_deg", col(&|x| x.ellipse_pa_deg).into_pyarray(py))?;
    d.set_item("v_mag_bright", col(&|x| x.v_mag_bright).into_pyarray(py))?;
    d.set_item("v_mag_faint", col(&|x| x.v_mag_faint).into_pyarray(py))?;
    d.set_item("motion_arcsec_per_hour", col(&|x| x.motion_arcsec_per_hour).into_pyarray(py))?;
    d.set_item("motion_pa_deg", col(&|x| x.motion_pa_deg).into_pyarray(py))?;
    d.set_item("solar_elongation_deg", col(&|x| x.solar_elongation_deg).into_pyarray(py))?;
    d.set_item("near_sun", p.iter().map(|x| x.near_sun).collect::<Vec<_>>().into_pyarray(py))?;
    Ok(d)
}

// ---------------------------------------------------------------------------
// Sensitivity.

/// Which perturber masses at which distances the data could reveal.
#[pyclass(module = "latens._native", name = "Sensitivity", frozen)]
struct PySensitivity {
    inner: SensitivityMap,
}

#[pymethods]
impl PySensitivity {
    /// The detection threshold on the chi-square drop for these data.
    #[getter]
    fn threshold_delta_chi2(&self) -> f64 {
        self.inner.threshold_delta_chi2
    }
    /// The masses of the grid's rows, Earth masses.
    #[getter]
    fn mass_earth<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        self.inner.grid().0.into_pyarray(py)
    }
    /// The distances of the grid's columns, au.
    #[getter]
    fn distance_au<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        self.inner.grid().1.into_pyarray(py)
    }
    /// Detection probability, masses by distances (NaN outside a shard).
    #[getter]
    fn probability<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray2<f64>> {
        self.inner.grid().2.into_pyarray(py)
    }
    /// The cells as columns: mass_index, distance_index, mass_earth,
    /// distance_au, detection_probability, n_trials, median_delta_chi2.
    #[getter]
    fn cells<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let c = &self.inner.cells;
        let d = PyDict::new(py);
        d.set_item("mass_index", c.iter().map(|x| x.mass_index as i64).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("distance_index", c.iter().map(|x| x.distance_index as i64).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("mass_earth", c.iter().map(|x| x.mass_earth).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("distance_au", c.iter().map(|x| x.distance_au).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item(
            "detection_probability",
            c.iter().map(|x| x.detection_probability).collect::<Vec<_>>().into_pyarray(py),
        )?;
        d.set_item("n_trials", c.iter().map(|x| x.n_trials as i64).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("median_delta_chi2", c.iter().map(|x| x.median_delta_chi2).collect::<Vec<_>>().into_pyarray(py))?;
        Ok(d)
    }
    /// The sky map (with `sky_map=ORDER`) as columns: distance_index,
    /// distance_au, healpix_order, cell (nested, ICRF), ra_deg, dec_deg,
    /// ecliptic_lat_deg (the cell's centre), n_trials, mass50_earth,
    /// mass90_earth (NaN where the map's mass range does not reach); empty
    /// columns without a sky map.
    #[getter]
    fn sky<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let c = &self.inner.sky;
        let centres: Vec<(f64, f64, f64)> = c.iter().map(|x| x.centre_deg()).collect();
        let d = PyDict::new(py);
        d.set_item("distance_index", c.iter().map(|x| x.distance_index as i64).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("distance_au", c.iter().map(|x| x.distance_au).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("healpix_order", c.iter().map(|x| i64::from(x.order)).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("cell", c.iter().map(|x| x.cell).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("ra_deg", centres.iter().map(|x| x.0).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("dec_deg", centres.iter().map(|x| x.1).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("ecliptic_lat_deg", centres.iter().map(|x| x.2).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("n_trials", c.iter().map(|x| x.n_trials as i64).collect::<Vec<_>>().into_pyarray(py))?;
        let nan = |m: Option<f64>| m.unwrap_or(f64::NAN);
        d.set_item("mass50_earth", c.iter().map(|x| nan(x.mass50_earth)).collect::<Vec<_>>().into_pyarray(py))?;
        d.set_item("mass90_earth", c.iter().map(|x| nan(x.mass90_earth)).collect::<Vec<_>>().into_pyarray(py))?;
        Ok(d)
    }
    /// The cells as a pandas DataFrame.
    fn to_pandas<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        frame(py, self.cells(py)?)
    }
    /// The map as plain Python values (JSON-ready).
    fn to_dict<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let d = PyDict::new(py);
        let (m, dist, p) = self.inner.grid();
        d.set_item("threshold_delta_chi2", self.inner.threshold_delta_chi2)?;
        d.set_item("mass_earth", m.to_vec())?;
        d.set_item("distance_au", dist.to_vec())?;
        d.set_item("probability", p.rows().into_iter().map(|r| r.to_vec()).collect::<Vec<_>>())?;
        Ok(d)
    }
    fn __repr__(&self) -> String {
        format!(
            "<latens.Sensitivity: {} cells, threshold delta chi2 {:.1}>",
            self.inner.cells.len(),
            self.inner.threshold_delta_chi2
        )
    }
}

/// sensitivity(study, mass_earth=(0.1, 10000), distance_au=(10, 1000), grid=(40, 40), trials=64,
/// fap=0.0027, near_ecliptic=None, nulls=1000, directions=768, distances=20, seed=1, shard=None,
/// out=None, sky_map=None, sky_trials=16, progress=None) -> Sensitivity (with `shard`: [json path, csv path])
///
/// The detection probability over perturber mass and distance for the
/// study's observations (several bodies: what they reveal together), as
/// `latens sensitivity`: the threshold from the search's null simulations
/// at `fap`, then `trials` perturber configurations per cell (directions
/// within `near_ecliptic` degrees of the ecliptic when given). `shard`:
/// (K, N) computes shard K of N (every N-th hypothesis of the threshold
/// search and every N-th distance's trials), writes it into the directory
/// `out` as `latens sensitivity --shard K/N` does and returns the two
/// paths written; `merge_sensitivity` joins the shards into the map.
/// `sky_map`: a HEALPix order (0-3) for the map of where on the sky a
/// perturber at each distance would be detected (`Sensitivity.sky`), with
/// `sky_trials` perturbers drawn per cell.
#[pyfunction]
#[pyo3(signature = (study, mass_earth=(0.1, 10000.0), distance_au=(10.0, 1000.0), grid=(40, 40), trials=64, fap=0.0027, near_ecliptic=None, nulls=1000, directions=768, distances=20, seed=1, shard=None, out=None, sky_map=None, sky_trials=16, progress=None))]
#[allow(clippy::too_many_arguments)]
fn sensitivity(
    py: Python<'_>,
    study: &PyStudy,
    mass_earth: (f64, f64),
    distance_au: (f64, f64),
    grid: (usize, usize),
    trials: usize,
    fap: f64,
    near_ecliptic: Option<f64>,
    nulls: usize,
    directions: usize,
    distances: usize,
    seed: u64,
    shard: Option<(usize, usize)>,
    out: Option<PathBuf>,
    sky_map: Option<u8>,
    sky_trials: usize,
    progress: Option<Py<PyAny>>,
) -> PyResult<Py<PyAny>> {
    let search = SearchSettings {
        n_null: nulls,
        n_directions: directions,
        n_distances: distances,
        seed,
        near_ecliptic_deg: near_ecliptic,
        ..SearchSettings::default()
    };
    let plan = SensitivityPlan {
        map: SensitivitySettings {
            mass_earth,
            distance_au,
            n_masses: grid.0,
            n_distances: grid.1,
            n_trials: trials,
            near_ecliptic_deg: near_ecliptic,
            seed,
            min_separation_au: search.min_separation_au,
        },
        false_alarm_probability: fap,
        search,
        shard,
        sky: sky_map.map(|order| latens::perturber::sensitivity::SkyPlan { order, trials_per_cell: sky_trials }),
    };
    plan.check().map_err(|e| to_py(py, e))?;
    if shard.is_some() != out.is_some() {
        return Err(InputError::new_err("`shard` and `out` go together: a shard is written for `merge_sensitivity`"));
    }
    let observer = PyObserver::new(progress);
    if let Some(dir) = out {
        let result = py.detach(|| {
            let share = latens::pipeline::sensitivity_share(&study.inner, &plan, &observer)?;
            share.write(&dir, &plan.file(study.inner.bodies.iter().map(|b| b.name.clone()).collect()))
        });
        let paths = observer.outcome(py, result)?;
        return Ok(PyList::new(py, paths.iter().map(|p| p.display().to_string()))?.into_any().unbind());
    }
    let result = py.detach(|| latens::pipeline::sensitivity(&study.inner, &plan, &observer));
    let map = observer.outcome(py, result)?;
    Ok(Py::new(py, PySensitivity { inner: map })?.into_any())
}

/// merge_sensitivity(dirs) -> Sensitivity
///
/// Joins the shards written by `sensitivity(..., shard=(K, N), out=DIR)`
/// or `latens sensitivity --shard K/N` in the directories `dirs` into the
/// whole map (the same numbers as one unsharded run), as `latens
/// sensitivity merge`; refuses shards of different settings and missing
/// or repeated shards.
#[pyfunction]
fn merge_sensitivity(py: Python<'_>, dirs: Vec<PathBuf>) -> PyResult<PySensitivity> {
    let result = latens::pipeline::SensitivityShare::read_dirs(&dirs)
        .and_then(|(about, shares)| latens::pipeline::merge_sensitivity(&shares, about.false_alarm_probability));
    result.map(|inner| PySensitivity { inner }).map_err(|e| to_py(py, e))
}

// ---------------------------------------------------------------------------
// Simulation.

/// simulate(scenario) -> list of dicts
///
/// Simulates an invented scenario file (TOML; see docs/formats.md), as
/// `latens simulate`: one dict per tracked body with `name`,
/// `observations_csv` and `sites_csv` (the text `latens simulate` writes:
/// give them to `latens.Study`), `truth` (what the simulation put in) and
/// `largest_planetary_shift_arcsec`.
#[pyfunction]
fn simulate<'py>(py: Python<'py>, scenario: PathBuf) -> PyResult<Bound<'py, PyList>> {
    let name = scenario.display().to_string();
    let result = py.detach(|| -> Result<_, PipelineError> {
        let s = latens::io::scenario::read(&scenario)?;
        let names: Vec<String> = s.all_bodies().into_iter().map(|b| b.name).collect();
        Ok((names, latens::pipeline::simulate_population(&s, &name)?))
    });
    let (names, sims) = result.map_err(|e| to_py(py, e))?;
    let list = PyList::empty(py);
    for (body, sim) in names.iter().zip(&sims) {
        let d = PyDict::new(py);
        d.set_item("name", body)?;
        d.set_item("observations_csv", latens::io::observations::observations_csv(&sim.observations))?;
        d.set_item("sites_csv", sim.sites.to_csv())?;
        d.set_item("truth", json_value(py, &sim.truth)?)?;
        d.set_item("largest_planetary_shift_arcsec", sim.largest_planetary_shift_arcsec)?;
        list.append(d)?;
    }
    Ok(list)
}

/// The native part of the `latens` Python package.
#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    let py = m.py();
    m.add("LatensError", py.get_type::<LatensError>())?;
    m.add("InputError", py.get_type::<InputError>())?;
    m.add("FitError", py.get_type::<FitError>())?;
    m.add("NotConvergedError", py.get_type::<NotConvergedError>())?;
    m.add_class::<PyStudy>()?;
    m.add_class::<PyReferenceFit>()?;
    m.add_class::<PyDetection>()?;
    m.add_class::<PyJointDetection>()?;
    m.add_class::<PyPosterior>()?;
    m.add_class::<PySky>()?;
    m.add_class::<PySensitivity>()?;
    m.add_function(wrap_pyfunction!(reference_fit, m)?)?;
    m.add_function(wrap_pyfunction!(detect, m)?)?;
    m.add_function(wrap_pyfunction!(posterior, m)?)?;
    m.add_function(wrap_pyfunction!(sky_products, m)?)?;
    m.add_function(wrap_pyfunction!(predict, m)?)?;
    m.add_function(wrap_pyfunction!(sensitivity, m)?)?;
    m.add_function(wrap_pyfunction!(merge_sensitivity, m)?)?;
    m.add_function(wrap_pyfunction!(simulate, m)?)?;
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    Ok(())
}
