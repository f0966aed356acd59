"""Reference UTC -> TT -> TDB conversions for tests/reference_time.rs.

Source: skyfield (PyPI) with its builtin leap-second table. Run:
    pip install skyfield pyerfa
    python tests/data/time/gen.py > tests/data/time/utc_tdb.csv
Columns: the ISO 8601 UTC string Latens parses; TT and TDB as seconds since
J2000.0 (2000-01-01T12:00:00 in that scale), split into whole days since J2000
and the remaining seconds so nothing is lost to float rounding; and, for the
record, TAI-UTC from ERFA's eraDat (which models the 1961-1971 rubber-second UTC
that Latens, like skyfield, does not); and TDB-TT from ERFA's eraDtdb, the
full Fairhead & Bretagnon series, to state the accuracy of the short series
that Latens and skyfield both use.
"""
import random
from skyfield.api import load
import warnings
import erfa
warnings.simplefilter("ignore")

ts = load.timescale(builtin=True)
rng = random.Random(20261201)

epochs = []
# Whole years, 1900..2050 every 10 years, mid-year and new year.
for y in range(1900, 2051, 10):
    epochs.append((y, 1, 1, 0, 0, 0.0))
    epochs.append((y, 7, 15, 6, 30, 12.25))
# Around the 1972 start of leap-second UTC, and around a leap second.
epochs += [(1971, 12, 31, 23, 59, 59.0), (1972, 1, 1, 0, 0, 0.0),
           (2016, 12, 31, 23, 59, 59.5), (2017, 1, 1, 0, 0, 0.5)]
# Random instants with fractional seconds.
for _ in range(24):
    y = rng.randint(1900, 2049)
    epochs.append((y, rng.randint(1, 12), rng.randint(1, 28), rng.randint(0, 23),
                   rng.randint(0, 59), round(rng.uniform(0, 59.999999), 6)))

print("iso_utc,tt_days,tt_rem_s,tdb_days,tdb_rem_s,erfa_tai_minus_utc_s,erfa_tdb_minus_tt_s")
for (y, mo, d, h, mi, s) in epochs:
    t = ts.utc(y, mo, d, h, mi, s)
    iso = f"{y:04d}-{mo:02d}-{d:02d}T{h:02d}:{mi:02d}:{s:09.6f}Z"
    out = [iso]
    for whole, frac in ((t.whole, t.tt_fraction), (t.whole, t.tdb_fraction)):
        # skyfield keeps JD as whole + fraction; J2000 = JD 2451545.0
        days = whole - 2451545.0
        dint = int(days // 1)
        rem = ((days - dint) + frac) * 86400.0
        out += [str(dint), repr(float(rem))]
    dat = erfa.dat(y, mo, d, (h * 3600 + mi * 60 + s) / 86400.0)
    out.append(repr(float(dat)))
    # eraDtdb: the Fairhead & Bretagnon (1990) series in full, at the geocentre.
    dtdb = erfa.dtdb(t.whole, t.tt_fraction, (h * 3600 + mi * 60 + s) / 86400.0, 0.0, 0.0, 0.0)
    out.append(repr(float(dtdb)))
    print(",".join(out))
