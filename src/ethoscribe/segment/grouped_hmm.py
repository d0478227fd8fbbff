"""Behaviour-level states: a fine Gaussian HMM whose states are grouped into metastable sets.

A frame-level HMM describes a rhythmic behaviour as several states that alternate within
every bout (the phases of a stroke or a gait cycle). :class:`GroupedHMM` fits one such fine
model with many states (the top of ``BehaviourModel.state_range``), then groups its states by
PCCA+ (:mod:`ethoscribe.segment.lumping`) into sets that exchange frames slowly at a lag of
about one bout: behaviours. Its labels are the sets; the fine states stay available
(:meth:`GroupedHMM.predict_fine`, the ``fine_state`` column of ``BehaviourModel.label``).

The number of sets, when not given, is read from the spectral gap of the fine transition
matrix at that lag (:func:`ethoscribe.segment.lumping.eigen_gap_sets`). This needs one fit
instead of two quick fits per candidate count, and it reads the count from the dynamics
(which states mix within bouts), not from how much likelihood another Gaussian adds.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from ethoscribe.errors import InputError
from ethoscribe.saved_state import check_header, header
from ethoscribe.segment.hmm import GaussianHMM, frames_needed
from ethoscribe.segment.inputs import check_fitted, check_X_lengths
from ethoscribe.segment.lumping import (
    eigen_gap_sets,
    join_across_units,
    join_phases,
    lump_states,
    lumped_transitions,
    membership,
    pair_components,
    stationary_distribution,
    unit_shares,
)
from ethoscribe.segment.select import (
    StateCountSelection,
    choose_n_states,
    selection_from_json,
    selection_to_json,
)

FORMAT_VERSION = 1
_HMM_PARAMS = (
    "covariance_type", "expected_bout_s", "persistence_strength", "n_restarts", "n_iter", "tol",
    "min_covar", "init", "init_candidates", "screening", "fit_max_frames", "n_jobs", "engine",
    "progress",
)  # fmt: skip


class GroupedHMM(BaseEstimator):
    """Fine Gaussian HMM states grouped into behaviour-level sets (PCCA+ at one bout's lag).

    Parameters
    ----------
    n_states : int or "auto"
        Number of behaviour-level sets. "auto": the largest eigenvalue gap of the fine
        transition matrix at ``group_lag_s`` among ``min_states..fine states``.
    max_states : int
        Fine states fitted (fewer when the frames cannot support that many full
        covariances, :func:`ethoscribe.segment.hmm.frames_needed`).
    min_states : int
        Fewest sets the automatic count may choose.
    group_lag_s : float or None
        Lag (seconds) at which the fine dynamics are grouped: about one bout, so phases that
        alternate within a bout have mixed and behaviours have not. None: the HMM's
        ``expected_bout_s`` (1 s by default), the bout length its transition prior expects.
    fine_states : int, "elbow" or None
        Fine states fitted: None: ``max_states``; "elbow": the held-out elbow of quick fits
        from ``min_states`` to ``max_states`` (:func:`ethoscribe.segment.select.choose_n_states`,
        what ``method="hmm"`` labels with), so the sets group that model's states.
    group_rule : {"eigen_gap", "time_scales", "phases"}
        How many sets when ``n_states="auto"``: the largest eigenvalue gap (at least one merge),
        or one set per implied time scale longer than ``min_timescale_s``, plus one
        (:func:`ethoscribe.segment.lumping.lump_states`; may keep every fine state), or
        "phases": only fine states that are phases of one rhythm are joined (they alternate
        more than by chance, their ``steady_columns`` cannot tell them apart and each is held
        at most 1 s; :func:`ethoscribe.segment.lumping.join_phases`), every other state stays
        a behaviour of its own.
    steady_columns : sequence of int, optional
        Columns of ``X`` that do not change with the phase of a rhythm (band amplitudes), for
        ``group_rule="phases"``; ``BehaviourModel`` fills them in from the feature names.
    min_timescale_s : float
        Exchanges slower than this are between behaviours (``group_rule="time_scales"``);
        1 s, as the model's state tree.
    join : {None, "units"}
        "units": before grouping, join fine states that are one behaviour seen in different
        units (the sequences of ``lengths``: sessions, animals), used apart and mutual
        nearest neighbours in posture (:func:`ethoscribe.segment.lumping.join_across_units`);
        transitions alone cannot join states that never meet. "units_nearest": every state
        used apart from others joins its nearest such state (not only mutual pairs). None:
        group by transitions only.
    covariance_type, expected_bout_s, fps, persistence_strength, n_restarts, n_iter, tol,
    min_covar, init, init_candidates, screening, fit_max_frames, n_jobs, engine, random_state,
    progress
        As :class:`ethoscribe.segment.hmm.GaussianHMM` (the fine model).

    Attributes
    ----------
    fine_ : the fitted fine GaussianHMM; assignment_ (n_fine,) set of each fine state;
    n_states_ (sets), n_fine_states_, n_features_in_; transmat_ (n_states_, n_states_) per
    frame between sets, startprob_, means_ (occupancy-weighted fine means); selection_ (the
    eigen-gap table, or None when ``n_states`` was given); group_reason_.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> blocks = [rng.normal(m, 0.3, (40, 1)) for m in [0, 1, 0, 1, 6, 7, 6, 7] * 6]
    >>> model = GroupedHMM(n_states=2, max_states=4, fps=10, n_restarts=1).fit(np.vstack(blocks))
    >>> model.n_fine_states_, model.n_states_
    (4, 2)
    """

    def __init__(
        self,
        n_states: int | str = "auto",
        max_states: int = 12,
        min_states: int = 2,
        group_lag_s: float | None = None,
        fine_states: int | str | None = None,
        group_rule: str = "eigen_gap",
        min_timescale_s: float = 1.0,
        join: str | None = None,
        steady_columns: Sequence[int] | None = None,
        covariance_type: str = "full",
        expected_bout_s: float | None = 1.0,
        fps: float = 30.0,
        persistence_strength: float = 0.5,
        n_restarts: int = 2,
        n_iter: int = 100,
        tol: float = 1e-4,
        min_covar: float = 1e-3,
        init: str = "kmeans",
        init_candidates: int = 8,
        screening: str = "each_restart",
        fit_max_frames: int | None = 200_000,
        n_jobs: int | None = None,
        engine: str = "fast",
        random_state: int | None = 0,
        progress: bool = False,
    ):
        self.n_states = n_states
        self.max_states = max_states
        self.min_states = min_states
        self.group_lag_s = group_lag_s
        self.fine_states = fine_states
        self.group_rule = group_rule
        self.min_timescale_s = min_timescale_s
        self.join = join
        self.steady_columns = steady_columns
        self.covariance_type = covariance_type
        self.expected_bout_s = expected_bout_s
        self.fps = fps
        self.persistence_strength = persistence_strength
        self.n_restarts = n_restarts
        self.n_iter = n_iter
        self.tol = tol
        self.min_covar = min_covar
        self.init = init
        self.init_candidates = init_candidates
        self.screening = screening
        self.fit_max_frames = fit_max_frames
        self.n_jobs = n_jobs
        self.engine = engine
        self.random_state = random_state
        self.progress = progress

    # ----------------------------------------------------------------------------- checks
    def _check(self) -> None:
        auto = self.n_states == "auto"
        ints = [("max_states", self.max_states), ("min_states", self.min_states)]
        if not auto:
            ints.append(("n_states", self.n_states))
        for name, value in ints:
            if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < 1:
                msg = f"GroupedHMM: {name} must be a positive integer; got {value!r}"
                if name == "n_states":
                    msg += " (or 'auto')"
                raise InputError(msg)
        if not auto and self.n_states > self.max_states:
            raise InputError(
                f"GroupedHMM: n_states={self.n_states} sets cannot be made from "
                f"max_states={self.max_states} fine states; raise max_states"
            )
        fine = self.fine_states
        if (
            fine is not None
            and fine != "elbow"
            and (isinstance(fine, bool) or not isinstance(fine, int | np.integer) or fine < 1)
        ):
            raise InputError(
                f"GroupedHMM: fine_states must be a positive integer, 'elbow' or None; got {fine!r}"
            )
        if self.group_rule not in ("eigen_gap", "time_scales", "phases"):
            raise InputError(
                f"GroupedHMM: group_rule must be 'eigen_gap', 'time_scales' or 'phases'; got "
                f"{self.group_rule!r}"
            )
        cols = self.steady_columns
        if cols is not None and (
            isinstance(cols, str | bytes)
            or not all(isinstance(c, int | np.integer) and not isinstance(c, bool) for c in cols)
            or any(c < 0 for c in cols)
        ):
            raise InputError(
                f"GroupedHMM: steady_columns must be a list of column indices (integers >= 0); "
                f"got {cols!r:.80}"
            )
        if self.group_rule == "phases" and self.n_states == "auto" and cols is None:
            raise InputError(
                "GroupedHMM: group_rule='phases' needs steady_columns, the indices of the columns "
                "that do not change with a rhythm's phase (band amplitudes); BehaviourModel "
                "fills them in from the feature names"
            )
        if self.join not in (None, "units", "units_nearest"):
            raise InputError(
                f"GroupedHMM: join must be None, 'units' or 'units_nearest'; got {self.join!r}"
            )
        lag = self.group_lag_s
        if lag is not None and not (isinstance(lag, int | float) and np.isfinite(lag) and lag > 0):
            raise InputError(f"GroupedHMM: group_lag_s must be > 0 seconds or None; got {lag!r}")

    def _lag_s(self) -> float:
        if self.group_lag_s is not None:
            return float(self.group_lag_s)
        return float(self.expected_bout_s) if self.expected_bout_s else 1.0

    # ---------------------------------------------------------------------------- fitting
    def fit(self, X: np.ndarray, lengths: Sequence[int] | np.ndarray | None = None) -> GroupedHMM:
        """Fit the fine HMM on ``X (n_frames, n_features)`` and group its states."""
        self._check()
        X, lengths = check_X_lengths(X, lengths)
        options = {name: getattr(self, name) for name in _HMM_PARAMS}
        n_fine, elbow = self._fine_count(X, lengths, options)
        fine = GaussianHMM(n_states=n_fine, fps=self.fps, random_state=self.random_state, **options)
        fine.fit(X, lengths)
        self.fine_ = fine
        self.selection_ = None
        lag_s = self._lag_s()
        origin = "chosen by the held-out elbow" if elbow is not None else "fitted"
        base, transmat, joined = self._joined(X, lengths)
        n_base = len(transmat)
        if joined:
            origin += "; " + ", ".join(f"{a}+{b}" for a, b in joined) + " joined across units"
        if self.n_states != "auto":
            n_sets = min(int(self.n_states), n_base)
            reason = f"{n_sets} sets as asked"
        elif n_base < 2:
            n_sets, reason = 1, "1 set: a single fine state"
        elif self.group_rule == "phases":
            self._group_phases(X, base, joined, n_fine, origin, elbow)
            return self
        elif self.group_rule == "time_scales":
            lump = lump_states(
                transmat, self.fps, lag_s=lag_s, min_timescale_s=self.min_timescale_s
            )
            n_sets = lump.n_sets
            reason = f"{n_sets} behaviours of {n_fine} fine states ({origin}): {lump.reason}"
        else:
            lo = min(int(self.min_states), n_base - 1)
            best, table = eigen_gap_sets(transmat, self.fps, lag_s, range(lo, n_base))
            gaps = sorted((row["eigen_gap"] for row in table), reverse=True)
            reason = (
                f"{best} behaviours: the largest gap of the eigenvalues of the {n_fine} fine "
                f"states' ({origin}) transitions at a lag of {lag_s:g} s ({gaps[0]:.2f}"
                + (f"; next largest {gaps[1]:.2f})" if len(gaps) > 1 else ")")
            )
            self.selection_ = StateCountSelection(
                pd.DataFrame(table), best, "eigen_gap", "", "eigen_gap", reason=reason
            )
            n_sets = best
        if self.selection_ is None and elbow is not None:
            self.selection_ = replace(elbow, reason=f"{elbow.reason}; {reason}")
        lump = lump_states(transmat, self.fps, n_sets=n_sets, lag_s=lag_s)
        self.joined_ = joined
        self.group_reason_ = reason
        self._set_groups(lump.assignment[base])
        return self

    def _group_phases(
        self,
        X: np.ndarray,
        base: np.ndarray,
        joined: list[tuple[int, int]],
        n_fine: int,
        origin: str,
        elbow: StateCountSelection | None,
    ) -> None:
        """Sets of ``group_rule="phases"``: fine states joined where they are phases of one
        rhythm (and across units when ``join`` asked for it); every other state alone."""
        fine = self.fine_
        cols = [int(c) for c in self.steady_columns or [] if int(c) < X.shape[1]]
        _, phases = join_phases(fine.transmat_, fine.means_, fine.covars_, cols, self.fps)
        pairs = [p["states"] for p in phases]
        pairs += [(a, b) for a in range(n_fine) for b in range(a + 1, n_fine) if base[a] == base[b]]
        assignment = pair_components(n_fine, pairs)
        n_sets = int(assignment.max()) + 1
        if phases:
            joins = ", ".join(
                f"{a}+{b} (exchange {p['lift']:.1f}x chance, {p['distance']:.2f} SD apart)"
                for p in phases
                for a, b in [p["states"]]
            )
            said = f"phases of one rhythm joined: {joins}"
        else:
            said = "no two fine states are phases of one rhythm"
        reason = f"{n_sets} behaviours of {n_fine} fine states ({origin}): {said}"
        self.joined_ = joined
        self.phases_ = phases
        self.group_reason_ = reason
        if elbow is not None:
            self.selection_ = replace(elbow, reason=f"{elbow.reason}; {reason}")
        self._set_groups(assignment)

    def _joined(
        self, X: np.ndarray, lengths: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, list[tuple[int, int]]]:
        """Group of every fine state after joining across units, the transition matrix between
        the groups, and the joined pairs (no join: every fine state its own group)."""
        fine = self.fine_
        n = int(fine.n_states_)
        if self.join is None or len(lengths) < 2 or n < 2:
            return np.arange(n), fine.transmat_, []
        share = unit_shares(fine.predict_proba(X, lengths), lengths)
        base, pairs = join_across_units(fine.means_, share, mutual=self.join == "units")
        return base, lumped_transitions(fine.transmat_, base), pairs

    def _fine_count(
        self, X: np.ndarray, lengths: np.ndarray, options: dict
    ) -> tuple[int, StateCountSelection | None]:
        """Number of fine states, and the held-out elbow choice when ``fine_states="elbow"``."""
        n_fit = len(X) if self.fit_max_frames is None else min(len(X), int(self.fit_max_frames))
        top = int(self.max_states)
        while top > 1 and frames_needed(top, X.shape[1], self.covariance_type) > n_fit:
            top -= 1  # no more fine states than the frames support
        elbow = None
        if self.fine_states == "elbow":
            lo = min(int(self.min_states), top)
            params = {"fps": self.fps, **{k: v for k, v in options.items() if k != "progress"}}
            elbow = choose_n_states(
                X, lengths, range(lo, top + 1), params, self.random_state, self.progress
            )
            n_fine = int(elbow.best)
        else:
            n_fine = top if self.fine_states is None else int(self.fine_states)
        if self.n_states != "auto":
            n_fine = max(n_fine, int(self.n_states))  # the fine fit then says what is missing
        return n_fine, elbow

    def _set_groups(self, assignment: np.ndarray) -> None:
        """Set-level arrays from the fine model and the set of each fine state."""
        fine = self.fine_
        assignment = np.asarray(assignment, dtype=np.int64)
        onehot = membership(assignment)
        n_sets = onehot.shape[1]
        pi = stationary_distribution(fine.transmat_)
        weight = onehot * pi[:, None]  # (fine, sets): occupancy of each fine state in its set
        occupancy = np.maximum(weight.sum(0), 1e-300)
        self.assignment_ = assignment
        self._onehot = onehot
        # Per-frame transitions between sets: flux between their fine states over occupancy.
        self.transmat_ = (weight.T @ fine.transmat_ @ onehot) / occupancy[:, None]
        self.transmat_ /= self.transmat_.sum(1, keepdims=True)
        self.startprob_ = fine.startprob_ @ onehot
        self.means_ = (weight.T @ fine.means_) / occupancy[:, None]
        self.n_states_ = n_sets
        self.n_fine_states_ = int(fine.n_states_)
        self.n_features_in_ = int(fine.n_features_in_)
        self.covariance_floor_ = fine.covariance_floor_
        self.random_seed_ = fine.random_seed_

    # ---------------------------------------------------------------------------- applying
    def predict_fine(self, X: np.ndarray, lengths=None, *, hidden=None) -> np.ndarray:
        """Fine state of every frame (Viterbi of the fine model), int (n_frames,); ``hidden``:
        columns left out of a frame's emission (:meth:`GaussianHMM.decode`)."""
        check_fitted(self, "fine_")
        return self.fine_.predict(X, lengths, hidden=hidden)

    def predict(self, X: np.ndarray, lengths=None, *, hidden=None) -> np.ndarray:
        """Set of every frame: the set of its fine Viterbi state, int (n_frames,)."""
        return self.assignment_[self.predict_fine(X, lengths, hidden=hidden)]

    def predict_proba(self, X: np.ndarray, lengths=None, *, hidden=None) -> np.ndarray:
        """Posterior of every set (sum of its fine states' posteriors), (n_frames, n_states_)."""
        check_fitted(self, "fine_")
        return self.fine_.predict_proba(X, lengths, hidden=hidden) @ self._onehot

    def filter(self, X: np.ndarray, lengths=None) -> np.ndarray:
        """Causal posteriors of the sets, (n_frames, n_states_)."""
        check_fitted(self, "fine_")
        return self.fine_.filter(X, lengths) @ self._onehot

    def score(self, X: np.ndarray, lengths=None) -> float:
        """Log-likelihood of ``X`` under the fine model."""
        check_fitted(self, "fine_")
        return self.fine_.score(X, lengths)

    def score_per_session(self, X: np.ndarray, lengths=None) -> np.ndarray:
        check_fitted(self, "fine_")
        return self.fine_.score_per_session(X, lengths)

    def n_parameters(self) -> int:
        check_fitted(self, "fine_")
        return self.fine_.n_parameters()

    # ------------------------------------------------------------------------- persistence
    def to_state(self) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
        """JSON-able parameters, the set of each fine state, and the fine model's state."""
        check_fitted(self, "fine_")
        fine_meta, fine_arrays = self.fine_.to_state()
        selection = self.selection_
        meta = {
            **header("ethoscribe.GroupedHMM", FORMAT_VERSION),
            "params": {**self.get_params(), "random_state": self.random_seed_},
            "n_states": self.n_states_,
            "n_features": self.n_features_in_,
            "assignment": self.assignment_.tolist(),
            "reason": self.group_reason_,
            "joined": [list(p) for p in getattr(self, "joined_", [])],
            "selection": None if selection is None else selection_to_json(selection),
            "fine": fine_meta,
        }
        return meta, {f"fine/{k}": v for k, v in fine_arrays.items()}

    @classmethod
    def from_state(cls, meta: dict[str, Any], arrays: dict[str, np.ndarray]) -> GroupedHMM:
        """Rebuild the fitted model written by :meth:`to_state` (fields checked first)."""
        check_header(meta, "ethoscribe.GroupedHMM", FORMAT_VERSION, "GroupedHMM state")
        params = meta.get("params")
        if not isinstance(params, Mapping):
            raise InputError(f"GroupedHMM state: 'params' must be an object, got {params!r:.60}")
        unknown = sorted(set(params) - set(cls._get_param_names()))
        if unknown:
            raise InputError(f"GroupedHMM state: unknown parameters {unknown}")
        model = cls(**params)
        model._check()
        fine_meta = meta.get("fine")
        if not isinstance(fine_meta, Mapping):
            raise InputError("GroupedHMM state: 'fine' must be the fine model's state (an object)")
        prefix = "fine/"
        fine_arrays = {k[len(prefix) :]: v for k, v in arrays.items() if k.startswith(prefix)}
        fine = GaussianHMM.from_state(dict(fine_meta), fine_arrays)
        assignment = meta.get("assignment")
        n_sets = meta.get("n_states")
        ok = (
            isinstance(assignment, list)
            and len(assignment) == fine.n_states_
            and isinstance(n_sets, int)
            and all(isinstance(a, int) and 0 <= a < n_sets for a in assignment)
            and set(assignment) == set(range(n_sets))
        )
        if not ok:
            raise InputError(
                f"GroupedHMM state: 'assignment' must list, for each of the {fine.n_states_} "
                f"fine states, its set (integers covering 0..n_states-1); got {assignment!r:.80}"
            )
        model.fine_ = fine
        model._set_groups(np.array(assignment))
        model.group_reason_ = str(meta.get("reason", ""))
        joined = meta.get("joined", [])
        model.joined_ = [(int(a), int(b)) for a, b in joined] if isinstance(joined, list) else []
        saved = meta.get("selection")
        model.selection_ = None
        if isinstance(saved, Mapping) and "table" in saved:
            # states saved before the criterion was recorded held the eigenvalue-gap table
            model.selection_ = selection_from_json(saved, criterion="eigen_gap")
        model.random_seed_ = model.random_state
        return model
