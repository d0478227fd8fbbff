"""Figure of cleaning quality: what was masked, filled and left missing, per keypoint and session.

Takes the tables of ``ethoscribe.clean.QualityReport.to_frame()`` (or the reports themselves);
holds no science, only averages for display.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import pandas as pd
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from ethoscribe.errors import InputError

if TYPE_CHECKING:
    from ethoscribe.clean import QualityReport

__all__ = ["quality_figure"]

BARS = {
    "frac_missing_raw": ("missing in raw data", "#9e9e9e"),
    "frac_low_confidence": ("masked: low confidence", "#f2a541"),
    "frac_jumps": ("masked: jumps", "#d1495b"),
    "frac_filled": ("filled", "#4f9dd9"),
    "frac_missing_after": ("missing after cleaning", "#2e294e"),
}
NEEDED = ("session", "animal", "keypoint", *BARS, "frac_invalid_frames")
# Studies of many short sessions (clips of one behaviour each) hold hundreds: the panel shows
# the sessions with the most frames missing or unscored, up to this many (quality.csv has all).
MAX_SESSIONS_SHOWN = 30


def _table(item: Any) -> pd.DataFrame:
    table = item.to_frame() if hasattr(item, "to_frame") and hasattr(item, "invalid") else item
    if not isinstance(table, pd.DataFrame):
        raise InputError(
            f"quality_figure takes QualityReport objects or their to_frame() tables; got "
            f"{type(item).__name__}"
        )
    missing = [c for c in NEEDED if c not in table.columns]
    if missing:
        raise InputError(
            f"quality table lacks columns {missing}; pass QualityReport.to_frame() output"
        )
    return table


def quality_figure(
    report_or_reports: QualityReport | pd.DataFrame | Sequence[QualityReport | pd.DataFrame],
) -> go.Figure:
    """Bar charts of cleaning quality.

    Left: per keypoint, the fractions of frames missing in the raw data, masked for low
    confidence, masked as jumps, filled, and missing after cleaning (mean over sessions and
    animals). Right, per session: the fraction of frames with some keypoint still missing
    after cleaning (the model fills those when enough of the body was seen) and, when the table
    has ``frac_unscored_frames`` (from the labels), the fraction left without a label; beyond
    :data:`MAX_SESSIONS_SHOWN` sessions, those with the largest sum of the two.

    Parameters
    ----------
    report_or_reports : QualityReport, its ``to_frame()`` table, or a sequence of these

    Returns
    -------
    plotly.graph_objects.Figure

    Examples
    --------
    >>> import numpy as np
    >>> from ethoscribe.clean import clean
    >>> from ethoscribe.pose import PoseTracks
    >>> t = PoseTracks(np.zeros((30, 1, 2, 2)), keypoints=["nose", "tail"], fps=30, units="mm")
    >>> fig = quality_figure(clean(t, max_speed=None)[1])
    >>> len(fig.data)
    6
    """
    items = (
        list(report_or_reports)
        if isinstance(report_or_reports, (list, tuple))
        else [report_or_reports]
    )
    if not items:
        raise InputError("quality_figure needs at least one QualityReport")
    table = pd.concat([_table(i) for i in items], ignore_index=True)
    by_keypoint = table.groupby("keypoint", sort=False)[list(BARS)].mean()
    per_animal = table.drop_duplicates(["session", "animal"])
    invalid = per_animal.groupby("session", sort=False)["frac_invalid_frames"].mean()
    unscored = None
    if "frac_unscored_frames" in per_animal.columns:
        unscored = per_animal.groupby("session", sort=False)["frac_unscored_frames"].mean()
    title = "Frames per session"
    if len(invalid) > MAX_SESSIONS_SHOWN:
        worst = invalid if unscored is None else invalid + unscored
        shown = worst.sort_values(ascending=False, kind="stable").index[:MAX_SESSIONS_SHOWN]
        title = f"Frames per session ({MAX_SESSIONS_SHOWN} of {len(invalid)}: the most missing)"
        invalid = invalid.loc[shown]
        unscored = None if unscored is None else unscored.loc[shown]

    fig = make_subplots(
        rows=1,
        cols=2,
        column_widths=[0.72, 0.28],
        subplot_titles=("Per keypoint (mean over sessions and animals)", title),
    )
    for column, (label, colour) in BARS.items():
        fig.add_trace(
            go.Bar(
                x=list(by_keypoint.index),
                y=by_keypoint[column].to_numpy(),
                name=label,
                marker_color=colour,
                hovertemplate="%{x}: %{y:.1%}<extra>" + label + "</extra>",
            ),
            row=1,
            col=1,
        )
    # sessions as horizontal bars: their names stay whole and readable
    per_session = [("some keypoint missing after cleaning", invalid, "#2a9d8f")]
    if unscored is not None:
        per_session.append(("left unscored (too little of the body seen)", unscored, "#8e3b74"))
    for label, values, colour in per_session:
        fig.add_trace(
            go.Bar(
                y=[str(s) for s in values.index],
                x=values.to_numpy(),
                orientation="h",
                name=label,
                marker_color=colour,
                hovertemplate="%{y}: %{x:.1%}<extra>" + label + "</extra>",
            ),
            row=1,
            col=2,
        )
    fig.update_layout(
        barmode="group",
        # the title at the very top, the legend between it and the plots (up to four rows at
        # a laptop's 880 px): never over the title or an axis title
        title={
            "text": "Cleaning quality",
            "x": 0,
            "y": 0.99,
            "yref": "container",
            "yanchor": "top",
        },
        legend={"orientation": "h", "x": 0, "y": 1.1, "yanchor": "bottom"},
        margin={"t": 190},
        height=max(490, 200 + 16 * len(per_session) * len(invalid)),
    )
    # ".1~%": 0.5 % steps print as 0.5%, 1%, 1.5% (".0%" printed 0%, 1%, 1%, 2%)
    fig.update_yaxes(tickformat=".1~%", rangemode="tozero", row=1, col=1)
    fig.update_xaxes(tickformat=".1~%", rangemode="tozero", row=1, col=2)
    fig.update_yaxes(title_text="fraction of frames", row=1, col=1)
    fig.update_yaxes(autorange="reversed", automargin=True, type="category", row=1, col=2)
    fig.update_xaxes(title_text="keypoint", row=1, col=1)
    fig.update_xaxes(title_text="fraction of frames", row=1, col=2)
    return fig
