"""Event boundaries at peaks of prediction error (event segmentation theory).

Event segmentation theory (Zacks, Speer, Swallow, Braver & Reynolds 2007, Psychological Bulletin
133, "Event perception: a mind-brain perspective") holds that observers keep a model of the
current event, predict what comes next, and perceive a boundary when prediction error spikes.

The predictive model is a vector autoregression of order ``p`` on standardised features,
``x_t ~ c + A_1 x_{t-1} + ... + A_p x_{t-p}``:

1. ``fit`` estimates a *global* model by ridge least squares across all sessions (lags never
   cross a session boundary): general knowledge of how behaviour unfolds.
2. Every few frames (a tenth of the memory) a model of the last ``memory_s`` seconds (the current
   event) and one of the next ``memory_s`` seconds are fitted, their dynamics shrunk towards the
   global ones (one pseudo-frame per coefficient) and their level free. Surprise is how much
   worse each stretch is predicted by the other stretch's model than by its own (half the sum of
   the two log error ratios; errors in units of the global residual variance). A single global
   model cannot flag a switch of dynamics as a peak (its error only steps up or down); this
   statistic peaks at the switch in either direction, and at a change of level.
3. Surprise is smoothed over ``smooth_s`` seconds and standardised by the median and the
   median-to-84th-percentile spread of the surprise on a series simulated from the fitted global
   model (nothing changes there; the training data cannot serve, as most of its frames lie within
   a window's reach of a boundary).
4. Boundaries are peaks (``scipy.signal.find_peaks``) with z >= ``threshold`` and prominence
   >= ``threshold / 2``, at least ``max(min_duration_s, memory_s / 2)`` apart.
   ``threshold="auto"`` is 4, chosen on simulated data: about 1 false boundary per 10^4 frames
   on a stationary AR(1) (coefficient 0.9, 6 features).

Each peak is then placed at the best frame within one refit step (surprise re-evaluated frame
by frame there). The memory sets the shortest event told apart (about ``memory_s / 2``).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy.ndimage import uniform_filter1d
from scipy.signal import find_peaks
from sklearn.base import BaseEstimator

from ethoscribe.errors import InputError
from ethoscribe.saved_state import check_header, header
from ethoscribe.segment.inputs import check_fitted, check_X_lengths, split_by_lengths

AUTO_THRESHOLD = 4.0
UPPER_SD_QUANTILE = 0.8413447460685429  # Phi(1): median to this quantile = 1 SD if normal
NULL_FRAMES = (5000, 30000)
NULL_BURN_IN = 200
NULL_SEED = 0
_CHUNK_BLOCKS = 2048  # blocks per batched solve: bounds memory at ~2048 * m * m floats

FORMAT_VERSION = 1  # layout of to_state()


def _lagged(x: np.ndarray, order: int) -> tuple[np.ndarray, np.ndarray]:
    """Design rows ``[1, x_{t-1}, ..., x_{t-p}]`` and targets ``x_t`` for t = p .. n-1."""
    n = len(x)
    lags = [x[order - k : n - k] for k in range(1, order + 1)]
    z = np.hstack([np.ones((n - order, 1)), *lags])
    return z, x[order:]


def _shrunk_fit(
    g: np.ndarray, h: np.ndarray, n_rows: np.ndarray, coef: np.ndarray, prior: float
) -> np.ndarray:
    """Ridge fits shrunk towards ``coef``, the prior weighing as ``prior`` rows of the window.

    The penalty is ``prior * mean(z_i^2)`` per lag coefficient (the window's own scale), so a
    quiet stretch is not simply overruled by the prior; the intercept (local level) is free.
    """
    m = g.shape[-1]
    scale = np.einsum("bii->bi", g) / np.maximum(n_rows, 1)[:, None] + 1e-12
    lam = prior * scale
    lam[:, 0] = 1e-6 * scale[:, 0]  # the local level is free: only the dynamics are shrunk
    a = g + lam[:, :, None] * np.eye(m)
    return np.linalg.solve(a, h + lam[:, :, None] * coef)


def _window_surprise(
    z: np.ndarray,
    y: np.ndarray,
    coef: np.ndarray,
    inv_var: np.ndarray,
    step: int,
    k: int,
    prior: float,
    only: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Two-window surprise at every ``step``-th row, from block sums of Gram matrices.

    At block start ``t`` the model of the recent past (rows ``[t - k*step, t)``) and the model of
    what follows (rows ``[t, t + k*step)``) are each fitted (:func:`_shrunk_fit`). Surprise is half
    the sum, over both windows, of log("error of the other window's model" / "error of the
    window's own model"). Errors come from sufficient statistics (``Z'Z``, ``Z'Y``, ``sum y^2``).

    ``only`` restricts the evaluation to those block indices (the others stay 0).

    Returns
    -------
    surprise : array, shape (n_blocks,)
    rows_each_side : int array, shape (n_blocks,), the smaller of the two window sizes (rows)
    """
    n, m = z.shape
    d = y.shape[1]
    nb = -(-n // step)
    pad = nb * step - n
    zb = np.vstack([z, np.zeros((pad, m))]).reshape(nb, step, m)
    yb = np.vstack([y, np.zeros((pad, d))]).reshape(nb, step, d)
    counts = np.minimum(step, n - step * np.arange(nb))
    surprise = np.zeros(nb)
    rows = np.zeros(nb, dtype=np.int64)
    wanted = np.ones(nb, dtype=bool)
    if only is not None:
        wanted[:] = False
        wanted[only] = True
    for lo in range(0, nb, _CHUNK_BLOCKS):
        hi = min(nb, lo + _CHUNK_BLOCKS)
        sel = lo + np.flatnonzero(wanted[lo:hi])
        if len(sel) == 0:
            continue
        a0, a1 = max(0, lo - k), min(nb, hi + k)  # blocks this chunk's windows can reach
        zt = zb[a0:a1].transpose(0, 2, 1)
        cg = _cumsum0(zt @ zb[a0:a1])
        ch = _cumsum0(zt @ yb[a0:a1])
        cy = _cumsum0((yb[a0:a1] ** 2).sum(axis=1))
        cn = _cumsum0(counts[a0:a1])
        j = sel - a0
        windows = ((np.maximum(j - k, 0), j), (j, np.minimum(j + k, a1 - a0)))
        stats = [(cg[q] - cg[p], ch[q] - ch[p], cy[q] - cy[p], cn[q] - cn[p]) for p, q in windows]
        models = [_shrunk_fit(g, h, nr, coef, prior) for g, h, _, nr in stats]
        own = [_weighted_rss(models[i], stats[i], inv_var) for i in (0, 1)]
        cross = [_weighted_rss(models[1 - i], stats[i], inv_var) for i in (0, 1)]
        surprise[sel] = 0.5 * (np.log(cross[0] / own[0]) + np.log(cross[1] / own[1]))
        rows[sel] = np.minimum(stats[0][3], stats[1][3])
    return surprise, rows


def _cumsum0(a: np.ndarray) -> np.ndarray:
    """Cumulative sum along axis 0 with a leading zero entry."""
    return np.concatenate([np.zeros((1, *a.shape[1:])), np.cumsum(a, axis=0)])


def _weighted_rss(w: np.ndarray, stats: tuple, inv_var: np.ndarray) -> np.ndarray:
    """Residual sum of squares of models ``w`` on windows given by their sufficient statistics."""
    g, h, yy, _ = stats
    rss = yy - 2 * np.einsum("bmd,bmd->bd", w, h) + np.einsum("bmd,bmd->bd", w, g @ w)
    return np.maximum(rss, 0.0) @ inv_var + 1e-9


class PredictionErrorBoundaries(BaseEstimator):
    """Boundaries where a short-memory autoregressive model of the features is surprised.

    Parameters
    ----------
    order : int
        Autoregressive order ``p`` (frames of history).
    ridge : float
        Ridge penalty of the global model, per frame of training data (intercept unpenalised).
    smooth_s : float
        Seconds of error averaged forward from each frame (0 = single frame).
    threshold : "auto" or float
        Smallest peak height in robust z units (see the module docstring).
    min_duration_s : float
        Shortest event; also the smallest distance between boundaries.
    fps : float
        Frames per second of the features.
    memory_s : float
        Seconds of recent past the current-event model is fitted on.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> x = np.r_[rng.normal(0, 1, (300, 2)), rng.normal(4, 1, (300, 2))]
    >>> pe = PredictionErrorBoundaries().fit(x)
    >>> [b.tolist() for b in pe.boundaries(x)]  # the level shifts at frame 300
    [[301]]
    """

    def __init__(
        self,
        order: int = 2,
        ridge: float = 1e-3,
        smooth_s: float = 0.1,
        threshold: str | float = "auto",
        min_duration_s: float = 0.3,
        fps: float = 30.0,
        memory_s: float = 2.0,
    ) -> None:
        self.order = order
        self.ridge = ridge
        self.smooth_s = smooth_s
        self.threshold = threshold
        self.min_duration_s = min_duration_s
        self.fps = fps
        self.memory_s = memory_s

    # --- parameters ---------------------------------------------------------------------
    def _check_params(self) -> None:
        def number(v: Any, low: float) -> bool:  # a finite number > low (>= 0 when low < 0)
            ok = isinstance(v, (int, float, np.number)) and not isinstance(v, bool)
            return ok and np.isfinite(v) and (v > low or (low < 0 and v == 0))

        whole = isinstance(self.order, (int, np.integer)) and self.order >= 1
        checks = [("order", "whole number >= 1", whole)]
        checks += [(n, "number >= 0", number(getattr(self, n), -1)) for n in ("ridge", "smooth_s")]
        auto = self.threshold == "auto"
        checks += [("threshold", "positive number or 'auto'", auto or number(self.threshold, 0))]
        for name in ("min_duration_s", "fps", "memory_s"):
            checks.append((name, "positive number", number(getattr(self, name), 0)))
        problems = [
            f"{n} must be a {k} (got {getattr(self, n)!r})" for n, k, ok in checks if not ok
        ]
        if problems:
            raise InputError("PredictionErrorBoundaries: " + "; ".join(problems))

    def _frames(self) -> tuple[int, int, int, int]:
        """min duration, forward smoothing, memory window and refit step, in frames."""
        min_size = max(2, round(self.min_duration_s * self.fps))
        smooth = max(1, round(self.smooth_s * self.fps))
        memory = max(2 * self.order + 2, round(self.memory_s * self.fps))
        step = max(1, memory // 10)
        memory = step * (-(-memory // step))
        return min_size, smooth, memory, step

    def _check_sessions(self, lengths: np.ndarray) -> None:
        need = self.order + 2
        short = np.flatnonzero(lengths < need)
        if len(short):
            i = int(short[0])
            raise InputError(
                f"session {i} has {int(lengths[i])} frames; an order-{self.order} predictive "
                f"model needs at least {need}. Drop the session or lower `order`."
            )

    # --- fitting ------------------------------------------------------------------------
    def fit(self, X: np.ndarray, lengths: np.ndarray | None = None) -> PredictionErrorBoundaries:
        """Fit the global autoregressive model and the surprise scale on all sessions.

        Parameters
        ----------
        X : array, shape (n_frames, n_features)
        lengths : int array, shape (n_sessions,), optional
        """
        self._check_params()
        X, lengths = check_X_lengths(X, lengths)
        self._check_sessions(lengths)
        mean = X.mean(axis=0)
        scale = X.std(axis=0)
        scale[scale == 0] = 1.0
        xs = (X - mean) / scale
        m = 1 + self.order * X.shape[1]
        gram, cross, n_rows = np.zeros((m, m)), np.zeros((m, X.shape[1])), 0
        for part in split_by_lengths(xs, lengths):
            z, y = _lagged(part, self.order)
            gram += z.T @ z
            cross += z.T @ y
            n_rows += len(z)
        penalty = np.full(m, self.ridge * n_rows)
        penalty[0] = 0.0
        coef = np.linalg.solve(gram + np.diag(penalty) + 1e-10 * np.eye(m), cross)
        sq = np.zeros(X.shape[1])
        for part in split_by_lengths(xs, lengths):
            z, y = _lagged(part, self.order)
            sq += ((y - z @ coef) ** 2).sum(axis=0)
        resid = sq / n_rows
        self.mean_, self.scale_, self.coef_ = mean, scale, coef
        self.residual_variance_ = np.maximum(resid, 1e-6)
        self.n_features_in_ = X.shape[1]
        null = self._null_surprise(int(lengths.sum()))
        center = float(np.median(null))
        spread = float(np.quantile(null, UPPER_SD_QUANTILE) - center)
        self.surprise_center_ = center
        self.surprise_scale_ = spread if spread > 0 else 1.0
        return self

    def _null_surprise(self, n_frames: int) -> np.ndarray:
        """Surprise on a series simulated from the fitted global model (nothing changes).

        A parametric bootstrap of the no-boundary case: training data cannot serve, as most of
        its frames lie within a window's reach of some boundary.
        """
        d = self.n_features_in_
        n = int(np.clip(n_frames, NULL_FRAMES[0], NULL_FRAMES[1]))
        rng = np.random.default_rng(NULL_SEED)
        noise = rng.standard_normal((n + NULL_BURN_IN, d)) * np.sqrt(self.residual_variance_)
        lags = [self.coef_[1 + k * d : 1 + (k + 1) * d] for k in range(self.order)]
        x = np.zeros((n + NULL_BURN_IN, d))
        for t in range(self.order, len(x)):  # a short sequential recursion (<= 30 000 steps)
            x[t] = self.coef_[0] + noise[t] + sum(x[t - k - 1] @ lags[k] for k in range(self.order))
            if not np.isfinite(x[t]).all() or np.abs(x[t]).max() > 1e6:
                # An unstable fitted model: fall back to white noise of the residual scale.
                x = noise.copy()
                break
        x = x[NULL_BURN_IN:]
        return self._block_surprise(x, np.array([n]))[0][0]

    def _block_surprise(
        self, xs: np.ndarray, lengths: np.ndarray, refine: bool = False
    ) -> list[tuple[np.ndarray, np.ndarray]]:
        """Per session: surprise per block and the frame each block starts at.

        With ``refine``, also the boundaries: peaks of the block surprise, each moved to the
        best single frame within one refit step (surprise re-evaluated frame by frame there).
        """
        min_size, smooth, memory, step = self._frames()
        prior = float(xs.shape[1] * self.order + 1)  # one pseudo-frame per coefficient
        inv_var = 1.0 / self.residual_variance_
        height = AUTO_THRESHOLD if self.threshold == "auto" else float(self.threshold)
        out = []
        for part in split_by_lengths(xs, lengths):
            z, y = _lagged(part, self.order)
            s, rows = _window_surprise(z, y, self.coef_, inv_var, step, memory // step, prior)
            s = np.where(rows >= min(min_size, memory // 2), s, 0.0)
            if smooth > step:
                s = uniform_filter1d(s, max(1, round(smooth / step)), mode="nearest")
            if not refine:
                out.append((s, self.order + step * np.arange(len(s))))
                continue
            zs = (s - self.surprise_center_) / self.surprise_scale_
            distance = max(1, max(min_size, memory // 2) // step)
            peaks, _ = find_peaks(zs, height=height, prominence=height / 2, distance=distance)
            best = []
            for r in peaks * step:  # a loop over boundaries, not frames
                lo, hi = max(0, r - step - memory), min(len(z), r + step + memory)
                cand = np.arange(max(r - step + 1, 0), min(r + step, len(z))) - lo
                fine, _ = _window_surprise(
                    z[lo:hi], y[lo:hi], self.coef_, inv_var, 1, memory, prior, only=cand
                )
                best.append(lo + cand[np.argmax(fine[cand])])
            b = self.order + np.asarray(best, dtype=np.int64)
            out.append((b[(b >= min_size) & (b <= len(part) - min_size)], None))
        return out

    def _log_surprise(self, xs: np.ndarray, lengths: np.ndarray) -> np.ndarray:
        """Surprise of every frame (the value of the block it falls in)."""
        out = []
        for (s, start), n in zip(self._block_surprise(xs, lengths), lengths, strict=True):
            idx = np.clip(np.searchsorted(start, np.arange(n), side="right") - 1, 0, len(s) - 1)
            out.append(s[idx])
        return np.concatenate(out)

    # --- applying -----------------------------------------------------------------------
    def _prepare(self, X: np.ndarray, lengths: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
        check_fitted(self, "coef_")
        X, lengths = check_X_lengths(X, lengths, n_features=self.n_features_in_)
        self._check_sessions(lengths)
        return (X - self.mean_) / self.scale_, lengths

    def prediction_error(self, X: np.ndarray, lengths: np.ndarray | None = None) -> np.ndarray:
        """Standardised surprise per frame (robust z units; about 0 within an event).

        Returns
        -------
        array, shape (n_frames,)
        """
        xs, lengths = self._prepare(X, lengths)
        return (self._log_surprise(xs, lengths) - self.surprise_center_) / self.surprise_scale_

    def boundaries(self, X: np.ndarray, lengths: np.ndarray | None = None) -> list[np.ndarray]:
        """Boundary frames (first frame of each new event) of every session.

        Returns
        -------
        list of int64 arrays, one per session, indices within the session (0 excluded).
        """
        xs, lengths = self._prepare(X, lengths)
        return [b for b, _ in self._block_surprise(xs, lengths, refine=True)]

    # --- persistence --------------------------------------------------------------------
    def to_state(self) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
        """JSON-able parameters and fitted arrays (no pickle)."""
        check_fitted(self, "coef_")
        meta = {
            **header("ethoscribe.PredictionErrorBoundaries", FORMAT_VERSION),
            "params": self.get_params(),
            "n_features_in": int(self.n_features_in_),
            "surprise_center": self.surprise_center_,
            "surprise_scale": self.surprise_scale_,
        }
        arrays = {
            "mean": self.mean_,
            "scale": self.scale_,
            "coef": self.coef_,
            "residual_variance": self.residual_variance_,
        }
        return meta, arrays

    @classmethod
    def from_state(
        cls, meta: dict[str, Any], arrays: dict[str, np.ndarray]
    ) -> PredictionErrorBoundaries:
        """Rebuild a fitted detector saved by :meth:`to_state`."""
        what = "prediction-error state"
        check_header(meta, "ethoscribe.PredictionErrorBoundaries", FORMAT_VERSION, what)
        obj = cls(**meta["params"])
        for name in ("mean", "scale", "coef", "residual_variance"):
            setattr(obj, f"{name}_", np.asarray(arrays[name], dtype=np.float64))
        obj.n_features_in_ = int(meta["n_features_in"])
        obj.surprise_center_ = float(meta["surprise_center"])
        obj.surprise_scale_ = float(meta["surprise_scale"])
        return obj
