"""Fuzzing the table readers: any table gives valid PoseTracks or ethoscribe's own InputError.

hypothesis builds tidy and wide tables, starting from a valid grid and applying random damage:
shuffled columns and rows, NaN, infinity, extreme magnitudes, text in number columns, unicode,
blank and repeated keypoint names, repeated and missing rows, frame gaps, fractional or huge
frame numbers, confidence outside [0, 1]. Written as CSV or Parquet, each table is read; the
reader must either return tracks that satisfy the data model's invariants or raise
``InputError`` with a message naming the file. Any other exception is a bug.

CI runs a bounded, derandomised number of examples: 200 per test in the default run, and
the ``slow`` tests (run in CI's second step) add 1,200 more, with column mappings and time
units among them. For a longer local run::

    ETHOSCRIBE_FUZZ_EXAMPLES=20000 python -m pytest tests/test_fuzz_readers.py -q -s

(random examples, a new draw every run; the figures are printed with ``-s``).
"""

from __future__ import annotations

import os
import warnings
from collections import Counter
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ethoscribe.errors import InputError, InputWarning
from ethoscribe.io import read_manifest, read_tidy, read_wide
from ethoscribe.pose import PoseTracks

LONG_RUN = "ETHOSCRIBE_FUZZ_EXAMPLES" in os.environ
SLOW_EXAMPLES = 400  # per slow test: three of them make 1,200 examples beyond the 600 above
EXAMPLES = int(os.environ.get("ETHOSCRIBE_FUZZ_EXAMPLES", "200"))
FUZZ = settings(
    max_examples=EXAMPLES,
    deadline=None,
    derandomize=not LONG_RUN,  # CI: the same examples every run; locally: new ones
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
    database=None,
)

SLOW_FUZZ = settings(FUZZ, max_examples=max(EXAMPLES, SLOW_EXAMPLES))

# Plain names (the round-trip check applies) and odd ones (blank, reserved-looking, unicode).
PLAIN = st.text(
    alphabet=st.characters(blacklist_categories=("Cs", "Cc", "Zs"), blacklist_characters="_"),
    min_size=1,
    max_size=6,
)
ODD = st.one_of(
    st.sampled_from(["", " ", "\t", "a\nb", "NA", "null", "ear,left", 'say "hi"', "näse", "x_y"]),
    st.text(max_size=6),
)
NUMBERS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, -0.0, 1e308, -1e308, 5e-324, 1e-300, 2.0**53, np.nan, np.inf]),
)
GOOD_FPS = 30.0


@pytest.fixture(scope="module")
def tally():
    counts: Counter = Counter()
    yield counts
    total = sum(counts.values())
    print(f"\nfuzzed readers ({total} examples): {dict(sorted(counts.items()))}")


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("fuzz")


def _check_tracks(t: PoseTracks) -> None:
    """The data model's invariants (pose.py): what every reader must return."""
    assert isinstance(t, PoseTracks)
    assert t.coords.ndim == 4 and t.coords.shape[3] in (2, 3) and t.n_frames >= 2
    assert not np.isinf(t.coords).any()
    conf = t.confidence[np.isfinite(t.confidence)]
    assert ((conf >= 0) & (conf <= 1)).all()
    assert t.confidence.shape == t.coords.shape[:3]
    assert len(t.keypoints) == t.n_keypoints == len(set(t.keypoints))
    assert all(isinstance(k, str) and k.strip() for k in t.keypoints)
    assert np.isfinite(t.fps) and t.fps > 0


def _names(draw, n_max: int) -> tuple[list[str], bool]:
    """Names, and whether they are all plain and distinct."""
    if draw(st.integers(0, 4)) == 0:
        return draw(st.lists(st.one_of(PLAIN, ODD), min_size=1, max_size=n_max)), False
    # distinct also when folded: names that differ only in case are read as one (documented)
    folded = st.lists(PLAIN, min_size=1, max_size=n_max, unique_by=lambda s: s.strip().casefold())
    return draw(folded), True


def _damage(draw, table: pd.DataFrame, numeric: list[str]) -> tuple[pd.DataFrame, bool]:
    """Random damage of a valid table; also returns whether its content was left intact."""
    intact = True
    if draw(st.integers(0, 4)) == 0:  # extreme, missing or infinite values in random cells
        intact = False
        for _ in range(draw(st.integers(1, 4))):
            column = draw(st.sampled_from(numeric))
            row = draw(st.integers(0, len(table) - 1))
            table[column] = table[column].astype(float)
            table.loc[row, column] = draw(NUMBERS)
    if draw(st.integers(0, 9)) == 0:  # text in a number column
        intact = False
        column = draw(st.sampled_from(numeric))
        table[column] = table[column].astype(object)
        table.loc[draw(st.integers(0, len(table) - 1)), column] = draw(
            st.sampled_from(["abc", "", "1,5", "nan", "inf", "--", "1e999"])
        )
    if draw(st.integers(0, 9)) == 0:  # repeated rows
        intact = False
        rows = draw(st.lists(st.integers(0, len(table) - 1), min_size=1, max_size=3))
        table = pd.concat([table, table.iloc[rows]], ignore_index=True)
    if draw(st.integers(0, 9)) == 0 and len(table) > 1:  # missing rows
        intact = False
        keep = draw(st.lists(st.booleans(), min_size=len(table), max_size=len(table)))
        table = table[np.array(keep)] if any(keep) else table.iloc[:1]
    if draw(st.booleans()):  # row order (tidy tables must not care; wide ones must refuse)
        table = table.sample(frac=1.0, random_state=draw(st.integers(0, 1000)))
    order = list(draw(st.permutations(list(table.columns))))  # column order never matters
    if draw(st.integers(0, 14)) == 0:
        intact, order = False, order[:-1]
    return table[order], intact


@st.composite
def tidy_tables(draw) -> tuple[pd.DataFrame, float | None, tuple | None]:
    """A tidy table, the fps to read it with, and the (coords, keypoints, animals) it must give
    (None when the table is damaged or unusual, so that refusing it is allowed)."""
    n_frames = draw(st.integers(1, 6))
    keypoints, plain = _names(draw, 3)
    animals, plain_animals = _names(draw, 2) if draw(st.booleans()) else (None, True)
    dims = draw(st.sampled_from(["xy", "xyz"]))
    step = draw(st.sampled_from([1, 1, 1, 1, 2, 7, 10**6]))  # gaps, and absurd ones
    frames = draw(st.sampled_from([0, 1, -5, 2**40])) + step * np.arange(n_frames)
    grid = pd.MultiIndex.from_product(
        [frames, animals or ["animal0"], keypoints], names=["frame", "animal", "keypoint"]
    ).to_frame(index=False)
    if animals is None:
        grid = grid.drop(columns="animal")
    scale = draw(st.sampled_from([1.0, 1.0, 1e-300, 1e300]))
    rng = np.random.default_rng(draw(st.integers(0, 2**16)))
    for axis in dims:
        grid[axis] = rng.normal(size=len(grid)) * scale
    truth = grid[list(dims)].to_numpy().reshape(n_frames, len(animals or [0]), len(keypoints), -1)
    numeric, conf_ok = [*dims], True
    if draw(st.booleans()):
        conf_ok = draw(st.booleans())
        grid["confidence"] = rng.uniform(0 if conf_ok else -0.2, 1, len(grid))
        numeric.append("confidence")
    fps = draw(st.sampled_from([GOOD_FPS] * 5 + [None, 0.0, -1.0, float("nan")]))
    if draw(st.booleans()):  # times instead of, or beside, frame numbers
        grid["time"] = grid["frame"] / 30.0
        numeric.append("time")
        if draw(st.booleans()):
            grid = grid.drop(columns="frame")
    fractional = "frame" in grid and draw(st.integers(0, 6)) == 0
    if fractional:
        grid["frame"] = grid["frame"] + draw(st.sampled_from([0.5, 1e-9]))
    numeric += ["frame"] if "frame" in grid else []
    table, intact = _damage(draw, grid, numeric)
    sound = plain and plain_animals and conf_ok and intact and not fractional
    sound = sound and n_frames >= 2 and fps == GOOD_FPS and step == 1
    expected = (truth, keypoints, animals or ["animal0"])
    return table, fps, expected if sound else None


@st.composite
def wide_tables(draw) -> tuple[pd.DataFrame, dict, tuple | None]:
    """A wide table, read_wide options, and the (coords, keypoints, animals) it must give."""
    n_rows = draw(st.integers(1, 6))
    keypoints, plain = _names(draw, 3)
    rng = np.random.default_rng(draw(st.integers(0, 2**16)))
    scale = draw(st.sampled_from([1.0, 1.0, 1e-300, 1e300]))
    values = rng.normal(size=(n_rows, len(keypoints), 2)) * scale
    table = pd.DataFrame(
        {f"{k}_{a}": values[:, i, d] for i, k in enumerate(keypoints) for d, a in enumerate("xy")}
    )
    numeric, conf_ok = list(table.columns), True
    if draw(st.booleans()):
        conf_ok = draw(st.booleans())
        for k in keypoints:
            table[f"{k}_confidence"] = rng.uniform(0, 1 if conf_ok else 1.3, n_rows)
    options: dict = {"fps": draw(st.sampled_from([GOOD_FPS] * 4 + [None, 0.0]))}
    timing, steady = draw(st.sampled_from([None, "frame", "time"])), True
    if timing == "frame":
        step = draw(st.sampled_from([1, 1, 2, -1, 0]))
        table["frame"] = draw(st.sampled_from([0, 3, -2])) + np.arange(n_rows) * step
        options["frame_column"], steady = "frame", step == 1
    elif timing == "time":
        rate = draw(st.sampled_from([30.0, 29.97, 1e-9]))
        table["t"] = np.arange(n_rows) / rate
        options["time_column"], steady = "t", rate == 30.0
    numeric += [c for c in ("frame", "t") if c in table]
    per_animal = draw(st.integers(0, 3)) == 0
    options["pattern"] = "{animal}_{keypoint}_{axis}" if per_animal else "{keypoint}_{axis}"
    table, intact = _damage(draw, table, numeric)
    sound = plain and conf_ok and steady and intact and not per_animal and n_rows >= 2
    sound = sound and table.index.is_monotonic_increasing
    sound = sound and (options["fps"] == GOOD_FPS or (timing == "time" and options["fps"]))
    expected = (values[:, None], keypoints, ["animal0"])
    return table.reset_index(drop=True), options, expected if sound else None


def _write(table: pd.DataFrame, path: Path) -> bool:
    """Save the fuzzed table; False when pandas/pyarrow cannot write it at all."""
    try:
        if path.suffix == ".csv":
            table.to_csv(path, index=False)
        else:
            table.to_parquet(path, index=False)
    except (ValueError, TypeError, OverflowError, ArithmeticError):
        return False  # e.g. Parquet refuses a column mixing numbers and text
    return True


def _outcome(read, path: Path, truth: tuple | None, tally: Counter, kind: str) -> None:
    try:
        with warnings.catch_warnings(record=True) as said:
            warnings.simplefilter("always", InputWarning)
            tracks = read()
        if said:  # a warning names the file too (e.g. a column that looks like a confidence)
            assert all(path.name in str(w.message) for w in said), [str(w.message) for w in said]
            tally[f"{kind}: warned"] += 1
    except InputError as exc:
        assert truth is None, f"a sound table was refused: {exc}"
        assert path.name in str(exc), str(exc)  # the message names the file
        tally[f"{kind}: InputError"] += 1
        return
    _check_tracks(tracks)
    if truth is not None:  # the round trip of a sound table is exact (names in any order)
        coords, keypoints, animals = truth
        assert sorted(tracks.keypoints) == sorted(keypoints)
        assert sorted(tracks.animals) == sorted(animals)
        a = [animals.index(n) for n in tracks.animals]
        k = [keypoints.index(n) for n in tracks.keypoints]
        np.testing.assert_array_equal(tracks.coords, coords[:, a][:, :, k])
        tally[f"{kind}: tracks, exact round trip"] += 1
    else:
        tally[f"{kind}: tracks"] += 1


@FUZZ
@given(case=tidy_tables(), suffix=st.sampled_from([".csv", ".parquet"]))
def test_tidy_reader_gives_tracks_or_an_input_error(case, suffix, folder, tally):
    table, fps, truth = case
    path = folder / f"tidy{suffix}"
    if not _write(table, path):
        tally["tidy: unwritable table"] += 1
        return
    _outcome(lambda: read_tidy(path, fps=fps), path, truth, tally, "tidy")


@FUZZ
@given(case=wide_tables(), suffix=st.sampled_from([".csv", ".parquet"]))
def test_wide_reader_gives_tracks_or_an_input_error(case, suffix, folder, tally):
    table, options, truth = case
    path = folder / f"wide{suffix}"
    if not _write(table, path):
        tally["wide: unwritable table"] += 1
        return
    _outcome(lambda: read_wide(path, **options), path, truth, tally, "wide")


@FUZZ
@given(
    cells=st.lists(
        st.tuples(
            st.one_of(PLAIN, PLAIN, ODD),
            st.sampled_from(["a.csv"] * 4 + ["", "../x.csv"]),
            st.sampled_from(["30"] * 4 + ["", "x", "-1", "1e999"]),
        ),
        max_size=4,
    ),
    header=st.permutations(["session", "path", "fps"]),
)
def test_manifest_reader_gives_a_table_or_an_input_error(cells, header, folder, tally):
    (folder / "a.csv").write_text("frame,keypoint,x,y\n0,nose,1,2\n1,nose,2,3\n")
    rows = pd.DataFrame(cells, columns=["session", "path", "fps"])[list(header)]
    path = folder / "manifest.csv"
    rows.to_csv(path, index=False)
    try:
        table = read_manifest(path)
    except InputError as exc:
        assert "manifest.csv" in str(exc), str(exc)
        tally["manifest: InputError"] += 1
        return
    assert table["session"].is_unique and (table["session"] != "").all()
    tally["manifest: table"] += 1


# --- the slow run: more examples, and the reading options of the command line --------------
ROLES = ("frame", "keypoint", "x", "y", "confidence", "animal")


@pytest.mark.slow
@SLOW_FUZZ
@given(case=tidy_tables(), suffix=st.sampled_from([".csv", ".parquet"]))
def test_tidy_reader_long_run(case, suffix, folder, tally):
    test_tidy_reader_gives_tracks_or_an_input_error.hypothesis.inner_test(
        case, suffix, folder, tally
    )


@pytest.mark.slow
@SLOW_FUZZ
@given(case=wide_tables(), suffix=st.sampled_from([".csv", ".parquet"]))
def test_wide_reader_long_run(case, suffix, folder, tally):
    test_wide_reader_gives_tracks_or_an_input_error.hypothesis.inner_test(
        case, suffix, folder, tally
    )


@pytest.mark.slow
@SLOW_FUZZ
@given(
    case=tidy_tables(),
    renamed=st.sets(st.sampled_from(ROLES)),
    time_in_ms=st.booleans(),
    suffix=st.sampled_from([".csv", ".parquet"]),
)
def test_tidy_reader_with_a_column_mapping_and_time_unit(
    case, renamed, time_in_ms, suffix, folder, tally
):
    """Columns under other names, read through ``columns=``, give what the plain names give;
    frame numbers turned into times in milliseconds give it with ``time_unit="ms"``."""
    table, fps, truth = case
    table = table.copy()
    options: dict = {"fps": fps}
    if time_in_ms and "frame" in table and pd.api.types.is_integer_dtype(table["frame"]):
        table["time"] = table.pop("frame") * (1000.0 / GOOD_FPS)
        options = {"fps": GOOD_FPS if fps is not None else None, "time_unit": "ms"}
    mapping = {r: f"col {r}" for r in renamed if r in table.columns}
    table = table.rename(columns={r: c for r, c in mapping.items()})
    if mapping:
        options["columns"] = mapping
    path = folder / f"mapped{suffix}"
    if not _write(table, path):
        tally["mapped: unwritable table"] += 1
        return
    _outcome(lambda: read_tidy(path, **options), path, truth, tally, "mapped")
