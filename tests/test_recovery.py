"""Recovery of the simulated truth by the default behaviour model, end to end.

Data: the bundled example study (``example_sessions/``, invented dune voles with a known
behaviour on every frame; see its README). Agreement is measured against that truth with
scikit-learn's adjusted Rand index and boundary F1 within 0.2 s (``segment.agreement``).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import adjusted_rand_score

from ethoscribe.segment.agreement import boundary_f1, label_boundaries
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.workspace.reading import read_sessions

EXAMPLES = Path(__file__).resolve().parents[1] / "example_sessions"
SUBSET = (1, 2, 3, 4, 9, 10, 11, 12)  # four standard and four enriched voles: < 60 s


def boundary_score(labels: pd.DataFrame, truth: pd.DataFrame, margin_frames: int):
    """Boundary F1 over sessions: every true boundary counts (also those at invalid frames,
    which no label can find); predicted boundaries next to invalid frames are left out."""
    merged = labels.merge(truth, on=["session", "frame"], suffixes=("", "_true"))
    n_true = n_pred = n_hit = 0
    for _, part in merged.groupby("session", observed=True):
        state = part["state"].to_numpy()
        found = label_boundaries(state)
        found = found[(state[found] >= 0) & (state[found - 1] >= 0)]
        score = boundary_f1(label_boundaries(part["state_true"].to_numpy()), found, margin_frames)
        n_true, n_pred, n_hit = (
            n_true + score.n_true,
            n_pred + score.n_predicted,
            n_hit + score.n_matched,
        )
    precision, recall = n_hit / n_pred, n_hit / n_true
    return 2 * precision * recall / (precision + recall), precision, recall


@pytest.mark.slow
def test_default_model_recovers_the_simulated_behaviours():
    files = [EXAMPLES / f"session_{i:02d}.parquet" for i in SUBSET]
    sessions, _ = read_sessions(files, EXAMPLES / "manifest.csv", progress=False)
    model = BehaviourModel(random_state=0).fit(sessions)  # every default: states="auto"
    labels = model.label(sessions)
    truth = pd.read_parquet(EXAMPLES / "truth" / "frames.parquet")
    merged = labels.merge(truth, on=["session", "frame"], suffixes=("", "_true"))
    valid = merged[merged["state"] >= 0]
    assert len(valid) > 0.75 * len(merged)
    # 7 behaviours are simulated; scanning and freezing share one posture
    assert 6 <= model.n_states_ <= 9
    ari = adjusted_rand_score(valid["state_true"], valid["state"])  # scikit-learn
    # Frames with every keypoint seen: the frames this check scored before lost keypoints were
    # filled (then the only scored frames); the filled frames are held to their own bound below.
    whole = valid[valid["body_seen"] >= 1]
    ari_whole = adjusted_rand_score(whole["state_true"], whole["state"])  # scikit-learn
    f1, precision, recall = boundary_score(labels, truth, margin_frames=round(0.2 * model.fps_))
    print(f"states {model.n_states_}, ARI {ari:.3f} (whole body seen {ari_whole:.3f}), "
          f"boundary F1 {f1:.3f} ({precision:.3f}, {recall:.3f})")  # fmt: skip
    assert ari_whole >= 0.8
    assert ari >= 0.75
    assert f1 >= 0.7
    # every simulated behaviour is the majority of one state, except freezing (see above)
    majority = valid.groupby("state")["behaviour"].agg(lambda b: b.value_counts().idxmax())
    found = set(majority.astype(str))
    assert found >= {"resting", "walking", "grooming", "rearing", "digging", "scanning"}
    # every candidate the search fitted has a finite held-out score; it stops after the elbow
    table = model.selection_.table
    fitted = table["fitted"].astype(bool)
    assert np.isfinite(table.loc[fitted, "heldout_ll_per_frame"]).all()
    assert int(model.n_states_) in set(table.loc[fitted, "n_states"])
