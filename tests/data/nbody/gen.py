"""N-body fixtures for tests/reference_nbody.rs, made with REBOUND (PyPI).

Run from the repository root:
    pip install rebound jplephem skyfield-data numpy
    python tests/data/nbody/gen.py

The forces are the same in REBOUND and in Latens: point masses with the DE440
GMs that Latens uses (src/units.rs), the Sun and Jupiter..Neptune integrated
together by REBOUND from their DE421 heliocentric states at the start. Latens
does not integrate the planets: it reads their heliocentric positions from
the tables written here (sampled every 40 days from REBOUND's own solution), so
both programs move the tracked body through the same planetary system. The
heliocentric equations of motion Latens uses are exact for this system.

Writes into tests/data/nbody/:
  planets_<case>.csv   heliocentric positions (au) of Jupiter..Neptune every 40
                       days, TDB days after J2000.0, from 400 days before the arc
                       to 400 days after it;
  bodies_<case>.csv    heliocentric states of the tracked body (massless) and
                       the perturber (5 Earth masses; absent in case `plain`)
                       every 182.625 days over 150 years (au, au/day);
  variational.csv      Sun + tracked body + perturber only: the partial
                       derivatives of the tracked body's heliocentric state with
                       respect to its initial state, the perturber's initial
                       state and the perturber's GM, from REBOUND's first-order
                       variational particles, at 8 epochs.
The tracked body and the perturber are invented.
"""
import math
import os

import numpy as np
import rebound
import skyfield_data
from jplephem.spk import SPK

HERE = os.path.dirname(os.path.abspath(__file__))
AU_KM = 149597870.700
DAY_S = 86400.0
KM3S2 = DAY_S ** 2 / AU_KM ** 3  # km^3/s^2 -> au^3/day^2
GM = {  # DE440, km^3/s^2, as in src/units.rs
    "sun": 132712440041.279419,
    5: 126712764.1,
    6: 37940584.8418,
    7: 5794556.4,
    8: 6836527.10058,
}
GM_EARTH = 398600.435507
YEAR = 365.25
PAD = 400.0
SPAN = 150 * YEAR
T_START = -PAD  # TDB days after J2000.0


def rotation_x(angle):
    c, s = math.cos(angle), math.sin(angle)
    return np.array([[1, 0, 0], [0, c, -s], [0, s, c]])


EPS = 84381.406 / 3600 * math.pi / 180  # ecliptic -> equator, for the invented orbits


def invented_state(a, e, inc_deg, node_deg, peri_deg, mean_deg, gm):
    """Heliocentric ICRF-ish state of an invented body from ecliptic elements."""
    sim = rebound.Simulation()
    sim.G = 1.0
    sim.add(m=gm)
    sim.add(m=0, a=a, e=e, inc=math.radians(inc_deg), Omega=math.radians(node_deg),
            omega=math.radians(peri_deg), M=math.radians(mean_deg), primary=sim.particles[0])
    p = sim.particles[1]
    r = rotation_x(EPS) @ np.array([p.x, p.y, p.z])
    v = rotation_x(EPS) @ np.array([p.vx, p.vy, p.vz])
    return r, v


kernel = SPK.open(os.path.join(os.path.dirname(skyfield_data.__file__), "data", "de421.bsp"))


def planet_helio(naif, t):
    jd = 2451545.0 + t
    p, v = kernel[0, naif].compute_and_differentiate(jd)
    ps, vs = kernel[0, 10].compute_and_differentiate(jd)
    return (p - ps) / AU_KM, (v - vs) / AU_KM


gm_sun = GM["sun"] * KM3S2
gm_pert = 5 * GM_EARTH * KM3S2
tracked0 = invented_state(44.0, 0.1, 12.0, 80.0, 150.0, 20.0, gm_sun)
pert0 = invented_state(75.0, 0.05, 25.0, 200.0, 40.0, 300.0, gm_sun)


def build(with_perturber):
    sim = rebound.Simulation()
    sim.G = 1.0
    sim.integrator = "ias15"  # default tolerance (epsilon = 1e-9)
    sim.t = T_START
    sim.add(m=gm_sun)  # the Sun at the heliocentric origin, at rest at the start
    for naif in (5, 6, 7, 8):
        r, v = planet_helio(naif, T_START)
        sim.add(m=GM[naif] * KM3S2, x=r[0], y=r[1], z=r[2], vx=v[0], vy=v[1], vz=v[2])
    if with_perturber:
        r, v = pert0
        sim.add(m=gm_pert, x=r[0], y=r[1], z=r[2], vx=v[0], vy=v[1], vz=v[2])
    sim.N_active = sim.N
    r, v = tracked0
    sim.add(m=0.0, x=r[0], y=r[1], z=r[2], vx=v[0], vy=v[1], vz=v[2])
    return sim


for case, with_p in (("plain", False), ("perturbed", True)):
    sim = build(with_p)
    planet_times = np.arange(T_START, SPAN + PAD + 1e-9, 40.0)
    body_times = np.arange(0.0, SPAN + 1e-9, 182.625)
    times = sorted(set([float(t) for t in planet_times] + [float(t) for t in body_times]))
    with open(os.path.join(HERE, f"planets_{case}.csv"), "w") as fp, \
            open(os.path.join(HERE, f"bodies_{case}.csv"), "w") as fb:
        fp.write("t_tdb_days,naif,x_au,y_au,z_au\n")
        fb.write("t_tdb_days,body,x_au,y_au,z_au,vx_au_d,vy_au_d,vz_au_d\n")
        for t in times:
            sim.integrate(t, exact_finish_time=1)
            sun = sim.particles[0]
            if any(abs(t - pt) < 1e-9 for pt in planet_times[max(0, int((t - T_START) // 40) - 1):int((t - T_START) // 40) + 2]):
                for k, naif in enumerate((5, 6, 7, 8)):
                    p = sim.particles[1 + k]
                    fp.write(f"{t!r},{naif},{p.x - sun.x!r},{p.y - sun.y!r},{p.z - sun.z!r}\n")
            if any(abs(t - bt) < 1e-9 for bt in body_times[max(0, int(t // 182.625) - 1):int(t // 182.625) + 2]):
                names = [("tracked", sim.N - 1)] + ([("perturber", 5)] if with_p else [])
                for name, i in names:
                    p = sim.particles[i]
                    vals = (p.x - sun.x, p.y - sun.y, p.z - sun.z, p.vx - sun.vx, p.vy - sun.vy, p.vz - sun.vz)
                    fb.write(f"{t!r},{name}," + ",".join(repr(float(x)) for x in vals) + "\n")

# Variational case: Sun + tracked + perturber, heliocentric start at t = 0.
sim = rebound.Simulation()
sim.G = 1.0
sim.integrator = "ias15"
sim.add(m=gm_sun)
r, v = tracked0
sim.add(m=0.0, x=r[0], y=r[1], z=r[2], vx=v[0], vy=v[1], vz=v[2])
# A heavier, nearer perturber so that its partials are large and well resolved.
rp, vp = invented_state(52.0, 0.05, 25.0, 200.0, 40.0, 35.0, gm_sun)
sim.add(m=10 * GM_EARTH * KM3S2, x=rp[0], y=rp[1], z=rp[2], vx=vp[0], vy=vp[1], vz=vp[2])
variations = []
for particle in (1, 2):
    for coord in ("x", "y", "z", "vx", "vy", "vz"):
        var = sim.add_variation()
        setattr(var.particles[particle], coord, 1.0)  # d/d(initial coordinate)
        variations.append(var)
    if particle == 2:
        # d/d(GM) at fixed Cartesian initial state. (REBOUND's var.vary(2, "m")
        # would hold the orbital elements fixed instead, changing the velocity.)
        var = sim.add_variation()
        var.particles[2].m = 1.0
        variations.append(var)
with open(os.path.join(HERE, "variational.csv"), "w") as f:
    f.write("# initial: tracked " + " ".join(repr(float(x)) for x in (*r, *v)) + "\n")
    f.write("# initial: perturber " + " ".join(repr(float(x)) for x in (*rp, *vp)) + f" gm {10 * GM_EARTH * KM3S2!r}\n")
    f.write("t_tdb_days,component," + ",".join(f"p{k}" for k in range(13)) + "\n")
    for t in np.linspace(-0.0, 30 * YEAR, 9)[1:]:
        sim.integrate(float(t), exact_finish_time=1)
        for c, attr in enumerate(("x", "y", "z", "vx", "vy", "vz")):
            row = []
            for var in variations:
                d = getattr(var.particles[1], attr) - getattr(var.particles[0], attr)
                row.append(repr(float(d)))
            f.write(f"{float(t)!r},{c}," + ",".join(row) + "\n")
print("done")
