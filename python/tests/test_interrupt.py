"""A KeyboardInterrupt during sampling stops the sampler cleanly: the
checkpoint is saved, and resuming from it gives the samples of a run that
was never interrupted."""

import _thread
import signal

import numpy as np
import pytest

import latens
from conftest import SAMPLER


def test_interrupt_saves_a_checkpoint_that_resumes_to_the_same_samples(py_run, tmp_path):
    study, det, whole = py_run
    checkpoint = tmp_path / "checkpoint.json"
    asked = []

    def ctrl_c_midway(stage, done, total):
        # As a user pressing Ctrl-C: SIGINT reaches the main thread, whose
        # handler raises KeyboardInterrupt at the sampler's next check.
        if stage.startswith("sampling") and done >= total // 3 and not asked:
            asked.append(done)
            _thread.interrupt_main()

    # Python raises KeyboardInterrupt on SIGINT only when its own handler is
    # installed; a job started in the background (as CI may be) inherits
    # SIGINT ignored, and interrupt_main() then does nothing. An interactive
    # session has the handler, so install it for this test.
    before = signal.signal(signal.SIGINT, signal.default_int_handler)
    try:
        with pytest.raises(KeyboardInterrupt) as e:
            latens.posterior(study, det, checkpoint=checkpoint, progress=ctrl_c_midway, **SAMPLER)
    finally:
        signal.signal(signal.SIGINT, before)
    assert asked, "the sampler reported progress"
    assert checkpoint.exists()
    assert any("resume=True" in n for n in getattr(e.value, "__notes__", []))
    resumed = latens.posterior(study, det, checkpoint=checkpoint, resume=True, **SAMPLER)
    assert np.array_equal(resumed.samples_array, whole.samples_array)


def test_resume_needs_a_checkpoint(py_run, tmp_path):
    study, det, _ = py_run
    with pytest.raises(latens.InputError, match="checkpoint"):
        latens.posterior(study, det, resume=True, checkpoint=tmp_path / "none.json", **SAMPLER)
