"""Hostile files: loading a model or workspace never runs code, and every trap gets a clear no.

Each case damages a copy of a small workspace the way a malicious or careless colleague could
(pickled object arrays, JSON of the wrong types or absurd sizes, archive members and session
names that climb out of their folder, links that lead outside the workspace) and checks that
ethoscribe refuses it with its own error type and a message naming the file. Where a payload
would run code, it would create a marker file: the marker must never appear.

Data: a workspace discovered on two simulated sessions of the package's invented animals.
"""

from __future__ import annotations

import io
import json
import pickle
import shutil
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from _reliability_data import run_discover, write_study
from ethoscribe.errors import InputError, UnsafeFileError, WorkspaceError
from ethoscribe.io import bundle as bundle_module
from ethoscribe.io import read_manifest, read_tidy, write_tidy
from ethoscribe.io._safe import load_npz
from ethoscribe.io.bundle import read_bundle
from ethoscribe.system import file_digest
from ethoscribe.workspace import Workspace, discover
from ethoscribe.workspace.files import append_journal


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    return write_study(tmp_path_factory.mktemp("hostile") / "study")


@pytest.fixture(scope="module")
def base(study, tmp_path_factory) -> Path:
    return run_discover(study, tmp_path_factory.mktemp("hostile") / "base").path


@pytest.fixture
def ws_path(base, tmp_path) -> Path:
    return shutil.copytree(base, tmp_path / "ws")


class _Payload:
    """Unpickling this creates ``marker``: proof that code ran."""

    def __init__(self, marker: Path) -> None:
        self.marker = str(marker)

    def __reduce__(self):
        return (open, (self.marker, "w"))


def _object_npz(path: Path, arrays: dict, marker: Path) -> None:
    evil = np.empty(1, dtype=object)
    evil[0] = _Payload(marker)
    np.savez(path, **arrays, evil=evil)  # np.savez pickles object arrays


def _npz_bytes(members: dict[str, bytes]) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        for name, data in members.items():
            zf.writestr(name, data)
    return buf.getvalue()


def _npy(array: np.ndarray) -> bytes:
    buf = io.BytesIO()
    np.lib.format.write_array(buf, array, allow_pickle=False)
    return buf.getvalue()


def _set_digest(folder: Path) -> None:
    # An attacker rewrites the digest too, so that only the content checks can stop them.
    meta = json.loads((folder / "model.json").read_text())
    meta["arrays_sha256"] = file_digest(folder / "arrays.npz")
    (folder / "model.json").write_text(json.dumps(meta))


# --- pickle: object arrays in the model and in feature files ------------------------------
def test_object_array_in_the_model_is_refused_without_running_it(ws_path, tmp_path):
    marker = tmp_path / "code_ran"
    _, arrays = read_bundle(ws_path / "model")
    _object_npz(ws_path / "model" / "arrays.npz", arrays, marker)
    _set_digest(ws_path / "model")
    with pytest.raises(UnsafeFileError, match=r"arrays\.npz.*'evil\.npy'.*pickle"):
        Workspace(ws_path).model()
    # The reference behaviour of numpy itself, which our loader must match: refused.
    with pytest.raises(ValueError), np.load(ws_path / "model" / "arrays.npz") as z:
        z["evil"]
    assert not marker.exists()


def test_object_array_in_a_feature_file_is_refused(ws_path, tmp_path):
    marker = tmp_path / "code_ran"
    path = next((ws_path / "features").glob("*.npz"))
    _object_npz(path, load_npz(path), marker)
    ws = Workspace(ws_path)
    ws.rename_motif("motif_01", "resting")
    with pytest.raises(UnsafeFileError, match="pickle"):
        ws.split_motif("resting", ["a", "b"])  # a split reads the features
    assert not marker.exists()


# --- archive members: names, sizes -------------------------------------------------------
@pytest.mark.parametrize("name", ["../../x.npy", "/etc/x.npy", "..\\..\\x.npy", "C:/x.npy"])
def test_archive_member_outside_its_folder_is_refused(ws_path, name):
    (ws_path / "model" / "arrays.npz").write_bytes(_npz_bytes({name: _npy(np.zeros(3))}))
    _set_digest(ws_path / "model")
    with pytest.raises(UnsafeFileError, match="points outside its folder"):
        Workspace(ws_path).model()


def test_archive_member_declaring_a_huge_array_is_refused_before_allocating(ws_path):
    header = io.BytesIO()
    np.lib.format.write_array_header_1_0(
        header, {"descr": "<f8", "fortran_order": False, "shape": (10**11,)}
    )
    data = header.getvalue() + b"\0" * 8  # 800 GB claimed, 8 bytes stored
    (ws_path / "model" / "arrays.npz").write_bytes(_npz_bytes({"means.npy": data}))
    _set_digest(ws_path / "model")
    with pytest.raises(UnsafeFileError, match=r"declares shape \(100000000000,\)"):
        Workspace(ws_path).model()


def test_structured_dtype_member_is_refused(ws_path):
    odd = np.zeros(2, dtype=[("a", "<f8"), ("b", "<i4")])
    (ws_path / "model" / "arrays.npz").write_bytes(_npz_bytes({"means.npy": _npy(odd)}))
    _set_digest(ws_path / "model")
    with pytest.raises(UnsafeFileError, match="not plain numbers or text"):
        read_bundle(ws_path / "model")


def test_damaged_archive_is_an_input_error(ws_path):
    (ws_path / "model" / "arrays.npz").write_bytes(b"PK\x03\x04 not really a zip")
    _set_digest(ws_path / "model")
    with pytest.raises(InputError, match="cannot be read as an npz"):
        read_bundle(ws_path / "model")


# --- model.json: unexpected types and absurd numbers --------------------------------------
MODEL_EDITS = {
    "params is text": lambda m: {**m, "params": "x"},
    "keypoints is a number": lambda m: {**m, "keypoints": 5},
    "n_states is text": lambda m: {**m, "n_states": "three"},
    "fps is a list": lambda m: {**m, "fps": [1]},
    "unknown segmenter option": lambda m: {
        **m,
        "segmenter": {**m["segmenter"], "params": {**m["segmenter"]["params"], "evil": 1}},
    },
    "features missing": lambda m: {k: v for k, v in m.items() if k != "features"},
    "selection damaged": lambda m: {**m, "selection": {"best": "x"}},
    "n_states huge": lambda m: {**m, "n_states": 10**25},
    "segmenter states huge": lambda m: {
        **m,
        "segmenter": {**m["segmenter"], "n_states": 10**12},
    },
    "top level is a list": lambda m: [m],
    "unknown segmenter kind": lambda m: {**m, "segmenter_kind": "os.system"},
}


@pytest.mark.parametrize("edit", list(MODEL_EDITS), ids=list(MODEL_EDITS))
def test_model_json_of_the_wrong_shape_is_refused_clearly(ws_path, edit):
    path = ws_path / "model" / "model.json"
    path.write_text(json.dumps(MODEL_EDITS[edit](json.loads(path.read_text()))))
    with pytest.raises(InputError, match=r"model"):
        Workspace(ws_path).model()


@pytest.mark.parametrize(
    ("old", "new", "match"),
    [
        ('"fps": 30.0', '"fps": 1e999', "too large to represent"),
        ('"fps": 30.0', '"fps": NaN', "non-standard constant"),
        ('"n_dims": 2', '"n_dims": ' + "9" * 5000, "5000 digits"),
    ],
    ids=["1e999", "NaN", "5000-digit integer"],
)
def test_model_json_with_absurd_numbers_is_refused(ws_path, old, new, match):
    path = ws_path / "model" / "model.json"
    text = path.read_text()
    assert old in text
    path.write_text(text.replace(old, new))
    with pytest.raises(InputError, match=match):
        Workspace(ws_path).model()


def test_deeply_nested_or_huge_json_is_refused(ws_path, monkeypatch):
    path = ws_path / "model" / "model.json"
    path.write_text("[" * 200_000 + "]" * 200_000)
    with pytest.raises(InputError, match="nested too deeply"):
        read_bundle(ws_path / "model")
    monkeypatch.setattr(bundle_module, "MAX_META_BYTES", 1000)
    with pytest.raises(UnsafeFileError, match="implausibly large"):
        read_bundle(ws_path / "model")


@pytest.mark.parametrize(
    ("name", "text", "error", "match"),
    [
        ("workspace.json", "[1]", WorkspaceError, "not an ethoscribe workspace record"),
        ("workspace.json", "{", WorkspaceError, "not valid JSON"),
        ("workspace.json", '{"format_version": NaN}', WorkspaceError, "non-standard constant"),
        ("workspace.json", '{"format_version": "1"}', WorkspaceError, "format '1'"),
        ("summary.json", '{"n_states": 5000}', WorkspaceError, "n_states is a whole number"),
        ("summary.json", '{"n_states": "three"}', WorkspaceError, "n_states is a whole number"),
        ("summary.json", '{"n_states": true}', WorkspaceError, "n_states is a whole number"),
        ("summary.json", "[3]", WorkspaceError, "n_states is a whole number"),
    ],
)
def test_workspace_json_of_the_wrong_shape_is_refused(ws_path, name, text, error, match):
    (ws_path / name).write_text(text)
    with pytest.raises(error, match=match):
        Workspace(ws_path).labels()


def test_journal_record_of_the_wrong_shape_is_refused_clearly(ws_path):
    record = {"op": "split", "motif": "motif_01", "names": ["a", "b"], "frames_assignment": "x"}
    (ws_path / "journal.jsonl").write_text(json.dumps(record) + "\n")
    with pytest.raises(WorkspaceError, match=r"journal\.jsonl: an edit record cannot be replayed"):
        Workspace(ws_path).labels()


def test_feature_file_with_the_wrong_arrays_is_refused(ws_path):
    path = next((ws_path / "features").glob("*.npz"))
    np.savez(path, values=np.zeros((3, 2)), valid=np.ones(4, bool))
    with pytest.raises(WorkspaceError, match="not a feature file written by ethoscribe"):
        Workspace(ws_path).features()


# --- links leading outside the workspace ---------------------------------------------------
@pytest.mark.parametrize(
    "inside", ["model/arrays.npz", "features/00000.npz", "journal.jsonl", "model", "labels.parquet"]
)
def test_link_leading_outside_the_workspace_is_refused(ws_path, tmp_path, inside):
    target = tmp_path / "elsewhere" / Path(inside).name
    target.parent.mkdir()
    source = ws_path / inside
    if source.exists():
        shutil.move(source, target)
    else:
        target.write_text("")  # the journal does not exist before the first edit
    source.symlink_to(target, target_is_directory=target.is_dir())
    with pytest.raises(UnsafeFileError, match=rf"leading outside the workspace \({inside} ->"):
        Workspace(ws_path)


def test_links_ethoscribe_never_follows_are_fine(ws_path, study):
    # A link within the workspace, and the user's own link to their raw data: never opened by
    # ethoscribe, so not refused.
    (ws_path / "exports").mkdir()
    (ws_path / "exports" / "labels.parquet").symlink_to(ws_path / "labels.parquet")
    (ws_path / "raw_data").symlink_to(study, target_is_directory=True)
    assert len(Workspace(ws_path).labels()) > 0


def test_journal_turned_into_a_link_is_never_appended_to(ws_path, tmp_path):
    ws = Workspace(ws_path)  # opened while clean; the link appears afterwards
    outside = tmp_path / "someone_elses_file"
    outside.write_text("precious\n")
    (ws_path / "journal.jsonl").symlink_to(outside)
    with pytest.raises(UnsafeFileError, match="symbolic link"):
        append_journal(ws_path / "journal.jsonl", {"op": "rename"})
    with pytest.raises(UnsafeFileError, match="symbolic link"):
        ws.rename_motif("motif_01", "resting")
    assert outside.read_text() == "precious\n"


# --- names that would build paths outside the workspace ------------------------------------
BAD_NAMES = ["../../x", "..", "a/b", "a\\b", "C:x", "tab\tname"]


@pytest.mark.parametrize("name", BAD_NAMES)
def test_session_name_that_leaves_its_folder_is_refused_in_a_manifest(study, tmp_path, name):
    rows = pd.DataFrame({"session": [name], "path": [str(study / "session_01.parquet")]})
    rows.to_csv(tmp_path / "manifest.csv", index=False)
    with pytest.raises(InputError, match=r"manifest\.csv: row 1: session name .* cannot be used"):
        read_manifest(tmp_path / "manifest.csv")


@pytest.mark.parametrize("name", BAD_NAMES)
def test_session_name_that_leaves_its_folder_is_refused_by_the_readers(study, name):
    with pytest.raises(InputError, match="cannot be used"):
        read_tidy(study / "session_01.parquet", session=name)


def test_discover_with_a_hostile_session_name_writes_nothing(study, tmp_path):
    rows = pd.DataFrame({"session": ["../../x"], "path": [str(study / "session_01.parquet")]})
    rows.to_csv(tmp_path / "manifest.csv", index=False)
    out = tmp_path / "deep" / "er" / "out"
    with pytest.raises(InputError, match="cannot be used"):
        discover([], out, manifest=tmp_path / "manifest.csv", states=3, progress=False)
    assert not out.exists() and not list(tmp_path.rglob("x*"))


def test_manifest_paths_may_point_anywhere_the_user_can_read(study, tmp_path):
    # The rule: paths in a manifest are the user's own data and may lie anywhere (here in a
    # sibling folder reached with '..'); only names that build output paths are restricted.
    (tmp_path / "lists").mkdir()
    rows = pd.DataFrame({"session": ["s1"], "path": ["../study_link/session_01.parquet"]})
    rows.to_csv(tmp_path / "lists" / "manifest.csv", index=False)
    (tmp_path / "study_link").symlink_to(study, target_is_directory=True)
    table = read_manifest(tmp_path / "lists" / "manifest.csv")
    assert Path(table["path"][0]) == (study / "session_01.parquet").resolve()


# --- other payloads ---------------------------------------------------------------------
def test_parquet_with_a_pickled_extension_type_is_read_as_plain_data(study, tmp_path):
    # Reference: pyarrow >= 14.0.1 no longer unpickles "arrow.py_extension_type" metadata
    # (CVE-2023-47248); our readers must inherit that: the payload never runs.
    import pyarrow as pa
    import pyarrow.parquet as pq

    marker = tmp_path / "code_ran"
    tracks = read_tidy(study / "session_01.parquet")
    write_tidy(tracks, tmp_path / "plain.parquet")
    table = pq.read_table(tmp_path / "plain.parquet")
    i = table.schema.get_field_index("x")
    meta = {
        b"ARROW:extension:name": b"arrow.py_extension_type",
        b"ARROW:extension:metadata": pickle.dumps(_Payload(marker)),
    }
    schema = table.schema.set(i, table.schema.field(i).with_metadata(meta))
    pq.write_table(pa.Table.from_arrays(table.columns, schema=schema), tmp_path / "evil.parquet")
    again = read_tidy(tmp_path / "evil.parquet")
    np.testing.assert_array_equal(again.coords, tracks.coords)
    assert not marker.exists()


def test_motif_name_with_markup_cannot_script_the_report(ws_path):
    from ethoscribe.workspace import write_ethogram_report

    ws = Workspace(ws_path)
    ws.rename_motif("motif_01", "</script><script>alert(1)</script>")
    page = write_ethogram_report(ws, ws_path / "report.html").read_text()
    assert "<script>alert(1)" not in page


def test_command_line_reports_a_refusal_in_one_line(ws_path, study, tmp_path, capsys):
    from ethoscribe.cli import main

    _, arrays = read_bundle(ws_path / "model")
    _object_npz(ws_path / "model" / "arrays.npz", arrays, tmp_path / "code_ran")
    _set_digest(ws_path / "model")
    args = ["label", str(ws_path), str(study / "session_01.parquet"), "--out", str(tmp_path / "o")]
    assert main([*args, "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("ethoscribe label: error:") and "pickle" in err
    assert len(err.strip().splitlines()) == 1 and not (tmp_path / "code_ran").exists()


# --- issue #7 reliability gaps (were strict xfail; now fixed) -------------------------------
def test_labelling_with_a_hostile_bare_model_folder_is_refused_clearly(base, study, tmp_path):
    from ethoscribe.workspace import label_sessions

    model = shutil.copytree(base / "model", tmp_path / "model")
    meta = json.loads((model / "model.json").read_text())
    (model / "model.json").write_text(json.dumps({**meta, "keypoints": 5}))
    with pytest.raises(InputError, match="model"):
        label_sessions(model, [study / "session_01.parquet"], tmp_path / "out", progress=False)


def test_model_from_state_checks_its_input(base):
    from ethoscribe.segment.model import BehaviourModel

    meta, arrays = read_bundle(base / "model")
    with pytest.raises(InputError):
        BehaviourModel.from_state({**meta, "keypoints": 5}, arrays)


def test_an_export_folder_name_that_leaves_the_workspace_is_refused(base, tmp_path):
    import shutil

    from ethoscribe.errors import EthoscribeError
    from ethoscribe.workspace.export import save_ethogram

    ws = shutil.copytree(base, tmp_path / "ws")
    with pytest.raises(EthoscribeError, match="export folder"):
        save_ethogram(ws, folder="../outside", report=False)
    assert not (tmp_path / "outside").exists()
