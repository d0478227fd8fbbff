"""Choosing the number of HMM states: held-out log-likelihood (default) or BIC.

Held-out: the data are split into two folds of whole units (sessions, or blocks of frames that
alternate inside every session); a model fitted on one fold scores every unit of the other, and
the other way round (2-fold cross-fitting), so each unit gets an out-of-sample log-likelihood.

Rule (one-standard-error style, Breiman et al. 1984; Hastie, Tibshirani & Friedman 2009): let
``best`` be the K with the highest held-out log-likelihood per frame. For each K the gap
``gap(K) = ll(best) - ll(K)`` has a standard error ``se(K)`` from the paired per-unit
differences (frame-weighted). The chosen K is the smallest with
``gap(K) <= max(se(K), 0.01 * (max ll - min ll))``: within one standard error of the best, or
within 1 % of the range of the curve when the data are so plentiful that the standard error is
negligible. With ``criterion="bic"`` the K of minimum BIC on all data is chosen.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from ethoscribe.errors import InputError
from ethoscribe.segment.base import check_X_lengths
from ethoscribe.segment.hmm import GaussianHMM

RANGE_TOLERANCE = 0.01


@dataclass(frozen=True)
class StateCountSelection:
    """Result of :func:`select_n_states`.

    ``table``: one row per candidate with ``n_states, heldout_ll_per_frame, heldout_gap,
    heldout_gap_se, tolerance, within_tolerance, bic, train_ll_per_frame, n_parameters``
    (held-out columns are NaN with ``criterion="bic"``; with "heldout", ``bic`` is the mean
    over folds of the BIC on each fold's training part). ``best``: the chosen K.
    """

    table: pd.DataFrame
    best: int
    criterion: str
    heldout: str


def _units(lengths: np.ndarray, heldout: str, block_frames: int | None, rng) -> pd.DataFrame:
    """Held-out units ``start, stop, fold`` in frames of the concatenated matrix."""
    offsets = np.cumsum(lengths) - lengths
    if heldout == "sessions":
        if len(lengths) < 2:
            msg = (
                "held-out selection by sessions needs at least 2 sessions, got 1; pass "
                "heldout='blocks' (alternating blocks inside the session) or criterion='bic'"
            )
            raise InputError(msg)
        fold = np.empty(len(lengths), dtype=np.int64)
        fold[rng.permutation(len(lengths))] = np.arange(len(lengths)) % 2
        return pd.DataFrame({"start": offsets, "stop": offsets + lengths, "fold": fold})
    size = block_frames or int(np.clip(lengths.sum() // 20, 50, 3000))
    rows = []
    for s, (off, n) in enumerate(zip(offsets, lengths, strict=True)):
        m = max(1, round(n / size))
        edges = np.linspace(0, n, m + 1).astype(np.int64)
        for b, (lo, hi) in enumerate(itertools.pairwise(edges)):
            rows.append((off + lo, off + hi, (b + s) % 2))  # checkerboard across sessions
    units = pd.DataFrame(rows, columns=["start", "stop", "fold"])
    if units["fold"].nunique() < 2:
        msg = (
            f"too few frames ({lengths.sum()}) for 2 folds of {size}-frame blocks; "
            "pass a smaller block_frames"
        )
        raise InputError(msg)
    return units


def _take(X: np.ndarray, units: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    parts = [X[a:b] for a, b in zip(units["start"], units["stop"], strict=True)]
    return np.concatenate(parts), (units["stop"] - units["start"]).to_numpy(np.int64)


def _choose(ll_units: np.ndarray, n_units: np.ndarray, cands: list[int]) -> dict[str, np.ndarray]:
    """Apply the selection rule to per-unit log-likelihoods (n_candidates, n_units)."""
    total = n_units.sum()
    curve = ll_units.sum(axis=1) / total
    top = int(np.argmax(curve))
    w = n_units / total
    d = (ll_units[top] - ll_units) / n_units  # paired per-unit gap per frame
    gap = curve[top] - curve
    u = len(n_units)
    se = np.sqrt(u / (u - 1) * (w**2 * (d - gap[:, None]) ** 2).sum(axis=1)) if u > 1 else 0 * gap
    tol = np.maximum(se, RANGE_TOLERANCE * (curve.max() - curve.min()))
    ok = gap <= tol
    return {
        "curve": curve,
        "gap": gap,
        "se": se,
        "tol": tol,
        "ok": ok,
        "best": cands[int(np.argmax(ok))],
    }


def select_n_states(
    X: np.ndarray,
    lengths: Sequence[int] | np.ndarray | None = None,
    candidates: Iterable[int] = range(2, 13),
    criterion: str = "heldout",
    heldout: str = "sessions",
    model_params: Mapping[str, Any] | None = None,
    random_state: int | None = 0,
    progress: bool = False,
    block_frames: int | None = None,
) -> StateCountSelection:
    """Fit a GaussianHMM for each candidate state count and pick one (rule in the module doc).

    Parameters
    ----------
    X : array (n_frames, n_features); lengths : int array (n_sessions,), optional
    candidates : iterable of int
        State counts to try.
    criterion : {"heldout", "bic"}
    heldout : {"sessions", "blocks"}
        Held-out units: whole sessions (needs >= 2), or blocks alternating inside sessions.
    model_params : mapping, optional
        Other GaussianHMM parameters (not ``n_states``). Cost: 2 fits per candidate with
        "heldout", 1 with "bic"; lower ``n_restarts`` to go faster.
    random_state : int or None
        Seed of the fold split and of every model.
    block_frames : int, optional
        Block length for ``heldout="blocks"`` (default: n_frames/20 within [50, 3000]).

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> X = np.r_[rng.normal(0, 1, (300, 1)), rng.normal(8, 1, (300, 1))]
    >>> sel = select_n_states(X, candidates=[1, 2, 3], heldout="blocks",
    ...                       model_params={"n_restarts": 1})
    >>> sel.best
    2
    """
    X, lengths = check_X_lengths(X, lengths)
    cands = sorted({int(k) for k in candidates})
    if not cands or cands[0] < 1:
        raise InputError(f"candidates must be state counts >= 1; got {list(candidates)}")
    if criterion not in ("heldout", "bic") or heldout not in ("sessions", "blocks"):
        msg = (
            "criterion must be 'heldout' or 'bic' and heldout 'sessions' or 'blocks'; "
            f"got criterion={criterion!r}, heldout={heldout!r}"
        )
        raise InputError(msg)
    params = dict(model_params or {})
    if "n_states" in params:
        raise InputError("model_params must not contain n_states: the candidates set it")
    params["random_state"] = random_state
    params.setdefault("progress", False)
    rows = []
    if criterion == "bic":
        for k in tqdm(cands, desc="state counts", disable=not progress):
            m = GaussianHMM(n_states=k, **params).fit(X, lengths)
            ll = m.score(X, lengths)
            rows.append((k, np.nan, m.bic(X, lengths), ll / len(X), m.n_parameters()))
        table = pd.DataFrame(rows, columns=["n_states", "heldout_ll_per_frame", "bic",
                                            "train_ll_per_frame", "n_parameters"])  # fmt: skip
        best = int(table["n_states"][int(np.argmin(table["bic"]))])
        for col in ("heldout_gap", "heldout_gap_se", "tolerance"):
            table[col] = np.nan
        table["within_tolerance"] = table["n_states"] == best
        return StateCountSelection(table, best, criterion, heldout)
    units = _units(lengths, heldout, block_frames, np.random.default_rng(random_state))
    n_units = (units["stop"] - units["start"]).to_numpy(np.int64)
    ll_units = np.zeros((len(cands), len(units)))
    bic = np.zeros(len(cands))
    train = np.zeros(len(cands))
    jobs = [(i, k, f) for i, k in enumerate(cands) for f in (0, 1)]
    for i, k, f in tqdm(jobs, desc="state counts x folds", disable=not progress):
        X_tr, len_tr = _take(X, units[units["fold"] != f])
        X_te, len_te = _take(X, units[units["fold"] == f])
        m = GaussianHMM(n_states=k, **params).fit(X_tr, len_tr)
        ll_units[i, (units["fold"] == f).to_numpy()] = m.score_per_session(X_te, len_te)
        ll_tr = m.score(X_tr, len_tr)
        train[i] += ll_tr / len(X)  # both folds together cover every frame once
        bic[i] += 0.5 * (-2 * ll_tr + m.n_parameters() * np.log(len(X_tr)))
    rule = _choose(ll_units, n_units, cands)
    table = pd.DataFrame(
        {
            "n_states": cands,
            "heldout_ll_per_frame": rule["curve"],
            "heldout_gap": rule["gap"],
            "heldout_gap_se": rule["se"],
            "tolerance": rule["tol"],
            "within_tolerance": rule["ok"],
            "bic": bic,
            "train_ll_per_frame": train,
            "n_parameters": [_n_parameters(k, X.shape[1], params) for k in cands],
        }
    )
    return StateCountSelection(table, int(rule["best"]), criterion, heldout)


def _n_parameters(k: int, d: int, params: Mapping[str, Any]) -> int:
    cov = k * d * (d + 1) // 2 if params.get("covariance_type", "full") == "full" else k * d
    return (k - 1) + k * (k - 1) + k * d + cov
