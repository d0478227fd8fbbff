"""Time the Gaussian HMM: one EM iteration, hmmlearn's for comparison, Viterbi decoding and the
frame-by-frame filter. Prints a table with wall and CPU seconds and the FLOP arithmetic.

Usage: python benchmarks/bench_hmm.py [n_frames] [n_states] [n_features] [hmmlearn_frames]
       (default 1000000 20 12 100000; about a minute on 2 cores)

The data are invented: frames drawn from a random K-state Gaussian mixture. The machine may be
shared: compare numbers measured in one run, and read CPU time beside wall time.
"""

from __future__ import annotations

import resource
import sys
import time

import numpy as np

from ethoscribe.segment._hmm_fit import one_thread
from ethoscribe.segment._hmm_gaussian import (
    e_step_buffers,
    frame_products,
    gaussian_e_step,
    gaussian_m_step,
)
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.streaming_hmm import HMMFilter


def random_model(n_states: int, n_features: int, seed: int = 0):
    rng = np.random.default_rng(seed)
    means = rng.normal(0, 2, (n_states, n_features))
    a = rng.normal(0, 0.3, (n_states, n_features, n_features))
    covars = a @ a.transpose(0, 2, 1) + np.eye(n_features)
    transmat = np.full((n_states, n_states), 0.05 / (n_states - 1))
    np.fill_diagonal(transmat, 0.95)
    return np.full(n_states, 1 / n_states), transmat, means, covars


def sample(n_frames: int, means: np.ndarray, covars: np.ndarray, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    states = np.repeat(rng.integers(0, len(means), n_frames // 30 + 1), 30)[:n_frames]
    chol = np.linalg.cholesky(covars)
    z = rng.normal(size=(n_frames, means.shape[1]))
    return means[states] + np.einsum("tij,tj->ti", chol[states], z)


def timed(func, *args):
    wall, cpu = time.perf_counter(), time.process_time()
    out = func(*args)
    return out, time.perf_counter() - wall, time.process_time() - cpu


def em_iteration(X, lengths, params, work=None, products=None):
    stats, _ = gaussian_e_step(X, lengths, *params, "full", work, products)
    return gaussian_m_step(stats, "full", 1e-3, 0.0, 0.0)


def screening_iterations(X, params, repeats: int = 20) -> tuple[float, float]:
    """CPU seconds of ``repeats`` EM iterations on a screening-sized sample (20,000 frames),
    the frames' products computed in every E-step, then kept once (EM's short runs)."""
    Xs = X[:20_000]
    lengths = np.array([len(Xs)])
    work = e_step_buffers(len(Xs), len(params[0]))
    cpu = []
    for products in (None, frame_products(Xs)):
        em_iteration(Xs, lengths, params, work, products)
        start = time.process_time()
        for _ in range(repeats):
            em_iteration(Xs, lengths, params, work, products)
        cpu.append(time.process_time() - start)
    return cpu[0], cpu[1]


def flops(T: int, K: int, D: int) -> dict[str, float]:
    """Floating-point operations of one EM iteration, by stage (multiply-add = 2)."""
    tri = D * (D + 1) // 2
    return {
        "emission": 2 * T * K * D * D + 3 * T * K * D,  # x @ [P_1..P_K], then squared norms
        "forward-backward": 6 * T * K * K + 6 * T * K,  # two mat-vecs and xi per frame
        "M-step statistics": 2 * T * K * tri + 2 * T * K * D + T * tri,  # gamma^T Z, gamma^T X
    }


def main() -> None:
    T = int(float(sys.argv[1])) if len(sys.argv) > 1 else 1_000_000
    K = int(sys.argv[2]) if len(sys.argv) > 2 else 20
    D = int(sys.argv[3]) if len(sys.argv) > 3 else 12
    T_ref = int(float(sys.argv[4])) if len(sys.argv) > 4 else 100_000
    params = random_model(K, D)
    X = sample(T, params[2], params[3])
    lengths = np.array([T // 2, T - T // 2])
    print(f"Gaussian HMM, full covariance: T={T} frames, K={K} states, D={D} features")
    with one_thread():
        em_iteration(X[:2000], np.array([2000]), params)  # warm-up (numba cache, BLAS)
        work = e_step_buffers(T, K)  # EM reuses these buffers in every iteration
        _, wall_first, cpu_first = timed(em_iteration, X, lengths, params, work)
        _, wall, cpu = timed(em_iteration, X, lengths, params, work)
    count = flops(T, K, D)
    total = sum(count.values())
    print("\nFLOP arithmetic of one EM iteration (GFLOP):")
    for name, value in count.items():
        print(f"  {name:<20s} {value / 1e9:6.2f}")
    print(f"  {'total':<20s} {total / 1e9:6.2f}   + T*K = {T * K / 1e6:.0f} M exp()")
    print(f"\n{'measurement':<44s} {'wall s':>8s} {'cpu s':>8s}  note")
    print(f"{'one EM iteration (E + M), ours':<44s} {wall:8.2f} {cpu:8.2f}  "
          f"{total / wall / 1e9:.1f} GFLOP/s (wall), {total / cpu / 1e9:.1f} (cpu); "
          "target < 2 s")  # fmt: skip
    print(f"{'  first iteration (buffers paged in)':<44s} {wall_first:8.2f} {cpu_first:8.2f}")
    with one_thread():
        cpu_plain, cpu_kept = screening_iterations(X, params)
    print(f"{'20 iterations on 20,000 frames, products kept':<44s} {'':>8s} {cpu_kept:8.2f}  "
          f"{cpu_plain:.2f} s CPU computing them in every E-step")  # fmt: skip

    from hmmlearn.hmm import GaussianHMM as ReferenceHMM

    ref = ReferenceHMM(K, "full", n_iter=1, init_params="", params="stmc", implementation="scaling")
    ref.startprob_, ref.transmat_, ref.means_, ref.covars_ = params
    sub = X[:T_ref]
    _, wall_ref, cpu_ref = timed(ref.fit, sub, np.array([T_ref]))
    scaled = wall_ref * T / T_ref
    label = f"one EM iteration, hmmlearn scaling, T={T_ref}"
    print(
        f"{label:<44s} {wall_ref:8.2f} {cpu_ref:8.2f}  x{T / T_ref:.0f} -> {scaled:.1f} s at T={T}"
    )
    with one_thread():
        _, wall_small, cpu_small = timed(em_iteration, sub, np.array([T_ref]), params)
    print(f"{'one EM iteration, ours, same T':<44s} {wall_small:8.2f} {cpu_small:8.2f}  "
          f"{wall_ref / wall_small:.1f}x faster than hmmlearn")  # fmt: skip

    meta = {
        "kind": "ethoscribe.GaussianHMM", "format_version": 1,
        "params": GaussianHMM(n_states=K).get_params(), "n_states": K, "n_features": D,
        "log_likelihood": 0.0, "n_iter": 0, "converged": True, "covariance_floor": 1e-3,
        "n_fit_frames": 0,
    }  # fmt: skip
    names = ("startprob", "transmat", "means", "covars")
    model = GaussianHMM.from_state(meta, dict(zip(names, params, strict=True)))
    session = sample(200_000, params[2], params[3], seed=2)
    model.predict(session[:1000])  # warm-up
    _, wall_dec, cpu_dec = timed(model.predict, session)
    print(f"{'Viterbi decode of a new 200000-frame session':<44s} {wall_dec:8.2f} {cpu_dec:8.2f}  "
          f"{len(session) / wall_dec:,.0f} frames/s; target > 200,000")  # fmt: skip
    _, wall_pp, cpu_pp = timed(model.predict_proba, session)
    print(f"{'posteriors (forward-backward), same session':<44s} {wall_pp:8.2f} {cpu_pp:8.2f}  "
          f"{len(session) / wall_pp:,.0f} frames/s")  # fmt: skip

    live = HMMFilter(model)
    frames = session[:5000]
    cost = np.empty(len(frames))
    for t, x in enumerate(frames):
        start = time.perf_counter_ns()
        live.push(x)
        cost[t] = (time.perf_counter_ns() - start) / 1e6
    p50, p99 = np.percentile(cost[100:], [50, 99])
    label = "HMMFilter.push, one frame (5000 frames)"
    print(f"{label:<44s} {'':>8s} {'':>8s}  p50 {p50:.3f} ms, p99 {p99:.3f} ms, "
          f"max {cost.max():.2f} ms; target p99 < 1 ms")  # fmt: skip
    print(f"\npeak RSS {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e6:.2f} GB")


if __name__ == "__main__":
    main()
