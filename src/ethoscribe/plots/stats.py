"""Figure of group differences: effect sizes with bootstrap intervals, q-values marked.

Takes the table of ``ethoscribe.stats.compare_groups``; holds no science.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from ethoscribe.errors import InputError

__all__ = ["group_difference_figure"]

NEEDED = (
    "metric",
    "motif",
    "group_a",
    "group_b",
    "effect_size",
    "ci_low",
    "ci_high",
    "q_value",
    "significant",
)
SIGNIFICANT_COLOUR, OTHER_COLOUR = "#D55E00", "#0072B2"  # Okabe-Ito vermillion / blue


def group_difference_figure(
    group_stats: pd.DataFrame, metrics: list[str] | None = None, max_rows: int | None = None
) -> go.Figure:
    """Forest plot of Hedges' g (group a minus group b) with their intervals, one row per test.

    Filled markers are significant after Benjamini-Hochberg (``significant``); every row's
    q-value is printed beside it.

    Parameters
    ----------
    group_stats : DataFrame
        Output of ``compare_groups``.
    metrics : list of str, optional
        Show only these metrics.
    max_rows : int, optional
        Show only the rows with the smallest q-values (the title says how many are hidden).

    Examples
    --------
    >>> t = pd.DataFrame({"metric": ["time_budget"], "motif": ["x"], "group_a": ["a"],
    ...     "group_b": ["b"], "effect_size": [1.2], "ci_low": [0.4], "ci_high": [2.0],
    ...     "q_value": [0.01], "significant": [True]})
    >>> len(group_difference_figure(t).data)
    2
    """
    missing = [c for c in NEEDED if c not in group_stats.columns]
    if missing:
        msg = f"the group statistics lack columns {missing}; pass compare_groups() output"
        raise InputError(msg)
    table = group_stats if metrics is None else group_stats[group_stats["metric"].isin(metrics)]
    title = "Group differences: Hedges' g (a - b), 95% bootstrap intervals; filled: significant"
    if max_rows is not None and len(table) > max_rows:
        title += f" ({len(table) - max_rows} rows with larger q hidden)"
        table = table.nsmallest(max_rows, "q_value")
    table = table.sort_values(["metric", "motif", "group_a", "group_b"], ascending=False)
    label = (
        table["metric"]
        + " | "
        + table["motif"].astype(str)
        + " ("
        + table["group_a"]
        + " vs "
        + table["group_b"]
        + ")"
    )
    fig = go.Figure()
    for flag, colour, symbol, name in (
        (True, SIGNIFICANT_COLOUR, "circle", "q < alpha"),
        (False, OTHER_COLOUR, "circle-open", "not significant"),
    ):
        rows = (table["significant"].fillna(False).astype(bool) == flag).to_numpy()
        g = table["effect_size"].to_numpy(np.float64)[rows]
        fig.add_trace(
            go.Scatter(
                x=g,
                y=label[rows],
                mode="markers+text",
                name=name,
                marker={"color": colour, "symbol": symbol, "size": 9},
                error_x={
                    "type": "data",
                    "symmetric": False,
                    "color": colour,
                    "array": table["ci_high"].to_numpy(np.float64)[rows] - g,
                    "arrayminus": g - table["ci_low"].to_numpy(np.float64)[rows],
                },
                text=[f"q={q:.2g}" for q in table["q_value"].to_numpy(np.float64)[rows]],
                textposition="middle right",
                hovertemplate="%{y}<br>g = %{x:.2f}<br>%{text}<extra></extra>",
            )
        )
    fig.add_vline(x=0, line={"color": "grey", "dash": "dot"})
    fig.update_layout(
        title=title,
        height=160 + 24 * len(table),
        xaxis={"title": "Hedges' g"},
        yaxis={"type": "category"},
    )
    return fig
