"""Astrometric fixtures for tests/reference_astrometry.rs.

Source: skyfield (PyPI) with the JPL DE421 ephemeris of the PyPI package
skyfield-data; scipy (PyPI) for chi-square tail probabilities. Run from the
repository root:
    pip install skyfield skyfield-data scipy numpy
    python tests/data/astrometry/gen.py
Writes into tests/data/astrometry/:
  saturn.csv      astrometric ICRF RA/Dec of the Saturn barycentre (light-time
                  corrected, no aberration or deflection: skyfield's
                  `observe(...).radec()`) every 15 days from 2001 to 2023, seen
                  from the geocentre and (every fifth one) from an invented
                  site, with seeded Gaussian noise of 0.05 arcsec; in Latens's
                  observation format.
  sites.csv       the invented site (geodetic, WGS84).
  site_gcrs.csv   skyfield's GCRS position of that site (km) at 20 instants,
                  to check Latens's site model (which neglects nutation, polar
                  motion and UT1-UTC).
  chi2_sf.csv     scipy.stats.chi2.sf(x, dof) for a grid of x and dof.
  uranus.csv      astrometric positions of the Uranus barycentre from the
                  geocentre every 15 days 2001-2023, 0.05 arcsec noise (seeded).
  neptune_2024.csv  Neptune's astrometric place on 2024-06-01 (the check value
                  for recovering Neptune from Uranus's residuals).
"""
import os

import numpy as np
from scipy.stats import chi2
from skyfield.api import load, wgs84
from skyfield_data import get_skyfield_data_path

HERE = os.path.dirname(os.path.abspath(__file__))
ts = load.timescale(builtin=True)
import warnings
from skyfield.iokit import Loader
warnings.simplefilter("ignore")  # skyfield-data's Earth-orientation table expiry notice
loader = Loader(get_skyfield_data_path())
planets = loader("de421.bsp")
earth, saturn = planets["earth"], planets["saturn barycenter"]
SITE = dict(name="hollow-ridge", lat=-24.6, lon=-70.4, height=2600.0)  # invented
site = earth + wgs84.latlon(SITE["lat"], SITE["lon"], elevation_m=SITE["height"])

rng = np.random.default_rng(6)
SIGMA = 0.05
with open(os.path.join(HERE, "sites.csv"), "w") as f:
    f.write("name,lon_deg,lat_deg,height_m\n")
    f.write(f"{SITE['name']},{SITE['lon']},{SITE['lat']},{SITE['height']}\n")

start = ts.utc(2001, 1, 10, 3, 17, 0)
with open(os.path.join(HERE, "saturn.csv"), "w") as f:
    f.write("# Saturn barycentre from DE421 via skyfield, noise 0.05 arcsec (seeded); see gen.py\n")
    f.write("epoch_utc,ra_deg,dec_deg,sigma_ra_arcsec,sigma_dec_arcsec,site\n")
    k = 0
    while True:
        t = ts.tt_jd(start.tt + 15.0 * k + 0.37 * (k % 3))
        if t.utc_datetime().year >= 2024:
            break
        topo = k % 5 == 4
        observer = site if topo else earth
        ra, dec, _ = observer.at(t).observe(saturn).radec()
        dra = rng.standard_normal() * SIGMA / 3600.0 / np.cos(dec.radians)
        ddec = rng.standard_normal() * SIGMA / 3600.0
        u = t.utc
        iso = f"{int(u[0]):04d}-{int(u[1]):02d}-{int(u[2]):02d}T{int(u[3]):02d}:{int(u[4]):02d}:{u[5]:09.6f}Z"
        # Recompute the instant from the rounded text so the row is exact.
        t = ts.utc(int(u[0]), int(u[1]), int(u[2]), int(u[3]), int(u[4]), float(f"{u[5]:.6f}"))
        ra, dec, _ = observer.at(t).observe(saturn).radec()
        f.write(f"{iso},{float((ra._degrees + dra) % 360.0)!r},{float(dec.degrees + ddec)!r},{SIGMA},{SIGMA},"
                f"{SITE['name'] if topo else 'geocenter'}\n")
        k += 1

# Uranus from the geocentre, for recovering Neptune from its residuals.
uranus = planets["uranus barycenter"]
rng_u = np.random.default_rng(7)
with open(os.path.join(HERE, "uranus.csv"), "w") as f:
    f.write("# Uranus barycentre from DE421 via skyfield, noise 0.05 arcsec (seeded); see gen.py\n")
    f.write("epoch_utc,ra_deg,dec_deg,sigma_ra_arcsec,sigma_dec_arcsec\n")
    k = 0
    while True:
        t0 = ts.tt_jd(start.tt + 15.0 * k)
        if t0.utc_datetime().year >= 2024:
            break
        u = t0.utc
        iso = f"{int(u[0]):04d}-{int(u[1]):02d}-{int(u[2]):02d}T{int(u[3]):02d}:{int(u[4]):02d}:{u[5]:09.6f}Z"
        t = ts.utc(int(u[0]), int(u[1]), int(u[2]), int(u[3]), int(u[4]), float(f"{u[5]:.6f}"))
        ra, dec, _ = earth.at(t).observe(uranus).radec()
        dra = rng_u.standard_normal() * SIGMA / 3600.0 / np.cos(dec.radians)
        ddec = rng_u.standard_normal() * SIGMA / 3600.0
        f.write(f"{iso},{float((ra._degrees + dra) % 360.0)!r},{float(dec.degrees + ddec)!r},{SIGMA},{SIGMA}\n")
        k += 1
# Uranus 1900-2024 (through the 1993 conjunction with Neptune), every 60 days,
# for the long-arc recovery of Neptune (the test reads the planets from the
# embedded VSOP87A, so no ephemeris file is needed for this span).
rng_l = np.random.default_rng(8)
with open(os.path.join(HERE, "uranus_1900_2024.csv"), "w") as f:
    f.write("# Uranus barycentre from DE421 via skyfield, every 60 days 1900-2024, noise 0.05 arcsec (seeded); see gen.py\n")
    f.write("epoch_utc,ra_deg,dec_deg,sigma_ra_arcsec,sigma_dec_arcsec\n")
    t_first = ts.utc(1900, 2, 3, 5, 0, 0)
    k = 0
    while True:
        t0 = ts.tt_jd(t_first.tt + 60.0 * k)
        if t0.utc_datetime().year >= 2024:
            break
        u = t0.utc
        iso = f"{int(u[0]):04d}-{int(u[1]):02d}-{int(u[2]):02d}T{int(u[3]):02d}:{int(u[4]):02d}:{u[5]:09.6f}Z"
        t = ts.utc(int(u[0]), int(u[1]), int(u[2]), int(u[3]), int(u[4]), float(f"{u[5]:.6f}"))
        ra, dec, _ = earth.at(t).observe(uranus).radec()
        dra = rng_l.standard_normal() * SIGMA / 3600.0 / np.cos(dec.radians)
        ddec = rng_l.standard_normal() * SIGMA / 3600.0
        f.write(f"{iso},{float((ra._degrees + dra) % 360.0)!r},{float(dec.degrees + ddec)!r},{SIGMA},{SIGMA}\n")
        k += 1

# Neptune's astrometric place at a later epoch, the check value for the search.
t_later = ts.utc(2024, 6, 1)
ra, dec, dist = earth.at(t_later).observe(planets["neptune barycenter"]).radec()
with open(os.path.join(HERE, "neptune_2024.csv"), "w") as f:
    f.write("epoch_utc,ra_deg,dec_deg,distance_au\n")
    f.write(f"2024-06-01T00:00:00Z,{float(ra._degrees)!r},{float(dec.degrees)!r},{float(dist.au)!r}\n")

with open(os.path.join(HERE, "site_gcrs.csv"), "w") as f:
    f.write("epoch_utc,x_km,y_km,z_km\n")
    for k in range(20):
        t = ts.utc(1995 + 1.5 * k, 3, 1 + k, 7, 11 * k % 60, 0)
        u = t.utc
        iso = f"{int(u[0]):04d}-{int(u[1]):02d}-{int(u[2]):02d}T{int(u[3]):02d}:{int(u[4]):02d}:{u[5]:09.6f}Z"
        p = wgs84.latlon(SITE["lat"], SITE["lon"], elevation_m=SITE["height"]).at(t).position.km
        f.write(f"{iso},{float(p[0])!r},{float(p[1])!r},{float(p[2])!r}\n")

with open(os.path.join(HERE, "chi2_sf.csv"), "w") as f:
    f.write("x,dof,sf\n")
    for dof in (1, 2, 5, 30, 400, 2000):
        for q in (0.2, 0.7, 1.0, 1.3, 2.5):
            x = q * dof + (0.5 if dof == 1 else 0.0)
            f.write(f"{x!r},{dof},{float(chi2.sf(x, dof))!r}\n")
print("done")
