"""Shared fixtures: the `latens` command and one small study run both ways.

The Python package and the command line are two faces of one library; the
tests run the same study through both (same scenario, same seed, small
settings so the suite stays quick) and compare what comes out.
"""

import json
import os
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
SCENARIO = ROOT / "scenarios" / "demo.toml"

# Small settings shared by both faces (the command line's option names).
SEARCH = dict(nulls=400, directions=48, distances=6, seed=3)
SAMPLER = dict(steps=300, walkers=14, temperatures=4, runs=2, seed=3)


def latens_bin() -> Path:
    """The `latens` binary: $LATENS_BIN, or the release build (built if
    missing; `cargo test --release` has built it before CI gets here)."""
    if os.environ.get("LATENS_BIN"):
        return Path(os.environ["LATENS_BIN"])
    exe = ROOT / "target" / "release" / "latens"
    if not exe.exists():
        subprocess.run(["cargo", "build", "--release", "--bin", "latens"], cwd=ROOT, check=True)
    return exe


def run_cli(*args) -> subprocess.CompletedProcess:
    out = subprocess.run([str(latens_bin()), *map(str, args)], cwd=ROOT, capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    return out


@pytest.fixture(scope="session")
def simulated(tmp_path_factory):
    """The demo scenario simulated by `latens simulate` (files)."""
    d = tmp_path_factory.mktemp("simulate")
    run_cli("simulate", SCENARIO, "--out", d)
    return d


@pytest.fixture(scope="session")
def cli_infer(simulated, tmp_path_factory):
    """`latens infer` on the simulated files with the small settings."""
    d = tmp_path_factory.mktemp("infer")
    run_cli(
        "infer",
        "--obs", simulated / "observations.csv",
        "--sites", simulated / "sites.csv",
        "--nulls", SEARCH["nulls"],
        "--directions", SEARCH["directions"],
        "--distances", SEARCH["distances"],
        "--seed", SEARCH["seed"],
        "--posterior-steps", SAMPLER["steps"],
        "--walkers", SAMPLER["walkers"],
        "--temperatures", SAMPLER["temperatures"],
        "--runs", SAMPLER["runs"],
        "--out", d,
    )
    return d, json.loads((d / "summary.json").read_text())


@pytest.fixture(scope="session")
def py_run(simulated):
    """The same study through the Python package."""
    import latens

    study = latens.Study(simulated / "observations.csv", sites=simulated / "sites.csv")
    det = latens.detect(study, **SEARCH)
    post = latens.posterior(study, det, **SAMPLER)
    return study, det, post
