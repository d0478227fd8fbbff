"""Figures of the ethogram: raster of bouts, time budgets, bout durations, transitions.

Builders take the tables of ``ethoscribe.ethogram`` and hold no science. Motif colours come from
:func:`motif_colours`: the Okabe-Ito colour-blind-safe palette, then plotly's "Safe" qualitative
palette (grey removed), assigned to the sorted motif names; ``"unassigned"`` is always grey.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import numpy as np
import pandas as pd
import plotly.colors
import plotly.graph_objects as go

from ethoscribe.errors import InputError
from ethoscribe.ethogram import FpsSpec, GroupSpec, bout_table, transition_matrix, with_groups

__all__ = [
    "duration_figure",
    "ethogram_raster",
    "motif_colours",
    "time_budget_figure",
    "transition_diagram",
    "transition_heatmap",
]

OKABE_ITO = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7", "#000000")
PALETTE = OKABE_ITO + tuple(plotly.colors.qualitative.Safe[:-1])
UNASSIGNED_COLOUR = "#BBBBBB"
GROUP_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9")


def motif_colours(motifs: Iterable[str]) -> dict[str, str]:
    """Deterministic motif -> colour: sorted names take the palette in order (it repeats after 18).

    Examples
    --------
    >>> motif_colours(["walk", "groom", "unassigned"])
    {'groom': '#E69F00', 'walk': '#56B4E9', 'unassigned': '#BBBBBB'}
    """
    names = sorted({str(m) for m in motifs} - {"", "unassigned"})
    out = {m: PALETTE[i % len(PALETTE)] for i, m in enumerate(names)}
    if "unassigned" in {str(m) for m in motifs}:
        out["unassigned"] = UNASSIGNED_COLOUR
    return out


def _need(table: pd.DataFrame, columns: Iterable[str], what: str) -> None:
    missing = [c for c in columns if c not in table.columns]
    if missing:
        raise InputError(f"{what} lacks columns {missing}; it has {list(table.columns)}")


def _resampled(rows: pd.DataFrame, n_bins: int) -> pd.DataFrame:
    """Bars of one recording re-drawn from the motif at ``n_bins`` evenly spaced instants."""
    start = rows["start_s"].to_numpy()
    stop = start + rows["duration_s"].to_numpy()
    edges = np.linspace(start.min(), stop.max(), n_bins + 1)
    centre = (edges[:-1] + edges[1:]) / 2
    at = np.searchsorted(start, centre, side="right") - 1
    inside = (at >= 0) & (centre < stop[at.clip(0)])
    code = np.where(inside, at, -1)
    motif = np.where(inside, rows["motif"].to_numpy(dtype=object)[at.clip(0)], None)
    new = np.r_[True, motif[1:] != motif[:-1]]
    first = np.flatnonzero(new)
    length = np.diff(np.r_[first, n_bins])
    keep = code[first] >= 0
    width = edges[1] - edges[0]
    return pd.DataFrame(
        {
            "session": rows["session"].iloc[0],
            "animal": rows["animal"].iloc[0],
            "motif": motif[first][keep],
            "start_s": edges[first][keep],
            "duration_s": (length * width)[keep],
        }
    )


def ethogram_raster(
    data: pd.DataFrame,
    fps: FpsSpec = None,
    max_bars: int = 20_000,
    n_bins: int = 2000,
    title: str = "Ethogram",
) -> go.Figure:
    """One row per session / animal, bouts drawn as coloured bars along time (zoomable).

    Parameters
    ----------
    data : DataFrame
        A bout table, or a per-frame label table (turned into bouts with ``fps``).
    max_bars : int
        Above this many bouts, each row is re-drawn from ``n_bins`` evenly spaced samples of its
        motif (short bouts may vanish at that zoom; the tables keep them all).

    Examples
    --------
    >>> b = pd.DataFrame({"session": "s", "animal": "a", "motif": ["x", "y"],
    ...     "start_s": [0.0, 1.0], "duration_s": [1.0, 2.0]})
    >>> len(ethogram_raster(b).data)
    2
    """
    bouts = data if "start_s" in data.columns and "duration_s" in data.columns else None
    bouts = bout_table(data, fps) if bouts is None else bouts
    _need(bouts, ("session", "animal", "motif", "start_s", "duration_s"), "the bout table")
    bouts = bouts.sort_values(["session", "animal", "start_s"])
    if len(bouts) > max_bars:
        parts = [_resampled(rows, n_bins) for _, rows in bouts.groupby(["session", "animal"])]
        bouts = pd.concat(parts, ignore_index=True)
        title = f"{title} (resampled to {n_bins} samples per row)"
    row = bouts["session"].astype(str) + " / " + bouts["animal"].astype(str)
    fig = go.Figure()
    for motif, colour in motif_colours(bouts["motif"]).items():
        pick = (bouts["motif"] == motif).to_numpy()
        fig.add_trace(
            go.Bar(
                orientation="h",
                y=row[pick],
                x=bouts["duration_s"][pick],
                base=bouts["start_s"][pick],
                name=motif,
                marker={"color": colour, "line": {"width": 0}},
                hovertemplate=f"{motif}<br>start %{{base:.2f}} s<br>%{{x:.2f}} s<extra></extra>",
            )
        )
    n_rows = row.nunique()
    fig.update_layout(
        title=title,
        barmode="overlay",
        bargap=0.15,
        height=120 + 30 * n_rows,
        xaxis={"title": "time (s)"},
        yaxis={"autorange": "reversed", "type": "category"},
        legend={"title": "motif"},
    )
    return fig


def time_budget_figure(budgets: pd.DataFrame, groups: GroupSpec = None) -> go.Figure:
    """Fraction of valid time per motif, one point per session, side by side per group.

    ``budgets`` is :func:`ethoscribe.ethogram.time_budget` output per session (and animal);
    ``groups`` maps sessions to groups (or the table has a ``group`` column already).
    """
    table = with_groups(budgets, groups) if groups is not None else budgets
    _need(table, ("session", "motif", "fraction"), "the time-budget table")
    if "group" not in table.columns:
        table = table.assign(group="all")
    fig = go.Figure()
    for i, (group, rows) in enumerate(table.groupby("group", sort=True)):
        colour = GROUP_COLOURS[i % len(GROUP_COLOURS)]
        fig.add_trace(
            go.Box(
                x=rows["motif"],
                y=rows["fraction"],
                name=str(group),
                boxpoints="all",
                jitter=0.4,
                pointpos=0,
                marker={"color": colour, "size": 6},
                line={"width": 1},
                text=rows["session"],
                hovertemplate=f"%{{text}}: %{{y:.3f}}<extra>{group}</extra>",
            )
        )
    fig.update_layout(
        title="Time budget (one point per session)",
        boxmode="group",
        yaxis={"title": "fraction of valid time", "rangemode": "tozero"},
        xaxis={"title": "motif", "categoryorder": "category ascending"},
    )
    return fig


def duration_figure(bouts: pd.DataFrame, log_scale: bool = True) -> go.Figure:
    """Distribution of bout durations per motif (box plots)."""
    _need(bouts, ("motif", "duration_s"), "the bout table")
    fig = go.Figure()
    for motif, colour in motif_colours(bouts["motif"]).items():
        durations = bouts.loc[bouts["motif"] == motif, "duration_s"]
        fig.add_trace(go.Box(y=durations, name=motif, marker={"color": colour}, boxpoints=False))
    fig.update_layout(
        title="Bout durations",
        showlegend=False,
        yaxis={"title": "duration (s)", "type": "log" if log_scale else "linear"},
    )
    return fig


def transition_heatmap(matrix: pd.DataFrame, title: str = "Transition probabilities") -> go.Figure:
    """Heat map of a from x to transition matrix (as from ``transition_matrix``)."""
    fig = go.Figure(
        go.Heatmap(
            z=matrix.to_numpy(np.float64),
            x=[str(c) for c in matrix.columns],
            y=[str(i) for i in matrix.index],
            colorscale="Viridis",
            zmin=0,
            texttemplate="%{z:.2f}",
            hovertemplate="%{y} -> %{x}: %{z:.3f}<extra></extra>",
            colorbar={"title": "P"},
        )
    )
    fig.update_layout(
        title=title, xaxis={"title": "to"}, yaxis={"title": "from", "autorange": "reversed"}
    )
    return fig


def transition_diagram(
    transitions: pd.DataFrame,
    budgets: pd.DataFrame | Mapping[str, float] | None = None,
    min_probability: float = 0.05,
) -> go.Figure:
    """Motifs on a circle, sized by time budget, arrows as wide as the transition probability.

    ``transitions`` is a square transition matrix or a transition table; ``budgets`` a mapping
    motif -> fraction or a pooled ``time_budget(..., by=())`` table. Arrows below
    ``min_probability`` are left out.
    """
    is_table = "from_motif" in transitions.columns
    matrix = transition_matrix(transitions) if is_table else transitions
    motifs = [str(m) for m in matrix.index]
    if isinstance(budgets, pd.DataFrame):
        _need(budgets, ("motif", "fraction"), "the time-budget table")
        budgets = budgets.groupby("motif")["fraction"].mean().to_dict()
    share = np.array([float((budgets or {}).get(m, 1.0)) for m in motifs])
    size = 18 + 42 * np.sqrt(share / share.max()) if share.max() > 0 else np.full(len(motifs), 30)
    angle = np.pi / 2 - 2 * np.pi * np.arange(len(motifs)) / max(len(motifs), 1)
    x, y = np.cos(angle), np.sin(angle)
    colours = motif_colours(motifs)
    fig = go.Figure()
    mid_x, mid_y, mid_text = [], [], []
    p = np.nan_to_num(matrix.to_numpy(np.float64))
    for i, j in zip(*np.nonzero(p >= max(min_probability, 1e-12)), strict=True):
        if i == j:
            continue
        dx, dy = x[j] - x[i], y[j] - y[i]
        norm = np.hypot(dx, dy) or 1.0
        ox, oy = -dy / norm * 0.04, dx / norm * 0.04  # a->b and b->a side by side
        fig.add_annotation(
            x=x[j] + ox,
            y=y[j] + oy,
            ax=x[i] + ox,
            ay=y[i] + oy,
            xref="x",
            yref="y",
            axref="x",
            ayref="y",
            showarrow=True,
            arrowhead=2,
            arrowsize=1,
            arrowwidth=1 + 6 * p[i, j],
            arrowcolor="rgba(60, 60, 60, 0.6)",
            standoff=size[j] / 2,
            startstandoff=size[i] / 2,
            text="",
        )
        mid_x.append((x[i] + x[j]) / 2 + ox)
        mid_y.append((y[i] + y[j]) / 2 + oy)
        mid_text.append(f"{motifs[i]} -> {motifs[j]}: {p[i, j]:.2f}")
    fig.add_trace(
        go.Scatter(
            x=mid_x,
            y=mid_y,
            mode="markers",
            hovertext=mid_text,
            hoverinfo="text",
            marker={"size": 8, "opacity": 0},
            showlegend=False,
        )
    )
    fig.add_trace(
        go.Scatter(
            x=x,
            y=y,
            mode="markers+text",
            text=motifs,
            textposition="middle center",
            marker={"size": size, "color": [colours[m] for m in motifs], "line": {"width": 1}},
            hovertext=[f"{m}: {s:.1%} of time" for m, s in zip(motifs, share, strict=True)],
            hoverinfo="text",
            showlegend=False,
        )
    )
    hidden = {"visible": False, "range": [-1.4, 1.4]}
    fig.update_layout(
        title="Transitions between motifs",
        xaxis=hidden,
        yaxis={**hidden, "scaleanchor": "x"},
        plot_bgcolor="white",
    )
    return fig
