"""label checks its inputs before any heavy work: new sessions in other units than the model's
are refused at once with the fix (the cohort's calibration in its manifest).

Data: two simulated sessions of the package's invented animals (tidy tables in pixels), a few
seconds each; the same files read as millimetres stand for a cohort in other units.
"""

from __future__ import annotations

import time

import pytest

from _reliability_data import N_STATES, run_discover, write_study
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


def test_files_already_in_the_models_units_are_told_how_to_say_so(tmp_path):
    # Tracks exported in mm with no manifest are read as pixels; the refusal says how to
    # declare their units, on the command line too.
    from ethoscribe.cli import command_line_message
    from ethoscribe.workspace import discover

    study = write_study(tmp_path / "study")
    ws = run_discover(study, tmp_path / "ws")
    with pytest.raises(InputError, match=r"in 'mm'.*in 'px'") as mm_model:
        label_sessions(ws.path, [study], tmp_path / "new", reader_options={"units": "mm"},
                       progress=False)  # fmt: skip
    assert "already in" not in str(mm_model.value)  # the model is in px: nothing to declare
    mm_ws = discover([study], tmp_path / "ws_mm", states=N_STATES, stability=False,
                     progress=False, reader_options={"units": "mm"})  # fmt: skip
    with pytest.raises(InputError, match=r"in 'px' but .* in 'mm'") as caught:
        label_sessions(mm_ws.path, [study], tmp_path / "new", progress=False)
    text = command_line_message(str(caught.value))
    assert "Files already in mm" in text and "--reader-option units=mm" in text
    assert "reader_options" not in text


def test_other_dimensions_and_rates_are_refused_with_the_fix(tmp_path):
    """A 3-D cohort for a 2-D model ended on '(missing [], extra [])' with no fix; a study of
    30- and 60-fps sessions named the rates but not which session had which."""
    import numpy as np
    import pandas as pd

    from ethoscribe.workspace import discover

    study = write_study(tmp_path / "study")
    ws = run_discover(study, tmp_path / "ws")
    table = pd.read_parquet(study / "session_01.parquet")
    table["z"] = np.random.default_rng(0).normal(10.0, 1.0, len(table))  # invented heights
    (tmp_path / "deep").mkdir()
    table.to_parquet(tmp_path / "deep" / "deep.parquet")
    with pytest.raises(InputError, match=r"'deep'.* in 3-D but .* in 2-D.*Leave the z column out"):
        label_sessions(ws.path, [tmp_path / "deep"], tmp_path / "new", progress=False)
    manifest = pd.DataFrame(
        {"session": ["session_01", "session_02"], "path": ["session_01.parquet",
         "session_02.parquet"], "fps": [30.0, 60.0]}
    )  # fmt: skip
    manifest.to_csv(study / "manifest.csv", index=False)
    with pytest.raises(InputError, match=r"30 fps \('session_01'\), 60 fps \('session_02'\)"):
        discover([study], tmp_path / "mixed", manifest=study / "manifest.csv", progress=False)
