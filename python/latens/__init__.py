"""Latens: find an unseen mass from the O-C residuals of tracked bodies, and
say where on the sky to look for it.

The same pipeline as the ``latens`` command, for notebooks. A study is read
once and passed to the stages::

    import latens
    study = latens.Study("observations.csv", sites="sites.csv")
    fit = latens.reference_fit(study)             # the orbit and its O-C
    det = latens.detect(study, progress=True)     # search, false alarms, verdict
    post = latens.posterior(study, det, progress=True)
    sky = latens.sky_products(study, det, post)   # map, 50%/90% regions, modes
    # or the three in one call, as `latens infer`: latens.infer(study)
    sky.write_region("region90.fits")             # an IVOA MOC
    places = latens.predict(study, det, post)     # where each mode will be
    sens = latens.sensitivity(study)              # what the data could reveal

Observations may be files (Latens CSV or IAU ADES PSV), a directory of
them, or tables: a pandas DataFrame or a dict of columns with ``epoch_utc``
(ISO text, numpy/pandas datetimes or an astropy ``Time``), ``ra_deg``,
``dec_deg``, ``sigma_ra_arcsec``, ``sigma_dec_arcsec`` and optionally
``site`` and ``corr``. Results carry numpy arrays and plain dicts; tables
have ``to_pandas()``.

Errors are exceptions of one family: ``LatensError``, with ``InputError``
(bad input, with ``file``, ``line`` and ``field``), ``FitError`` (a
computation failed; ``stage``) and ``NotConvergedError``. A
KeyboardInterrupt stops a long stage cleanly; the posterior sampler saves
its checkpoint first, and ``resume=True`` finishes it.

Units are in the names, as on the command line: ``mass_earth`` (Earth
masses), ``distance_au``, ``ra_deg``, ``sigma_ra_arcsec`` (of RA*cos Dec).
Times are UTC text or ``JD <days> TDB``; ``t_tdb_days`` counts TDB days
from J2000.0.
"""

from __future__ import annotations

import os
import sys
from typing import Any, Callable, Iterable, Mapping, Optional, Sequence, Union

from . import _native
from ._native import (
    Detection,
    JointDetection,
    FitError,
    InputError,
    LatensError,
    NotConvergedError,
    Posterior,
    ReferenceFit,
    Sensitivity,
    Sky,
    reference_fit,
    sky_products,
)

__version__ = _native.__version__

__all__ = [
    "Columns",
    "Detection",
    "FitError",
    "InputError",
    "JointDetection",
    "LatensError",
    "NotConvergedError",
    "Posterior",
    "Inference",
    "ReferenceFit",
    "Sensitivity",
    "Sky",
    "Study",
    "detect",
    "infer",
    "merge_sensitivity",
    "posterior",
    "predict",
    "reference_fit",
    "sensitivity",
    "simulate",
    "sky_products",
]

DEFAULT_KNOWN = "jupiter,saturn,uranus,neptune"

_REQUIRED = ("epoch_utc", "ra_deg", "dec_deg", "sigma_ra_arcsec", "sigma_dec_arcsec")
_OPTIONAL = ("site", "corr", "body")


class Columns(dict):
    """Named columns (numpy arrays or lists of text) of one table."""

    def to_pandas(self):
        """The columns as a pandas DataFrame."""
        import pandas

        return pandas.DataFrame(dict(self))


# ---------------------------------------------------------------------------
# Observations from tables.


def _epoch_texts(values: Any) -> list:
    """Epochs as text the library parses: ISO UTC strings as given;
    astropy Time, numpy or pandas datetimes to ISO UTC with nanoseconds."""
    try:  # astropy Time (optional dependency)
        from astropy.time import Time

        if isinstance(values, Time):
            t = values.utc
            t.precision = 9
            return [str(x) for x in t.isot] if t.shape else [str(t.isot)]
    except ImportError:
        pass
    try:
        import numpy as np

        arr = np.asarray(values)
        if np.issubdtype(arr.dtype, np.datetime64):
            return [str(x) for x in np.datetime_as_string(arr.astype("datetime64[ns]"), unit="ns")]
    except (TypeError, ValueError):
        pass
    out = []
    for v in values:
        if hasattr(v, "isoformat"):  # datetime, pandas.Timestamp
            out.append(v.isoformat())
        else:
            out.append(str(v))
    return out


def _number_text(v: Any) -> str:
    # repr of a float is the shortest text that reads back to the same bits.
    return repr(float(v))


def _table_text(table: Any, name: str) -> str:
    """A table (pandas DataFrame, astropy Table or dict of columns) as
    Latens CSV text, numbers written so they read back bit for bit."""
    if hasattr(table, "to_dict") and hasattr(table, "columns"):  # pandas
        columns = {str(c): table[c] for c in table.columns}
    elif hasattr(table, "colnames"):  # astropy Table
        columns = {c: table[c] for c in table.colnames}
    elif isinstance(table, Mapping):
        columns = dict(table)
    else:
        raise TypeError(f"{name}: expected a file path, a pandas DataFrame, an astropy Table or a dict of columns")
    if "epoch" in columns and "epoch_utc" not in columns:
        columns["epoch_utc"] = columns.pop("epoch")
    missing = [c for c in _REQUIRED if c not in columns]
    if missing:
        raise InputError(f"{name}: missing column(s) {', '.join(missing)} (needed: {', '.join(_REQUIRED)})")
    n = len(columns["epoch_utc"])
    epochs = _epoch_texts(columns["epoch_utc"])
    names = list(_REQUIRED) + [c for c in _OPTIONAL if c in columns]
    lines = [",".join(names)]
    for i in range(n):
        row = [epochs[i]]
        for c in names[1:]:
            v = columns[c][i] if not hasattr(columns[c], "iloc") else columns[c].iloc[i]
            if c in ("site", "body"):
                text = "" if v is None else str(v)
                if "," in text or "\n" in text:
                    raise InputError(f"{name}: row {i}: column `{c}` holds a comma or a line break")
                row.append(text)
            else:
                row.append(_number_text(v))
        lines.append(",".join(row))
    return "\n".join(lines) + "\n"


def _is_path(x: Any) -> bool:
    return isinstance(x, (str, os.PathLike))


def _expand(path: Any) -> list:
    p = os.fspath(path)
    if os.path.isdir(p):
        files = sorted(
            os.path.join(p, f)
            for f in os.listdir(p)
            if f.lower().endswith((".csv", ".psv")) and os.path.isfile(os.path.join(p, f))
        )
        if not files:
            raise InputError(f"{p}: the directory holds no .csv or .psv file")
        return files
    return [p]


def Study(
    observations: Any,
    *,
    sites: Any = None,
    known: Union[str, Sequence[str]] = DEFAULT_KNOWN,
    ephemeris: str = "builtin",
    tracked_mass: Union[str, float, Mapping[str, Union[str, float]]] = "0",
    kind: Union[None, str, Mapping[str, str]] = None,
    search_epoch: Any = None,
    names: Optional[Sequence[str]] = None,
) -> "_native.Study":
    """Reads the observations and builds the study every stage takes.

    observations: a file (Latens CSV or ADES PSV; a file with a designation
        column holds several bodies), a directory of such files, a table
        (pandas DataFrame, astropy Table, dict of columns), or a list of
        these (several tracked bodies sharing one perturber).
    sites: a sites file, or a table with name, lon_deg, lat_deg, height_m.
    known: the planets in the force model ("none" for a two-body orbit);
        inner planets not listed are folded into the Sun.
    ephemeris: "builtin" (embedded VSOP87A) or a JPL SPK file (DE4xx).
    tracked_mass: the tracked body's own mass: a planet's name or a number
        of Earth masses (0 for a small body).
    kind: planet, dwarf-planet, small-body or comet (default from
        tracked_mass). Either may be a dict {body name: value} for bodies of
        their own mass or kind (the others: 0 and from their mass).
    search_epoch: when to give the perturber's sky position (ISO UTC,
        ``JD <days> TDB``, a datetime or an astropy Time); default the last
        observation.
    names: names of table inputs, in order (default body1, body2, ...).

    Messages of bad input name the file (or the table's name), the line and
    the field; a table's line N is its row N-2 (line 1 is the header).
    """
    items = list(observations) if isinstance(observations, (list, tuple)) else [observations]
    files, texts = [], []
    for k, item in enumerate(items):
        if _is_path(item):
            files.extend(_expand(item))
        else:
            name = names[len(texts)] if names is not None and len(texts) < len(names) else f"body{len(texts) + 1}"
            texts.append((name, _table_text(item, name)))
    sites_file, sites_text = None, None
    if sites is not None:
        if _is_path(sites):
            sites_file = os.fspath(sites)
        else:
            sites_text = _sites_text(sites)
    if not isinstance(known, str):
        known = ",".join(known) if known else "none"
    if search_epoch is not None and not isinstance(search_epoch, str):
        search_epoch = _epoch_texts([search_epoch] if not hasattr(search_epoch, "shape") else search_epoch)[0]
    own_masses, own_kinds = [], []
    if isinstance(tracked_mass, Mapping):
        own_masses = [(str(b), str(v)) for b, v in tracked_mass.items()]
        tracked_mass = "0"
    if isinstance(kind, Mapping):
        own_kinds = [(str(b), str(v)) for b, v in kind.items()]
        kind = None
    return _native.Study(
        files,
        texts,
        sites_file=sites_file,
        sites_text=sites_text,
        known=known,
        ephemeris=ephemeris,
        tracked_mass=str(tracked_mass),
        kind=kind,
        search_epoch=search_epoch,
        own_masses=own_masses,
        own_kinds=own_kinds,
    )


def _sites_text(sites: Any) -> str:
    if hasattr(sites, "columns"):
        columns = {str(c): list(sites[c]) for c in sites.columns}
    elif isinstance(sites, Mapping):
        columns = {k: list(v) for k, v in sites.items()}
    else:
        raise TypeError("sites: expected a file path, a DataFrame or a dict of columns")
    names = ["name", "lon_deg", "lat_deg", "height_m"]
    missing = [c for c in names if c not in columns]
    if missing:
        raise InputError(f"sites: missing column(s) {', '.join(missing)}")
    lines = [",".join(names)]
    for i in range(len(columns["name"])):
        lines.append(",".join([str(columns["name"][i])] + [_number_text(columns[c][i]) for c in names[1:]]))
    return "\n".join(lines) + "\n"


# ---------------------------------------------------------------------------
# Progress.


def _progress(progress: Any) -> Optional[Callable[[str, int, int], None]]:
    """None/False: quiet; a callable: called as progress(stage, done, total);
    True: a bar (tqdm's, when installed; otherwise a line on stderr)."""
    if progress is None or progress is False:
        return None
    if callable(progress):
        return progress
    try:
        from tqdm.auto import tqdm
    except ImportError:
        tqdm = None
    state = {"stage": None, "bar": None}

    def show(stage: str, done: int, total: int) -> None:
        if state["stage"] != stage:
            if state["bar"] is not None and tqdm is not None:
                state["bar"].close()
            state["stage"] = stage
            state["bar"] = tqdm(total=total, desc=stage) if tqdm is not None else None
        bar = state["bar"]
        if bar is not None:
            bar.n = done
            bar.refresh()
            if done >= total:
                bar.close()
                state["stage"] = None
        else:
            # No tqdm: one line rewritten in place on a terminal; elsewhere
            # (a log, a captured cell) a line per tenth of the stage.
            tenth = 10 * done // max(total, 1)
            if state.get("shown") == (stage, tenth if not sys.stderr.isatty() else done):
                return
            state["shown"] = (stage, tenth if not sys.stderr.isatty() else done)
            if sys.stderr.isatty():
                sys.stderr.write(f"\r{stage}: {done}/{total}" + ("\n" if done >= total else ""))
            else:
                sys.stderr.write(f"{stage}: {done}/{total}\n")
            sys.stderr.flush()
            if done >= total:
                state["stage"] = None

    return show


# ---------------------------------------------------------------------------
# Stages (the native functions, with progress and tables added).


def detect(study, *, progress: Any = None, **settings) -> Union[Detection, JointDetection]:
    return _native.detect(study, progress=_progress(progress), **settings)


def posterior(study, detection, *, progress: Any = None, checkpoint=None, **settings) -> Posterior:
    if checkpoint is not None:
        checkpoint = os.fspath(checkpoint)
    return _native.posterior(study, detection, progress=_progress(progress), checkpoint=checkpoint, **settings)


def sensitivity(study, *, progress: Any = None, out=None, **settings):
    if out is not None:
        out = os.fspath(out)
    return _native.sensitivity(study, progress=_progress(progress), out=out, **settings)


def merge_sensitivity(dirs) -> Sensitivity:
    """Joins the shards written by ``sensitivity(..., shard=(K, N), out=DIR)``
    or ``latens sensitivity --shard K/N`` in the directories ``dirs`` (one
    path or several) into the whole map, as ``latens sensitivity merge``."""
    if isinstance(dirs, (str, os.PathLike)):
        dirs = [dirs]
    return _native.merge_sensitivity([os.fspath(d) for d in dirs])


def predict(study, detection, posterior, **settings) -> Columns:
    return Columns(_native.predict(study, detection, posterior, **settings))


class Inference:
    """What ``infer`` found: ``detection`` (Detection or JointDetection),
    ``posterior`` (Posterior, or None with ``sample=False``), ``sky`` (Sky,
    only for a detection with samples: a non-detection gives no place to
    look), ``verdict`` (one sentence) and ``warnings`` (all stages'; read
    them: a region near the Sun is unsafe to point a telescope at)."""

    def __init__(self, detection, posterior, sky):
        self.detection = detection
        self.posterior = posterior
        self.sky = sky
        self.verdict = detection.verdict
        self.warnings = list(detection.warnings)
        if posterior is not None:
            self.warnings += list(posterior.warnings)
        if sky is not None:
            self.warnings += list(sky.warnings)

    def __repr__(self) -> str:
        return f"<latens.Inference: {self.verdict}>"


def infer(study, *, sample: bool = True, progress: Any = None, checkpoint=None, resume: bool = False,
          **settings) -> Inference:
    """infer(study, *, sample=True, progress=None, checkpoint=None, resume=False, **settings) -> Inference

    The main job in one call, as ``latens infer``: does an unseen perturber
    explain the residuals, and where is it?

    1. ``detect``: the reference fit, the grid search with the mass
       profiled, the false-alarm probability from null simulations
       (look-elsewhere included), the refinement and the verdict; several
       bodies are searched jointly.
    2. ``posterior``: the alternatives (known-planet masses, a
       non-gravitational push, astrometric offsets) weighed against a
       perturber, the tempered ensemble sampler, convergence and evidence.
    3. ``sky_products`` (only for a detection): the sky map, the 50% and
       90% credible regions, the modes, and the 50% and 90% confidence
       regions of the profile likelihood (which lean on no prior volume).

    settings: any of ``detect``'s (mass_earth, distance_au, nulls,
    directions, distances, seed, reject_sigma, near_ecliptic) and ``posterior``'s (steps,
    walkers, temperatures, runs, max_eccentricity, gm_prior_inflation,
    nongrav_prior, offset_prior); ``seed`` goes to both, as on the command
    line. Defaults are the command's. With ``checkpoint`` (a file), a
    KeyboardInterrupt during sampling saves the sampler's progress;
    ``resume=True`` continues from it.

    Example::

        study = latens.Study("obs.csv", sites="sites.csv")
        found = latens.infer(study, progress=True)
        print(found.verdict)
        if found.sky is not None:
            found.sky.write_region("region90.fits")
    """
    detect_keys = {"mass_earth", "distance_au", "nulls", "directions", "distances", "seed", "reject_sigma", "near_ecliptic"}
    posterior_keys = {"steps", "walkers", "temperatures", "runs", "seed", "max_eccentricity",
                      "gm_prior_inflation", "nongrav_prior", "offset_prior"}
    unknown = set(settings) - detect_keys - posterior_keys
    if unknown:
        raise InputError(f"infer: unknown setting(s) {', '.join(sorted(unknown))}")
    found = detect(study, progress=progress, **{k: v for k, v in settings.items() if k in detect_keys})
    post = posterior(study, found, progress=progress, checkpoint=checkpoint, resume=resume, sample=sample,
                     **{k: v for k, v in settings.items() if k in posterior_keys})
    sky = None
    if found.detected and sample and post.samples_array.shape[0] > 0:
        sky = sky_products(study, found, post, progress=progress)
    return Inference(found, post, sky)


def simulate(scenario) -> list:
    """Simulates an invented scenario file (TOML), as ``latens simulate``.

    Returns one dict per tracked body: ``name``, ``observations_csv`` and
    ``sites_csv`` (the text ``latens simulate`` writes), ``truth`` (what the
    simulation put in) and ``largest_planetary_shift_arcsec``; pass a body
    to ``study_of`` for a Study of it."""
    return _native.simulate(os.fspath(scenario))


def study_of(simulated: Union[Mapping, Iterable[Mapping]], **options) -> "_native.Study":
    """A Study of simulated bodies (one dict of ``simulate``, or several),
    read exactly as their files would be."""
    bodies = [simulated] if isinstance(simulated, Mapping) else list(simulated)
    texts = [(b["name"], b["observations_csv"]) for b in bodies]
    known = options.pop("known", DEFAULT_KNOWN)
    if not isinstance(known, str):
        known = ",".join(known) if known else "none"
    return _native.Study(
        [],
        texts,
        sites_text=bodies[0]["sites_csv"],
        known=known,
        **options,
    )


for _f, _native_f in ((detect, _native.detect), (posterior, _native.posterior), (sensitivity, _native.sensitivity), (predict, _native.predict)):
    _f.__doc__ = (_native_f.__doc__ or "") + (
        "\n\nprogress: None (quiet), True (a progress bar) or a callable progress(stage, done, total)."
        if _f is not predict
        else "\n\nReturns Columns (a dict with to_pandas())."
    )
__all__.append("study_of")

