"""Least-squares fixtures for tests/solvers.rs.

1. NIST StRD nonlinear regression problems Misra1a, BoxBOD and MGH10 (data and
   certified values typed from memory of the NIST pages; the script checks that
   scipy's optimum on these data reproduces the certified values, which it
   could not if a datum were mistyped). Written to nist.csv.
2. A weighted fit solved by scipy.optimize.least_squares (PyPI scipy) to
   full precision, for an independent comparison: scipy.csv.

Run from the repository root:
    pip install scipy numpy
    python tests/data/lm/gen.py
"""
import os

import numpy as np
from scipy.optimize import least_squares

HERE = os.path.dirname(os.path.abspath(__file__))

PROBLEMS = {
    "misra1a": dict(
        x=[77.6, 114.9, 141.1, 190.8, 239.9, 289.0, 332.8, 378.4, 434.8, 477.3, 536.8, 593.1, 689.1, 760.0],
        y=[10.07, 14.73, 17.94, 23.93, 29.61, 35.18, 40.02, 44.82, 50.76, 55.05, 61.01, 66.40, 75.47, 81.78],
        f=lambda b, x: b[0] * (1 - np.exp(-b[1] * x)),
        starts=[[500, 1e-4], [250, 5e-4]],
        certified=[2.3894212918e02, 5.5015643181e-04],
        rss=1.2455138894e-01,
    ),
    "boxbod": dict(
        x=[1, 2, 3, 5, 7, 10],
        y=[109, 149, 149, 191, 213, 224],
        f=lambda b, x: b[0] * (1 - np.exp(-b[1] * x)),
        starts=[[1, 1], [100, 0.75]],
        certified=[2.1380940889e02, 5.4723748542e-01],
        rss=1.1680088766e03,
    ),
    "mgh10": dict(
        x=list(range(50, 130, 5)),
        y=[34780, 28610, 23650, 19630, 16370, 13720, 11540, 9744, 8261, 7030, 6005, 5147, 4427, 3820, 3307, 2872],
        f=lambda b, x: b[0] * np.exp(b[1] / (x + b[2])),
        starts=[[2, 400000, 25000], [0.02, 4000, 250]],
        certified=[5.6096364710e-03, 6.1813463463e03, 3.4522363462e02],
        rss=8.7945855171e01,
    ),
}

with open(os.path.join(HERE, "nist.csv"), "w") as out:
    out.write("problem,kind,values\n")
    for name, p in PROBLEMS.items():
        x, y = np.array(p["x"], float), np.array(p["y"], float)
        cert = np.array(p["certified"])
        fit = least_squares(lambda b: p["f"](b, x) - y, cert * 1.001, x_scale="jac", xtol=1e-15, ftol=1e-15, gtol=1e-15)
        rel = np.max(np.abs(fit.x - cert) / np.abs(cert))
        rss = float(np.sum(fit.fun ** 2))
        print(f"{name}: scipy optimum within {rel:.1e} of the certified values; RSS {rss:.10e} (certified {p['rss']:.10e})")
        assert rel < 1e-6, "a datum or certified value is mistyped"
        out.write(f"{name},x," + " ".join(repr(v) for v in p["x"]) + "\n")
        out.write(f"{name},y," + " ".join(repr(v) for v in p["y"]) + "\n")
        for k, s in enumerate(p["starts"]):
            out.write(f"{name},start{k + 1}," + " ".join(repr(float(v)) for v in s) + "\n")
        out.write(f"{name},certified," + " ".join(repr(v) for v in p["certified"]) + "\n")
        out.write(f"{name},rss,{p['rss']!r}\n")

# A weighted exponential-plus-sine model with noise, solved by scipy.
rng = np.random.default_rng(4)
t = np.linspace(0, 10, 60)
truth = np.array([2.5, -0.3, 0.8, 1.7, 0.4])
model = lambda b, t: b[0] * np.exp(b[1] * t) + b[2] * np.sin(b[3] * t + b[4])
sigma = 0.02 + 0.03 * rng.random(60)
y = model(truth, t) + sigma * rng.standard_normal(60)
fit = least_squares(lambda b: (model(b, t) - y) / sigma, [2.0, -0.2, 1.0, 1.6, 0.0], xtol=1e-15, ftol=1e-15, gtol=1e-15, method="lm")
jac = fit.jac
cov = np.linalg.inv(jac.T @ jac)
with open(os.path.join(HERE, "scipy.csv"), "w") as out:
    out.write("kind,values\n")
    out.write("t," + " ".join(repr(float(v)) for v in t) + "\n")
    out.write("y," + " ".join(repr(float(v)) for v in y) + "\n")
    out.write("sigma," + " ".join(repr(float(v)) for v in sigma) + "\n")
    out.write("start," + " ".join(repr(v) for v in [2.0, -0.2, 1.0, 1.6, 0.0]) + "\n")
    out.write("solution," + " ".join(repr(float(v)) for v in fit.x) + "\n")
    out.write("chi2," + repr(float(np.sum(fit.fun ** 2))) + "\n")
    out.write("sigmas," + " ".join(repr(float(v)) for v in np.sqrt(np.diag(cov))) + "\n")
print("scipy fit:", fit.x, "chi2", np.sum(fit.fun ** 2))
