"""The workbench, driven from Python: set control values, click buttons, check state and files.

The workspace comes from the package's simulator (4 invented voles, 20 s each, seed 3) through
``discover``; session_01 has a tiny generated video. Each test edits its own copy.
"""

from __future__ import annotations

import asyncio
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from plotly.callbacks import Points

import ethoscribe
from ethoscribe.ethogram import bout_table
from ethoscribe.simulate import simulate_study, write_study
from ethoscribe.widgets import Workbench, WorkbenchState
from ethoscribe.workspace import Workspace, discover
from ethoscribe.workspace.postures import skeleton_for

SEED = 3


@pytest.fixture(scope="module")
def built(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("study")
    sessions, truths, manifest = simulate_study(n_per_group=2, duration_s=20, seed=SEED)
    study = write_study(root / "data", sessions, truths, manifest)
    if _tiny_video(study / "session_01.mp4"):
        table = pd.read_csv(study / "manifest.csv")
        table["video"] = np.where(table["session"] == "session_01", "session_01.mp4", "")
        table.to_csv(study / "manifest.csv", index=False)
    ws = discover([study], root / "ws", manifest=study / "manifest.csv", states=3,
                  stability=False, progress=False)  # fmt: skip
    assert len(list((root / "ws" / "postures").glob("*.npz"))) == len(ws.sessions)  # cached
    return root / "ws"


def _tiny_video(path: Path) -> bool:
    """A 20 s grey-level video at 10 fps, if imageio and its ffmpeg plugin are installed."""
    try:
        import imageio.v2 as imageio
        import imageio_ffmpeg  # noqa: F401 - the codec ships in this wheel
    except ImportError:
        return False
    frames = [np.full((48, 64, 3), (i * 9) % 256, np.uint8) for i in range(200)]
    imageio.mimwrite(path, frames, fps=10, macro_block_size=16)
    return True


@pytest.fixture
def folder(built, tmp_path) -> Path:
    copy = tmp_path / "ws"
    shutil.copytree(built, copy)
    return copy


@pytest.fixture
def wb(folder):
    """A workbench writing each edit before the click returns (no writer process to start)."""
    bench = Workbench(folder, write_behind=False)
    yield bench
    bench.close()


@pytest.fixture
def writing_behind(folder):
    """A workbench as users get it: edits written by a writer process."""
    bench = Workbench(folder)
    yield bench
    bench.close()


@pytest.fixture(scope="module")
def viewer(built, tmp_path_factory):
    """One workbench for the tests that only look (they must not edit)."""
    copy = tmp_path_factory.mktemp("viewer") / "ws"
    shutil.copytree(built, copy)
    bench = Workbench(copy, write_behind=False)
    yield bench
    bench.close()


def _rename(wb: Workbench, name: str) -> None:
    wb.desk.name.value = name
    wb.desk.rename.click()


def test_import_stays_light():
    code = "import sys, ethoscribe; print('ipywidgets' in sys.modules, 'plotly' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "False"]


def test_opening_shows_its_first_screen_before_importing_plotly_widgets(folder):
    # plotly's widget module takes 1.5-2 s to import (nbformat, jsonschema): the first screen
    # does without it; the figures are made right after, or when code asks for one.
    code = (
        "import sys, ethoscribe\n"
        f"wb = ethoscribe.workbench({str(folder)!r})\n"
        "print('plotly.basewidget' in sys.modules, wb.portrait.slots['posture'].created)\n"
        "wb.portrait.posture\n"
        "print('plotly.basewidget' in sys.modules, wb.portrait.slots['posture'].created)\n"
        "wb.close()\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "False", "True", "True"]


def test_figures_are_made_once_the_cell_has_run(folder):
    # In a notebook the kernel's event loop runs the cell; the figures follow it.
    async def cell():
        wb = Workbench(folder, write_behind=False)
        made_in_cell = [s.created for s in wb.portrait.slots.values()]
        await asyncio.sleep(0)  # the cell ends: the loop runs what it scheduled
        return wb, made_in_cell

    wb, made_in_cell = asyncio.run(cell())
    try:
        assert not any(made_in_cell)
        assert all(s.created for s in wb.portrait.slots.values())
        assert len(wb.portrait.slots["neighbours"].children[0].data) == 2  # the figure, shown
    finally:
        wb.close()


def test_postures_cached_at_discover_and_recomputed_when_a_source_changes(folder, monkeypatch):
    from ethoscribe.workspace import postures

    made = []
    compute = postures.compute_session_postures
    monkeypatch.setattr(
        postures,
        "compute_session_postures",
        lambda ws, session, *a, **k: made.append(session) or compute(ws, session, *a, **k),
    )
    state = WorkbenchState(folder, write_behind=False)
    assert state.postures.available and made == []  # discover cached every session's
    state.close()
    source = postures.source_file(Workspace(folder), "session_02")
    before = source.stat()
    try:
        os.utime(source, ns=(before.st_atime_ns, before.st_mtime_ns + 10**9))
        state = WorkbenchState(folder, write_behind=False)
        assert state.postures.available and made == ["session_02"]  # only the changed one
        state.close()
    finally:
        os.utime(source, ns=(before.st_atime_ns, before.st_mtime_ns))  # other tests share it


def test_opens_with_motifs_figures_and_cached_postures(folder):
    shutil.rmtree(folder / "postures")  # computed again on first use
    bench = ethoscribe.workbench(folder)
    try:
        state = bench.state
        assert state.motifs == ["motif_01", "motif_02", "motif_03"]
        assert [v for _, v in bench.motif_list.list.options] == state.motif_table()[
            "motif"
        ].tolist()
        assert bench.motif_list.list.value == state.motif
        bones = bench.portrait.posture.data[0]
        assert bones.name == "bones" and np.isfinite(np.asarray(bones.x, float)).sum() > 10
        assert "dune_vole" in state.postures.edges_note
        files = sorted((folder / "postures").glob("*.npz"))
        assert [f.stem for f in files] == ["session_01", "session_02", "session_03", "session_04"]
        with np.load(files[0], allow_pickle=False) as z:
            assert z["coords"].dtype == np.float32 and z["coords"].shape[2:] == (10, 2)
        assert (
            len(bench.portrait.strip.data) == 2
            and "Example bouts" in bench.portrait.strip.layout.title.text
        )
    finally:
        bench.close()


def test_rename_reaches_journal_and_tables(wb, folder):
    wb.state.select_motif("motif_02")
    _rename(wb, "long_stretch")
    assert wb.state.message == ("ok", "Renamed 'motif_02' to 'long_stretch'.")
    assert wb.state.motif == "long_stretch" and "long_stretch" in wb.state.bouts["motif"].values
    assert wb.desk.name.value == ""
    wb.state.flush()
    last = Workspace(folder).journal()[-1]
    assert (last["op"], last["motif"], last["name"]) == ("rename", "motif_02", "long_stretch")
    for table in ("labels.csv", "bouts.csv"):
        assert "long_stretch" in set(pd.read_csv(folder / table)["motif"].dropna())
    # The relabelled in-memory bouts equal the ethogram's own bouts of the saved labels.
    expected = bout_table(Workspace(folder).labels())
    pd.testing.assert_frame_equal(wb.state.bouts, expected, check_dtype=False)


def test_enter_in_the_name_box_renames(wb, folder):
    wb.state.select_motif("motif_03")
    wb.desk.name.value = "by_enter"
    wb.desk.name._handle_custom_msg({"event": "submit"}, [])  # what the box sends on Enter
    assert wb.state.message == ("ok", "Renamed 'motif_03' to 'by_enter'.")
    assert Workspace(folder).journal()[-1]["name"] == "by_enter"
    wb.state.select_motif("motif_01")
    wb.desk.merge_with.value = ("by_enter",)
    wb.desk.merge_into.value = "joined"
    wb.desk.merge_into._handle_custom_msg({"event": "submit"}, [])
    assert wb.state.motifs == ["joined", "motif_02"]


BAD_INPUT = [
    (lambda wb: _rename(wb, ""), "type the new name for motif_01 in the Name box"),
    (lambda wb: _rename(wb, "motif_03"), "already taken"),
    (lambda wb: _rename(wb, "unassigned"), "'unassigned' is reserved"),
    (lambda wb: wb.desk.undo.click(), "nothing to undo"),
    (lambda wb: wb.desk.merge.click(), "tick the motifs to merge with motif_01 under 'Merge with'"),
    (lambda wb: wb.desk.split.click(), "type the names of both parts of motif_01 under"),
]


def test_bad_input_gives_a_message_and_changes_nothing(wb, folder):
    for setup, expected in BAD_INPUT:
        wb.state.select_motif("motif_01")
        setup(wb)
        kind, text = wb.state.message
        assert kind == "error" and expected in text, (expected, text)
        shown = wb.desk.message.value
        assert "ethoscribe-note-error" in shown and "Traceback" not in shown
    wb.state.flush()
    assert Workspace(folder).journal() == []
    assert wb.state.motifs == ["motif_01", "motif_02", "motif_03"]


def test_merge_undo_redo_and_unassign(wb, folder):
    state = wb.state
    state.select_motif("motif_01")
    wb.desk.merge_with.value = ("motif_03",)
    wb.desk.merge_into.value = "still"
    wb.desk.merge.click()
    assert state.motifs == ["motif_02", "still"] and state.motif == "still"
    assert set(wb.desk.merge_with.options) == {"motif_02"}
    wb.desk.undo.click()
    assert state.motifs == ["motif_01", "motif_02", "motif_03"]
    wb.desk.redo.click()
    assert state.motifs == ["motif_02", "still"]
    state.select_motif("motif_02")
    wb.desk.unassign.click()
    assert state.motifs == ["still"]
    assert "unassigned" in state.bouts["motif"].values
    state.flush()
    ops = [r["op"] for r in Workspace(folder).journal()]
    assert ops == ["merge", "undo", "redo", "unassign"]
    assert set(pd.read_csv(folder / "bouts.csv")["motif"]) == {"still", "unassigned"}


def test_the_curation_panel_follows_a_new_motif_before_the_figures_redraw(wb):
    # The figures take seconds to redraw; the panel a person acts on must show the new motif
    # first, with nothing ticked or typed for the old one (else an edit hits another motif).
    order = wb.state._listeners["motif"]
    assert order.index(wb.desk.refresh) < order.index(wb.portrait.request_draw)
    assert order[0] == wb.motif_list._show_selection  # the list's tick first of all
    wb.desk.merge_with.value = (wb.desk.merge_with.options[0],)
    wb.desk.name.value = "typed for the old motif"
    wb.state.select_motif("motif_03")
    assert "Curate motif_03" in wb.desk.title.value
    assert "motif_03" not in wb.desk.merge_with.options
    assert wb.desk.merge_with.value == () and wb.desk.name.value == ""


def test_split_goes_through_the_journal(wb, folder):
    wb.state.select_motif("motif_01")
    for box, name in zip(wb.desk.split_names, ("part_a", "part_b"), strict=True):
        box.value = name
    wb.desk.split.click()
    assert wb.state.message[0] == "ok", wb.state.message
    assert {"part_a", "part_b"} <= set(wb.state.motifs) and wb.state.motif == "part_a"
    assert Workspace(folder).journal()[-1]["op"] == "split"
    assert np.isfinite(wb.state.postures.mean_posture([3])).all()  # a new state: new sums
    # the fitted state, in the reports' per-state tables, is named by its halves
    from ethoscribe.workspace.report_sections import _state_names

    wb.state.flush()
    assert _state_names(Workspace(folder))[0] == "split into part_a and part_b"
    wb.desk.undo.click()
    assert Workspace(folder).curation().split_into == {}


def test_sort_and_filter_the_motif_list(viewer):
    wb = viewer
    wb.motif_list.sort.value = "number of bouts"
    counts = wb.state.motif_table()["n_bouts"].tolist()
    assert counts == sorted(counts, reverse=True)
    wb.motif_list.largest.value = False
    assert wb.state.motif_table()["n_bouts"].tolist() == sorted(counts)
    wb.motif_list.largest.value = True
    wb.motif_list.sort.value = "name"  # names read A to Z; "largest first" does not apply
    assert [v for _, v in wb.motif_list.list.options] == ["motif_01", "motif_02", "motif_03"]
    assert wb.motif_list.largest.disabled
    wb.motif_list.largest.value = False
    assert [v for _, v in wb.motif_list.list.options] == ["motif_01", "motif_02", "motif_03"]
    share = wb.state.motif_table()["time_share"].min()
    wb.motif_list.min_share.value = float(share) + 1e-6
    assert len(wb.motif_list.list.options) == 2
    assert wb.motif_list.min_stability.disabled  # no stability check in this workspace
    wb.motif_list.min_share.value = 0.0
    wb.motif_list.sort.value = "time share"
    assert not wb.motif_list.largest.disabled
    wb.motif_list.largest.value = True
    assert len(wb.motif_list.list.options) == 3


def test_pick_a_motif_from_the_list_redraws_its_portrait(viewer):
    wb = viewer
    wb.motif_list.list.value = "motif_03"
    assert wb.state.motif == "motif_03"
    assert wb.portrait.posture.layout.title.text.startswith("motif_03")
    assert "motif_03" in wb.portrait.neighbours.layout.title.text
    assert wb.desk.title.value.count("motif_03") == 1


def test_raster_click_and_bout_list_jump_to_the_bout(viewer):
    wb = viewer
    wb.tabs.selected_index = 1
    wb.ethogram.session.value = "session_02"
    assert wb.state.session == "session_02"
    bars = [t for t in wb.ethogram.raster.data if t.type == "bar" and len(t.x)]
    trace = bars[0]
    wb.ethogram._clicked(
        trace, Points(point_inds=[0], xs=[], ys=[], trace_name=trace.name, trace_index=0)
    )
    bout = wb.state.bout
    assert bout["session"] == "session_02" and bout["motif"] == trace.name
    assert bout["start_s"] <= float(trace.base[0]) + float(trace.x[0]) / 2
    assert "session_02" in wb.ethogram.closeup.layout.title.text
    assert wb.ethogram.step.max > 0
    wb.ethogram.step.value = 1
    assert f"frame {int(wb.ethogram._frames[1])}" in wb.ethogram.closeup.layout.title.text
    assert any(t.name == "shown in close-up" for t in wb.ethogram.raster.data)
    wb.ethogram.bouts.value = 0
    assert wb.state.bout["start_frame"] == wb.ethogram._rows[0]["start_frame"]


def test_example_bout_plays_on_the_ethogram_page(viewer):
    wb = viewer
    wb.closer.value = 0
    wb.closer_button.click()
    assert wb.tabs.selected_index == 1
    assert wb.state.bout["motif"] == wb.state.motif


def test_video_frames_beside_the_skeleton(viewer):
    pytest.importorskip("imageio_ffmpeg", reason='pip install "ethoscribe[video]"')
    wb = viewer
    state = wb.state
    with_video = [b for b in state.bouts.to_dict("records") if b["session"] == "session_01"]
    images = state.video_frames(with_video[0], 3)
    assert len(images) == 3 and all(png[:4] == b"\x89PNG" for png in images)
    assert state.video_frames({**with_video[0], "session": "session_02"}, 3) == []
    state.select_bout(with_video[0])
    assert wb.ethogram.video.layout.display is None and wb.ethogram.video.value[:4] == b"\x89PNG"
    motif = with_video[0]["motif"]
    state.select_motif(next(m for m in state.motifs if m != motif))
    state.select_motif(motif)
    shown = wb.portrait.video.children
    examples = state.examples(motif)
    assert bool(shown) == any(b["session"] == "session_01" for b in examples)


def test_group_comparison_and_its_errors(wb, folder):
    assert wb.groups.by.options == ("group",)
    wb.groups.run.click()
    assert wb.state.message[0] == "ok", wb.state.message
    assert (folder / "comparison_group" / "group_stats.csv").is_file()
    assert len(wb.groups.figure.data) == 2 and "Compared 4 sessions" in wb.groups.summary.value
    assert "(the &#x27;Planned&#x27; box)" in wb.groups.summary.value  # not a flag's words
    # the planned comparison the page now takes: tested first, Holm-corrected
    wb.groups.planned.value = "time_budget:motif_01"
    wb.groups.run.click()
    stats = pd.read_csv(folder / "comparison_group" / "group_stats.csv")
    first = stats.iloc[0]
    assert (first["analysis"], first["metric"], first["motif"]) == (
        "planned",
        "time_budget",
        "motif_01",
    )
    assert "Planned (confirmatory, Holm over 1 tests)" in wb.groups.summary.value
    wb.groups.planned.value = "time_budget:nothing_called_so"
    wb.groups.run.click()
    assert wb.state.message[0] == "error" and "nothing_called_so" in wb.state.message[1]
    wb.state.run_comparison("subject")
    kind, text = wb.state.message
    assert kind == "error" and "single subject" in text


def test_what_a_run_records_about_each_session_is_not_offered_as_a_grouping(folder):
    # Reading options that differ between sessions (one calibrated by px_per_unit, the others
    # already in mm) were offered first under "Group by", ahead of the study's own column.
    from ethoscribe.io import from_arrays
    from ethoscribe.widgets.state import TECHNICAL_COLUMNS
    from ethoscribe.workspace.reading import session_row

    table = pd.read_csv(folder / "sessions.csv")
    table["reader_options"] = ['{"units": "mm"}', "{}"] * (len(table) // 2)
    table["first_frame"] = [0, 100] * (len(table) // 2)
    table["format"] = ["tidy", "wide"] * (len(table) // 2)
    table["track_joins"] = ["[]", "[[0, 1]]"] * (len(table) // 2)
    table.to_csv(folder / "sessions.csv", index=False)
    bench = Workbench(folder, write_behind=False)
    try:
        assert bench.groups.by.options == ("group",)
    finally:
        bench.close()
    tracks = from_arrays(np.zeros((3, 2, 2)), fps=30.0, session="s")
    row = session_row({"meta": {}, "path": "s.csv", "format": "tidy", "options": {}}, tracks)
    assert set(row) <= TECHNICAL_COLUMNS  # every recorded column, now and when one is added


def test_save_writes_exports_and_report(wb, folder):
    wb.state.select_motif("motif_01")
    _rename(wb, "resting_like")
    wb.save_button.click()
    kind, text = wb.state.message
    assert kind == "ok" and str(folder) in text
    for name in (
        "labels.csv",
        "bouts.csv",
        "transitions.csv",
        "time_budget.csv",
        "bout_durations.csv",
        "transition_matrix.csv",
        "motif_names.csv",
    ):
        assert (folder / "exports" / name).is_file(), name
    assert "resting_like" in set(pd.read_csv(folder / "exports" / "bouts.csv")["motif"])
    assert "resting_like" in (folder / "report.html").read_text()


def test_edits_are_on_disk_when_shown_and_tables_follow_behind(writing_behind, folder):
    wb = writing_behind
    _rename(wb, "first")
    # Confirmed on screen means journaled: the line is there before any table is rewritten.
    assert wb.state.message == ("ok", "Renamed 'motif_01' to 'first'.")
    assert Workspace(folder).journal()[-1]["name"] == "first"
    wb.desk.undo.click()
    wb.state.flush()
    assert Workspace(folder).exports_current()
    assert "first" not in set(pd.read_csv(folder / "bouts.csv")["motif"])
    wb.state.lock_wait_s = 0.2
    with Workspace(folder).lock():  # another program holds the workspace: refused at once
        _rename(wb, "never_saved")
    kind, text = wb.state.message
    assert kind == "error" and "was not saved" in text and "in use" in text
    assert wb.state.motifs == ["motif_01", "motif_02", "motif_03"]
    assert wb.desk.name.value == "never_saved"  # kept, so it can be tried again
    _rename(wb, "saved_now")
    wb.state.flush()
    assert Workspace(folder).journal()[-1]["name"] == "saved_now"
    assert "saved_now" in set(pd.read_csv(folder / "bouts.csv")["motif"])


def test_an_edit_follows_the_edits_saved_by_another_workbench(writing_behind, folder):
    # Two workbenches on one workspace (a notebook cell run twice): each edit is checked
    # against the journal on disk, so a merge right after a rename finds the new name.
    wb, other = writing_behind, Workbench(folder, write_behind=False)
    try:
        other.state.select_motif("motif_02")
        _rename(other, "digging?")
        wb.state.select_motif("motif_01")
        wb.desk.merge_with.value = ("motif_03",)
        assert wb.state.edit("merge", motifs=["digging?", "motif_01"], into="digging?")
        assert wb.state.motifs == ["digging?", "motif_03"], wb.state.message
        wb.state.flush()
        assert [r["op"] for r in Workspace(folder).journal()] == ["rename", "merge"]
        assert set(pd.read_csv(folder / "bouts.csv")["motif"]) == {"digging?", "motif_03"}
    finally:
        other.close()


def test_code_methods_print_the_message(wb, capsys):
    wb.rename_motif("motif_01", "from_code")
    wb.merge_motifs(["motif_02", "motif_03"], into="joined")
    assert "· 2 motifs" in wb.title.value  # the header counts the motifs after the merge
    wb.undo()
    wb.redo()
    wb.rename_motif("nope", "x")
    out = capsys.readouterr().out.splitlines()
    assert out[:4] == [
        "Renamed 'motif_01' to 'from_code'.",
        "Merged 'motif_02', 'motif_03' into 'joined'.",
        "Undid: Merged 'motif_02', 'motif_03' into 'joined'.",  # which edit, not only that one
        "Redid: Merged 'motif_02', 'motif_03' into 'joined'.",
    ]
    assert out[4].startswith("unknown motif 'nope'")


def test_missing_source_keeps_everything_else_working(folder):
    sessions = pd.read_csv(folder / "sessions.csv")
    sessions["source"] = "/nowhere/" + sessions["session"] + ".parquet"
    sessions.to_csv(folder / "sessions.csv", index=False)
    shutil.rmtree(folder / "postures")
    bench = Workbench(folder, write_behind=False)
    try:
        assert not bench.state.postures.available
        assert "not found" in bench.state.postures.problem
        assert "not found" in bench.portrait.posture.layout.annotations[0].text
        _rename(bench, "still_works")
        assert json.loads((folder / "journal.jsonl").read_text().splitlines()[-1])["op"] == "rename"
    finally:
        bench.close()


def test_skeleton_choice():
    edges, note = skeleton_for(["a", "b"], [("a", "b")])
    assert edges == (("a", "b"),) and "user" in note
    line = np.array([[[0.0, 0], [2, 0], [1, 0]]])
    edges, note = skeleton_for(["p", "q", "r"], None, line)
    assert edges == (("p", "r"), ("q", "r")) and "tree" in note
    with pytest.raises(ethoscribe.InputError, match="unknown keypoints"):
        skeleton_for(["a"], [("a", "z")])


def test_preview_split_shows_the_halves_before_anything_is_kept(wb, folder):
    wb.state.select_motif("motif_01")
    for box, name in zip(wb.desk.split_names, ("part_a", "part_b"), strict=True):
        box.value = name
    wb.desk.preview.click()
    shown = wb.desk.split_preview.value
    assert "part_a" in shown and "part_b" in shown and "median_bout_s" in shown, shown
    assert Workspace(folder).journal() == [] and "part_a" not in wb.state.motifs


def test_suggested_merges_shown_when_the_model_gives_them(folder):
    # The hook for a model with a state tree: summary.json lists groups of close states.
    summary = json.loads((folder / "summary.json").read_text())
    summary["suggested_merges"] = [[0, 2], [1]]
    (folder / "summary.json").write_text(json.dumps(summary))
    bench = Workbench(folder, write_behind=False)
    try:
        assert "Suggested merges" in bench.motif_list.suggested.value
        assert "motif_01 + motif_03" in bench.motif_list.suggested.value
    finally:
        bench.close()


def test_example_frames_are_tracked_ones_and_empty_views_say_so(viewer, monkeypatch):
    from ethoscribe.plots.motifs import bout_strip_figure, neighbour_figure

    state = viewer.state
    bout = state.examples(state.motif)[0]
    every = state.postures.frames(
        bout["session"], bout["animal"], np.arange(bout["start_frame"], bout["stop_frame"])
    )
    holes = every.copy()
    holes[::2] = np.nan  # every other frame untracked
    monkeypatch.setattr(state.postures, "frames", lambda *a: holes)
    shown = state.bout_postures(bout, 7)
    assert len(shown) == 7 and np.isfinite(shown).all()
    monkeypatch.setattr(state.postures, "frames", lambda *a: np.full_like(every, np.nan))
    untracked = state.bout_postures(bout, 7)
    keypoints, edges = state.postures.keypoints, state.postures.edges
    fig = bout_strip_figure([("a bout", untracked)], keypoints, edges)
    assert [a.text for a in fig.layout.annotations].count("not tracked") == len(untracked)
    fig = neighbour_figure(pd.Series(dtype=float), pd.Series({"motif_01": 1.0}), "motif_02")
    assert [a.text for a in fig.layout.annotations] == ["no motif comes before it"]


# A hand-made nested tree over 5 states a..e: b+d join first, then a+e, then c joins b+d.
HAND_TREE = [
    {"n_sets": 5, "assignment": [0, 1, 2, 3, 4]},
    {"n_sets": 4, "assignment": [0, 1, 2, 1, 3]},
    {"n_sets": 3, "assignment": [0, 1, 2, 1, 0]},
    {"n_sets": 2, "assignment": [0, 1, 1, 1, 0]},
    {"n_sets": 1, "assignment": [0, 0, 0, 0, 0]},
]


def test_state_tree_leaf_order_and_joins_match_scipy_dendrogram():
    from scipy.cluster.hierarchy import dendrogram

    from ethoscribe.plots.motifs import state_tree_figure, tree_joins

    names = dict(enumerate("abcde"))
    leaves, joins = tree_joins(HAND_TREE, names)
    assert joins == [([1, 3], 4), ([0, 4], 3), ([5, 2], 2), ([6, 7], 1)]
    # The same tree as a scipy linkage (rows: left, right, height, size); reference for the
    # leaf order: scipy.cluster.hierarchy.dendrogram, which draws Z[i, 0] left of Z[i, 1].
    Z = np.array([[1, 3, 1, 2], [0, 4, 2, 2], [5, 2, 3, 3], [6, 7, 4, 5]], dtype=float)
    reference = dendrogram(Z, no_plot=True)["leaves"]
    assert leaves == [names[i] for i in reference] == ["a", "e", "b", "d", "c"]
    fig = state_tree_figure(HAND_TREE, names)
    assert list(fig.layout.xaxis.ticktext) == leaves
    y = [v for v in fig.data[0].y]
    flat = [(a, b) for a, b in zip(y[0::3], y[1::3], strict=True) if a == b]
    assert len(flat) == len(joins)  # one horizontal line per join
    assert sorted(a for a, _ in flat) == [1.0, 2.0, 3.0, 4.0]  # at n_states - n_sets
    dots = fig.data[1]  # one hover dot per join, over the middle of what it joins
    assert list(dots.y) == [1.0, 2.0, 3.0, 4.0] and dots.x[0] == 2.5  # b, d at 2, 3
    assert dots.text[0].startswith("b, d<br>") and dots.text[-1].startswith("a, e, b, d, c")


def test_state_tree_merged_motifs_are_one_leaf_and_levels_need_not_nest():
    from ethoscribe.plots.motifs import tree_joins

    names = {0: "walk", 1: "rest", 2: "walk", 3: "groom", 4: "rest"}
    leaves, joins = tree_joins(HAND_TREE, names)
    assert sorted(leaves) == ["groom", "rest", "walk"] and len(joins) == 2
    crossed = [HAND_TREE[0], {"n_sets": 2, "assignment": [0, 1, 0, 1, 1]}]  # no one-set level
    leaves, joins = tree_joins(crossed, dict(enumerate("abcde")))
    assert sorted(leaves) == list("abcde") and joins[-1][1] == 1


def test_motifs_page_draws_the_state_tree_and_nothing_without_one(folder):
    summary = json.loads((folder / "summary.json").read_text())
    n = len(Workspace(folder).curation().names)
    levels = [
        {"n_sets": k, "assignment": [min(s, k - 1) for s in range(n)]} for k in range(n, 0, -1)
    ]
    summary["state_tree"] = {"levels": levels}
    (folder / "summary.json").write_text(json.dumps(summary))
    bench = Workbench(folder, write_behind=False)
    try:
        slot = bench.motif_list.tree
        assert not slot.created and bench.motif_list.tree_box.layout.display is None
        bench._make_figures()  # what runs after the first screen
        assert slot.created
        shown = list(slot.figure.layout.xaxis.ticktext)
        assert sorted(shown) == bench.state.motifs
        assert "joined lower are closer" in bench.motif_list.tree_box.children[0].value
    finally:
        bench.close()
    summary["state_tree"] = None  # an older saved model, or a change-point method
    (folder / "summary.json").write_text(json.dumps(summary))
    bench = Workbench(folder, write_behind=False)
    try:
        bench._make_figures()
        assert bench.motif_list.tree_box.layout.display == "none"
        assert not bench.motif_list.tree.created
    finally:
        bench.close()


def test_unreadable_model_is_named_once(folder):
    """A model saved by another version with a parameter this one does not know: the postures
    say why they are missing once (not once per recording), naming both versions."""
    shutil.rmtree(folder / "postures")
    meta = json.loads((folder / "model" / "model.json").read_text())
    meta["features"]["params"]["a_later_option"] = True
    meta["ethoscribe_version"] = "99.0"
    (folder / "model" / "model.json").write_text(json.dumps(meta))
    bench = Workbench(folder, write_behind=False)
    try:
        problem = bench.state.postures.problem
        assert problem.count("a_later_option") == 1
        assert "saved by ethoscribe 99.0" in problem
        assert "recording(s) are unavailable" in problem
    finally:
        bench.close()


def test_a_3d_posture_shows_its_side_view_under_the_top_view():
    # The side view was drawn beside the top view in a figure twice the panel's width, and
    # the panel (360 px) cut it off: 3-D postures showed only their top view.
    from ethoscribe.plots.motifs import posture_figure

    p = np.array([[1.0, 0.0, 1.0], [0.0, 0.0, 1.5], [0.5, 0.4, 0.0]])
    fig = posture_figure(p, ["n", "m", "foot"], [("n", "m")], width=360, height=360)
    assert fig.layout.width == 360 and fig.layout.height == 720
    top, side = fig.layout.yaxis, fig.layout.yaxis2
    assert (top.title.text, side.title.text) == ("sideways", "height")
    assert side.domain[1] < top.domain[0]  # stacked, not overlapping
    assert list(fig.data[3].y) == [1.0, 1.5, 0.0]  # the side view's keypoints: their heights


def test_long_motif_names_stay_readable():
    """Curated names longer than the figures were laid out for: every tree leaf keeps a label
    (upright, the figure taller), the neighbour bars' names are cut to the gap between the
    panels with the full name on hover, and a posture title goes on two lines."""
    from ethoscribe.plots.motifs import (
        NEIGHBOUR_NAME_CHARS,
        neighbour_figure,
        posture_figure,
        state_tree_figure,
    )

    long = {i: f"{c}_a_rather_long_behaviour_name" for i, c in enumerate("abcde")}
    fig = state_tree_figure(HAND_TREE, long)
    short = state_tree_figure(HAND_TREE, dict(enumerate("abcde")))
    assert len(fig.layout.xaxis.ticktext) == 5 and fig.layout.xaxis.tickangle == -90
    assert short.layout.xaxis.tickangle == 0 and fig.layout.height > short.layout.height
    assert all(len(t) <= 24 for t in fig.layout.xaxis.ticktext)
    name = long[0]
    fig = neighbour_figure(pd.Series({name: 1.0}), pd.Series({"b": 1.0}), name)
    assert len(fig.data[0].y[0]) == NEIGHBOUR_NAME_CHARS and fig.data[0].y[0].endswith("…")
    assert list(fig.data[0].customdata) == [name] and list(fig.data[1].y) == ["b"]
    p = np.zeros((3, 2))
    fig = posture_figure(p, ["n", "m", "t"], [], title=f"{name}: mean posture (body frame)")
    plain = posture_figure(p, ["n", "m", "t"], [], title="a: mean posture (body frame)")
    assert fig.layout.title.text == f"{name}:<br>mean posture (body frame)"
    assert fig.layout.margin.t == plain.layout.margin.t + 18


def test_a_figure_slot_keeps_its_tallest_height_and_the_toolbar_off_the_title():
    # A redrawn figure of another height must not move what lies below it (a person aiming at
    # the curation panel hit the row next to the one aimed at); the toolbar stands in the
    # right margin, not across the title.
    import plotly.graph_objects as go

    from ethoscribe.widgets.common import FigureSlot

    heights = iter([300, 200])
    slot = FigureSlot(lambda: go.Figure(layout={"height": next(heights), "margin": {"r": 5}}),
                      "ethoscribe-test", 400, 100)  # fmt: skip
    slot.show()
    slot.draw()
    assert slot.figure.layout.height == 200 and slot.layout.min_height == "300px"
    assert slot.figure.layout.modebar.orientation == "v" and slot.figure.layout.margin.r == 40
