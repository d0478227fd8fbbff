"""Time HMM labelling with a minimum bout: the minimum-duration chain against Viterbi +
posteriors + merging short bouts, and the numba compile cost of the chain's kernels.

Usage: python benchmarks/bench_decode.py [n_frames ...]
       (default 100000 1000000; K = 8 and 12, d = 15 frames; about a minute on 2 cores)

Both paths include the Gaussian emission log-likelihoods (D = 12, full covariances). The data
are invented: frames drawn from a random K-state Gaussian mixture (``bench_hmm.sample``). The
machine may be shared: compare numbers measured in one run, and read CPU time beside wall time.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile

import numpy as np

from ethoscribe.segment.duration import OUTLIER_SHARE
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.postprocess import enforce_min_bout

sys.path.insert(0, __file__.rsplit("/", 1)[0])
from bench_hmm import random_model, sample, timed

MIN_FRAMES = 15  # 0.5 s at 30 fps
N_FEATURES = 12

COMPILE = """
import time
t = time.perf_counter()
import numpy as np
from ethoscribe.segment import duration
t1 = time.perf_counter()
duration.viterbi(np.zeros((5, 2)), np.full(2, .5), np.full((2, 2), .5), 2)
duration.forward_backward(np.zeros((5, 2)), np.full(2, .5), np.full((2, 2), .5), 2)
print(f"{time.perf_counter() - t1:.2f}")
"""


def fitted(n_states: int) -> GaussianHMM:
    start, transmat, means, covars = random_model(n_states, N_FEATURES)
    hmm = GaussianHMM(n_states=n_states, fps=30.0)
    hmm.means_, hmm.covars_, hmm.startprob_, hmm.transmat_ = means, covars, start, transmat
    hmm.n_states_, hmm.n_features_in_ = n_states, N_FEATURES
    return hmm, means, covars


def merged(hmm: GaussianHMM, X: np.ndarray, lengths: np.ndarray):
    labels, proba = hmm.predict(X, lengths), hmm.predict_proba(X, lengths)
    return enforce_min_bout(labels, MIN_FRAMES, lengths, proba), proba


def chain(hmm: GaussianHMM, X: np.ndarray, lengths: np.ndarray):
    return hmm.predict_min_duration(X, lengths, MIN_FRAMES, OUTLIER_SHARE)  # as the model does


def own_share(labels: np.ndarray, proba: np.ndarray) -> float:
    return float((proba[np.arange(len(labels)), labels] < 0.01).mean())


def main(sizes: list[int]) -> None:
    with tempfile.TemporaryDirectory() as cache_dir:  # an empty cache, then the filled one
        env = {**os.environ, "NUMBA_CACHE_DIR": cache_dir}
        for what in ("compile (empty cache)", "load (cached)"):
            cmd = [sys.executable, "-c", COMPILE]
            out = subprocess.run(cmd, capture_output=True, text=True, check=True, env=env)
            print(f"{what}: {out.stdout.strip()} s for the three kernels")
    print(
        f"{'frames':>9} {'K':>3} {'path':>14} {'wall s':>7} {'cpu s':>7} {'frames/s':>10} "
        f"{'p<0.01':>7} {'bouts':>7}"
    )
    for n in sizes:
        for k in (8, 12):
            hmm, means, covars = fitted(k)
            X = sample(n, means, covars)
            lengths = np.array([n])
            for name, func in (("merge", merged), ("min_duration", chain)):
                func(hmm, X[:1000], np.array([1000]))  # compile / load outside the timing
                (labels, proba), wall, cpu = timed(func, hmm, X, lengths)
                bouts = int((np.diff(labels) != 0).sum() + 1)
                print(
                    f"{n:>9} {k:>3} {name:>14} {wall:7.2f} {cpu:7.2f} {n / wall:10.3g} "
                    f"{own_share(labels, proba):7.4f} {bouts:>7}"
                )


if __name__ == "__main__":
    main([int(a) for a in sys.argv[1:]] or [100_000, 1_000_000])
