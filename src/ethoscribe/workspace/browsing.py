"""Quick views of a workspace's ethogram under any motif naming, for interactive browsing.

Renaming or merging motifs changes only the ``state -> name`` map, never which state a frame is
in. So the per-frame labels are run-length encoded once into *state runs* (maximal runs of one
state, :func:`state_runs`), and the bouts of any naming are those runs with neighbours that are
linked (no gap between them) and share a name joined together (:func:`bouts_for_names`). That
takes milliseconds on a million frames, where re-deriving bouts from the frames takes a second.
The result equals ``bout_table(curation.apply(labels))`` (tested); ``mean_probability`` of a
joined bout is the frame-weighted mean of its runs' means.

Time budgets and the motifs that come before and after each one follow from the bouts.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from ethoscribe.errors import InputError, listed
from ethoscribe.ethogram import BOUT_COLUMNS, bout_table

__all__ = [
    "bouts_for_names",
    "budget_from_bouts",
    "motif_overview",
    "neighbour_counts",
    "state_runs",
]


def state_runs(labels: pd.DataFrame) -> pd.DataFrame:
    """Maximal runs of one state per recording (a bout table where each state is its own motif).

    Parameters
    ----------
    labels : DataFrame
        Per-frame label table; only ``state`` (not ``motif``) decides the runs.

    Returns
    -------
    DataFrame
        ``BOUT_COLUMNS`` with ``motif`` = ``"state <id>"``.
    """
    state = labels["state"].to_numpy(np.int64)
    top = int(state.max(initial=-1))
    names = np.array(["", *(f"state {k}" for k in range(top + 1))], dtype=object)
    return bout_table(labels.assign(motif=names[state + 1]))


def bouts_for_names(runs: pd.DataFrame, names: Mapping[int, str]) -> pd.DataFrame:
    """Bouts under a naming: linked neighbouring runs with the same name joined.

    Parameters
    ----------
    runs : DataFrame
        From :func:`state_runs`, in its order (recording, start frame).
    names : mapping of int to str
        ``state -> motif name`` (several states may share one); every run's state must be named.

    Returns
    -------
    DataFrame, shape (n_bouts, 12)
        ``BOUT_COLUMNS`` as :func:`ethoscribe.ethogram.bout_table` gives them.

    Examples
    --------
    >>> lab = pd.DataFrame({"session": "s", "animal": "a", "frame": range(4),
    ...     "time_s": [0, .1, .2, .3], "state": [0, 0, 1, 2], "motif": "",
    ...     "probability": 1.0})
    >>> bouts_for_names(state_runs(lab), {0: "x", 1: "x", 2: "y"})["n_frames"].tolist()
    [3, 1]
    """
    state = runs["state"].to_numpy(np.int64)
    ids = np.array(sorted(names), dtype=np.int64)
    pos = np.searchsorted(ids, state).clip(0, max(len(ids) - 1, 0))
    if len(state) and (not len(ids) or (ids[pos] != state).any()):
        stray = listed(sorted(set(state.tolist()) - set(ids.tolist())), 10)
        raise InputError(f"states {stray} of the runs have no motif name; name every state")
    labels = np.array([names[i] for i in ids], dtype=object)
    motif = labels[pos] if len(ids) else np.array([], dtype=object)
    cut_after = runs["cut_after"].to_numpy(bool)
    # A run continues the previous bout when the two touch (previous not cut) and share a name.
    joins = np.r_[False, ~cut_after[:-1] & (motif[1:] == motif[:-1])] if len(motif) else []
    first = np.flatnonzero(~np.asarray(joins, bool))
    if not len(first):
        return pd.DataFrame({c: [] for c in BOUT_COLUMNS})
    last = np.r_[first[1:], len(runs)] - 1
    n = runs["n_frames"].to_numpy(np.int64)
    mean_p = runs["mean_probability"].to_numpy(np.float64)
    frames = np.add.reduceat(n, first)
    finite = np.isfinite(mean_p)
    p_sum = np.add.reduceat(np.where(finite, mean_p * n, 0.0), first)
    p_n = np.add.reduceat(np.where(finite, n, 0), first)
    with np.errstate(invalid="ignore", divide="ignore"):
        probability = p_sum / p_n
    out = runs.iloc[first].reset_index(drop=True)
    out["motif"] = motif[first]
    out["stop_frame"] = runs["stop_frame"].to_numpy()[last]
    out["duration_s"] = np.add.reduceat(runs["duration_s"].to_numpy(np.float64), first)
    out["n_frames"] = frames
    out["mean_probability"] = probability
    out["cut_after"] = cut_after[last]
    return out[list(BOUT_COLUMNS)]


def budget_from_bouts(
    bouts: pd.DataFrame,
    motifs: list[str] | None = None,
    recordings: pd.DataFrame | None = None,
) -> pd.DataFrame:
    """Time budget per session and animal from bouts (every valid frame is in one bout).

    ``recordings`` (``session, animal``) lists every recording to report, also those without a
    single valid frame (their fractions are NaN); default: the recordings of the bouts.

    Returns
    -------
    DataFrame
        ``session, animal, motif, n_frames, seconds, fraction`` with every motif in every
        recording (zeros included), as :func:`ethoscribe.ethogram.time_budget` gives it.
    """
    names = np.array(sorted(bouts["motif"].astype(str).unique()) if motifs is None else motifs)
    code = np.searchsorted(names, bouts["motif"].to_numpy(dtype=str))
    keys = bouts[["session", "animal"]].astype(str)
    everyone = keys if recordings is None else recordings[["session", "animal"]].astype(str)
    pairs = pd.MultiIndex.from_frame(everyone).unique().sort_values()
    recording = pairs.get_indexer(pd.MultiIndex.from_frame(keys))
    cell = recording * len(names) + code
    size = len(pairs) * len(names)
    frames = np.bincount(cell, weights=bouts["n_frames"].to_numpy(np.float64), minlength=size)
    seconds = np.bincount(cell, weights=bouts["duration_s"].to_numpy(np.float64), minlength=size)
    total = np.repeat(seconds.reshape(len(pairs), len(names)).sum(1), len(names))
    out = pd.DataFrame(
        {
            "session": np.repeat(pairs.get_level_values(0).to_numpy(dtype=object), len(names)),
            "animal": np.repeat(pairs.get_level_values(1).to_numpy(dtype=object), len(names)),
            "motif": np.tile(names.astype(object), len(pairs)),
            "n_frames": frames.astype(np.int64),
            "seconds": seconds,
        }
    )
    with np.errstate(invalid="ignore", divide="ignore"):
        out["fraction"] = seconds / total
    return out


def neighbour_counts(bouts: pd.DataFrame) -> pd.DataFrame:
    """How often each motif's bout is directly followed by each other motif's, pooled.

    Two bouts are neighbours when the second starts where the first stops in the same recording
    (as in :func:`ethoscribe.ethogram.transition_table`).

    Returns
    -------
    DataFrame
        ``from_motif, to_motif, count``, only pairs seen at least once.
    """
    code, names = pd.factorize(bouts["motif"].astype(str), sort=True)
    if len(bouts) < 2:
        return pd.DataFrame({"from_motif": [], "to_motif": [], "count": []})
    recording = pd.MultiIndex.from_frame(bouts[["session", "animal"]].astype(str)).factorize()[0]
    start, stop = bouts["start_frame"].to_numpy(), bouts["stop_frame"].to_numpy()
    linked = (recording[1:] == recording[:-1]) & (start[1:] == stop[:-1]) & (code[1:] != code[:-1])
    k = len(names)
    counts = np.bincount(code[:-1][linked] * k + code[1:][linked], minlength=k * k)
    seen = np.flatnonzero(counts)
    return pd.DataFrame(
        {
            "from_motif": np.asarray(names, dtype=object)[seen // k],
            "to_motif": np.asarray(names, dtype=object)[seen % k],
            "count": counts[seen].astype(np.int64),
        }
    )


def motif_overview(
    bouts: pd.DataFrame,
    names: Mapping[int, str],
    stability: pd.DataFrame | None = None,
    state_frames: Mapping[int, int] | None = None,
) -> pd.DataFrame:
    """One row per motif: share of valid time, bouts, durations, states and stability.

    Parameters
    ----------
    bouts : DataFrame
        Bouts under the current naming.
    names : mapping of int to str
        ``state -> motif name``.
    stability : DataFrame, optional
        ``stability.csv`` of the workspace (``state, jaccard_seeds_mean, ...``). A motif's
        stability is the frame-weighted mean of its states' between-seed Jaccard (NaN for states
        made by a split, which were never checked).
    state_frames : mapping of int to int, optional
        Frames per state (the weights; default: from the bouts, exact when no two states
        share a name).

    Returns
    -------
    DataFrame
        ``motif, states, time_share, n_bouts, median_s, mean_s, longest_s, stability``.
    """
    grouped = bouts.groupby("motif", sort=True)
    out = pd.DataFrame(
        {
            "n_frames": grouped["n_frames"].sum(),
            "n_bouts": grouped.size(),
            "median_s": grouped["duration_s"].median(),
            "mean_s": grouped["duration_s"].mean(),
            "longest_s": grouped["duration_s"].max(),
        }
    )
    out["time_share"] = out["n_frames"] / max(int(out["n_frames"].sum()), 1)
    states: dict[str, list[int]] = {}
    for state, name in sorted(names.items()):
        states.setdefault(name, []).append(int(state))
    out = out.reindex(sorted(states)).fillna({"n_frames": 0, "n_bouts": 0, "time_share": 0.0})
    out["states"] = [states[m] for m in out.index]
    out["stability"] = np.nan
    if stability is not None and {"state", "jaccard_seeds_mean"} <= set(stability.columns):
        score = dict(
            zip(stability["state"].astype(int), stability["jaccard_seeds_mean"], strict=True)
        )
        frames = state_frames
        if frames is None:
            frames = bouts.groupby("state")["n_frames"].sum().to_dict()
        for motif, ids in states.items():
            if all(i in score for i in ids):
                w = np.array([frames.get(i, 0) for i in ids], dtype=float)
                s = np.array([score[i] for i in ids], dtype=float)
                out.loc[motif, "stability"] = (
                    float((w * s).sum() / w.sum()) if w.sum() else float(s.mean())
                )
    out = out.astype({"n_frames": np.int64, "n_bouts": np.int64}).rename_axis("motif")
    cols = ["states", "time_share", "n_bouts", "median_s", "mean_s", "longest_s", "stability"]
    return out[cols].reset_index()
