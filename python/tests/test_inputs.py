"""Tables in, files in: the same numbers; bad input raises the right
exception, naming the file (or table), the line and the field."""

import numpy as np
import pandas as pd
import pytest

import latens


def test_dataframe_input_equals_file_input(simulated):
    by_file = latens.Study(simulated / "observations.csv", sites=simulated / "sites.csv")
    # round_trip: pandas' default float parser may differ from Python's in
    # the last bit; with it the numbers are the file's to the bit.
    obs = pd.read_csv(simulated / "observations.csv")
    sites = pd.read_csv(simulated / "sites.csv")
    by_frame = latens.Study(obs, sites=sites, names=["Vesk"])
    assert by_frame.body_names == ["Vesk"]
    a, b = by_file.observations(), by_frame.observations()
    for k in ("t_tdb_days", "ra_deg", "dec_deg", "sigma_ra_arcsec", "sigma_dec_arcsec"):
        assert np.array_equal(a[k], b[k]), k
    fa, fb = latens.reference_fit(by_file), latens.reference_fit(by_frame)
    assert fa.orbit == fb.orbit
    assert fa.chi2 == fb.chi2
    for k in fa.residuals:
        assert np.array_equal(fa.residuals[k], fb.residuals[k]), k


# The demo survey runs into the 2030s, past the leap-second table: astropy
# says so (ERFA "dubious year"); the conversion is still exact.
@pytest.mark.filterwarnings("ignore:ERFA function")
def test_epochs_as_astropy_time_and_datetimes(simulated):
    from astropy.time import Time

    obs = pd.read_csv(simulated / "observations.csv")
    by_text = latens.Study(obs, sites=simulated / "sites.csv")
    as_time = dict(obs)
    as_time["epoch_utc"] = Time(list(obs["epoch_utc"]), scale="utc")
    by_time = latens.Study(as_time, sites=simulated / "sites.csv")
    as_datetime = obs.copy()
    as_datetime["epoch_utc"] = pd.to_datetime(obs["epoch_utc"])
    by_datetime = latens.Study(as_datetime, sites=simulated / "sites.csv")
    t = by_text.observations()["t_tdb_days"]
    # Millisecond epochs survive both conversions to well under a microsecond.
    assert np.max(np.abs(by_time.observations()["t_tdb_days"] - t)) * 86400 < 1e-6
    assert np.max(np.abs(by_datetime.observations()["t_tdb_days"] - t)) * 86400 < 1e-6


def test_a_bad_field_names_file_line_and_field(simulated, tmp_path):
    lines = (simulated / "observations.csv").read_text().splitlines()
    lines[4] = lines[4].replace(lines[4].split(",")[2], "91.5", 1)
    bad = tmp_path / "bad.csv"
    bad.write_text("\n".join(lines) + "\n")
    with pytest.raises(latens.InputError) as e:
        latens.Study(bad, sites=simulated / "sites.csv")
    assert e.value.file == str(bad)
    assert e.value.line == 5
    assert e.value.field == "dec_deg"
    assert "outside [-90, 90]" in str(e.value)
    assert isinstance(e.value, latens.LatensError)


def test_a_bad_table_row_names_the_table(simulated):
    obs = pd.read_csv(simulated / "observations.csv")
    obs.loc[7, "sigma_ra_arcsec"] = -1.0
    with pytest.raises(latens.InputError) as e:
        latens.Study(obs, sites=simulated / "sites.csv", names=["survey"])
    # Row 7 is line 9 of the table's text (line 1 is the header).
    assert (e.value.file, e.value.line, e.value.field) == ("survey", 9, "sigma_ra_arcsec")
    with pytest.raises(latens.InputError, match="missing column"):
        latens.Study(obs.drop(columns=["dec_deg"]))


def test_unknown_site_and_bad_settings(simulated):
    with pytest.raises(latens.InputError) as e:
        latens.Study(simulated / "observations.csv")
    assert e.value.field == "site" and "unknown site" in str(e.value)
    with pytest.raises(latens.InputError, match="unknown body"):
        latens.Study(simulated / "observations.csv", sites=simulated / "sites.csv", known="jupiter,vulcan")
    with pytest.raises(latens.InputError, match="cannot pull on itself"):
        latens.Study(simulated / "observations.csv", sites=simulated / "sites.csv", tracked_mass="neptune")
    study = latens.Study(simulated / "observations.csv", sites=simulated / "sites.csv")
    with pytest.raises(latens.InputError, match="nulls must be at least"):
        latens.detect(study, nulls=10)
    with pytest.raises(latens.InputError, match="mass_earth"):
        latens.detect(study, mass_earth=(10.0, 1.0))
    with pytest.raises(latens.InputError, match="near_ecliptic"):
        latens.detect(study, near_ecliptic=0.0)
    with pytest.raises(latens.InputError, match="near-ecliptic"):
        latens.sensitivity(study, near_ecliptic=100.0)
    with pytest.raises(latens.InputError):
        latens.sensitivity(study, grid=(1, 5))


def test_a_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(latens.InputError, match="cannot read"):
        latens.Study(tmp_path / "nothing.csv")
