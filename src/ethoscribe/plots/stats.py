"""Figure of group differences: effect sizes with their intervals, q-values marked.

Takes the table of ``ethoscribe.stats.compare_groups``; holds no science.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from ethoscribe.errors import InputError

__all__ = ["group_difference_figure", "planned_values_figure"]

GROUP_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9")

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

    Filled markers are significant after their correction (``significant``); every row's
    adjusted p-value (``q_value``) is printed in a column right of the plot. Rows without an
    effect size (not testable) are left out.

    Parameters
    ----------
    group_stats : DataFrame
        Output of ``compare_groups``.
    metrics : list of str, optional
        Show only these metrics.
    max_rows : int, optional
        Show only the rows with the smallest adjusted p (the title says how many are hidden).

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
    table = table[np.isfinite(table["effect_size"].to_numpy(np.float64))]
    title = "Hedges' g (a - b) with 95% noncentral-t intervals; filled: adjusted p < alpha"
    if max_rows is not None and len(table) > max_rows:
        title += f"<br><sup>{max_rows} smallest adjusted p shown, {len(table) - max_rows} more in "
        title += "group_stats.csv</sup>"
        table = table.nsmallest(max_rows, "q_value")
    table = table.sort_values(["q_value", "metric", "motif"], kind="stable")
    label = (
        table["metric"] + " | " + table["motif"].astype(str)
        + " (" + table["group_a"] + " vs " + table["group_b"] + ")"
    ).tolist()  # fmt: skip
    fig = go.Figure()
    for flag, colour, symbol, name in (
        (True, SIGNIFICANT_COLOUR, "circle", "adjusted p < alpha"),
        (False, OTHER_COLOUR, "circle-open", "not significant"),
    ):
        rows = (table["significant"].fillna(False).astype(bool) == flag).to_numpy()
        g = table["effect_size"].to_numpy(np.float64)[rows]
        fig.add_trace(
            go.Scatter(
                x=g,
                y=[t for t, r in zip(label, rows, strict=True) if r],
                mode="markers",
                name=name,
                marker={"color": colour, "symbol": symbol, "size": 9},
                error_x={
                    "type": "data",
                    "symmetric": False,
                    "color": colour,
                    "array": table["ci_high"].to_numpy(np.float64)[rows] - g,
                    "arrayminus": g - table["ci_low"].to_numpy(np.float64)[rows],
                },
                customdata=table["q_value"].to_numpy(np.float64)[rows],
                hovertemplate="%{y}<br>g = %{x:.2f}<br>adjusted p = %{customdata:.2g}"
                "<extra></extra>",
            )
        )
    # adjusted p in a column of its own right of the plot, never over a marker
    for text, q in zip(label, table["q_value"].to_numpy(np.float64), strict=True):
        fig.add_annotation(
            x=1.0, xref="paper", xanchor="left", xshift=8, y=text, yref="y", showarrow=False,
            text=f"{q:.2g}", font={"size": 11, "color": "#444"},
        )  # fmt: skip
    fig.add_annotation(
        x=1.0, xref="paper", xanchor="left", xshift=8, y=1.0, yref="paper", yanchor="bottom",
        showarrow=False, text="<b>adj. p</b>", font={"size": 11},
    )  # fmt: skip
    fig.add_vline(x=0, line={"color": "grey", "dash": "dot"})
    fig.update_layout(
        title={"text": title, "x": 0, "xanchor": "left"},
        height=170 + 24 * len(table),
        xaxis={"title": "Hedges' g", "zeroline": False},
        yaxis={"type": "category", "automargin": True, "autorange": "reversed"},
        legend={"orientation": "h", "x": 0, "xanchor": "left", "y": 1.0, "yanchor": "bottom"},
        margin={"r": 70, "t": 110},
    )
    return fig


def planned_values_figure(
    metrics: pd.DataFrame, planned: pd.DataFrame, unit: str = "session", paired: bool = False
) -> go.Figure:
    """One panel per planned comparison: every unit's value by group, and the group means.

    ``metrics``: the values tested (``metric, motif, group, value`` and the ``unit`` column:
    ``stats.unit_values`` of ``session_metrics``); ``planned``: the planned rows of
    ``compare_groups`` (their Hedges' g, interval and adjusted p go in the titles).
    ``paired``: lines join each unit's values across the groups (conditions).

    Examples
    --------
    >>> m = pd.DataFrame({"session": list("abcd"), "metric": "time_budget", "motif": "dig",
    ...     "group": ["x", "x", "y", "y"], "value": [0.1, 0.2, 0.3, 0.4]})
    >>> p = pd.DataFrame({"metric": ["time_budget"], "motif": ["dig"], "q_value": [0.3]})
    >>> len(planned_values_figure(m, p).data)
    2
    """
    tests = planned[["metric", "motif"]].drop_duplicates()
    n = max(len(tests), 1)
    titles = []
    for _, t in tests.iterrows():
        rows = planned[(planned["metric"] == t["metric"]) & (planned["motif"] == t["motif"])]
        q = rows["q_value"].min()
        said = f"Holm-adjusted p = {q:.2g}"
        if len(rows) == 1 and {"effect_size", "ci_low", "ci_high"} <= set(rows.columns):
            g, low, high = rows[["effect_size", "ci_low", "ci_high"]].iloc[0]
            if np.isfinite(g):
                said = f"g = {g:.2f} [{low:.2f}, {high:.2f}], {said}"
        titles.append(f"{t['metric']} of {t['motif']}<br><sup>{said}</sup>")
    fig = make_subplots(rows=1, cols=n, subplot_titles=titles, horizontal_spacing=0.12)
    groups = sorted(metrics["group"].astype(str).unique())
    for k, (_, t) in enumerate(tests.iterrows()):
        rows = metrics[(metrics["metric"] == t["metric"]) & (metrics["motif"] == t["motif"])]
        if paired and unit in rows:  # each unit's values joined, under the points
            wide = rows.pivot_table(index=unit, columns="group", values="value", aggfunc="mean")
            for name, values in wide.reindex(columns=groups).iterrows():
                fig.add_trace(
                    go.Scatter(
                        x=groups, y=values.to_numpy(np.float64), mode="lines", showlegend=False,
                        line={"color": "rgba(90,90,90,0.45)", "width": 1}, hoverinfo="skip",
                        name=str(name),
                    ),
                    row=1, col=k + 1,
                )  # fmt: skip
        for i, g in enumerate(groups):
            part = rows[rows["group"].astype(str) == g]
            fig.add_trace(
                go.Box(
                    x=[g] * len(part), y=part["value"], name=g, boxpoints="all",
                    jitter=0.0 if paired else 0.35, pointpos=0,
                    marker={"color": GROUP_COLOURS[i % len(GROUP_COLOURS)], "size": 7},
                    line={"width": 1}, fillcolor="rgba(0,0,0,0)", showlegend=False,
                    text=part.get(unit), boxmean=True,
                    hovertemplate="%{text}: %{y:.3g}<extra>" + g + "</extra>",
                ),
                row=1, col=k + 1,
            )  # fmt: skip
        fig.update_yaxes(title_text=_axis_title(t["metric"]), rangemode="tozero", row=1, col=k + 1)
        if t["metric"] == "time_budget":
            fig.update_yaxes(tickformat=".1~%", row=1, col=k + 1)
    fig.update_layout(
        title={"text": f"Planned comparisons: one point per {unit}"
               + ("; lines join each one's conditions" if paired else "")
               + " (dashed: group mean)", "x": 0},
        height=420, margin={"t": 110},
    )  # fmt: skip
    return fig


def _axis_title(metric: str) -> str:
    return {
        "time_budget": "share of valid time",
        "bout_rate_per_min": "bouts per minute",
        "mean_bout_s": "mean bout (s)",
        "median_bout_s": "median bout (s)",
        "transition": "P(next motif)",
    }.get(metric, metric)
