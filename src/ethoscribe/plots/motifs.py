"""Figures of single motifs: a posture drawn as a skeleton, a film strip of example bouts, what
comes before and after, bout durations and the share of time per session.

Builders take arrays and small tables (postures from :mod:`ethoscribe.postures`) and hold no
science. Postures are body-frame keypoints ``(K, D)``: forward along x, sideways along y; in
3-D a side view (forward, height) is drawn below the top view.

These figures are redrawn on every click of the workbench, so they set their few style
properties directly (no named template, no ``make_subplots``): building one takes about a
millisecond instead of tens.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from ethoscribe.errors import InputError

__all__ = [
    "bout_strip_figure",
    "duration_histogram",
    "neighbour_figure",
    "posture_figure",
    "posture_grid_figure",
    "session_share_figure",
]

BONE_COLOUR = "#444444"
GRID = {"gridcolor": "#ebebeb", "zerolinecolor": "#d0d0d0", "linecolor": "#bbbbbb"}
HIDDEN = {"visible": False}
LOG_TICKS = (0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 50, 100, 200, 500)


def _bones(posture: np.ndarray, index: Sequence[tuple[int, int]], dims=(0, 1), dx=0.0, dy=0.0):
    """x and y of line segments between keypoint pairs, ``None`` between segments."""
    P = np.asarray(posture, dtype=np.float64)
    if not index:
        return [], []
    a, b = np.array(index).T
    xs = np.column_stack([P[a, dims[0]] + dx, P[b, dims[0]] + dx, np.full(len(a), np.nan)])
    ys = np.column_stack([P[a, dims[1]] + dy, P[b, dims[1]] + dy, np.full(len(a), np.nan)])
    return xs.ravel(), ys.ravel()


def _edge_index(keypoints: Sequence[str], edges: Sequence[tuple[str, str]]):
    names = list(keypoints)
    unknown = sorted({k for e in edges for k in e} - set(names))
    if unknown:
        raise InputError(f"skeleton names unknown keypoints {unknown}; keypoints: {names}")
    return [(names.index(a), names.index(b)) for a, b in edges]


# Average width of a character of the figures' fonts (px; lower-case names at 12-14 px), to
# tell whether a text fits before the browser draws it.
CHAR_PX = {12: 6.6, 14: 7.7}


def short_name(name: str, max_chars: int) -> str:
    """``name`` cut to ``max_chars`` characters with an ellipsis (full names go in hovers).

    >>> short_name("grooming_face_and_head", 12), short_name("rest", 12)
    ('grooming_fa…', 'rest')
    """
    return name if len(name) <= max_chars else name[: max_chars - 1] + "…"


def fitted_title(title: str, width: int) -> str:
    """``title`` on two lines when one would run past the figure's ``width`` (a long motif
    name): broken after its first ": " or ", ", else kept (the browser clips it)."""
    if len(title) * CHAR_PX[14] <= width - 20:
        return title
    for sep in (": ", ", "):
        if sep in title:
            head, tail = title.split(sep, 1)
            return f"{head}{sep.strip()}<br>{tail}"
    return title


def _figure(data: list, title: str, width: int, height: int, **layout) -> go.Figure:
    """One constructor call (update_layout is ~10x slower: these figures are redrawn often)."""
    title = fitted_title(title, width)
    style = {
        "title": {"text": title, "x": 0.02, "xanchor": "left", "font": {"size": 14}},
        "width": width,
        "height": height,
        "margin": {"l": 55, "r": 20, "t": 50, "b": 45},
        "paper_bgcolor": "white",
        "plot_bgcolor": "white",
        "font": {"family": "system-ui, -apple-system, Segoe UI, sans-serif", "size": 12},
        "showlegend": False,
        "template": "none",  # styles are set here; copying a full template costs milliseconds
    }
    layout = {**style, **layout}
    if "<br>" in title:  # a second title line: the plot moves down by one line, not under it
        layout["margin"] = {**layout["margin"], "t": layout["margin"].get("t", 50) + 18}
        layout["height"] = height + 18
    return go.Figure(data=data, layout=layout)


def posture_figure(
    posture: np.ndarray,
    keypoints: Sequence[str],
    edges: Sequence[tuple[str, str]],
    title: str = "Mean posture",
    colour: str = "#0072B2",
    units: str = "",
    width: int = 360,
    height: int = 360,
    span: float | None = None,
    second_axis: str = "sideways",
) -> go.Figure:
    """A posture drawn as bones between keypoints (top view; 3-D adds a side view below it).
    ``second_axis``: what the second body-frame axis of 2-D postures is ("height" for tracks
    filmed from the side).

    Parameters
    ----------
    posture : array, shape (K, D)
        Body-frame keypoints (NaN keypoints are left out).
    keypoints, edges
        Keypoint names and the pairs to join.
    span : float, optional
        Half-width of the square view; default fits the posture (pass one value to compare
        several motifs at the same scale).

    Examples
    --------
    >>> p = np.array([[1.0, 0], [0, 0], [-1, 0]])
    >>> fig = posture_figure(p, ["nose", "mid", "tail"], [("nose", "mid"), ("mid", "tail")])
    >>> [t.name for t in fig.data]
    ['bones', 'keypoints']
    """
    P = np.asarray(posture, dtype=np.float64)
    if P.ndim != 2 or P.shape[0] != len(keypoints):
        raise InputError(f"posture must be (K, D) with K = {len(keypoints)}; got {P.shape}")
    index = _edge_index(keypoints, edges)
    views = [((0, 1), second_axis, "")] + ([((0, 2), "height", "2")] if P.shape[1] == 3 else [])
    finite = P[np.isfinite(P).all(1)]
    half = span or (float(np.abs(finite).max()) * 1.15 if len(finite) else 1.0)
    unit = f" ({units})" if units else ""
    data: list = []
    layout: dict = {}
    for n, (dims, vertical, suffix) in enumerate(views):
        xs, ys = _bones(P, index, dims)
        axes = {"xaxis": f"x{suffix}", "yaxis": f"y{suffix}"}
        data.append(
            go.Scatter(
                x=xs,
                y=ys,
                mode="lines",
                name="bones",
                hoverinfo="skip",
                line={"color": BONE_COLOUR, "width": 3},
                **axes,
            )
        )
        data.append(
            go.Scatter(
                x=P[:, dims[0]],
                y=P[:, dims[1]],
                mode="markers",
                name="keypoints",
                text=list(keypoints),
                hovertemplate="%{text}<br>%{x:.1f}, %{y:.1f}<extra></extra>",
                marker={"size": 9, "color": colour, "line": {"width": 1, "color": "white"}},
                **axes,
            )
        )
        # 3-D: the side view under the top view, so both fit the panel's column
        rows = [0.0, 1.0] if len(views) == 1 else [[0.56, 1.0], [0.0, 0.44]][n]
        layout[f"xaxis{suffix}"] = {
            "range": [-half, half],
            "title": f"forward{unit}",
            "anchor": f"y{suffix}",
            **GRID,
        }
        layout[f"yaxis{suffix}"] = {
            "range": [-half, half],
            "title": f"{vertical}{unit}",
            "scaleanchor": f"x{suffix}",
            "anchor": f"x{suffix}",
            "domain": rows,
            **GRID,
        }
    return _figure(data, title, width, height * len(views), **layout)


def posture_grid_figure(
    postures: dict[str, np.ndarray],
    keypoints: Sequence[str],
    edges: Sequence[tuple[str, str]],
    units: str = "",
    second_axis: str = "sideways",
    columns: int = 6,
) -> go.Figure:
    """Every motif's mean posture side by side at one scale, for a page rather than a click
    (built once: ``make_subplots`` is fine here). 3-D postures get a side view (forward,
    height) under each top view.

    Examples
    --------
    >>> p = np.array([[1.0, 0], [0, 0], [-1, 0]])
    >>> fig = posture_grid_figure({"rest": p, "walk": 2 * p}, ["n", "m", "t"], [("n", "m")])
    >>> len(fig.data), fig.layout.annotations[1].text
    (4, 'walk')
    """
    from plotly.subplots import make_subplots

    names = list(postures)
    dims = next(iter(postures.values())).shape[1] if names else 2
    views = [((0, 1), second_axis)] + ([((0, 2), "height")] if dims == 3 else [])
    cols = max(1, min(columns, len(names)))
    blocks = -(-len(names) // cols) if names else 1
    titles = [""] * (blocks * len(views) * cols)
    for i, name in enumerate(names):
        titles[(i // cols) * len(views) * cols + i % cols] = short_name(name, 22)
    n_rows, panel = blocks * len(views), 1100 / cols  # square panels across a laptop page
    height = int(60 + n_rows * (panel + 40))
    fig = make_subplots(
        rows=n_rows, cols=cols, subplot_titles=titles,
        horizontal_spacing=0.02, vertical_spacing=min(0.3, 40 / height),  # room for a title
    )  # fmt: skip
    finite = np.concatenate([p[np.isfinite(p).all(1)] for p in postures.values()] or [[]])
    # one scale for every motif and view: the top view's; a 3-D side view is centred on the
    # heights off the floor it shows, at that scale unless they spread further
    half = float(np.abs(finite[:, :2]).max()) * 1.15 if finite.size else 1.0
    ranges = [((-half, half), (-half, half))]
    if len(views) == 2 and finite.size:
        low, high = float(finite[:, 2].min()), float(finite[:, 2].max())
        up = max(half, (high - low) / 2 * 1.15)
        ranges.append(((-half, half), ((low + high) / 2 - up, (low + high) / 2 + up)))
    index = _edge_index(keypoints, edges)
    unit = f" ({units})" if units else ""
    for i, (name, P) in enumerate(postures.items()):
        for v, (pair, vertical) in enumerate(views):
            row, col = (i // cols) * len(views) + v + 1, i % cols + 1
            xs, ys = _bones(P, index, pair)
            fig.add_trace(
                go.Scatter(x=xs, y=ys, mode="lines", hoverinfo="skip", showlegend=False,
                           line={"color": BONE_COLOUR, "width": 2}),
                row=row, col=col,
            )  # fmt: skip
            fig.add_trace(
                go.Scatter(
                    x=P[:, pair[0]], y=P[:, pair[1]], mode="markers", showlegend=False,
                    text=[f"{name}: {k}" for k in keypoints],
                    marker={"size": 6, "color": "#0072B2"},
                    hovertemplate="%{text}<br>%{x:.1f}, %{y:.1f}<extra></extra>",
                ),
                row=row, col=col,
            )  # fmt: skip
            first, axis = col == 1, (row - 1) * cols + col  # plotly numbers axes 1, 2, ...
            across, vertical_range = ranges[v]
            fig.update_xaxes(range=across, showticklabels=False, row=row, col=col, **GRID)
            fig.update_yaxes(
                range=vertical_range, scaleanchor=f"x{'' if axis == 1 else axis}",
                showticklabels=first, title_text=f"{vertical}{unit}" if first else None,
                row=row, col=col, **GRID,
            )  # fmt: skip
    fig.update_layout(
        height=height,
        margin={"l": 60, "r": 10, "t": 50, "b": 10},
        plot_bgcolor="white",
        title={"text": "Mean posture of each motif (forward to the right, one scale)", "x": 0},
    )
    return fig


def bout_strip_figure(
    bouts: Sequence[tuple[str, np.ndarray]],
    keypoints: Sequence[str],
    edges: Sequence[tuple[str, str]],
    colour: str = "#0072B2",
    width: int = 720,
    title: str = "Example bouts",
) -> go.Figure:
    """A film strip per bout: a few of its frames side by side, one row per bout (top view).

    Parameters
    ----------
    bouts : sequence of (str, array (n_frames, K, D))
        Row caption and the body-frame postures of the frames to show, left to right.

    Examples
    --------
    >>> frames = np.zeros((3, 2, 2)); frames[:, 0, 0] = 1.0
    >>> fig = bout_strip_figure([("s1, 0.0 s", frames)], ["nose", "tail"], [("nose", "tail")])
    >>> len(fig.data)
    2
    """
    data: list = []
    if not bouts:
        note = {
            "text": "no bout long enough to show",
            "showarrow": False,
            "x": 0.5,
            "y": 0.5,
            "xref": "paper",
            "yref": "paper",
        }
        return _figure(data, title, width, 160, xaxis=HIDDEN, yaxis=HIDDEN, annotations=[note])
    index = _edge_index(keypoints, edges)
    points = np.concatenate([np.asarray(f, np.float64)[..., :2].reshape(-1, 2) for _, f in bouts])
    points = points[np.isfinite(points).all(1)]
    hx = float(np.abs(points[:, 0]).max()) * 1.05 if len(points) else 0.0
    hy = float(np.abs(points[:, 1]).max()) * 1.05 if len(points) else 0.0
    hx, hy = hx or 1.0, hy or hx or 1.0  # nothing tracked, or every point at the origin
    step_x, step_y = 2.1 * hx, 2.0 * hy + 0.45 * hx  # room for the caption above each row
    n_cols = max(len(f) for _, f in bouts)
    xs, ys, px, py, names, notes = [], [], [], [], [], []
    for row, (caption, frames) in enumerate(bouts):
        F = np.asarray(frames, dtype=np.float64)
        for i, posture in enumerate(F):
            bx, by = _bones(posture, index, dx=i * step_x, dy=-row * step_y)
            xs.append(bx)
            ys.append(by)
            if not np.isfinite(posture[:, :2]).any():  # nothing to draw: say why
                notes.append(
                    dict(
                        text="not tracked",
                        x=i * step_x,
                        y=-row * step_y,
                        xref="x",
                        yref="y",
                        showarrow=False,
                        font={"size": 10, "color": "#888888"},
                    )
                )
        px.append((F[:, :, 0] + (np.arange(len(F)) * step_x)[:, None]).ravel())
        py.append(F[:, :, 1].ravel() - row * step_y)
        names += list(keypoints) * len(F)
        notes.append(
            dict(
                text=caption,
                x=-hx,
                y=-row * step_y + hy + 0.25 * hx,
                xref="x",
                yref="y",
                showarrow=False,
                xanchor="left",
                font={"size": 11},
            )
        )
    data.append(
        go.Scatter(
            x=np.concatenate(xs),
            y=np.concatenate(ys),
            mode="lines",
            name="bones",
            hoverinfo="skip",
            line={"color": BONE_COLOUR, "width": 2},
        )
    )
    data.append(
        go.Scatter(
            x=np.concatenate(px),
            y=np.concatenate(py),
            mode="markers",
            name="keypoints",
            text=names,
            hovertemplate="%{text}<extra></extra>",
            marker={"size": 5, "color": colour},
        )
    )
    x_range = [-hx, (n_cols - 1) * step_x + hx]
    y_range = [-(len(bouts) - 1) * step_y - hy, hy + 0.42 * hx]
    inner = width - 20
    height = int(inner * (y_range[1] - y_range[0]) / (x_range[1] - x_range[0])) + 60
    return _figure(
        data,
        title,
        width,
        max(height, 140),
        annotations=notes,
        margin={"l": 10, "r": 10, "t": 45, "b": 5},
        xaxis={**HIDDEN, "range": x_range},
        yaxis={**HIDDEN, "range": y_range, "scaleanchor": "x"},
    )


NEIGHBOUR_NAME_CHARS = 16  # fits the gap between the two panels (~115 px at 12 px)


def neighbour_figure(
    before: pd.Series, after: pd.Series, motif: str, colours: dict[str, str] | None = None
) -> go.Figure:
    """Which motifs come directly before and after ``motif`` (shares of its linked bouts).

    ``before``/``after`` map motif name -> share (0-1); the largest six of each are drawn.

    Examples
    --------
    >>> fig = neighbour_figure(pd.Series({"a": 0.7, "b": 0.3}), pd.Series({"a": 1.0}), "m")
    >>> [len(t.x) for t in fig.data]
    [2, 1]
    """
    data: list = []
    colours = colours or {}
    layout: dict = {}
    notes: list[dict] = []
    for n, (shares, label) in enumerate(((before, "comes before it"), (after, "comes after it"))):
        top = shares.sort_values(ascending=True).tail(6)
        suffix = "" if n == 0 else "2"
        names = [str(m) for m in top.index]
        data.append(
            go.Bar(
                x=top.to_numpy(),
                # the right panel's names sit in the gap between the panels: cut to fit it
                y=[short_name(m, NEIGHBOUR_NAME_CHARS) for m in names],
                customdata=names,
                orientation="h",
                marker={"color": [colours.get(m, "#888888") for m in names]},
                hovertemplate="%{customdata}: %{x:.0%}<extra></extra>",
                xaxis=f"x{suffix}",
                yaxis=f"y{suffix}",
            )
        )
        layout[f"xaxis{suffix}"] = {
            "range": [0, 1],
            "tickformat": ".0%",
            "title": label,
            "domain": [[0.0, 0.36], [0.64, 1.0]][n],
            "anchor": f"y{suffix}",
            **GRID,
        }
        layout[f"yaxis{suffix}"] = {"anchor": f"x{suffix}", "automargin": True}
        if top.empty:  # e.g. every bout of the motif starts or ends a recording
            notes.append(
                {
                    "text": f"no motif {label}",
                    "showarrow": False,
                    "x": sum(layout[f"xaxis{suffix}"]["domain"]) / 2,
                    "y": 0.5,
                    "xref": "paper",
                    "yref": "paper",
                    "font": {"size": 11, "color": "#888888"},
                }
            )
    return _figure(
        data,
        f"Neighbours of {motif}",
        520,
        250,
        margin={"l": 90, "r": 20, "t": 50, "b": 50},
        annotations=notes,
        **layout,
    )


def duration_histogram(
    durations: np.ndarray, motif: str, colour: str = "#0072B2", n_bins: int = 25
) -> go.Figure:
    """Bout durations of one motif on log-spaced bins (counts per bin).

    Examples
    --------
    >>> fig = duration_histogram(np.array([0.5, 1.0, 2.0]), "m")
    >>> fig.layout.xaxis.type
    'log'
    """
    d = np.asarray(durations, dtype=np.float64)
    d = d[np.isfinite(d) & (d > 0)]
    data: list = []
    median = float(np.median(d)) if len(d) else 0.0
    if len(d):
        lo, hi = np.log10(d.min()), np.log10(d.max())
        edges = np.logspace(lo - 0.01, max(hi, lo + 0.1) + 0.01, n_bins + 1)
        counts, edges = np.histogram(d, bins=edges)
        data.append(
            go.Bar(
                x=np.sqrt(edges[:-1] * edges[1:]),
                y=counts,
                width=np.diff(edges),
                marker={"color": colour},
                hovertemplate="%{x:.2f} s: %{y} bouts<extra></extra>",
            )
        )
    title = f"Bout durations ({len(d)} bouts, median {median:.2f} s)"
    return _figure(
        data,
        title,
        420,
        250,
        bargap=0,
        xaxis={
            "type": "log",
            "title": "duration (s)",
            "tickvals": list(LOG_TICKS),
            "ticktext": [f"{t:g}" for t in LOG_TICKS],
            **GRID,
        },
        yaxis={"title": "bouts", **GRID},
    )


def session_share_figure(shares: pd.DataFrame, motif: str, colour: str = "#0072B2") -> go.Figure:
    """Share of valid time in ``motif``, one point per session, by group when there is one.

    ``shares`` has ``session``, ``fraction`` and optionally ``group``.

    Examples
    --------
    >>> t = pd.DataFrame({"session": ["a", "b"], "fraction": [0.1, 0.2], "group": ["x", "y"]})
    >>> len(session_share_figure(t, "m").data)
    2
    """
    table = shares if "group" in shares.columns else shares.assign(group="all sessions")
    data: list = []
    for group, rows in table.groupby("group", sort=True):
        data.append(
            go.Box(
                y=rows["fraction"].to_numpy(),
                name=str(group),
                boxpoints="all",
                jitter=0.5,
                pointpos=0,
                text=rows["session"].astype(str).tolist(),
                marker={"color": colour, "size": 7},
                line={"width": 1, "color": "#777777"},
                fillcolor="rgba(0,0,0,0)",
                hovertemplate="%{text}: %{y:.1%}<extra></extra>",
            )
        )
    return _figure(
        data,
        f"Time in {motif}, per session",
        420,
        250,
        yaxis={"tickformat": ".0%", "rangemode": "tozero", **GRID},
    )


TREE_NOTE = "motifs joined lower are closer: they alternate within bouts and look alike"


def _majority(values: list[int]) -> int:
    """The most common value (the smallest on a tie)."""
    counts = np.bincount(np.asarray(values, dtype=np.int64))
    return int(np.argmax(counts))


def tree_joins(
    levels: list[dict], names: dict[int, str]
) -> tuple[list[str], list[tuple[list[int], int]]]:
    """Leaf order and joins of the motifs in a model's state tree.

    Parameters
    ----------
    levels : list of dict
        ``state_tree["levels"]`` of a fitted model: ``{"n_sets", "assignment"}`` per level,
        ``assignment`` giving the set of every state id.
    names : dict
        ``state id -> motif name`` (current curated names). States sharing a name are one
        leaf; a leaf's set at a level is the set most of its states are in.

    Returns
    -------
    leaves : motif names in drawing order (each join's members side by side)
    joins : ``(clusters, n_sets)`` in the order they happen, ``clusters`` the cluster ids
        joined (leaves are ``0 .. len(leaves) - 1`` in first-seen order, join ``j`` makes
        cluster ``len(leaves) + j``) and ``n_sets`` the number of sets of the level where
        they join. The levels need not nest: clusters join when most of their states share a
        set, and stay joined.
    """
    motifs: dict[str, list[int]] = {}
    for state, name in sorted(names.items()):
        motifs.setdefault(name, []).append(int(state))
    order = list(motifs)
    members = {i: [i] for i in range(len(order))}  # cluster id -> leaf indices
    current = list(members)
    joins: list[tuple[list[int], int]] = []
    n_states = min((len(lv["assignment"]) for lv in levels), default=0)
    for level in sorted(levels, key=lambda lv: -int(lv["n_sets"])):
        sets = level["assignment"]

        def set_of(leaf: int, sets=sets) -> int:
            return _majority([sets[s] for s in motifs[order[leaf]] if s < n_states] or [0])

        by_set: dict[int, list[int]] = {}
        for cluster in current:
            by_set.setdefault(_majority([set_of(i) for i in members[cluster]]), []).append(cluster)
        for group in by_set.values():
            if len(group) < 2:
                continue
            group.sort(key=lambda c: min(members[c]))
            new = len(members)
            members[new] = [i for c in group for i in members[c]]
            joins.append((group, int(level["n_sets"])))
            current = [c for c in current if c not in group] + [new]
    if len(current) > 1:  # a tree without its one-set level: join the rest on top
        top = min((int(lv["n_sets"]) for lv in levels), default=2) - 1
        current.sort(key=lambda c: min(members[c]))
        members[len(members)] = [i for c in current for i in members[c]]
        joins.append((current, top))
    root = max(members)
    leaves = [order[i] for i in members[root]]
    return leaves, joins


TREE_NAME_CHARS = 24  # longer curated names are cut (a join's hover lists them whole)


def state_tree_figure(levels: list[dict], names: dict[int, str], width: int = 355) -> go.Figure:
    """The motifs as leaves of the model's state tree, joined level by level (a dendrogram).

    Leaves sit at height 0 in the order of :func:`tree_joins`; a join is a horizontal line at
    the height ``n_states - n_sets`` of its level, over the clusters it joins (so motifs
    joined lower are closer). See :func:`tree_joins` for ``levels`` and ``names``.
    """
    leaves, joins = tree_joins(levels, names)
    n_leaves = len(leaves)
    first = [name for _, name in sorted(names.items())]
    seen = list(dict.fromkeys(first))
    x = {seen.index(name): float(pos) for pos, name in enumerate(leaves)}
    y = dict.fromkeys(range(n_leaves), 0.0)
    top_sets = max((int(lv["n_sets"]) for lv in levels), default=n_leaves)
    xs: list[float | None] = []
    ys: list[float | None] = []
    members = {i: [leaves[int(x[i])]] for i in range(n_leaves)}  # cluster -> motif names
    hover: list[str] = []
    for j, (group, n_sets) in enumerate(joins):
        h = float(top_sets - n_sets)
        members[n_leaves + j] = [m for c in group for m in members[c]]
        hover.append(f"{', '.join(members[n_leaves + j])}<br>one group at {n_sets} groups")
        for c in group:
            xs += [x[c], x[c], None]
            ys += [y[c], h, None]
        xs += [min(x[c] for c in group), max(x[c] for c in group), None]
        ys += [h, h, None]
        x[n_leaves + j] = float(np.mean([x[c] for c in group]))
        y[n_leaves + j] = h
    heights = sorted({float(top_sets - n) for _, n in joins})
    # Leaf names side by side when they fit, else upright below the leaves (plotly would
    # tilt them and drop those that still overlap), the figure taller by the longest name.
    shown = [short_name(name, TREE_NAME_CHARS) for name in leaves]
    longest = max((len(n) for n in shown), default=0) * CHAR_PX[12]
    upright = longest > (width - 60) / max(n_leaves, 1) - 4
    below = int(longest) + 10 if upright else 10
    fig = go.Figure(
        go.Scatter(
            x=xs, y=ys, mode="lines", line={"color": "#555555", "width": 2}, hoverinfo="skip"
        )
    )
    # a dot on every join tells, on hover, which motifs it joins and at which level
    fig.add_trace(
        go.Scatter(
            x=[x[n_leaves + j] for j in range(len(joins))],
            y=[y[n_leaves + j] for j in range(len(joins))],
            mode="markers",
            marker={"color": "#555555", "size": 7},
            text=hover,
            hovertemplate="%{text}<extra></extra>",
        )
    )
    fig.update_layout(
        width=width,
        height=230 + (below - 10),
        template="plotly_white",
        margin={"l": 50, "r": 10, "t": 10, "b": below},
        showlegend=False,
        xaxis={
            "tickmode": "array",
            "tickvals": list(range(n_leaves)),
            "ticktext": shown,
            "tickangle": -90 if upright else 0,
            "range": [-0.5, n_leaves - 0.5],
            "showgrid": False,
            "zeroline": False,
            "fixedrange": True,
        },
        yaxis={
            "title": "groups left",
            "tickmode": "array",
            "tickvals": heights,
            "ticktext": [str(top_sets - int(h)) for h in heights],
            "zeroline": False,
            "fixedrange": True,
        },
    )
    return fig
