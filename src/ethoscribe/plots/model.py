"""Figures about the segmentation model: the state-count curve and state stability.

Builders take the result objects of ``segment.select`` and ``segment.stability`` (anything with
the same ``table``/``best``/``summary`` fields) and only draw them.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import plotly.graph_objects as go

from ethoscribe.segment.stability import HIGH_AGREEMENT, LOW_AGREEMENT


def state_count_figure(selection: Any) -> go.Figure:
    """Held-out log-likelihood per frame (or BIC, or the eigenvalue gap of grouped states)
    against the number of states, chosen K marked.

    Parameters
    ----------
    selection : StateCountSelection
        ``table`` with ``n_states`` and ``heldout_ll_per_frame``/``bic`` columns (criterion
        "heldout"/"bic") or ``eigen_gap``/``eigenvalue`` (criterion "eigen_gap"), ``best``,
        ``criterion``.

    Examples
    --------
    >>> import pandas as pd
    >>> from types import SimpleNamespace
    >>> t = pd.DataFrame({"n_states": [2, 3], "bic": [10.0, 8.0]})
    >>> fig = state_count_figure(SimpleNamespace(table=t, best=3, criterion="bic"))
    >>> fig.layout.xaxis.title.text
    'number of states'
    """
    table = selection.table
    k = table["n_states"].to_numpy()
    best = int(selection.best)
    fig = go.Figure()
    if selection.criterion == "heldout":
        y = table["heldout_ll_per_frame"].to_numpy(dtype=float)
        se = table["heldout_gap_se"].to_numpy(dtype=float) if "heldout_gap_se" in table else None
        fig.add_trace(
            go.Scatter(
                x=k, y=y, mode="lines+markers", name="held-out",
                error_y=None if se is None else {"type": "data", "array": se, "visible": True},
            )
        )  # fmt: skip
        if "train_ll_per_frame" in table:
            fig.add_trace(
                go.Scatter(
                    x=k, y=table["train_ll_per_frame"], mode="lines+markers", name="training",
                    line={"dash": "dash"}, opacity=0.6,
                )
            )  # fmt: skip
        y_title = "log-likelihood per frame"
    elif selection.criterion == "eigen_gap":
        y = table["eigen_gap"].to_numpy(dtype=float)
        fig.add_trace(go.Scatter(x=k, y=y, mode="lines+markers", name="eigenvalue gap"))
        fig.add_trace(
            go.Scatter(
                x=k, y=table["eigenvalue"], mode="lines+markers", name="eigenvalue",
                line={"dash": "dash"}, opacity=0.6,
            )
        )  # fmt: skip
        y_title = "gap below the n-th eigenvalue (higher: better separated sets)"
    else:
        y = table["bic"].to_numpy(dtype=float)
        fig.add_trace(go.Scatter(x=k, y=y, mode="lines+markers", name="BIC"))
        y_title = "BIC (lower is better)"
    chosen = y[np.flatnonzero(k == best)[0]] if (k == best).any() else None
    if chosen is not None:
        fig.add_trace(
            go.Scatter(
                x=[best], y=[chosen], mode="markers", name=f"chosen: {best} states",
                marker={"symbol": "star", "size": 16, "line": {"width": 1}},
            )
        )  # fmt: skip
    fig.add_vline(x=best, line_dash="dot", opacity=0.5)
    fig.update_layout(
        title=f"Number of states ({_criterion_words(selection)}): {best} chosen",
        xaxis_title="number of states",
        yaxis_title=y_title,
        template="plotly_white",
        xaxis={"dtick": 1},
    )
    return fig


def _criterion_words(selection: Any) -> str:
    """The count's criterion in words for a title (the option names are not English)."""
    if selection.criterion == "heldout":
        unit = getattr(selection, "heldout", "")
        return "held-out likelihood" + (f", held-out {unit}" if unit else "")
    return {"eigen_gap": "eigenvalue gap", "bic": "BIC"}.get(
        selection.criterion, selection.criterion
    )


def state_labels(states: Any, names: dict[int, str] | None = None) -> list[str]:
    """One label per fitted state: its motif name, with the state number where merged motifs
    share a name (stability is measured per fitted state, so each keeps its own bar and row).

    Examples
    --------
    >>> state_labels([0, 1, 2], {0: "rest", 1: "scan", 2: "scan"})
    ['rest', 'scan (state 1)', 'scan (state 2)']
    >>> state_labels([0, 1])
    ['motif_01', 'motif_02']
    """
    states = [int(s) for s in states]
    named = [(names or {}).get(s, f"motif_{s + 1:02d}") for s in states]
    return [
        f"{n} (state {s})" if named.count(n) > 1 else n for s, n in zip(states, named, strict=True)
    ]


def stability_figure(report: Any, names: dict[int, str] | None = None) -> go.Figure:
    """Per-state Jaccard agreement between seeds and between split halves, threshold marked.

    Parameters
    ----------
    report : StabilityReport
        ``table`` with ``state, jaccard_seeds_mean, jaccard_seeds_min, jaccard_halves`` and
        ``summary`` with ``ari_seeds_mean, ari_halves, reproducible_jaccard``.
    names : dict, optional
        State -> motif name, so the bars carry the names used in every other table (default
        ``motif_01`` for state 0, as the workspace names them before curation).

    Examples
    --------
    >>> import pandas as pd
    >>> from types import SimpleNamespace
    >>> t = pd.DataFrame({"state": [0, 1], "jaccard_seeds_mean": [.9, .3],
    ...                   "jaccard_seeds_min": [.8, .2], "jaccard_halves": [.9, .4]})
    >>> s = {"ari_seeds_mean": .7, "ari_halves": .6, "reproducible_jaccard": .5}
    >>> len(stability_figure(SimpleNamespace(table=t, summary=s)).data)
    2
    """
    table, summary = report.table, report.summary
    names = state_labels(table["state"], names)
    mean = table["jaccard_seeds_mean"].to_numpy(dtype=float)
    low = mean - table["jaccard_seeds_min"].to_numpy(dtype=float)
    fig = go.Figure()
    fig.add_trace(
        go.Bar(
            x=names, y=mean, name="between seeds (mean, bar to min)",
            error_y={"type": "data", "symmetric": False, "array": 0 * low, "arrayminus": low},
        )
    )  # fmt: skip
    fig.add_trace(go.Bar(x=names, y=table["jaccard_halves"], name="between split halves"))
    for level, text in ((HIGH_AGREEMENT, "high"), (LOW_AGREEMENT, "low below")):
        # the labels right of the plot (its margin), never over a bar
        fig.add_hline(
            y=level, line_dash="dot", line_color="#666",
            annotation_text=f"{text} {level}", annotation_position="right",
        )  # fmt: skip
    fig.update_layout(
        barmode="group",
        title=(
            f"State stability: ARI between seeds {summary.get('ari_seeds_mean', np.nan):.2f}, "
            f"between halves {summary.get('ari_halves', np.nan):.2f}"
        ),
        yaxis={"title": "Jaccard of matched states", "range": [0, 1.05]},
        template="plotly_white",
        legend={"orientation": "h", "x": 0, "y": 1.0, "yanchor": "bottom"},
        margin={"t": 100, "r": 110},
    )
    return fig
