"""Motif curation: the naming state is the replay of a journal of edit records.

Segmenters give integer states; people give them names, merge look-alikes, split mixtures and
set aside what they cannot name. Every edit is a plain JSON-able dict appended to a journal, and
the current naming (``state id -> motif name``) is whatever replaying the journal gives, so a saved
journal rebuilds the same curation exactly.

Records (each also has ``time``, ISO 8601 UTC, and ``before``/``after`` summaries
``{"motifs": {name: [state ids]}}`` that replay checks):

- ``{"op": "start", "names": {"0": "motif_01", ...}}`` -- first: the initial naming (a journal
  kept without it is replayed with the names passed to :meth:`Curation.from_journal`).
- ``{"op": "rename", "motif": m, "name": n}``
- ``{"op": "merge", "motifs": [m1, m2, ...], "into": n}``
- ``{"op": "split", "motif": m, "names": [a, b], "frames_assignment": {...}}``
- ``{"op": "unassign", "motif": m}`` -- its frames are named ``"unassigned"``
- ``{"op": "undo", "undid": i}`` / ``{"op": "redo", "redid": i}`` -- ``i`` is the position of
  the reverted edit in the journal, counting the start record as 0.

A split re-clusters the motif's frames into two (2-means on standardised features). Per-frame
assignments would be too large for JSON, so ``frames_assignment`` stores the model instead:
``columns`` (feature names), ``offset``/``scale`` (standardisation), ``centres`` (2 x n_columns),
``parent_states`` and ``new_states`` (two fresh state ids). A frame of a parent state goes to the
nearest centre, so :meth:`Curation.apply` re-derives the same split from the same features.
"""

from __future__ import annotations

import copy
from collections.abc import Mapping, Sequence
from datetime import datetime, timezone
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe.checks import name_key
from ethoscribe.errors import InputError, listed
from ethoscribe.ethogram import LABEL_COLUMNS, bout_table, check_columns
from ethoscribe.segment.postprocess import enforce_min_bout

UNASSIGNED = "unassigned"
KEYS = ("session", "animal", "frame")


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def _summary(names: Mapping[int, str]) -> dict[str, Any]:
    motifs: dict[str, list[int]] = {}
    for state in sorted(names):
        motifs.setdefault(names[state], []).append(int(state))
    return {"motifs": dict(sorted(motifs.items()))}


def _known(names: Mapping[int, str], motif: Any) -> str:
    motifs = sorted(set(names.values()) - {UNASSIGNED})
    if motif == UNASSIGNED:
        raise InputError("'unassigned' frames are not a motif; undo the unassign to restore them")
    if motif not in motifs:
        raise InputError(f"unknown motif {motif!r}; current motifs: {motifs}")
    return motif


def _new_name(names: Mapping[int, str], name: Any, replaced: set[str]) -> str:
    if not isinstance(name, str) or not name.strip():
        raise InputError(f"a motif name must be a non-empty string; got {name!r}")
    if name == UNASSIGNED:
        raise InputError("'unassigned' is reserved; use unassign(motif) to set frames aside")
    if name in set(names.values()) - replaced:
        msg = f"motif name {name!r} is already taken by another motif; pick another or merge them"
        raise InputError(msg)
    return name


def _typed_name(names: Mapping[int, str], name: Any, replaced: set[str]) -> Any:
    """A name typed for a new edit: outer spaces dropped; refused when it differs from another
    motif's name only in case or spacing (two such motifs read as one in every table)."""
    if not isinstance(name, str):
        return name
    name = name.strip()
    if name != UNASSIGNED and name_key(name) == UNASSIGNED:
        raise InputError(f"{name!r} reads as the reserved 'unassigned'; use unassign(motif)")
    others = set(names.values()) - replaced - {name}
    alike = sorted(m for m in others if name_key(m) == name_key(name))
    if alike:
        msg = (
            f"motif name {name!r} differs from the motif {alike[0]!r} only in case or spaces; "
            f"to make them one motif, merge them (into {alike[0]!r}), else pick another name"
        )
        raise InputError(msg)
    return name


def _apply_edit(names: Mapping[int, str], record: Mapping[str, Any]) -> dict[int, str]:
    """The naming after one edit record (validated; the input is not changed)."""
    out, op = dict(names), record.get("op")
    if op == "rename":
        motif = _known(names, record.get("motif"))
        name = _new_name(names, record.get("name"), {motif})
        if name == motif:
            raise InputError(f"motif {motif!r} already has that name")
        return {k: (name if v == motif else v) for k, v in out.items()}
    if op == "merge":
        motifs = list(record.get("motifs") or [])
        if len(set(motifs)) != len(motifs):
            raise InputError(f"cannot merge a motif with itself; got {motifs}")
        if len(motifs) < 2:
            raise InputError(f"merge needs at least two different motifs; got {motifs}")
        chosen = {_known(names, m) for m in motifs}
        into = _new_name(names, record.get("into"), chosen)
        return {k: (into if v in chosen else v) for k, v in out.items()}
    if op == "unassign":
        motif = _known(names, record.get("motif"))
        return {k: (UNASSIGNED if v == motif else v) for k, v in out.items()}
    if op == "split":
        motif = _known(names, record.get("motif"))
        new = list(record.get("names") or [])
        if len(new) != 2 or new[0] == new[1]:
            raise InputError(f"a split needs two different new names; got {new}")
        for name in new:
            _new_name(names, name, {motif})
        model = record["frames_assignment"]
        parents = sorted(k for k, v in out.items() if v == motif)
        if sorted(model["parent_states"]) != parents:
            msg = f"split record of {motif!r} was made for states {model['parent_states']}"
            raise InputError(f"{msg}, but the motif now has states {parents}")
        out = {k: v for k, v in out.items() if v != motif}
        out.update(zip(model["new_states"], new, strict=True))
        return out
    raise InputError(f"unknown edit op {op!r}; expected one of rename, merge, split, unassign")


def _feature_values(rows: pd.DataFrame, features: pd.DataFrame, columns: Sequence[str]):
    """Feature matrix (len(rows), len(columns)) for label rows, matched on session/animal/frame."""
    check_columns(features, (*KEYS, *columns), "the feature table")
    left = rows[list(KEYS)].astype({"session": str, "animal": str})
    right = features[[*KEYS, *columns]].astype({"session": str, "animal": str})
    try:
        merged = left.merge(right, on=list(KEYS), how="left", validate="many_to_one")
    except pd.errors.MergeError:
        raise InputError(
            "the feature table has several rows for one session/animal/frame"
        ) from None
    values = merged[list(columns)].to_numpy(np.float64)
    bad = ~np.isfinite(values).all(axis=1)
    if bad.any():
        first = merged.loc[bad, list(KEYS)].iloc[0].tolist()
        msg = f"{int(bad.sum())} frames to split have no finite features (first: {first})"
        raise InputError(f"{msg}; give features for every frame of the motif")
    return values


def _two_means(x: np.ndarray, seed: int, n_init: int = 4, max_iter: int = 100) -> np.ndarray:
    """Centres (2, d) of the best of ``n_init`` seeded k-means++ / Lloyd runs."""
    if not np.ptp(x, axis=0).any():
        raise InputError("cannot split: the motif's frames all have the same features")
    rng = np.random.default_rng(seed)
    best, best_cost = None, np.inf
    for _ in range(n_init):
        first = x[rng.integers(len(x))]
        gap = ((x - first) ** 2).sum(axis=1)
        centres = np.stack([first, x[rng.choice(len(x), p=gap / gap.sum())]])
        for _ in range(max_iter):
            dist = (x**2).sum(1)[:, None] - 2 * x @ centres.T + (centres**2).sum(1)
            near = dist.argmin(axis=1)
            if near.min() == near.max():
                break
            moved = np.stack([x[near == k].mean(axis=0) for k in (0, 1)])
            if np.allclose(moved, centres, rtol=0, atol=1e-12):
                break
            centres = moved
        cost = dist[np.arange(len(x)), near].sum()
        if near.min() != near.max() and cost < best_cost:
            best, best_cost = centres, cost
    if best is None:
        raise InputError("cannot split: the motif's frames all have the same features")
    return best


def _assign(model: Mapping[str, Any], values: np.ndarray) -> np.ndarray:
    z = (values - np.asarray(model["offset"])) / np.asarray(model["scale"])
    c = np.asarray(model["centres"], dtype=np.float64)
    return ((z**2).sum(1)[:, None] - 2 * z @ c.T + (c**2).sum(1)).argmin(axis=1)


def _along_time(rows: pd.DataFrame, halves: np.ndarray, min_frames: int) -> np.ndarray:
    """``halves`` (0/1 per row of a motif) with stretches shorter than ``min_frames`` inside
    each bout of the motif joined to a neighbouring stretch (never across bouts)."""
    order = np.lexsort((rows["frame"].to_numpy(), rows["animal"].astype(str).to_numpy(),
                        rows["session"].astype(str).to_numpy()))  # fmt: skip
    frame = rows["frame"].to_numpy(np.int64)[order]
    key = (rows["session"].astype(str) + "\0" + rows["animal"].astype(str)).to_numpy()[order]
    new_bout = np.r_[True, (np.diff(frame) != 1) | (key[1:] != key[:-1])]
    lengths = np.diff(np.r_[np.flatnonzero(new_bout), len(frame)])
    smoothed = enforce_min_bout(halves[order], min_frames, lengths=lengths)
    out = np.empty_like(halves)
    out[order] = smoothed
    return out


def fit_split(values: np.ndarray, columns: Sequence[str], random_state: int = 0) -> dict:
    """Fit the 2-cluster split model of one motif's frames (``values``: (n_frames, n_columns)).

    The larger cluster comes first. Returns the JSON-able ``frames_assignment`` without state ids.
    """
    values = np.asarray(values, dtype=np.float64)
    if values.ndim != 2 or len(values) < 2:
        raise InputError(f"a split needs at least 2 frames of features; got shape {values.shape}")
    offset, scale = values.mean(axis=0), values.std(axis=0)
    scale = np.where(scale > 0, scale, 1.0)
    model = {
        "method": "nearest_centre",
        "columns": list(columns),
        "offset": offset.tolist(),
        "scale": scale.tolist(),
        "random_state": int(random_state),
    }
    model["centres"] = _two_means((values - offset) / scale, int(random_state)).tolist()
    sizes = np.bincount(_assign(model, values), minlength=2)
    first = model["centres"][0][0], model["centres"][1][0]
    if (sizes[1], -first[1]) > (sizes[0], -first[0]):  # larger first; ties: lower first feature
        model["centres"] = model["centres"][::-1]
        sizes = sizes[::-1]
    model["n_frames"] = sizes.tolist()
    return model


class Curation:
    """Naming state of the motifs, derived by replaying a journal of edits (pure, in memory).

    Parameters
    ----------
    names : mapping of int to str
        Initial ``state id -> motif name`` (several states may share a name).
    time : str, optional
        ISO 8601 time stamp of the start record (default: now).

    Examples
    --------
    >>> cur = Curation({0: "motif_01", 1: "motif_02", 2: "motif_03"})
    >>> _ = cur.rename("motif_01", "grooming")
    >>> _ = cur.merge(["motif_02", "motif_03"], into="walking")
    >>> cur.names
    {0: 'grooming', 1: 'walking', 2: 'walking'}
    >>> _ = cur.undo()
    >>> Curation.from_journal(cur.history).names == cur.names
    True
    """

    def __init__(self, names: Mapping[int, str], *, time: str | None = None) -> None:
        initial = {}
        for state, name in dict(names).items():
            if isinstance(state, bool) or not isinstance(state, (int, np.integer)) or state < 0:
                raise InputError(f"state ids must be integers >= 0; got {state!r}")
            if not isinstance(name, str) or not name.strip():
                raise InputError(f"state {state}: motif name must be non-empty; got {name!r}")
            initial[int(state)] = name
        self._names = initial
        self._initial = dict(initial)
        self._journal: list[dict[str, Any]] = []
        self._done: list[int] = []
        self._undone: list[int] = []
        self._next_state = max(initial, default=-1) + 1
        start = {"op": "start", "names": {str(k): v for k, v in sorted(initial.items())}}
        self._journal.append({**start, "time": time or _now(), "after": _summary(initial)})

    @classmethod
    def from_labels(cls, labels: pd.DataFrame, *, time: str | None = None) -> Curation:
        """Start from the ``state -> motif`` pairs of a label table's valid frames."""
        check_columns(labels, ("state", "motif"), "the label table")
        pairs = labels.loc[labels["state"] >= 0, ["state", "motif"]].drop_duplicates()
        clash = pairs["state"].duplicated(keep=False)
        if clash.any():
            state = int(pairs.loc[clash, "state"].iloc[0])
            seen = sorted(pairs.loc[pairs["state"] == state, "motif"].astype(str))
            raise InputError(f"state {state} carries several motif names {seen}; expected one")
        return cls(
            dict(zip(pairs["state"].astype(int), pairs["motif"].astype(str), strict=True)),
            time=time,
        )

    @classmethod
    def from_journal(
        cls,
        records: Sequence[Mapping[str, Any]],
        names: Mapping[int, str] | None = None,
        where: Sequence[str] | None = None,
    ) -> Curation:
        """Replay a journal (as from :attr:`history`); stored ``after`` summaries are checked.

        A journal kept without its ``start`` record needs the initial ``names``. ``where``
        names each record in error messages (e.g. ``"journal.jsonl: line 3"``); by default
        ``"journal record i"``.
        """
        records = [copy.deepcopy(dict(r)) for r in records]
        if where is None or len(where) != len(records):
            where = [f"journal record {i}" for i in range(len(records))]
        if records and records[0].get("op") == "start":
            try:
                start = {int(k): v for k, v in records[0]["names"].items()}
            except (KeyError, TypeError, ValueError, AttributeError):
                raise InputError(f"{where[0]}: 'names' must map state ids to names") from None
            if names is not None and dict(names) != start:
                msg = f"the journal starts from names {start}, not the given {dict(names)}"
                raise InputError(msg)
            cur, first = cls(start, time=records[0].get("time")), 1
        elif names is not None:
            cur, first = cls(names), 0
        else:
            raise InputError("the journal has no 'start' record: pass the initial names")
        for i, record in enumerate(records[first:], start=first):
            try:
                cur._replay(record)
            except InputError as exc:
                raise InputError(f"{where[i]} ({record.get('op')!r}): {exc}") from None
            after = record.get("after")
            if after is not None and after != _summary(cur._names):
                msg = f"{where[i]}: replay gives {_summary(cur._names)}, journal says"
                raise InputError(f"{msg} {after}; the journal was damaged or edited by hand")
        return cur

    @property
    def names(self) -> dict[int, str]:
        """Current ``state id -> motif name``."""
        return dict(sorted(self._names.items()))

    @property
    def motifs(self) -> list[str]:
        """Current motif names, sorted (``"unassigned"`` excluded)."""
        return sorted(set(self._names.values()) - {UNASSIGNED})

    @property
    def split_into(self) -> dict[int, list[str]]:
        """Fitted states split by an edit in effect -> the names of the two halves (the
        states themselves no longer name a motif)."""
        out: dict[int, list[str]] = {}
        for index in self._done:
            record = self._journal[index]
            model = record.get("frames_assignment")
            if record.get("op") == "split" and model:
                halves = [
                    self._names.get(k, n)
                    for k, n in zip(model["new_states"], record["names"], strict=True)
                ]
                for state in model["parent_states"]:
                    out[int(state)] = halves
        return out

    @property
    def history(self) -> list[dict[str, Any]]:
        """The journal: every record so far, JSON-able, oldest first."""
        return copy.deepcopy(self._journal)

    def _record(self, record: dict[str, Any], names: dict[int, str]) -> dict[str, Any]:
        record.setdefault("time", _now())
        record["before"], record["after"] = _summary(self._names), _summary(names)
        self._names = names
        self._journal.append(record)
        return copy.deepcopy(record)

    def _replay(self, record: dict[str, Any]) -> None:
        op = record.get("op")
        fields = {k: v for k, v in record.items() if k not in ("before", "after")}
        if op in ("undo", "redo"):
            done = (self.undo if op == "undo" else self.redo)(time=record.get("time"))
            key = "undid" if op == "undo" else "redid"
            if record.get(key, done[key]) != done[key]:
                raise InputError(f"it names record {record[key]} but replay reverts {done[key]}")
        elif op == "split":
            model = record.get("frames_assignment") or {}
            self._next_state = max(self._next_state, max(model.get("new_states", [-1])) + 1)
            self._edit(fields)
        else:
            self._edit(fields)

    def _edit(self, record: dict[str, Any]) -> dict[str, Any]:
        names = _apply_edit(self._names, record)
        self._undone.clear()
        self._done.append(len(self._journal))
        return self._record(record, names)

    def rename(self, motif: str, name: str, *, time: str | None = None) -> dict[str, Any]:
        """Give ``motif`` a new ``name``; returns the journal record.

        The name is kept without outer spaces; one that differs from another motif's name only
        in case or spacing is refused (merge the two motifs instead).
        """
        name = _typed_name(self._names, name, {motif})
        return self._edit({"op": "rename", "motif": motif, "name": name, "time": time or _now()})

    def merge(self, motifs: Sequence[str], into: str, *, time: str | None = None) -> dict:
        """Name all states of ``motifs`` ``into`` (a new name or one of theirs)."""
        motifs = name_list(motifs, "motifs", "merge")
        into = _typed_name(self._names, into, set(motifs))
        rec = {"op": "merge", "motifs": motifs, "into": into, "time": time or _now()}
        return self._edit(rec)

    def unassign(self, motif: str, *, time: str | None = None) -> dict[str, Any]:
        """Set ``motif`` aside: its frames are named ``"unassigned"``."""
        return self._edit({"op": "unassign", "motif": motif, "time": time or _now()})

    def split(
        self,
        motif: str,
        names: Sequence[str],
        labels: pd.DataFrame,
        features: pd.DataFrame,
        *,
        columns: Sequence[str] | None = None,
        random_state: int = 0,
        min_frames: int = 1,
        time: str | None = None,
    ) -> dict[str, Any]:
        """Split ``motif`` in two by 2-means on its frames' features, then along time.

        ``features`` has ``session, animal, frame`` and feature columns (``columns``; default
        every numeric column that is not a label column). ``labels`` are the labels the current
        naming applies to. ``names[0]`` goes to the larger half. With ``min_frames`` > 1 the
        split also respects time: within each bout of the motif, a stretch given to one half
        that is shorter than ``min_frames`` joins its neighbouring stretch (as the minimum bout
        does for the model's labels), so the halves are contiguous runs, not a flicker. The
        value is kept in the record, so replaying the journal gives the same split.
        """
        _known(self._names, motif)
        typed = name_list(names, "names", "split", count=2)
        names = [_typed_name(self._names, n, {motif}) for n in typed]
        if names[0] != names[1] and name_key(names[0]) == name_key(names[1]):
            msg = f"a split needs two different new names; got {names} (same but for case)"
            raise InputError(msg)
        for name in names:
            _new_name(self._names, name, {motif})
        if columns is None:
            numeric = features.select_dtypes("number").columns
            columns = [c for c in numeric if c not in (*KEYS, *LABEL_COLUMNS)]
        current = self.apply(labels, features)
        rows = current[current["motif"] == motif]
        values = _feature_values(rows, features, columns)
        model = fit_split(values, columns, random_state)
        if int(min_frames) > 1:
            model["min_frames"] = int(min_frames)
            # the frames each half labels once the time rule joined short stretches (as the
            # preview and the labels count them), not the 2-means clusters'
            halves = _along_time(rows, _assign(model, values), int(min_frames))
            n_frames = np.bincount(halves, minlength=2)
            if n_frames[1] > n_frames[0]:  # the time rule made the larger cluster the smaller
                model["centres"] = model["centres"][::-1]  # half: names[0] stays the larger
                halves = _along_time(rows, _assign(model, values), int(min_frames))
                n_frames = np.bincount(halves, minlength=2)
            model["n_frames"] = n_frames.tolist()
        model["parent_states"] = sorted(k for k, v in self._names.items() if v == motif)
        model["new_states"] = [self._next_state, self._next_state + 1]
        self._next_state += 2
        rec = {"op": "split", "motif": motif, "names": list(names), "frames_assignment": model}
        return self._edit({**rec, "time": time or _now()})

    def preview_split(
        self,
        motif: str,
        names: Sequence[str],
        labels: pd.DataFrame,
        features: pd.DataFrame,
        **options: Any,
    ) -> pd.DataFrame:
        """Bout statistics of the two halves a :meth:`split` would make, before it is kept.

        Takes the arguments of :meth:`split` (``columns``, ``random_state``, ``min_frames``);
        nothing is journaled. Returns one row per half (then the parent, for comparison):
        ``motif, n_frames, share_of_parent, n_bouts, median_bout_s, mean_bout_s,
        short_bouts`` (``short_bouts``: uncut bouts under ``min_frames``).

        Examples
        --------
        >>> lab = pd.DataFrame({"session": "s", "animal": "a", "frame": range(8),
        ...     "time_s": np.arange(8) / 4, "state": 0, "motif": "m", "probability": 1.0})
        >>> feat = lab[["session", "animal", "frame"]].assign(speed=[0, 0, 0, 5, 0, 0, 5, 5.0])
        >>> p = Curation.from_labels(lab).preview_split("m", ["a", "b"], lab, feat, min_frames=2)
        >>> p[["motif", "n_frames", "n_bouts"]].values.tolist()
        [['a', 6, 1], ['b', 2, 1], ['m', 8, 1]]
        """
        trial = copy.deepcopy(self)
        trial.split(motif, names, labels, features, **options)
        after = trial.apply(labels, features)
        before = self.apply(labels, features)
        min_frames = int(options.get("min_frames", 1))
        rows = []
        for name, table in ((n, after) for n in names):
            rows.append(_bout_stats(name, table, min_frames))
        rows.append(_bout_stats(motif, before, min_frames))
        out = pd.DataFrame(rows)
        parent = out["n_frames"].iloc[-1]
        out.insert(2, "share_of_parent", out["n_frames"] / parent if parent else np.nan)
        return out

    def undo(self, *, time: str | None = None) -> dict[str, Any]:
        """Revert the latest edit still in effect."""
        if not self._done:
            raise InputError("nothing to undo: no edit is in effect")
        index = self._done.pop()
        self._undone.append(index)
        return self._record({"op": "undo", "undid": index, "time": time or _now()}, self._rebuild())

    def redo(self, *, time: str | None = None) -> dict[str, Any]:
        """Re-apply the latest undone edit (any new edit clears the redo list)."""
        if not self._undone:
            raise InputError("nothing to redo: no undone edit is waiting")
        index = self._undone.pop()
        self._done.append(index)
        return self._record({"op": "redo", "redid": index, "time": time or _now()}, self._rebuild())

    def _rebuild(self) -> dict[int, str]:
        names = dict(self._initial)
        for index in self._done:
            names = _apply_edit(names, self._journal[index])
        return names

    def apply(self, labels: pd.DataFrame, features: pd.DataFrame | None = None) -> pd.DataFrame:
        """Label table with ``state`` and ``motif`` per the current naming.

        Splits in effect move their parents' frames to the new states, which needs ``features``
        (see :meth:`split`) for those frames. Invalid frames keep state -1 and motif ``""``.
        """
        check_columns(labels, LABEL_COLUMNS, "the label table")
        state = labels["state"].to_numpy(np.int64).copy()
        for index in self._done:
            model = self._journal[index].get("frames_assignment")
            mask = np.isin(state, model["parent_states"]) if model else None
            if mask is None or not mask.any():
                continue
            if features is None:
                motif = self._journal[index]["motif"]
                raise InputError(f"the split of {motif!r} needs the feature table: pass features")
            values = _feature_values(labels[mask], features, model["columns"])
            halves = _assign(model, values)
            if model.get("min_frames", 1) > 1:
                halves = _along_time(labels[mask], halves, int(model["min_frames"]))
            state[mask] = np.asarray(model["new_states"])[halves]
        ids = np.array(sorted(self._names), dtype=np.int64)
        valid = state >= 0
        pos = np.searchsorted(ids, state[valid]).clip(0, max(len(ids) - 1, 0))
        stray = ids[pos] != state[valid] if len(ids) else np.ones(int(valid.sum()), bool)
        if stray.any():
            unknown = listed(sorted(set(state[valid][stray].tolist())), 10)
            msg = f"label states {unknown} are unknown to this curation; apply it to the labels "
            raise InputError(msg + "it was made for")
        motif = np.full(len(state), "", dtype=object)
        motif[valid] = np.array([self._names[i] for i in ids], dtype=object)[pos]
        out = labels.copy()
        out["state"], out["motif"] = state, motif
        return out


def _bout_stats(name: str, labels: pd.DataFrame, min_frames: int) -> dict[str, Any]:
    rows = labels[labels["motif"] == name]
    if rows.empty:
        return {"motif": name, "n_frames": 0, "n_bouts": 0, "median_bout_s": np.nan,
                "mean_bout_s": np.nan, "short_bouts": 0}  # fmt: skip
    keys = labels.loc[labels["session"].isin(rows["session"].unique())]
    bouts = bout_table(keys)
    bouts = bouts[bouts["motif"] == name]
    uncut = ~(bouts["cut_before"] | bouts["cut_after"])
    return {
        "motif": name,
        "n_frames": len(rows),
        "n_bouts": len(bouts),
        "median_bout_s": float(bouts["duration_s"].median()),
        "mean_bout_s": float(bouts["duration_s"].mean()),
        "short_bouts": int((uncut & (bouts["n_frames"] < min_frames)).sum()),
    }


def name_list(values: Any, argument: str, function: str, count: int | None = None) -> list[str]:
    """A list of motif names; a plain string (whose letters would become names) is refused.

    Examples
    --------
    >>> name_list(["rest", "groom"], "names", "split", count=2)
    ['rest', 'groom']
    """
    if isinstance(values, str) or not isinstance(values, (list, tuple)):
        example = "['fast walk', 'slow walk']" if count == 2 else "['m1', 'm2']"
        got = f"the string {values!r}" if isinstance(values, str) else type(values).__name__
        raise InputError(f"{function}: {argument} must be a list of motif names, e.g. "
                         f"{example}; got {got}")  # fmt: skip
    names = [v for v in values]
    if not all(isinstance(v, str) for v in names):
        raise InputError(f"{function}: {argument} must be motif names (text); got {names!r}")
    if count is not None and len(names) != count:
        raise InputError(
            f"{function}: {argument} must hold {count} new names (one per part); got {names!r}"
        )
    return names


def split_motif(
    labels: pd.DataFrame,
    features: pd.DataFrame,
    motif: str,
    names: Sequence[str],
    random_state: int = 0,
) -> pd.DataFrame:
    """Split one motif of a label table in two by 2-means on its frames' features.

    Returns the new label table (the two halves get fresh state ids). Use :meth:`Curation.split`
    to keep the split in a journal.

    Examples
    --------
    >>> lab = pd.DataFrame({"session": "s", "animal": "a", "frame": range(4), "time_s": 0.0,
    ...     "state": 0, "motif": "m", "probability": 1.0})
    >>> feat = lab[["session", "animal", "frame"]].assign(speed=[0.0, 0.1, 5.0, 5.1])
    >>> split_motif(lab, feat, "m", ["slow", "fast"])["motif"].tolist()
    ['slow', 'slow', 'fast', 'fast']
    """
    cur = Curation.from_labels(labels)
    cur.split(motif, names, labels, features, random_state=random_state)
    return cur.apply(labels, features)
