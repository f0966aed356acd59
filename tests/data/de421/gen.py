"""DE421 fixtures for tests/reference_spk.rs and tests/reference_vsop87.rs.

Source: the JPL DE421 planetary ephemeris shipped in the PyPI package
skyfield-data, read with jplephem (PyPI). Run from the repository root:
    pip install skyfield-data jplephem numpy
    python tests/data/de421/gen.py
Writes into tests/data/de421/:
  excerpt.bsp      DE421 cut to 2000-2025 with `python -m jplephem excerpt`,
                   plus one type-3 segment (target 90005) made here by
                   differentiating the Jupiter-barycentre Chebyshev series, so
                   that the type-3 reader is exercised (DE421 itself is type 2).
  spk_states.csv   jplephem's positions (km) and velocities (km/s) of every
                   segment of excerpt.bsp at 240 epochs (TDB seconds past J2000).
  helio_1900_2050.csv  DE421 heliocentric ICRF positions (au) and velocities
                   (au/day) of Mercury..Neptune (planet barycentres for Jupiter..
                   Neptune; Mercury, Venus, Mars bodies; the Earth 399) at 301
                   epochs from 1900 to 2050, from the full file.
"""
import os
import shutil
import subprocess
import sys

import numpy as np
import skyfield_data
from jplephem.daf import DAF
from jplephem.spk import SPK

HERE = os.path.dirname(os.path.abspath(__file__))
FULL = os.path.join(os.path.dirname(skyfield_data.__file__), "data", "de421.bsp")
AU_KM = 149597870.700  # IAU 2012 Resolution B2
DAY_S = 86400.0

excerpt = os.path.join(HERE, "excerpt.bsp")
subprocess.run([sys.executable, "-m", "jplephem", "excerpt", "2000/1/1", "2025/1/1",
                FULL, excerpt], check=True, stdout=subprocess.DEVNULL)

# Append a type-3 copy of the Jupiter barycentre segment, target 90005.
kernel = SPK.open(excerpt)
seg = next(s for s in kernel.segments if s.target == 5 and s.center == 0)
init, intlen, rsize2, nrec = (float(x) for x in seg.daf.read_array(seg.end_i - 3, seg.end_i))
nrec = int(nrec)
raw = np.array(seg.daf.read_array(seg.start_i, seg.end_i - 4)).reshape(nrec, int(rsize2))
ncoef = (int(rsize2) - 2) // 3
seg_start, seg_end = seg.start_second, seg.end_second
kernel.close()
records = []
for r in range(nrec):
    mid, radius = raw[r, 0], raw[r, 1]
    pos = [raw[r, 2 + c * ncoef: 2 + (c + 1) * ncoef] for c in range(3)]
    vel = []
    for c in range(3):
        # d/dt of a Chebyshev series in s = (t - mid) / radius
        d = np.polynomial.chebyshev.chebder(pos[c]) / radius
        vel.append(np.concatenate([d, [0.0]]))
    records.append(np.concatenate([[mid, radius], *pos, *vel]))
rsize = 2 + 6 * ncoef
array = np.concatenate(records + [np.array([init, intlen, rsize, nrec], float)])
with open(excerpt, "r+b") as f:
    daf = DAF(f)
    values = (seg_start, seg_end, 90005, 0, 1, 3)
    daf.add_array(b"TYPE 3 TEST COPY OF JUPITER BARYCENTRE", values, array)

kernel = SPK.open(excerpt)
rng = np.random.default_rng(421)
t0 = kernel.segments[0].start_second
t1 = kernel.segments[0].end_second
ets = np.sort(rng.uniform(t0, t1, 238))
ets = np.concatenate([[t0, t1], ets])
with open(os.path.join(HERE, "spk_states.csv"), "w") as out:
    out.write("et_s,target,center,x_km,y_km,z_km,vx_km_s,vy_km_s,vz_km_s\n")
    for s in kernel.segments:
        for et in ets:
            jd = 2451545.0 + et / DAY_S
            # jplephem takes (whole, fraction) JD; keep the split exact.
            if s.data_type == 3:
                pv = s.compute(2451545.0, et / DAY_S)
                p, v = pv[:3], pv[3:]  # type-3 velocity is stored in km/s
            else:
                p, v = s.compute_and_differentiate(2451545.0, et / DAY_S)
                v = v / DAY_S  # km/day -> km/s
            out.write(",".join([repr(float(et)), str(s.target), str(s.center)]
                               + [repr(float(x)) for x in (*p, *v)]) + "\n")
kernel.close()

full = SPK.open(FULL)
def bary(target, jd):
    """Barycentric position (km) and velocity (km/day) of a NAIF body."""
    chains = {199: [(0, 1), (1, 199)], 299: [(0, 2), (2, 299)], 399: [(0, 3), (3, 399)],
              499: [(0, 4), (4, 499)], 5: [(0, 5)], 6: [(0, 6)], 7: [(0, 7)],
              8: [(0, 8)], 10: [(0, 10)]}[target]
    p = np.zeros(3); v = np.zeros(3)
    for c, t in chains:
        pp, vv = full[c, t].compute_and_differentiate(jd)
        p += pp; v += vv
    return p, v

jds = np.linspace(2415020.5, 2469807.5, 301)  # 1900-01-01 .. 2050-01-01
with open(os.path.join(HERE, "helio_1900_2050.csv"), "w") as out:
    out.write("jd_tdb,naif,x_au,y_au,z_au,vx_au_d,vy_au_d,vz_au_d\n")
    for jd in jds:
        ps, vs = bary(10, jd)
        for t in (199, 299, 399, 499, 5, 6, 7, 8):
            p, v = bary(t, jd)
            vals = list((p - ps) / AU_KM) + list((v - vs) / AU_KM)
            out.write(",".join([repr(float(jd)), str(t)] + [repr(float(x)) for x in vals]) + "\n")
print("wrote", excerpt, os.path.getsize(excerpt), "bytes")
