"""Two-body fixtures for tests/reference_kepler.rs, made with REBOUND (PyPI).

Run from the repository root:
    pip install rebound numpy
    python tests/data/kepler/gen.py
Writes into tests/data/kepler/:
  elements_to_state.csv  random elliptic and hyperbolic element sets (angles in
      radians, a in au, negative for hyperbolae as REBOUND uses) around a central
      GM (au^3/day^2, as REBOUND's G*M with G=1), and the state REBOUND builds.
  state_to_elements.csv  random states and the elements REBOUND computes.
  propagation.csv        a state, a time span and the state REBOUND's IAS15
      integrator reaches (test particle around a fixed central mass).
"""
import math
import os

import numpy as np
import rebound

HERE = os.path.dirname(os.path.abspath(__file__))
rng = np.random.default_rng(2)
GM_SUN = 0.01720209895 ** 2  # Gaussian constant squared, au^3/day^2


def sim_with(gm):
    sim = rebound.Simulation()
    sim.G = 1.0
    sim.add(m=gm)
    return sim


def random_elements(hyperbolic):
    gm = GM_SUN * (10 ** rng.uniform(-3, 1))
    if hyperbolic:
        e = rng.uniform(1.05, 4.0)
        a = -(10 ** rng.uniform(-1, 1.5))
        # keep the true anomaly inside the asymptotes
        fmax = math.acos(-1.0 / e)
        f = rng.uniform(-0.9 * fmax, 0.9 * fmax)
    else:
        e = rng.uniform(0.0, 0.97)
        a = 10 ** rng.uniform(-1, 2.5)
        f = rng.uniform(-math.pi, math.pi)
    inc = rng.uniform(0.0, math.pi)
    Omega = rng.uniform(0.0, 2 * math.pi)
    omega = rng.uniform(0.0, 2 * math.pi)
    return gm, a, e, inc, Omega, omega, f


with open(os.path.join(HERE, "elements_to_state.csv"), "w") as out:
    out.write("gm,a,e,inc,node,peri,true_anomaly,x,y,z,vx,vy,vz\n")
    for k in range(120):
        gm, a, e, inc, Om, om, f = random_elements(hyperbolic=(k % 4 == 3))
        sim = sim_with(gm)
        sim.add(m=0.0, a=a, e=e, inc=inc, Omega=Om, omega=om, f=f, primary=sim.particles[0])
        p = sim.particles[1]
        out.write(",".join(repr(float(v)) for v in
                           (gm, a, e, inc, Om, om, f, p.x, p.y, p.z, p.vx, p.vy, p.vz)) + "\n")

with open(os.path.join(HERE, "state_to_elements.csv"), "w") as out:
    out.write("gm,x,y,z,vx,vy,vz,a,e,inc,node,peri,true_anomaly,mean_anomaly\n")
    for k in range(120):
        gm, a, e, inc, Om, om, f = random_elements(hyperbolic=(k % 4 == 3))
        sim = sim_with(gm)
        sim.add(m=0.0, a=a, e=e, inc=inc, Omega=Om, omega=om, f=f, primary=sim.particles[0])
        p = sim.particles[1]
        o = p.orbit(primary=sim.particles[0])
        out.write(",".join(repr(float(v)) for v in
                           (gm, p.x, p.y, p.z, p.vx, p.vy, p.vz,
                            o.a, o.e, o.inc, o.Omega, o.omega, o.f, o.M)) + "\n")

with open(os.path.join(HERE, "propagation.csv"), "w") as out:
    out.write("gm,x,y,z,vx,vy,vz,dt_days,x1,y1,z1,vx1,vy1,vz1\n")
    for k in range(40):
        gm, a, e, inc, Om, om, f = random_elements(hyperbolic=(k % 4 == 3))
        sim = sim_with(gm)
        sim.integrator = "ias15"
        sim.add(m=0.0, a=a, e=e, inc=inc, Omega=Om, omega=om, f=f, primary=sim.particles[0])
        p0 = sim.particles[1]
        s0 = (p0.x, p0.y, p0.z, p0.vx, p0.vy, p0.vz)
        period = 2 * math.pi * math.sqrt(abs(a) ** 3 / gm)
        dt = rng.uniform(-3.0, 3.0) * period
        sim.integrate(dt, exact_finish_time=1)
        p = sim.particles[1]
        out.write(",".join(repr(float(v)) for v in
                           (gm, *s0, dt, p.x, p.y, p.z, p.vx, p.vy, p.vz)) + "\n")
print("done")
