"""The public API reads like a manual: every public object documented,
results convertible to plain Python values (JSON) and DataFrames."""

import inspect
import json

import latens


def test_every_public_object_has_a_docstring():
    for name in latens.__all__:
        obj = getattr(latens, name)
        assert (obj.__doc__ or "").strip(), name
        if inspect.isclass(obj):
            for attr, value in vars(obj).items():
                if not attr.startswith("_"):
                    assert (getattr(value, "__doc__", None) or "").strip(), f"{name}.{attr}"


def test_results_convert_to_json(py_run):
    study, det, post = py_run
    fit = latens.reference_fit(study)
    for value in (fit.to_dict(), det.to_dict(), post.to_dict()):
        json.dumps(value)
    assert "latens.Study" in repr(study) and "latens.Detection" in repr(det)
