"""Saved models: arrays must agree with every declared parameter and are bounded by the
declared sizes before any memory is allocated."""

from __future__ import annotations

import hashlib
import json
import shutil
import zipfile
from pathlib import Path

import numpy as np
import pytest

from ethoscribe.errors import InputError, UnsafeFileError
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.workspace.files import load_model


@pytest.fixture(scope="module")
def saved(tmp_path_factory) -> Path:
    from ethoscribe.io.bundle import write_bundle
    from ethoscribe.pose import PoseTracks

    rng = np.random.default_rng(0)  # seed 0
    body = np.array([[0.0, 0.0], [5.0, 0.0], [10.0, 0.0]])
    sessions = [
        PoseTracks(
            np.cumsum(rng.normal(size=(600, 1, 3, 2)), axis=0) + body,
            keypoints=["nose", "neck", "tail"],
            fps=30,
            session=f"s{i}",
        )
        for i in range(2)
    ]
    # join_units off: random walks drift apart per session, and these checks want the three
    # fitted states as labelled states (joining is tested in tests/test_grouped_hmm.py)
    model = BehaviourModel(
        n_states=3,
        features={"axis": ("tail", "nose")},
        join_units=False,
        progress=False,
        random_state=0,
    ).fit(sessions)
    folder = tmp_path_factory.mktemp("model") / "model"
    meta, arrays = model.to_state()
    write_bundle(folder, meta, arrays)
    return folder


def _copy(saved: Path, tmp_path: Path) -> Path:
    folder = tmp_path / "model"
    shutil.copytree(saved, folder)
    return folder


def _rewrite_meta(folder: Path, change) -> None:
    meta = json.loads((folder / "model.json").read_text())
    change(meta)
    digest = hashlib.sha256((folder / "arrays.npz").read_bytes()).hexdigest()
    meta["arrays_sha256"] = digest
    (folder / "model.json").write_text(json.dumps(meta))


def test_the_saved_model_loads(saved):
    assert load_model(saved).n_states_ == 3


def test_a_declared_covariance_type_must_match_the_arrays(saved, tmp_path):
    folder = _copy(saved, tmp_path)

    def diag(meta):
        meta["segmenter"]["params"]["covariance_type"] = "diag"

    _rewrite_meta(folder, diag)
    with pytest.raises(InputError, match="covariance_type is 'diag' but array 'covars' holds full"):
        load_model(folder)


def test_a_small_archive_declaring_huge_arrays_is_refused_before_loading(saved, tmp_path):
    folder = _copy(saved, tmp_path)
    arrays = folder / "arrays.npz"
    with zipfile.ZipFile(arrays) as zf:
        members = {i.filename: zf.read(i) for i in zf.infolist()}
    # 4000 x 4000 zeros (128 MB) compress to a few hundred kB: sizes must come from model.json.
    huge = np.zeros((4000, 4000))
    with zipfile.ZipFile(arrays, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, data in members.items():
            if name == "segmenter/covars.npy":
                with zf.open(name, "w", force_zip64=True) as fh:
                    np.lib.format.write_array(fh, huge, allow_pickle=False)
            else:
                zf.writestr(name, data)
    assert arrays.stat().st_size < 2_000_000
    _rewrite_meta(folder, lambda meta: None)
    with pytest.raises(UnsafeFileError, match=r"declares shape \(4000, 4000\).*refused before"):
        load_model(folder)
