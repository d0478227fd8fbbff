"""discover computes each thing once: the fit's features label the sessions fitted whole, the
postures come from the run's own cleaned copies, and the stability check reuses the model and
the state count's fits. Each shortcut must give what computing again gives.

Data: two simulated sessions of the package's invented animals, a few seconds each.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import adjusted_rand_score

from _reliability_data import assert_same_contents, workspace_contents, write_study
from ethoscribe.clean import clean
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


def test_stability_reuses_the_model_and_the_counts_halves():
    sessions = [simulate_session(duration_s=40, seed=i, session=f"s{i}")[0] for i in range(4)]
    model = BehaviourModel(state_range=(3, 5), random_state=0)
    cleaned = [clean(s)[0] for s in sessions]
    feats = model.fit_transform_cleaned(cleaned)
    # the features returned by the fit are those the fitted model computes
    for f, g in zip(feats, model.featurise_cleaned(cleaned), strict=True):
        np.testing.assert_array_equal(f.values, g.values)
        np.testing.assert_array_equal(f.meta["body_seen"], g.meta["body_seen"])
    report = runs._stability(model, feats, 0, False)
    X, lengths = stack_valid(feats)  # the check's sample, drawn as it draws it
    X, lengths = take_blocks(
        X, lengths, runs.STABILITY_FRAMES, max(100, round(60 * model.fps_)),
        np.random.default_rng(0),
    )  # fmt: skip
    a, b = model.selection_.fold_models[model.n_states_]
    # scikit-learn's ARI between the state count's two fold models (disjoint session halves)
    assert report.summary["ari_halves"] == pytest.approx(
        adjusted_rand_score(a.predict(X, lengths), b.predict(X, lengths))
    )
    # the table's states are the model's own: their shares of the sample's frames
    own = np.bincount(model.segmenter_.predict(X, lengths), minlength=model.n_states_)
    np.testing.assert_allclose(report.table["occupancy"], own / own.sum())
