"""Splitting a motif along time: halves are contiguous runs no shorter than the minimum bout.

Invented labels and features (seed 6): one motif whose frames mix two feature clusters frame by
frame with slow drifts, so a frame-by-frame split flickers. Run lengths are counted with
``itertools.groupby`` (standard library) as the outside reference.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd

from ethoscribe.curation import Curation

MIN_FRAMES = 6


def _study(seed: int = 6, n: int = 600) -> tuple[pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng(seed)
    state = np.where((np.arange(n) // 50) % 3 == 2, 1, 0)  # motif 0 in bouts of 100 frames
    slow = (np.arange(n) // 25) % 2  # the two kinds inside motif 0 alternate every 25 frames
    speed = 4.0 * slow + rng.normal(0, 1.6, n)  # overlapping clusters: frames flicker
    labels = pd.DataFrame(
        {"session": "s1", "animal": "a", "frame": np.arange(n), "time_s": np.arange(n) / 10,
         "state": state, "motif": np.where(state == 0, "motif_01", "motif_02"),
         "probability": 1.0}
    )  # fmt: skip
    return labels, labels[["session", "animal", "frame"]].assign(speed=speed)


def _runs(labels: pd.DataFrame, names: set[str]) -> list[tuple[str, int, bool]]:
    """(motif, length, inside the parent's bout) for runs of the given motifs."""
    out = []
    motifs = labels["motif"].tolist()
    pos = 0
    for motif, group in itertools.groupby(motifs):
        size = len(list(group))
        if motif in names:
            inner = pos > 0 and pos + size < len(motifs)
            inner = inner and motifs[pos - 1] in names and motifs[pos + size] in names
            out.append((motif, size, inner))
        pos += size
    return out


def test_split_along_time_gives_runs_of_at_least_the_minimum_bout():
    labels, features = _study()
    plain = Curation.from_labels(labels)
    plain.split("motif_01", ["fast", "slow"], labels, features)
    flicker = _runs(plain.apply(labels, features), {"fast", "slow"})
    assert min(size for _, size, _ in flicker) < MIN_FRAMES  # the frame-by-frame split flickers

    cur = Curation.from_labels(labels)
    preview = cur.preview_split(
        "motif_01", ["fast", "slow"], labels, features, min_frames=MIN_FRAMES
    )
    record = cur.split("motif_01", ["fast", "slow"], labels, features, min_frames=MIN_FRAMES)
    assert record["frames_assignment"]["min_frames"] == MIN_FRAMES
    result = cur.apply(labels, features)
    runs = _runs(result, {"fast", "slow"})
    # every stretch between the two halves inside a bout is at least the minimum bout long
    assert all(size >= MIN_FRAMES for _, size, inner in runs if inner)
    assert len(runs) < len(flicker) / 3
    # the preview, made before the split was kept, describes what the split gave
    counts = result["motif"].value_counts()
    got = preview.set_index("motif")
    assert got.loc["fast", "n_frames"] == counts["fast"]
    assert got.loc["slow", "n_frames"] == counts["slow"]
    assert got.loc["fast", "n_bouts"] == sum(m == "fast" for m, _, _ in runs)
    assert got.loc["motif_01", "n_frames"] == counts["fast"] + counts["slow"]
    # so does the journal record (it held the 2-means clusters' sizes before the time rule)
    assert record["frames_assignment"]["n_frames"] == [counts["fast"], counts["slow"]]
    # the journal replays to the same labels
    again = Curation.from_journal(cur.history, dict(enumerate(["motif_01", "motif_02"])))
    assert again.apply(labels, features)["motif"].tolist() == result["motif"].tolist()
