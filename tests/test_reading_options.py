"""Readers and reader options reach batch runs: registry, entry points, workers, cache keys.

Also the cleaning options of a batch run (automatic left/right swap pairs) and the manifest rows
found by path.
"""

from __future__ import annotations

import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from ethoscribe.clean import CleanParams, clean
from ethoscribe.errors import InputError
from ethoscribe.io import register_reader, registry, write_tidy
from ethoscribe.pose import PoseTracks, propose_swap_pairs
from ethoscribe.workspace.cache import cache_key, prepare_session
from ethoscribe.workspace.executor import map_sessions
from ethoscribe.workspace.reading import plan_sessions, read_planned


def _tracks(n=40, session="s", keypoints=("nose", "left_ear", "right_ear")) -> PoseTracks:
    rng = np.random.default_rng(0)  # seed 0
    coords = np.cumsum(rng.normal(size=(n, 1, len(keypoints), 2)), axis=0)
    return PoseTracks(coords, keypoints=keypoints, fps=30, session=session)


def test_swap_pairs_are_read_from_keypoint_names():
    names = [
        "nose",
        "left_ear",
        "right_ear",
        "fore_l",
        "fore_r",
        "L_eye",
        "R_eye",
        "earL",
        "earR",
        "leftPaw",
        "rightPaw",
        "Left Hip",
        "Right Hip",
        "tail",
        "lip",
        "rump",
    ]
    assert propose_swap_pairs(names) == (
        ("left_ear", "right_ear"), ("fore_l", "fore_r"), ("L_eye", "R_eye"), ("earL", "earR"),
        ("leftPaw", "rightPaw"), ("Left Hip", "Right Hip"),
    )  # fmt: skip
    # Words that merely contain l or r, or a side without its mirror, are not paired.
    assert propose_swap_pairs(["lip", "rump", "ear", "left_only", "tail_base"]) == ()
    assert propose_swap_pairs(["right_ear", "left_ear"]) == (("left_ear", "right_ear"),)


def test_auto_swap_pairs_are_resolved_and_reported_by_clean():
    t = _tracks()
    _, report = clean(t, CleanParams(swap_pairs="auto"))
    assert report.params["swap_pairs"] == "auto"
    assert report.params["swap_pairs_used"] == [["left_ear", "right_ear"]]
    assert list(report.swaps_per_pair) == ["left_ear/right_ear"]
    assert CleanParams.from_dict(CleanParams(swap_pairs="auto").to_dict()).swap_pairs == "auto"
    with pytest.raises(InputError, match="swap_pairs must be 'auto' or pairs"):
        CleanParams(swap_pairs="left_ear")


def _reader_module(folder: Path) -> None:
    """A package installed in ``folder`` whose reader is declared as an entry point."""
    (folder / "plainreader.py").write_text(
        textwrap.dedent(
            """
            import shutil, tempfile
            from pathlib import Path
            from ethoscribe.io import read_tidy

            def read_plain(path, fps=None, session=None):
                copy = Path(tempfile.mkdtemp()) / "copy.parquet"
                shutil.copyfile(path, copy)
                return read_tidy(copy, fps=fps, session=session or Path(path).stem)

            read_plain.suffixes = (".plain",)
            """
        )
    )
    info = folder / "plainreader-1.0.dist-info"
    info.mkdir()
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: plainreader\nVersion: 1.0\n")
    (info / "entry_points.txt").write_text("[ethoscribe.readers]\nplain = plainreader:read_plain\n")


@pytest.fixture()
def plugin(tmp_path, monkeypatch):
    site = tmp_path / "site"
    site.mkdir()
    _reader_module(site)
    monkeypatch.syspath_prepend(str(site))
    monkeypatch.setattr(registry, "_ENTRY_POINTS_LOADED", False)
    yield
    registry._READERS.pop("plain", None)
    sys.modules.pop("plainreader", None)


def _files(folder: Path, suffix: str, n: int = 2) -> list[Path]:
    paths = []
    for i in range(n):
        p = folder / f"m{i}.parquet"
        write_tidy(_tracks(session=f"m{i}"), p)
        if suffix != ".parquet":
            p = p.rename(p.with_suffix(suffix))
        paths.append(p)
    return paths


def test_an_entry_point_reader_is_found_by_spawned_workers(plugin, tmp_path):
    # The reader file is Parquet under another suffix; only the plug-in knows ".plain".
    files = _files(tmp_path, ".plain")
    assert "plain" in registry.available_formats()
    plan = plan_sessions(files, format="plain")
    assert plan[0]["reader"]["origin"] == "entry point"
    cache = tmp_path / "cache"
    jobs = [{"entry": e, "cleaning": CleanParams().to_dict(), "cache": str(cache)} for e in plan]
    done = map_sessions(prepare_session, jobs, jobs=2, progress=False)  # spawned workers
    assert [Path(d["tracks"]).is_file() for d in done] == [True, True]


def read_module_level(path, fps=None, session=None):
    """A reader in an importable module (this test file), registered at run time."""
    from ethoscribe.io import read_tidy

    return read_tidy(path, fps=fps, session=session)


def test_a_reader_registered_at_run_time_works_in_workers_or_is_refused(tmp_path):
    files = _files(tmp_path, ".parquet")

    def local_reader(path, fps=None, session=None):  # not importable by a fresh process
        return read_module_level(path, fps=fps, session=session)

    register_reader("local_only", [".parquet"], local_reader, default_for_suffixes=False)
    register_reader("module_level", [".parquet"], read_module_level, default_for_suffixes=False)
    try:
        from ethoscribe.workspace.runs import _prepare

        plan = plan_sessions(files, format="local_only")
        assert not plan[0]["reader"]["importable"]
        with pytest.raises(InputError, match=r"registered at run time.*jobs=1"):
            _prepare(tmp_path / "ws", plan, CleanParams().to_dict(), 2, None, False, False)
        # One process: the reader is right here.
        infos, *_ = _prepare(tmp_path / "ws", plan, CleanParams().to_dict(), 1, None, False, False)
        assert len(infos) == 2
        # A reader living in an importable module travels to spawned workers by name.
        plan = plan_sessions(files, format="module_level")
        assert plan[0]["reader"]["importable"]
        infos, *_ = _prepare(tmp_path / "ws2", plan, CleanParams().to_dict(), 2, None, False, False)
        assert len(infos) == 2
    finally:
        registry._READERS.pop("local_only", None)
        registry._READERS.pop("module_level", None)


def test_reader_and_options_are_part_of_the_cache_key(tmp_path):
    p = tmp_path / "m.csv"
    t = _tracks()
    cols = {f"{k}_{a}": t.coords[:, 0, i, d] for i, k in enumerate(t.keypoints)
            for d, a in enumerate("xy")}  # fmt: skip
    pd.DataFrame(cols).to_csv(p, index=False)
    a = plan_sessions([p], fps=30, format="wide", reader_options={"pattern": "{keypoint}_{axis}"})
    b = plan_sessions(
        [p],
        fps=30,
        format="wide",
        reader_options={"pattern": "{keypoint}_{axis}", "keypoints": ["nose"]},
    )
    cleaning = CleanParams().to_dict()
    assert cache_key(a[0], cleaning) != cache_key(b[0], cleaning)
    assert read_planned(b[0]).keypoints == ("nose",)
    with pytest.raises(InputError, match=r"the wide reader has no option\(s\) \['colour'\]"):
        plan_sessions([p], fps=30, format="wide", reader_options={"colour": "red"})
    with pytest.raises(InputError, match="unknown format 'widest'"):
        plan_sessions([p], fps=30, format="widest")


def test_cache_names_that_collide_get_their_own_entries(tmp_path):
    # "x y" and "x_y" make one cache file stem; same bytes, so only the name tells them apart.
    (tmp_path / "a").mkdir()
    write_tidy(_tracks(), tmp_path / "a" / "x y.parquet")
    write_tidy(_tracks(), tmp_path / "x_y.parquet")
    plan = plan_sessions([tmp_path / "a" / "x y.parquet", tmp_path / "x_y.parquet"])
    cleaning = CleanParams().to_dict()
    assert cache_key(plan[0], cleaning) != cache_key(plan[1], cleaning)


def test_manifest_rows_are_found_by_path_and_name_the_session(tmp_path):
    # Two files with one stem in two folders, named apart by the manifest.
    for group in ("a", "b"):
        (tmp_path / group).mkdir()
        write_tidy(_tracks(), tmp_path / group / "mouse.parquet")
    pd.DataFrame(
        {
            "session": ["day1_mouse", "day2_mouse"],
            "path": ["a/mouse.parquet", "b/mouse.parquet"],
            "fps": [25.0, 50.0],
            "group": ["control", "treated"],
            "px_per_unit": [2.0, 4.0],
            "units": ["mm", "mm"],
        }
    ).to_csv(tmp_path / "manifest.csv", index=False)
    plan = plan_sessions(
        [tmp_path / "b" / "mouse.parquet", tmp_path / "a" / "mouse.parquet"],
        tmp_path / "manifest.csv",
    )
    assert [e["session"] for e in plan] == ["day2_mouse", "day1_mouse"]
    assert [e["fps"] for e in plan] == [50.0, 25.0]
    assert [e["meta"]["group"] for e in plan] == ["treated", "control"]
    t = read_planned(plan[0])
    assert t.session == "day2_mouse" and t.fps == 50.0 and t.units == "mm"
    np.testing.assert_allclose(t.coords, _tracks().coords / 4.0)
    # A manifest given as a table works the same way.
    table = pd.read_csv(tmp_path / "manifest.csv")
    table.attrs["base_folder"] = str(tmp_path)
    assert [e["session"] for e in plan_sessions(None, table)] == ["day1_mouse", "day2_mouse"]
    # A file the manifest does not list is refused, naming it.
    write_tidy(_tracks(), tmp_path / "other.parquet")
    with pytest.raises(InputError, match=r"other\.parquet: this file is not in the manifest"):
        plan_sessions([tmp_path / "other.parquet"], tmp_path / "manifest.csv")
    # A second manifest kept in the folder of the tracks: the message says how to go on.
    (tmp_path / "other.parquet").unlink()
    (tmp_path / "manifest_v2.csv").write_bytes((tmp_path / "manifest.csv").read_bytes())
    with pytest.raises(InputError, match=r"manifest_v2\.csv: .*move the file out.*manifest alone"):
        plan_sessions([tmp_path], tmp_path / "manifest.csv")
    assert len(plan_sessions(None, tmp_path / "manifest_v2.csv")) == 2


def test_a_manifest_row_gives_its_own_column_mapping_to_tidy_and_wide_tables(tmp_path):
    # One study of a tidy table (frame_idx, bodypart, px, py, likelihood) and a wide one
    # (nose_x, nose_p ...): both readers take --columns with other meanings, so no
    # one mapping read both, and a 'columns' manifest column was ignored without a word.
    from ethoscribe.io import load_study

    t = _tracks(n=30)
    conf = np.linspace(0.2, 0.9, 30 * 3).reshape(30, 1, 3)
    n, _, k, _ = t.coords.shape
    pd.DataFrame({
        "frame_idx": np.repeat(np.arange(n), k), "bodypart": np.tile(list(t.keypoints), n),
        "px": t.coords[:, 0, :, 0].ravel(), "py": t.coords[:, 0, :, 1].ravel(),
        "likelihood": conf.ravel(),
    }).to_csv(tmp_path / "a.csv", index=False)  # fmt: skip
    wide = pd.DataFrame(index=range(n))
    for j, name in enumerate(t.keypoints):
        wide[f"{name}_x"], wide[f"{name}_y"] = t.coords[:, 0, j, 0], t.coords[:, 0, j, 1]
        wide[f"{name}_p"] = conf[:, 0, j]
    wide.to_csv(tmp_path / "b.csv", index=False)
    tidy_map = "frame=frame_idx,keypoint=bodypart,x=px,y=py,confidence=likelihood"
    manifest = tmp_path / "manifest.csv"
    pd.DataFrame({"session": ["a", "b"], "path": ["a.csv", "b.csv"], "fps": 30.0,
                  "format": ["tidy", "wide"], "columns": [tidy_map, "confidence=p"]}
                 ).to_csv(manifest, index=False)  # fmt: skip
    run = {"columns": {"keypoint": "bodypart"}}  # the run's mapping: replaced on these rows
    plan = plan_sessions(None, manifest, reader_options=run)
    assert plan[0]["options"] == {"columns": dict(p.split("=") for p in tidy_map.split(","))}
    assert plan[1]["options"] == {"columns": {"confidence": "p"}}
    assert all("columns" not in e["meta"] for e in plan)  # in reader_options, not metadata
    for read in ([read_planned(e) for e in plan], load_study(manifest, progress=False, **run)):
        for s in read:
            np.testing.assert_array_equal(s.coords, t.coords)
            np.testing.assert_allclose(s.confidence, conf)
    # A cell that is not ROLE=COLUMN pairs is refused, naming the row.
    table = pd.read_csv(manifest)
    table.loc[1, "columns"] = "confidence:p"
    table.to_csv(manifest, index=False)
    with pytest.raises(InputError, match=r"row 2 \(session 'b'\): the columns cell takes "
                       r"ROLE=COLUMN pairs .*'confidence:p'"):  # fmt: skip
        plan_sessions(None, manifest, reader_options=run)
    # A column named like a reading option of the whole run is said to be kept as metadata.
    table.loc[1, "columns"] = "confidence=p"
    table.assign(pattern="{keypoint}_{axis}").to_csv(manifest, index=False)
    with pytest.warns(UserWarning, match=r"column\(s\) \['pattern'\] are kept as columns of "
                      r"your own \(session metadata\), not read as reading options"):  # fmt: skip
        plan = plan_sessions(None, manifest, reader_options=run)
    assert plan[1]["meta"]["pattern"] == "{keypoint}_{axis}"


def test_load_study_gives_each_option_to_the_readers_that_take_it(tmp_path):
    # A study of a tidy table and a wide one written 'nose.x': pattern= is the wide reader's
    # only, as discover sends it; before, load_study handed it to the tidy reader too, which
    # refused it. An option no reader takes is still refused (a misspelling).
    from ethoscribe.io import load_study

    t = _tracks(n=30)
    write_tidy(t, tmp_path / "a.csv")
    wide = pd.DataFrame({"frame": np.arange(30)})
    for j, name in enumerate(t.keypoints):
        wide[f"{name}.x"], wide[f"{name}.y"] = t.coords[:, 0, j, 0], t.coords[:, 0, j, 1]
    wide.to_csv(tmp_path / "b.csv", index=False)
    manifest = tmp_path / "manifest.csv"
    pd.DataFrame({"session": ["a", "b"], "path": ["a.csv", "b.csv"], "fps": 30.0,
                  "format": ["tidy", "wide"]}).to_csv(manifest, index=False)  # fmt: skip
    read = load_study(manifest, progress=False, pattern="{keypoint}.{axis}", frame_column="frame")
    for s in read:
        np.testing.assert_array_equal(s.coords, t.coords)
    with pytest.raises(InputError, match=r"no reader of this study \(tidy, wide\) takes the "
                       r"option\(s\) \['patern'\]"):  # fmt: skip
        load_study(manifest, progress=False, patern="{keypoint}.{axis}")


@pytest.mark.parametrize(
    ("value", "argument"),
    [(pd.DataFrame(), "inputs"), (3, "inputs"), ([None], r"inputs\[0\]")],
)
def test_a_non_path_where_a_path_is_expected_is_a_type_error(value, argument):
    with pytest.raises(TypeError, match=f"{argument} must be a path"):
        plan_sessions(value)


def test_a_plain_string_is_one_path(tmp_path):
    write_tidy(_tracks(), tmp_path / "m.parquet")
    assert [e["session"] for e in plan_sessions(str(tmp_path / "m.parquet"))] == ["m"]


def _tidy_rows(t: PoseTracks, first: int, time_scale: float | None = None) -> pd.DataFrame:
    n, _, k, _ = t.coords.shape
    frame = np.repeat(np.arange(first, first + n), k)
    table = pd.DataFrame(
        {
            "frame": frame,
            "keypoint": np.tile(list(t.keypoints), n),
            "x": t.coords[:, 0, :, 0].ravel(),
            "y": t.coords[:, 0, :, 1].ravel(),
            "likelihood": np.tile(np.linspace(0.6, 0.99, k), n),
        }
    )
    if time_scale is not None:
        table.insert(1, "time", table.pop("frame") / 30.0 * time_scale)
    return table


def test_a_time_column_in_milliseconds_is_refused_or_read_with_its_unit(tmp_path):
    from ethoscribe.io import read_tidy

    p = tmp_path / "ms.csv"
    _tidy_rows(_tracks(n=120), 0, time_scale=1000.0).to_csv(p, index=False)
    with pytest.warns(UserWarning, match=r"column\(s\) \['likelihood'\] hold numbers like a"):
        with pytest.raises(InputError, match=r"1000 frames per step.*time_unit='ms'"):
            read_tidy(p, fps=30)
    with pytest.warns(UserWarning, match="likelihood"):
        with pytest.raises(InputError, match=r"0\.03 frames per second.*time_unit='ms'"):
            read_tidy(p)
    t = read_tidy(p, time_unit="ms", columns={"confidence": "likelihood"})
    assert t.fps == 30.0 and t.n_frames == 120  # 4 s at 30 fps, not 4,000 s
    np.testing.assert_allclose(t.confidence[0, 0], np.linspace(0.6, 0.99, 3))
    with pytest.raises(InputError, match=r"names column\(s\) \['score'\] that the file"):
        read_tidy(p, time_unit="ms", columns={"confidence": "score"})


def _wide_file(path, confidence_suffix: str) -> None:
    """A 60-frame wide table: ``<keypoint>_x``, ``_y`` and ``_<confidence_suffix>`` columns."""
    t = _tracks(n=60)
    cols = {}
    for i, k in enumerate(t.keypoints):
        cols[f"{k}_x"], cols[f"{k}_y"] = t.coords[:, 0, i, 0], t.coords[:, 0, i, 1]
        cols[f"{k}_{confidence_suffix}"] = np.linspace(0.1, 0.9, 60)
    pd.DataFrame(cols).to_csv(path, index=False)


def test_a_wide_table_says_when_a_confidence_is_ignored_and_maps_it(tmp_path):
    from ethoscribe.io import read_wide

    _wide_file(tmp_path / "w.csv", confidence_suffix="p")
    with pytest.warns(UserWarning, match=r"confidence_axis='p'"):
        read_wide(tmp_path / "w.csv", fps=30)
    back = read_wide(tmp_path / "w.csv", fps=30, columns={"confidence": "p"})
    np.testing.assert_allclose(back.confidence[:, 0, 0], np.linspace(0.1, 0.9, 60))


def test_a_misspelt_confidence_mapping_of_a_wide_table_is_refused(tmp_path):
    # 'likelyhood' for 'likelihood': the file would be read without its confidence (no
    # low-confidence masking) behind a warning; refused instead, naming the right word.
    from ethoscribe.io import read_wide

    _wide_file(tmp_path / "w.csv", confidence_suffix="likelihood")
    with pytest.raises(InputError, match=r"'likelyhood'.*confidence_axis='likelihood'"):
        read_wide(tmp_path / "w.csv", fps=30, columns={"confidence": "likelyhood"})
    back = read_wide(tmp_path / "w.csv", fps=30, columns={"confidence": "likelihood"})
    np.testing.assert_allclose(back.confidence[:, 0, 0], np.linspace(0.1, 0.9, 60))


def test_batch_tables_keep_the_input_frame_numbers(tmp_path):
    """Frames numbered from 1000 with frame 1005 dropped by the tracker: the label table,
    the bouts and the features keep those numbers, and 1005 is a gap, not renumbered."""
    from ethoscribe.workspace import Workspace, discover

    rng = np.random.default_rng(3)  # seed 3
    keypoints = ("nose", "neck", "tail")
    for s in range(2):
        body = np.array([[0.0, 0.0], [5.0, 0.0], [10.0, 0.0]])
        coords = np.cumsum(rng.normal(size=(300, 1, 3, 2)), axis=0) + body
        table = _tidy_rows(PoseTracks(coords, keypoints=keypoints, fps=30, session="s"), 1000)
        table = table[table["frame"] != 1005].rename(columns={"likelihood": "confidence"})
        table.to_csv(tmp_path / f"rec{s}.csv", index=False)
    out = tmp_path / "ws"
    files = [tmp_path / "rec0.csv", tmp_path / "rec1.csv"]
    discover(files, out, fps=30, states=2, axis=("tail", "nose"), progress=False,
             stability=False, jobs=1)  # fmt: skip
    labels = pd.read_parquet(out / "labels.parquet")
    first = labels[labels["session"] == "rec0"]
    assert first["frame"].iloc[0] == 1000 and first["frame"].iloc[-1] == 1299
    assert first["time_s"].iloc[0] == pytest.approx(1000 / 30)
    # The dropped frame keeps its place (a gap, here short enough to be filled): 300 rows.
    assert first["frame"].tolist() == list(range(1000, 1300))
    bouts = pd.read_csv(out / "bouts.csv")
    assert bouts["start_frame"].min() >= 1000 and bouts["stop_frame"].max() <= 1300
    assert pd.read_csv(out / "sessions.csv")["first_frame"].tolist() == [1000, 1000]
    feats = Workspace(out).features()
    assert feats.groupby("session")["frame"].min().tolist() == [1000, 1000]


def test_a_frame_rate_no_camera_has_is_refused_before_smoothing():
    # 1e9 fps made a 200-million-frame smoothing window (a crash inside the least-squares fit).
    with pytest.raises(InputError, match=r"200000001 frames.*check the frame rate"):
        clean(_tracks().replace(fps=1e9))


def test_motif_name_lists_refuse_a_plain_string():
    from ethoscribe.curation import Curation

    cur = Curation({0: "m", 1: "n"})
    with pytest.raises(InputError, match=r"motifs must be a list of motif names.*the string 'm'"):
        cur.merge("m", into="x")
    with pytest.raises(InputError, match=r"names must be a list of motif names.*the string 'ab'"):
        cur.split("m", "ab", pd.DataFrame(), pd.DataFrame())
    with pytest.raises(InputError, match=r"names must hold 2 new names"):
        cur.split("m", ["a"], pd.DataFrame(), pd.DataFrame())


def test_rows_sorted_by_keypoint_read_as_rows_sorted_by_frame(tmp_path):
    from ethoscribe.io import read_tidy

    t = _tracks(n=50)
    write_tidy(t, tmp_path / "by_frame.csv")
    rows = pd.read_csv(tmp_path / "by_frame.csv")
    rows.sort_values(["keypoint", "frame"]).to_csv(tmp_path / "by_keypoint.csv", index=False)
    back = read_tidy(tmp_path / "by_keypoint.csv")
    # The same points under every name (keypoints come in the order the file first names them).
    assert sorted(back.keypoints) == sorted(t.keypoints)
    for k in t.keypoints:
        np.testing.assert_array_equal(
            back.coords[:, :, back.keypoints.index(k)], t.coords[:, :, t.keypoints.index(k)]
        )
