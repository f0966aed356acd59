"""Frame and angle fixtures for tests/reference_frames.rs, made with ERFA
(PyPI package pyerfa, the open-licence derivative of the IAU SOFA library).

Run from the repository root:
    pip install pyerfa numpy
    python tests/data/frames/gen.py
Writes into tests/data/frames/:
  ecliptic_matrix.csv  eraEcm06 at J2000.0 TT: the matrix from ICRS to the
      IAU 2006 mean ecliptic and equinox of J2000 (row-major, 9 numbers).
  radec_to_ecliptic.csv  random ICRS (RA, Dec) in radians and the ecliptic
      longitude/latitude eraEqec06 returns at J2000.0.
  separations.csv  pairs of directions (radians) and eraSeps's angle between
      them, including tiny and near-180-degree separations.
"""
import os

import erfa
import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
rng = np.random.default_rng(7)

m = erfa.ecm06(2451545.0, 0.0)
with open(os.path.join(HERE, "ecliptic_matrix.csv"), "w") as out:
    out.write(",".join(repr(float(x)) for x in m.ravel()) + "\n")

with open(os.path.join(HERE, "radec_to_ecliptic.csv"), "w") as out:
    out.write("ra,dec,lon,lat\n")
    for _ in range(50):
        ra = rng.uniform(0, 2 * np.pi)
        dec = np.arcsin(rng.uniform(-1, 1))
        lon, lat = erfa.eqec06(2451545.0, 0.0, ra, dec)
        out.write(",".join(repr(float(x)) for x in (ra, dec, lon, lat)) + "\n")

with open(os.path.join(HERE, "separations.csv"), "w") as out:
    out.write("ra1,dec1,ra2,dec2,sep\n")
    for k in range(60):
        ra1 = rng.uniform(0, 2 * np.pi)
        dec1 = np.arcsin(rng.uniform(-1, 1))
        kind = k % 3
        if kind == 0:      # tiny: 1 microarcsecond .. 1 arcsecond
            d = 10 ** rng.uniform(-11.7, -5.3)
        elif kind == 1:    # near antipodal
            d = np.pi - 10 ** rng.uniform(-11.7, -5.3)
        else:
            d = rng.uniform(0, np.pi)
        pa = rng.uniform(0, 2 * np.pi)
        # offset by d along position angle pa (spherical trigonometry)
        dec2 = np.arcsin(np.sin(dec1) * np.cos(d) + np.cos(dec1) * np.sin(d) * np.cos(pa))
        ra2 = ra1 + np.arctan2(np.sin(pa) * np.sin(d) * np.cos(dec1),
                               np.cos(d) - np.sin(dec1) * np.sin(dec2))
        ra2 = ra2 % (2 * np.pi)
        sep = erfa.seps(ra1, dec1, ra2, dec2)
        out.write(",".join(repr(float(x)) for x in (ra1, dec1, ra2, dec2, sep)) + "\n")
print("done")
