"""Fitting helpers of the Gaussian HMM: parameter checks, the fit subsample, initialisation,
the sticky transition matrix and the hmmlearn reference path."""

from __future__ import annotations

from collections.abc import Callable, Iterable
from concurrent.futures import ThreadPoolExecutor
from typing import Any, TypeVar

import numpy as np
from threadpoolctl import ThreadpoolController

from ethoscribe.checks import is_int, is_real
from ethoscribe.errors import InputError
from ethoscribe.segment._hmm_gaussian import (
    COVARIANCE_TYPES,
    GaussianEmission,
    e_step_buffers,
    frame_products,
    gaussian_e_step,
    gaussian_m_step,
    gaussian_posteriors,
    repair_covariances,
    statistics_from,
)
from ethoscribe.segment.sampling import take_blocks
from ethoscribe.system import available_cpus

_CONTROLLER: ThreadpoolController | None = None
T = TypeVar("T")

PROB_FLOOR = 1e-10  # smallest start/transition probability kept after an M-step
_KMEANS_MAX_FRAMES = 50_000
_MAX_RESEEDS = 3  # per state and restart
_EMPTY_FRAMES = 1.0  # a state with less expected frames than this is re-seeded
# Screening of starting points (``screened_start``): a short run per candidate on a subsample.
# Most of EM's gain comes in its first iterations: 10 iterations on 20,000 frames (a tenth of a
# 200,000-frame fit each) made poor optima rarer on the simulated studies (``hmm`` module doc).
# Blocks of 10 s from every session keep the subsample varied.
SCREEN_ITER = 10
SCREEN_FRAMES = 20_000
SCREEN_BLOCK_S = 10.0
SCREENINGS = ("each_restart", "once")  # GaussianHMM(screening=...): see screened_starts


def n_threads(n_jobs: int | None) -> int:
    """Threads for independent fits: ``n_jobs``, or every CPU this process may use (None)."""
    if n_jobs is None:
        return available_cpus()
    if int(n_jobs) < 1:
        raise InputError(f"n_jobs must be at least 1 (or None for every CPU); got {n_jobs!r}")
    return int(n_jobs)


def in_threads(func: Callable[[Any], T], items: Iterable[Any], n_jobs: int | None) -> list[T]:
    """``[func(i) for i in items]`` on up to ``n_jobs`` threads, results in input order.

    For independent fits (restarts, candidate state counts, stability refits): the numba
    kernels release the GIL and BLAS runs one thread per fit, so two fits use two cores. Each
    item carries its own seed, so the results equal the serial ones exactly.
    """
    items = list(items)
    workers = min(len(items), n_threads(n_jobs))
    if workers <= 1:
        return [func(i) for i in items]

    def run(item: Any) -> T:
        # OpenMP's thread count is per thread (k-means reads it): set it in each worker too.
        with one_thread():
            return func(item)

    # Held around the whole pool as well, so that no worker's exit restores the process-wide
    # BLAS limit while another worker still runs.
    with one_thread(), ThreadPoolExecutor(workers) as pool:
        return list(pool.map(run, items))


def one_thread():
    """Context limiting BLAS and OpenMP to one thread.

    Our products are small (chunks of a few thousand frames) and k-means runs on a subsample:
    on a shared 2-core machine one thread was 2-8x faster than two for these shapes, and it
    leaves the other core to other work. The controller (library discovery, ~40 ms) is built
    once.
    """
    global _CONTROLLER
    if _CONTROLLER is None:
        import sklearn.cluster  # noqa: F401  (loads the OpenMP runtime k-means uses)

        _CONTROLLER = ThreadpoolController()
    return _CONTROLLER.limit(limits=1)


def check_hmm_params(model: Any) -> None:
    """Validate the constructor parameters of a GaussianHMM; raise InputError naming the fix."""
    m = model
    fps_ok = is_real(m.fps) and m.fps > 0
    rules = [
        ("n_states", is_int(m.n_states) and m.n_states >= 1, "an int >= 1"),
        ("covariance_type", m.covariance_type in COVARIANCE_TYPES, f"one of {COVARIANCE_TYPES}"),
        ("fps", fps_ok, "> 0"),
        (
            "expected_bout_s",
            m.expected_bout_s is None
            or (fps_ok and is_real(m.expected_bout_s) and m.expected_bout_s * m.fps > 1),
            "None or longer than one frame (> 1/fps seconds)",
        ),
        (
            "persistence_strength",
            is_real(m.persistence_strength) and m.persistence_strength >= 0,
            ">= 0",
        ),
        ("n_restarts", is_int(m.n_restarts) and m.n_restarts >= 1, "an int >= 1"),
        ("n_iter", is_int(m.n_iter) and m.n_iter >= 1, "an int >= 1"),
        ("tol", is_real(m.tol) and m.tol >= 0, ">= 0"),
        ("min_covar", is_real(m.min_covar) and m.min_covar > 0, "> 0 (a covariance floor)"),
        ("init", m.init in ("kmeans", "random"), "'kmeans' or 'random'"),
        ("init_candidates", is_int(m.init_candidates) and m.init_candidates >= 1, "an int >= 1"),
        (
            "screening",
            getattr(m, "screening", "each_restart") in SCREENINGS,
            f"one of {SCREENINGS}",
        ),
        (
            "fit_max_frames",
            m.fit_max_frames is None or (is_int(m.fit_max_frames) and m.fit_max_frames >= 100),
            "None or an int >= 100",
        ),
        (
            "fit_rate",
            getattr(m, "fit_rate", None) is None
            or (is_real(m.fit_rate) and m.fit_rate > 0 and np.isfinite(m.fit_rate)),
            "None (every frame) or a rate > 0 in frames per second",
        ),
        (
            "full_rate_iter",
            is_int(getattr(m, "full_rate_iter", 0)) and getattr(m, "full_rate_iter", 0) >= 0,
            "an int >= 0",
        ),
        ("engine", m.engine in ("fast", "hmmlearn"), "'fast' or 'hmmlearn'"),
        (
            "session_offsets",
            isinstance(getattr(m, "session_offsets", False), bool | np.bool_)
            and not (getattr(m, "session_offsets", False) and m.engine == "hmmlearn"),
            "True or False (True needs engine='fast')",
        ),
        (
            "offset_columns",
            getattr(m, "offset_columns", None) is None
            or (
                not isinstance(m.offset_columns, str)
                and len(np.ravel(m.offset_columns)) > 0
                and all(is_int(c) and c >= 0 for c in np.ravel(m.offset_columns))
            ),
            "None or a non-empty list of column indices",
        ),
        (
            "n_jobs",
            getattr(m, "n_jobs", None) is None or (is_int(m.n_jobs) and m.n_jobs >= 1),
            "None or an int >= 1",
        ),
        (
            "random_state",
            m.random_state is None
            or (is_int(m.random_state) and m.random_state >= 0)
            or isinstance(m.random_state, np.random.Generator | np.random.RandomState),
            "None, an int >= 0 or a numpy.random.Generator",
        ),
    ]
    problems = [
        f"{name} must be {want}, got {getattr(m, name)!r}" for name, ok, want in rules if not ok
    ]
    if problems:
        msg = "GaussianHMM parameters: " + "; ".join(problems)
        raise InputError(msg)


def sticky_transmat(n_states: int, expected_bout_s: float | None, fps: float) -> np.ndarray:
    """Transition matrix with self-transition ``1 - 1/(expected_bout_s * fps)``, the rest spread
    evenly; uniform if ``expected_bout_s`` is None.

    Examples
    --------
    >>> sticky_transmat(2, 1.0, 10.0).round(3).tolist()
    [[0.9, 0.1], [0.1, 0.9]]
    """
    if n_states == 1:
        return np.ones((1, 1))
    if expected_bout_s is None:
        return np.full((n_states, n_states), 1.0 / n_states)
    stay = 1.0 - 1.0 / (expected_bout_s * fps)
    out = np.full((n_states, n_states), (1.0 - stay) / (n_states - 1))
    np.fill_diagonal(out, stay)
    return out


def _row_view(X: np.ndarray) -> np.ndarray:
    X = np.ascontiguousarray(X)
    return X.view(np.dtype((np.void, X.dtype.itemsize * X.shape[1]))).ravel()


def distinct_rows_at_least(X: np.ndarray, k: int) -> bool:
    """Whether ``X`` has at least ``k`` distinct rows (checks a head sample first)."""
    head = X[: 50 * k]
    if len(np.unique(_row_view(head))) >= k:
        return True
    return len(head) < len(X) and len(np.unique(_row_view(X))) >= k


def initial_means(X: np.ndarray, k: int, init: str, rng: np.random.Generator) -> np.ndarray:
    """Initial state means (k, D): k-means centres on a subsample, or random distinct frames."""
    n = len(X)
    idx = np.sort(rng.choice(n, size=min(n, _KMEANS_MAX_FRAMES), replace=False))
    sample = X[idx]
    if not distinct_rows_at_least(sample, k):
        sample = X
    if init == "random":
        order = rng.permutation(len(sample))
        _, first = np.unique(_row_view(sample[order]), return_index=True)
        return sample[order[np.sort(first)[:k]]].copy()
    from sklearn.cluster import KMeans

    km = KMeans(n_clusters=k, n_init=1, random_state=int(rng.integers(2**31 - 1)))
    return km.fit(sample).cluster_centers_.astype(np.float64)


def fit_with_hmmlearn(
    model: Any,
    X: np.ndarray,
    lengths: np.ndarray,
    sticky: np.ndarray,
    start_counts: np.ndarray,
    trans_counts: np.ndarray | float,
    rng: np.random.Generator,
) -> dict[str, Any]:
    """The reference path: hmmlearn's EM (scaling) with our sticky start and priors.

    hmmlearn expresses the covariance regularisation as a prior scatter: ``covars_prior =
    min_covar * I`` is added before dividing by the state's frame count, so this floor fades
    as ``min_covar / N_k`` (our own M-step adds ``min_covar * I`` after dividing).
    """
    from hmmlearn.hmm import GaussianHMM as ReferenceHMM

    K, D = int(model.n_states), X.shape[1]
    floor = float(model.min_covar)
    prior_cov = floor * (np.ones((K, D)) if model.covariance_type == "diag" else np.eye(D))
    if model.covariance_type == "full":
        prior_cov = np.broadcast_to(prior_cov, (K, D, D)).copy()
    ref = ReferenceHMM(
        n_components=K,
        covariance_type=model.covariance_type,
        min_covar=floor,
        startprob_prior=1.0 + start_counts,
        transmat_prior=1.0 + trans_counts * np.ones((K, K)),
        means_prior=0.0,
        means_weight=0.0,
        covars_prior=prior_cov,
        covars_weight=1.0,
        random_state=int(rng.integers(2**31 - 1)),
        n_iter=int(model.n_iter),
        tol=float(model.tol) * len(X),  # hmmlearn's tol is on the total log-likelihood
        params="stmc",
        init_params="mc",
        implementation="scaling",
    )
    ref.startprob_ = np.full(K, 1.0 / K)
    ref.transmat_ = sticky.copy()
    ref.fit(X, lengths)
    startprob, transmat = floor_probabilities(ref.startprob_, ref.transmat_)
    covars = repair_covariances(np.array(ref.covars_, dtype=np.float64), floor)
    means = np.array(ref.means_, dtype=np.float64)
    stats, _ = gaussian_e_step(
        X, lengths, startprob, transmat, means, covars, model.covariance_type
    )
    return {
        "means": means, "covars": covars, "startprob": startprob, "transmat": transmat,
        "log_likelihood": float(stats.log_likelihood.sum()) / len(X),
        "n_iter": int(ref.monitor_.iter), "converged": bool(ref.monitor_.converged),
        "occupancy": stats.post,
    }  # fmt: skip


def floor_probabilities(startprob: np.ndarray, transmat: np.ndarray):
    """Keep every start/transition probability >= PROB_FLOOR (renormalised): no -inf later."""
    startprob = np.maximum(np.asarray(startprob, dtype=np.float64), PROB_FLOOR)
    transmat = np.maximum(np.asarray(transmat, dtype=np.float64), PROB_FLOOR)
    return startprob / startprob.sum(), transmat / transmat.sum(axis=1, keepdims=True)


def fit_frames(X: np.ndarray, covariance_type: str) -> dict[str, Any]:
    """What every EM run on ``X`` reads besides its parameters, computed once for all of them
    (the short runs of a screening share one subsample; a fit's restarts share its frames):
    the covariance of all frames and, for full covariances, :func:`frame_products`."""
    cov = np.atleast_2d(np.cov(X.T))
    products = frame_products(X) if covariance_type == "full" else None
    return {"X": X, "cov": cov, "products": products}


def run_em(
    model, X, lengths, means, transmat, start_counts, trans_counts, bar, n_iter=None, start=None,
    shared=None, offsets=None,
) -> dict[str, Any]:  # fmt: skip
    """EM from ``means`` (shared global covariance, sticky ``transmat``) until the
    log-likelihood per frame gains less than ``model.tol`` or ``n_iter`` (default
    ``model.n_iter``) iterations; ``start`` (a result of an earlier run) resumes from its
    parameters instead. The returned log-likelihood and occupancy are those of the returned
    parameters. ``shared``: :func:`fit_frames` of this ``X`` (computed here if not given).
    ``offsets``: per-session offsets (``session_offsets.OffsetStep``): every E-step reads the
    frames minus their session's offset, and every M-step is followed by the offset step."""
    K, D = means.shape
    ct, floor = model.covariance_type, float(model.min_covar)
    n_iter = int(model.n_iter if n_iter is None else n_iter)
    if shared is None or shared["X"] is not X:
        shared = fit_frames(X, ct)
    global_cov = shared["cov"] + floor * np.eye(D)
    if ct == "diag":
        global_cov = np.diag(np.diag(global_cov))
    covars = np.repeat(global_cov[None], K, axis=0)
    startprob, transmat, sticky = np.full(K, 1.0 / K), transmat.copy(), transmat
    if start is not None:
        means, covars = start["means"].copy(), start["covars"].copy()
        startprob, transmat = start["startprob"].copy(), start["transmat"].copy()
    # the frames move with the offsets: no products kept for them
    products = shared["products"] if offsets is None else None
    if offsets is not None:
        offsets.begin(covars, start)
    reseeds = np.zeros(K, dtype=int)
    prev, converged, n_done = -np.inf, False, 0
    work = e_step_buffers(len(X), K)
    for it in range(n_iter + 1):
        Xc = X if offsets is None else offsets.frames(X)
        fb = gaussian_posteriors(Xc, lengths, startprob, transmat, means, covars, ct, work)
        ll = float(fb.log_likelihood.sum()) / len(X)
        if not np.isfinite(ll):
            msg = (
                "the HMM log-likelihood became non-finite; features may contain extreme "
                "values: standardise them (e.g. z-scores) or raise min_covar"
            )
            raise InputError(msg)
        bar.set_postfix(iteration=it, ll_per_frame=f"{ll:.4f}", refresh=False)
        if (it > 0 and ll - prev < model.tol) or it == n_iter:
            converged = it > 0 and ll - prev < model.tol
            occupancy = fb.gamma.sum(axis=0)  # the statistics' post; no M-step follows
            break
        stats = statistics_from(Xc, fb, ct, products)
        prev, old = ll, (means, covars)
        new = gaussian_m_step(stats, ct, floor, start_counts, trans_counts)
        empty = np.flatnonzero(stats.post < _EMPTY_FRAMES)
        if len(empty):
            if (reseeds[empty] < _MAX_RESEEDS).any():
                prev = -np.inf  # a re-seed may lower the likelihood for a step: go on
            new = _reseed(Xc, empty, reseeds, old, new, global_cov, sticky, ct)
        startprob, transmat, means, covars = new
        startprob, transmat = floor_probabilities(startprob, transmat)
        covars = repair_covariances(covars, floor)
        if offsets is not None:  # ECM: the offsets from the same posteriors, new parameters
            means = offsets.step(X, fb.gamma, lengths, means, covars, stats.post)
        n_done += 1
    result = {
        "means": means, "covars": covars, "startprob": startprob, "transmat": transmat,
        "log_likelihood": ll, "n_iter": n_done, "converged": converged, "occupancy": occupancy,
    }  # fmt: skip
    return result if offsets is None else {**result, **offsets.result()}


def screened_start(
    model, X, lengths, K, sticky, start_counts, persistence, rng, bar
) -> dict[str, Any]:
    """The best of ``model.init_candidates`` starting points after a short EM run each.

    Short runs of EM from many starts, keeping the one of highest likelihood, find better
    optima than as many full runs from single starts for the same cost (Biernacki, Celeux &
    Govaert 2003, "Choosing starting values for the EM algorithm..."). Every candidate gets
    ``SCREEN_ITER`` iterations on the same subsample of at most ``SCREEN_FRAMES`` frames
    (contiguous blocks of ``SCREEN_BLOCK_S`` seconds from every session), so their
    likelihoods are comparable. ``persistence`` is the prior weight per state and frame
    (``trans_counts = persistence * n_frames * sticky``).

    Returns the parameters of the best candidate (as ``run_em`` returns them). This is the
    screening of every restart (``screening="each_restart"``): ``screened_starts`` keeping
    one; with more, it screens once for all restarts.
    """
    args = (model, X, lengths, K, sticky, start_counts, persistence, rng, bar)
    return screened_starts(*args, n_keep=1)[0]


def screened_starts(
    model, X, lengths, K, sticky, start_counts, persistence, rng, bar, n_keep, n_jobs=1
) -> list[dict[str, Any]]:
    """The ``n_keep`` best of ``model.init_candidates`` distinct starting points after one
    shared screening (``screening="once"``), best first.

    The candidates are drawn and screened as in ``screened_start`` (same subsample, same
    short runs, same random stream: with ``n_keep=1`` the best is the one ``screened_start``
    returns), but once for the whole fit: each restart continues one of the best screened
    candidates instead of screening ``init_candidates`` of its own. This is the "several
    short runs, then the best few run to convergence" form of the short-runs strategy
    (Biernacki, Celeux & Govaert 2003): a fit of ``n_restarts`` restarts screens
    ``init_candidates`` starts instead of ``n_restarts * init_candidates``.

    Candidates whose initial means are the same states as an earlier candidate's (k-means
    from another seed often ends in the same partition; compared up to the order of the
    states) are dropped before their short run: EM from them is the same computation, and a
    restart continuing a copy would only repeat another. So fewer than ``n_keep`` may be
    returned when the candidates hold fewer distinct starts. The short runs are independent
    and run on up to ``n_jobs`` threads (the result does not depend on it).
    """
    Xs, sub = _screening_sample(model, X, lengths, rng)
    trans_counts = persistence * len(Xs) * sticky
    starts: list[np.ndarray] = []
    for _ in range(int(model.init_candidates)):
        means = initial_means(Xs, K, model.init, rng)
        if not any(same_states(means, other) for other in starts):
            starts.append(means)

    shared = fit_frames(Xs, model.covariance_type)

    def short_run(means: np.ndarray) -> dict[str, Any]:
        return run_em(
            model, Xs, sub, means, sticky, start_counts, trans_counts, bar, SCREEN_ITER,
            shared=shared,
        )  # fmt: skip

    results = in_threads(short_run, starts, n_jobs)
    # best first; equal likelihoods keep the order of drawing (as screened_start's strict >)
    order = sorted(range(len(results)), key=lambda i: -results[i]["log_likelihood"])
    return [results[i] for i in order[: int(n_keep)]]


def same_states(a: np.ndarray, b: np.ndarray, rtol: float = 1e-7) -> bool:
    """Whether two sets of state means (K, D) are equal up to the order of the states.

    Each row of ``a`` is matched to its nearest row of ``b`` (a permutation is required:
    every row of ``b`` matched once); equal within ``rtol`` of the largest absolute mean.

    Examples
    --------
    >>> same_states(np.array([[0.0, 1.0], [2.0, 3.0]]), np.array([[2.0, 3.0], [0.0, 1.0]]))
    True
    >>> same_states(np.array([[0.0, 1.0], [2.0, 3.0]]), np.array([[2.0, 3.0], [0.0, 1.5]]))
    False
    """
    a, b = np.asarray(a, dtype=np.float64), np.asarray(b, dtype=np.float64)
    if a.shape != b.shape:
        return False
    tol = rtol * max(1.0, float(np.abs(a).max(initial=0.0)), float(np.abs(b).max(initial=0.0)))
    dist = np.abs(a[:, None, :] - b[None, :, :]).max(axis=2)  # (K, K) largest coordinate gap
    nearest = dist.argmin(axis=1)
    return len(np.unique(nearest)) == len(a) and bool(
        (dist[np.arange(len(a)), nearest] <= tol).all()
    )


def _screening_sample(model, X, lengths, rng):
    """The screening subsample: at most ``SCREEN_FRAMES`` frames in blocks of
    ``SCREEN_BLOCK_S`` seconds from every session. On thinned frames (``fit_rate``: the
    model's ``_em_stride`` > 1) the same span of time, so ``stride`` times fewer frames."""
    stride = int(getattr(model, "_em_stride", 1))
    block = max(30 // stride, round(SCREEN_BLOCK_S * model.fps))
    return take_blocks(X, lengths, SCREEN_FRAMES // stride, block, rng)


# --- fitting on thinned frames (GaussianHMM(fit_rate=...)) ------------------------------------
def fit_stride(fps: float, fit_rate: float | None) -> int:
    """Every how many frames EM reads for ``fit_rate`` frames per second: the largest whole
    stride whose thinned rate is still at least ``fit_rate`` (1: every frame).

    Examples
    --------
    >>> [fit_stride(fps, 10.0) for fps in (30.0, 25.0, 120.0, 8.0)]
    [3, 2, 12, 1]
    """
    if fit_rate is None:
        return 1
    return max(1, int(np.floor(float(fps) / float(fit_rate) + 1e-9)))


def thin_frames(X: np.ndarray, lengths: np.ndarray, stride: int) -> tuple[np.ndarray, np.ndarray]:
    """Every ``stride``-th frame of every sequence (from its first), and the new lengths.

    Examples
    --------
    >>> X, n = thin_frames(np.arange(7.0)[:, None], np.array([4, 3]), 2)
    >>> X.ravel().tolist(), n.tolist()
    ([0.0, 2.0, 4.0, 6.0], [2, 2])
    """
    lengths = np.asarray(lengths, dtype=np.int64)
    if stride == 1:
        return X, lengths
    offsets = np.cumsum(lengths) - lengths
    pieces = [np.arange(o, o + n, stride) for o, n in zip(offsets, lengths, strict=True)]
    idx = np.concatenate(pieces)
    return X[idx], -(-lengths // stride)


def transition_root(transmat: np.ndarray, steps: int) -> np.ndarray:
    """The one-frame transition matrix of a chain whose ``steps``-frame matrix is ``transmat``.

    The principal ``steps``-th root (``scipy.linalg.fractional_matrix_power``, Schur-Pade,
    Higham & Lin 2011): the matrix ``R`` with ``R ** steps = transmat`` whose eigenvalues are
    the principal roots. A stochastic matrix need not have a stochastic root (the embedding
    problem): a rare transition made mostly through a third state comes out slightly
    negative, and a state held for less than about two of the thinned frames can have a
    negative eigenvalue and no real root. Then the real part is taken, negative entries are
    set to 0 and every row renormalised (the simplest regularisation of Kreinin & Sidelnikova
    2001, "Regularization algorithms for transition matrices"), and every probability kept
    at least ``PROB_FLOOR``. The result is only a starting point of full-rate EM or a
    time-scale conversion of a fitted chain; it stays a transition matrix either way.
    """
    A = np.asarray(transmat, dtype=np.float64)
    if steps == 1:
        return A.copy()
    from scipy.linalg import fractional_matrix_power

    with np.errstate(all="ignore"):
        root = np.real(fractional_matrix_power(A, 1.0 / steps))
    if not np.isfinite(root).all():  # no usable root: the first-order one, I + (A - I)/steps
        root = np.eye(len(A)) + (A - np.eye(len(A))) / steps
    root = np.clip(root, 0.0, None)
    root /= root.sum(axis=1, keepdims=True)
    return floor_probabilities(np.full(len(A), 1.0 / len(A)), root)[1]


def _reseed(X, empty, reseeds, old, new, global_cov, sticky, covariance_type):
    """Move empty states onto the worst-explained frames, with the global covariance and the
    sticky transitions in and out (after 3 tries: keep the state where it was)."""
    old_means, old_covars = old
    startprob, transmat, means, covars = new
    log_b = GaussianEmission(old_means, old_covars, covariance_type).log_likelihood(X)
    worst = np.argsort(log_b.max(axis=1), kind="stable")[: len(empty)]
    for k, t in zip(empty, worst, strict=True):
        if reseeds[k] < _MAX_RESEEDS:
            means[k], covars[k] = X[t], global_cov
            transmat[k] = sticky[k]
            transmat[:, k] = np.maximum(transmat[:, k], sticky[:, k])
            startprob[k] = max(startprob[k], 1.0 / len(startprob))
            reseeds[k] += 1
        else:
            means[k], covars[k] = old_means[k], old_covars[k]
    transmat /= transmat.sum(axis=1, keepdims=True)
    return startprob / startprob.sum(), transmat, means, covars
