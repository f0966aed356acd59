"""The notebook-style example runs end to end (small settings) and draws
its two charts. With these settings the sampler is too short to converge,
and the example must say so; its full run is in the closing note."""

import os
import subprocess
import sys

from conftest import ROOT


def test_the_example_runs_and_draws(tmp_path):
    env = dict(os.environ, LATENS_QUICK="1", MPLBACKEND="Agg")
    out = subprocess.run(
        [sys.executable, str(ROOT / "examples" / "python" / "demo.py"), str(tmp_path)],
        capture_output=True, text=True, env=env,
    )
    assert out.returncode == 0, out.stderr
    for name in ("residuals.png", "sky.png", "skymap.fits", "region50.fits", "region90.fits"):
        assert (tmp_path / name).stat().st_size > 1000, name
    assert "detected" in out.stdout
    assert "The true place is" in out.stdout
    if "samples, NOT converged>" in out.stdout:
        assert "The posterior has NOT converged" in out.stdout
