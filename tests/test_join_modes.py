"""Parts of one mode joined (``lumping.ridgeline_modes``, ``lumping.join_modes``,
``BehaviourModel(join_modes=True)``), checked against a closed form and scipy densities."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy.stats import multivariate_normal

from ethoscribe.errors import InputError
from ethoscribe.segment.lumping import join_modes, ridgeline_modes
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.simulate import simulate_session

QUICK = {"n_restarts": 1, "n_iter": 30}


@pytest.mark.parametrize(("gap", "modes"), [(1.0, 1), (1.9, 1), (1.98, 1), (2.02, 2), (3.0, 2)])
def test_equal_halves_of_a_normal_pair_have_one_mode_up_to_two_sd(gap, modes):
    # 0.5 N(0, s^2) + 0.5 N(gap, s^2) is unimodal iff gap <= 2 s (Robertson & Fryer 1969;
    # Behboodian 1970, "On the modes of a mixture of two normal distributions"; from memory)
    s = 1.7
    cov = np.array([[s**2]])
    assert ridgeline_modes(np.zeros(1), cov, np.array([gap * s]), cov, 0.5) == modes


def _grid_modes(m_a, s_a, m_b, s_b, w, n=401) -> int:
    """Local maxima of the mixture density on a dense 2-D grid (scipy densities)."""
    lo = np.minimum(m_a, m_b) - 4 * np.sqrt(np.maximum(np.diag(s_a), np.diag(s_b)))
    hi = np.maximum(m_a, m_b) + 4 * np.sqrt(np.maximum(np.diag(s_a), np.diag(s_b)))
    gx, gy = np.meshgrid(np.linspace(lo[0], hi[0], n), np.linspace(lo[1], hi[1], n))
    pts = np.dstack([gx, gy])
    f = w * multivariate_normal(m_a, s_a).pdf(pts) + (1 - w) * multivariate_normal(m_b, s_b).pdf(
        pts
    )
    centre = f[1:-1, 1:-1]
    peak = np.ones_like(centre, dtype=bool)
    for dy in (-1, 0, 1):
        for dx in (-1, 0, 1):
            if dx or dy:
                peak &= centre > f[1 + dy : n - 1 + dy, 1 + dx : n - 1 + dx]
    return int(peak.sum())


def test_mode_count_matches_a_brute_force_grid_in_two_dimensions():
    rng = np.random.default_rng(5)
    counts = {1: 0, 2: 0}
    for _ in range(40):
        m_a, m_b = np.zeros(2), rng.normal(0, 2.0, 2)
        a, b = rng.normal(size=(2, 2, 2))
        s_a, s_b = a @ a.T + 0.3 * np.eye(2), b @ b.T + 0.3 * np.eye(2)
        w = float(rng.uniform(0.2, 0.8))
        ours = ridgeline_modes(m_a, s_a, m_b, s_b, w)
        assert ours == _grid_modes(m_a, s_a, m_b, s_b, w)
        counts[ours] += 1
    assert min(counts.values()) >= 5  # both kinds of pair were checked


def _chain(stays_s, fps, exchange):
    """Per-frame transitions with the given mean stays; exits split by ``exchange`` weights."""
    k = len(stays_s)
    T = np.zeros((k, k))
    for i, stay in enumerate(stays_s):
        leave = 1.0 / (stay * fps)
        w = np.asarray(exchange[i], dtype=np.float64)
        T[i] = leave * w / w.sum()
        T[i, i] = 1.0 - leave
    return T


def test_join_modes_joins_alternating_parts_of_one_mode_only():
    fps = 30.0
    eye = np.eye(3)
    # states 0 and 1: halves of one cluster (1 SD apart); 2 and 3: separate clusters
    means = np.array([[0, 0, 0], [1.0, 0, 0], [6.0, 0, 0], [0, 6.0, 0]])
    covars = np.stack([eye] * 4)
    exchange = [[0, 8, 1, 1], [8, 0, 1, 1], [1, 1, 0, 1], [1, 1, 1, 0]]
    groups, pairs = join_modes(_chain([0.4, 0.4, 2.0, 2.0], fps, exchange), means, covars, fps)
    assert groups.tolist() == [0, 0, 1, 2]
    assert [p["states"] for p in pairs] == [(0, 1)] and pairs[0]["lift"] > 1
    # held for seconds: bouts, not parts
    groups, _ = join_modes(_chain([2.0, 2.0, 2.0, 2.0], fps, exchange), means, covars, fps)
    assert groups.tolist() == [0, 1, 2, 3]
    # exchanged less than by chance: not joined
    rare = [[0, 0.1, 5, 5], [0.1, 0, 5, 5], [1, 1, 0, 1], [1, 1, 1, 0]]
    groups, _ = join_modes(_chain([0.4, 0.4, 2.0, 2.0], fps, rare), means, covars, fps)
    assert groups.tolist() == [0, 1, 2, 3]
    # two modes (3 SD apart) stay apart however often they alternate
    apart = means.copy()
    apart[1, 0] = 3.0
    groups, _ = join_modes(_chain([0.4, 0.4, 2.0, 2.0], fps, exchange), apart, covars, fps)
    assert groups.tolist() == [0, 1, 2, 3]


@pytest.fixture(scope="module")
def sessions():
    return [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2)]


def test_model_option_records_and_saves_its_pairs(sessions):
    plain = BehaviourModel(n_states=4, segmenter=QUICK, join_modes=False).fit(sessions)
    model = BehaviourModel(n_states=4, segmenter=QUICK, join_modes=True).fit(sessions)
    seg = model.segmenter_
    _, expected = join_modes(seg.transmat_, seg.means_, seg.covars_, model.fps_)
    assert [p["states"] for p in model.mode_pairs_] == [list(p["states"]) for p in expected]
    if not expected:  # nothing is one mode: the labels are those without the option
        pd.testing.assert_frame_equal(model.label(sessions), plain.label(sessions))
    meta, arrays = model.to_state()
    rebuilt = BehaviourModel.from_state(json.loads(json.dumps(meta)), arrays)
    assert rebuilt.join_modes and rebuilt.mode_pairs_ == model.mode_pairs_
    pd.testing.assert_frame_equal(rebuilt.label(sessions), model.label(sessions))
    with pytest.raises(InputError, match="join_modes"):
        BehaviourModel(n_states=3, join_modes="yes").fit(sessions)


def test_model_joins_parts_of_one_mode_through_the_phase_groups(sessions, monkeypatch):
    # the rule's answer fixed (fitted states 0 and 1 are one mode): they are labelled as one
    # state, the fine_state column keeps them apart and the state tree says why (no minimum
    # bout, which merges short labelled bouts only)
    import ethoscribe.segment.model as model_module

    found = [{"states": (0, 1), "lift": 2.0, "stay_s": [0.5, 0.5]}]
    monkeypatch.setattr(model_module, "join_modes", lambda *a, **k: (None, found))
    model = BehaviourModel(
        n_states=4,
        segmenter=QUICK,
        min_bout_s=0.0,
        join_modes=True,
        join_phases=False,
        join_units=False,
    ).fit(sessions)
    assert model.phase_groups_ == [0, 0, 1, 2] and model.n_states_ == 3
    assert model.mode_pairs_ == [{"states": [0, 1], "lift": 2.0, "stay_s": [0.5, 0.5]}]
    labels = model.label(sessions)
    scored = labels["state"] >= 0
    groups = np.asarray(model.phase_groups_)
    np.testing.assert_array_equal(
        labels.loc[scored, "state"], groups[labels.loc[scored, "fine_state"]]
    )
    assert set(labels.loc[scored, "fine_state"]) == {0, 1, 2, 3}
    assert "parts of one mode joined (fitted 0+1 as 0)" in model.state_tree_["fine_reason"]
