"""Stability of states between seeds and split halves."""

from __future__ import annotations

import numpy as np
import pytest

from ethoscribe.errors import InputError
from ethoscribe.plots.model import stability_figure
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.stability import stability_report
from test_hmm_sampling import sample_sticky_hmm


class RandomLabels:
    """A deliberately unreproducible segmenter: labels are noise drawn from its seed."""

    def __init__(self, seed: int, n_states: int = 4):
        self.seed, self.n_states = seed, n_states

    def fit(self, X, lengths=None):
        self.n_states_ = self.n_states
        self.rng_ = np.random.default_rng([self.seed, int(abs(X).sum() * 1e3) % 2**31])
        return self

    def predict(self, X, lengths=None):
        return self.rng_.integers(0, self.n_states, len(X))


def test_recoverable_states_are_reproducible():
    # invented data: 4-state sticky Gaussian HMM, 4 sessions
    X, _, lengths = sample_sticky_hmm(seed=6, lengths=(400,) * 4)
    report = stability_report(
        lambda s: GaussianHMM(4, n_restarts=1, n_iter=50, random_state=s), X, lengths
    )
    assert report.summary["ari_seeds_min"] > 0.95 and report.summary["ari_halves"] > 0.9
    assert report.summary["n_reproducible"] == 4 and report.table["reproducible"].all()
    assert report.table["jaccard_halves"].min() > 0.8
    assert report.table["occupancy"].sum() == pytest.approx(1.0)
    ari = report.pairwise_ari.to_numpy()
    assert np.allclose(ari, ari.T) and np.allclose(np.diag(ari), 1.0)
    fig = stability_figure(report)
    assert [t.name for t in fig.data][1] == "between split halves"


def test_noise_labels_are_flagged_unreproducible():
    X = np.random.default_rng(0).normal(size=(2000, 2))
    report = stability_report(RandomLabels, X, [1000, 1000], seeds=(0, 1, 2))
    assert abs(report.summary["ari_seeds_mean"]) < 0.02
    assert abs(report.summary["ari_halves"]) < 0.02
    assert report.summary["n_reproducible"] == 0
    assert report.table["jaccard_seeds_mean"].max() < 0.2  # chance level is 1/7 for 4 states


def test_one_session_is_split_in_time_and_one_seed_works():
    X, _, _ = sample_sticky_hmm(seed=7, n_states=2, lengths=(600,))
    report = stability_report(
        lambda s: GaussianHMM(2, n_restarts=1, n_iter=30, random_state=s), X, seeds=(3,)
    )
    assert np.isnan(report.summary["ari_seeds_mean"]) and report.summary["ari_halves"] > 0.9
    assert report.table["reproducible"].all()  # judged on the split halves alone
    with pytest.raises(InputError, match="seeds"):
        stability_report(RandomLabels, X, seeds=())
