"""label checks its inputs before any heavy work: new sessions in other units than the model's
are refused at once with the fix (the cohort's calibration in its manifest).

Data: two simulated sessions of the package's invented animals (tidy tables in pixels), a few
seconds each; the same files read as millimetres stand for a cohort in other units.
"""

from __future__ import annotations

import time

import pytest

from _reliability_data import run_discover, write_study
from ethoscribe.errors import InputError
from ethoscribe.workspace import label_sessions


def test_pixels_for_a_millimetre_model_are_refused_before_any_work(tmp_path):
    study = write_study(tmp_path / "study")
    ws = run_discover(study, tmp_path / "ws")
    start = time.perf_counter()
    with pytest.raises(InputError, match=r"in 'mm' but the model was fitted on tracks in 'px'.*"
                       r"px_per_unit and units"):  # fmt: skip
        label_sessions(ws.path, [study], tmp_path / "new", reader_options={"units": "mm"},
                       progress=False)  # fmt: skip
    assert time.perf_counter() - start < 10
    assert not (tmp_path / "new").exists()  # nothing left behind
