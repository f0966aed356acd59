"""Every CSV the demo writes opens correctly, with default settings, in
pandas, the Python csv module and astropy's table reader: one header line
naming every column, the same number of fields on every row, no comment
lines (a comment line would become pandas' header without any error)."""

import csv
from pathlib import Path

import pandas as pd
import pytest
from astropy.table import Table

from conftest import run_cli


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("demo")
    run_cli("demo", "--out", d)
    run_cli("predict", "--from", d / "search", "--step-days", 30)
    return d


def test_every_csv_of_the_demo_reads_with_default_settings(demo):
    files = sorted(Path(demo).rglob("*.csv"))
    names = {f.name for f in files}
    # The demo's tables: survey, fit, search, posterior, sky, sensitivity,
    # population, prediction.
    for expected in ("observations.csv", "sites.csv", "track.csv", "residuals.csv", "posterior.csv",
                     "modes.csv", "sensitivity.csv", "bodies.csv", "predict.csv"):
        assert expected in names, f"{expected} not written by the demo"
    for f in files:
        with open(f, newline="") as fh:
            rows = list(csv.reader(fh))
        header, body = rows[0], rows[1:]
        assert body, f"{f}: no rows"
        assert all(len(r) == len(header) for r in body), f"{f}: rows of unequal length"
        assert not any(h.startswith("#") for h in header), f"{f}: a comment line before the header"
        frame = pd.read_csv(f)
        assert list(frame.columns) == header, f"{f}: pandas read other columns: {list(frame.columns)[:4]}"
        assert frame.shape == (len(body), len(header)), f"{f}: pandas shape {frame.shape}"
        assert not any(str(c).startswith("Unnamed") for c in frame.columns), f
        table = Table.read(f, format="ascii.csv")
        assert table.colnames == header and len(table) == len(body), f"{f}: astropy read {table.colnames[:4]}"
