"""Slow regimes: stretches of minutes in which the labelled states alternate in a steady mix.

Some recordings change what they do only every minute or more while their frame-level states
switch every second or two inside each stretch (a sensor worn through long activities, a
machine's duty cycle): each stretch is then one *mix* of states, not one state. This module
tells such recordings apart and labels the stretches:

* **persistence** of the state mix at window ``w``: the labels are cut into consecutive windows of
  ``w`` seconds, each described by the share of every state in it; over the *mixed* windows (no
  state above 80 % of the window) persistence is ``1 - E|s_i - s_{i+1}|^2 / E|s_i - s_j|^2``
  (consecutive windows against any two windows of the same recording). It is near 0 when
  behaviours last a few seconds (the next 16 s are as unlike this 16 s as any other 16 s) and
  near 1 when the mix holds for minutes. Windows of one state are left out: an animal resting
  for minutes between active spells makes its windows alike without any mix holding (invented
  labels of that kind: 0.68 over every window, 0.04 over the mixed ones).
* **regimes**: when persistence at ``window_s`` reaches ``threshold`` (and beats the same
  windows put in random orders: permutation p <= 0.01) the frames are described by
  the state shares in a centred window of ``window_s`` and clustered with k-means (scikit-learn),
  the count chosen by the silhouette (Rousseeuw 1987) from ``2..max_regimes``. A frame's
  probability of each regime is the posterior of the spherical Gaussian mixture with those
  centres and the pooled within-cluster variance (k-means is its hard-assignment limit), so the
  label is the most probable regime. ``BehaviourModel`` labels with
  :meth:`SlowRegimes.label_bouts`: a regime bout shorter than the window never has a window of
  its own mix, so the regimes are decoded on a chain that holds each for at least the window,
  and every frame's probability is that chain's posterior of its final regime.

Measured on the validation bench (benchmarks/README.md, "Slow regimes"): persistence at 16 s is
-0.12 to 0.19 on every simulated source, -0.09 to 0.31 on BasicMotions (activities of 10 s),
0.47-0.64 on HAPT and the two benchmark series (seeds 0-2); the threshold 0.4 lies between.

* **one change per recording**: a slow structure can also be one change of condition in each
  recording (a treatment given halfway, an animal settling) rather than regimes that come and
  go. :func:`residual_persistence` is the persistence left once each recording's windows are
  split at their one best change (least squares) and each part's mean mix is taken off: near 0
  when one change explains the structure. Regimes are still labelled then (the model cannot
  tell a change of condition from a change of activity), but the model says so and how to keep
  the behaviours. Invented sessions of the package's voles whose budget steps to resting and
  grooming halfway (4-20 min): persistence 0.40-0.50 (regimes labelled, ARI with the
  behaviours 0.72-0.85 -> 0.22-0.26) and residual -0.04 to 0.02; GunPoint (one change) -0.02
  to 0.01; HAPT 0.09-0.43 and ElectricDevices 0.35-0.48 (regimes that come and go); below
  ``ONE_CHANGE`` (0.05) the model says so. It also says so when the labelled regimes change at
  most once per recording on average (HAPT 5-6.5 times, ElectricDevices 13-14, GunPoint 1-2;
  two simulated fish sessions joined in one file: once, with a residual of 0.13).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from ethoscribe.segment import duration
from ethoscribe.segment.inputs import split_by_lengths

WINDOW_S = 16.0
THRESHOLD = 0.4
MAX_REGIMES = 8
SAMPLE = 4000
# The persistence must also be beyond what the same windows in random orders give (999 orders,
# p <= 0.01): a few windows (short sessions) make a high persistence by chance.
P_PERMUTATIONS = 999
P_VALUE = 0.01
# A window is mixed when no state holds more than this share of its labelled frames.
PURE = 0.8
# Residual persistence below this: one change per recording explains the slow structure.
ONE_CHANGE = 0.05
# Regimes are decoded on steps of at most window / STEPS_PER_WINDOW frames (their evidence
# summed): the chain's work grows with the frames a regime is held, and a mix read over 16 s
# needs no finer grid than 1/30 s (1,000,000 frames, 3 regimes: 5 s CPU at 30 fps, where the
# step is one frame; at 120 fps 18 s without the steps, 1.4 s with them)
STEPS_PER_WINDOW = 480


def _one_hot(states: np.ndarray, n_states: int) -> np.ndarray:
    out = np.zeros((len(states), n_states))
    ok = states >= 0
    out[np.flatnonzero(ok), states[ok]] = 1.0
    return out


def _spread(mix: np.ndarray) -> float:
    """Mean squared distance between two different rows of ``mix`` (n >= 2), over all ordered
    pairs i != j, without the n x n matrix."""
    n = len(mix)
    total = 2 * n * np.sum(mix**2) - 2 * np.sum(mix.sum(axis=0) ** 2)
    return float(total / (n * (n - 1)))


def _window_mixes(
    states: np.ndarray, lengths: Sequence[int], n_states: int, window: int
) -> list[tuple[np.ndarray, np.ndarray, float]]:
    """Per sequence: the state shares of its consecutive windows, which windows are mixed (no
    state holds more than ``PURE`` of their labelled frames) and the mean squared distance
    between two different mixed windows; sequences with fewer than three mixed windows, or
    with all mixed windows alike, are left out."""
    out = []
    for part in split_by_lengths(np.asarray(states, dtype=np.int64), lengths):
        m = len(part) // window
        if m < 3:
            continue
        shares = _one_hot(part[: m * window], n_states).reshape(m, window, n_states).mean(axis=1)
        seen = shares.sum(axis=1)
        mixed = (seen > 0) & (shares.max(axis=1) <= PURE * seen)
        n = int(mixed.sum())
        if n < 3:
            continue
        spread = _spread(shares[mixed])
        if spread > 1e-12:
            out.append((shares, mixed, spread))
    return out


def _near(shares: np.ndarray, mixed: np.ndarray, spread: float) -> np.ndarray:
    """Mean squared step between consecutive windows that are both mixed; leading axes are
    orderings. Without such a pair the windows say nothing: ``spread`` (persistence 0)."""
    pairs = mixed[..., 1:] & mixed[..., :-1]
    steps = np.sum(np.diff(shares, axis=-2) ** 2, axis=-1)
    count = pairs.sum(axis=-1)
    near = np.sum(steps * pairs, axis=-1) / np.maximum(count, 1)
    return np.where(count > 0, near, spread)


def _weighted(mixes: list[tuple[np.ndarray, np.ndarray, float]], near: list) -> np.ndarray:
    values = np.array([1.0 - n / spread for (*_, spread), n in zip(mixes, near, strict=True)])
    weights = np.array([m.sum() for _, m, _ in mixes], dtype=np.float64)
    return weights @ values / weights.sum()


def persistence(states: np.ndarray, lengths: Sequence[int], n_states: int, window: int) -> float:
    """Persistence of the state mix over consecutive windows of ``window`` frames (module doc),
    over the mixed windows (no state above ``PURE`` of the window): a long bout of one state
    (an animal resting for minutes) makes its windows alike without any mix holding; NaN when
    no sequence holds three mixed windows. Sequences are weighted by their mixed windows."""
    mixes = _window_mixes(states, lengths, n_states, window)
    if not mixes:
        return float("nan")
    return float(_weighted(mixes, [_near(*mix) for mix in mixes]))


def persistence_p_value(
    states: np.ndarray,
    lengths: Sequence[int],
    n_states: int,
    window: int,
    n_permutations: int = 999,
    random_state: int = 0,
) -> float:
    """One-sided permutation p-value of :func:`persistence`: the windows of every sequence put
    in random orders (which keeps each window's mix and forgets their order); NaN when no
    sequence holds three mixed windows. A few windows give a noisy persistence, so a high value
    alone is not evidence (three windows have 6 orders: p is never below 1/6)."""
    mixes = _window_mixes(states, lengths, n_states, window)
    if not mixes:
        return float("nan")
    rng = np.random.default_rng(random_state)
    observed = _weighted(mixes, [_near(*mix) for mix in mixes])
    near = []
    for shares, mixed, spread in mixes:
        order = rng.permuted(np.tile(np.arange(len(shares)), (n_permutations, 1)), axis=1)
        near.append(_near(shares[order], mixed[order], spread))
    null = _weighted(mixes, near)
    return float((1 + np.sum(null >= observed - 1e-12)) / (n_permutations + 1))


def _one_split(shares: np.ndarray) -> int:
    """The window at which one split of ``shares`` (m, n_states) leaves the least squared
    distance of the windows to their part's mean (each part at least one window)."""
    m = len(shares)
    c1 = np.cumsum(shares, axis=0)
    c2 = np.cumsum(np.sum(shares**2, axis=1))
    t = np.arange(1, m)
    left = c2[t - 1] - np.sum(c1[t - 1] ** 2, axis=1) / t
    rest = c1[-1] - c1[t - 1]
    right = c2[-1] - c2[t - 1] - np.sum(rest**2, axis=1) / (m - t)
    return int(t[np.argmin(left + right)])


def residual_persistence(
    states: np.ndarray, lengths: Sequence[int], n_states: int, window: int
) -> float:
    """:func:`persistence` of the window mixes once each sequence's windows are split at their
    one best change (:func:`_one_split`, over all its windows) and each part's mean mix is
    subtracted: what is left of the slow structure beyond one change per recording (module
    doc). NaN when no sequence holds three mixed windows."""
    mixes = []
    for shares, mixed, _ in _window_mixes(states, lengths, n_states, window):
        b = _one_split(shares)
        res = shares.copy()
        res[:b] -= shares[:b].mean(axis=0)
        res[b:] -= shares[b:].mean(axis=0)
        spread = _spread(res[mixed])
        if spread > 1e-12:
            mixes.append((res, mixed, spread))
    if not mixes:
        return float("nan")
    return float(_weighted(mixes, [_near(*mix) for mix in mixes]))


def window_shares(
    states: np.ndarray, lengths: Sequence[int], n_states: int, window: int
) -> np.ndarray:
    """Share of each state in a centred window of ``window`` frames around every frame
    (shorter at a sequence's ends; unscored frames, -1, count in no state)."""
    out = []
    half = window // 2
    for part in split_by_lengths(np.asarray(states, dtype=np.int64), lengths):
        n = len(part)
        cum = np.zeros((n + 1, n_states))
        np.cumsum(_one_hot(part, n_states), axis=0, out=cum[1:])
        i = np.arange(n)
        lo, hi = np.clip(i - half, 0, n), np.clip(i + half + 1, 0, n)
        out.append((cum[hi] - cum[lo]) / (hi - lo)[:, None])
    return np.concatenate(out) if out else np.zeros((0, n_states))


class SlowRegimes:
    """Regimes of the state mix (module doc), fitted on labelled training frames.

    Parameters
    ----------
    window_s : float
        Window of the state shares (seconds).
    threshold : float
        Smallest persistence at ``window_s`` for regimes to be used.
    max_regimes : int
        Largest regime count tried.
    random_state : int
        Seed of the subsample and k-means.

    Attributes
    ----------
    persistence_ : float
        Persistence of the training labels at ``window_s``.
    p_value_ : float
        Its permutation p-value (:func:`persistence_p_value`).
    used_ : bool
        Whether it reached ``threshold`` with a p-value of at most 0.01 (else the labels stay
        as they are).
    centres_ : ndarray (n_regimes, n_states)
        Mean state shares of every regime (empty when not used).
    variance_ : float
        Pooled within-regime variance per share column.
    silhouettes_ : dict
        Silhouette of every count tried.
    residual_persistence_ : float
        :func:`residual_persistence` of the training labels (NaN when not used).
    """

    def __init__(
        self,
        window_s: float = WINDOW_S,
        threshold: float = THRESHOLD,
        max_regimes: int = MAX_REGIMES,
        random_state: int = 0,
    ) -> None:
        self.window_s = window_s
        self.threshold = threshold
        self.max_regimes = max_regimes
        self.random_state = random_state

    def window(self, fps: float) -> int:
        """The window in frames at ``fps``."""
        return max(1, round(self.window_s * fps))

    def fit(
        self, states: np.ndarray, lengths: Sequence[int], n_states: int, fps: float
    ) -> SlowRegimes:
        """Measure the persistence of ``states`` (labels 0..n_states-1, -1 unscored; sequences
        of ``lengths`` frames at ``fps``) and, when it holds, cluster the window mixes."""
        from sklearn.cluster import KMeans
        from sklearn.metrics import silhouette_score

        window = self.window(fps)
        self.n_states_in_ = int(n_states)
        self.persistence_ = persistence(states, lengths, n_states, window)
        self.p_value_ = persistence_p_value(
            states, lengths, n_states, window, P_PERMUTATIONS, self.random_state
        )
        self.used_ = bool(
            np.isfinite(self.persistence_)
            and self.persistence_ >= self.threshold
            and self.p_value_ <= P_VALUE
        )
        self.centres_ = np.zeros((0, n_states))
        self.variance_ = float("nan")
        self.silhouettes_: dict[int, float] = {}
        self.residual_persistence_ = float("nan")
        self.changes_per_recording_ = float("nan")
        if not self.used_:
            return self
        self.residual_persistence_ = residual_persistence(states, lengths, n_states, window)
        shares = window_shares(states, lengths, n_states, window)[np.asarray(states) >= 0]
        rng = np.random.default_rng(self.random_state)
        sample = shares[rng.choice(len(shares), min(SAMPLE, len(shares)), replace=False)]
        best = None
        for k in range(2, self.max_regimes + 1):
            if len(np.unique(sample, axis=0)) <= k:
                break
            km = KMeans(k, n_init=4, random_state=self.random_state).fit(sample)
            score = float(silhouette_score(sample, km.labels_))
            self.silhouettes_[k] = score
            if best is None or score > best[0]:
                best = (score, km)
        if best is None:  # too few distinct mixes to cluster
            self.used_ = False
            return self
        km = best[1]
        self.centres_ = np.asarray(km.cluster_centers_, dtype=np.float64)
        self.variance_ = max(float(km.inertia_) / (len(sample) * n_states), 1e-6)
        # How often the labelled regimes change in a recording: at most once on average is
        # one change of condition as much as regimes that come and go (``one_change_``).
        regime = self.label_bouts(states, lengths, fps)[0]
        units = split_by_lengths(regime, lengths)
        self.changes_per_recording_ = float(np.mean([np.count_nonzero(np.diff(u)) for u in units]))
        return self

    @property
    def one_change_(self) -> bool:
        """Whether one change per recording explains the slow structure (module doc): the
        residual persistence after one change is below ``ONE_CHANGE``, or the labelled regimes
        change at most once per recording on average. Then the regimes may be a change of
        condition (a treatment, settling, recordings of different days written as one file)
        rather than activities that come and go."""
        few = self.changes_per_recording_ <= 1.0
        return bool(self.used_ and (self.residual_persistence_ < ONE_CHANGE or few))

    @property
    def n_regimes_(self) -> int:
        """Number of regimes (0 when not used)."""
        return len(self.centres_)

    def _log_density(self, shares: np.ndarray) -> np.ndarray:
        """Log-density of the frames' state shares under every regime's spherical Gaussian,
        up to a constant common to all regimes, (n_frames, n_regimes)."""
        d2 = (
            np.sum(shares**2, axis=1)[:, None]
            - 2 * shares @ self.centres_.T
            + np.sum(self.centres_**2, axis=1)[None, :]
        )
        return -0.5 * np.maximum(d2, 0.0) / self.variance_

    def predict_proba(self, shares: np.ndarray) -> np.ndarray:
        """Posterior of every regime given the frames' state shares (module doc)."""
        logit = self._log_density(shares)
        logit -= logit.max(axis=1, keepdims=True)
        p = np.exp(logit)
        return p / p.sum(axis=1, keepdims=True)

    def label(
        self, states: np.ndarray, lengths: Sequence[int], fps: float
    ) -> tuple[np.ndarray, np.ndarray]:
        """Regime (n_frames,) and regime probabilities (n_frames, n_regimes) of labelled
        frames; unscored frames (-1) stay -1."""
        shares = window_shares(states, lengths, self.n_states_in_, self.window(fps))
        prob = self.predict_proba(shares)
        regime = np.where(np.asarray(states) >= 0, np.argmax(prob, axis=1), -1)
        return regime, prob

    def label_bouts(
        self, states: np.ndarray, lengths: Sequence[int], fps: float, min_frames: int = 1
    ) -> tuple[np.ndarray, np.ndarray]:
        """Regimes whose every bout lasts at least the window (and ``min_frames``), and their
        probabilities, (n_frames,) and (n_frames, n_regimes), of scored frames' ``states``
        (all >= 0: the stacked frames of the sequences of ``lengths``).

        A regime bout shorter than the window never has a window of its own mix, so the
        regimes are decoded on the minimum-duration chain (:mod:`ethoscribe.segment.duration`)
        that holds each one the window, then moves with probability 1 / window a frame
        (uniform over the others). A frame's evidence is its window's log-density divided by
        the window length, since consecutive windows share all but one frame. Viterbi gives
        the labels and forward-backward on the same chain their probabilities. Above 30 fps
        (a 16-s window) the chain runs on steps of several frames, evidence summed over each
        (:data:`STEPS_PER_WINDOW`)."""
        window = self.window(fps)
        shares = window_shares(states, lengths, self.n_states_in_, window)
        log_b = self._log_density(shares) / window
        lengths = np.asarray(lengths, dtype=np.int64)
        step = max(1, window // STEPS_PER_WINDOW)
        sizes = np.ones(len(log_b), dtype=np.int64)
        if step > 1:  # each session cut into steps of `step` frames, its last one shorter
            ends = np.cumsum(lengths)
            bounds = zip(ends - lengths, ends, strict=True)
            first = np.concatenate([np.arange(a, e, step) for a, e in bounds])
            sizes = np.diff(np.r_[first, len(log_b)])
            log_b = np.add.reduceat(log_b, first, axis=0)
            lengths = -(-lengths // step)
        k = self.n_regimes_
        move = step / window
        trans = np.full((k, k), move / max(k - 1, 1))
        np.fill_diagonal(trans, 1.0 - move if k > 1 else 1.0)
        start = np.full(k, 1.0 / k)
        hold = -(-max(int(min_frames), window) // step)
        regime = duration.viterbi(log_b, start, trans, hold, lengths)[0]
        prob = duration.forward_backward(log_b, start, trans, hold, lengths, overwrite=True)
        return np.repeat(regime, sizes), np.repeat(prob.gamma, sizes, axis=0)

    def to_state(self) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
        """JSON-able description and arrays that rebuild the fitted regimes (no pickle)."""
        meta = {
            "window_s": float(self.window_s),
            "threshold": float(self.threshold),
            "max_regimes": int(self.max_regimes),
            "random_state": int(self.random_state),
            "n_states_in": self.n_states_in_,
            "persistence": None if not np.isfinite(self.persistence_) else self.persistence_,
            "p_value": None if not np.isfinite(self.p_value_) else self.p_value_,
            "used": self.used_,
            "variance": self.variance_ if self.used_ else None,
            "silhouettes": {str(k): v for k, v in self.silhouettes_.items()},
            "residual_persistence": None
            if not np.isfinite(self.residual_persistence_)
            else self.residual_persistence_,
            "changes_per_recording": None
            if not np.isfinite(self.changes_per_recording_)
            else self.changes_per_recording_,
        }
        return meta, {"centres": self.centres_}

    @classmethod
    def from_state(cls, meta: dict[str, Any], arrays: dict[str, np.ndarray]) -> SlowRegimes:
        """Rebuild regimes saved by :meth:`to_state`; ``ValueError`` on values out of range."""
        out = cls(
            float(meta["window_s"]),
            float(meta["threshold"]),
            int(meta["max_regimes"]),
            int(meta["random_state"]),
        )
        if not 0 < out.window_s <= 3600 or not 2 <= out.max_regimes <= 100:
            raise ValueError(
                f"regimes: window_s {meta['window_s']!r} (0-3600 s) or max_regimes "
                f"{meta['max_regimes']!r} (2-100) out of range"
            )
        out.n_states_in_ = int(meta["n_states_in"])
        p = meta["persistence"]
        out.persistence_ = float("nan") if p is None else float(p)
        p = meta.get("p_value")
        out.p_value_ = float("nan") if p is None else float(p)
        out.used_ = bool(meta["used"])
        centres = np.asarray(arrays["centres"], dtype=np.float64)
        if centres.ndim != 2 or centres.shape[1] != out.n_states_in_:
            raise ValueError(f"regime centres of shape {centres.shape}")
        out.centres_ = centres
        out.variance_ = float(meta["variance"]) if out.used_ else float("nan")
        if out.used_ and not (np.isfinite(out.variance_) and out.variance_ > 0):
            raise ValueError(f"regime variance {meta['variance']!r}")
        out.silhouettes_ = {int(k): float(v) for k, v in dict(meta["silhouettes"]).items()}
        r = meta.get("residual_persistence")  # absent from models saved before it
        out.residual_persistence_ = float("nan") if r is None else float(r)
        c = meta.get("changes_per_recording")  # likewise
        out.changes_per_recording_ = float("nan") if c is None else float(c)
        return out
