"""Figures of an expert's coding against motifs or learned labels (tables in, figures out)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

__all__ = ["confusion_heatmap"]


def confusion_heatmap(matrix: pd.DataFrame, title: str = "") -> go.Figure:
    """Heatmap of a behaviour x motif frame-count table, coloured by share of each behaviour.

    Parameters
    ----------
    matrix : DataFrame, behaviours (index) x motifs (columns), frame counts

    Examples
    --------
    >>> m = pd.DataFrame([[8, 2], [0, 5]], index=["rest", "walk"], columns=["m1", "m2"])
    >>> confusion_heatmap(m).data[0].z.shape
    (2, 2)
    """
    counts = matrix.to_numpy(dtype=float)
    totals = counts.sum(axis=1, keepdims=True)
    share = np.divide(counts, totals, out=np.zeros_like(counts), where=totals > 0)
    text = [[f"{v:.0%}" if v >= 0.005 else "" for v in row] for row in share]
    fig = go.Figure(
        go.Heatmap(
            z=share,
            x=[str(c) for c in matrix.columns],
            y=[str(i) for i in matrix.index],
            text=text,
            texttemplate="%{text}",
            customdata=counts,
            colorscale="Blues",
            zmin=0.0,
            zmax=1.0,
            colorbar={"title": "share of<br>behaviour"},
            hovertemplate="behaviour %{y}<br>%{x}: %{customdata:.0f} frames "
            "(%{z:.1%} of the behaviour)<extra></extra>",
        )
    )
    fig.update_layout(
        title=title or "Expert behaviours (rows) against motifs (columns)",
        xaxis={"title": "motif", "side": "bottom"},
        yaxis={"title": "expert behaviour", "autorange": "reversed"},
        template="plotly_white",
        height=max(320, 60 + 34 * len(matrix)),
        width=max(520, 160 + 70 * matrix.shape[1]),
    )
    return fig
