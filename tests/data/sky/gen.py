"""Sky fixtures for tests/reference_sky.rs, made with skyfield (PyPI) and the
JPL DE421 ephemeris (PyPI skyfield-data).

Run from the repository root:
    pip install skyfield skyfield-data numpy
    python tests/data/sky/gen.py
Writes into tests/data/sky/:
  galactic.csv    random ICRS directions (RA, Dec, degrees) and skyfield's
                  galactic longitude and latitude (degrees).
  elongation.csv  TDB Julian dates, ICRS directions (degrees), and the angle
                  (degrees) between each direction and the Sun's geocentric
                  astrometric place from DE421.
"""
import os

import numpy as np
import skyfield_data
from skyfield.api import load
from skyfield.framelib import galactic_frame
from skyfield.positionlib import position_of_radec

HERE = os.path.dirname(os.path.abspath(__file__))
rng = np.random.default_rng(11)
ts = load.timescale(builtin=True)
eph = load(os.path.join(skyfield_data.get_skyfield_data_path(), "de421.bsp"))
earth, sun = eph["earth"], eph["sun"]

with open(os.path.join(HERE, "galactic.csv"), "w") as out:
    out.write("ra_deg,dec_deg,l_deg,b_deg\n")
    t = ts.tt_jd(2451545.0)
    for _ in range(40):
        ra = rng.uniform(0, 360)
        dec = np.degrees(np.arcsin(rng.uniform(-1, 1)))
        p = position_of_radec(ra / 15.0, dec, t=t)
        lat, lon, _ = p.frame_latlon(galactic_frame)
        out.write(",".join(repr(float(x)) for x in (ra, dec, lon.degrees, lat.degrees)) + "\n")

with open(os.path.join(HERE, "elongation.csv"), "w") as out:
    out.write("jd_tdb,ra_deg,dec_deg,elongation_deg\n")
    for _ in range(40):
        jd = rng.uniform(2415021.0, 2469807.0)  # 1900-2050
        t = ts.tdb_jd(jd)
        ra = rng.uniform(0, 360)
        dec = np.degrees(np.arcsin(rng.uniform(-1, 1)))
        s = earth.at(t).observe(sun)
        target = position_of_radec(ra / 15.0, dec, t=t)
        out.write(",".join(repr(float(x)) for x in (jd, ra, dec, s.separation_from(target).degrees)) + "\n")
