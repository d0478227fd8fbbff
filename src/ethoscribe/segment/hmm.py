"""Gaussian hidden Markov model over frames of many sessions, with a persistence prior.

Fitting is Baum-Welch (EM) with a MAP M-step: the transition rows get a Dirichlet prior centred
on a "sticky" matrix whose self-transition ``p = 1 - 1/(expected_bout_s * fps)`` matches the bout
duration the scientist expects (a geometric duration with mean ``expected_bout_s``). The prior is
worth ``persistence_strength * n_fit_frames / n_states`` pseudo-transitions per row (hmmlearn's
``transmat_prior`` minus one): with the default 0.5 an average state's row weighs its own
observed transitions 2 : 1 against the prior, whatever the amount of data. On glitchy simulated
data it cut spurious short bouts without lowering agreement with the truth (tests). The same
sticky matrix starts every restart.

Starting points: each restart screens ``init_candidates`` k-means starts by a short EM run on a
small subsample and continues the best (``_hmm_fit.screened_start``). On the simulated example
study (7 states, 16 compact features, 8 seeds of one restart) single k-means starts ended in a
poor optimum (0.5-0.7 nats per frame below the best, agreement with the truth 0.62-0.69
instead of 0.81) in 3 of 8 seeds, 8 screened starts in 1 of 8 and 16 in none.

Large data: EM runs on a representative subsample of whole contiguous blocks drawn from every
session (``sampling.representative_blocks``); decoding always covers every frame.

After fitting, states are ordered by decreasing occupancy (time budget), ties by lexicographic
means, so refits with the same seed and data give identical arrays.
"""

from __future__ import annotations

import copy
from collections.abc import Mapping, Sequence
from functools import partial
from typing import Any

import numpy as np
from sklearn.base import BaseEstimator
from tqdm.auto import tqdm

from ethoscribe.checks import int_between, is_real, seed_from
from ethoscribe.errors import InputError
from ethoscribe.saved_state import check_header, header
from ethoscribe.segment import duration
from ethoscribe.segment._hmm_fit import (
    check_hmm_params,
    distinct_rows_at_least,
    fit_frames,
    fit_stride,
    fit_with_hmmlearn,
    floor_probabilities,
    in_threads,
    initial_means,
    one_thread,
    run_em,
    screened_start,
    screened_starts,
    sticky_transmat,
    thin_frames,
    transition_root,
)
from ethoscribe.segment._hmm_gaussian import GaussianEmission, marginal_emission
from ethoscribe.segment._hmm_kernels import forward_backward_log, forward_filter_log, viterbi_log
from ethoscribe.segment.inputs import check_fitted, check_X_lengths
from ethoscribe.segment.postprocess import order_states_by_occupancy
from ethoscribe.segment.sampling import take_session_blocks
from ethoscribe.segment.session_offsets import (
    OFFSET_SCORINGS,
    label_offsets,
    marginal_log_likelihood,
    offset_columns,
    run_offset_em,
)

FORMAT_VERSION = 1
_DECODE_BATCH = 2**18  # frames decoded together (bounds the T x K work buffers)


def _batches(lengths: np.ndarray):
    """Consecutive groups of whole sessions of about ``_DECODE_BATCH`` frames."""
    ends = np.cumsum(lengths)
    first = 0
    while first < len(lengths):
        base = ends[first - 1] if first else 0
        last = max(first + 1, int(np.searchsorted(ends, base + _DECODE_BATCH, side="right")))
        yield int(base), int(ends[last - 1]), lengths[first:last]
        first = last


def _batches_with_rows(lengths: np.ndarray, rows: np.ndarray | None):
    """:func:`_batches` with each batch's rows of the per-session array ``rows`` (None: None)."""
    first = 0  # the batch's first session
    for a, b, sub in _batches(lengths):
        yield a, b, sub, None if rows is None else rows[first : first + len(sub)]
        first += len(sub)


def frames_needed(n_states: int, n_features: int, covariance_type: str = "full") -> int:
    """Fewest frames a fit of ``n_states`` Gaussian states can be trusted with.

    The sample covariance of ``n`` frames has rank at most ``n - 1``, so a full covariance of
    ``D`` features is singular (held up only by ``min_covar``) unless its state owns at least
    ``D + 1`` frames: ``n_states * (D + 1)`` is the common lower limit. A diagonal covariance
    needs 2 frames per state.

    Examples
    --------
    >>> frames_needed(3, 4), frames_needed(3, 4, "diag")
    (15, 6)
    """
    per_state = int(n_features) + 1 if covariance_type == "full" else 2
    return int(n_states) * per_state


def parameter_count(n_states: int, n_features: int, covariance_type: str = "full") -> int:
    """Free parameters of a Gaussian HMM: start (K-1) + transitions K(K-1) + means KD +
    covariances (KD(D+1)/2 full, KD diagonal), as hmmlearn counts them for its BIC.

    Examples
    --------
    >>> parameter_count(2, 1)
    7
    """
    K, D = int(n_states), int(n_features)
    cov = K * D * (D + 1) // 2 if covariance_type == "full" else K * D
    return (K - 1) + K * (K - 1) + K * D + cov


class GaussianHMM(BaseEstimator):
    """Gaussian HMM segmenter (scikit-learn conventions; ``__init__`` only stores parameters).

    Parameters
    ----------
    n_states : int
        Number of hidden states K.
    covariance_type : {"full", "diag"}
        Covariance of each state's Gaussian. ``covars_`` is always stored as (K, D, D).
    expected_bout_s : float or None
        Expected bout duration in seconds: sets the sticky self-transition
        ``p = 1 - 1/(expected_bout_s * fps)`` of the initial matrix and of the prior.
        ``None``: uniform initial transitions and no transition prior.
    fps : float
        Frame rate of the features.
    persistence_strength : float
        Weight of the transition prior as a fraction of an average state's frames
        (pseudo-transitions per row = ``persistence_strength * n_fit_frames / n_states``).
        0 disables the prior but keeps the sticky start.
    n_restarts : int
        EM runs from different seeds; the best log-likelihood wins.
    n_iter : int
        Maximum EM iterations per restart.
    tol : float
        Stop when the log-likelihood per frame improves by less than ``tol``.
    min_covar : float
        Covariance floor added to the diagonal after every M-step (in feature units squared;
        features should be standardised). Reported as ``covariance_floor_``.
    init : {"kmeans", "random"}
        Initial means: k-means (``n_init=1``, different seed per restart, on a subsample) or
        random distinct frames.
    init_candidates : int
        Starting points screened per restart: each gets a short EM run (10 iterations on a
        subsample of at most 20,000 frames) and the best continues to convergence
        (``_hmm_fit.screened_start``). 1: no screening, EM starts from one set of initial
        means. The default 8 costs less than one full restart (80 iterations on 20,000
        frames against 10-50 on up to 200,000) and made poor optima rarer (module doc).
    screening : {"each_restart", "once"}
        "each_restart": every restart screens ``init_candidates`` starting points of its own
        and continues its best. "once": one screening of ``init_candidates`` for the whole
        fit, and the restarts continue its ``n_restarts`` best distinct candidates
        (``_hmm_fit.screened_starts``; copies of a candidate are dropped, so fewer restarts
        run when fewer distinct starts were drawn): ``n_restarts`` times less screening.
        With one restart both give the same fit.
    fit_max_frames : int or None
        Fit on a representative subsample of about this many frames when the data are larger:
        every session gives a share proportional to its length, as contiguous blocks of at
        most 60 s placed at random inside equal slices of the session (see
        ``sampling.representative_blocks``). ``None``: always fit on everything.
    fit_rate : float or None
        Frames per second EM reads: every ``s``-th frame of the fit data, the largest whole
        ``s`` keeping at least this rate (``_hmm_fit.fit_stride``; ``s = 3`` for 10 at 30
        fps). The thinned fit is an HMM of its own rate: sticky start and prior at
        ``fps / s`` (``p = 1 - s/(expected_bout_s * fps)``, the prior's weight from the
        thinned frame count). The starting points are screened on every frame of the usual
        screening sample (``thin_screening``) and continued on the thinned frames. Its
        transition matrix is then taken to one frame by the principal ``s``-th root
        (``_hmm_fit.transition_root``) and EM continues on every frame for at most
        ``full_rate_iter`` iterations, so the fitted model is a model of every frame
        whatever the option. Consecutive frames of windowed features are nearly
        the same frame, so the thinned E-steps see most of what the full ones see at ``1/s``
        of the cost. None (default): EM on every frame. The stride is lowered when the
        thinned frames would be too few for the states (``frames_needed``). The model's
        "hmm" method sets 15 with ``thin_screening=True`` (segment.registry): on the
        validation bench at three seeds mean ARI 0.575 -> 0.580 and boundary F1 0.465 ->
        0.474, and discover's final fit and stability refits took 40-60 % less CPU at 54,000
        frames; 10 lost 0.12 ARI on the independent simulator (25 fps thinned to 12.5)
        (benchmarks/README.md, "EM on thinned frames").
    thin_screening : bool
        With ``fit_rate``: screen the starting points on the thinned frames as well (the same
        span of time in ``s`` times fewer frames). False: screened on every frame of the
        screening sample and continued on thinned ones, EM reached the full fit's optima seed
        by seed but saved only 5-20 % (the screening costs as much as the EM after it).
        True (the "hmm" method's setting) halves the cost again; single fits then land in
        other optima where the frame rate is an upsampling (the validation bench's
        BasicMotions: 2.92 against 3.23 nats per frame in 5 of 8 seeds), yet the bench's
        labels did not lose (benchmarks/README.md, "EM on thinned frames").
    full_rate_iter : int
        With ``fit_rate``: most EM iterations on every frame after the thinned fit (it stops
        earlier at ``tol``; at most ``n_iter``). 0: the thinned fit's states with the rooted
        transitions (one E-step on every frame gives the log-likelihood).
    engine : {"fast", "hmmlearn"}
        Own numba/BLAS kernels, or hmmlearn's EM (reference path). Decoding is always fast.
    n_jobs : int or None
        Threads for the restarts (None: every CPU). Each restart has its own seed, so the
        result does not depend on it.
    random_state : int, numpy.random.Generator or None
        Seed of the restarts and subsamples; a generator gives one seed per fit
        (``random_seed_``, what :meth:`to_state` records).
    progress : bool
        Show a progress bar over restarts and iterations.
    session_offsets : bool
        Give every session (sequence of ``lengths``) an offset ``b_s`` added to every state's
        mean, estimated inside EM with a shrinkage prior whose spread EM estimates too
        (:mod:`ethoscribe.segment.session_offsets`): states describe behaviours, not where a
        sensor sat on an individual. Labelling estimates each session's offset with the
        fitted parameters fixed; the causal path (:meth:`filter`, streaming) uses offset 0.
        Own EM only (``engine="fast"``).
    offset_columns : sequence of int or None
        Feature columns that carry offsets (None: all).

    Attributes
    ----------
    means_ (K, D), covars_ (K, D, D), startprob_ (K,), transmat_ (K, K), n_states_,
    n_features_in_, log_likelihood_ (per frame of the fit data, best restart; with
    ``fit_rate``, of every frame of it), fit_stride_ (every how many frames EM first read),
    restart_log_likelihoods_ (n_restarts, or fewer with ``screening="once"``; then one per
    ``init_models``), n_iter_ (thinned and full-rate iterations together), converged_,
    covariance_floor_, n_fit_frames_, random_seed_; with ``session_offsets``:
    ``session_offsets_`` (n_sessions, D) of the fitted sessions, ``offset_columns_``,
    ``offset_spread_`` and ``offset_precision_`` (the prior precision of a session's offset
    on those columns).

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> X = np.r_[rng.normal(0, 1, (200, 2)), rng.normal(6, 1, (200, 2))]
    >>> hmm = GaussianHMM(n_states=2, n_restarts=1).fit(X)
    >>> np.bincount(hmm.predict(X)).tolist()
    [200, 200]
    """

    def __init__(
        self,
        n_states: int = 8,
        covariance_type: str = "full",
        expected_bout_s: float | None = 1.0,
        fps: float = 30.0,
        persistence_strength: float = 0.5,
        n_restarts: int = 4,
        n_iter: int = 100,
        tol: float = 1e-4,
        min_covar: float = 1e-3,
        init: str = "kmeans",
        init_candidates: int = 8,
        screening: str = "each_restart",
        fit_max_frames: int | None = 200_000,
        fit_rate: float | None = None,
        full_rate_iter: int = 100,
        thin_screening: bool = False,
        n_jobs: int | None = None,
        engine: str = "fast",
        random_state: int | None = 0,
        progress: bool = False,
        session_offsets: bool = False,
        offset_columns: Sequence[int] | None = None,
    ):
        self.n_states = n_states
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
        self.fit_rate = fit_rate
        self.full_rate_iter = full_rate_iter
        self.thin_screening = thin_screening
        self.n_jobs = n_jobs
        self.engine = engine
        self.random_state = random_state
        self.progress = progress
        self.session_offsets = session_offsets
        self.offset_columns = offset_columns

    # The state-count choice reads these from the class (see segment.select).
    frames_needed = staticmethod(frames_needed)
    parameter_count = staticmethod(parameter_count)

    # ----------------------------------------------------------------------------- fitting
    def fit(
        self,
        X: np.ndarray,
        lengths: Sequence[int] | np.ndarray | None = None,
        init_models: Sequence[GaussianHMM] = (),
    ) -> GaussianHMM:
        """Fit by EM on ``X (n_frames, n_features)`` of sessions with ``lengths``.

        ``init_models``: fitted models of the same state and feature counts (e.g. the
        automatic state count's quick fits of the chosen count). Each adds a restart that
        starts EM from its parameters (means, covariances, start and transition
        probabilities; own EM, whatever the ``engine``) beside the ``n_restarts`` usual ones;
        from a good start it needs few iterations. The best log-likelihood of all wins.
        """
        check_hmm_params(self)
        X, lengths = check_X_lengths(X, lengths)
        K = int(self.n_states)
        starts = [_start_from(m, K, X.shape[1]) for m in init_models]
        seed = seed_from(self.random_state)
        seeds = np.random.SeedSequence(seed).spawn(self.n_restarts + 1)
        block = max(100, round(60.0 * self.fps))
        rng_blocks = np.random.default_rng(seeds[0])
        # One session: an offset is a shift of every state mean, nothing to estimate
        with_offsets = self.session_offsets and len(lengths) >= 2
        columns = offset_columns(self.offset_columns, X.shape[1]) if self.session_offsets else None
        X_fit, fit_lengths, fit_sessions = take_session_blocks(
            X, lengths, self.fit_max_frames, block, rng_blocks
        )
        em = partial(run_offset_em, sequence_session=fit_sessions) if with_offsets else run_em
        # the frames move with the offsets: their products would never be read
        frames_kind = "diag" if with_offsets else self.covariance_type
        needed = frames_needed(K, X.shape[1], self.covariance_type)
        if len(X_fit) < needed:
            per_state = needed // K
            msg = (
                f"n_states={K} is more states than {len(X_fit)} frames of {X.shape[1]} features "
                f"can support: each {self.covariance_type}-covariance state needs at least "
                f"{per_state} frames ({needed} in all), or its covariance is singular. Lower "
                f"n_states to at most {max(1, len(X_fit) // per_state)}, pass more data"
                + (", or use covariance_type='diag'" if self.covariance_type == "full" else "")
            )
            raise InputError(msg)
        if not distinct_rows_at_least(X_fit, K):
            msg = (
                f"n_states={K} is more than the number of distinct frames in the data "
                f"({len(X_fit)} frames used for fitting); lower n_states or pass more data"
            )
            raise InputError(msg)
        offset = X_fit.mean(axis=0)
        X_fit = X_fit - offset  # centred: better conditioned sufficient statistics
        n_fit = len(X_fit)
        # EM on every stride-th frame (fit_rate), then EM at the full rate from its result
        stride, X_em, em_lengths = _usable_stride(
            X_fit, fit_lengths, fit_stride(self.fps, self.fit_rate), needed, K
        )
        thin = self if stride == 1 else _at_stride(self, stride)  # the model of the thinned rate
        sticky = sticky_transmat(K, self.expected_bout_s, thin.fps)
        start_counts = np.full(K, 1.0 / K)  # one pseudo-sequence spread over the states
        persistence = 0.0 if self.expected_bout_s is None else (self.persistence_strength / K)
        trans_counts = _prior_counts(self, len(X_em), sticky)
        if stride > 1:
            starts = [
                {**s, "transmat": np.linalg.matrix_power(s["transmat"], stride)} for s in starts
            ]
        bar = tqdm(
            total=self.n_restarts + len(starts), desc="HMM restarts", disable=not self.progress
        )
        n_usual, screened = self.n_restarts, []
        if self.engine == "fast" and self.init_candidates > 1 and self.screening == "once":
            # one screening for every restart, on restart 0's random stream; on every frame
            # unless thin_screening (then on the thinned ones, at their rate)
            on_thinned = stride == 1 or self.thin_screening
            with one_thread():
                screened = screened_starts(
                    thin if on_thinned else self, X_em if on_thinned else X_fit,
                    em_lengths if on_thinned else fit_lengths, K,
                    sticky if on_thinned else sticky_transmat(K, self.expected_bout_s, self.fps),
                    start_counts, persistence, np.random.default_rng(seeds[1]), bar,
                    self.n_restarts, self.n_jobs,
                )  # fmt: skip
            if not on_thinned:
                screened = [
                    {**c, "transmat": np.linalg.matrix_power(c["transmat"], stride)}
                    for c in screened
                ]
            n_usual = len(screened)
            bar.total = n_usual + len(starts)
        n_runs = n_usual + len(starts)
        # the frames' covariance and products, once for every restart's EM on X_em
        own_em = self.engine == "fast" or starts
        shared = fit_frames(X_em, frames_kind) if own_em else None
        full_rate, polish = None, min(int(self.full_rate_iter), int(self.n_iter))
        if stride > 1:
            full_sticky = sticky_transmat(K, self.expected_bout_s, self.fps)
            full_rate = {
                "sticky": full_sticky,
                "trans_counts": _prior_counts(self, n_fit, full_sticky),
                "shared": fit_frames(X_fit, frames_kind),
            }

        def thinned(r: int) -> dict[str, Any]:
            if r >= n_usual:  # warm start: EM from a fitted model's parameters
                given = starts[r - n_usual]
                start = {**given, "means": given["means"] - offset}
                return em(
                    thin, X_em, em_lengths, start["means"], sticky, start_counts,
                    trans_counts, bar, start=start, shared=shared,
                )  # fmt: skip
            rng = np.random.default_rng(seeds[r + 1])
            if screened:  # continue the r-th best candidate of the shared screening
                return em(
                    thin, X_em, em_lengths, screened[r]["means"], sticky, start_counts,
                    trans_counts, bar, start=screened[r], shared=shared,
                )  # fmt: skip
            if self.engine == "hmmlearn":
                return fit_with_hmmlearn(
                    thin, X_em, em_lengths, sticky, start_counts, trans_counts, rng
                )
            if self.init_candidates > 1 and (self.thin_screening or full_rate is None):
                start = screened_start(
                    thin, X_em, em_lengths, K, sticky, start_counts, persistence, rng, bar
                )
                return em(
                    thin, X_em, em_lengths, start["means"], sticky, start_counts,
                    trans_counts, bar, start=start, shared=shared,
                )  # fmt: skip
            if self.init_candidates > 1:  # screened on every frame, continued on thinned ones
                start = screened_start(
                    self, X_fit, fit_lengths, K, full_rate["sticky"], start_counts, persistence,
                    rng, bar,
                )  # fmt: skip
                start = {**start, "transmat": np.linalg.matrix_power(start["transmat"], stride)}
                return em(
                    thin, X_em, em_lengths, start["means"], sticky, start_counts,
                    trans_counts, bar, start=start, shared=shared,
                )  # fmt: skip
            means = initial_means(X_em, K, self.init, rng)
            return em(
                thin, X_em, em_lengths, means, sticky, start_counts, trans_counts, bar,
                shared=shared,
            )  # fmt: skip

        def restart(r: int) -> dict[str, Any]:
            res = thinned(r)
            if full_rate is not None:  # the full-rate model: EM on every frame from res
                start = {**res, "transmat": transition_root(res["transmat"], stride)}
                iterations = res["n_iter"]
                res = em(
                    self, X_fit, fit_lengths, start["means"], full_rate["sticky"], start_counts,
                    full_rate["trans_counts"], bar, n_iter=polish, start=start,
                    shared=full_rate["shared"],
                )  # fmt: skip
                res["n_iter"] += iterations
            bar.update(1)
            return res

        with one_thread():  # small products: one thread is faster (see one_thread)
            # hmmlearn's own loops hold the GIL: its restarts run one after another.
            jobs = 1 if self.engine == "hmmlearn" else self.n_jobs
            results = in_threads(restart, range(n_runs), jobs)
        bar.close()
        lls = np.array([res["log_likelihood"] for res in results])
        best = results[int(np.argmax(lls))]
        order = order_states_by_occupancy(best["occupancy"], best["means"])
        self.means_ = best["means"][order] + offset
        self.covars_ = best["covars"][order]
        self.startprob_ = best["startprob"][order]
        self.transmat_ = best["transmat"][np.ix_(order, order)]
        self.n_states_ = K
        self.n_features_in_ = X.shape[1]
        self.log_likelihood_ = float(best["log_likelihood"])
        self.restart_log_likelihoods_ = lls
        self.n_iter_ = int(best["n_iter"])
        self.converged_ = bool(best["converged"])
        self.covariance_floor_ = float(self.min_covar)
        self.n_fit_frames_ = int(n_fit)
        self.fit_stride_ = int(stride)
        self.random_seed_ = seed
        if self.session_offsets:
            self.session_offsets_ = np.zeros((len(lengths), X.shape[1]))
            self.offset_columns_ = columns
            # fitted on one session: no spread of individuals was seen, new sessions get 0
            self.offset_spread_ = float(best["offset_spread"]) if with_offsets else 0.0
            self.offset_precision_ = np.zeros((len(columns), len(columns)))
            if with_offsets:
                found = best["offsets"]
                self.session_offsets_[: len(found)] = found
                self.offset_precision_ = np.array(best["offset_precision"], dtype=np.float64)
        return self

    # ---------------------------------------------------------------------------- decoding
    def _prepare(self, X, lengths):
        check_fitted(self, "means_")
        X, lengths = check_X_lengths(X, lengths, n_features=self.n_features_in_)
        emission = GaussianEmission(self.means_, self.covars_, self.covariance_type)
        return X, lengths, emission

    def _log_emission_batches(self, X, lengths, offsets=None, causal: bool = False, hidden=None):
        """Per batch of whole sessions: ``(start, stop, lengths, log emission)`` of the frames
        minus each session's offset: ``offsets`` when given, else estimated here with the
        fitted parameters fixed (with ``session_offsets``); none on the ``causal`` path.
        ``hidden`` (n_frames, D) bool or None: columns left out of a frame's emission, which
        is then the Gaussian marginal of its other columns (``marginal_emission``)."""
        X, lengths, emission = self._prepare(X, lengths)
        given = None if causal else _checked_offsets(offsets, lengths, X.shape[1])
        hidden = _checked_hidden(hidden, X.shape)
        estimate = not causal and given is None and self.session_offsets
        emission_of: dict[bytes, GaussianEmission] = {}
        with one_thread():
            for a, b, sub, rows in _batches_with_rows(lengths, given):
                part = X[a:b]
                if rows is not None:
                    part = part - np.repeat(rows, sub, axis=0)
                elif estimate:  # each session's own, parameters fixed
                    part = part - np.repeat(label_offsets(self, part, sub), sub, axis=0)
                log_b = emission.log_likelihood(part)
                if hidden is not None:
                    marginal_emission(
                        emission_of, self.means_, self.covars_, self.covariance_type,
                        part, hidden[a:b], log_b,
                    )  # fmt: skip
                yield a, b, sub, log_b

    def offsets(self, X: np.ndarray, lengths=None) -> np.ndarray:
        """Offset of every session (sequence of ``lengths``), shape (n_sessions, D): the MAP
        estimate with the fitted parameters fixed (zeros without ``session_offsets``).

        Estimating them is an EM of its own; when the same frames are labelled or scored
        more than once, estimate them once here and pass them as ``offsets`` to
        :meth:`predict`, :meth:`predict_proba`, :meth:`score` and the other decoding
        methods (their own estimate is this one, so the results are the same).

        Examples
        --------
        >>> rng = np.random.default_rng(0)
        >>> X = np.r_[rng.normal(0, 1, (200, 1)), rng.normal(6, 1, (200, 1))]
        >>> hmm = GaussianHMM(n_states=2, n_restarts=1, session_offsets=True)
        >>> hmm = hmm.fit(X, [100, 100, 100, 100])
        >>> b = hmm.offsets(X, [200, 200])
        >>> b.shape
        (2, 1)
        >>> bool((hmm.predict(X, [200, 200], offsets=b) == hmm.predict(X, [200, 200])).all())
        True
        """
        X, lengths, _ = self._prepare(X, lengths)
        if not self.session_offsets:
            return np.zeros((len(lengths), X.shape[1]))
        with one_thread():
            return np.concatenate(
                [label_offsets(self, X[a:b], sub) for a, b, sub in _batches(lengths)]
            )

    def score(
        self, X: np.ndarray, lengths: Sequence[int] | np.ndarray | None = None, *, offsets=None
    ) -> float:
        """Total log-likelihood ``log P(X)`` of all sessions.

        ``offsets`` (n_sessions, D) or None, here and in every decoding method: each
        session's offset, taken off its frames (as :meth:`offsets` estimates them; pass them
        when the same frames are decoded or scored more than once). None: estimated here
        with ``session_offsets``, none without."""
        return float(self.score_per_session(X, lengths, offsets=offsets).sum())

    def score_per_session(
        self, X: np.ndarray, lengths=None, offset_scoring: str = "map", *, offsets=None
    ) -> np.ndarray:
        """Log-likelihood of each session, shape (n_sessions,) (``offsets``: :meth:`score`).

        ``offset_scoring`` (with ``session_offsets``): "map" scores each session with its MAP
        offset plugged in, ``log p(x | b^)``; "marginal" with its offset integrated over the
        prior, ``log p(x)`` by Laplace's method
        (:func:`ethoscribe.segment.session_offsets.marginal_log_likelihood`) around the MAP
        offset (``offsets`` when given)."""
        if offset_scoring not in OFFSET_SCORINGS:
            msg = f"offset_scoring must be one of {OFFSET_SCORINGS}; got {offset_scoring!r}"
            raise InputError(msg)
        if offset_scoring == "marginal" and self.session_offsets:
            X, lengths, _ = self._prepare(X, lengths)
            given = _checked_offsets(offsets, lengths, X.shape[1])
            with one_thread():
                parts = [
                    marginal_log_likelihood(self, X[a:b], sub, rows)
                    for a, b, sub, rows in _batches_with_rows(lengths, given)
                ]
            return np.concatenate(parts)
        parts = []
        for _, _, sub, log_b in self._log_emission_batches(X, lengths, offsets):
            _, log_scale = forward_filter_log(log_b, self.startprob_, self.transmat_, sub)
            parts.append(np.add.reduceat(log_scale, np.cumsum(sub) - sub))
        return np.concatenate(parts)

    def score_per_frame(self, X: np.ndarray, lengths=None, *, offsets=None) -> float:
        """Log-likelihood per frame (comparable across data sizes; ``offsets``: :meth:`score`)."""
        return self.score(X, lengths, offsets=offsets) / len(X)

    def filter(self, X: np.ndarray, lengths=None) -> np.ndarray:
        """Causal posteriors ``P(state_t | x_1..t)`` per session, shape (n_frames, K).

        With ``session_offsets`` the causal path cannot see a session's future frames: it
        uses offset 0 (the typical individual), as the streaming filter does."""
        check_fitted(self, "means_")
        out = np.empty((len(X), self.n_states_))
        for a, b, sub, log_b in self._log_emission_batches(X, lengths, causal=True):
            out[a:b] = forward_filter_log(log_b, self.startprob_, self.transmat_, sub)[0]
        return out

    def predict_proba(
        self, X: np.ndarray, lengths=None, *, offsets=None, hidden=None
    ) -> np.ndarray:
        """Smoothed posteriors ``P(state_t | whole session)``, shape (n_frames, K)
        (``offsets``, ``hidden``: :meth:`decode`)."""
        check_fitted(self, "means_")
        out = np.empty((len(X), self.n_states_))
        for a, b, sub, log_b in self._log_emission_batches(X, lengths, offsets, hidden=hidden):
            post = forward_backward_log(log_b, self.startprob_, self.transmat_, sub, True)
            out[a:b] = post.gamma
        return out

    def decode(
        self, X: np.ndarray, lengths=None, *, offsets=None, hidden=None
    ) -> tuple[float, np.ndarray]:
        """Viterbi: ``(joint log-probability of the best paths, labels (n_frames,))``
        (``offsets``: :meth:`score`).

        ``hidden``, here and in :meth:`predict`, :meth:`predict_proba` and
        :meth:`predict_min_duration`: None, or a bool array (n_frames, n_features), True
        where a frame's column is not to be trusted (e.g. computed from filled keypoints).
        Such a frame is scored by the Gaussian marginal of its other columns (exact for a
        Gaussian state: the sub-vector under the sub-covariance), so it weighs only what
        was seen; a frame hiding every column is scored by the transitions alone."""
        labels = np.empty(len(X), dtype=np.int64)
        logprob = 0.0
        for a, b, sub, log_b in self._log_emission_batches(X, lengths, offsets, hidden=hidden):
            labels[a:b], best = viterbi_log(log_b, self.startprob_, self.transmat_, sub)
            logprob += float(best.sum())
        return logprob, labels

    def predict(self, X: np.ndarray, lengths=None, *, offsets=None, hidden=None) -> np.ndarray:
        """Most probable state path (Viterbi), int labels (n_frames,) (``offsets``,
        ``hidden``: :meth:`decode`)."""
        return self.decode(X, lengths, offsets=offsets, hidden=hidden)[1]

    def predict_min_duration(
        self,
        X: np.ndarray,
        lengths=None,
        min_frames: int = 1,
        outlier_share: float = 0.0,
        *,
        offsets=None,
        hidden=None,
    ) -> tuple[np.ndarray, np.ndarray]:
        """Labels whose every bout lasts at least ``min_frames``, and their posteriors.

        Viterbi and forward-backward on the minimum-duration chain of this HMM
        (:mod:`ethoscribe.segment.duration`): each state must be held ``min_frames`` frames
        before the fitted transition probabilities apply. A session shorter than
        ``min_frames`` is one bout. ``outlier_share`` > 0 takes that share of frames to be
        uninformative (:func:`ethoscribe.segment.duration.with_outlier_frames`). With
        ``min_frames=1`` and ``outlier_share=0`` this is :meth:`predict` and
        :meth:`predict_proba` (``offsets``, ``hidden``: :meth:`decode`).

        Returns
        -------
        labels : int64 array (n_frames,)
        proba : array (n_frames, K)
            ``P(state_t | whole session, every bout >= min_frames)``; the labels' own column
            is the probability of the final label under the model that chose it.
        """
        check_fitted(self, "means_")
        labels = np.empty(len(X), dtype=np.int64)
        proba = np.empty((len(X), self.n_states_))
        start, trans = self.startprob_, self.transmat_
        for a, b, sub, log_b in self._log_emission_batches(X, lengths, offsets, hidden=hidden):
            if outlier_share > 0:
                log_b = duration.with_outlier_frames(log_b, outlier_share)
            labels[a:b] = duration.viterbi(log_b, start, trans, min_frames, sub)[0]
            post = duration.forward_backward(log_b, start, trans, min_frames, sub, overwrite=True)
            proba[a:b] = post.gamma
        return labels, proba

    def n_parameters(self) -> int:
        """Free parameters of the fitted model (:func:`parameter_count`)."""
        check_fitted(self, "means_")
        return parameter_count(self.n_states_, self.n_features_in_, self.covariance_type)

    def bic(self, X: np.ndarray, lengths=None, *, offsets=None) -> float:
        """Bayesian information criterion ``-2 log L + n_parameters * log(n_frames)``
        (``offsets``: :meth:`score`)."""
        ll = self.score(X, lengths, offsets=offsets)
        return -2.0 * ll + self.n_parameters() * float(np.log(len(X)))

    # ------------------------------------------------------------------------- persistence
    def to_state(self) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
        """JSON-able parameters and metadata, plus the fitted arrays (no pickle)."""
        check_fitted(self, "means_")
        meta = {
            **header("ethoscribe.GaussianHMM", FORMAT_VERSION),
            "params": {**self.get_params(), "random_state": self.random_seed_},
            "n_states": self.n_states_,
            "n_features": self.n_features_in_,
            "log_likelihood": self.log_likelihood_,
            "n_iter": self.n_iter_,
            "converged": self.converged_,
            "covariance_floor": self.covariance_floor_,
            "n_fit_frames": self.n_fit_frames_,
        }
        arrays = {
            "means": self.means_, "covars": self.covars_, "startprob": self.startprob_,
            "transmat": self.transmat_, "restart_log_likelihoods": self.restart_log_likelihoods_,
        }  # fmt: skip
        if self.session_offsets:
            meta["offset_spread"] = self.offset_spread_
            arrays.update(
                session_offsets=self.session_offsets_,
                offset_columns=self.offset_columns_,
                offset_precision=self.offset_precision_,
            )
        return meta, {k: np.array(v, dtype=np.float64) for k, v in arrays.items()}

    @classmethod
    def from_state(cls, meta: dict[str, Any], arrays: dict[str, np.ndarray]) -> GaussianHMM:
        """Rebuild the fitted model written by :meth:`to_state`.

        The parameters, the summary numbers and the arrays are checked (types, shapes, finite
        probabilities) so a damaged or hand-edited state is an ``InputError`` naming the field.
        """
        check_header(meta, "ethoscribe.GaussianHMM", FORMAT_VERSION, "GaussianHMM state")
        params = meta.get("params")
        if not isinstance(params, Mapping):
            raise InputError(f"GaussianHMM state: 'params' must be an object, got {params!r:.60}")
        unknown = sorted(set(params) - set(cls._get_param_names()))
        if unknown:
            valid = cls._get_param_names()
            raise InputError(f"GaussianHMM state: unknown parameters {unknown}; valid: {valid}")
        model = cls(**params)
        check_hmm_params(model)
        problems = []
        rules = {
            "n_states": (int_between(meta.get("n_states"), 1, _MAX_STATES), "an int >= 1"),
            "n_features": (int_between(meta.get("n_features"), 1, _MAX_FEATURES), "an int >= 1"),
            "n_iter": (int_between(meta.get("n_iter"), 0, 2**31), "an int >= 0"),
            "n_fit_frames": (int_between(meta.get("n_fit_frames"), 0, 2**62), "an int >= 0"),
            "log_likelihood": (is_real(meta.get("log_likelihood")), "a number"),
            "covariance_floor": (
                is_real(meta.get("covariance_floor")) and meta["covariance_floor"] > 0,
                "a number > 0",
            ),
            "converged": (isinstance(meta.get("converged"), bool | np.bool_), "true or false"),
        }
        for name, (ok, want) in rules.items():
            if not ok:
                problems.append(f"'{name}' must be {want}, got {meta.get(name, 'nothing')!r:.60}")
        if problems:
            raise InputError("GaussianHMM state: " + "; ".join(problems))
        K, D = int(meta["n_states"]), int(meta["n_features"])
        shapes = {"means": (K, D), "covars": (K, D, D), "startprob": (K,), "transmat": (K, K)}
        for name, shape in shapes.items():
            if name not in arrays or np.shape(arrays[name]) != shape:
                got = np.shape(arrays[name]) if name in arrays else "missing"
                raise InputError(f"GaussianHMM state: array {name!r} must be {shape}, got {got}")
        try:
            fitted = {name: np.array(arrays[name], dtype=np.float64) for name in shapes}
            restarts = np.array(arrays.get("restart_log_likelihoods", []), dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise InputError(f"GaussianHMM state: arrays must hold numbers ({exc})") from None
        _check_fitted_arrays(fitted)
        _check_covariance_type(model.covariance_type, fitted["covars"])
        model.means_, model.covars_ = fitted["means"], fitted["covars"]
        model.startprob_, model.transmat_ = fitted["startprob"], fitted["transmat"]
        model.restart_log_likelihoods_ = restarts
        model.n_states_, model.n_features_in_ = K, D
        model.log_likelihood_ = float(meta["log_likelihood"])
        model.n_iter_ = int(meta["n_iter"])
        model.converged_ = bool(meta["converged"])
        model.covariance_floor_ = float(meta["covariance_floor"])
        model.n_fit_frames_ = int(meta["n_fit_frames"])
        model.random_seed_ = model.random_state
        if model.session_offsets:
            _offsets_from_state(model, meta, arrays)
        return model


_MAX_STATES = 1000  # a saved state count beyond this is damage, not a model


def _checked_offsets(offsets: Any, lengths: np.ndarray, n_features: int) -> np.ndarray | None:
    """Given session offsets as a float array (n_sessions, n_features), checked; None: None."""
    if offsets is None:
        return None
    b = np.asarray(offsets, dtype=np.float64)
    if b.shape != (len(lengths), n_features) or not np.isfinite(b).all():
        msg = (
            f"offsets must be finite numbers of shape ({len(lengths)}, {n_features}), one row "
            f"per session of lengths (as GaussianHMM.offsets gives them); got shape {b.shape}"
            + ("" if b.shape != (len(lengths), n_features) else " with NaN or infinite values")
        )
        raise InputError(msg)
    return b


def _checked_hidden(hidden: Any, shape: tuple[int, int]) -> np.ndarray | None:
    """Columns left out of each frame's emission as a bool array of ``shape``; None: None."""
    if hidden is None:
        return None
    h = np.asarray(hidden)
    if h.shape != shape or h.dtype != bool:
        msg = (
            f"hidden must be a bool array of shape {shape} (frames, features), True where a "
            f"frame's column is left out; got {h.dtype} of shape {h.shape}"
        )
        raise InputError(msg)
    return h if h.any() else None


def _offsets_from_state(model: GaussianHMM, meta: Mapping[str, Any], arrays) -> None:
    """The session-offset arrays of a saved model, checked (shapes, finite, columns)."""
    D = model.n_features_in_
    what = "GaussianHMM state (session_offsets)"
    needed = ("session_offsets", "offset_columns", "offset_precision")
    missing = [k for k in needed if k not in arrays]
    if missing or not (is_real(meta.get("offset_spread")) and meta["offset_spread"] >= 0):
        msg = f"{what}: arrays {missing} or 'offset_spread' (>= 0) missing; save the model again"
        raise InputError(msg)
    cols = np.asarray(arrays["offset_columns"], dtype=np.float64).ravel()
    ok_cols = len(cols) and np.all(cols == np.round(cols)) and cols.min() >= 0 and cols.max() < D
    if not ok_cols or len(np.unique(cols)) != len(cols):
        raise InputError(f"{what}: 'offset_columns' must be distinct column indices below {D}")
    m = len(cols)
    offsets = np.array(arrays["session_offsets"], dtype=np.float64)
    precision = np.array(arrays["offset_precision"], dtype=np.float64)
    if offsets.ndim != 2 or offsets.shape[1] != D or precision.shape != (m, m):
        msg = (
            f"{what}: 'session_offsets' must be (n_sessions, {D}) and 'offset_precision' "
            f"({m}, {m}); got {offsets.shape} and {precision.shape}"
        )
        raise InputError(msg)
    if not (np.isfinite(offsets).all() and np.isfinite(precision).all()):
        raise InputError(f"{what}: arrays hold NaN or infinite values")
    model.session_offsets_ = offsets
    model.offset_columns_ = cols.astype(np.int64)
    model.offset_precision_ = precision
    model.offset_spread_ = float(meta["offset_spread"])


def _start_from(model: GaussianHMM, n_states: int, n_features: int) -> dict[str, np.ndarray]:
    """The fitted parameters of ``model`` as a starting point of EM (copies)."""
    check_fitted(model, "means_")
    if model.means_.shape != (n_states, n_features):
        msg = (
            f"init_models must have {n_states} states of {n_features} features; got a model "
            f"with means of shape {model.means_.shape}"
        )
        raise InputError(msg)
    start, trans = floor_probabilities(model.startprob_, model.transmat_)
    return {
        "means": np.array(model.means_, dtype=np.float64),
        "covars": np.array(model.covars_, dtype=np.float64),
        "startprob": start,
        "transmat": trans,
    }


_MAX_FEATURES = 100_000


def _check_covariance_type(covariance_type: str, covars: np.ndarray) -> None:
    """The saved covariances must be of the declared type: a "diag" model stores diagonal
    matrices, so full ones under covariance_type "diag" are an edit that would change labels."""
    if covariance_type != "diag":
        return
    off = covars * (1.0 - np.eye(covars.shape[1]))[None]
    if np.any(off != 0):
        k = int(np.argmax(np.abs(off).reshape(len(covars), -1).max(axis=1)))
        raise InputError(
            f"GaussianHMM state: covariance_type is 'diag' but array 'covars' holds full "
            f"matrices (state {k} has off-diagonal values); the arrays must agree with every "
            "declared parameter: the file was edited by hand or is damaged"
        )


def _check_fitted_arrays(fitted: dict[str, np.ndarray]) -> None:
    """Saved means, covariances and probabilities must be usable for decoding."""
    bad = [name for name, a in fitted.items() if not np.isfinite(a).all()]
    if bad:
        raise InputError(f"GaussianHMM state: arrays {bad} hold NaN or infinite values")
    for name, p in (("startprob", fitted["startprob"]), ("transmat", fitted["transmat"])):
        rows = np.atleast_2d(p)
        if (rows < 0).any() or not np.allclose(rows.sum(axis=1), 1.0, atol=1e-6):
            raise InputError(
                f"GaussianHMM state: {name!r} must hold probabilities summing to 1 per row"
            )
    covars = fitted["covars"]
    symmetric = np.allclose(covars, np.swapaxes(covars, 1, 2), rtol=1e-8, atol=1e-12)
    if not symmetric or (np.linalg.eigvalsh(covars).min(initial=np.inf) <= 0):
        raise InputError("GaussianHMM state: 'covars' must be symmetric positive definite matrices")


def _prior_counts(model: GaussianHMM, n_frames: int, sticky: np.ndarray) -> np.ndarray | float:
    """Pseudo-transitions of the persistence prior for a fit of ``n_frames`` (module doc)."""
    if model.expected_bout_s is None:
        return 0.0
    return model.persistence_strength * n_frames / model.n_states * sticky


def _usable_stride(
    X: np.ndarray, lengths: np.ndarray, stride: int, needed: int, K: int
) -> tuple[int, np.ndarray, np.ndarray]:
    """``stride``, or the largest smaller one that leaves enough frames (``frames_needed``)
    and at least ``K`` distinct frames for the fit, with the frames and lengths it keeps."""
    while True:
        thin, thin_lengths = thin_frames(X, lengths, stride)
        if stride == 1 or (len(thin) >= needed and distinct_rows_at_least(thin, K)):
            return stride, thin, thin_lengths
        stride -= 1


def _at_stride(model: GaussianHMM, stride: int) -> GaussianHMM:
    """A copy of ``model``'s parameters describing every ``stride``-th frame (its rate, and
    the stride for the screening's budget of frames): what EM on thinned frames reads."""
    em = copy.copy(model)
    em.fps = model.fps / stride
    em._em_stride = stride
    return em
