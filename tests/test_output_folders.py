"""Output folders are never clobbered, and one lock guards a workspace from a run's start to end.

``--out`` may be a new or empty folder, a folder of the same kind ethoscribe wrote, or one an
interrupted run left; a folder of the user's own files, an input folder, or (for a comparison)
another workspace is refused with the reason, and nothing in it changes. A run takes the
workspace lock before any work: a second run into the same folder, or an edit during a rerun,
is refused at once with who holds it.

Data: two simulated sessions of the package's invented animals, a few seconds each.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

from _reliability_data import run_discover, write_study
from ethoscribe.cli import main
from ethoscribe.errors import InputError, WorkspaceError
from ethoscribe.io import locking
from ethoscribe.widgets.state import WorkbenchState
from ethoscribe.workspace import Workspace, compare, discover


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    return write_study(tmp_path_factory.mktemp("out") / "study")


@pytest.fixture(scope="module")
def base(study, tmp_path_factory) -> Path:
    return run_discover(study, tmp_path_factory.mktemp("out") / "base").path


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in folder.rglob("*") if p.is_file()}


def test_a_folder_of_other_files_is_refused_and_left_alone(study, tmp_path, capsys):
    mine = tmp_path / "mine"
    (mine / "model").mkdir(parents=True)
    for name in ("labels.csv", "report.html", "summary.json", "model/notes.txt"):
        (mine / name).write_text("the user's own file")
    before = _snapshot(mine)
    code = main(["discover", str(study), "--out", str(mine), "--states", "3", "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and len(err.strip().splitlines()) == 1
    assert "holds files ethoscribe did not write (labels.csv, model, report.html and 1 more)" in err
    assert "choose a new or empty folder" in err
    assert _snapshot(mine) == before and sorted(p.name for p in mine.iterdir()) == sorted(
        ["labels.csv", "model", "report.html", "summary.json"]
    )


def test_an_input_folder_is_refused_as_out(study, tmp_path):
    before = _snapshot(study)
    with pytest.raises(InputError, match=r"is where the input .* is; write the results"):
        discover([study], study, states=3, stability=False, progress=False)
    with pytest.raises(InputError, match="is where the input"):
        discover([study / "session_01.parquet"], study, progress=False)
    assert _snapshot(study) == before


def test_compare_into_another_workspace_is_refused(base, study, tmp_path):
    other = run_discover(study, tmp_path / "other").path
    before = _snapshot(other)
    with pytest.raises(InputError, match="is an ethoscribe workspace; a comparison goes to"):
        compare(base, other, by="session")
    assert _snapshot(other) == before


def test_an_empty_folder_and_an_earlier_workspace_are_fine(study, base, tmp_path):
    empty = tmp_path / "empty"
    empty.mkdir()
    assert run_discover(study, empty).path == empty
    again = shutil.copytree(base, tmp_path / "again")
    assert run_discover(study, again).path == again  # rerun into its own workspace


def test_a_locked_workspace_is_refused_before_any_work(study, base, tmp_path):
    ws = shutil.copytree(base, tmp_path / "ws")
    with locking.hold(ws):
        start = time.perf_counter()
        with pytest.raises(
            WorkspaceError, match=rf"workspace {ws} is in use by process {os.getpid()}"
        ):
            discover([study], ws, states=3, stability=False, progress=False)
        elapsed = time.perf_counter() - start
    assert elapsed < 2.0, f"refused only after {elapsed:.1f} s"
    assert not list(ws.glob(".incoming-*"))


def _start_discover(study: Path, out: Path, *extra: str) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
    command = [sys.executable, "-m", "ethoscribe", "discover", str(study), "--out", str(out)]
    command += ["--states", "3", "--quiet", "--jobs", "1", *extra]
    return subprocess.Popen(command, env=env, stderr=subprocess.PIPE, stdout=subprocess.PIPE)


def _wait_until_locked(out: Path, run: subprocess.Popen, timeout: float = 120.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline and run.poll() is None:
        if out.is_dir() and locking.holder(out):  # locked, and the owner record written
            return
        time.sleep(0.05)
    raise AssertionError(f"the run never held {out}: {run.communicate()}")


@pytest.mark.slow
def test_two_runs_into_one_new_folder_the_second_is_refused(study, tmp_path):
    out = tmp_path / "new"
    first = _start_discover(study, out)
    try:
        _wait_until_locked(out, first)
        start = time.perf_counter()
        with pytest.raises(WorkspaceError, match=r"folder .* is in use by process \d+"):
            discover([study], out, states=3, stability=False, progress=False)
        assert time.perf_counter() - start < 2.0
        _, err = first.communicate(timeout=600)
        assert first.returncode == 0, err
    finally:
        if first.poll() is None:
            first.kill()
            first.wait()
    assert Workspace(out).summary["n_states"] == 3  # the first run's result is whole


@pytest.mark.slow
def test_an_edit_during_a_forced_rerun_is_refused_clearly(study, base, tmp_path):
    ws = shutil.copytree(base, tmp_path / "ws")
    state = WorkbenchState(ws, write_behind=False)
    state.lock_wait_s = 0.2
    rerun = _start_discover(study, ws, "--force")
    try:
        _wait_until_locked(ws, rerun)
        assert not state.edit("rename", motif="motif_01", name="resting")
        kind, text = state.message
        assert kind == "error" and "the rename was not saved: workspace" in text
        assert "in use by process" in text and "discover" in text
        with pytest.raises(WorkspaceError, match="in use by process"):
            Workspace(ws).rename_motif("motif_01", "resting")
        _, err = rerun.communicate(timeout=600)
        assert rerun.returncode == 0, err
    finally:
        if rerun.poll() is None:
            rerun.kill()
            rerun.wait()
        state.close()
    assert Workspace(ws).journal() == []  # nothing was set aside: the edit never happened
