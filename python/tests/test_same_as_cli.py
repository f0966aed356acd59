"""The Python package gives the command line's numbers: the same study, the
same seed, the same files' contents (the binding only converts)."""

import csv
import json
from pathlib import Path

import numpy as np

import latens
from conftest import SCENARIO, run_cli


def test_simulate_writes_what_the_command_writes(simulated):
    bodies = latens.simulate(SCENARIO)
    assert [b["name"] for b in bodies] == ["Vesk"]
    assert bodies[0]["observations_csv"] == (simulated / "observations.csv").read_text()
    truth = json.loads((simulated / "truth.json").read_text())
    assert bodies[0]["truth"] == truth
    # The sites as a table hold the same sites (order by name).
    rows = list(csv.DictReader((simulated / "sites.csv").read_text().splitlines()))
    again = list(csv.DictReader(bodies[0]["sites_csv"].splitlines()))
    assert sorted(rows, key=lambda r: r["name"]) == again


def test_reference_fit_matches_latens_residuals(simulated, tmp_path):
    run_cli(
        "residuals",
        "--obs", simulated / "observations.csv",
        "--sites", simulated / "sites.csv",
        "--out", tmp_path,
    )
    study = latens.Study(simulated / "observations.csv", sites=simulated / "sites.csv")
    fit = latens.reference_fit(study)
    fit_json = json.loads((tmp_path / "fit.json").read_text())
    # fit.json is written with round-trip floats: the orbit agrees exactly.
    assert fit.orbit == fit_json["orbit"]
    assert fit.chi2 == fit_json["chi2"]
    assert fit.dof == fit_json["dof"]
    # residuals.csv rounds the O-C to 1e-6 arcsec and the chi-square to 1e-4.
    rows = list(csv.DictReader((tmp_path / "residuals.csv").read_text().splitlines()))
    r = fit.residuals
    assert len(rows) == len(r["ra_arcsec"])
    np.testing.assert_allclose(r["ra_arcsec"], [float(x["ra_resid_arcsec"]) for x in rows], rtol=0, atol=5.1e-7)
    np.testing.assert_allclose(r["dec_arcsec"], [float(x["dec_resid_arcsec"]) for x in rows], rtol=0, atol=5.1e-7)
    np.testing.assert_allclose(r["chi2"], [float(x["chi2"]) for x in rows], rtol=0, atol=5.1e-5)
    assert [bool(u) for u in r["used"]] == [x["used"] == "true" for x in rows]
    frame = fit.to_pandas()
    assert list(frame.columns) == ["t_tdb_days", "ra_arcsec", "dec_arcsec", "sigma_ra_arcsec",
                                   "sigma_dec_arcsec", "chi2", "used"]


def test_detection_and_posterior_match_latens_infer(cli_infer, py_run):
    out, summary = cli_infer
    study, det, post = py_run
    d = summary["detection"]
    assert det.delta_chi2 == d["delta_chi2"]
    assert det.false_alarm_probability == d["false_alarm_probability"]
    assert det.detected == d["detected"]
    assert d["verdict"].startswith(det.verdict)
    assert det.null_chi2 == summary["null_model"]["chi2"]
    assert det.null_dof == summary["null_model"]["dof"]
    assert det.to_dict()["null_orbit"] == summary["null_model"]["orbit"]
    assert det.n_hypotheses == summary["search"]["n_hypotheses"]
    assert max(det.null_maxima) == d["largest_null_delta_chi2"]
    assert post.summary == summary["posterior"]
    # Wall-clock figures differ between runs; everything else is equal.
    clock = {"sampling_seconds", "effective_samples_per_second"}
    strip = lambda d: {k: v for k, v in d.items() if k not in clock}
    assert strip(post.diagnostics) == strip(summary["diagnostics"])
    assert post.evidence == summary["evidence"]
    assert post.alternatives == summary["impostors"]
    assert post.explanation_detail == summary["explanation"]


def test_posterior_samples_bit_for_bit(cli_infer, py_run):
    out, _ = cli_infer
    _, _, post = py_run
    with open(out / "posterior.csv", newline="") as f:
        rows = list(csv.reader(f))
    assert rows[0] == post.columns
    from_file = np.array([[float(x) for x in row] for row in rows[1:]])
    samples = post.samples_array
    assert samples.shape == from_file.shape
    # posterior.csv writes each number as the shortest text that reads
    # back to the same float: equal bit for bit.
    assert np.array_equal(samples.view(np.uint64), from_file.view(np.uint64))
    frame = post.to_pandas()
    assert list(frame.columns) == post.columns
    assert np.array_equal(frame["mass_earth"].to_numpy(), samples[:, 0])


def test_sky_products_match_the_command_files(cli_infer, py_run):
    out, summary = cli_infer
    study, det, post = py_run
    if not det.detected:
        return
    sky = latens.sky_products(study, det, post)
    assert sky.summary == summary["sky"]
    # Each basin judged against the posterior, and the warnings that name
    # the basins it leaves out, as the command gives them.
    assert sky.basins == summary["sky"]["basins"] and len(sky.basins) == len(summary["basins"])
    assert all(w in summary["warnings"] for w in sky.warnings)
    from astropy.table import Table

    t = Table.read(out / "skymap.fits")
    assert np.array_equal(np.asarray(t["UNIQ"], dtype=np.uint64), sky.uniq)
    assert np.array_equal(np.asarray(t["PROBDENSITY"], dtype=float), sky.probdensity)
    assert abs(sky.probability.sum() - 1.0) < 1e-9


def test_predict_matches_latens_predict(cli_infer, py_run):
    out, _ = cli_infer
    study, det, post = py_run
    run_cli("predict", "--from", out, "--step-days", 30)
    with open(out / "predict.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    p = latens.predict(study, det, post, step_days=30.0)
    assert len(rows) == len(p["ra_deg"])
    # predict.csv writes places to 1e-5 deg; the command reads the samples
    # back from posterior.csv (bit for bit), so the numbers agree to that.
    np.testing.assert_allclose(p["ra_deg"], [float(r["ra_deg"]) for r in rows], rtol=0, atol=2e-5)
    np.testing.assert_allclose(p["dec_deg"], [float(r["dec_deg"]) for r in rows], rtol=0, atol=2e-5)
    assert [int(m) for m in p["mode"]] == [int(r["mode"]) for r in rows]


def test_sensitivity_matches_latens_sensitivity(simulated, tmp_path):
    run_cli(
        "sensitivity",
        "--obs", simulated / "observations.csv",
        "--sites", simulated / "sites.csv",
        "--grid", "3:3", "--trials", 8, "--nulls", 40, "--directions", 12, "--distances", 2,
        "--sky-map", 0, "--sky-trials", 3, "--out", tmp_path,
    )
    study = latens.Study(simulated / "observations.csv", sites=simulated / "sites.csv")
    s = latens.sensitivity(study, grid=(3, 3), trials=8, nulls=40, directions=12, distances=2,
                           sky_map=0, sky_trials=3)
    with open(tmp_path / "sensitivity.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    meta = json.loads((tmp_path / "sensitivity.json").read_text())
    assert s.threshold_delta_chi2 == meta["threshold_delta_chi2"]
    assert len(rows) == 9 == len(s.cells["detection_probability"])
    got = {(int(m), int(d)): p for m, d, p in zip(s.cells["mass_index"], s.cells["distance_index"],
                                                 s.cells["detection_probability"])}
    for r in rows:
        key = (int(r["mass_index"]), int(r["distance_index"]))
        # sensitivity.csv gives probabilities to 1e-6.
        assert abs(got[key] - float(r["detection_probability"])) < 5.1e-7
    assert s.probability.shape == (3, 3)
    assert s.to_pandas().shape[0] == 9
    # The sky map: the same cells and masses as sensitivity_sky.csv (4
    # decimals there; empty fields where the range is not reached, NaN here).
    with open(tmp_path / "sensitivity_sky.csv", newline="") as f:
        sky_rows = list(csv.DictReader(f))
    assert len(sky_rows) == len(s.sky["cell"]) > 0
    for r, cell, m50 in zip(sky_rows, s.sky["cell"], s.sky["mass50_earth"]):
        assert int(r["cell"]) == int(cell)
        if r["mass50_earth"] == "":
            assert np.isnan(m50)
        else:
            assert abs(float(r["mass50_earth"]) - m50) <= 5e-5 * max(1.0, m50)
    # Shards: one written here, one by the command, merged here into the
    # unsharded map (the same numbers).
    shards = tmp_path / "shards"
    written = latens.sensitivity(study, grid=(3, 3), trials=8, nulls=40, directions=12, distances=2,
                                 sky_map=0, sky_trials=3, shard=(1, 2), out=shards)
    assert [Path(p).name for p in written] == ["sensitivity.part-1-of-2.json", "sensitivity.part-1-of-2.csv"]
    run_cli(
        "sensitivity",
        "--obs", simulated / "observations.csv",
        "--sites", simulated / "sites.csv",
        "--grid", "3:3", "--trials", 8, "--nulls", 40, "--directions", 12, "--distances", 2,
        "--sky-map", 0, "--sky-trials", 3, "--shard", "2/2", "--out", shards,
    )
    merged = latens.merge_sensitivity([shards])
    assert merged.threshold_delta_chi2 == s.threshold_delta_chi2
    assert list(merged.cells["detection_probability"]) == list(s.cells["detection_probability"])
    np.testing.assert_array_equal(merged.sky["mass50_earth"], s.sky["mass50_earth"])


def test_infer_in_one_call_is_the_three_stages(cli_infer, py_run):
    from conftest import SAMPLER, SEARCH

    out, summary = cli_infer
    study, det, post = py_run
    settings = dict(SEARCH, **{k: v for k, v in SAMPLER.items() if k != "seed"})
    found = latens.infer(study, **settings)
    assert found.detection.delta_chi2 == det.delta_chi2
    assert np.array_equal(found.posterior.samples_array, post.samples_array)
    assert (found.sky is not None) == summary["detection"]["detected"]
    if found.sky is not None:
        assert found.sky.summary == summary["sky"]
    assert "latens.Inference" in repr(found)
