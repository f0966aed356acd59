"""Runs the REBOUND reference path on workload W1(a) and Latens's benchmark in
the same run, and prints Latens's speed-up for each case.

Workload W1(a) (docs/performance.md): a tracked body on a 44 au, e = 0.1,
i = 12 deg orbit and a 5 Earth-mass perturber on a 75 au orbit, under the Sun
and Jupiter..Neptune, propagated 15 years backwards and 15 years forwards from
the reference epoch and read at 300 epochs. REBOUND rebuilds the simulation
for every evaluation, as a fitter calling it would; the giant planets are
integrated (their starting states from DE421, PyPI skyfield-data).

Run from the repository root (not part of the tests):
    pip install rebound jplephem skyfield-data numpy
    python benches/compare/rebound_w1.py
"""
import json
import math
import os
import subprocess
import sys
import time

import numpy as np
import rebound
import skyfield_data
from jplephem.spk import SPK

AU_KM = 149597870.700
DAY_S = 86400.0
KM3S2 = DAY_S ** 2 / AU_KM ** 3
GM_SUN = 132712440041.279419 * KM3S2
GM = {5: 126712764.1 * KM3S2, 6: 37940584.8418 * KM3S2, 7: 5794556.4 * KM3S2, 8: 6836527.10058 * KM3S2}
GM_EARTH = 398600.435507 * KM3S2
T0 = 9131.25  # TDB days after J2000.0, as in benches/propagation.rs
EPS = 84381.406 / 3600 * math.pi / 180
REPEATS = 15


def rot_x(a):
    c, s = math.cos(a), math.sin(a)
    return np.array([[1, 0, 0], [0, c, -s], [0, s, c]])


def invented(a, e, inc, node, peri, mean):
    sim = rebound.Simulation()
    sim.G = 1.0
    sim.add(m=GM_SUN)
    sim.add(m=0, a=a, e=e, inc=math.radians(inc), Omega=math.radians(node), omega=math.radians(peri),
            M=math.radians(mean), primary=sim.particles[0])
    p = sim.particles[1]
    return rot_x(EPS) @ np.array([p.x, p.y, p.z]), rot_x(EPS) @ np.array([p.vx, p.vy, p.vz])


kernel = SPK.open(os.path.join(os.path.dirname(skyfield_data.__file__), "data", "de421.bsp"))
giants = []
for naif in (5, 6, 7, 8):
    p, v = kernel[0, naif].compute_and_differentiate(2451545.0 + T0)
    ps, vs = kernel[0, 10].compute_and_differentiate(2451545.0 + T0)
    giants.append((GM[naif], (p - ps) / AU_KM, (v - vs) / AU_KM))
tracked = invented(44.0, 0.1, 12.0, 80.0, 150.0, 20.0)
perturber = invented(75.0, 0.05, 25.0, 200.0, 40.0, 300.0)
epochs = np.array([T0 - 15 * 365.25 + 365.25 * y + 120.0 + 3.0 * n for y in range(30) for n in range(10)])


def build(integrator, dt=None, variations=False):
    sim = rebound.Simulation()
    sim.G = 1.0
    sim.t = T0
    sim.integrator = integrator
    if dt is not None:
        sim.dt = dt
    sim.add(m=GM_SUN)
    for gm, r, v in giants:
        sim.add(m=gm, x=r[0], y=r[1], z=r[2], vx=v[0], vy=v[1], vz=v[2])
    r, v = perturber
    sim.add(m=5 * GM_EARTH, x=r[0], y=r[1], z=r[2], vx=v[0], vy=v[1], vz=v[2])
    r, v = tracked
    sim.add(m=0.0, x=r[0], y=r[1], z=r[2], vx=v[0], vy=v[1], vz=v[2])
    sim.N_active = 6
    if variations:
        for particle in (6, 5):
            for coord in ("x", "y", "z", "vx", "vy", "vz"):
                var = sim.add_variation()
                setattr(var.particles[particle], coord, 1.0)
        var = sim.add_variation()
        var.particles[5].m = 1.0
    if integrator == "whfast":
        sim.move_to_com()
    return sim


def evaluate(integrator, dt=None, variations=False):
    """One evaluation: both legs from T0; returns heliocentric tracked positions."""
    out = np.zeros((len(epochs), 3))
    for direction in (1, -1):
        sim = build(integrator, dt, variations)
        if dt is not None:
            sim.dt = direction * dt
        elif direction < 0:
            sim.dt = -abs(sim.dt) if sim.dt else -1.0
        idx = [i for i, t in enumerate(epochs) if (t - T0) * direction >= 0]
        idx.sort(key=lambda i: direction * epochs[i])
        for i in idx:
            # exact_finish_time shortens the step before an epoch (for WHFast
            # this costs its symplectic property, not its accuracy here).
            sim.integrate(epochs[i], exact_finish_time=1)
            s, p = sim.particles[0], sim.particles[6]
            out[i] = (p.x - s.x, p.y - s.y, p.z - s.z)
    return out


def timed(fn):
    samples = []
    for _ in range(REPEATS):
        start = time.perf_counter()
        result = fn()
        samples.append((time.perf_counter() - start) * 1e3)
    return float(np.median(samples)), result


ias15_ms, ias15 = timed(lambda: evaluate("ias15"))
whfast_ms, whfast = timed(lambda: evaluate("whfast", dt=40.0))
ias15_var_ms, _ = timed(lambda: evaluate("ias15", variations=True))
whfast_var_ms, _ = timed(lambda: evaluate("whfast", dt=40.0, variations=True))
mas = math.pi / 180 / 3600 / 1000
whfast_err = max(
    math.acos(min(1.0, np.dot(a, b) / np.linalg.norm(a) / np.linalg.norm(b))) / mas for a, b in zip(whfast, ias15))

print(f"REBOUND {rebound.__version__}, median of {REPEATS} evaluations, rebuilding the simulation each time:")
print(f"  IAS15 (epsilon 1e-9)           {ias15_ms:8.3f} ms")
print(f"  WHFast (dt 40 d)               {whfast_ms:8.3f} ms   (differs from IAS15 by {whfast_err:.3f} mas)")
print(f"  IAS15 + 13 variations          {ias15_var_ms:8.3f} ms")
print(f"  WHFast + 13 variations         {whfast_var_ms:8.3f} ms")

run = subprocess.run(["cargo", "bench", "--bench", "propagation", "--", "--json", "--quick"],
                     capture_output=True, text=True, check=True)
latens = {}
for line in run.stdout.splitlines():
    if line.startswith("{"):
        row = json.loads(line)
        latens[row["case"]] = row
print("Latens (same machine, same run):")
for case, row in latens.items():
    ref = ias15_var_ms if "jacobian" in case else ias15_ms
    print(f"  {case:<40} {row['median_ms']:8.3f} ms  error {row['max_error_mas']:.4f} mas  "
          f"speed-up vs IAS15{' + variations' if 'jacobian' in case else ''}: {ref / row['median_ms']:6.1f}x")
