"""How reproducible are the states? Agreement between refits with different seeds and between
models fitted on two halves of the sessions.

Each fitted model labels *all* sessions, so two fits are compared on the same frames: overall by
the adjusted Rand index, per state by the Jaccard index of Hungarian-matched states. A motif that
comes back under another seed and from the other half of the data is worth naming; one that does
not is probably an artefact of the fit.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from ethoscribe.errors import InputError
from ethoscribe.segment._hmm_fit import in_threads
from ethoscribe.segment.agreement import adjusted_rand, match_states
from ethoscribe.segment.inputs import check_X_lengths


@dataclass(frozen=True)
class StabilityReport:
    """Result of :func:`stability_report`.

    ``table``: one row per state of the reference fit (the first seed) with ``state, occupancy,
    jaccard_seeds_mean, jaccard_seeds_min, jaccard_halves, reproducible``.
    ``summary``: ``n_states, seeds, ari_seeds_mean, ari_seeds_min, ari_halves, n_reproducible,
    reproducible_jaccard``. ``pairwise_ari``: seed x seed adjusted Rand indices.
    """

    table: pd.DataFrame
    summary: dict[str, Any]
    pairwise_ari: pd.DataFrame = field(repr=False)


def _halves(lengths: np.ndarray, rng: np.random.Generator) -> list[tuple[np.ndarray, np.ndarray]]:
    """Frame index arrays and lengths of two halves: sessions alternately after a shuffle, or
    the first and second half in time of a single session."""
    offsets = np.cumsum(lengths) - lengths
    if len(lengths) == 1:
        mid = int(lengths[0]) // 2
        return [(np.arange(mid), np.array([mid])),
                (np.arange(mid, lengths[0]), np.array([lengths[0] - mid]))]  # fmt: skip
    order = rng.permutation(len(lengths))
    out = []
    for part in (np.sort(order[0::2]), np.sort(order[1::2])):
        idx = np.concatenate([np.arange(offsets[s], offsets[s] + lengths[s]) for s in part])
        out.append((idx, lengths[part]))
    return out


def _n_states(model: Any, labels: np.ndarray) -> int:
    return int(getattr(model, "n_states_", labels.max() + 1))


def stability_report(
    make_model: Callable[[int], Any],
    X: np.ndarray,
    lengths: Sequence[int] | np.ndarray | None = None,
    seeds: Sequence[int] = (0, 1, 2),
    split_halves: bool = True,
    reproducible_jaccard: float = 0.5,
    progress: bool = False,
    n_jobs: int | None = None,
    reference: Any = None,
    half_models: Sequence[Any] = (),
    seed_models: Sequence[Any] = (),
    fit_on: tuple[np.ndarray, Sequence[int] | np.ndarray] | None = None,
    make_half_model: Callable[[int], Any] | None = None,
) -> StabilityReport:
    """Refit with several seeds (and on two halves of the sessions) and compare the labelings.

    Parameters
    ----------
    make_model : callable seed -> unfitted segmenter
        Anything with ``fit(X, lengths)`` and ``predict(X, lengths)``.
    X : array (n_frames, n_features); lengths : int array (n_sessions,), optional
    seeds : sequence of int
        The first seed's fit is the reference whose states the table lists.
    split_halves : bool
        Also fit on two halves of the sessions (shuffled with the first seed; a single
        session is split in time); each half's model labels all sessions.
    reproducible_jaccard : float
        A state is called reproducible when its mean Jaccard between seeds and its split-half
        Jaccard both reach this value (0.5: more shared frames than not, common practice).
    n_jobs : int or None
        Threads for the refits (None: every CPU); ``make_model`` must then be safe to call
        from several threads (a GaussianHMM is: its kernels release the GIL).
    reference : fitted segmenter, optional
        Used as the first seed's fit instead of a refit (e.g. the model being checked, so the
        table lists its own states).
    half_models : two fitted segmenters, optional
        Models already fitted on two disjoint halves of the sessions, used instead of
        refitting on two halves (with ``split_halves``). Fit them as the reference was: the
        automatic state count's quick fold fits (one restart, 25 iterations, 10,000 frames)
        agree less than full fits of the same halves (benchmarks/README.md, "Is the stability
        check a fair measurement?").
    seed_models : fitted segmenters, optional
        Fits of all of the data with other seeds, used in place of the refits with
        ``seeds[1]``, ``seeds[2]`` ... (as many as given). They should be fitted as the
        reference was, each the best of its own restarts: a restart that lost to the
        reference's best (one of its losing restarts) is not another seed's fit but one
        selected for a poorer optimum, and it agrees less (benchmarks/README.md, "Is the
        stability check a fair measurement?").
    fit_on : (X_fit, lengths_fit), optional
        The frames the refits are fitted on (e.g. every training frame of the model, of which
        ``X`` is a sample for the comparisons); the split halves are then halves of these
        sessions. Default: ``X`` and ``lengths``.
    make_half_model : callable seed -> unfitted segmenter, optional
        Makes the split halves' models (default ``make_model``), e.g. one that subsamples a
        half to half the frames the reference fit uses (a fit on a subsample of each half
        measured what fits of every frame of the halves measure: benchmarks/README.md, "Fast
        by default").

    Examples
    --------
    >>> from ethoscribe.segment.hmm import GaussianHMM
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(0, 1, (300, 1)) + 8 * (np.arange(300)[:, None] // 50 % 2)
    >>> rep = stability_report(lambda s: GaussianHMM(2, n_restarts=1, random_state=s), X,
    ...                        [150, 150], seeds=(0, 1))
    >>> rep.summary["n_reproducible"]
    2
    """
    X, lengths = check_X_lengths(X, lengths)
    seeds = [int(s) for s in seeds]
    if not seeds:
        raise InputError("seeds must contain at least one seed")
    half_models = list(half_models)
    if half_models and len(half_models) != 2:
        raise InputError(f"half_models must be two fitted models; got {len(half_models)}")
    fit_X, fit_lengths = (X, lengths) if fit_on is None else check_X_lengths(*fit_on)
    if fit_X.shape[1] != X.shape[1]:
        raise InputError(
            f"fit_on has {fit_X.shape[1]} features but X has {X.shape[1]}; pass the same columns"
        )
    rng = np.random.default_rng(seeds[0])
    halves = list(_halves(fit_lengths, rng)) if split_halves else []
    work: list[Any] = [(s, None, None) for s in seeds] + [(seeds[0], i, n) for i, n in halves]
    if reference is not None:
        work[0] = reference
    for i, given in enumerate(list(seed_models)[: len(seeds) - 1]):
        work[1 + i] = given
    if split_halves and half_models:
        work[len(seeds) :] = half_models
    bar = tqdm(total=len(work), desc="stability fits", disable=not progress)

    make_half = make_model if make_half_model is None else make_half_model

    def refit(job: Any) -> tuple[Any, np.ndarray]:
        if isinstance(job, tuple):
            seed, idx, sub_lengths = job
            if idx is None:
                model = make_model(seed).fit(fit_X, fit_lengths)
            else:
                model = make_half(seed).fit(fit_X[idx], sub_lengths)
        else:  # a model fitted already: it only labels
            model = job
        bar.update(1)
        return model, np.asarray(model.predict(X, lengths))

    # Independent seeded fits: on threads (n_jobs) they give what a serial loop gives.
    fits = in_threads(refit, work, n_jobs)
    labels = [lab for _, lab in fits[: len(seeds)]]
    n_states = _n_states(fits[0][0], labels[0])
    ref = labels[0]
    states = np.arange(n_states)
    ari = np.eye(len(seeds))
    for i in range(len(seeds)):
        for j in range(i + 1, len(seeds)):
            ari[i, j] = ari[j, i] = adjusted_rand(labels[i], labels[j])
    seed_jac = np.full((len(seeds) - 1, n_states), np.nan)
    for r, other in enumerate(labels[1:]):
        jac = match_states(ref, other).jaccard
        seed_jac[r] = jac.reindex(states).to_numpy()
    halves_jac = np.full(n_states, np.nan)
    ari_halves = np.nan
    if split_halves:
        a, b = (lab for _, lab in fits[len(seeds) :])
        ari_halves = adjusted_rand(a, b)
        map_a, map_b = match_states(ref, a).mapping, match_states(ref, b).mapping
        for s in states:
            sa, sb = map_a.get(int(s), -1), map_b.get(int(s), -1)
            in_a, in_b = (a == sa) & (sa >= 0), (b == sb) & (sb >= 0)
            union = (in_a | in_b).sum()
            halves_jac[s] = (in_a & in_b).sum() / union if union else np.nan
    bar.close()
    with np.errstate(all="ignore"):
        mean_seed = np.nanmean(seed_jac, axis=0) if len(seeds) > 1 else np.full(n_states, np.nan)
        min_seed = np.nanmin(seed_jac, axis=0) if len(seeds) > 1 else np.full(n_states, np.nan)
    checks = np.vstack([mean_seed, halves_jac])
    measured = ~np.isnan(checks)
    reproducible = measured.any(axis=0) & np.all(
        ~measured | (checks >= reproducible_jaccard), axis=0
    )
    occupancy = np.bincount(ref[ref >= 0], minlength=n_states)[:n_states] / max((ref >= 0).sum(), 1)
    table = pd.DataFrame(
        {
            "state": states,
            "occupancy": occupancy,
            "jaccard_seeds_mean": mean_seed,
            "jaccard_seeds_min": min_seed,
            "jaccard_halves": halves_jac,
            "reproducible": reproducible,
        }
    )
    off = ari[np.triu_indices(len(seeds), 1)]
    summary = {
        "n_states": int(n_states),
        "seeds": seeds,
        "ari_seeds_mean": float(off.mean()) if off.size else float("nan"),
        "ari_seeds_min": float(off.min()) if off.size else float("nan"),
        "ari_halves": float(ari_halves),
        "n_reproducible": int(reproducible.sum()),
        "reproducible_jaccard": float(reproducible_jaccard),
    }
    return StabilityReport(table, summary, pd.DataFrame(ari, index=seeds, columns=seeds))


HIGH_AGREEMENT, LOW_AGREEMENT = 0.8, 0.6


def reproducibility_grades(
    table: pd.DataFrame, high: float = HIGH_AGREEMENT, low: float = LOW_AGREEMENT
) -> pd.DataFrame:
    """Grade each state's reproducibility from its Jaccard agreements (a stability table).

    The grade uses the weaker of the mean agreement between seeds and the split-half agreement:
    ``high`` at or above ``high`` (0.8), ``moderate`` from ``low`` (0.6) to ``high``, ``low``
    below ``low``; ``flag`` says why a state needs a look (low split-half agreement: the two
    halves of the study do not find the same state; low agreement between seeds: refits do not).

    Examples
    --------
    >>> t = pd.DataFrame({"state": [0, 1, 2], "jaccard_seeds_mean": [.95, .9, .7],
    ...                   "jaccard_halves": [.9, .55, .75]})
    >>> reproducibility_grades(t)[["grade", "flag"]].values.tolist()
    [['high', ''], ['low', 'low split-half agreement (0.55 < 0.6)'], ['moderate', '']]
    """
    seeds = table["jaccard_seeds_mean"].to_numpy(np.float64)
    halves = table["jaccard_halves"].to_numpy(np.float64)
    worst = np.fmin(seeds, halves)
    grade = np.where(worst >= high, "high", np.where(worst >= low, "moderate", "low"))
    grade = np.where(np.isnan(worst), "not measured", grade)
    flags = []
    for s, h in zip(seeds, halves, strict=True):
        why = []
        if h < low:
            why.append(f"low split-half agreement ({h:.2f} < {low})")
        if s < low:
            why.append(f"low agreement between seeds ({s:.2f} < {low})")
        flags.append("; ".join(why))
    return table.assign(grade=grade, flag=flags)
