"""Several tracked bodies, one perturber: the package's joint study equals
`latens infer` with a directory of bodies (same seed, same numbers)."""

import csv
import json

import numpy as np
import pytest

import latens
from conftest import ROOT, SAMPLER, SEARCH, run_cli


@pytest.fixture(scope="module")
def population(tmp_path_factory):
    d = tmp_path_factory.mktemp("population")
    run_cli("simulate", ROOT / "scenarios" / "population.toml", "--out", d)
    out = d / "search"
    run_cli(
        "infer", "--obs", d / "bodies", "--sites", d / "sites.csv",
        "--nulls", SEARCH["nulls"], "--directions", SEARCH["directions"],
        "--distances", SEARCH["distances"], "--seed", SEARCH["seed"],
        "--posterior-steps", SAMPLER["steps"], "--walkers", SAMPLER["walkers"],
        "--temperatures", SAMPLER["temperatures"], "--runs", SAMPLER["runs"],
        "--out", out,
    )
    return d, out, json.loads((out / "summary.json").read_text())


def test_joint_study_matches_latens_infer(population):
    d, out, summary = population
    study = latens.Study(d / "bodies", sites=d / "sites.csv")
    assert len(study.body_names) == summary["n_bodies"] == 12
    det = latens.detect(study, **SEARCH)
    assert isinstance(det, latens.JointDetection)
    s = summary["detection"]
    assert det.delta_chi2 == s["delta_chi2"]
    assert det.false_alarm_probability == s["false_alarm_probability"]
    assert det.detected == s["detected"]
    assert s["verdict"].startswith(det.verdict)
    for mine, theirs in zip(det.bodies, summary["bodies"]):
        assert mine["name"] == theirs["name"]
        assert mine["delta_chi2_at_best"] == theirs["delta_chi2_at_best"]
        assert mine["alone_false_alarm_probability"] == theirs["alone_false_alarm_probability"]
        assert mine["orbit"] == theirs["orbit"]
        assert len(mine["set_aside"]) == theirs["n_set_aside"]
    loo = det.leave_one_out
    assert (loo["body"], loo["delta_chi2"]) == (summary["leave_one_out"]["left_out"],
                                                summary["leave_one_out"]["delta_chi2"])
    table = det.to_pandas()
    assert table.shape == (12, 8)
    assert list(table["n_set_aside"]) == [b["n_set_aside"] for b in summary["bodies"]]

    post = latens.posterior(study, det, **SAMPLER)
    assert post.summary == summary["posterior"]
    assert post.alternatives == summary["alternatives"]
    with open(out / "posterior.csv", newline="") as f:
        rows = list(csv.reader(f))
    from_file = np.array([[float(x) for x in row] for row in rows[1:]])
    assert np.array_equal(post.samples_array.view(np.uint64), from_file.view(np.uint64))
    for c, theirs in zip(post.corrections, summary["bodies"]):
        assert c["name"] == theirs["name"]
        assert c["position_km"] == theirs["orbit_correction_km"]
    assert set(post.body_alternatives) == set(study.body_names)
    if summary["sky"] is not None:
        sky = latens.sky_products(study, det, post)
        assert sky.summary == summary["sky"]


def test_bodies_of_their_own_kind_match_latens_infer(population, tmp_path):
    # One body a planet of 0.5 Earth masses among small bodies: dicts here,
    # BODY=VALUE on the command line; the same study either way (a planet
    # has no non-gravitational push, so that alternative leaves it out).
    d, _, _ = population
    out = tmp_path / "own"
    run_cli(
        "infer", "--obs", d / "bodies", "--sites", d / "sites.csv",
        "--kind", "Lumen=planet", "--tracked-mass", "Lumen=0.5",
        "--nulls", SEARCH["nulls"], "--directions", SEARCH["directions"],
        "--distances", SEARCH["distances"], "--seed", SEARCH["seed"],
        "--no-posterior", "--out", out,
    )
    summary = json.loads((out / "summary.json").read_text())
    study = latens.Study(d / "bodies", sites=d / "sites.csv", kind={"Lumen": "planet"}, tracked_mass={"Lumen": 0.5})
    det = latens.detect(study, **SEARCH)
    assert det.delta_chi2 == summary["detection"]["delta_chi2"]
    post = latens.posterior(study, det, sample=False)
    assert post.alternatives == summary["alternatives"]
    lumen = next(b for b in summary["bodies"] if b["name"] == "Lumen")
    assert lumen["kind"] == "planet" and lumen["tracked_mass_earth"] == 0.5
    assert not any(a["name"].startswith("non-grav") for a in lumen["alternatives"])
    with pytest.raises(latens.InputError, match="no body is called Nobody"):
        latens.Study(d / "bodies", sites=d / "sites.csv", kind={"Nobody": "planet"})
