"""The discover run and the workspace folder: output contract, determinism, edits, locks, bad input.

Data: the bundled simulated example sessions (invented animals), trimmed to keep tests fast.
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from _example_study import trimmed_study
from ethoscribe.errors import InputError, InputWarning, JournalWarning, WorkspaceError
from ethoscribe.io import read_tidy
from ethoscribe.workspace import Workspace, discover, read_journal
from ethoscribe.workspace.runs import label_sessions

LABEL_COLUMNS = ["session", "animal", "frame", "time_s", "state", "motif", "probability"]
BOUT_COLUMNS = ["session", "animal", "motif", "start_frame", "stop_frame", "start_s", "duration_s"]


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    """Three trimmed example sessions (90 s each) and a manifest, in a folder of their own."""
    return trimmed_study(
        tmp_path_factory.mktemp("study"), ["session_01", "session_02", "session_09"], 2700
    )


@pytest.fixture(scope="module")
def workspace(study, tmp_path_factory) -> Workspace:
    out = tmp_path_factory.mktemp("ws") / "run"
    return discover(
        [study], out, manifest=study / "manifest.csv", states=4, stability=False, progress=False
    )


def test_discover_writes_the_documented_files(workspace):
    p = workspace.path
    for name in [
        "labels.csv",
        "bouts.csv",
        "transitions.csv",
        "time_budget.csv",
        "quality.csv",
        "sessions.csv",
        "summary.json",
        "workspace.json",
        "model/model.json",
        "model/arrays.npz",
    ]:
        assert (p / name).is_file(), name
    labels = pd.read_csv(p / "labels.csv", keep_default_na=False, na_values=[""])
    assert list(labels.columns) == [*LABEL_COLUMNS, "body_seen"]  # fraction of keypoints seen
    assert set(labels["session"]) == {"session_01", "session_02", "session_09"}
    assert (labels.groupby("session").size() == 2700).all()
    invalid = labels["state"] == -1
    assert labels.loc[invalid, "probability"].isna().all()
    assert labels.loc[~invalid, "motif"].str.match(r"motif_\d\d$").all()
    assert labels.loc[~invalid, "probability"].between(0, 1).all()
    bouts = pd.read_csv(p / "bouts.csv")
    assert list(bouts.columns[: len(BOUT_COLUMNS) + 1]) != []  # the contract's columns, in order
    assert [c for c in bouts.columns if c in BOUT_COLUMNS] == BOUT_COLUMNS
    transitions = pd.read_csv(p / "transitions.csv")
    assert {"from_motif", "to_motif", "count", "probability"} <= set(transitions.columns)
    summary = json.loads((p / "summary.json").read_text())
    assert summary["seed"] == 0 and summary["n_states"] == 4
    assert {"ethoscribe", "numpy", "hmmlearn", "ruptures"} <= set(summary["versions"])
    assert "animal-welfare" in summary["caution"]
    # What the run was made with: the fitting sample's budget and the covariance floor.
    assert summary["fit_frames"] == 1_000_000
    assert summary["covariance_floor"] == pytest.approx(0.01)  # the model's HMM option
    # Per-individual offsets (the HMM's default): their spread, relative to a state's own
    model = Workspace(p).model()
    spread = summary["individual_offsets"]["relative_spread"]
    assert spread == pytest.approx(np.sqrt(model.segmenter_.offset_spread_), abs=1e-4)
    assert "own offset of the feature levels" in (p / "report.html").read_text()
    assert not list(p.glob(".incoming-*")), "staging folder left behind"


def test_bout_table_reproduces_the_frame_labels(workspace):
    # Reference: plain run-length encoding with itertools.groupby over each session's states.
    from itertools import groupby

    labels = workspace.state_labels()
    bouts = pd.read_csv(workspace.path / "bouts.csv")
    for session, part in labels.groupby("session"):
        runs = [(k, len(list(g))) for k, g in groupby(part["motif"].tolist())]
        runs = [r for r in runs if r[0] != ""]
        got = bouts[bouts["session"] == session]
        assert [r[0] for r in runs] == got["motif"].tolist()
        assert [r[1] for r in runs] == (got["stop_frame"] - got["start_frame"]).tolist()


def test_same_seed_gives_identical_files(study, workspace, tmp_path):
    again = discover(
        [study],
        tmp_path / "again",
        manifest=study / "manifest.csv",
        states=4,
        stability=False,
        progress=False,
    )
    for name in ["labels.csv", "bouts.csv", "transitions.csv"]:
        assert (again.path / name).read_bytes() == (workspace.path / name).read_bytes(), name


def test_saved_model_labels_sessions_as_at_discovery(study, workspace):
    model = workspace.model()
    tracks = read_tidy(study / "session_09.parquet", session="session_09", fps=30.0)
    from ethoscribe.workspace import read_sessions

    sessions, _ = read_sessions(
        [study / "session_09.parquet"], study / "manifest.csv", progress=False
    )
    labels = model.label(sessions)
    saved = workspace.state_labels()
    saved = saved[saved["session"] == "session_09"].reset_index(drop=True)
    assert tracks.n_frames == len(labels)
    np.testing.assert_array_equal(labels["state"].to_numpy(), saved["state"].to_numpy())


def test_edits_are_journaled_and_replayed(study, workspace, tmp_path):
    import shutil

    ws = Workspace(shutil.copytree(workspace.path, tmp_path / "ws"))
    ws.rename_motif("motif_01", "resting")
    ws.merge_motifs(["motif_02", "motif_03"], into="moving")
    assert set(pd.read_csv(ws.path / "bouts.csv")["motif"]) <= {"resting", "moving", "motif_04"}
    reopened = Workspace(ws.path)
    assert set(reopened.labels()["motif"]) - {""} == {"resting", "moving", "motif_04"}
    # The states' file holds no names that a rename would leave stale; read, it gets defaults
    assert "motif" not in pd.read_parquet(ws.path / "labels.parquet").columns
    states = reopened.state_labels(["motif", "session"])
    assert list(states.columns) == ["motif", "session"]
    assert set(states["motif"]) - {""} <= {f"motif_0{k}" for k in range(1, 5)}
    reopened.undo()
    assert "motif_02" in set(Workspace(ws.path).labels()["motif"])
    records, problems = read_journal(ws.path / "journal.jsonl")
    assert [r["op"] for r in records] == ["rename", "merge", "undo"] and not problems
    with pytest.raises(InputError, match=r"itself|same|twice|distinct|at least"):
        ws.merge_motifs(["resting", "resting"], into="resting")
    with pytest.raises(InputError):
        ws.rename_motif("resting", "")

    # A line cut short by a crash: every complete edit survives, the bad line is reported.
    with open(ws.path / "journal.jsonl", "a") as fh:
        fh.write('{"op": "rename", "motif": "moving", "na')
    records, problems = read_journal(ws.path / "journal.jsonl")
    assert len(records) == 3 and len(problems) == 1 and "line 4" in problems[0]
    # ... and told to the user, who would otherwise lose that edit without knowing
    with pytest.warns(JournalWarning, match=r"journal\.jsonl: line 4 .*skipped"):
        assert "resting" in set(Workspace(ws.path).labels()["motif"])
    assert "1 journal line(s) skipped" in Workspace(ws.path).describe()
    journal = ws.path / "journal.jsonl"
    journal.write_text("\n".join(journal.read_text().splitlines()[:3]) + "\n")  # the user's fix

    # A new cohort labelled with this workspace's model gets the curated names.
    cohort = label_sessions(
        ws.path,
        [study / "session_02.parquet"],
        tmp_path / "cohort",
        manifest=study / "manifest.csv",
        progress=False,
    )
    assert "resting" in set(pd.read_csv(cohort.path / "bouts.csv")["motif"])


def test_names_given_from_python_reach_the_report_when_the_ethogram_is_saved(workspace, tmp_path):
    # An edit rewrites the tables at once; the report (a page of figures) is rewritten when
    # the ethogram is saved, as the README's Python example does.
    import shutil

    from ethoscribe.workspace import save_ethogram

    ws = Workspace(shutil.copytree(workspace.path, tmp_path / "ws"))
    ws.rename_motif("motif_01", "resting_renamed")
    assert "resting_renamed" not in (ws.path / "report.html").read_text()
    written = save_ethogram(ws.path)
    assert written["report.html"] == ws.path / "report.html"
    assert "resting_renamed" in (ws.path / "report.html").read_text()
    assert "resting_renamed" in set(pd.read_csv(ws.path / "exports" / "bouts.csv")["motif"])
    # the exported CSVs are rounded as the run's own (seconds to 0.1 ms, others to 6
    # significant digits); they were written at full precision
    for name in ("bout_durations.csv", "time_budget.csv", "transitions.csv"):
        table = pd.read_csv(ws.path / "exports" / name)
        for column in table.select_dtypes("float"):
            values = table[column].dropna().to_numpy()
            digits = [round(v, 4) if column.endswith("_s") else float(f"{v:.6g}") for v in values]
            np.testing.assert_array_equal(values, digits, err_msg=f"{name}: {column}")


def test_second_editor_gets_a_clear_message(workspace, tmp_path):
    import shutil

    ws = Workspace(shutil.copytree(workspace.path, tmp_path / "ws"))
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            "import sys, time; from ethoscribe.workspace import Workspace\n"
            f"with Workspace({str(ws.path)!r}).lock():\n"
            "    print('locked', flush=True); time.sleep(30)",
        ],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "locked"
        with pytest.raises(WorkspaceError, match=r"in use by process \d+"):
            ws.rename_motif("motif_01", "resting")
    finally:
        holder.kill()
        holder.wait()
    time.sleep(0.1)
    ws.rename_motif("motif_01", "resting")  # the lock of a dead process is released
    assert "resting" in set(ws.labels()["motif"])


def test_bad_input_writes_nothing(study, tmp_path):
    out = tmp_path / "out"
    with pytest.raises(InputError, match=r"does not exist|not found|no such"):
        discover([study / "missing.parquet"], out, progress=False)
    assert not out.exists() or not any(out.iterdir())
    bad = tmp_path / "bad"
    bad.mkdir()
    pd.DataFrame({"frame": [0, 1], "keypoint": ["nose", "nose"], "x": [1.0, 2.0]}).to_csv(
        bad / "broken.csv", index=False
    )
    with pytest.raises(InputError, match=r"'y'"):
        discover([bad], out, fps=30, progress=False)
    assert not out.exists() or not any(out.iterdir())


def test_a_session_missing_from_the_manifest_is_named(study, tmp_path):
    (tmp_path / "extra").mkdir()
    src = study / "session_01.parquet"
    (tmp_path / "extra" / "session_77.parquet").write_bytes(src.read_bytes())
    with pytest.raises(InputError, match="session_77"):
        discover(
            [tmp_path / "extra"], tmp_path / "out", manifest=study / "manifest.csv", progress=False
        )


def test_rediscovery_refuses_to_drop_curated_names(study, workspace, tmp_path):
    import shutil

    ws = Workspace(shutil.copytree(workspace.path, tmp_path / "ws"))
    ws.rename_motif("motif_01", "resting")
    with pytest.raises(WorkspaceError, match="curated"):
        discover([study], ws.path, manifest=study / "manifest.csv", states=4, progress=False)


def test_ethogram_tables_written_per_session_equal_those_written_at_once(tmp_path):
    from ethoscribe.workspace.folder import write_ethogram_tables
    from test_ethogram import _three_sessions

    labels = _three_sessions()
    (tmp_path / "whole").mkdir()
    (tmp_path / "pieces").mkdir()
    write_ethogram_tables(tmp_path / "whole", labels)
    # Pieces in another order than the sorted session names: the summaries must not care.
    pieces = [g for _, g in labels.groupby("session")][::-1]
    write_ethogram_tables(tmp_path / "pieces", iter(pieces))
    assert pd.read_csv(tmp_path / "pieces" / "labels.csv")["session"].iloc[0] == "s3"
    for name in ["bouts.csv", "transitions.csv", "time_budget.csv"]:
        a, b = (tmp_path / "whole" / name), (tmp_path / "pieces" / name)
        assert a.read_bytes() == b.read_bytes(), name


def test_repair_removes_old_temporary_files_of_interrupted_runs_from_the_cache(workspace, tmp_path):
    import os
    import shutil

    ws = Workspace(shutil.copytree(workspace.path, tmp_path / "ws"))
    cleaned = ws.path / "cache" / "cleaned"
    old, fresh = cleaned / ".a.npz.x1.tmp", cleaned / ".b.npz.x2.tmp"
    old.write_bytes(b"partial")
    fresh.write_bytes(b"partial")
    os.utime(old, (time.time() - 7200, time.time() - 7200))
    notes = ws.repair()
    assert not old.exists() and fresh.exists()  # a live run may still own the fresh one
    assert any(".a.npz.x1.tmp" in n for n in notes)


def test_a_discovery_for_streaming_labels_as_the_stream_does(study, tmp_path):
    # discover(causal=True) (the command line's --for-streaming): the saved labels of a session
    # are those StreamingLabeller gives frame by frame, on >= 99 % of frames (the docs' promise).
    from ethoscribe.segment.streaming import StreamingLabeller
    from ethoscribe.workspace import read_sessions

    ws = discover(
        [study], tmp_path / "live", manifest=study / "manifest.csv", states=3,
        stability=False, progress=False, causal=True,
    )  # fmt: skip
    model = ws.model()
    assert model.causal and isinstance(model.cleaning_.max_speed, float)
    [tracks], _ = read_sessions(
        [study / "session_09.parquet"], study / "manifest.csv", progress=False
    )
    live = StreamingLabeller(model)
    streamed = [live.push(tracks.coords[t], tracks.confidence[t])[0].state for t in range(2700)]
    saved = ws.state_labels()
    saved = saved[saved["session"] == "session_09"]["state"].to_numpy()
    agree = float(np.mean(np.array(streamed) == saved))
    print(f"\ndiscover(causal=True): streamed vs saved labels agree on {agree:.2%} of frames")
    assert agree >= 0.99


def test_a_labelled_cohort_says_which_model_labelled_it(study, workspace, tmp_path, monkeypatch):
    """A cohort labelled with a curated model: the run's message counts the curated motifs
    (not the fitted states) and, like summary.json and the report, names the workspace whose
    model labelled it by its full path (a relative path means nothing once the folder moves)."""
    import shutil

    from ethoscribe.workspace.report_sections import model_section

    ws = Workspace(shutil.copytree(workspace.path, tmp_path / "trained"))
    ws.merge_motifs(["motif_02", "motif_03"], into="moving")  # 4 states -> 3 motifs
    monkeypatch.chdir(tmp_path)
    cohort = label_sessions(
        "trained", [study / "session_02.parquet"], "cohort", manifest=study / "manifest.csv",
        progress=False,
    )  # fmt: skip
    source = str((tmp_path / "trained").resolve())
    assert cohort.summary["labelled_with"] == source
    said = cohort.describe()
    assert "3 motifs" in said and f"labelled with the model of {source}" in said
    section = model_section(cohort)
    assert f"Labelled with the saved model of {source}" in section.text
    assert "not refitted" in section.text
    assert (
        f"Stability is checked where a model is fitted: see the report of {source}" in section.text
    )
    assert "No stability check was run" not in section.text
    fit = [t for caption, t in section.tables if "explained" in caption]
    assert fit and list(fit[0]["session"]) == ["session_02"]


def test_a_cohort_filmed_faster_than_the_model_is_resampled_to_its_rate(study, workspace, tmp_path):
    """A new cohort filmed at twice the model's frame rate: labelling stopped with 'resample it
    (cleaning target_fps)', an option ``label`` does not have. Now the session is resampled to
    the model's rate (as discover's target_fps does) and the user is told; a slower cohort is
    refused before any work, with the fix."""
    manifest = pd.read_csv(study / "manifest.csv")
    row = manifest[manifest["session"] == "session_02"].copy()
    fast = row.assign(fps=60.0)  # the same file declared at 60 fps: 2700 frames, 45 s
    fast["path"] = str(study / "session_02.parquet")
    fast.to_csv(tmp_path / "fast.csv", index=False)
    with pytest.warns(InputWarning) as said:
        cohort = label_sessions(
            workspace.path, [], tmp_path / "cohort", manifest=tmp_path / "fast.csv",
            progress=False,
        )  # fmt: skip
    said = [str(w.message) for w in said]
    assert any("'session_02' (60 fps) resampled to the model's 30 fps" in m for m in said)
    # its animal moves twice as fast as any in training: the fit check says so
    assert all("resampled" in m or "explains" in m for m in said)
    labels = cohort.state_labels()
    # 45 s at 30 fps: frame j at j / 30 s, up to the last input frame (2699 / 60 s)
    assert len(labels) == 1350 and labels["time_s"].iloc[-1] == pytest.approx(1349 / 30)
    # sessions.csv counted the 2700 frames read only, beside labels.csv's 1350 rows: now both
    (listed,) = pd.read_csv(cohort.path / "sessions.csv").to_dict("records")
    assert (listed["fps"], listed["n_frames"]) == (60.0, 2700)  # as read, as before
    assert (listed["labelled_fps"], listed["n_labelled_frames"]) == (30.0, 1350)
    assert "2,700 frames read, 1,350 labelled (resampled to 30 fps)" in cohort.describe()
    # the workbench's postures made without the run's cleaned copy: resampled as labelled
    from ethoscribe.workspace.postures import compute_session_postures

    assert compute_session_postures(cohort, "session_02").coords.shape[0] == 1350
    slow = row.assign(fps=15.0, path=str(study / "session_02.parquet"))
    slow.to_csv(tmp_path / "slow.csv", index=False)
    with pytest.raises(InputError, match=r"'session_02'.*15 fps.*slower than the model's 30"):
        label_sessions(
            workspace.path, [], tmp_path / "slow", manifest=tmp_path / "slow.csv", progress=False
        )
    assert not (tmp_path / "slow" / "labels.csv").exists()
    # 29.97 fps (NTSC video) against a 30 fps model: refused before as 'slower'; now resampled
    # up (0.1 % of frames interpolated), with a warning: n frames at 29.97 fps span
    # (n - 1) / 29.97 s, i.e. floor((n - 1) * 30 / 29.97) + 1 frames at 30 fps
    ntsc = row.assign(fps=29.97, path=str(study / "session_02.parquet"))
    ntsc.to_csv(tmp_path / "ntsc.csv", index=False)
    with pytest.warns(InputWarning) as said:
        cohort = label_sessions(
            workspace.path, [], tmp_path / "ntsc", manifest=tmp_path / "ntsc.csv", progress=False
        )
    said = [str(w.message) for w in said]
    assert any("'session_02' (29.97 fps) filmed slightly slower" in m for m in said), said
    n_read = int(pd.read_csv(tmp_path / "ntsc" / "sessions.csv")["n_frames"].iloc[0])
    assert len(cohort.state_labels()) == int(np.floor((n_read - 1) * 30 / 29.97 + 1e-9)) + 1


def test_a_cohort_whose_rate_only_its_file_gives_is_resampled_or_refused_alike(
    study, workspace, tmp_path
):
    """The rate read from the file (its time column or record), none in the manifest: the
    model refused it late with 'resample it (cleaning target_fps)', an option label does not
    have. Now the same rule as for a rate given in the manifest."""
    from ethoscribe.io import write_tidy

    row = pd.read_csv(study / "manifest.csv").query("session == 'session_02'")
    tracks = read_tidy(study / "session_02.parquet", fps=30)
    for fps, name in ((29.97, "ntsc"), (25.0, "pal")):
        write_tidy(tracks.replace(fps=fps), tmp_path / f"{name}.parquet")
        plan = row.drop(columns="fps").assign(session=name, path=f"{name}.parquet")
        plan.to_csv(tmp_path / f"{name}.csv", index=False)
    with pytest.warns(InputWarning, match=r"'ntsc' \(29.97 fps\) filmed slightly slower"):
        cohort = label_sessions(
            workspace.path, [], tmp_path / "ntsc_run", manifest=tmp_path / "ntsc.csv",
            progress=False,
        )  # fmt: skip
    n = tracks.n_frames
    assert len(cohort.state_labels()) == int(np.floor((n - 1) * 30 / 29.97 + 1e-9)) + 1
    with pytest.raises(InputError, match=r"'pal' \(25 fps\) filmed slower than the model's 30"):
        label_sessions(
            workspace.path, [], tmp_path / "pal_run", manifest=tmp_path / "pal.csv", progress=False
        )
    assert not (tmp_path / "pal_run").exists()


def test_a_resampled_discovery_counts_frames_as_read_and_as_labelled(study, tmp_path):
    """Sessions resampled from 30 to 15 fps (cleaning target_fps): sessions.csv and the run's
    message counted the frames read (2700 a session) while labels.csv has 1350 rows a session.
    Both counts are now given, and the labelled one equals the labels' rows per session and
    animal. A fitting sample smaller than the frames read was drawn over the frame counts read
    and cut blocks past the end of the resampled sessions (an empty block stopped the run)."""
    from ethoscribe.workspace.report_sections import model_section

    with pytest.warns(UserWarning, match="at 15 fps the band amplitudes around 8 Hz"):
        ws = discover(
            [study], tmp_path / "run", manifest=study / "manifest.csv", states=4,
            stability=False, progress=False, cleaning={"target_fps": 15.0}, fit_frames=3000,
        )  # fmt: skip
    sessions = pd.read_csv(ws.path / "sessions.csv").set_index("session")
    assert (sessions["n_frames"] == 2700).all() and (sessions["fps"] == 30.0).all()
    assert (sessions["labelled_fps"] == 15.0).all()
    labels = pd.read_csv(ws.path / "labels.csv")
    rows = labels.groupby(["session", "animal"]).size().groupby("session").unique()
    # 90 s at 15 fps, frame j at j / 15 s up to the last input frame (2699 / 30 s)
    assert {s: list(r) for s, r in rows.items()} == {s: [1350] for s in sessions.index}
    assert sessions["n_labelled_frames"].to_dict() == {s: 1350 for s in sessions.index}
    said = "8,100 frames read, 4,050 labelled (resampled to 15 fps)"
    assert said in ws.describe() and said in model_section(ws).text
    assert ws.summary["n_labelled_frames"] == 4050 and ws.summary["n_frames"] == 8100
    assert ws.summary["n_training_frames"] == 3000  # the sample asked for, from labelled frames


def test_a_cache_entry_without_the_labelled_frame_count_is_made_again(study, tmp_path):
    """Cleaned sessions cached before sessions.csv gave the labelled frame count lack it in
    their row: such an entry is made again (it would leave the column empty), a complete one
    is reused."""
    from ethoscribe.clean import CleanParams
    from ethoscribe.workspace.cache import prepare_session
    from ethoscribe.workspace.reading import plan_sessions

    (entry,) = plan_sessions([study / "session_02.parquet"], study / "manifest.csv")
    cleaning = CleanParams(target_fps=15.0).to_dict()
    job = {"entry": entry, "cleaning": cleaning, "cache": str(tmp_path / "cache")}
    first = prepare_session(job)
    row = json.loads(Path(first["row"]).read_text())
    assert (row["fps"], row["n_frames"]) == (30.0, 2700)
    assert (row["labelled_fps"], row["n_labelled_frames"]) == (15.0, 1350)
    assert prepare_session(job)["reused"]
    del row["n_labelled_frames"]  # as written before the count was recorded
    Path(first["row"]).write_text(json.dumps(row))
    again = prepare_session(job)
    assert not again["reused"]
    assert json.loads(Path(again["row"]).read_text())["n_labelled_frames"] == 1350


def test_the_cache_keeps_the_precision_of_tracks_far_from_their_origin(study, tmp_path):
    """Cleaned tracks are cached as float32, which keeps 7 digits: tracks 1e6 mm from their
    origin (a world or map frame) were stored to 0.06 mm, coarser than the movement at rest,
    and the example study so shifted gave other motifs (6 instead of 7, ARI 0.89 with the
    unshifted run). Now stored from the session's middle: as precise as unshifted tracks."""
    from ethoscribe.clean import CleanParams, clean
    from ethoscribe.io import write_tidy
    from ethoscribe.workspace.cache import load_prepared, prepare_session
    from ethoscribe.workspace.reading import plan_sessions

    tracks = read_tidy(study / "session_02.parquet", fps=30)
    far = tracks.replace(coords=tracks.coords + np.array([1e6, -2e6]), units="mm")
    write_tidy(far, tmp_path / "far.parquet")
    (entry,) = plan_sessions([tmp_path / "far.parquet"])
    job = {"entry": entry, "cleaning": CleanParams().to_dict(), "cache": str(tmp_path / "c")}
    cached, _, _ = load_prepared(prepare_session(job))
    direct, _ = clean(far, CleanParams())
    error = np.nanmax(np.abs(cached.coords - direct.coords))
    assert error < 1e-3, error  # float32 of absolute positions near 2e6: up to 0.06 mm off


def test_a_cohort_is_labelled_again_with_the_names_curated_since(study, workspace, tmp_path):
    """After naming more motifs in the trained workspace, labelling the cohort again into its
    folder was refused: its copy of the journal counted as curation of its own, and the message
    spoke of 'a new discovery' and replace_curation, which label does not take. Now a cohort
    whose journal is the source's (or an earlier part of it) is relabelled with the current
    names; one with edits made in it is refused, saying so."""
    import shutil

    ws = Workspace(shutil.copytree(workspace.path, tmp_path / "trained"))
    ws.rename_motif("motif_01", "resting")
    files, manifest = [study / "session_02.parquet"], study / "manifest.csv"
    label_sessions(ws.path, files, tmp_path / "cohort", manifest=manifest, progress=False)
    ws.rename_motif("motif_02", "walking")
    cohort = label_sessions(ws.path, files, tmp_path / "cohort", manifest=manifest, progress=False)
    assert {"resting", "walking"} <= set(pd.read_csv(cohort.path / "bouts.csv")["motif"])
    assert [r["op"] for r in cohort.journal()] == ["rename", "rename"]
    cohort.rename_motif("resting", "still")  # an edit made in the cohort only
    with pytest.raises(WorkspaceError, match=r"cohort holds motif names edited there.*'still'"):
        label_sessions(ws.path, files, tmp_path / "cohort", manifest=manifest, progress=False)
    assert "still" in set(pd.read_csv(cohort.path / "bouts.csv")["motif"])  # left as it was


def test_an_animal_unscored_on_much_of_a_session_is_named(study, workspace, tmp_path):
    """An animal out of view for a third of its session (every keypoint missing): nothing was
    said while labelling, yet its time budget and bouts cover only the frames it was seen. Now
    the run names the session, the animal and the share of frames left unscored."""
    tracks = read_tidy(study / "session_02.parquet", fps=30.0)
    coords = tracks.coords.copy()
    coords[900:1800] = np.nan  # 30 s of 90 s: out of view
    gone = tracks.replace(coords=coords, confidence=np.where(np.isnan(coords[..., 0]), np.nan,
                                                             tracks.confidence))  # fmt: skip
    from ethoscribe.io import write_tidy

    (tmp_path / "cohort").mkdir()
    write_tidy(gone, tmp_path / "cohort" / "session_02.parquet")
    with pytest.warns(InputWarning) as said:
        cohort = label_sessions(
            workspace.path, [tmp_path / "cohort"], tmp_path / "out",
            manifest=study / "manifest.csv", progress=False,
        )  # fmt: skip
    labels = cohort.state_labels()
    share = float((labels["state"] < 0).mean())  # the labels themselves
    assert 0.3 <= share < 0.4
    texts = [str(w.message) for w in said]
    assert any(f"'session_02' (animal0): {share:.0%} of frames unscored" in t for t in texts), texts


def test_sessions_lacking_a_keypoint_are_read_scored_and_reported(study, workspace, tmp_path):
    """A keypoint the tracker gained during the study: an earlier session's file lacks it. It
    is read as never seen (said once), its frames are scored from the other keypoints, and
    quality.csv shows the keypoint missing on every frame of that session; the same for a
    new cohort labelled with the model."""
    table = pd.read_parquet(study / "session_01.parquet")
    lacking = tmp_path / "data"
    lacking.mkdir()
    table[table["keypoint"] != "neck"].to_parquet(lacking / "session_01.parquet")
    for name in ("session_02", "session_09"):
        (lacking / f"{name}.parquet").write_bytes((study / f"{name}.parquet").read_bytes())
    (lacking / "manifest.csv").write_bytes((study / "manifest.csv").read_bytes())
    with pytest.warns(InputWarning, match=r"are lacking.*'session_01' \(neck\)") as said:
        ws = discover(
            [lacking], tmp_path / "ws", manifest=lacking / "manifest.csv", states=4,
            stability=False, progress=False,
        )  # fmt: skip
    assert sum("are lacking" in str(w.message) for w in said) == 1  # once, not per step
    labels = ws.labels()
    first = labels[labels["session"] == "session_01"]
    assert (first["state"] >= 0).mean() >= 0.95 and first["body_seen"].max() == pytest.approx(0.9)
    quality = pd.read_csv(ws.path / "quality.csv")
    row = quality[(quality["session"] == "session_01") & (quality["keypoint"] == "neck")]
    assert len(row) == 1 and row["frac_missing_after"].item() == 1.0
    from ethoscribe.workspace.report_sections import quality_section

    assert "from every frame of a session" in quality_section(ws).text
    assert "'neck' in 'session_01'. Their positions" in quality_section(ws).text
    assert "from every frame" not in quality_section(workspace).text
    with pytest.warns(InputWarning, match=r"are lacking.*'session_01' \(neck\)"):
        cohort = label_sessions(
            workspace.path, [lacking / "session_01.parquet"], tmp_path / "cohort",
            manifest=lacking / "manifest.csv", progress=False,
        )  # fmt: skip
    assert (cohort.labels()["state"] >= 0).mean() >= 0.95
    assert "neck" in set(pd.read_csv(cohort.path / "quality.csv")["keypoint"])


def test_a_cohort_lacking_an_end_of_the_body_axis_is_told_once_with_the_refit(
    study, workspace, tmp_path
):
    # A tracker set up anew for a cohort, without one of the keypoints the model's body frame
    # rests on: one warning for every session (not one per file), naming the axis and the refit
    end = workspace.model().features_.axis_[0]
    data = tmp_path / "data"
    data.mkdir()
    for name in ("session_01", "session_02"):
        table = pd.read_parquet(study / f"{name}.parquet")
        table[table["keypoint"] != end].to_parquet(data / f"{name}.parquet")
    with pytest.warns(InputWarning) as said:
        label_sessions(
            workspace.path, sorted(data.glob("*.parquet")), tmp_path / "cohort",
            manifest=study / "manifest.csv", progress=False,
        )  # fmt: skip
    lacking = [str(w.message) for w in said if "are lacking" in str(w.message)]
    assert len(lacking) == 1, lacking
    assert f"'session_01' ({end}), 'session_02' ({end})" in lacking[0]
    assert f"{end!r} is an end of the model's body axis" in lacking[0]
    assert f"keypoints={end}," not in lacking[0] and "--reader-option keypoints=" in lacking[0]


def test_a_cohort_in_percent_is_said_to_be_read_as_percent_once_per_file(
    study, workspace, tmp_path
):
    """Labelling read the first new file twice (once to check its units), so its reading
    warnings, such as confidences read as percent, came twice for that file only."""
    percent = tmp_path / "percent"
    percent.mkdir()
    for name in ("session_01", "session_02"):
        table = pd.read_parquet(study / f"{name}.parquet")
        table["confidence"] *= 100
        table.to_csv(percent / f"{name}.csv", index=False)
    with warnings.catch_warnings(record=True) as said:
        warnings.simplefilter("always")
        label_sessions(
            workspace.path, sorted(percent.glob("*.csv")), tmp_path / "cohort",
            manifest=study / "manifest.csv", progress=False,
        )  # fmt: skip
    texts = [str(w.message) for w in said if "read as percent" in str(w.message)]
    assert sorted(texts) == [
        f"{name}.csv: confidence written from 0 to 100 is read as percent (divided by 100)"
        for name in ("session_01", "session_02")
    ], texts


def test_a_cohort_tracked_with_more_keypoints_is_labelled_said_once(study, workspace, tmp_path):
    """New sessions whose tracker gained a keypoint the model was not fitted on: it is left
    out, said in one line naming the sessions (labelling runs per session), and the labels
    are those of the same files without it."""
    more = tmp_path / "more"
    more.mkdir()
    for name in ("session_01", "session_02"):
        table = pd.read_parquet(study / f"{name}.parquet")
        extra = table[table["keypoint"] == "nose"].assign(keypoint="whisker_tip")
        extra.loc[extra["frame"] % 2 == 0, "confidence"] = 0.0  # lost on every other frame
        pd.concat([table.astype({"keypoint": str}), extra]).to_parquet(more / f"{name}.parquet")
    files = sorted(more.glob("*.parquet"))
    with warnings.catch_warnings(record=True) as said:
        warnings.simplefilter("always")
        cohort = label_sessions(
            workspace.path, files, tmp_path / "cohort", manifest=study / "manifest.csv",
            progress=False,
        )  # fmt: skip
    texts = [str(w.message) for w in said if "whisker_tip" in str(w.message)]
    assert texts == [texts[0]] and "session(s): 'session_01', 'session_02'" in texts[0], texts
    quality = pd.read_csv(cohort.path / "quality.csv")
    seen = cohort.labels().groupby("session")["body_seen"].apply(lambda b: (b < 1).mean())
    invalid = quality.groupby("session")["frac_invalid_frames"].first()  # model's keypoints
    np.testing.assert_allclose(invalid.sort_index(), seen.sort_index(), rtol=5e-6)  # 6 digits
    assert (invalid < 0.5).all()  # not the lost extra keypoint's every other frame
    from ethoscribe.workspace.report_sections import quality_section

    assert "In the files but not read by the model: whisker_tip." in quality_section(cohort).text
    plain = label_sessions(
        workspace.path, [study / "session_01.parquet", study / "session_02.parquet"],
        tmp_path / "plain", manifest=study / "manifest.csv", progress=False,
    )  # fmt: skip
    # the same states; posteriors alike to rounding (the file's rows are in another order)
    pd.testing.assert_frame_equal(cohort.labels(), plain.labels(), rtol=1e-4)


def test_a_keypoint_never_tracked_is_left_out_and_said(study, tmp_path):
    """A keypoint under the confidence threshold everywhere is left out of the fit (said once,
    not also as 'missing on most frames'), recorded in summary.json and the report."""
    data = tmp_path / "data"
    data.mkdir()
    for name in ("session_01", "session_02"):
        table = pd.read_parquet(study / f"{name}.parquet")
        table.loc[table["keypoint"] == "tail_base", "confidence"] = 0.0
        table.to_parquet(data / f"{name}.parquet")
    with warnings.catch_warnings(record=True) as said:
        warnings.simplefilter("always")
        ws = discover(
            sorted(data.glob("*.parquet")), tmp_path / "ws", manifest=study / "manifest.csv",
            states=4, stability=False, progress=False,
        )  # fmt: skip
    texts = [str(w.message) for w in said if "tail_base" in str(w.message)]
    assert len(texts) == 1 and "left out of the model" in texts[0], texts
    assert ws.summary["features"]["keypoints_left_out"] == ["tail_base"]
    from ethoscribe.workspace.report_sections import model_section

    assert "never tracked in its training sessions: tail_base" in model_section(ws).text
    # frames with a keypoint missing are counted over the model's keypoints (every frame
    # lacked tail_base): as the labels' body_seen says
    quality = pd.read_csv(ws.path / "quality.csv")
    seen = ws.labels().groupby("session")["body_seen"].apply(lambda b: (b < 1).mean())
    invalid = quality.groupby("session")["frac_invalid_frames"].first()
    np.testing.assert_allclose(invalid.sort_index(), seen.sort_index(), rtol=5e-6)  # 6 digits
    assert (invalid < 0.5).all()
    from ethoscribe.workspace.report_sections import quality_section

    assert "Left out of the model, never tracked: tail_base." in quality_section(ws).text


def test_a_motif_that_labels_no_frame_is_said_beside_the_count(workspace, tmp_path):
    # A state whose every bout is shorter than the minimum bout keeps no frame after the merge
    # (an invented user's study had 7 motifs, one with no row in any table): here state 3's
    # frames are given to state 0 in a copy of the workspace, as the merge would.
    import shutil

    copy = Workspace(shutil.copytree(workspace.path, tmp_path / "copy"))
    labels = pd.read_parquet(copy.path / "labels.parquet")
    assert "labels no frame" not in copy.describe()
    labels["state"] = labels["state"].replace(3, 0)
    labels.to_parquet(copy.path / "labels.parquet", index=False)
    shares = copy.labelled_shares()
    expected = labels.loc[labels["state"] >= 0, "state"].value_counts(normalize=True)
    pd.testing.assert_series_equal(
        shares[shares > 0], expected.sort_index(), check_names=False, check_index_type=False
    )
    assert shares[3] == 0 and len(shares) == 4
    assert "4 motifs ('motif_04' labels no frame: bouts shorter than the minimum bout (0.5 s)" in (
        copy.describe()
    )


def test_the_report_draws_each_motifs_mean_posture(workspace, tmp_path):
    # The postures cached for the workbench, averaged over each motif's bouts: checked against
    # numpy's mean of the same frames' body-frame keypoints; a workspace whose source files
    # have moved says so instead of a figure.
    import shutil

    from ethoscribe.workspace.postures import PostureLibrary
    from ethoscribe.workspace.report_sections import postures_section

    bouts = pd.read_csv(workspace.path / "bouts.csv", dtype={"session": str})
    section = postures_section(workspace, bouts)
    figure = section.figures[0]
    titles = [a.text for a in figure.layout.annotations]
    assert titles[: bouts["motif"].nunique()] == sorted(bouts["motif"].unique())
    library = PostureLibrary(workspace)
    one = bouts.iloc[[0]]
    lone = postures_section(workspace, one).figures[0]
    keypoints = lone.data[1]
    frames = library.frames(
        one["session"].iloc[0],
        one["animal"].iloc[0],
        np.arange(one["start_frame"].iloc[0], one["stop_frame"].iloc[0]),
    )
    mean = np.nanmean(frames, axis=0)  # keypoints lost on some frames: the frames seeing them
    np.testing.assert_allclose(keypoints.x, mean[:, 0], rtol=1e-5, atol=1e-4)  # numpy's mean
    moved = Workspace(shutil.copytree(workspace.path, tmp_path / "moved"))
    shutil.rmtree(moved.path / "postures")
    pd.read_csv(moved.path / "sessions.csv").assign(source="/nowhere/x.parquet").to_csv(
        moved.path / "sessions.csv", index=False
    )
    said = postures_section(moved, bouts)
    assert not said.figures and said.text.startswith("No posture could be drawn")
