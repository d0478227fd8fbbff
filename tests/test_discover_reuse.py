"""discover computes each thing once: the fit's features label the sessions fitted whole, the
postures come from the run's own cleaned copies, and the stability check takes the model as its
first seed (its refits are full fits, not stand-ins). Each shortcut must give what computing
again gives.

Data: two simulated sessions of the package's invented animals, a few seconds each.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import linear_sum_assignment
from sklearn.metrics import adjusted_rand_score, jaccard_score
from sklearn.metrics.cluster import contingency_matrix

from _reliability_data import assert_same_contents, workspace_contents, write_study
from ethoscribe.clean import clean
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.model import BehaviourModel, stack_valid
from ethoscribe.segment.sampling import take_blocks
from ethoscribe.simulate import simulate_session
from ethoscribe.workspace import discover, runs
from ethoscribe.workspace.postures import compute_session_postures, session_postures


def _run(study, out):
    return discover([study], out, states=3, stability=False, progress=False)


def test_reused_features_and_postures_equal_computing_them_again(tmp_path, monkeypatch):
    study = write_study(tmp_path / "study")
    reused = _run(study, tmp_path / "reused")
    with monkeypatch.context() as m:  # the long way: features computed again per session
        m.setattr(runs, "_whole_sessions", lambda feats, table: {})
        m.setattr(runs, "_cleaned_loaders", lambda prepared, table, causal: {})
        again = _run(study, tmp_path / "again")
    assert_same_contents(workspace_contents(reused.path), workspace_contents(again.path))
    model = reused.model()
    for session in reused.sessions["session"].astype(str):
        cached = session_postures(reused, session, model)
        fresh = compute_session_postures(reused, session, model)  # source read and cleaned
        # the cleaned copy is kept in float32, as the postures are
        np.testing.assert_allclose(cached.coords, fresh.coords, rtol=1e-5, atol=1e-4)


def test_stability_compares_the_model_with_full_refits_of_another_seed_and_the_halves():
    sessions = [simulate_session(duration_s=40, seed=i, session=f"s{i}")[0] for i in range(4)]
    # phases not joined: the model labels with its segmenter's states, as the refits below do
    model = BehaviourModel(state_range=(3, 5), random_state=0, join_phases=False)
    cleaned = [clean(s)[0] for s in sessions]
    feats = model.fit_transform_cleaned(cleaned)
    # the features returned by the fit are those the fitted model computes
    for f, g in zip(feats, model.featurise_cleaned(cleaned), strict=True):
        np.testing.assert_array_equal(f.values, g.values)
        np.testing.assert_array_equal(f.meta["body_seen"], g.meta["body_seen"])
    report = runs._stability(model, feats, 0, False)
    X_fit, len_fit = stack_valid(feats)
    block = max(100, round(60 * model.fps_))  # the check's sample, drawn as it draws it
    X, lengths = take_blocks(X_fit, len_fit, runs.STABILITY_FRAMES, block, np.random.default_rng(0))
    params = {**model.segmenter_.get_params(), "progress": False}
    # the second seed: every training frame fitted as the model was, with seed 1
    other = GaussianHMM(**{**params, "random_state": 1}).fit(X_fit, len_fit)
    # the halves: the training sessions shuffled with seed 0 and dealt alternately
    order = np.random.default_rng(0).permutation(len(len_fit))
    offsets = np.cumsum(len_fit) - len_fit
    halves = []
    for part in (np.sort(order[0::2]), np.sort(order[1::2])):
        rows = np.concatenate([np.arange(offsets[s], offsets[s] + len_fit[s]) for s in part])
        halves.append(GaussianHMM(**{**params, "random_state": 0}).fit(X_fit[rows], len_fit[part]))
    own = model.segmenter_.predict(X, lengths)
    second = other.predict(X, lengths)
    a, b = (h.predict(X, lengths) for h in halves)
    # scikit-learn's ARI: model against the other seed's fit, and between the two halves
    assert report.pairwise_ari.iloc[0, 1] == pytest.approx(adjusted_rand_score(own, second))
    assert report.summary["ari_halves"] == pytest.approx(adjusted_rand_score(a, b))
    # per state: scikit-learn's Jaccard of the model's state and the other seed's state
    # matched to it by most shared frames (Hungarian method, scipy, on sklearn's contingency)
    table = contingency_matrix(own, second)
    rows, cols = linear_sum_assignment(table, maximize=True)
    match = dict(zip(np.unique(own)[rows], np.unique(second)[cols], strict=True))
    for state, jac in zip(report.table["state"], report.table["jaccard_seeds_mean"], strict=True):
        assert jac == pytest.approx(jaccard_score(own == state, second == match[state]))
    # the table's states are the model's own: their shares of the sample's frames
    counts = np.bincount(own, minlength=model.n_states_)
    np.testing.assert_allclose(report.table["occupancy"], counts / counts.sum())
