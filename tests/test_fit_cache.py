"""An unchanged rerun of discover reuses the fitted model and its stability report.

The second run must not fit at all (the fit is replaced by one that fails) and must write the
same workspace, byte for byte in its tables; another seed, or ``force``, fits again. The
quality and stability tables it writes are rounded as every CSV of a run.

Data: two simulated sessions of the package's invented animals, a few seconds each.
"""

from __future__ import annotations

import json
import shutil

import numpy as np
import pandas as pd
import pytest

from _reliability_data import assert_same_contents, workspace_contents, write_study
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.workspace import discover


def _run(study, out, **kwargs):
    return discover([study], out, states=3, stability=True, progress=False, **kwargs)


def test_unchanged_rerun_reuses_the_fit(tmp_path, monkeypatch):
    study = write_study(tmp_path / "study")
    first = _run(study, tmp_path / "ws").path
    before = workspace_contents(first)
    stability = (first / "stability.csv").read_bytes()
    copy = shutil.copytree(first, tmp_path / "copy")

    def no_fit(*args, **kwargs):
        raise AssertionError("the model was fitted again")

    monkeypatch.setattr(BehaviourModel, "fit_transform_cleaned", no_fit)
    again = _run(study, first).path
    assert_same_contents(workspace_contents(again), before)
    assert (again / "stability.csv").read_bytes() == stability
    summary = json.loads((again / "summary.json").read_text())
    assert summary["stability"] == json.loads((copy / "summary.json").read_text())["stability"]
    with pytest.raises(AssertionError, match="fitted again"):
        _run(study, first, seed=1)  # another seed: another fit
    with pytest.raises(AssertionError, match="fitted again"):
        _run(study, copy, force=True)


def test_quality_and_stability_csv_keep_six_significant_digits(tmp_path):
    # quality.csv and stability.csv were written at full precision (0.011666666666666667)
    # while the README says every CSV keeps 6 significant digits, as the other tables do.
    ws = _run(write_study(tmp_path / "study"), tmp_path / "ws").path
    for name in ("quality.csv", "stability.csv"):
        table = pd.read_csv(ws / name)
        floats = table.select_dtypes("float").to_numpy(np.float64).ravel()
        floats = floats[np.isfinite(floats)]
        assert floats.size and (floats != 0).any(), name
        six = np.array([float(f"{v:.6g}") for v in floats])
        np.testing.assert_array_equal(floats, six, err_msg=name)
