"""Reproducibility grades of motifs, with the thresholds the report states (invented values)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ethoscribe.plots.model import stability_figure
from ethoscribe.segment.stability import HIGH_AGREEMENT, LOW_AGREEMENT, reproducibility_grades


def test_grades_use_the_weaker_agreement_and_flag_low_split_halves():
    table = pd.DataFrame(
        {
            "state": [0, 1, 2, 3, 4],
            "jaccard_seeds_mean": [0.99, 0.95, 0.7, 0.55, np.nan],
            "jaccard_seeds_min": [0.98, 0.9, 0.6, 0.5, np.nan],
            "jaccard_halves": [0.9, 0.585, 0.95, 0.9, np.nan],
        }
    )
    out = reproducibility_grades(table)
    assert (HIGH_AGREEMENT, LOW_AGREEMENT) == (0.8, 0.6)
    assert out["grade"].tolist() == ["high", "low", "moderate", "low", "not measured"]
    # the case: split-half Jaccard 0.585 is not "reproducible"
    assert out.loc[1, "flag"] == "low split-half agreement (0.58 < 0.6)"
    assert out.loc[3, "flag"] == "low agreement between seeds (0.55 < 0.6)"
    fig = stability_figure(
        type("R", (), {"table": out, "summary": {}})(), {0: "digging", 1: "walking"}
    )
    assert list(fig.data[0].x[:3]) == ["digging", "walking", "motif_03"]  # one numbering


def test_merged_motifs_keep_one_bar_per_fitted_state():
    # Two states merged under one name: each keeps its own bar (a shared category stacked
    # both bars above 1 in the report) and its own row, told apart by the state number.
    table = pd.DataFrame(
        {
            "state": [0, 1, 2],
            "jaccard_seeds_mean": [0.99, 0.94, 0.99],
            "jaccard_seeds_min": [0.98, 0.93, 0.98],
            "jaccard_halves": [0.97, 0.81, 0.89],
        }
    )
    names = {0: "rest", 1: "scan", 2: "scan"}
    fig = stability_figure(type("R", (), {"table": table, "summary": {}})(), names)
    labels = list(fig.data[0].x)
    assert labels == ["rest", "scan (state 1)", "scan (state 2)"]
    assert len(set(labels)) == len(table) and list(fig.data[1].x) == labels
