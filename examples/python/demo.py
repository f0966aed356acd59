# %% [markdown]
# # Latens from Python: the demo scenario end to end
#
# The invented survey of `scenarios/demo.toml` follows the invented distant
# body Vesk for twenty years while the invented planet Orla pulls on it.
# This walks the pipeline cell by cell, as one would in a notebook: simulate
# the survey, fit Vesk's orbit, search for a perturber, sample its
# posterior, and draw the residuals and the search region with matplotlib.
#
# Run as a script (`python examples/python/demo.py [OUT_DIR]`) or open it in
# an editor that runs `# %%` cells. `LATENS_QUICK=1` uses small settings
# (seconds instead of about a minute and a half; for tests).

# %%
import os
import sys
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import numpy as np

import latens

ROOT = Path(__file__).resolve().parents[2]
OUT = Path(sys.argv[1]) if len(sys.argv) > 1 else ROOT / "output" / "python-demo"
OUT.mkdir(parents=True, exist_ok=True)
QUICK = os.environ.get("LATENS_QUICK") == "1"
search = dict(nulls=400, directions=48, distances=6) if QUICK else dict(nulls=500)
sampler = dict(steps=300, walkers=14, temperatures=4) if QUICK else dict(steps=800)

# %% [markdown]
# ## Simulate the survey and read it as a study
# `simulate` returns what `latens simulate` writes (the observations as
# Latens CSV text, the sites, the truth); a pandas DataFrame of the
# observations would do as well (`latens.Study(frame, sites=...)`).

# %%
(vesk,) = latens.simulate(ROOT / "scenarios" / "demo.toml")
truth = vesk["truth"]["perturber"]["at_search_epoch"]
study = latens.study_of(vesk)
print(study)

# %% [markdown]
# ## The reference orbit and its O-C residuals

# %%
fit = latens.reference_fit(study)
print(fit)
res = fit.to_pandas()
years = 2000 + res["t_tdb_days"] / 365.25

# %% [markdown]
# ## Is anything there? The search and its false-alarm probability

# %%
det = latens.detect(study, seed=1, progress=not QUICK, **search)
print(det.verdict)

# %% [markdown]
# ## The perturber's posterior, and where to look

# %%
post = latens.posterior(study, det, seed=1, progress=not QUICK, **sampler)
print(post)
if not post.converged:
    print("The posterior has NOT converged: do not trust its region; run more steps.")
print("Explanation:", post.explanation)
sky = latens.sky_products(study, det, post)
for w in sky.warnings:
    print("warning:", w)
sky.write_map(OUT / "skymap.fits")
sky.write_region(OUT / "region90.fits", level=0.9)
sky.write_region(OUT / "region50.fits", level=0.5)
s = sky.summary
print(f"50% region {s['area50_deg2']:.0f} sq deg, 90% region {s['area90_deg2']:.0f} sq deg")
samples = post.to_pandas()
m = samples["mass_earth"]
print(f"mass {m.median():.1f} Earth masses (68%: {m.quantile(0.16):.1f} to {m.quantile(0.84):.1f}); "
      f"true {vesk['truth']['perturber']['mass_earth']}")

# %% [markdown]
# ## Draw: the residuals, and the samples against the search region

# %%
from mocpy import MOC
import astropy.units as u

r50 = MOC.from_fits(OUT / "region50.fits")
r90 = MOC.from_fits(OUT / "region90.fits")
lon = samples["ra_deg"].to_numpy() * u.deg
lat = samples["dec_deg"].to_numpy() * u.deg
in50 = r50.contains_lonlat(lon, lat)
in90 = r90.contains_lonlat(lon, lat) & ~in50

null = det.to_pandas()
fig, axes = plt.subplots(2, 1, figsize=(9, 5.5), sharex=True)
for ax, col, name in zip(axes, ["ra_arcsec", "dec_arcsec"], ["RA cos(Dec)", "Dec"]):
    used = res["used"] == 1
    ax.errorbar(years[used], res[col][used], yerr=res["sigma_" + col.split("_")[0] + "_arcsec"][used],
                fmt=".", ms=2, lw=0.4, alpha=0.6, label="O-C, reference orbit (no perturber)")
    ax.axhline(0, color="k", lw=0.6)
    ax.set_ylabel(f"O-C {name} (arcsec)")
axes[0].legend(loc="upper left", fontsize=8)
axes[1].set_xlabel("year")
axes[1].xaxis.set_major_formatter("{x:.0f}")
fig.suptitle(f"Vesk: chi-square {fit.chi2:.0f} for {fit.dof} degrees of freedom without a perturber")
fig.tight_layout()
fig.savefig(OUT / "residuals.png", dpi=110)

fig, ax = plt.subplots(figsize=(8, 5.2))
out = ~(in50 | in90)
ax.scatter(samples["ra_deg"][out], samples["dec_deg"][out], s=3, c="0.7", label="posterior samples outside 90%")
ax.scatter(samples["ra_deg"][in90], samples["dec_deg"][in90], s=3, c="tab:blue", label="inside the 90% region")
ax.scatter(samples["ra_deg"][in50], samples["dec_deg"][in50], s=3, c="tab:orange", label="inside the 50% region")
ax.plot(truth["ra_deg"], truth["dec_deg"], marker="*", ms=16, mec="k", mfc="gold", ls="", label="true place (simulation)")
ax.set_xlim(360, 0)
ax.set_ylim(-90, 90)
ax.set_xlabel("RA (deg)")
ax.set_ylabel("Dec (deg)")
ax.set_title(f"Where to look at {study.search_epoch_utc[:10]}: "
             f"{s['area50_deg2']:.0f} / {s['area90_deg2']:.0f} sq deg (50% / 90%)")
legend = ax.legend(loc="lower left", fontsize=8)
for handle in legend.legend_handles[:3]:
    handle.set_sizes([20])
ax.grid(lw=0.3)
fig.tight_layout()
fig.savefig(OUT / "sky.png", dpi=110)
inside = bool(r90.contains_lonlat(truth["ra_deg"] * u.deg, truth["dec_deg"] * u.deg)[0])
print(f"The true place is {'inside' if inside else 'OUTSIDE'} the 90% region.")
print(f"Wrote {OUT / 'residuals.png'}, {OUT / 'sky.png'}, the map and the regions.")
