"""Geodetic latitude and height of places given by geocentric parallax
constants (rho cos phi', rho sin phi' in WGS84 equatorial radii), computed
with astropy's EarthLocation (an outside reference). Writes parallax.csv,
read by tests/inputs.rs. Run: python3 parallax_astropy.py (astropy 6 or 7)."""
import csv
import astropy
from astropy.coordinates import EarthLocation
import astropy.units as u

A = 6378137.0  # WGS84 equatorial radius, m
places = [  # geodetic lon, lat (deg), height (m): invented places spread over the globe
    (-70.21, -30.47, 2380.0),
    (155.47, 19.82, 4205.0),
    (10.0, 51.5, 120.0),
    (-17.88, 28.76, 2326.0),
    (0.0, 0.0, 0.0),
    (30.0, -89.5, 2800.0),
    (200.0, 67.3, -20.0),
]
with open("parallax.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["rho_cos_phi", "rho_sin_phi", "lat_deg", "height_m"])
    for lon, lat, h in places:
        loc = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, h * u.m, ellipsoid="WGS84")
        x, y, z = (c.to_value(u.m) for c in loc.to_geocentric())
        rc, rs = (x * x + y * y) ** 0.5 / A, z / A
        back = EarthLocation.from_geocentric(x * u.m, y * u.m, z * u.m).to("m")
        lon2, lat2, h2 = back.to_geodetic("WGS84")
        w.writerow([repr(float(rc)), repr(float(rs)), repr(float(lat2.to_value(u.deg))), repr(float(h2.to_value(u.m)))])
print("astropy", astropy.__version__)
