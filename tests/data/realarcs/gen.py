"""Real arcs for tests/real_arcs.rs: astrometric places of real planets from
JPL ephemerides, with seeded Gaussian noise, for running `latens infer` with
one real planet left out of the model.

Sources: JPL DE421 (PyPI package skyfield-data) through skyfield (PyPI) for
1900-2050; JPL DE405 (PyPI package de405, 1600-2200) through jplephem's
ephemeris reader (PyPI) for the historical arc, with the light time iterated
here the way skyfield's `observe()` does (astrometric: light-time corrected,
no aberration, no deflection). Run from the repository root:
    pip install skyfield skyfield-data jplephem de405 numpy
    python tests/data/realarcs/gen.py
Writes into tests/data/realarcs/ (one observation file per case, Latens CSV,
geocentric, no header comment so every CSV reader opens them):
  uranus_1930_2020.csv  Uranus 1930-2020 every 45 days at 0.5", hidden: Neptune
  uranus_1690_1845.csv  Uranus at historical precision: 18 sightings 1690-1771
                        at 10", then four places a year 1781-1845 at 5" (to
                        1800), 3" (to 1830) and 2"; hidden: Neptune
  neptune_1900_2024.csv Neptune 1900-2024 every 60 days at 0.5", hidden:
                        Uranus (inside the tracked orbit)
  saturn_1950_2020.csv  Saturn 1950-2020 every 30 days at 0.3", nothing hidden
  pluto_1930_2020.csv   Pluto (a dwarf planet) 1930-2020 every 45 days at
                        0.3", hidden: Neptune (inside the tracked orbit)
  truth.csv             per case: the hidden planet, its astrometric place
                        and geocentric distance at the search epoch, and its
                        GM (DE421/DE405 header constants are not used; the
                        mass check uses Latens's own DE440 GMs)
Observations closer than 40 deg to the Sun are skipped (nobody observes
there). Before 1972 UTC is taken as TT - 42.184 s (TAI - UTC held at 10 s,
as skyfield and Latens both do); TDB - TT (under 2 ms) is neglected for the
DE405 arc, whose noise is 2" or more.
"""
import os
import warnings

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
AU_KM = 149597870.700  # IAU 2012 Resolution B2
C_KM_S = 299792.458
DAY_S = 86400.0

warnings.simplefilter("ignore")
from skyfield.api import load
from skyfield.iokit import Loader
from skyfield_data import get_skyfield_data_path

ts = load.timescale(builtin=True)
planets = Loader(get_skyfield_data_path())("de421.bsp")
earth, sun = planets["earth"], planets["sun"]

HEADER = "epoch_utc,ra_deg,dec_deg,sigma_ra_arcsec,sigma_dec_arcsec\n"


def iso(t):
    u = t.utc
    return f"{int(u[0]):04d}-{int(u[1]):02d}-{int(u[2]):02d}T{int(u[3]):02d}:{int(u[4]):02d}:{u[5]:09.6f}Z"


def de421_arc(name, target, y0, y1, step_days, sigma, seed):
    rng = np.random.default_rng(seed)
    body = planets[target]
    rows = []
    t_first = ts.utc(y0, 1, 15, 4, 0, 0)
    k = 0
    while True:
        t0 = ts.tt_jd(t_first.tt + step_days * k)
        k += 1
        if t0.utc_datetime().year >= y1:
            break
        # Recompute the instant from the rounded text so the row is exact.
        u = t0.utc
        t = ts.utc(int(u[0]), int(u[1]), int(u[2]), int(u[3]), int(u[4]), float(f"{u[5]:.6f}"))
        e = earth.at(t)
        app = e.observe(body)
        if app.separation_from(e.observe(sun)).degrees < 40.0:
            continue
        ra, dec, _ = app.radec()
        dra = rng.standard_normal() * sigma / 3600.0 / np.cos(dec.radians)
        ddec = rng.standard_normal() * sigma / 3600.0
        rows.append(f"{iso(t)},{float((ra._degrees + dra) % 360.0)!r},{float(dec.degrees + ddec)!r},{sigma},{sigma}\n")
    with open(os.path.join(HERE, name), "w") as f:
        f.write(HEADER)
        f.writelines(rows)
    return len(rows)


def de421_place(target, y, m, d):
    t = ts.utc(y, m, d)
    ra, dec, dist = earth.at(t).observe(planets[target]).radec()
    return iso(t), float(ra._degrees), float(dec.degrees), float(dist.au)


# --- DE405 (1600-2200) for the historical arc -------------------------------
from jplephem.ephem import Ephemeris
import de405

eph = Ephemeris(de405)
EMRAT = eph.EMRAT


def bary_km(name, jd_tdb):
    if name == "earth":
        em = eph.position("earthmoon", jd_tdb)[:, 0]
        moon = eph.position("moon", jd_tdb)[:, 0]  # geocentric in these files
        return em - moon / (1.0 + EMRAT)
    return eph.position(name, jd_tdb)[:, 0]


def de405_astrometric(target, jd_tt):
    """Geocentric astrometric RA, Dec (deg) and distance (au): light time
    iterated to convergence, no aberration or deflection."""
    e = bary_km("earth", jd_tt)
    tau = 0.0
    for _ in range(10):
        p = bary_km(target, jd_tt - tau)
        d = p - e
        tau_new = np.linalg.norm(d) / C_KM_S / DAY_S
        if abs(tau_new - tau) < 1e-12:
            break
        tau = tau_new
    ra = np.degrees(np.arctan2(d[1], d[0])) % 360.0
    dec = np.degrees(np.arcsin(d[2] / np.linalg.norm(d)))
    return ra, dec, np.linalg.norm(d) / AU_KM


def utc_text_from_tt(jd_tt):
    jd_utc = jd_tt - 42.184 / DAY_S
    # The Gregorian calendar date of jd_utc (Meeus, Astronomical Algorithms,
    # ch. 7; from memory, checked by the round trip through jd_tt_from_text).
    z = jd_utc + 0.5
    zi = int(np.floor(z))
    frac = z - zi
    alpha = int((zi - 1867216.25) / 36524.25)
    a = zi + 1 + alpha - alpha // 4
    b = a + 1524
    c = int((b - 122.1) / 365.25)
    dd = int(365.25 * c)
    e = int((b - dd) / 30.6001)
    day = b - dd - int(30.6001 * e)
    month = e - 1 if e < 14 else e - 13
    year = c - 4716 if month > 2 else c - 4715
    secs = frac * DAY_S
    hh = int(secs // 3600)
    mm = int((secs - 3600 * hh) // 60)
    ss = secs - 3600 * hh - 60 * mm
    return f"{year:04d}-{month:02d}-{day:02d}T{hh:02d}:{mm:02d}:{ss:09.6f}Z", jd_utc


def jd_tt_from_text(text):
    """Julian day (TT) of an ISO UTC text before 1972 (Fliegel & Van
    Flandern 1968 day number; common practice)."""
    y, mo, rest = text.split("-", 2)
    d, hms = rest.split("T")
    hh, mm, ss = hms.rstrip("Z").split(":")
    y, mo, d = int(y), int(mo), int(d)
    a = (14 - mo) // 12
    yy = y + 4800 - a
    m = mo + 12 * a - 3
    jdn = d + (153 * m + 2) // 5 + 365 * yy + yy // 4 - yy // 100 + yy // 400 - 32045
    jd_utc = jdn - 0.5 + (int(hh) * 3600 + int(mm) * 60 + float(ss)) / DAY_S
    return jd_utc + 42.184 / DAY_S


def sun_elongation_405(jd_tt, ra, dec):
    e = bary_km("earth", jd_tt)
    s = bary_km("sun", jd_tt) - e
    u = np.array([np.cos(np.radians(dec)) * np.cos(np.radians(ra)),
                  np.cos(np.radians(dec)) * np.sin(np.radians(ra)), np.sin(np.radians(dec))])
    return np.degrees(np.arccos(np.dot(u, s) / np.linalg.norm(s)))


def historical_uranus():
    rng = np.random.default_rng(1781)
    rows = []
    # Eighteen sightings before the discovery, at dates spread like the
    # catalogued pre-discovery sightings (invented dates, not the historical
    # ones), 10" each.
    early_years = [1690.95, 1712.2, 1715.2, 1715.25, 1715.3, 1748.8, 1750.95, 1753.8, 1756.8, 1764.1,
                   1768.95, 1769.05, 1769.1, 1769.9, 1771.05, 1771.1, 1771.2, 1771.9]
    epochs = [(y, 10.0) for y in early_years]
    y = 1781.25
    while y < 1845.9:
        sigma = 5.0 if y < 1800 else (3.0 if y < 1830 else 2.0)
        epochs.append((y, sigma))
        y += 0.25
    for year, sigma in epochs:
        jd_tt = 2451545.0 + (year - 2000.0) * 365.25
        text, _ = utc_text_from_tt(jd_tt)
        jd_tt = jd_tt_from_text(text)  # the instant the row states
        ra, dec, _ = de405_astrometric("uranus", jd_tt)
        if sun_elongation_405(jd_tt, ra, dec) < 40.0:
            continue
        dra = rng.standard_normal() * sigma / 3600.0 / np.cos(np.radians(dec))
        ddec = rng.standard_normal() * sigma / 3600.0
        rows.append(f"{text},{float((ra + dra) % 360.0)!r},{float(dec + ddec)!r},{sigma},{sigma}\n")
    with open(os.path.join(HERE, "uranus_1690_1845.csv"), "w") as f:
        f.write(HEADER)
        f.writelines(rows)
    return len(rows)


counts = {
    "uranus_1930_2020": de421_arc("uranus_1930_2020.csv", "uranus barycenter", 1930, 2020, 45.0, 0.5, 1930),
    "neptune_1900_2024": de421_arc("neptune_1900_2024.csv", "neptune barycenter", 1900, 2024, 60.0, 0.5, 1900),
    "saturn_1950_2020": de421_arc("saturn_1950_2020.csv", "saturn barycenter", 1950, 2020, 30.0, 0.3, 1950),
    "pluto_1930_2020": de421_arc("pluto_1930_2020.csv", "pluto barycenter", 1930, 2020, 45.0, 0.3, 19301),
    "uranus_1690_1845": historical_uranus(),
}
with open(os.path.join(HERE, "truth.csv"), "w") as f:
    f.write("case,observations,hidden,search_epoch_utc,ra_deg,dec_deg,distance_au\n")
    for case, hidden, date in [("uranus_1930_2020", "neptune barycenter", (2020, 1, 1)),
                               ("neptune_1900_2024", "uranus barycenter", (2024, 1, 1)),
                               ("pluto_1930_2020", "neptune barycenter", (2020, 1, 1))]:
        text, ra, dec, dist = de421_place(hidden, *date)
        f.write(f"{case},{counts[case]},{hidden.split()[0]},{text},{ra!r},{dec!r},{dist!r}\n")
    jd = jd_tt_from_text("1846-09-23T00:00:00.000000Z")
    ra, dec, dist = de405_astrometric("neptune", jd)
    f.write(f"uranus_1690_1845,{counts['uranus_1690_1845']},neptune,1846-09-23T00:00:00.000000Z,"
            f"{float(ra)!r},{float(dec)!r},{float(dist)!r}\n")
    f.write(f"saturn_1950_2020,{counts['saturn_1950_2020']},none,,,,\n")
print(counts)
