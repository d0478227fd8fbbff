"""The batch commands: exit codes, messages, and that they write what the library writes."""

from __future__ import annotations

import json
import subprocess
import sys
import warnings
from pathlib import Path

import pandas as pd
import pytest

from _example_study import trimmed_study
from ethoscribe.cli import main
from ethoscribe.errors import InputWarning


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
    with warnings.catch_warnings():
        # A model of one animal (session_03) explains the other animal's frames worse than
        # its own: label says so in one line and records the share (the test suite otherwise
        # turns the package's warnings into errors).
        warnings.simplefilter("always", InputWarning)
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
    fit = json.loads((cohort / "summary.json").read_text())["fit_to_model"]
    (record,) = fit["sessions"]
    assert record["session"] == "session_11" and record["n_frames"] > 0
    flagged = record["share"] > fit["warn_above"]
    said = capsys.readouterr().err
    assert ("warning: session 'session_11': the model explains" in said) == flagged
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
    with pytest.raises(SystemExit) as stop:
        main(["discover", "x.csv", "--out", "o", "--confidence-scale", "2"])
    assert stop.value.code == 2
    assert "--confidence-scale takes 'auto' or a number in (0, 1]" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("option", "value", "said"),
    [("--sessions", "0", "--sessions takes a whole number of sessions per group, at least 1"),
     ("--duration", "-3", "--duration takes the seconds of each session, from 1 to 86400")],
)  # fmt: skip
def test_simulate_names_its_own_options(capsys, tmp_path, option, value, said):
    # '--sessions 0' was told 'n_per_group must be at least 1' and '--duration -3' of an
    # '--fps' the command does not have.
    with pytest.raises(SystemExit) as stop:
        main(["simulate", "--out", str(tmp_path / "s"), option, value])
    assert stop.value.code == 2
    assert said in capsys.readouterr().err and not (tmp_path / "s").exists()


@pytest.mark.parametrize("value", ["50", "-0.1", "nan"])
def test_a_confidence_threshold_outside_0_1_is_told_the_fraction_and_how_to_mask_nothing(
    capsys, value
):
    # --min-confidence 50 for files in percent was refused with "must lie in [0, 1] or be
    # None": None cannot be typed, and nothing said that percent is read as fractions.
    with pytest.raises(SystemExit) as stop:
        main(["discover", "x.csv", "--out", "o", "--min-confidence", value])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert f"--min-confidence takes a number in [0, 1], e.g. 0.5; got '{value}'" in err
    assert "read as fractions, so 50 % is 0.5; 0 masks no point" in err and "None" not in err


def test_the_console_script_runs():
    done = subprocess.run(
        [sys.executable, "-m", "ethoscribe", "--version"],
        capture_output=True,
        text=True,
        check=False,
    )
    assert done.returncode == 0 and done.stdout.startswith("ethoscribe ")


def _wide_and_nwb(study: Path, folder: Path) -> tuple[Path, Path]:
    """The study's sessions as wide tables (confidence under 'likelihood') and as two-animal
    NWB files written by ``write_nwb``."""
    import numpy as np

    from ethoscribe.io import read_tidy, write_nwb

    wide, nwb = folder / "wide", folder / "nwb"
    wide.mkdir()
    nwb.mkdir()
    for name in ("session_03", "session_11"):
        t = read_tidy(study / f"{name}.parquet", fps=30.0)
        cols = {}
        for k, kp in enumerate(t.keypoints):
            cols[f"{kp}_x"], cols[f"{kp}_y"] = t.coords[:, 0, k, 0], t.coords[:, 0, k, 1]
            cols[f"{kp}_likelihood"] = t.confidence[:, 0, k]
        pd.DataFrame(cols).to_csv(wide / f"{name}.csv", index=False)
        pair = t.replace(
            coords=np.concatenate([t.coords, t.coords[::-1]], axis=1),
            confidence=np.concatenate([t.confidence, t.confidence[::-1]], axis=1),
            animals=["m1", "m2"],
        )
        write_nwb(pair, nwb / f"{name}.nwb")
    return wide, nwb


@pytest.mark.slow
def test_discover_reads_wide_tables_and_two_animal_nwb_files(study, tmp_path, capsys):
    wide, nwb = _wide_and_nwb(study, tmp_path)
    common = ["--states", "2", "--quiet", "--jobs", "1", "--axis", "tail_base,nose"]
    out = tmp_path / "wide_run"
    code = main(
        ["discover", str(wide), "--format", "wide", "--pattern", "{keypoint}_{axis}",
         "--reader-option", "confidence_axis=likelihood", "--fps", "30", "--out", str(out),
         "--swap-pairs", "left_ear:right_ear", "--max-gap-s", "0.3", "--smooth-window-s", "0.3",
         "--max-speed", "3000", "--keep-repeated-frames", "--keep-placeholder-positions",
         "--keep-track-identities", "--keep-interpolated-points", *common]
    )  # fmt: skip
    assert code == 0, capsys.readouterr().err
    summary = json.loads((out / "summary.json").read_text())
    assert summary["reading"] == {
        "formats": ["wide"],
        "options": {"pattern": "{keypoint}_{axis}", "confidence_axis": "likelihood"},
    }
    used = summary["cleaning"]["used"]
    assert used["swap_pairs_used"] == [["left_ear", "right_ear"]]
    assert (used["max_gap_s"], used["smooth_window_s"], used["max_speed"]) == (0.3, 0.3, 3000.0)
    assert used["fill_repeated"] is False and used["repeated_frames"] == 0
    assert summary["cleaning"]["settings"]["placeholders"] is None
    assert summary["cleaning"]["settings"]["repair_identities"] is False
    assert summary["cleaning"]["settings"]["mask_interpolated"] is False
    assert summary["cleaning"]["swap_pairs_source"] == "given"
    assert summary["stability"] is not None  # checked by default

    out = tmp_path / "nwb_run"
    assert main(["discover", str(nwb), "--out", str(out), *common]) == 0, capsys.readouterr().err
    sessions = pd.read_csv(out / "sessions.csv")
    assert sessions["n_animals"].tolist() == [2, 2]
    labels = pd.read_parquet(out / "labels.parquet", columns=["animal"])
    assert sorted(labels["animal"].unique()) == ["m1", "m2"]
    cleaning = json.loads((out / "summary.json").read_text())["cleaning"]
    # Left/right pairs proposed from the keypoint names, and said so.
    assert cleaning["swap_pairs_source"] == "automatic (from keypoint names)"
    assert ["left_ear", "right_ear"] in cleaning["swap_pairs_used"]

    out = tmp_path / "no_swap"
    args = ["discover", str(nwb), "--out", str(out), "--no-auto-swap", "--no-stability-check"]
    assert main([*args, *common]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["cleaning"]["swap_pairs_used"] == [] and summary["stability"] is None
    assert (out / "report.html").exists() and not (out / "stability.csv").exists()


def test_messages_name_command_line_options(tmp_path, capsys):
    from ethoscribe.cli import command_line_message

    assert command_line_message("pass fps=... (frames per second)") == (
        "pass --fps ... (frames per second)"
    )
    assert command_line_message("resample with cleaning={'target_fps': ...}") == (
        "resample with --target-fps ..."
    )
    assert command_line_message("use smooth_window_s >= 0.3") == "use --smooth-window-s >= 0.3"
    assert "--replace-curation" in command_line_message("or pass replace_curation=True (the")
    with pytest.raises(SystemExit) as stop:
        main(["discover", str(tmp_path), "--out", str(tmp_path / "o"), "--fps", "1e9"])
    assert stop.value.code == 2
    assert "--fps 1e9 is not a camera frame rate" in capsys.readouterr().err


def test_an_unwritable_out_is_one_line_and_exit_2(study, tmp_path, capsys):
    target = tmp_path / "a_file"
    target.write_text("mine")
    code = main(["discover", str(study / "session_03.parquet"), "--manifest",
                 str(study / "manifest.csv"), "--out", str(target / "run"), "--quiet"])  # fmt: skip
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "error:" in err, err
    assert target.read_text() == "mine"


def test_every_command_says_what_it_does_with_an_example_and_every_option_has_help():
    import argparse

    from ethoscribe.cli import build_parser

    parser = build_parser()
    [commands] = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
    for name, sub in commands.choices.items():
        assert sub.description, f"'ethoscribe {name} --help' has no description"
        assert sub.epilog and sub.epilog.startswith("example:"), f"{name}: no example"
        for action in sub._actions:
            assert action.help, f"ethoscribe {name} {action.option_strings or action.dest}"


def test_a_commands_files_may_follow_its_options():
    # 'ethoscribe label WS --out DIR FILES' was refused ("unrecognized arguments: FILES"),
    # with the top-level usage, while discover took its files anywhere.
    from pathlib import Path

    from ethoscribe.cli import _parse

    args = _parse(["label", "ws", "--out", "o", "a.csv", "b.csv", "--quiet"])
    assert (args.command, args.model, args.out) == ("label", Path("ws"), Path("o"))
    assert args.inputs == [Path("a.csv"), Path("b.csv")] and args.quiet
    assert _parse(["label", "ws", "a.csv", "--out", "o"]).inputs == [Path("a.csv")]
    assert _parse(["discover", "--out", "o", "a.csv"]).inputs == [Path("a.csv")]
