"""Crash safety: a process saving a workspace is killed with SIGKILL at many points.

Two kinds of kill, on real child processes:

- counted: the child sends itself SIGKILL just before its N-th file-system call (open, write,
  fsync, replace, rename, link, unlink, mkdir, rmdir), for N spread over the whole save; this
  does not depend on the machine's speed or load.
- timed: the parent kills the child after a random delay within the duration of the save.

After every kill the workspace must open, every acknowledged edit must be in the journal (and
replay to the same names), every visible file must be complete, and ``Workspace.repair()`` must
bring the ethogram tables up to date. An interrupted ``discover`` must finish when run again,
with outputs equal to those of an uninterrupted run. Figures are printed (``pytest -s``).

Data: simulated sessions of the package's own invented animals, 12 s each.
"""

from __future__ import annotations

import shutil
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import _crash_worker as worker  # tests/ is on sys.path under pytest
from _reliability_data import (
    assert_same_contents,
    fork_server,
    run_discover,
    workspace_contents,
    write_study,
)
from ethoscribe.curation import Curation
from ethoscribe.errors import JournalWarning, WorkspaceError
from ethoscribe.io._safe import read_json
from ethoscribe.workspace import Workspace, read_journal

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL and fork are POSIX")

COUNTED_EDIT_KILLS = 36
TIMED_EDIT_KILLS = 14
DISCOVER_KILLS = 8


@pytest.fixture(scope="module")
def ctx():
    return fork_server()


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    return write_study(tmp_path_factory.mktemp("crash") / "study")


@pytest.fixture(scope="module")
def base(study, tmp_path_factory) -> Path:
    return run_discover(study, tmp_path_factory.mktemp("crash") / "base").path


def run_child(ctx, target, args, kill_after: float | None = None, timeout: float = 120.0):
    """Run ``target(*args)`` in a child; SIGKILL it ``kill_after`` s after it is ready."""
    ack = Path(args[2] if target is worker.discover_run else args[1])
    proc = ctx.Process(target=target, args=args)
    proc.start()
    if kill_after is not None:
        deadline = time.monotonic() + timeout
        while "ready" not in _lines(ack) and proc.is_alive() and time.monotonic() < deadline:
            time.sleep(0.002)
        time.sleep(kill_after)
        proc.kill()
    proc.join(timeout)
    if proc.is_alive():
        proc.kill()
        proc.join()
        raise AssertionError(f"child {target.__name__} did not finish in {timeout} s")
    return proc.exitcode, _lines(ack)


def _lines(path: Path) -> list[str]:
    return path.read_text().splitlines() if path.exists() else []


def _strip(record: dict) -> dict:
    return {k: v for k, v in record.items() if k != "time"}


@pytest.fixture(scope="module")
def reference(ctx, base, tmp_path_factory):
    """An uninterrupted edit session: its journal, file-call count and duration."""
    folder = tmp_path_factory.mktemp("reference")
    ws_path = shutil.copytree(base, folder / "ws")
    start = time.monotonic()
    code, acks = run_child(ctx, worker.edit_session, (str(ws_path), str(folder / "ack")))
    duration = time.monotonic() - start
    assert code == 0 and acks[-1].startswith("done"), acks
    records, problems = read_journal(ws_path / "journal.jsonl")
    assert [r["op"] for r in records] == list(worker.JOURNAL_OPS) and not problems
    calls = int(acks[-1].split()[1])
    min_bout_s = Workspace(base).model().min_bout_s
    return {"records": records, "calls": calls, "duration": duration, "min_bout_s": min_bout_s}


def _names_after(ws: Workspace, records: list[dict], k: int) -> pd.Series:
    cur = Curation.from_journal(records[:k], ws.default_names())
    return cur.apply(ws.state_labels())["motif"]


def _check_after_kill(ws_path: Path, acks: list[str], reference: dict) -> list[str]:
    """Every promise of the module docstring, for one killed edit session."""
    steps = {int(a.split()[1]) for a in acks if a.startswith("step")}
    acked_edits = sum(1 for i in steps if worker.STEPS[i][0] != "save_model")
    ws = Workspace(ws_path)  # opens
    records, problems = read_journal(ws_path / "journal.jsonl")
    assert not problems, problems
    k = len(records)
    assert k in (acked_edits, acked_edits + 1), (k, acked_edits)  # + the edit in flight
    assert [_strip(r) for r in records] == [_strip(r) for r in reference["records"][:k]]
    motifs = ws.labels()["motif"]
    pd.testing.assert_series_equal(motifs, _names_after(ws, reference["records"], k))
    model = ws.model()  # loads: never a half-saved model
    saved = worker.STEPS[2][1]["min_bout_s"]
    assert (
        model.min_bout_s == saved
        if 2 in steps
        else model.min_bout_s in (reference["min_bout_s"], saved)
    )
    for p in ws_path.iterdir():  # every visible file is complete
        if p.name.startswith(".") or p.is_dir():
            continue
        if p.suffix == ".csv":
            pd.read_csv(p)
        elif p.suffix == ".parquet":
            pd.read_parquet(p)
        elif p.suffix in (".json", ".jsonl"):
            assert p.suffix == ".jsonl" or read_json(p) is not None
    ws.features()
    on_disk = pd.read_csv(ws_path / "labels.csv", keep_default_na=False)["motif"]
    if ws.exports_current():
        assert on_disk.tolist() == motifs.tolist()
    else:  # the kill fell between the journal and the tables: they lag by the edit in flight
        lagging = _names_after(ws, reference["records"], k - 1).tolist()
        assert on_disk.tolist() in (motifs.tolist(), lagging)
    notes = ws.repair()
    assert ws.exports_current()
    after = pd.read_csv(ws_path / "labels.csv", keep_default_na=False)["motif"]
    assert after.tolist() == motifs.tolist()
    left = [p.name for d in (ws_path, ws_path / "model") for p in d.iterdir()]
    assert not [n for n in left if n.endswith(".tmp") or n.startswith(".incoming-")], left
    assert ".lock-owner.json" not in left
    return notes


@pytest.mark.slow
def test_edit_session_survives_counted_kills(ctx, base, reference, tmp_path):
    calls = reference["calls"]
    points = np.unique(np.linspace(1, calls, COUNTED_EDIT_KILLS).round().astype(int))
    survived, stale_owner = 0, 0
    for n in points:
        ws_path = shutil.copytree(base, tmp_path / f"ws{n}")
        ack = tmp_path / f"ack{n}"
        code, acks = run_child(ctx, worker.edit_session, (str(ws_path), str(ack), int(n)))
        assert code == -9, (n, code, acks)  # killed by SIGKILL at call n
        notes = _check_after_kill(ws_path, acks, reference)
        stale_owner += any("ended without closing" in note for note in notes)
        survived += 1
        shutil.rmtree(ws_path)
    print(
        f"\ncounted kills of an edit session: {survived}/{len(points)} survived "
        f"(kill points spread over {calls} file-system calls; {stale_owner} inside the lock)"
    )
    assert survived == len(points) >= COUNTED_EDIT_KILLS - 2


@pytest.mark.slow
def test_edit_session_survives_timed_kills(ctx, base, reference, tmp_path):
    rng = np.random.default_rng(20240501)  # seed printed with the figures
    delays = rng.uniform(0.0, reference["duration"], TIMED_EDIT_KILLS)
    survived, killed = 0, 0
    for i, delay in enumerate(delays):
        ws_path = shutil.copytree(base, tmp_path / f"ws{i}")
        ack = tmp_path / f"ack{i}"
        code, acks = run_child(ctx, worker.edit_session, (str(ws_path), str(ack)), float(delay))
        killed += code == -9
        _check_after_kill(ws_path, acks, reference)
        survived += 1
        shutil.rmtree(ws_path)
    print(
        f"\ntimed kills of an edit session (seed 20240501, delays up to "
        f"{reference['duration']:.2f} s): {survived}/{len(delays)} survived, {killed} landed "
        "before the session finished"
    )
    assert survived == len(delays)


def test_torn_journal_line_does_not_swallow_the_next_edit(base, tmp_path):
    # A crash (or power loss) in the middle of a long write can leave a line without its end.
    ws = Workspace(shutil.copytree(base, tmp_path / "ws"))
    ws.rename_motif("motif_01", "resting")
    with open(ws.path / "journal.jsonl", "a") as fh:
        fh.write('{"op": "rename", "motif": "motif_02", "na')
    with pytest.warns(JournalWarning, match="line 2"):  # the user is told the line was lost
        ws.rename_motif("motif_02", "walking")
    records, problems = read_journal(ws.path / "journal.jsonl")
    assert [r.get("name") for r in records] == ["resting", "walking"]
    assert len(problems) == 1 and "line 2" in problems[0]


@pytest.mark.slow
def test_interrupted_discover_resumes_to_the_same_outputs(ctx, study, base, tmp_path):
    log = tmp_path / "calls.log"
    dry = tmp_path / "dry"
    code, acks = run_child(
        ctx, worker.discover_run, (str(study), str(dry), str(tmp_path / "ack0"), 0, str(log))
    )
    assert code == 0, acks
    calls = int(acks[-1].split()[1])
    assert_same_contents(workspace_contents(dry), workspace_contents(base))
    # Kills at fixed calls from the start (reading, cleaning into the cache, staging), then at
    # calls counted from the start of the commit (the moves into place, then the report): the
    # commit's position varies with what the cache already holds. Each run resumes the last.
    names = log.read_text().splitlines()
    start = names.index("unlink workspace.json") + 1
    # A resumed run reuses the fit the first run cached (cache/fits/<digest>/): it makes that
    # save's calls no more, so kills before the commit stay among the calls every run makes.
    first = names.index("mkdir fits")  # then its staging folder, moved in when complete
    saved = names.index("replace " + names[first + 1].removeprefix("mkdir "))
    before_commit = start - (saved - first + 1)
    early = np.linspace(1, before_commit - 1, DISCOVER_KILLS // 2 + 2)[1:-1].round().astype(int)
    late = np.linspace(0, calls - start - 1, DISCOVER_KILLS - len(early)).round().astype(int)
    points = [(int(n), "", 0) for n in early] + [(0, "unlink workspace.json", int(m)) for m in late]
    out = tmp_path / "out"
    for i, (n, after, m) in enumerate(points):
        args = (str(study), str(out), str(tmp_path / f"ack{i + 1}"), n, "", after, m)
        code, acks = run_child(ctx, worker.discover_run, args)
        assert code == -9, (n, after, m, code, acks)
        try:  # after a kill the folder is either a complete workspace or plainly not one
            Workspace(out).labels()
        except WorkspaceError as exc:
            assert "not an ethoscribe workspace" in str(exc)
    ws = run_discover(study, out)
    assert_same_contents(workspace_contents(ws.path), workspace_contents(base))
    left = [p.name for p in out.iterdir() if p.name.startswith((".incoming-", ".old-"))]
    assert not left, left
    print(
        f"\ninterrupted discover: {len(points)}/{len(points)} kills (at calls {early.tolist()} "
        f"and at {late.tolist()} after the commit began, of {calls}) resumed to outputs equal "
        "to an uninterrupted run"
    )


@pytest.mark.slow
def test_forced_rediscovery_killed_before_its_commit_keeps_the_curation(ctx, study, base, tmp_path):
    ws = Workspace(shutil.copytree(base, tmp_path / "ws"))
    ws.rename_motif("motif_01", "resting")
    args = (str(study), str(ws.path), str(tmp_path / "ack"), 0, "", "unlink workspace.json", -1)
    code, acks = run_child(ctx, worker.discover_run, args)
    assert code == -9, acks  # killed just before the commit: the old workspace is still whole
    assert "resting" in Workspace(ws.path).curation().names.values()


def test_staging_retires_old_files_only_when_the_commit_starts(base, tmp_path):
    from ethoscribe.workspace.files import Staging

    ws = Workspace(shutil.copytree(base, tmp_path / "ws"))
    ws.rename_motif("motif_01", "resting")
    stage = Staging(ws.path)
    stage.retire("journal.jsonl", "journal-before.jsonl")
    (stage.path("summary.json")).write_text((ws.path / "summary.json").read_text())
    stage.abort()  # as if killed before the commit: the old workspace keeps its journal
    assert "resting" in Workspace(ws.path).curation().names.values()
    stage = Staging(ws.path)
    stage.retire("journal.jsonl", "journal-before.jsonl")
    stage.path("workspace.json").write_text((ws.path / "workspace.json").read_text())
    stage.commit(last="workspace.json")
    assert not (ws.path / "journal.jsonl").exists() and (ws.path / "journal-before.jsonl").exists()


def test_model_save_killed_between_its_two_files_keeps_the_old_model(base, tmp_path):
    # write_bundle replaces arrays.npz, then model.json; stop right between the two, as a kill
    # there would, and the old model must still load (its arrays were kept under a hidden name).
    from ethoscribe.io import bundle

    folder = shutil.copytree(base / "model", tmp_path / "model")
    meta, arrays = bundle.read_bundle(folder)
    bundle._keep_previous(folder)
    with bundle.atomic_write(folder / bundle.ARRAYS_FILE, "wb") as fh:
        np.savez(fh, **{**arrays, "segmenter/means": arrays["segmenter/means"] + 1.0})
    _, loaded = bundle.read_bundle(folder)
    np.testing.assert_array_equal(loaded["segmenter/means"], arrays["segmenter/means"])
    meta.pop("arrays_sha256")
    bundle.write_bundle(folder, meta, arrays)  # the next complete save removes the kept copy
    assert not list(folder.glob(".arrays-*.npz"))
    (folder / ".arrays-0.npz").write_bytes(b"")  # an unrelated hidden file is not trusted
    (folder / bundle.ARRAYS_FILE).write_bytes(b"PK damaged")
    with pytest.raises(Exception, match="digest differs"):
        bundle.read_bundle(folder)
