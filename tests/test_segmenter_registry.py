"""A new segmentation method is one file plus one registration line.

``ThresholdSegmenter`` below stands for that file: a tiny test-only segmenter (states are
quantile bins of the first feature). One ``register`` call makes it usable by the model, the
saved-model checks, the command line, the workbench's batch run and its stability report.
Data: short sessions of the package's own simulator (invented dune voles), seeds fixed below.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from sklearn.base import BaseEstimator

from ethoscribe.cli import build_parser
from ethoscribe.errors import InputError
from ethoscribe.segment.inputs import check_fitted, check_X_lengths
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.segment.registry import (
    SegmenterSpec,
    get_segmenter,
    register,
    segmenter_names,
    unregister,
)
from ethoscribe.segment.streaming import StreamingLabeller
from ethoscribe.simulate import simulate_session


# --- the "one new file" -------------------------------------------------------------------
class ThresholdSegmenter(BaseEstimator):
    """States = quantile bins of the first feature (test only)."""

    def __init__(self, n_states: int = 3, fps: float = 30.0, random_state: Any = 0) -> None:
        self.n_states = n_states
        self.fps = fps
        self.random_state = random_state

    def fit(self, X, lengths=None):
        X, lengths = check_X_lengths(X, lengths)
        qs = np.linspace(0, 1, self.n_states + 1)[1:-1]
        self.edges_ = np.quantile(X[:, 0], qs)
        self.n_states_ = int(self.n_states)
        self.n_features_in_ = X.shape[1]
        return self

    def predict(self, X, lengths=None):
        check_fitted(self, "edges_")
        X, _ = check_X_lengths(X, lengths, n_features=self.n_features_in_)
        return np.searchsorted(self.edges_, X[:, 0]).astype(np.int64)

    def predict_proba(self, X, lengths=None):  # hard 0/1 rows
        return np.eye(self.n_states_)[self.predict(X, lengths)]

    def to_state(self):
        meta = {"kind": "test.ThresholdSegmenter", "format_version": 1}
        meta |= {"params": self.get_params(), "n_features": self.n_features_in_}
        return meta, {"edges": self.edges_}

    @classmethod
    def from_state(cls, meta, arrays):
        obj = cls(**meta["params"])
        obj.edges_ = np.asarray(arrays["edges"], dtype=np.float64)
        obj.n_states_ = len(obj.edges_) + 1
        obj.n_features_in_ = int(meta["n_features"])
        return obj


SPEC = SegmenterSpec("threshold", ThresholdSegmenter, "quantile bins of the first feature")


@pytest.fixture
def registered():
    register(SPEC)  # the "one registration line"
    yield SPEC
    unregister(SPEC.name)


@pytest.fixture(scope="module")
def sessions():
    return [simulate_session(duration_s=40, seed=s, session=f"s{s}")[0] for s in (3, 4)]


def test_builtin_methods_are_registered():
    assert segmenter_names()[:3] == ("hmm", "changepoint", "prediction_error")
    assert get_segmenter("hmm").posteriors and get_segmenter("hmm").streaming is not None
    with pytest.raises(InputError, match="method must be one of"):
        get_segmenter("nope")


def test_a_registered_method_fits_labels_saves_and_reloads(registered, sessions):
    model = BehaviourModel(method="threshold", n_states=3).fit(sessions)
    labels = model.label(sessions)
    valid = labels[labels["state"] >= 0]
    assert set(valid["state"]) == {0, 1, 2}
    # A method without posteriors: hard 0/1 (0 where a too-short bout was merged away).
    assert valid["probability"].isin([0.0, 1.0]).all()
    meta, arrays = model.to_state()
    assert meta["segmenter_kind"] == "ThresholdSegmenter"
    again = BehaviourModel.from_state(meta, arrays)  # the saved-model checks know the method
    np.testing.assert_array_equal(again.label(sessions)["state"], labels["state"])


def test_the_command_line_offers_a_registered_method(registered):
    args = build_parser().parse_args(["discover", "--out", "x", "--method", "threshold"])
    assert args.method == "threshold"


def test_unregistered_methods_are_refused_everywhere(sessions, registered):
    meta, arrays = BehaviourModel(method="threshold", n_states=2).fit(sessions).to_state()
    unregister("threshold")
    with pytest.raises(InputError, match=r"'params\.method' must be one of"):
        BehaviourModel.from_state(meta, arrays)
    with pytest.raises(InputError, match="method must be one of"):
        BehaviourModel(method="threshold").fit(sessions)
    with pytest.raises(SystemExit):
        build_parser().parse_args(["discover", "--out", "x", "--method", "threshold"])


def test_what_a_method_does_not_support_is_refused_clearly(registered, sessions):
    with pytest.raises(InputError, match="needs a number of states"):
        BehaviourModel(method="threshold", n_states="auto").fit(sessions)
    model = BehaviourModel(method="threshold", n_states=2, features={"causal": True})
    model.fit(sessions)
    with pytest.raises(InputError, match="cannot label frames as they arrive"):
        StreamingLabeller(model)
    with pytest.raises(InputError, match="set by the model"):
        SPEC.build(2, 30.0, 0, {"fps": 10.0})


def test_the_stability_report_covers_every_method_that_can_refit(registered, tmp_path):
    from _example_study import trimmed_study
    from ethoscribe.workspace import discover

    study = trimmed_study(tmp_path, ["session_03", "session_11"], 900)
    ws = discover(
        [study / "session_03.parquet", study / "session_11.parquet"],
        tmp_path / "run",
        manifest=study / "manifest.csv",
        states=2,
        method="threshold",
        progress=False,
    )
    assert (ws.path / "stability.csv").is_file()
    assert ws.summary["stability"]["n_states"] == 2
