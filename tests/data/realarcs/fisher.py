"""Independent forecast, for tests/real_arcs.rs, of what each real arc can
tell about its hidden planet: the Fisher matrix of the arc at the truth, in an
N-body model Latens did not write.

Model: REBOUND (PyPI) with IAS15, the Sun, the known planets, the tracked
planet and the hidden planet started from JPL DE421 (PyPI skyfield-data,
through skyfield) or, for the historical arc, JPL DE405 (PyPI de405, through
jplephem) at the middle of the arc, all of them integrated. The observer is
the ephemeris's Earth relative to the Sun, carried along with the model's
Sun (the Earth shares the Sun's reflex, so a change in the hidden mass moves
both). Light time is taken from the ephemeris and held fixed (it changes by
seconds across the parameters). GMs: DE440 ratios, from memory, rounded to
the digits below; the forecast is insensitive to them at this level.

Parameters (13): the tracked planet's position and velocity at the middle
epoch, the hidden planet's position, velocity and log mass. No prior. The
Jacobian is by central differences. Outputs per case:
  sigma_major_deg, sigma_minor_deg  1-sigma axes of the hidden planet's
                   astrometric place at the search epoch (linear forecast)
  area90_sqdeg     the 90% Gaussian ellipse's area, pi a b (-2 ln 0.1)
  mass_sigma_rel   the hidden mass's 1-sigma relative error
  signal_chi2      noise-free chi-square of the hidden planet's pull left
                   after refitting the tracked orbit (Gauss-Newton, 6
                   parameters): what Latens's null chi-square minus its
                   degrees of freedom should be, within the noise
Run from the repository root after gen.py:
    pip install rebound skyfield skyfield-data jplephem de405 numpy
    python tests/data/realarcs/fisher.py
Writes tests/data/realarcs/fisher.csv.
"""
import csv
import os
import warnings

import numpy as np
import rebound

warnings.simplefilter("ignore")
from skyfield.api import load
from skyfield.iokit import Loader
from skyfield_data import get_skyfield_data_path
from jplephem.ephem import Ephemeris
import de405

HERE = os.path.dirname(os.path.abspath(__file__))
K2 = 0.01720209895 ** 2  # Gaussian gravitational constant squared (IAU 1976)
C_AU_D = 173.1446326846693  # speed of light, au/day (IAU 2012 au)
AU_KM = 149597870.700
# Masses in solar masses; the Sun carries the inner planets (mass ratios of
# DE440, from memory).
MASS = {"sun": 1.0 + 1 / 6023600 + 1 / 408523.7 + 1 / 328900.56 + 1 / 3098703.6,
        "jupiter": 1 / 1047.348644, "saturn": 1 / 3497.901768, "uranus": 1 / 22902.98,
        "neptune": 1 / 19412.26, "pluto": 1 / 136045556.0}

ts = load.timescale(builtin=True)
de421 = Loader(get_skyfield_data_path())("de421.bsp")
e405 = Ephemeris(de405)


def state(source, name, jd_tdb):
    """Barycentric position (au) and velocity (au/day)."""
    if source == "de421":
        key = name if name in ("sun", "earth") else name + " barycenter"
        s = de421[key].at(ts.tdb_jd(jd_tdb))
        return s.position.au, s.velocity.au_per_d
    if name == "earth":
        pe, ve = e405.position_and_velocity("earthmoon", jd_tdb)
        pm, vm = e405.position_and_velocity("moon", jd_tdb)
        f = 1.0 / (1.0 + e405.EMRAT)
        return (pe[:, 0] - f * pm[:, 0]) / AU_KM, (ve[:, 0] - f * vm[:, 0]) / AU_KM
    p, v = e405.position_and_velocity(name, jd_tdb)
    return p[:, 0] / AU_KM, v[:, 0] / AU_KM


def tdb_of(text):
    d, t = text.rstrip("Z").split("T")
    y, mo, dd = (int(x) for x in d.split("-"))
    hh, mm, ss = t.split(":")
    return ts.utc(y, mo, dd, int(hh), int(mm), float(ss)).tdb


def forecast(case, source, tracked, hidden, known, search_text):
    rows = list(csv.DictReader(open(os.path.join(HERE, case + ".csv"))))
    tdb = np.array([tdb_of(r["epoch_utc"]) for r in rows])
    sig = np.radians(np.array([float(r["sigma_dec_arcsec"]) for r in rows]) / 3600.0)
    sig2 = np.concatenate([sig, sig])
    helio = lambda name, t: state(source, name, t)[0] - state(source, "sun", t)[0]
    earth = np.array([helio("earth", t) for t in tdb])
    tau = np.array([np.linalg.norm(helio(tracked, t) - e) / C_AU_D for t, e in zip(tdb, earth)])
    t_obs = tdb - tau
    t_search = tdb_of(search_text)
    e_search = helio("earth", t_search)
    t_search -= np.linalg.norm(helio(hidden, t_search) - e_search) / C_AU_D
    epoch = 0.5 * (t_obs.min() + t_obs.max())
    names = ["sun"] + known + [tracked, hidden]
    start = {n: state(source, n, epoch) for n in names}

    def build(p):
        sim = rebound.Simulation()
        sim.G = K2
        sim.integrator = "ias15"
        sim.t = epoch
        for n in names:
            x, v = start[n]
            m = MASS[n]
            if n == tracked:
                x, v = x + p[0:3], v + p[3:6]
            if n == hidden:
                x, v, m = x + p[6:9], v + p[9:12], m * np.exp(p[12])
            sim.add(m=m, x=x[0], y=x[1], z=x[2], vx=v[0], vy=v[1], vz=v[2])
        return sim

    def helio_positions(p, idx, tlist):
        out = np.zeros((len(tlist), 3))
        order = np.argsort(tlist)
        for seq in ([i for i in order if tlist[i] < epoch][::-1], [i for i in order if tlist[i] >= epoch]):
            sim = build(p)
            for i in seq:
                sim.integrate(tlist[i], exact_finish_time=1)
                q, o = sim.particles[idx], sim.particles[0]
                out[i] = (q.x - o.x, q.y - o.y, q.z - o.z)
        return out

    def sky(p):
        u = helio_positions(p, len(names) - 2, t_obs) - earth
        h = helio_positions(p, len(names) - 1, np.array([t_search]))[0] - e_search
        return (np.arctan2(u[:, 1], u[:, 0]), np.arcsin(u[:, 2] / np.linalg.norm(u, axis=1)),
                np.arctan2(h[1], h[0]), np.arcsin(h[2] / np.linalg.norm(h)))

    wrap = lambda a: np.angle(np.exp(1j * a))
    p0 = np.zeros(13)
    ra0, dec0, _, hdec0 = sky(p0)
    steps = np.array([1e-6] * 3 + [1e-8] * 3 + [1e-5] * 3 + [1e-8] * 3 + [1e-4])

    def jacobian(p, ks):
        J = np.zeros((2 * len(rows), len(ks)))
        H = np.zeros((2, len(ks)))
        for j, k in enumerate(ks):
            dp = np.zeros(13)
            dp[k] = steps[k]
            a, b = sky(p + dp), sky(p - dp)
            J[:, j] = np.concatenate([wrap(a[0] - b[0]) * np.cos(dec0), a[1] - b[1]]) / (2 * steps[k]) / sig2
            H[:, j] = [wrap(a[2] - b[2]) * np.cos(hdec0) / (2 * steps[k]), (a[3] - b[3]) / (2 * steps[k])]
        return J, H

    J, H = jacobian(p0, range(13))
    F = J.T @ J
    s = 1.0 / np.sqrt(np.diag(F))
    C = np.linalg.inv(F * np.outer(s, s)) * np.outer(s, s)
    w = np.linalg.eigvalsh(H @ C @ H.T)
    minor, major = np.degrees(np.sqrt(w))
    # The hidden planet's pull left after refitting the tracked orbit alone.
    p = np.zeros(13)
    p[12] = -40.0
    for _ in range(5):
        ra1, dec1, _, _ = sky(p)
        r = np.concatenate([wrap(ra0 - ra1) * np.cos(dec0), dec0 - dec1]) / sig2
        A, _ = jacobian(p, range(6))
        p[:6] += np.linalg.lstsq(A, r, rcond=None)[0]
    ra1, dec1, _, _ = sky(p)
    r = np.concatenate([wrap(ra0 - ra1) * np.cos(dec0), dec0 - dec1]) / sig2
    return dict(case=case, observations=len(rows), sigma_major_deg=major, sigma_minor_deg=minor,
                area90_sqdeg=np.pi * major * minor * (-2.0 * np.log(0.1)),
                mass_sigma_rel=float(np.sqrt(C[12, 12])), signal_chi2=float(np.sum(r ** 2)))


cases = [
    ("uranus_1930_2020", "de421", "uranus", "neptune", ["jupiter", "saturn"], "2020-01-01T00:00:00Z"),
    ("neptune_1900_2024", "de421", "neptune", "uranus", ["jupiter", "saturn"], "2024-01-01T00:00:00Z"),
    ("pluto_1930_2020", "de421", "pluto", "neptune", ["jupiter", "saturn", "uranus"], "2020-01-01T00:00:00Z"),
    ("uranus_1690_1845", "de405", "uranus", "neptune", ["jupiter", "saturn"], "1846-09-23T00:00:00Z"),
]
out = [forecast(*c) for c in cases]
cols = list(out[0].keys())
with open(os.path.join(HERE, "fisher.csv"), "w") as f:
    f.write(",".join(cols) + "\n")
    for o in out:
        f.write(",".join(str(o[c]) if isinstance(o[c], (str, int)) else f"{o[c]:.6g}" for c in cols) + "\n")
        print(o)
