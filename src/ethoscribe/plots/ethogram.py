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
from ethoscribe.transitions import transitions_above_chance

__all__ = [
    "duration_figure",
    "ethogram_raster",
    "motif_colours",
    "motif_order",
    "several_animals",
    "time_budget_figure",
    "transition_diagram",
    "transition_heatmap",
]

OKABE_ITO = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7", "#000000")
# black left out of the motifs' colours: it marks the bout shown in the workbench's close-up
PALETTE = OKABE_ITO[:-1] + tuple(plotly.colors.qualitative.Safe[:-1])
UNASSIGNED_COLOUR = "#BBBBBB"
GROUP_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9")


def motif_colours(motifs: Iterable[str]) -> dict[str, str]:
    """Deterministic motif -> colour: sorted names take the palette in order (it repeats after 17).

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


def several_animals(table: pd.DataFrame) -> bool:
    """Whether some session of ``table`` has more than one animal (figures then show one point
    per session and animal).

    Examples
    --------
    >>> several_animals(pd.DataFrame({"session": ["s", "s"], "animal": ["a", "b"]}))
    True
    """
    if "animal" not in table.columns:
        return False
    return bool((table.groupby("session")["animal"].nunique() > 1).any())


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
    """Fraction of valid time per motif, one point per session (and animal), side by side per
    group.

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
    several = several_animals(table)
    fig.update_layout(
        title=f"Time budget (one point per session{' and animal' if several else ''})",
        boxmode="group",
        yaxis={"title": "share of valid time", "rangemode": "tozero", "tickformat": ".1~%"},
        xaxis={"title": "motif", "categoryorder": "category ascending"},
        legend={"orientation": "h", "x": 0, "y": 1.0, "yanchor": "bottom", "title": "group"},
        margin={"t": 100},
    )
    return fig


def duration_figure(
    bouts: pd.DataFrame, log_scale: bool = True, min_bout_s: float | None = None
) -> go.Figure:
    """Distribution of bout durations per motif (box plots).

    With ``min_bout_s``, a dashed line marks the shortest bout the labelling allows; bouts cut
    by a gap or a recording edge (``cut_before``/``cut_after``) can be shorter, so pass the
    uncut ones to compare them with it.
    """
    _need(bouts, ("motif", "duration_s"), "the bout table")
    fig = go.Figure()
    for motif, colour in motif_colours(bouts["motif"]).items():
        d = bouts.loc[bouts["motif"] == motif, "duration_s"].to_numpy(np.float64)
        d = d[np.isfinite(d)]
        if not len(d):
            continue
        # box statistics computed here (as plotly would: linear quartiles, whiskers to the last
        # value within 1.5 IQR), so the figure holds 5 numbers per motif, not every bout
        q1, median, q3 = np.percentile(d, [25, 50, 75])
        iqr = q3 - q1
        low, high = d[d >= q1 - 1.5 * iqr].min(), d[d <= q3 + 1.5 * iqr].max()
        fig.add_trace(
            go.Box(
                x=[motif], q1=[q1], median=[median], q3=[q3], lowerfence=[low], upperfence=[high],
                name=motif, marker={"color": colour}, boxpoints=False,
                hovertemplate=f"{motif}: {len(d)} bouts<extra></extra>",
            )
        )  # fmt: skip
    fig.update_layout(
        title="Bout durations",
        showlegend=False,
        yaxis={"title": "duration (s)", "type": "log" if log_scale else "linear"},
    )
    positive = bouts["duration_s"][bouts["duration_s"] > 0]
    if log_scale and len(positive):
        # 1-2-5 ticks written out in full (plotly's own log ticks repeat digits: 5 6 7 8 9 1 2)
        lo, hi = np.floor(np.log10(positive.min())), np.ceil(np.log10(positive.max()))
        ticks = [m * 10.0**e for e in range(int(lo), int(hi) + 1) for m in (1, 2, 5)]
        fig.update_yaxes(tickvals=ticks, ticktext=[f"{t:g}" for t in ticks])
    if min_bout_s:
        fig.add_hline(y=min_bout_s, line_dash="dash", line_color="#666")
        fig.add_annotation(  # annotations on a log axis take log10 positions
            x=1, xref="paper", xanchor="right", yanchor="top", showarrow=False,
            y=np.log10(min_bout_s) if log_scale else min_bout_s, yref="y",
            text=f"minimum bout {min_bout_s:g} s", font={"size": 11, "color": "#444"},
        )  # fmt: skip
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


def motif_order(matrix: pd.DataFrame) -> list[str]:
    """Motifs ordered so that those that often follow one another sit side by side.

    Average-linkage clustering (scipy, with optimal leaf ordering) of the distance
    ``1 - S / max(S)`` where ``S = (P + P.T) / 2`` is the symmetrised transition probability.

    Examples
    --------
    >>> m = pd.DataFrame([[0, .1, .9], [.1, 0, .9], [.5, .5, 0]], index=list("abc"),
    ...                  columns=list("abc"))
    >>> motif_order(m)[1]
    'c'
    """
    from scipy.cluster import hierarchy  # here: scipy.cluster takes ~0.2 s to import
    from scipy.spatial.distance import squareform

    names = [str(m) for m in matrix.index]
    if len(names) < 3:
        return names
    p = np.nan_to_num(matrix.to_numpy(np.float64))
    sim = (p + p.T) / 2
    dist = 1 - sim / sim.max() if sim.max() > 0 else np.ones_like(sim)
    np.fill_diagonal(dist, 0.0)
    tree = hierarchy.linkage(
        squareform(dist, checks=False), method="average", optimal_ordering=True
    )
    return [names[k] for k in hierarchy.leaves_list(tree)]


def transition_diagram(
    transitions: pd.DataFrame,
    budgets: pd.DataFrame | Mapping[str, float] | None = None,
    min_probability: float = 0.05,
    alpha: float = 0.05,
) -> go.Figure:
    """Arc diagram of the transitions that happen more often than chance.

    Motifs sit on a line in :func:`motif_order` (those that often follow one another side by
    side), sized by their share of time. An arc is drawn for each transition above chance
    (:func:`ethoscribe.ethogram.transitions_above_chance`: binomial test against the
    quasi-independence model, Benjamini-Hochberg q < ``alpha``): above the line from left to
    right, below it from right to left, as wide as the probability, labelled with the
    probability and how many times chance it is.

    ``transitions`` is a bout table, a transition table with counts, or the output of
    ``transitions_above_chance``; a probability matrix (no counts, so no test) draws every
    transition of at least ``min_probability`` and says so in the title. ``budgets``: a mapping
    motif -> fraction or a pooled ``time_budget(..., by=())`` table.
    """
    tested = "above_chance" in transitions.columns
    is_matrix = not tested and "from_motif" not in transitions.columns
    is_matrix = is_matrix and "motif" not in transitions.columns
    if is_matrix:
        matrix = transitions
        p = np.nan_to_num(matrix.to_numpy(np.float64))
        idx = [(i, j) for i, j in zip(*np.nonzero(p >= min_probability), strict=True) if i != j]
        names = [str(m) for m in matrix.index]
        arcs = pd.DataFrame(
            [(names[i], names[j], p[i, j], np.nan) for i, j in idx],
            columns=["from_motif", "to_motif", "probability", "ratio"],
        )
        what = f"transitions with probability >= {min_probability} (untested: no counts given)"
    else:
        table = transitions if tested else transitions_above_chance(transitions, alpha)
        matrix = transition_matrix(table[["from_motif", "to_motif", "count"]])
        arcs = table[table["above_chance"]]
        what = (
            f"transitions above chance (binomial test against independence, BH q < {alpha}); "
            "label: probability (x chance)"
        )
    order = motif_order(matrix)
    pos = {m: k for k, m in enumerate(order)}
    if isinstance(budgets, pd.DataFrame):
        _need(budgets, ("motif", "fraction"), "the time-budget table")
        budgets = budgets.groupby("motif")["fraction"].mean().to_dict()
    share = np.array([float((budgets or {}).get(m, 1.0)) for m in order])
    size = 14 + 36 * np.sqrt(share / share.max()) if share.max() > 0 else np.full(len(order), 26)
    colours = motif_colours(order)
    # traces and annotations are gathered and given to plotly once: each add_annotation
    # re-validates every annotation before it (quadratic; 2.9 s of a 1e6-frame report)
    traces, arrows, labels = [], [], []
    label_y = []
    for _, a in arcs.iterrows():
        x0, x1 = pos[a["from_motif"]], pos[a["to_motif"]]
        sign = 1.0 if x1 > x0 else -1.0  # left to right above the line, back below it
        height = sign * (0.35 + 0.3 * abs(x1 - x0))
        t = np.linspace(0, np.pi, 40)
        xs = (x0 + x1) / 2 - (x1 - x0) / 2 * np.cos(t)
        ys = height * np.sin(t)
        width = 1 + 7 * float(a["probability"])
        traces.append(
            go.Scatter(
                x=xs, y=ys, mode="lines", line={"width": width, "color": "rgba(60,60,60,0.45)"},
                hoverinfo="skip", showlegend=False,
            )
        )  # fmt: skip
        arrows.append(
            dict(
                x=xs[-1], y=ys[-1], ax=xs[-4], ay=ys[-4], xref="x", yref="y", axref="x",
                ayref="y", showarrow=True, arrowhead=2, arrowsize=1.2,
                arrowwidth=max(1.5, width / 2), arrowcolor="rgba(60,60,60,0.8)",
                standoff=size[pos[a["to_motif"]]] / 2, text="",
            )
        )  # fmt: skip
        ratio = "" if not np.isfinite(a["ratio"]) else f" (x{a['ratio']:.1f})"
        label_y.append(height)
        labels.append(
            dict(
                x=(x0 + x1) / 2, y=height, text=f"{a['probability']:.2f}{ratio}",
                showarrow=False, font={"size": 11, "color": "#222"},
                bgcolor="rgba(255,255,255,0.9)",
            )
        )  # fmt: skip
    crowded = len(order) > 9
    traces.append(
        go.Scatter(
            x=list(range(len(order))), y=[0.0] * len(order), mode="markers",
            marker={"size": size, "color": [colours[m] for m in order],
                    "line": {"width": 1, "color": "#333"}},
            hovertext=[f"{m}: {v:.1%} of time" for m, v in zip(order, share, strict=True)],
            hoverinfo="text", showlegend=False,
        )
    )  # fmt: skip
    names = [  # motif names in a band of their own, staggered when crowded
        dict(
            x=k, y=0, yref="y", showarrow=False, text=m,
            yshift=-(size[k] / 2 + 12 + 14 * (crowded and k % 2)),
            font={"size": 12}, bgcolor="rgba(255,255,255,0.8)",
        )
        for k, m in enumerate(order)
    ]  # fmt: skip
    fig = go.Figure(data=traces, layout={"annotations": arrows + labels + names})
    reach = max([abs(y) for y in label_y] + [0.5]) + 0.35
    fig.update_layout(
        title={"text": f"Transitions between motifs<br><sup>{what}</sup>", "x": 0},
        xaxis={"visible": False, "range": [-0.7, len(order) - 0.3]},
        yaxis={"visible": False, "range": [-reach - 0.3, reach]},
        plot_bgcolor="white",
        height=int(260 + 110 * reach),
        margin={"t": 90, "b": 20},
    )
    return fig
