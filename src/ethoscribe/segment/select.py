"""Choosing the number of HMM states: held-out log-likelihood (default) or BIC.

Held-out: the data are split into two folds of whole units (sessions, or blocks of frames that
alternate inside every session); a model fitted on one fold scores every unit of the other, and
the other way round (2-fold cross-fitting), so each unit gets an out-of-sample log-likelihood.
With the HMM's per-session offsets a held-out unit is a new individual: its log-likelihood is
its marginal likelihood, the offset integrated over the fitted prior (``offset_scoring=
"marginal"``, Laplace's method; :func:`ethoscribe.segment.session_offsets.marginal_log_likelihood`).
Plugging in the unit's own MAP offset (``"map"``) credits it with a free shift: a unit of one
behaviour is then explained by one state plus its offset, and the count falls.

Two rules read the held-out curve ``ll(K)`` (log-likelihood per frame):

- ``rule="one_se"`` (one-standard-error style, Breiman et al. 1984; Hastie, Tibshirani &
  Friedman 2009): let ``best`` be the K with the highest ``ll``. For each K the gap
  ``gap(K) = ll(best) - ll(K)`` has a standard error ``se(K)`` from the paired per-unit
  differences (frame-weighted). The chosen K is the smallest with
  ``gap(K) <= max(se(K), 0.01 * (max ll - min ll))``: within one standard error of the best,
  or within 1 % of the range of the curve when the data are so plentiful that the standard
  error is negligible. Right when the states' Gaussians fit the data.
- ``rule="elbow"``: the gain of each added state, ``gain(K) = (ll(K) - ll(K_prev)) / (K -
  K_prev)`` on the concave envelope of the curve (a candidate fit below it stopped in a poor
  optimum), is compared with the largest gain; the chosen K is the smallest whose next gain
  is below ``ELBOW_FRACTION`` (a fifth) of it. Real behaviour is
  never exactly Gaussian, so with a lot of frames every extra state keeps raising the held-out
  likelihood a little (it models a skewed state, a rhythm's phases, or the frames of
  transitions): the curve has no maximum, only an elbow where new behaviours stop being found
  and refinements of known ones begin. On the simulated example study (7 behaviours, of
  which two share a posture; 12 choices over seeds and session subsets) the gains up to the
  7th state were at least 21 % of the largest, those beyond the 8th at most 18 %, and the
  count chosen was 7 (8 times) or 8 (4 times).
- ``rule="kneedle"``: the knee of the curve by Kneedle (Satopaa, Albrecht, Irwin & Raghavan
  2011, "Finding a 'Kneedle' in a haystack", ICDCS workshops), with sensitivity ``S = 1``
  as the paper recommends. Kneedle smooths the curve first; here the smoothing is the
  concave envelope (as for the elbow), kept up to its maximum (Kneedle reads an increasing
  curve; past the maximum more states only lose). Both axes are scaled to [0, 1], the knee
  is the K where the scaled curve lies farthest above the diagonal from its first to its
  last point, provided the difference falls by ``S`` times the mean step of the scaled K
  after it (else no knee: the curve rises as a straight line, and the maximum is chosen).
  Unlike the elbow it reads no fixed fraction: the knee is relative to the whole rise of
  the curve over the candidates.

With ``criterion="bic"`` the K of minimum BIC on all data is chosen.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from ethoscribe.errors import InputError
from ethoscribe.segment._hmm_fit import in_threads, n_threads
from ethoscribe.segment.agreement import adjusted_rand
from ethoscribe.segment.inputs import check_X_lengths
from ethoscribe.segment.registry import get_segmenter
from ethoscribe.segment.sampling import take_blocks
from ethoscribe.segment.session_offsets import OFFSET_SCORINGS

RANGE_TOLERANCE = 0.01
ELBOW_FRACTION = 0.2
RULES = ("one_se", "elbow", "kneedle")
# Kneedle's sensitivity: 1, the value Satopaa et al. (2011) recommend and use.
KNEEDLE_SENSITIVITY = 1.0
# The quick path of ``choose_n_states`` (used by BehaviourModel with n_states="auto"); the
# quick fitting options are the method's ``quick_options`` in the registry.
QUICK_MAX_FRAMES = 20_000
# Early stop of the quick path: two candidates past the elbow both adding less than the elbow
# fraction. One would stop at the first small gain of a noisy curve (quick fits of one
# restart sometimes stop in a poorer optimum, under the envelope); two past it is the least
# that tells a flat stretch from one poor fit.
STOP_AFTER = 2


@dataclass(frozen=True)
class StateCountSelection:
    """Result of :func:`select_n_states`.

    ``table``: one row per candidate with ``n_states, heldout_ll_per_frame, heldout_gap,
    heldout_gap_se, tolerance, within_tolerance, heldout_gain, bic, train_ll_per_frame,
    n_parameters, split_half_ari`` (held-out columns are NaN with ``criterion="bic"``; with
    "heldout", ``bic`` is the mean over folds of the BIC on each fold's training part;
    ``heldout_gain`` is the gain per added state of the held-out curve's concave envelope,
    which the elbow rule reads; ``split_half_ari`` is the adjusted Rand index between the
    labels the two folds' models, fitted on disjoint halves, give every frame: how reproducible
    the K states are, recorded beside the curve, not yet read by a rule), and ``fitted``:
    False for a candidate skipped because its fits would have fewer frames than its states
    can support (:func:`ethoscribe.segment.hmm.frames_needed`; its
    other columns are NaN, except ``n_parameters``). ``best``: the chosen K;
    ``rule``: how the held-out curve was read ("one_se" or "elbow"); ``skipped``: the
    candidates not fitted (too few frames for them); ``not_needed``: the candidates above the
    elbow left unfitted by early stopping (``stop_after``); ``reason``: why ``best``, one
    sentence.
    """

    table: pd.DataFrame
    best: int
    criterion: str
    heldout: str
    rule: str = "one_se"
    skipped: tuple[int, ...] = ()
    not_needed: tuple[int, ...] = ()
    reason: str = ""
    # The two folds' fitted models of every fitted candidate (held-out path only), kept so that
    # the final fit can start from them (state_count_options warm_start). Quick fits: not the
    # stability check's split halves (they agree less than full fits of the halves). Not
    # saved: ``selection_to_json`` writes the table and the choice only.
    fold_models: Mapping[int, tuple[Any, Any]] = field(
        default_factory=dict, repr=False, compare=False
    )


def selection_to_json(selection: Any) -> dict[str, Any]:
    """A state-count choice as JSON (missing values of unfitted candidates become null)."""
    table = getattr(selection, "table", pd.DataFrame())
    return {
        "best": int(selection.best),
        "criterion": str(getattr(selection, "criterion", "")),
        # how the curve was made and read: the defaults may change, the record must not
        "heldout": str(getattr(selection, "heldout", "")),
        "rule": str(getattr(selection, "rule", "")),
        "reason": str(getattr(selection, "reason", "")),
        "table": table.astype(object).where(table.notna(), None).to_dict(orient="list"),
    }


def selection_from_json(d: Mapping[str, Any], criterion: str = "") -> StateCountSelection:
    """The choice written by :func:`selection_to_json` (``criterion`` if it has none)."""
    return StateCountSelection(
        pd.DataFrame(d["table"]),
        int(d["best"]),
        str(d.get("criterion") or criterion),
        str(d.get("heldout") or ""),
        rule=str(d.get("rule") or ""),
        reason=str(d.get("reason") or ""),
    )


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
            f"too few frames ({lengths.sum()}) for the automatic number of states: it holds "
            f"out alternate blocks of {size} frames and needs at least two. Give the number "
            "of states (n_states=...) or record longer"
        )
        raise InputError(msg)
    return units


def _rows(given: dict[str, np.ndarray], keep: np.ndarray) -> dict[str, np.ndarray]:
    """The session offsets of ``given`` (if any) of the sessions ``keep`` (bool per session)."""
    return {name: value[keep] for name, value in given.items()}


def _take(X: np.ndarray, units: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    parts = [X[a:b] for a, b in zip(units["start"], units["stop"], strict=True)]
    return np.concatenate(parts), (units["stop"] - units["start"]).to_numpy(np.int64)


def concave_envelope(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Values at ``x`` (increasing) of the least concave majorant of the points ``(x, y)``.

    Examples
    --------
    >>> concave_envelope(np.array([1.0, 2, 3, 4]), np.array([0.0, 1, 3, 4])).tolist()
    [0.0, 1.5, 3.0, 4.0]
    """
    hull: list[int] = []
    for i in range(len(x)):  # upper hull, monotone chain (Andrew 1979)
        while len(hull) >= 2:
            a, b = hull[-2], hull[-1]
            if (y[b] - y[a]) * (x[i] - x[a]) <= (y[i] - y[a]) * (x[b] - x[a]):
                hull.pop()  # b lies on or below the chord a-i
            else:
                break
        hull.append(i)
    return np.interp(x, x[hull], y[hull])


def elbow(curve: np.ndarray, cands: Sequence[int], fraction: float = ELBOW_FRACTION) -> int:
    """Index of the elbow of an increasing curve (see the module doc, ``rule="elbow"``).

    The curve is first replaced by its concave envelope: the best model's held-out curve has
    diminishing gains, so a candidate below the envelope is an optimisation that stopped in a
    poorer optimum, and the gain it missed must not be credited to the next candidate.

    Examples
    --------
    >>> elbow(np.array([-9.0, -6.0, -4.0, -3.8, -3.7]), [2, 3, 4, 5, 6])
    2
    """
    k = np.asarray(cands, dtype=np.float64)
    gain = np.diff(concave_envelope(k, np.asarray(curve, dtype=np.float64))) / np.diff(k)
    if not len(gain) or not (gain.max() > 0):
        return 0
    small = np.flatnonzero(gain < fraction * gain.max())
    return int(small[0]) if len(small) else len(cands) - 1


def kneedle(
    curve: np.ndarray, cands: Sequence[int], sensitivity: float = KNEEDLE_SENSITIVITY
) -> int:
    """Index of the knee of a held-out curve by Kneedle (see the module doc, ``rule="kneedle"``).

    The curve is replaced by its concave envelope, cut at the envelope's maximum, and both
    axes are scaled to [0, 1]; the knee is the first point of largest difference ``y - x``
    between the scaled curve and the diagonal, if the difference drops by ``sensitivity``
    times the mean step of the scaled x after it (the paper's threshold), else the maximum.

    Examples
    --------
    >>> kneedle(np.array([-9.0, -6.0, -4.0, -3.8, -3.7]), [2, 3, 4, 5, 6])
    2
    """
    k = np.asarray(cands, dtype=np.float64)
    env = concave_envelope(k, np.asarray(curve, dtype=np.float64))
    top = int(np.argmax(env))  # the first K of the highest envelope
    if top == 0:
        return 0
    x = (k[: top + 1] - k[0]) / (k[top] - k[0])
    y = (env[: top + 1] - env[0]) / (env[top] - env[0])
    diff = y - x
    knee = int(np.argmax(diff))
    threshold = diff[knee] - sensitivity * float(np.mean(np.diff(x)))
    return knee if (diff[knee + 1 :] < threshold).any() else top


def _choose(
    ll_units: np.ndarray, n_units: np.ndarray, cands: list[int], rule: str = "one_se"
) -> dict[str, np.ndarray]:
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
    k = np.asarray(cands, dtype=np.float64)
    gain = np.r_[np.nan, np.diff(concave_envelope(k, curve)) / np.diff(k)] if len(k) else k
    if rule == "one_se":
        best = cands[int(np.argmax(ok))]
    else:
        best = cands[(kneedle if rule == "kneedle" else elbow)(curve, cands)]
    return {"curve": curve, "gap": gap, "se": se, "tol": tol, "ok": ok, "gain": gain, "best": best}


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
    rule: str = "one_se",
    method: str = "hmm",
    stop_after: int | None = None,
    offset_scoring: str = "marginal",
) -> StateCountSelection:
    """Fit a model for each candidate state count and pick one (rule in the module doc).

    Parameters
    ----------
    X : array (n_frames, n_features); lengths : int array (n_sessions,), optional
    candidates : iterable of int
        State counts to try. A count whose fits would have fewer frames than its states can
        support (:func:`ethoscribe.segment.hmm.frames_needed`) is skipped and marked
        ``fitted=False`` in the table; an ``InputError`` only when every count is.
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
    rule : {"one_se", "elbow", "kneedle"}
        How the held-out curve is read (module doc); ignored with ``criterion="bic"``.
    stop_after : int or None
        With ``rule="elbow"``: fit the candidates smallest first and stop once the elbow of
        the curve so far lies ``stop_after`` candidates below the last one fitted (each of
        them added less than the elbow fraction of the largest gain per state); the larger
        candidates, the costliest fits, are then left out (``not_needed``). With
        ``rule="kneedle"`` the same, once the highest held-out fit so far lies ``stop_after``
        candidates below the last one fitted (Kneedle reads the curve up to its maximum, but
        scales it by the whole rise, so a later candidate above the best would move the
        knee; the early stop assumes none comes after ``stop_after`` lower ones). The elbow reads
        the concave envelope of the curve, so a larger candidate would move it only if its
        held-out gain, averaged per state over the whole stretch from the elbow, reached the
        elbow fraction of the largest gain again, although the ``stop_after`` candidates in
        between each stayed below it. None: fit every candidate.
    method : str
        A registered method whose state count is chosen this way (``auto_states="heldout"``
        in :mod:`ethoscribe.segment.registry`; its estimator scores held-out sessions). Its
        class may declare ``frames_needed(k, n_features, covariance_type)`` (fewer frames skip
        a candidate) and ``parameter_count(k, n_features, covariance_type)``.
    offset_scoring : {"map", "marginal"}
        With the HMM's per-session offsets: each held-out unit scored with its own MAP offset
        plugged in ("map"), or with its offset integrated over the fitted prior ("marginal",
        Laplace's method; :func:`ethoscribe.segment.session_offsets.marginal_log_likelihood`),
        so a unit of one behaviour is not explained by one state plus a free shift.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> # four sessions, each with bouts of two behaviours (levels 0 and 8); whole sessions
    >>> # are held out
    >>> X = np.concatenate([rng.normal(m, 1, (50, 1)) for m in (0, 8) * 12])
    >>> sel = select_n_states(X, [300] * 4, candidates=[1, 2, 3],
    ...                       model_params={"n_restarts": 1})
    >>> sel.best
    2
    """
    X, lengths = check_X_lengths(X, lengths)
    cands = sorted({int(k) for k in candidates})
    if not cands or cands[0] < 1:
        raise InputError(f"candidates must be state counts >= 1; got {list(candidates)}")
    if (
        criterion not in ("heldout", "bic")
        or heldout not in ("sessions", "blocks")
        or rule not in RULES
    ):
        msg = (
            "criterion must be 'heldout' or 'bic', heldout 'sessions' or 'blocks' and rule one "
            f"of {RULES}; got criterion={criterion!r}, heldout={heldout!r}, rule={rule!r}"
        )
        raise InputError(msg)
    if offset_scoring not in OFFSET_SCORINGS:
        msg = f"offset_scoring must be one of {OFFSET_SCORINGS}; got {offset_scoring!r}"
        raise InputError(msg)
    spec = get_segmenter(method)
    if spec.auto_states != "heldout":
        msg = f"method {method!r} does not choose its state count from held-out likelihood"
        raise InputError(msg)
    cls = spec.cls
    params = {**spec.options, **dict(model_params or {})}
    if spec.state_param in params:
        msg = f"model_params must not contain {spec.state_param}: the candidates set it"
        raise InputError(msg)

    def make(k: int) -> Any:
        return cls(**{spec.state_param: k, **params})

    def needed_frames(k: int) -> int:
        rule = getattr(cls, "frames_needed", None)
        return 0 if rule is None else rule(k, n_features, covariance_type)

    params["random_state"] = random_state
    params.setdefault("progress", False)
    n_jobs = params.pop("n_jobs", None)  # threads over the candidate fits, not inside each
    n_features = X.shape[1]
    covariance_type = params.get("covariance_type", "full")
    if criterion == "bic":
        fit_frames = len(X)
    else:
        units = _units(lengths, heldout, block_frames, np.random.default_rng(random_state))
        n_units = (units["stop"] - units["start"]).to_numpy(np.int64)
        # Each fold's model is fitted on the other fold: the smaller training part decides.
        fit_frames = min(int(n_units[units["fold"].to_numpy() != f].sum()) for f in (0, 1))
    feasible = [k for k in cands if fit_frames >= needed_frames(k)]
    if not feasible:
        needed = needed_frames(cands[0])
        msg = (
            f"none of the candidate state counts {cands} can be fitted: even {cands[0]} states "
            f"of {covariance_type} covariance over {n_features} features need {needed} frames "
            f"per fit, but a fit has only {fit_frames}"
            + (" (one of 2 held-out folds)" if criterion == "heldout" else "")
            + ". Try fewer states (a lower state range) or pass more data."
        )
        raise InputError(msg)
    skipped = tuple(k for k in cands if k not in feasible)
    if criterion == "bic":
        rows = []
        for k in tqdm(feasible, desc="state counts", disable=not progress):
            m = make(k).fit(X, lengths)
            # a model with session offsets: estimated once for the score and the BIC
            given = {}
            if getattr(m, "session_offsets", False):
                given = {"offsets": m.offsets(X, lengths)}
            ll = m.score(X, lengths, **given)
            rows.append((k, np.nan, m.bic(X, lengths, **given), ll / len(X), m.n_parameters()))
        table = pd.DataFrame(rows, columns=["n_states", "heldout_ll_per_frame", "bic",
                                            "train_ll_per_frame", "n_parameters"])  # fmt: skip
        best = int(table["n_states"][int(np.argmin(table["bic"]))])
        for col in ("heldout_gap", "heldout_gap_se", "tolerance", "heldout_gain", "split_half_ari"):
            table[col] = np.nan
        table["within_tolerance"] = table["n_states"] == best
        table = _with_skipped(table, cands, n_features, params, cls)
        return StateCountSelection(table, best, criterion, heldout, rule, skipped)
    ll_units = np.zeros((len(feasible), len(units)))
    bic = np.zeros(len(feasible))
    train = np.zeros(len(feasible))
    jobs = [(i, k, f) for i, k in enumerate(feasible) for f in (0, 1)]
    bar = tqdm(total=len(jobs), desc="state counts x folds", disable=not progress)

    def fit_fold(job: tuple[int, int, int]) -> tuple[np.ndarray, float, int, int, np.ndarray, Any]:
        _, k, f = job
        X_tr, len_tr = _take(X, units[units["fold"] != f])
        X_te, len_te = _take(X, units[units["fold"] == f])
        m = make(k).fit(X_tr, len_tr)
        bar.update(1)
        # Held-out sessions: every session's offset (a model with session offsets) estimated
        # once, for its labels and its score; held-out blocks get offsets of their own.
        test, given = units["fold"].to_numpy() == f, {}
        if heldout == "sessions" and getattr(m, "session_offsets", False):
            given = {"offsets": m.offsets(X, lengths)}
        # Every frame labelled by this fold's model: the two folds' labelings are compared.
        labels = m.predict(X, lengths, **given)
        # "map" is every model's own score: the option goes only to a model with offsets
        marginal = offset_scoring == "marginal" and getattr(m, "session_offsets", False)
        scoring = {"offset_scoring": "marginal"} if marginal else {}
        ll_te = m.score_per_session(X_te, len_te, **scoring, **_rows(given, test))
        ll_tr = m.score(X_tr, len_tr, **_rows(given, ~test))
        return ll_te, ll_tr, len(X_tr), m.n_parameters(), labels, m

    # The fits are independent (each seeded alike): on threads, results equal a serial loop.
    # With ``stop_after`` candidates are fitted in rounds, smallest first (one candidate's two
    # folds per pair of threads), until the elbow is settled.
    fold_labels: dict[tuple[int, int], np.ndarray] = {}
    models: dict[tuple[int, int], Any] = {}
    per_round = len(jobs) if stop_after is None else 2 * max(1, n_threads(n_jobs) // 2)
    done = 0
    while done < len(jobs):
        batch = jobs[done : done + per_round]
        done += len(batch)
        for (i, _, f), (ll_te, ll_tr, n_tr, n_par, labels, model) in zip(
            batch, in_threads(fit_fold, batch, n_jobs), strict=True
        ):
            fold_labels[i, f] = labels
            models[i, f] = model
            ll_units[i, (units["fold"] == f).to_numpy()] = ll_te
            train[i] += ll_tr / len(X)  # both folds together cover every frame once
            bic[i] += 0.5 * (-2 * ll_tr + n_par * np.log(n_tr))
        fitted = done // 2
        if stop_after is not None and done < len(jobs) and fitted >= 2:
            so_far = ll_units[:fitted].sum(axis=1) / n_units.sum()
            # Kneedle reads the curve up to its maximum: stop once that lies stop_after back.
            at = int(np.argmax(so_far)) if rule == "kneedle" else elbow(so_far, feasible[:fitted])
            if fitted - 1 - at >= stop_after:
                break
    bar.close()
    fitted = done // 2
    ll_units, bic, train = ll_units[:fitted], bic[:fitted], train[:fitted]
    not_needed = tuple(feasible[fitted:])
    feasible = feasible[:fitted]
    chosen = _choose(ll_units, n_units, feasible, rule)
    table = pd.DataFrame(
        {
            "n_states": feasible,
            "heldout_ll_per_frame": chosen["curve"],
            "heldout_gap": chosen["gap"],
            "heldout_gap_se": chosen["se"],
            "tolerance": chosen["tol"],
            "within_tolerance": chosen["ok"],
            "heldout_gain": chosen["gain"],
            "bic": bic,
            "train_ll_per_frame": train,
            "n_parameters": [_n_parameters(cls, k, n_features, params) for k in feasible],
            # Split-half agreement: ARI between the labels the two folds' models (fitted on
            # disjoint halves) give every frame; high when the K states are reproducible.
            "split_half_ari": [
                adjusted_rand(fold_labels[i, 0], fold_labels[i, 1]) for i in range(len(feasible))
            ],
        }
    )
    table = _with_skipped(table, cands, n_features, params, cls)
    reason = _reason(table, int(chosen["best"]), rule, stop_after, not_needed)
    fold_models = {k: (models[i, 0], models[i, 1]) for i, k in enumerate(feasible)}
    return StateCountSelection(
        table, int(chosen["best"]), criterion, heldout, rule, skipped, not_needed, reason,
        fold_models,
    )  # fmt: skip


def _reason(
    table: pd.DataFrame, best: int, rule: str, stop_after: int | None, not_needed: tuple
) -> str:
    """One sentence saying why ``best`` was chosen (shown beside the curve)."""
    curve = table.set_index("n_states")["heldout_ll_per_frame"].dropna()
    falls = rule != "one_se" and len(curve) > 1 and curve.idxmax() == curve.index[0] == best
    if falls:
        # No larger count fitted the held-out units better: there was no elbow or knee to read.
        text = (
            f"{best} states: the smallest candidate, as no larger count fitted the held-out data "
            "better (the held-out curve falls from its first point)"
        )
    elif rule == "one_se":
        text = f"{best} states: the fewest within one standard error of the best held-out fit"
    elif rule == "kneedle":
        text = (
            f"{best} states: the knee of the held-out curve (Kneedle: farthest above the line "
            "from the first candidate to the best fit)"
        )
    else:
        gains = table.set_index("n_states")["heldout_gain"]
        top = float(np.nanmax(gains.to_numpy(dtype=float))) if gains.notna().any() else np.nan
        after = gains[gains.index > best].dropna()
        text = f"{best} states: the elbow of the held-out curve"
        if len(after) and np.isfinite(top) and top > 0:
            share = float(after.iloc[0]) / top
            text += (
                f" (one more state adds {100 * share:.0f} % of the largest gain per state, "
                f"below {100 * ELBOW_FRACTION:.0f} %)"
                if share >= 0
                else " (one more state fits the held-out sessions less well)"
            )
    if not_needed:
        kneedle_or_falls = rule == "kneedle" or falls
        after = "fitted less well than the best" if kneedle_or_falls else "added less than that"
        where = "the best fit" if kneedle_or_falls else "the elbow"
        text += (
            f"; {', '.join(map(str, not_needed))} not fitted: the {stop_after} candidates after "
            f"{where} already {after}"
        )
    return text


def _with_skipped(
    table: pd.DataFrame, cands: list[int], n_features: int, params: Mapping[str, Any], cls: type
) -> pd.DataFrame:
    """The table of the fitted candidates with a NaN row for each skipped one (``fitted``)."""
    fitted = set(table["n_states"])
    out = table.set_index("n_states").reindex(cands).reset_index()
    out["within_tolerance"] = out["within_tolerance"].fillna(False).astype(bool)
    out["n_parameters"] = [_n_parameters(cls, k, n_features, params) for k in cands]
    out["fitted"] = [k in fitted for k in cands]
    return out


def _n_parameters(cls: type, k: int, d: int, params: Mapping[str, Any]) -> float:
    count = getattr(cls, "parameter_count", None)
    return np.nan if count is None else count(k, d, params.get("covariance_type", "full"))


def choose_n_states(
    X: np.ndarray,
    lengths: Sequence[int] | np.ndarray | None = None,
    candidates: Iterable[int] = range(3, 13),
    model_params: Mapping[str, Any] | None = None,
    random_state: int | None = 0,
    progress: bool = False,
    max_frames: int | None = QUICK_MAX_FRAMES,
    method: str = "hmm",
    stop_after: int | None = STOP_AFTER,
    rule: str = "elbow",
    heldout: str = "sessions",
    fit_rate: float | None = None,
    offset_scoring: str = "marginal",
) -> StateCountSelection:
    """The automatic state count of ``BehaviourModel``: the held-out elbow, fitted quickly.

    The count is read from the shape of the held-out curve, not from its fine detail, so the
    candidates are fitted cheaply and the chosen K is then refitted in full by the caller:

    - on a representative subsample of at most ``max_frames`` frames: one contiguous block
      from every session, its length proportional to the session's (whole sessions when the
      data are small);
    - each candidate with the method's ``quick_options`` (registry); for the HMM one restart
      (of 2 screened starting points), at most 25 EM iterations, on every frame of its
      training fold;
    - folds of whole sessions (alternating blocks inside the one session when there is one);
      ``rule="elbow"`` (module doc).

    20,000 frames (10,000 per fold, hundreds of bouts) and short fits keep this a fixed cost of
    a few seconds (benchmarks/bench_speed.py): on the 54,000-frame example study the 20 quick
    fits took 8 s of CPU (24 s with 100,000 frames, 50 iterations and 4 starting points) and
    chose 6 states (6 before).

    Parameters
    ----------
    X, lengths, candidates, random_state, progress, method : as :func:`select_n_states`.
    model_params : mapping, optional
        Parameters of the final model (the quick options override its fitting effort).
    max_frames : int or None
        Subsample size (None: every frame).
    stop_after : int or None
        Stop once the elbow lies this many fitted candidates below the last (see
        :func:`select_n_states`); None: fit every candidate.
    rule : {"elbow", "kneedle", "one_se"}
        How the held-out curve is read (module doc).
    heldout : {"sessions", "blocks"}
        Held-out units. "sessions": whole sequences (sessions, or animals of a session) are
        held out, so the curve asks how well states found in some animals fit others; with few
        sequences that differ (in body size, posture or tracking) the curve falls after a few
        states, whatever the behaviours. "blocks": blocks alternating inside every sequence
        (about n_frames/20 frames each), so both folds see every animal and the curve asks how
        well states found at some times fit other times. One sequence always uses blocks.
    fit_rate : float or None
        The quick fits' EM on thinned frames (``GaussianHMM(fit_rate=...)``); None: every
        frame, whatever the model's own ``fit_rate`` (the method's ``quick_options``).
    offset_scoring : {"map", "marginal"}
        How held-out units are scored with per-session offsets (:func:`select_n_states`).

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(0, 1, (600, 1)) + 8 * (np.arange(600)[:, None] // 50 % 2)
    >>> choose_n_states(X, [150] * 4, candidates=[1, 2, 3], model_params={"fps": 10.0}).best
    2
    """
    X, lengths = check_X_lengths(X, lengths)
    rng = np.random.default_rng(random_state)
    # One block per session (blocks as long as the whole budget), as many sessions as fit.
    X, lengths = take_blocks(X, lengths, max_frames, max_frames or len(X), rng)
    params = {**dict(model_params or {}), **get_segmenter(method).quick_options}
    if fit_rate is not None:
        params["fit_rate"] = fit_rate
    if heldout not in ("sessions", "blocks"):
        raise InputError(f"heldout must be 'sessions' or 'blocks'; got {heldout!r}")
    if len(lengths) < 2:
        heldout = "blocks"
    return select_n_states(
        X, lengths, candidates, "heldout", heldout, params, random_state, progress,
        rule=rule, method=method, stop_after=stop_after, offset_scoring=offset_scoring,
    )  # fmt: skip
