"""Atomic saving: complete files or none, never a half-written one."""

from __future__ import annotations

import json
import os

import numpy as np
import pandas as pd
import pytest

from ethoscribe.errors import InputError
from ethoscribe.io import (
    atomic_path,
    atomic_write,
    atomic_write_bytes,
    atomic_write_json,
    atomic_write_text,
    write_table,
)


class Boom(RuntimeError):
    pass


def _leftovers(folder):
    return sorted(p.name for p in folder.iterdir())


def test_atomic_write_binary_and_text(tmp_path):
    with atomic_write(tmp_path / "a.bin") as fh:
        fh.write(b"\x00\x01")
    with atomic_write(tmp_path / "b.txt", "w") as fh:
        fh.write("one\ntwo\n")
    assert (tmp_path / "a.bin").read_bytes() == b"\x00\x01"
    assert (tmp_path / "b.txt").read_bytes() == b"one\ntwo\n"  # \n on every platform
    assert _leftovers(tmp_path) == ["a.bin", "b.txt"]


def test_failure_leaves_no_file_and_keeps_the_old_one(tmp_path):
    target = tmp_path / "t.txt"
    with pytest.raises(Boom), atomic_write(target, "w") as fh:
        fh.write("partial")
        raise Boom
    assert _leftovers(tmp_path) == []
    atomic_write_text(target, "old")
    with pytest.raises(Boom), atomic_write(target, "w") as fh:
        fh.write("new but unfinished")
        raise Boom
    assert target.read_text() == "old"
    assert _leftovers(tmp_path) == ["t.txt"]


def test_atomic_path_success_and_failure(tmp_path):
    target = tmp_path / "data.nwb"
    with atomic_path(target) as tmp:
        assert tmp.parent == tmp_path and tmp.suffix == ".nwb" and tmp != target
        tmp.write_bytes(b"ok")
    assert target.read_bytes() == b"ok"
    with pytest.raises(Boom), atomic_path(target) as tmp:
        tmp.write_bytes(b"broken")
        raise Boom
    assert target.read_bytes() == b"ok"
    assert _leftovers(tmp_path) == ["data.nwb"]


def test_file_mode_follows_umask(tmp_path):
    mask = os.umask(0o022)
    os.umask(mask)
    p = atomic_write_bytes(tmp_path / "m.bin", b"x")
    # mkstemp makes private 0600 files; a saved file should look like any other new file.
    assert p.stat().st_mode & 0o777 == 0o666 & ~mask


def test_bad_mode_and_missing_folder(tmp_path):
    with pytest.raises(InputError, match="mode"), atomic_write(tmp_path / "x", "a"):
        pass
    with pytest.raises(InputError, match="does not exist"):
        atomic_write_text(tmp_path / "nope" / "x.txt", "hi")
    with pytest.raises(InputError, match="is a folder"):
        atomic_write_text(tmp_path, "hi")
    assert _leftovers(tmp_path) == []


def test_json_sorted_indented_and_numpy_aware(tmp_path):
    obj = {"b": np.int64(3), "a": np.arange(2), "c": {"z": np.float64(0.5), "y": tmp_path}}
    p = atomic_write_json(tmp_path / "m.json", obj)
    text = p.read_text()
    assert text.endswith("}\n")
    assert text.index('"a"') < text.index('"b"') < text.index('"c"')
    assert '\n  "a": [\n    0,' in text  # indent 2
    assert json.loads(text) == {"a": [0, 1], "b": 3, "c": {"y": str(tmp_path), "z": 0.5}}


@pytest.mark.parametrize("bad", [float("nan"), np.inf, [1.0, np.nan]])
def test_json_refuses_nan_and_writes_nothing(tmp_path, bad):
    with pytest.raises(InputError, match="NaN or infinity") as info:
        atomic_write_json(tmp_path / "m.json", {"value": bad})
    assert "m.json" in str(info.value) and info.value.__suppress_context__
    assert _leftovers(tmp_path) == []


def test_json_refuses_unknown_objects(tmp_path):
    with pytest.raises(InputError, match="object"):
        atomic_write_json(tmp_path / "m.json", {"value": object()})
    assert _leftovers(tmp_path) == []


@pytest.mark.parametrize("suffix", [".csv", ".parquet", ".pq"])
def test_write_table_round_trip(tmp_path, suffix):
    df = pd.DataFrame(
        {"session": ["a", "b,c", 'say "hi"'], "value": [1.5, np.nan, -2.0], "n": [1, 2, 3]}
    )
    p = write_table(df, tmp_path / f"t{suffix}")
    back = pd.read_csv(p) if suffix == ".csv" else pd.read_parquet(p)
    pd.testing.assert_frame_equal(back, df, check_dtype=False)
    assert _leftovers(tmp_path) == [p.name]


def test_write_table_csv_is_plain_when_it_can_be(tmp_path):
    df = pd.DataFrame({"keypoint": ["nose", "tail"], "x": [1.0, np.nan]})
    p = write_table(df, tmp_path / "t.csv")
    assert p.read_text() == "keypoint,x\nnose,1\ntail,\n"  # NaN saved as an empty cell


def test_write_table_refuses_unknown_suffix_and_non_tables(tmp_path):
    with pytest.raises(InputError, match=r"suffix '\.xlsx'"):
        write_table(pd.DataFrame({"a": [1]}), tmp_path / "t.xlsx")
    with pytest.raises(InputError, match="DataFrame"):
        write_table([1, 2], tmp_path / "t.csv")
    assert _leftovers(tmp_path) == []


def test_write_table_failure_keeps_previous_file(tmp_path):
    p = write_table(pd.DataFrame({"a": [1]}), tmp_path / "t.parquet")
    before = p.read_bytes()
    mixed = pd.DataFrame({"a": [1, "x", 2.5]}, dtype=object)
    with pytest.raises(InputError, match="mixes types"):
        write_table(mixed, p)
    assert p.read_bytes() == before
    assert _leftovers(tmp_path) == ["t.parquet"]


# --- tables written piece by piece ----------------------------------------------------------
@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_a_table_written_in_pieces_equals_the_table_written_at_once(tmp_path, suffix):
    from ethoscribe.io._atomic import atomic_table_writer, write_table

    table = pd.DataFrame(
        {"session": ["a", "a", "b,c", "b,c"], "x": [1.5, np.nan, 3.0, 4.0], "n": [1, 2, 3, 4]}
    )
    whole = write_table(table, tmp_path / f"whole{suffix}")
    with atomic_table_writer(tmp_path / f"pieces{suffix}") as write:
        write(table.iloc[:2])
        write(table.iloc[2:])
    # (CSV quoting is decided per piece, so the bytes may differ where a value needs quotes;
    # the parsed tables may not.)
    pd.testing.assert_frame_equal(
        pd.read_parquet(tmp_path / f"pieces{suffix}")
        if suffix == ".parquet"
        else pd.read_csv(tmp_path / f"pieces{suffix}"),
        pd.read_parquet(whole) if suffix == ".parquet" else pd.read_csv(whole),
    )


def test_a_table_writer_that_fails_midway_leaves_no_file(tmp_path):
    from ethoscribe.io._atomic import atomic_table_writer

    target = tmp_path / "t.parquet"
    with pytest.raises(RuntimeError), atomic_table_writer(target) as write:
        write(pd.DataFrame({"a": [1]}))
        raise RuntimeError("killed")
    assert not target.exists() and not list(tmp_path.iterdir())
    with pytest.raises(InputError, match="no rows"), atomic_table_writer(target):
        pass
    with pytest.raises(InputError, match="does not match"), atomic_table_writer(target) as write:
        write(pd.DataFrame({"a": [1]}))
        write(pd.DataFrame({"b": ["x"]}))
    assert not list(tmp_path.iterdir())
