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


def _refit_by_hand(make, X, lengths, seed):
    """The check's design done serially here: a fit of all frames with ``seed`` and with
    ``seed + 1``, and fits of the two session halves its shuffle deals (``_halves``)."""
    from ethoscribe.segment.stability import _halves

    labels = [make(s).fit(X, lengths).predict(X, lengths) for s in (seed, seed + 1)]
    for idx, sub in _halves(np.asarray(lengths), np.random.default_rng(seed)):
        labels.append(make(seed).fit(X[idx], sub).predict(X, lengths))
    return labels


def test_refits_side_by_side_equal_serial_refits_and_scikit_learn_ari():
    from sklearn.metrics import adjusted_rand_score

    # invented data: 3-state sticky Gaussian HMM, 4 sessions, made hard enough (separation 1.0)
    # that fits of other seeds and halves disagree somewhat
    X, _, lengths = sample_sticky_hmm(seed=5, n_states=3, lengths=(300,) * 4, separation=1.0)

    def make(s):
        return GaussianHMM(3, n_restarts=2, n_iter=40, random_state=s)

    threads = stability_report(make, X, lengths, seeds=(5, 6), n_jobs=2)
    serial = stability_report(make, X, lengths, seeds=(5, 6), n_jobs=1)
    assert threads.summary == serial.summary
    assert threads.table.equals(serial.table)
    # the summary's agreements against scikit-learn's ARI of the same fits made serially
    a, b, half_a, half_b = _refit_by_hand(make, X, lengths, 5)
    assert threads.summary["ari_seeds_mean"] == pytest.approx(adjusted_rand_score(a, b), abs=1e-12)
    assert threads.summary["ari_halves"] == pytest.approx(
        adjusted_rand_score(half_a, half_b), abs=1e-12
    )


def test_half_models_made_by_their_own_maker():
    from sklearn.metrics import adjusted_rand_score

    X, _, lengths = sample_sticky_hmm(seed=4, n_states=3, lengths=(400,) * 4, separation=2.0)
    made = []

    def make(s):
        return GaussianHMM(3, n_restarts=1, n_iter=30, random_state=s)

    def make_half(s):  # halves subsampled to 300 of their 800 frames
        made.append(s)
        return GaussianHMM(3, n_restarts=1, n_iter=30, fit_max_frames=300, random_state=s)

    report = stability_report(make, X, lengths, seeds=(2, 3), make_half_model=make_half)
    assert made == [2, 2]  # the two halves, with the first seed; the seeds' fits use make
    _, _, half_a, half_b = _refit_by_hand(lambda s: make_half(s), X, lengths, 2)
    assert report.summary["ari_halves"] == pytest.approx(
        adjusted_rand_score(half_a, half_b), abs=1e-12
    )
    a, b, _, _ = _refit_by_hand(make, X, lengths, 2)
    assert report.summary["ari_seeds_mean"] == pytest.approx(adjusted_rand_score(a, b), abs=1e-12)
    plain = stability_report(make, X, lengths, seeds=(2, 3))
    assert plain.summary["ari_seeds_mean"] == report.summary["ari_seeds_mean"]


def test_discovery_check_fits_halves_on_half_the_model_frames(monkeypatch):
    from ethoscribe.segment.model import BehaviourModel
    from ethoscribe.simulate import simulate_session
    from ethoscribe.workspace import runs

    sessions = [simulate_session(duration_s=20, seed=s, session=f"s{s}")[0] for s in (1, 2)]
    model = BehaviourModel(
        n_states=3, random_state=0, segmenter={"n_restarts": 1, "fit_max_frames": 900}
    )
    feats = model.fit_transform_cleaned(model._clean_all(sessions, model._clean_params())[0])
    seen = {}

    def spy(make, X, lengths, **kw):
        seen["model"], seen["half"] = make(1), kw["make_half_model"](1)
        return "report"

    monkeypatch.setattr(runs, "stability_report", spy)
    assert runs._stability(model, feats, 0, False) == "report"
    own = seen["model"].segmenter if hasattr(seen["model"], "segmenter") else seen["model"]
    half = seen["half"].segmenter if hasattr(seen["half"], "segmenter") else seen["half"]
    assert own.fit_max_frames == 900 and half.fit_max_frames == 450
    assert own.random_state == half.random_state == 1
    assert type(seen["half"]) is type(seen["model"])  # labels as the model does
