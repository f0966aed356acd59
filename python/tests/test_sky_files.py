"""The sky map and regions the binding writes, read back by outside
readers: astropy (multi-order map) and mocpy (MOCs)."""

import json

import numpy as np

import latens


def test_map_and_regions_read_back_with_astropy_and_mocpy(py_run, tmp_path):
    study, det, post = py_run
    sky = latens.sky_products(study, det, post)
    sky.write_map(tmp_path / "skymap.fits")
    sky.write_region(tmp_path / "region90.fits", level=0.9)
    sky.write_region(tmp_path / "region50.json", level=0.5, format="json")

    from astropy.table import Table

    t = Table.read(tmp_path / "skymap.fits")
    assert np.array_equal(np.asarray(t["UNIQ"], dtype=np.uint64), sky.uniq)
    # The density integrates to one over the leaves' areas.
    order = np.floor(np.log2(np.asarray(t["UNIQ"], dtype=np.float64) / 4.0) / 2.0)
    area = 4 * np.pi / (12 * 4.0 ** order)
    assert abs(float(np.sum(np.asarray(t["PROBDENSITY"]) * area)) - 1.0) < 1e-6

    from mocpy import MOC

    m90 = MOC.from_fits(tmp_path / "region90.fits")
    m50 = MOC.from_json(json.loads((tmp_path / "region50.json").read_text()))
    a90 = m90.sky_fraction * 41252.96
    a50 = m50.sky_fraction * 41252.96
    s = sky.summary
    assert abs(a90 - s["area90_deg2"]) < 1e-6 * max(1.0, s["area90_deg2"])
    assert abs(a50 - s["area50_deg2"]) < 1e-6 * max(1.0, s["area50_deg2"])
    assert a50 < a90


def test_confidence_regions_read_back_with_mocpy(py_run, tmp_path):
    """The profile likelihood's regions: written as MOCs whose areas are
    the summary's, the 50% inside the 90%, the profile's pixels at the
    summary's order with the best drop among them."""
    study, det, post = py_run
    if not det.detected:
        return
    sky = latens.sky_products(study, det, post)
    c = sky.summary["confidence"]
    sky.write_confidence(tmp_path / "confidence90.fits", level=0.9)
    sky.write_confidence(tmp_path / "confidence50.json", level=0.5, format="json")

    from mocpy import MOC

    m90 = MOC.from_fits(tmp_path / "confidence90.fits")
    m50 = MOC.from_json(json.loads((tmp_path / "confidence50.json").read_text()))
    assert abs(m90.sky_fraction * 41252.96 - c["area90_deg2"]) < 1e-6 * c["area90_deg2"]
    assert abs(m50.sky_fraction * 41252.96 - c["area50_deg2"]) < 1e-6 * max(1.0, c["area50_deg2"])
    assert m50.difference(m90).sky_fraction == 0.0
    p = sky.profile
    assert p["order"] == c["order"] and len(p["ipix"]) == c["n_pixels"]
    assert abs(float(np.max(p["delta_chi2"])) - c["best_delta_chi2"]) < 1e-9
