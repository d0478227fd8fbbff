"""Fine states grouped into behaviour-level motifs: metastable sets of the state dynamics.

A rhythmic behaviour whose posture alternates inside a bout (strokes switching sides, a gait
cycle) is found by a frame-level model as several states that alternate within every bout:
phases, not behaviours. Over a lag of about one bout such states mix with one another far
faster than they are left for another behaviour, so they form one *metastable set* of the
transition dynamics. This module finds those sets:

1. ``P``, the transition matrix between fine states, is made reversible by symmetrising the
   flux (``F = diag(pi) P``, ``(F + F^T) / 2``, rows renormalised) so its eigenvalues are real.
2. Eigenvalues ``lambda_i`` of ``P`` give implied time scales ``-lag / ln|lambda_i|``: how long
   the i-th slowest exchange takes. Exchanges slower than ``min_timescale_s`` are between
   behaviours; faster ones happen within a behaviour. The number of behaviour-level motifs is
   the number of time scales above that limit (always at least one).
3. PCCA+ (Deuflhard & Weber 2005, Linear Algebra Appl. 398, 161-184; the inner simplex
   algorithm of Weber & Galliat 2002 as its start): the leading eigenvectors are mapped
   linearly onto memberships ``chi`` (n_fine, n_sets) that sum to one per state; each fine
   state goes to its largest membership.
4. The coarse-grained transition matrix ``(chi^T D chi)^-1 chi^T D P chi`` (``D = diag(pi)``).

:func:`merge_tree` records the order in which sets join as the number of sets falls (a tree
the workbench can cut at any level), and :func:`suggested_merges` gives, for pairs of states,
the evidence: how often they alternate and how similar their postures are.

:func:`join_phases` is the narrower rule ``BehaviourModel`` applies by default: it joins only
states that are phases of one rhythm (they alternate more than by chance, their band
amplitudes cannot tell them apart, each is held at most half a cycle of the slowest band) and
leaves every other state alone, so short behaviours exchanged as fast as phases stay apart.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ethoscribe.errors import InputError


def stationary_distribution(P: np.ndarray) -> np.ndarray:
    """Left eigenvector of ``P`` for eigenvalue 1, normalised to sum 1 (clipped at 0)."""
    values, vectors = np.linalg.eig(P.T)
    v = np.abs(np.real(vectors[:, np.argmin(np.abs(values - 1.0))]))
    return v / v.sum()


def symmetrised(P: np.ndarray, pi: np.ndarray | None = None) -> np.ndarray:
    """Reversible transition matrix with the same stationary distribution: rows of the
    symmetrised flux ``(diag(pi) P + (diag(pi) P)^T) / 2`` renormalised."""
    P = np.asarray(P, dtype=np.float64)
    pi = stationary_distribution(P) if pi is None else np.asarray(pi, dtype=np.float64)
    flux = pi[:, None] * P
    flux = 0.5 * (flux + flux.T)
    rows = flux.sum(1, keepdims=True)
    return np.where(rows > 0, flux / np.where(rows > 0, rows, 1.0), np.eye(len(P)))


def reversible_eigen(P: np.ndarray, pi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (descending) and right eigenvectors of a reversible ``P``.

    Uses the symmetric form ``D^1/2 P D^-1/2``; the first eigenvector is constant 1.
    """
    s = np.sqrt(np.maximum(pi, 1e-300))
    sym = s[:, None] * P / s[None, :]
    values, vectors = np.linalg.eigh(0.5 * (sym + sym.T))
    order = np.argsort(values)[::-1]
    values, vectors = values[order], vectors[:, order] / s[:, None]
    vectors /= vectors[:, :1].mean()  # first right eigenvector: all ones
    return values, vectors


def pcca_memberships(vectors: np.ndarray, n_sets: int) -> np.ndarray:
    """Memberships (n, n_sets) from the leading ``n_sets`` right eigenvectors (PCCA+ start:
    the inner simplex algorithm picks one representative state per set, the memberships are
    the eigenvector coordinates in that simplex; small negatives are clipped, rows sum to 1)."""
    X = vectors[:, :n_sets]
    n = len(X)
    if n_sets == 1:
        return np.ones((n, 1))
    rest = X[:, 1:].copy()
    index = [int(np.argmax(np.linalg.norm(rest, axis=1)))]
    rest = rest - rest[index[0]]
    for _ in range(1, n_sets):
        dist = np.linalg.norm(rest, axis=1)
        j = int(np.argmax(dist))
        index.append(j)
        direction = rest[j] / max(dist[j], 1e-300)
        rest = rest - np.outer(rest @ direction, direction)
    chi = X @ np.linalg.pinv(X[index])
    chi = np.clip(chi, 0.0, None)
    sums = chi.sum(1, keepdims=True)
    return np.where(sums > 0, chi / np.where(sums > 0, sums, 1.0), 1.0 / n_sets)


def coarse_transitions(P: np.ndarray, pi: np.ndarray, chi: np.ndarray) -> np.ndarray:
    """Coarse-grained transition matrix ``(chi^T D chi)^-1 chi^T D P chi``."""
    D = pi[:, None]
    return np.linalg.solve(chi.T @ (D * chi), chi.T @ (D * (P @ chi)))


@dataclass(frozen=True)
class Lumping:
    """Fine states grouped into sets (behaviour-level motifs).

    Attributes
    ----------
    assignment : (n_fine,) int, the set of each fine state (sets numbered by first fine state)
    memberships : (n_fine, n_sets) PCCA+ memberships
    eigenvalues : (n_fine,) of the reversible transition matrix at ``lag`` frames
    timescales_s : (n_fine - 1,) implied time scales of the non-stationary eigenvalues
    coarse : (n_sets, n_sets) coarse-grained transition matrix at ``lag`` frames
    lag : int, frames; reason : str
    """

    assignment: np.ndarray
    memberships: np.ndarray
    eigenvalues: np.ndarray
    timescales_s: np.ndarray
    coarse: np.ndarray
    lag: int
    reason: str

    @property
    def n_sets(self) -> int:
        return int(self.memberships.shape[1])


def lump_states(
    transmat: np.ndarray,
    fps: float,
    n_sets: int | None = None,
    lag_s: float = 0.5,
    min_timescale_s: float = 1.0,
) -> Lumping:
    """Group the fine states of a transition matrix (per frame) into metastable sets.

    Parameters
    ----------
    transmat : (n, n) row-stochastic, per frame
    fps : float
    n_sets : int, optional
        Number of sets; None: the time-scale rule of the module doc.
    lag_s : float
        Lag (seconds) at which the dynamics are looked at; ``P = transmat ** lag``.
    min_timescale_s : float
        Implied time scales longer than this count as exchanges between behaviours.

    Examples
    --------
    >>> P = np.array([[.80, .15, .04, .01], [.15, .80, .01, .04],
    ...               [.04, .01, .80, .15], [.01, .04, .15, .80]])
    >>> lump_states(P, fps=1, n_sets=2, lag_s=1).assignment.tolist()
    [0, 0, 1, 1]
    """
    T = np.asarray(transmat, dtype=np.float64)
    if T.ndim != 2 or T.shape[0] != T.shape[1] or not np.allclose(T.sum(1), 1, atol=1e-6):
        raise InputError(f"lump_states needs a square row-stochastic matrix; got shape {T.shape}")
    lag = max(1, round(lag_s * fps))
    P = np.linalg.matrix_power(T, lag)
    pi = stationary_distribution(P)
    R = symmetrised(P, pi)
    values, vectors = reversible_eigen(R, pi)
    with np.errstate(divide="ignore"):
        scales = -lag / fps / np.log(np.clip(np.abs(values[1:]), 1e-300, 1 - 1e-15))
    n = len(T)
    if n_sets is None:
        slow = int((scales > min_timescale_s).sum())
        n_sets = max(1, min(n, slow + 1))
        reason = (
            f"{n_sets} set(s): {slow} implied time scale(s) above {min_timescale_s:g} s at a lag "
            f"of {lag / fps:g} s (exchanges slower than that are between behaviours)"
        )
    else:
        if not 1 <= int(n_sets) <= n:
            raise InputError(f"n_sets must be between 1 and {n}; got {n_sets}")
        n_sets = int(n_sets)
        reason = f"{n_sets} set(s) as asked"
    chi = pcca_memberships(vectors, n_sets)
    crisp = chi.argmax(1)
    # number the sets by their first fine state; drop sets that own no state
    order = []
    for s in crisp:
        if s not in order:
            order.append(int(s))
    chi = chi[:, order]
    chi /= chi.sum(1, keepdims=True)
    assignment = np.array([order.index(int(s)) for s in crisp], dtype=np.int64)
    coarse = coarse_transitions(R, pi, chi)
    return Lumping(assignment, chi, values, scales, coarse, lag, reason)


def eigen_gap_sets(
    transmat: np.ndarray, fps: float, lag_s: float, candidates: range | list[int]
) -> tuple[int, list[dict]]:
    """Number of metastable sets at the largest gap of the eigenvalue spectrum.

    The eigenvalues ``1 = lambda_1 >= lambda_2 >= ...`` of the reversible transition matrix at
    a lag of ``lag_s`` seconds (as :func:`lump_states` computes them) are ``exp(-lag / t_i)``
    for the implied time scales ``t_i``: exchanges much slower than the lag (between
    behaviours) sit near 1, exchanges faster than it (phases alternating within a bout) near 0.
    ``n`` sets are well separated when ``lambda_n - lambda_(n+1)`` is large (the spectral gap
    that PCCA+ asks for, Deuflhard & Weber 2005, section 2). The chosen ``n`` is the candidate
    with the largest gap. A gap needs an eigenvalue below it, so candidates run up to one less
    than the number of states (keeping every state is not measured against anything: a
    spectrum cut at the last state would always show a gap to zero there).

    Returns
    -------
    n : int
    table : list of dict, one per candidate: ``n_states`` (sets), ``eigenvalue`` (``lambda_n``),
        ``next_eigenvalue``, ``eigen_gap``, ``timescale_s`` (of ``lambda_n``; None for n = 1 or
        an eigenvalue <= 0).

    Examples
    --------
    >>> P = np.array([[.80, .15, .04, .01], [.15, .80, .01, .04],
    ...               [.04, .01, .80, .15], [.01, .04, .15, .80]])
    >>> eigen_gap_sets(P, fps=1.0, lag_s=1.0, candidates=[1, 2, 3])[0]
    2
    """
    T = np.asarray(transmat, dtype=np.float64)
    n_states = len(T)
    cands = [int(k) for k in candidates if 1 <= int(k) < n_states]
    if not cands:
        raise InputError(
            f"eigen_gap_sets: no candidate set count between 1 and {n_states - 1} (one less "
            f"than the {n_states} states); got {list(candidates)}"
        )
    lag = max(1, round(lag_s * fps))
    P = np.linalg.matrix_power(T, lag)
    pi = stationary_distribution(P)
    values = reversible_eigen(symmetrised(P, pi), pi)[0]
    table = []
    for k in cands:
        lam, nxt = float(values[k - 1]), float(values[k])
        scale = -lag / fps / np.log(lam) if k > 1 and 0 < lam < 1 else None
        table.append(
            {
                "n_states": k,
                "eigenvalue": lam,
                "next_eigenvalue": nxt,
                "eigen_gap": lam - nxt,
                "timescale_s": None if scale is None else float(scale),
            }
        )
    best = max(table, key=lambda row: row["eigen_gap"])["n_states"]
    return int(best), table


def merge_tree(transmat: np.ndarray, fps: float, lag_s: float = 0.5) -> list[dict]:
    """Assignments of the fine states for every number of sets from n down to 1.

    Returns a list of ``{"n_sets", "assignment", "timescale_s"}`` (the implied time scale of
    the exchange that is given up when going from ``n_sets`` to ``n_sets - 1``), JSON-able.
    """
    T = np.asarray(transmat, dtype=np.float64)
    n = len(T)
    levels = []
    for k in range(n, 0, -1):
        lump = lump_states(T, fps, n_sets=k, lag_s=lag_s)
        scale = float(lump.timescales_s[k - 2]) if k >= 2 else float("inf")
        levels.append(
            {
                "n_sets": k,
                "assignment": lump.assignment.tolist(),
                "timescale_s": scale if np.isfinite(scale) else None,
            }
        )
    return levels


def alternation_counts(labels: np.ndarray, n_states: int, window: int) -> np.ndarray:
    """How often two states follow each other within ``window`` frames (n, n), symmetric.

    Counted on the run-length encoding: runs ``a, b`` that touch, and runs ``a, x, b`` with a
    middle run shorter than ``window`` (a brief visit elsewhere inside one bout).
    """
    lab = np.asarray(labels)
    lab = lab[lab >= 0]
    counts = np.zeros((n_states, n_states))
    if len(lab) < 2:
        return counts
    change = np.flatnonzero(np.diff(lab)) + 1
    starts = np.concatenate([[0], change])
    runs = lab[starts]
    lengths = np.diff(np.concatenate([starts, [len(lab)]]))
    np.add.at(counts, (runs[:-1], runs[1:]), 1)
    short = lengths[1:-1] < window
    np.add.at(counts, (runs[:-2][short], runs[2:][short]), 1)
    np.fill_diagonal(counts, 0)
    return counts + counts.T


def suggested_merges(
    labels: np.ndarray,
    means: np.ndarray,
    transmat: np.ndarray,
    fps: float,
    lag_s: float = 0.5,
    top: int = 10,
) -> list[dict]:
    """Pairs of states worth merging, with the evidence, best first.

    Parameters
    ----------
    labels : (F,) state per frame (-1 unscored), sessions back to back
    means : (n, D) state means in the feature space (posture similarity)
    transmat : (n, n) per-frame transition matrix
    fps, lag_s : as in :func:`lump_states`
    top : number of pairs returned

    Returns
    -------
    list of dict: ``states`` (a, b), ``alternations`` (times they follow one another within
    ``lag_s``), ``alternation_share`` (of the bouts of the rarer state), ``distance`` (between
    their means, in standard units), ``same_set_levels`` (how many levels of the merge tree
    keep them together) and ``score`` (the share of alternation over 1 + distance).
    """
    n = len(transmat)
    window = max(1, round(lag_s * fps))
    counts = alternation_counts(labels, n, window)
    lab = np.asarray(labels)
    lab = lab[lab >= 0]
    starts = np.concatenate([[True], lab[1:] != lab[:-1]])[: len(lab)]
    bouts = np.bincount(lab[starts], minlength=n)
    tree = merge_tree(transmat, fps, lag_s)
    means = np.asarray(means, dtype=np.float64)
    out = []
    for a in range(n):
        for b in range(a + 1, n):
            share = counts[a, b] / max(1, min(bouts[a], bouts[b]))
            dist = float(np.linalg.norm(means[a] - means[b]) / np.sqrt(means.shape[1]))
            together = sum(lv["assignment"][a] == lv["assignment"][b] for lv in tree)
            out.append(
                {
                    "states": (a, b),
                    "alternations": int(counts[a, b]),
                    "alternation_share": float(share),
                    "distance": dist,
                    "same_set_levels": int(together),
                    "score": float(share / (1.0 + dist)),
                }
            )
    out.sort(key=lambda d: -d["score"])
    return out[:top]


def unit_overlap(share: np.ndarray) -> np.ndarray:
    """Bhattacharyya coefficient between the states' distributions over units, (n, n).

    ``share`` (n_states, n_units): how the frames of each state are spread over the units
    (sessions, animals; rows sum to 1). 1: two states used in the same proportions in every
    unit; 0: never in the same unit.
    """
    root = np.sqrt(np.clip(np.asarray(share, dtype=np.float64), 0.0, None))
    return root @ root.T


def unit_shares(posterior: np.ndarray, lengths: Sequence[int]) -> np.ndarray:
    """How the frames of each state are spread over the units, (n_states, n_units).

    ``posterior`` (n_frames, n_states): every frame's state probabilities, the units'
    sequences back to back with ``lengths`` frames each. Row ``k`` is the expected number of
    frames of state ``k`` in each unit over its total (a state with no frame: all zeros).
    """
    posterior = np.asarray(posterior, dtype=np.float64)
    unit = np.repeat(np.arange(len(lengths)), np.asarray(lengths, dtype=np.int64))
    share = np.zeros((posterior.shape[1], len(lengths)))
    np.add.at(share.T, unit, posterior)
    return share / np.maximum(share.sum(1, keepdims=True), 1e-300)


def join_across_units(
    means: np.ndarray, share: np.ndarray, max_overlap: float = 0.5, mutual: bool = True
) -> tuple[np.ndarray, list[tuple[int, int]]]:
    """Join states that are one behaviour seen in different units (sessions, animals).

    A behaviour whose posture differs between individuals may be fitted as one state per
    individual. Those states never hand over to each other, so no grouping by transitions
    joins them. Two states are joined when (1) they are used apart: their distributions over
    the units overlap less than they differ (Bhattacharyya coefficient of the unit shares,
    :func:`unit_overlap`, below ``max_overlap`` = 0.5, halfway between the same use (1) and
    disjoint use (0)), and (2) they are mutual nearest neighbours in posture among the states
    used apart from them: each one's closest (Euclidean distance between the means, in the
    feature space the model was fitted in) such state is the other. This is the
    mutual-nearest-neighbour matching between batches (Haghverdi et al. 2018, Nat.
    Biotechnol. 36, 421-427) with units as batches and states as the populations shared by
    them; it needs no distance threshold. ``mutual=False``: every state used apart from
    others joins its nearest such state (groups are the connected pairs), also when that
    state's own nearest is a third one.

    Returns
    -------
    assignment : (n,) int, the joined group of every state (groups numbered by first state)
    pairs : list of the joined (a, b), a < b
    """
    means = np.asarray(means, dtype=np.float64)
    n = len(means)
    apart = unit_overlap(share) < max_overlap
    np.fill_diagonal(apart, False)
    dist = np.sqrt(((means[:, None, :] - means[None, :, :]) ** 2).sum(-1))
    dist = np.where(apart, dist, np.inf)
    nearest = np.where(np.isfinite(dist).any(1), dist.argmin(1), -1)
    if mutual:
        pairs = [
            (a, int(nearest[a])) for a in range(n) if a < nearest[a] and nearest[nearest[a]] == a
        ]
    else:
        pairs = sorted({tuple(sorted((a, int(nearest[a])))) for a in range(n) if nearest[a] >= 0})
    return pair_components(n, pairs), pairs


def membership(assignment: Sequence[int] | np.ndarray) -> np.ndarray:
    """(n_states, n_groups) 0/1 matrix: row ``i`` marks the group of state ``i``.

    Examples
    --------
    >>> membership([0, 1, 0]).tolist()
    [[1.0, 0.0], [0.0, 1.0], [1.0, 0.0]]
    """
    assignment = np.asarray(assignment, dtype=np.int64)
    onehot = np.zeros((len(assignment), int(assignment.max()) + 1))
    onehot[np.arange(len(assignment)), assignment] = 1.0
    return onehot


def lumped_transitions(transmat: np.ndarray, assignment: np.ndarray) -> np.ndarray:
    """Per-frame transition matrix between groups of states: the stationary flux between
    their states over the group's occupancy (exact for the group sequence when the chain is
    stationary and the states within a group are exchangeable)."""
    T = np.asarray(transmat, dtype=np.float64)
    onehot = membership(assignment)
    pi = stationary_distribution(T)
    flux = onehot.T @ (pi[:, None] * T) @ onehot
    return flux / np.maximum(flux.sum(1, keepdims=True), 1e-300)


def exchange_lift(transmat: np.ndarray) -> np.ndarray:
    """How many times more often two states hand over to each other than by chance, (n, n).

    With ``pi`` the stationary distribution and ``F = diag(pi) P`` the stationary flux, state
    ``i`` is left with flux ``e_i = pi_i (1 - P_ii)``. By chance (every exit going to the other
    states in proportion to their occupancy) ``e_i pi_j / (1 - pi_i)`` of it would go to ``j``.
    The lift is the observed exchange in both directions over that chance exchange:
    ``(F_ij + F_ji) / (e_i pi_j / (1 - pi_i) + e_j pi_i / (1 - pi_j))``; > 1: the two hand over
    to each other more than to the rest (alternating phases of one movement, or neighbours in
    a behavioural sequence). Symmetric; the diagonal is 0.

    Examples
    --------
    >>> P = np.array([[.90, .08, .02], [.08, .90, .02], [.02, .02, .96]])
    >>> exchange_lift(P).round(2)[0].tolist()
    [0.0, 1.6, 0.57]
    """
    T = np.asarray(transmat, dtype=np.float64)
    pi = stationary_distribution(T)
    flux = pi[:, None] * T
    leave = pi * (1.0 - np.diag(T))
    chance = leave[:, None] * pi[None, :] / np.maximum(1.0 - pi, 1e-300)[:, None]
    observed = flux + flux.T
    expected = chance + chance.T
    lift = np.where(expected > 0, observed / np.where(expected > 0, expected, 1.0), 0.0)
    np.fill_diagonal(lift, 0.0)
    return lift


def mean_distance(means: np.ndarray, covars: np.ndarray, columns: Sequence[int]) -> np.ndarray:
    """Mahalanobis distance between every two states' means on ``columns``, (n, n).

    The metric is the two states' covariances averaged (restricted to ``columns``): the
    distance between the means in pooled standard deviations, the mean term of the
    Bhattacharyya distance (``sqrt(8 x`` that term``)``). Below 1, the two means lie within one
    pooled standard deviation of each other on those columns.
    """
    means = np.asarray(means, dtype=np.float64)
    covars = np.asarray(covars, dtype=np.float64)
    idx = np.asarray(list(columns), dtype=np.int64)
    n = len(means)
    out = np.zeros((n, n))
    if not len(idx):
        return out
    sub = covars[:, idx[:, None], idx[None, :]]
    for i in range(n):
        for j in range(i + 1, n):
            diff = means[i, idx] - means[j, idx]
            pooled = 0.5 * (sub[i] + sub[j])
            out[i, j] = out[j, i] = float(np.sqrt(max(diff @ np.linalg.solve(pooled, diff), 0.0)))
    return out


def pair_components(n: int, pairs: Sequence[tuple[int, int]]) -> np.ndarray:
    """Group of every one of ``n`` items when the ``pairs`` are joined (connected components),
    groups numbered by their first item."""
    parent = list(range(n))

    def root(a: int) -> int:
        while parent[a] != a:
            a = parent[a]
        return a

    for a, b in pairs:
        ra, rb = root(int(a)), root(int(b))
        parent[max(ra, rb)] = min(ra, rb)
    roots = [root(a) for a in range(n)]
    order = sorted(set(roots))
    return np.array([order.index(r) for r in roots], dtype=np.int64)


# A pair of states is two phases of one rhythm when they hand over to each other more than by
# chance (lift > 1), their phase-free columns cannot tell them apart (means within one pooled
# standard deviation) and each is held no longer than half a cycle of the slowest rhythm the
# features describe (the 0.5-Hz band: 1 s). The first two limits are the points where the
# evidence turns; the third follows from the band frequencies. None was tuned on the bench.
PHASE_MIN_LIFT = 1.0
PHASE_MAX_DISTANCE = 1.0
PHASE_MAX_S = 1.0


def join_phases(
    transmat: np.ndarray,
    means: np.ndarray,
    covars: np.ndarray,
    steady_columns: Sequence[int],
    fps: float,
    min_lift: float = PHASE_MIN_LIFT,
    max_distance: float = PHASE_MAX_DISTANCE,
    max_phase_s: float = PHASE_MAX_S,
) -> tuple[np.ndarray, list[dict]]:
    """Join states that are phases of one rhythmic behaviour, and leave every other state alone.

    A frame-level model splits a rhythmic movement (a gait, strokes switching sides) into states
    that differ in instantaneous posture and alternate within every bout; what stays the same
    across its phases are the phase-free columns (``steady_columns``: the band amplitudes, each
    band's power smoothed over about two of its cycles). Two states are joined when all hold:

    1. they alternate: they hand over to each other more often than by chance
       (:func:`exchange_lift` > ``min_lift`` = 1);
    2. they are one rhythm: their means on the phase-free columns lie within ``max_distance`` = 1
       pooled standard deviation (:func:`mean_distance`), so those columns cannot tell them
       apart;
    3. they are phases, not bouts: each state's mean stay ``1 / (1 - P_ii)`` frames is at most
       ``max_phase_s`` (1 s: half a cycle of the slowest band, 0.5 Hz). Two still postures that
       follow each other (sitting and lying) share low band amplitudes but are held for
       seconds, so they stay apart.

    Joined pairs are chained (a cycle of four phases that each hand over to the next is one
    group). Distinct rhythmic behaviours differ in their band amplitudes, so they are not
    joined, and a model whose states are behaviours already has no such pair: it is left as
    it is.

    Returns
    -------
    assignment : (n,) int, the group of every state (numbered by first state)
    pairs : list of dict, one per joined pair: ``states`` (a, b), ``lift``, ``distance``,
    ``stay_s`` (the two mean stays, seconds)
    """
    T = np.asarray(transmat, dtype=np.float64)
    n = len(T)
    lift = exchange_lift(T)
    dist = mean_distance(means, covars, steady_columns)
    stay = 1.0 / np.maximum(1.0 - np.diag(T), 1e-300) / float(fps)
    pairs = []
    if len(list(steady_columns)):
        for a in range(n):
            for b in range(a + 1, n):
                if (
                    lift[a, b] > min_lift
                    and dist[a, b] < max_distance
                    and max(stay[a], stay[b]) <= max_phase_s
                ):
                    pairs.append(
                        {
                            "states": (a, b),
                            "lift": float(lift[a, b]),
                            "distance": float(dist[a, b]),
                            "stay_s": (float(stay[a]), float(stay[b])),
                        }
                    )
    return pair_components(n, [p["states"] for p in pairs]), pairs


# Points of the ridgeline searched for the mixture's maxima: a mode narrower than 1/1000 of the
# path between two state means is far below any feature's resolution.
RIDGELINE_POINTS = 1001


def ridgeline_modes(
    mean_a: np.ndarray,
    cov_a: np.ndarray,
    mean_b: np.ndarray,
    cov_b: np.ndarray,
    weight_a: float = 0.5,
    n_points: int = RIDGELINE_POINTS,
) -> int:
    """Number of modes of the two-Gaussian mixture ``w N(mean_a, cov_a) + (1 - w) N(mean_b,
    cov_b)``, in any dimension.

    Every critical point of such a mixture lies on its *ridgeline* (Ray & Lindsay 2005, "The
    topography of multivariate normal mixtures", Ann. Statist. 33, 2042-2065, Theorem 1)
    ``x*(t) = [(1 - t) S_a^-1 + t S_b^-1]^-1 [(1 - t) S_a^-1 m_a + t S_b^-1 m_b]``, t in [0, 1],
    and the modes are the local maxima of the mixture's density along it (their Theorem 2 and
    Corollary 1 for two components); the density is evaluated at ``n_points`` values of t.
    One mode: the two components are one cluster that a Gaussian model split in two.

    Examples
    --------
    >>> I = np.eye(1)
    >>> ridgeline_modes(np.zeros(1), I, np.full(1, 1.9), I), ridgeline_modes(np.zeros(1), I,
    ...     np.full(1, 2.1), I)
    (1, 2)
    """
    m_a, m_b = (np.asarray(m, dtype=np.float64).ravel() for m in (mean_a, mean_b))
    s_a, s_b = (np.atleast_2d(np.asarray(s, dtype=np.float64)) for s in (cov_a, cov_b))
    if not 0 < weight_a < 1:
        raise InputError(f"weight_a must be in (0, 1); got {weight_a!r}")
    p_a, p_b = np.linalg.inv(s_a), np.linalg.inv(s_b)
    t = np.linspace(0.0, 1.0, int(n_points))[:, None, None]
    precision = (1 - t) * p_a + t * p_b
    rhs = ((1 - t) * (p_a @ m_a)[:, None] + t * (p_b @ m_b)[:, None])[..., 0]
    x = np.linalg.solve(precision, rhs[..., None])[..., 0]  # (n_points, D)

    def log_density(mean: np.ndarray, cov: np.ndarray) -> np.ndarray:
        chol = np.linalg.cholesky(cov)
        z = np.linalg.solve(chol, (x - mean).T)
        log_det = 2.0 * np.log(np.diag(chol)).sum()
        return -0.5 * ((z**2).sum(0) + log_det + len(mean) * np.log(2 * np.pi))

    h = np.logaddexp(
        np.log(weight_a) + log_density(m_a, s_a), np.log1p(-weight_a) + log_density(m_b, s_b)
    )
    rising = np.diff(h) > 0
    # a maximum: rising then not rising, plus the ends when the path leaves them downhill
    inner = int((rising[:-1] & ~rising[1:]).sum())
    return inner + int(not rising[0]) + int(rising[-1])


def join_modes(
    transmat: np.ndarray,
    means: np.ndarray,
    covars: np.ndarray,
    fps: float,
    min_lift: float = PHASE_MIN_LIFT,
    max_part_s: float = PHASE_MAX_S,
) -> tuple[np.ndarray, list[dict]]:
    """Join states that are parts of one cluster of frames, and leave every other state alone.

    A Gaussian HMM fits a cluster of frames that is not Gaussian (a movement whose vigour
    varies, a waveform's parts) with several states that alternate inside every bout. Two
    states are joined when all hold:

    1. they alternate: :func:`exchange_lift` > ``min_lift`` = 1 (more than by chance), as in
       :func:`join_phases`;
    2. they are one mode: the mixture of their two Gaussians, weighted by their occupancy,
       has a single mode (:func:`ridgeline_modes`). Two behaviours, however close, are two
       modes of the frames; this has no threshold to choose;
    3. they are parts, not bouts: each state's mean stay ``1 / (1 - P_ii)`` frames is at most
       ``max_part_s`` (1 s, the limit of :func:`join_phases`). Two states held for seconds
       that share one mode (a still posture inside a broad moving one) stay apart.

    Joined pairs are chained. Returns the group of every state and the joined pairs
    (``states``, ``lift``, ``stay_s``).
    """
    T = np.asarray(transmat, dtype=np.float64)
    means = np.asarray(means, dtype=np.float64)
    covars = np.asarray(covars, dtype=np.float64)
    n = len(T)
    lift = exchange_lift(T)
    pi = stationary_distribution(T)
    stay = 1.0 / np.maximum(1.0 - np.diag(T), 1e-300) / float(fps)
    pairs = []
    for a in range(n):
        for b in range(a + 1, n):
            if not (lift[a, b] > min_lift and max(stay[a], stay[b]) <= max_part_s):
                continue
            w = float(pi[a] / (pi[a] + pi[b]))
            if 0 < w < 1 and ridgeline_modes(means[a], covars[a], means[b], covars[b], w) == 1:
                pairs.append(
                    {
                        "states": (a, b),
                        "lift": float(lift[a, b]),
                        "stay_s": [float(stay[a]), float(stay[b])],
                    }
                )
    return pair_components(n, [p["states"] for p in pairs]), pairs
