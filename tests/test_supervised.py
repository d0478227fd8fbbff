"""The behaviour classifier: stored trees equal scikit-learn's, context windows, persistence,
save/load without pickle."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.ensemble import HistGradientBoostingClassifier

from ethoscribe.errors import InputError, NotFittedError
from ethoscribe.segment._trees import TreeEnsemble
from ethoscribe.segment.supervised import BehaviourClassifier, context_features


@pytest.mark.parametrize("n_classes", [2, 4])
def test_stored_trees_predict_as_scikit_learn(n_classes):
    rng = np.random.default_rng(3)  # seed 3
    X = rng.normal(size=(2000, 5))
    X[::9, 1] = np.nan
    y = np.digitize(X[:, 0] + 0.5 * X[:, 2], np.linspace(-1, 1, n_classes - 1))
    clf = HistGradientBoostingClassifier(max_iter=25, random_state=0).fit(X, y)
    trees = TreeEnsemble.from_sklearn(clf)
    test = rng.normal(size=(500, 5))
    test[::4, 2] = np.nan  # missing values follow the stored direction
    # reference: sklearn HistGradientBoostingClassifier.predict_proba
    expected = clf.predict_proba(test)
    assert np.abs(trees.predict_proba(test) - expected).max() < 1e-12
    again = TreeEnsemble.from_arrays(trees.to_arrays(), 5)
    assert np.abs(again.predict_proba(test) - expected).max() < 1e-12


def test_damaged_tree_arrays_are_refused():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(300, 3))
    clf = HistGradientBoostingClassifier(max_iter=3).fit(X, X[:, 0] > 0)
    arrays = TreeEnsemble.from_sklearn(clf).to_arrays()
    arrays["tree_left"] = arrays["tree_left"] + 10_000
    with pytest.raises(InputError, match="inconsistent"):
        TreeEnsemble.from_arrays(arrays, 3)
    short = TreeEnsemble.from_sklearn(clf).to_arrays()
    short["tree_value"] = short["tree_value"][:-1]
    with pytest.raises(InputError, match="inconsistent"):
        TreeEnsemble.from_arrays(short, 3)


def test_context_windows_match_a_direct_computation():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(50, 2))
    X[10:13] = np.nan
    Z = context_features(X, [30, 20], fps=4.0, scales_s=[1.0])
    half = 2  # 1 s at 4 fps: 2 frames either side
    for t in (0, 5, 11, 29, 30, 49):
        start, stop = (0, 30) if t < 30 else (30, 50)
        window = X[max(start, t - half) : min(stop, t + half + 1)]
        # reference: numpy nanmean / nanstd (ddof 0) over the window, never across sequences
        assert np.allclose(Z[t, 2:4], np.nanmean(window, axis=0), equal_nan=True)
        assert np.allclose(Z[t, 4:6], np.nanstd(window, axis=0), equal_nan=True)


def _blocky(seed, n=1200):
    rng = np.random.default_rng(seed)
    lengths = rng.integers(30, 90, n // 30)
    y = np.repeat(rng.integers(0, 3, len(lengths)), lengths)[:n]
    # class 1 and 2 share a mean and differ in spread: only the context tells them apart
    X = np.column_stack([(y == 0) * 2.0 + rng.normal(0, 0.4 + 1.2 * (y == 2), n)])
    return X, np.array(["rest", "scan", "walk"], dtype=object)[y]


def test_learns_rhythm_from_context_and_persistence_makes_bouts():
    X, y = _blocky(0)
    Xt, yt = _blocky(1)
    clf = BehaviourClassifier(fps=30, max_iter=40).fit(X, y, [len(X)])
    pred = clf.classes_[clf.predict(Xt, [len(Xt)])]
    assert (pred == yt).mean() > 0.9
    flat = BehaviourClassifier(fps=30, max_iter=40, scales_s=[0.1], persistence=False)
    flat_pred = flat.fit(X, y, [len(X)]).classes_[flat.predict(Xt, [len(Xt)])]
    assert (pred == yt).mean() > (flat_pred == yt).mean()
    runs = np.count_nonzero(pred[1:] != pred[:-1])
    assert runs < 3 * np.count_nonzero(yt[1:] != yt[:-1])
    _codes, p = clf.predict_with_probability(Xt, [len(Xt)])
    assert np.all((p >= 0) & (p <= 1))
    proba = clf.predict_proba(Xt, [len(Xt)])
    assert np.allclose(proba.sum(axis=1), 1.0)


def test_save_and_load_give_identical_predictions():
    X, y = _blocky(2)
    X[100:140] = np.nan  # frames without pose: labelled through their windows
    clf = BehaviourClassifier(fps=30, max_iter=20).fit(X, y, [len(X)])
    meta, arrays = clf.to_state()
    assert all(not a.dtype.hasobject for a in arrays.values())
    again = BehaviourClassifier.from_state(meta, arrays)
    assert np.array_equal(again.predict(X, [len(X)]), clf.predict(X, [len(X)]))
    assert again.get_params() == clf.get_params()
    with pytest.raises(InputError, match="saved classifier"):
        BehaviourClassifier.from_state({**meta, "classes": ["a"]}, arrays)
    with pytest.raises(InputError, match="prior or transition"):
        BehaviourClassifier.from_state(meta, {**arrays, "transmat": np.eye(2)})


def test_checks_follow_scikit_learn_conventions():
    X, y = _blocky(4, 300)
    clf = BehaviourClassifier(fps=30, max_iter=5)
    params = clf.get_params()
    with pytest.raises(NotFittedError):
        clf.predict(X, [len(X)])
    clf.fit(X, y, [len(X)])
    assert clf.get_params() == params  # fit never changes the parameters
    again = BehaviourClassifier(fps=30, max_iter=5).fit(X, y, [len(X)])
    assert np.array_equal(again.predict(X, [len(X)]), clf.predict(X, [len(X)]))  # same seed
    with pytest.raises(InputError, match="fitted on 1 feature"):
        clf.predict(np.zeros((10, 2)), [10])
    with pytest.raises(InputError, match="at least two behaviours"):
        BehaviourClassifier(fps=30).fit(X, np.full(len(X), "rest", dtype=object), [len(X)])
    with pytest.raises(InputError, match="fps must be"):
        BehaviourClassifier().fit(X, y, [len(X)])
