"""Frame-by-frame forward filtering of a fitted GaussianHMM, for live (closed-loop) use.

``HMMFilter(model).push(x)`` returns the causal posterior ``P(state_t | x_1..t)`` after each
frame, equal to ``model.filter`` on the same session. A frame with any NaN (pose lost) is a
prediction step only: the posterior is propagated through the transition matrix.
"""

from __future__ import annotations

import numpy as np

from ethoscribe.errors import InputError
from ethoscribe.segment._hmm_gaussian import GaussianEmission
from ethoscribe.segment.inputs import check_fitted


class HMMFilter:
    """Causal state posteriors of a fitted :class:`GaussianHMM`, one frame at a time.

    Parameters
    ----------
    model : fitted GaussianHMM

    Attributes
    ----------
    log_likelihood : float
        ``log P(x_1..t)`` of the frames pushed since the last :meth:`reset`.
    best_log_likelihood : float
        ``max_k log N(x_t | mean_k, cov_k)`` of the last frame pushed (NaN for a frame without
        features): how well the state that explains it best does, the quantity a model's
        poor-fit threshold reads.
    n_frames : int

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> X = np.r_[rng.normal(0, 1, (100, 2)), rng.normal(6, 1, (100, 2))]
    >>> from ethoscribe.segment.hmm import GaussianHMM
    >>> live = HMMFilter(GaussianHMM(n_states=2, n_restarts=1).fit(X))
    >>> int(np.argmax(live.push(X[150])))
    1
    """

    def __init__(self, model):
        check_fitted(model, "means_")
        self.n_states = int(model.n_states_)
        self.n_features = int(model.n_features_in_)
        self._emission = GaussianEmission(model.means_, model.covars_, model.covariance_type)
        self._startprob = np.array(model.startprob_, dtype=np.float64)
        self._transmat = np.array(model.transmat_, dtype=np.float64)
        self._log_b = np.empty((1, self.n_states))
        self.reset()

    def reset(self) -> None:
        """Start a new session."""
        self._alpha: np.ndarray | None = None
        self.log_likelihood = 0.0
        self.best_log_likelihood = float("nan")
        self.n_frames = 0

    def push(self, x: np.ndarray) -> np.ndarray:
        """Add one frame ``x (n_features,)``; return the posterior over states ``(K,)``."""
        x = np.asarray(x, dtype=np.float64).reshape(1, -1)
        if x.shape[1] != self.n_features:
            msg = (
                f"frame {self.n_frames}: expected {self.n_features} features, got {x.shape[1]}; "
                "use the feature pipeline the model was fitted with"
            )
            raise InputError(msg)
        prior = self._startprob if self._alpha is None else self._alpha @ self._transmat
        self.n_frames += 1
        if not np.isfinite(x).all():
            self._alpha = prior / prior.sum()
            self.best_log_likelihood = float("nan")
            return self._alpha.copy()
        log_b = self._emission.log_likelihood(x, out=self._log_b)[0]
        top = log_b.max()
        self.best_log_likelihood = float(top)
        alpha = prior * np.exp(log_b - top)
        total = alpha.sum()
        self.log_likelihood += float(np.log(total) + top)
        self._alpha = alpha / total
        return self._alpha.copy()
