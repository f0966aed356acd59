"""Outside clients read Latens's sky files: mocpy opens the credible-region
MOC (FITS and JSON) and finds the same area (within 1%) and the same
inside/outside answers for the test points; astropy reads the multi-order
FITS map, whose probabilities (density x pixel area) sum to 1 within 1e-6.

The files are written by `cargo test --test skymap` into
target/tmp/interop; .ci/run installs mocpy and astropy and runs this after
the tests:
    python tests/interop/check_sky_files.py target/tmp/interop
"""
import json
import math
import sys

import numpy as np
from astropy import units as u
from astropy.coordinates import Latitude, Longitude
from astropy.table import Table
from mocpy import MOC

folder = sys.argv[1] if len(sys.argv) > 1 else "target/tmp/interop"
expected = json.load(open(f"{folder}/expected.json"))
points = np.genfromtxt(f"{folder}/points.csv", delimiter=",", names=True)
failures = []

for name, moc in [
    ("FITS", MOC.load(f"{folder}/region90.fits", format="fits")),
    ("JSON", MOC.load(f"{folder}/region90.json", format="json")),
]:
    area = moc.sky_fraction * 4 * math.pi * (180 / math.pi) ** 2
    rel = abs(area - expected["area_deg2"]) / expected["area_deg2"]
    print(f"mocpy, MOC {name}: area {area:.4f} deg2 against Latens {expected['area_deg2']:.4f} ({rel:.2e} relative)")
    if rel > 0.01:
        failures.append(f"MOC {name} area off by {rel:.3%}")
    inside = moc.contains_lonlat(Longitude(points["ra_deg"] * u.deg), Latitude(points["dec_deg"] * u.deg))
    disagree = int(np.sum(inside != (points["inside"] > 0.5)))
    print(f"mocpy, MOC {name}: {len(points) - disagree} of {len(points)} test points agree ({int(np.sum(inside))} inside)")
    if disagree:
        failures.append(f"MOC {name}: {disagree} points disagree")

table = Table.read(f"{folder}/skymap.fits", format="fits")
uniq = np.asarray(table["UNIQ"], dtype=np.int64)
order = (np.floor(np.log2(uniq / 4) / 2)).astype(int)
area_sr = 4 * math.pi / (12 * 4.0 ** order)
total = float(np.sum(np.asarray(table["PROBDENSITY"]) * area_sr))
print(f"astropy, multi-order map: {len(table)} pixels, unit {table['PROBDENSITY'].unit}, probabilities sum to {total:.12f}")
if abs(total - 1) > 1e-6:
    failures.append(f"map probabilities sum to {total}")
sky = float(np.sum(area_sr))
if abs(sky - 4 * math.pi) > 1e-9:
    failures.append(f"map pixels cover {sky} sr, not 4 pi")
if table.meta.get("ORDERING") != "NUNIQ" or table.meta.get("PIXTYPE") != "HEALPIX":
    failures.append(f"map header: {table.meta}")

if failures:
    print("FAILED:", "; ".join(failures))
    sys.exit(1)
print("interop: all checks passed")
