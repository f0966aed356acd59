"""Latens against the reference Python path on the same workloads, in the
same run, with Latens's speed-up for each. Installs what it needs with pip.

Workloads (docs/performance.md):
  W1(a) propagation   REBOUND IAS15 (benches/compare/rebound_w1.py) against
                      `cargo bench --bench propagation`;
  posterior           emcee driving a REBOUND likelihood (a tracked body and
                      a perturber under the Sun and the giant planets, 600
                      epochs), timed over a few hundred evaluations and
                      extrapolated to 10^6, against `cargo bench --bench
                      posterior` (10^6 evaluations through the linear kernel);
  orbit fit           scipy.optimize.least_squares fitting the tracked
                      body's 6-vector state to 300 heliocentric directions
                      with a REBOUND model and finite-difference Jacobian,
                      against `cargo bench --bench fit` (Levenberg-Marquardt
                      on the full observation model with variational
                      partials; Latens does more work per evaluation: light
                      time, topocentric geometry).

Run from the repository root (not part of the tests):
    python benches/compare/compare_all.py
"""
import json
import os
import re
import subprocess
import sys
import time

subprocess.run([sys.executable, "-m", "pip", "install", "--quiet", "--disable-pip-version-check",
                "rebound", "emcee", "scipy", "numpy", "jplephem", "skyfield-data"], check=True)

import emcee  # noqa: E402
import numpy as np  # noqa: E402
import rebound  # noqa: E402
import scipy  # noqa: E402
from scipy.optimize import least_squares  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
sys.argv = [sys.argv[0]]
print("== W1(a) propagation: REBOUND against Latens")
subprocess.run([sys.executable, os.path.join(HERE, "rebound_w1.py")], check=True)

# Reuse the W1(a) set-up (giant planets from DE421, the invented bodies).
import importlib.util  # noqa: E402
spec = importlib.util.spec_from_file_location("w1", os.path.join(HERE, "rebound_w1.py"))
source = open(os.path.join(HERE, "rebound_w1.py")).read()
setup = source.split("def timed(")[0]
w1 = {}
exec(compile(setup, "rebound_w1.py", "exec"), w1)
T0, GM_EARTH = w1["T0"], w1["GM_EARTH"]
epochs600 = np.array([T0 - 15 * 365.25 + 365.25 * y + 120.0 + 1.5 * n for y in range(30) for n in range(20)])


def positions(state, gm, pstate, epochs):
    """Heliocentric tracked positions at `epochs` (IAS15, both legs from T0)."""
    out = np.zeros((len(epochs), 3))
    for direction in (1, -1):
        sim = rebound.Simulation()
        sim.G = 1.0
        sim.t = T0
        sim.add(m=w1["GM_SUN"])
        for g, r, v in w1["giants"]:
            sim.add(m=g, x=r[0], y=r[1], z=r[2], vx=v[0], vy=v[1], vz=v[2])
        if gm is not None:
            sim.add(m=gm, x=pstate[0], y=pstate[1], z=pstate[2], vx=pstate[3], vy=pstate[4], vz=pstate[5])
        sim.add(m=0.0, x=state[0], y=state[1], z=state[2], vx=state[3], vy=state[4], vz=state[5])
        sim.N_active = sim.N - 1
        if direction < 0:
            sim.dt = -1.0
        idx = sorted([i for i, t in enumerate(epochs) if (t - T0) * direction >= 0], key=lambda i: direction * epochs[i])
        for i in idx:
            sim.integrate(epochs[i], exact_finish_time=1)
            s, p = sim.particles[0], sim.particles[sim.N - 1]
            out[i] = (p.x - s.x, p.y - s.y, p.z - s.z)
    return out


tracked = np.concatenate(w1["tracked"])
pert = np.concatenate(w1["perturber"])
truth = positions(tracked, 5 * GM_EARTH, pert, epochs600)
rng = np.random.default_rng(1)
sigma = 0.05 / 206264.8
data = truth / np.linalg.norm(truth, axis=1)[:, None] + rng.normal(0, sigma, truth.shape)


def log_likelihood(theta):
    lnm, x, y, z, vx, vy, vz = theta
    model = positions(tracked, np.exp(lnm) * GM_EARTH, np.array([x, y, z, vx, vy, vz]), epochs600)
    u = model / np.linalg.norm(model, axis=1)[:, None]
    return -0.5 * np.sum((u - data) ** 2) / sigma ** 2


print("\n== posterior: emcee + REBOUND likelihood against Latens")
nwalkers, nsteps = 32, 4
p0 = np.array([np.log(5.0), *pert]) + 1e-6 * rng.normal(size=(nwalkers, 7))
sampler = emcee.EnsembleSampler(nwalkers, 7, log_likelihood)
start = time.perf_counter()
sampler.run_mcmc(p0, nsteps)
seconds = time.perf_counter() - start
per_eval = seconds / (nwalkers * (nsteps + 1))
hours = per_eval * 1e6 / 3600
print(f"  emcee {emcee.__version__} + REBOUND {rebound.__version__}: {per_eval * 1e3:.1f} ms per evaluation "
      f"({nwalkers * (nsteps + 1)} timed); 10^6 evaluations would take {hours:.1f} hours on one core")
run = subprocess.run(["cargo", "bench", "--bench", "posterior"], capture_output=True, text=True, check=True)
m = re.search(r"in ([0-9.]+) s wall on (\d+) threads", run.stdout)
latens_s = float(m.group(1))
print(f"  Latens: 10^6 evaluations in {latens_s:.1f} s on {m.group(2)} threads: "
      f"speed-up {hours * 3600 / latens_s:,.0f}x ({hours * 3600 / latens_s / int(m.group(2)):,.0f}x per core)")

print("\n== orbit fit: scipy least_squares + REBOUND against Latens")
epochs300 = w1["epochs"]
truth300 = positions(tracked, None, None, epochs300)
obs300 = truth300 / np.linalg.norm(truth300, axis=1)[:, None] + rng.normal(0, sigma, truth300.shape)
km = 1 / 149597870.7
start_state = tracked + np.array([1000 * km, 0, 0, 0, 86400e-3 * km, 0])
scale = np.array([1, 1, 1, 1e-3, 1e-3, 1e-3])


def residuals(p):
    model = positions(start_state + p * scale * 1e-4, None, None, epochs300)
    u = model / np.linalg.norm(model, axis=1)[:, None]
    return ((u - obs300) / sigma).ravel()


start = time.perf_counter()
fit = least_squares(residuals, np.zeros(6), method="lm", diff_step=1e-6)
scipy_ms = (time.perf_counter() - start) * 1e3
print(f"  scipy {scipy.__version__} least_squares (lm, 2-point Jacobian): {scipy_ms:.0f} ms, "
      f"{fit.nfev} evaluations, chi2/dof {np.sum(fit.fun ** 2) / (fit.fun.size - 6):.3f}")
run = subprocess.run(["cargo", "bench", "--bench", "fit"], capture_output=True, text=True, check=True)
row = json.loads([l for l in run.stdout.splitlines() if l.startswith("{")][-1])
print(f"  Latens reference-orbit fit: {row['median_ms']:.1f} ms ({row['iterations']} iterations, "
      f"{row['observations']} observations): speed-up {scipy_ms / row['median_ms']:.1f}x")
