"""The batch commands: exit codes, messages, and that they write what the library writes."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from _example_study import trimmed_study
from ethoscribe.cli import main


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    """Two simulated example sessions (60 s each) and their manifest rows."""
    return trimmed_study(tmp_path_factory.mktemp("cli_study"), ["session_03", "session_11"], 1800)


def test_discover_then_label_a_new_cohort(study, tmp_path, capsys):
    out = tmp_path / "run"
    code = main(
        [
            "discover",
            str(study / "session_03.parquet"),
            "--manifest",
            str(study / "manifest.csv"),
            "--out",
            str(out),
            "--states",
            "3",
            "--seed",
            "5",
            "--quiet",
            "--axis",
            "tail_base,nose",
            "--min-confidence",
            "0.6",
        ]
    )
    assert code == 0
    said = capsys.readouterr().out
    assert "3 motifs" in said and "animal-welfare" in said
    summary = json.loads((out / "summary.json").read_text())
    assert summary["seed"] == 5 and summary["features"]["axis"] == ["tail_base", "nose"]
    assert summary["parameters"]["cleaning"]["min_confidence"] == 0.6
    assert (out / "report.html").is_file()

    cohort = tmp_path / "cohort"
    code = main(
        [
            "label",
            str(out),
            str(study / "session_11.parquet"),
            "--manifest",
            str(study / "manifest.csv"),
            "--out",
            str(cohort),
            "--quiet",
        ]
    )
    assert code == 0
    labels = pd.read_csv(cohort / "labels.csv", keep_default_na=False)
    assert set(labels["session"]) == {"session_11"}
    assert set(labels["motif"]) - {""} <= {"motif_01", "motif_02", "motif_03"}


def test_bad_input_exits_2_with_a_message_and_writes_nothing(study, tmp_path, capsys):
    out = tmp_path / "run"
    code = main(
        [
            "discover",
            str(study / "session_03.parquet"),
            "--out",
            str(out),
            "--quiet",
            "--origin",
            "no_such_keypoint",
            "--fps",
            "30",
        ]
    )
    assert code == 2
    err = capsys.readouterr().err
    assert err.startswith("ethoscribe discover: error:") and "no_such_keypoint" in err
    assert "Traceback" not in err
    assert not out.exists() or not any(p for p in out.iterdir() if p.name != ".lock")


def test_options_are_checked_before_any_work(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["discover", "x.csv", "--out", "o", "--states", "many"])
    assert stop.value.code == 2
    assert "--states takes a whole number or 'auto'" in capsys.readouterr().err


def test_the_console_script_runs():
    done = subprocess.run(
        [sys.executable, "-m", "ethoscribe", "--version"],
        capture_output=True,
        text=True,
        check=False,
    )
    assert done.returncode == 0 and done.stdout.startswith("ethoscribe ")
