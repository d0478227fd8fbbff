"""The parts of a workspace's HTML reports: data quality, the model's choices, the ethogram, and
the group differences.

Figures come from :mod:`ethoscribe.plots`; this module picks what goes on the page and keeps the
figures' data small whatever the study's size (the raster is resampled above RASTER_BARS bars,
bout-duration boxes carry their five statistics, not the bouts), so that a report stays under
2 MB. The tables written beside the report always keep every row.
"""

from __future__ import annotations

from collections.abc import Mapping
from types import SimpleNamespace
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe.clean.steps import position_text
from ethoscribe.curation import UNASSIGNED
from ethoscribe.errors import counted, listed
from ethoscribe.ethogram import (
    duration_summary,
    pool_time_budgets,
    transition_matrix,
    transition_table,
)
from ethoscribe.multiplicity import family_summary, headline
from ethoscribe.plots.ethogram import (
    duration_figure,
    ethogram_raster,
    several_animals,
    time_budget_figure,
    transition_diagram,
    transition_heatmap,
)
from ethoscribe.plots.model import stability_figure, state_count_figure, state_labels
from ethoscribe.plots.motifs import posture_grid_figure
from ethoscribe.plots.quality import BARS, quality_figure
from ethoscribe.plots.stats import group_difference_figure, planned_values_figure
from ethoscribe.report import Section
from ethoscribe.segment.model import poor_fit_test
from ethoscribe.segment.stability import (
    HIGH_AGREEMENT,
    LOW_AGREEMENT,
    reproducibility_grades,
)
from ethoscribe.stats import unit_values
from ethoscribe.transitions import transitions_above_chance
from ethoscribe.workspace.folder import Workspace, frames_said
from ethoscribe.workspace.postures import PostureLibrary

RASTER_BARS = 6000  # bars drawn in the ethogram raster before rows are resampled
TOP_ROWS = 25  # rows of the statistics table shown in the report
FOREST_ROWS = 30  # exploratory tests drawn in the forest plot
CHOICE_COLUMNS = (
    "n_states", "heldout_ll_per_frame", "train_ll_per_frame", "bic", "fitted", "split_half_ari",
    "eigenvalue", "eigen_gap", "timescale_s",
)  # fmt: skip


def quality_section(ws: Workspace, labels: pd.DataFrame | None = None) -> Section | None:
    """Cleaning quality per keypoint and session, from ``quality.csv`` (None if there is none).

    The share of invalid frames per session is taken from ``labels`` (frames without a motif)
    when ``quality.csv`` does not carry it (files of older versions).
    """
    path = ws.path / "quality.csv"
    if not path.is_file():
        return None
    table = pd.read_csv(path, dtype={"session": str, "animal": str, "keypoint": str})
    if any(c not in table.columns for c in ("session", "animal", "keypoint", *BARS)):
        text = f"{path.name} has columns {list(table.columns)}; too old to draw, see the file."
        return Section("Data quality", text)
    text = (
        "Fractions of frames missing, masked and filled by cleaning (see quality.csv). A frame "
        "with some keypoint still missing after cleaning is scored when enough of the body was "
        "seen (its lost keypoints are filled from the posture model); only the frames left "
        "unscored have no motif."
    )
    never = table[table["frac_missing_raw"] >= 1.0]
    if len(never):
        pairs = never.groupby("keypoint", sort=False)["session"].unique()
        said = [f"'{k}' in {listed(repr(s) for s in v)}" for k, v in pairs.items()]
        text += (
            f" Keypoints absent from every frame of a session (not in its files, or never "
            f"tracked): {listed(said, sep='; ')}. Their positions there are the posture "
            "model's guesses, so motifs say nothing about them in those sessions."
        )
    text += _scale_said(ws, table)
    text += _counts_said(
        ws, table, "repeated_frames",
        "Frames that repeated the frame before exactly, filled from their neighbours (a video "
        "whose frame rate was raised by repeating images; counted in 'filled')",
    )  # fmt: skip
    used = ((ws.summary.get("cleaning") or {}).get("used") or {}).get("placeholders") or []
    lists = used.values() if isinstance(used, dict) else [used]  # per session, or one
    places = sorted({tuple(q) for found in lists for q in found or ()})
    text += _counts_said(
        ws, table, "placeholder_points",
        f"Points at {listed(position_text(q) for q in places)}, a placeholder position (one "
        "held exactly on many frames, away from the rest of the body: a tracker writing lost "
        "points there), counted as missing in the raw data",
    )  # fmt: skip
    text += _counts_said(
        ws, table, "held_points",
        "Points held exactly where they were on the frame before (a tracker keeping a lost "
        "point where it last saw it, or a track forward-filled over its gaps), counted as "
        "missing in the raw data",
    )  # fmt: skip
    text += _counts_said(
        ws, table, "interpolated_points",
        "Points on straight lines at an even pace, or on cubic curves, between seen points (a "
        "track interpolated over its gaps before export), counted as missing in the raw data",
    )  # fmt: skip
    text += _counts_said(
        ws, table, "identity_exchanges",
        "Times tracks took over another animal (leapt to where its track had just been, or "
        "came back from a loss with its proportions) and were given that animal from then on "
        "(a tracker exchanging identities)",
    )  # fmt: skip
    text += _counts_said(
        ws, table, "part_exchanges",
        "Stretches where some keypoints of one animal sat on another's body (kept their usual "
        "distances to its other keypoints, not to their own animal's) and were given back",
    )  # fmt: skip
    features = ws.summary.get("features") or {}
    left_out = [str(k) for k in features.get("keypoints_left_out") or []]
    read = features.get("keypoints")  # those the model reads (runs since 2026-12-05)
    unread = sorted(set(table["keypoint"]) - set(read)) if read else left_out
    if left_out:
        text += f" Left out of the model, never tracked: {', '.join(left_out)}."
    others = [k for k in unread if k not in left_out]
    if others:
        text += f" In the files but not read by the model: {', '.join(others)}."
    if unread:
        text += " Those are not in the per-session means below."
    if labels is None:
        labels = ws.state_labels()
    unlabelled = (labels["state"] < 0).groupby([labels["session"], labels["animal"]]).mean()
    unlabelled = unlabelled.rename("frac_unscored_frames").reset_index()
    table = table.merge(unlabelled.astype({"session": str, "animal": str}), how="left")
    if "frac_invalid_frames" not in table.columns:  # files of older versions
        table["frac_invalid_frames"] = table["frac_unscored_frames"]
    shares = [*BARS, "frac_invalid_frames", "frac_unscored_frames"]
    per_session = table[~table["keypoint"].isin(unread)].groupby("session")[shares].mean()
    # Percent of frames, one decimal: what counts of missing frames support; headers in words
    headers = {
        "frac_missing_raw": "missing raw",
        "frac_low_confidence": "low confidence",
        "frac_jumps": "jumps",
        "frac_filled": "filled",
        "frac_missing_after": "missing after",
        "frac_invalid_frames": "any keypoint missing",
        "frac_unscored_frames": "unscored",
    }
    shown = (100 * per_session).round(1).rename(columns=headers)
    shown = shown.reset_index()
    caption = "Per session, % of frames (keypoint columns: mean over keypoints; see quality.csv)"
    return Section("Data quality", text, [quality_figure(table)], [(caption, shown)])


def _per_session(ws: Workspace, table: pd.DataFrame, key: str) -> dict[str, Any]:
    """The cleaning value ``key`` of every session (one value written for all, or one each)."""
    value = ((ws.summary.get("cleaning") or {}).get("used") or {}).get(key)
    if isinstance(value, dict):  # one value per session where they differ
        return {str(k): v for k, v in value.items()}
    return {str(s): value for s in table["session"].unique()}


def _scale_said(ws: Workspace, table: pd.DataFrame) -> str:
    """The sessions whose confidences were read on the tracker's own, lower scale, grouped by
    the threshold used."""
    settings = (ws.summary.get("cleaning") or {}).get("settings") or {}
    if settings.get("confidence_scale", "auto") != "auto":  # given, not read from the files
        return ""
    thresholds = _per_session(ws, table, "confidence_threshold")
    groups: dict[float, list[str]] = {}
    for session, scale in _per_session(ws, table, "confidence_scale").items():
        thr = thresholds.get(session)
        if scale is not None and scale < 1 and thr is not None:
            groups.setdefault(thr, []).append(f"'{session}'")
    if not groups:
        return ""
    said = "; ".join(f"below {thr:.2g} in {listed(names)}" for thr, names in groups.items())
    return (
        " Confidences that run low (fewer than a tenth of the points at 0.9 or above): the "
        "confidence threshold was taken as a share of the confidence of well-tracked points "
        f"(their 90th percentile), and points were masked {said}."
    )


def _counts_said(ws: Workspace, table: pd.DataFrame, key: str, what: str) -> str:
    """`` {what}: 's1' (12), 's2' (3).`` for a count the cleaning wrote under ``key`` per
    session (sessions with none left out; "" when no session has any)."""
    counts = {k: int(v) for k, v in _per_session(ws, table, key).items() if v}
    said = listed(f"'{k}' ({v:,})" for k, v in counts.items())
    return f" {what}: {said}." if counts else ""


def model_section(ws: Workspace) -> Section:
    """The number of states, how it was chosen, and how stable the states were across fits."""
    summary = ws.summary
    params = summary.get("parameters") or {}
    fitted = summary.get("n_training_frames")
    fitted = f"{fitted:,}" if isinstance(fitted, int) else "?"
    chosen = "chosen from the data" if params.get("n_states") == "auto" else "set by the user"
    source = summary.get("labelled_with")
    if source:  # a new cohort: the states and their choice come from the source's fit
        text = (
            f"Labelled with the saved model of {source} (not refitted on these sessions): "
            f"{summary.get('n_states')} states ({chosen} there), method "
            f"{params.get('method', '?')}, seed {summary.get('seed')}, fitted on "
            f"{fitted} frames; here {counted(summary.get('n_sessions') or 0, 'session')}, "
            f"{frames_said(summary)}."
        )
    else:
        animals = ws.sessions.get("n_animals", pd.Series([1]))
        each = " (the frames of every animal counted)" if animals.max() > 1 else ""
        text = (
            f"{summary.get('n_states')} states ({chosen}), method {params.get('method', '?')}, "
            f"seed {summary.get('seed')}; {counted(summary.get('n_sessions') or 0, 'session')}, "
            f"{frames_said(summary)}; {fitted} frames used to fit{each}."
        )
    offsets = summary.get("individual_offsets")
    if offsets:
        text += (
            " Each animal of each session has its own offset of the feature levels (where a "
            "marker sits, its proportions), estimated with the states and taken off before "
            "labelling, so states describe behaviour rather than individuals; the offsets "
            f"spread about {offsets['relative_spread']:.2g} of a state's own spread."
        )
    features = summary.get("features") or {}
    left_out = features.get("keypoints_left_out")
    if left_out:
        text += (
            f" Left out of the model, never tracked in its training sessions: "
            f"{', '.join(map(str, left_out))}."
        )
    if features.get("view_report"):
        text += f" Camera: {features['view_report']}."
    if features.get("social_report"):
        text += f" Features of the nearest other animal: {features['social_report']}."
    vertical = features.get("up_axis_report")
    if vertical:
        text += f" Vertical axis of the 3-D tracks: {vertical}."
    figures, tables = [], []
    fit = _fit_to_model_table(summary.get("fit_to_model"))
    if fit is not None:
        text += (
            " How well the model explains each session: the share of its frames less likely "
            "than the worst 1 % of the training frames (about 1 % for animals like the "
            f"training ones; above {fit.attrs['warn_above']:.0%} they differ), and how far its "
            "feature levels lie from the training animals' (a session can be flagged for "
            "either; the table says which)."
        )
        tables.append(("Sessions explained by the model (% of frames poorly explained)", fit))
    choice = summary.get("state_count_choice")
    if choice:
        table = pd.DataFrame(choice["table"])
        pick = SimpleNamespace(table=table, best=choice["best"], criterion=choice["criterion"])
        figures.append(state_count_figure(pick))
        if choice.get("reason"):
            text += f" Why: {choice['reason']}."
        shown = [c for c in CHOICE_COLUMNS if c in table.columns]
        tables.append(("Candidate numbers of states", table[shown or list(table.columns)]))
    stability = summary.get("stability")
    path = ws.path / "stability.csv"
    if stability and path.is_file():
        names = _state_names(ws)
        per_state = reproducibility_grades(pd.read_csv(path))
        figures.append(stability_figure(SimpleNamespace(table=per_state, summary=stability), names))
        per_state.insert(0, "motif", state_labels(per_state["state"], names))
        shares = ws.labelled_shares()
        per_state.insert(2, "labelled_share", per_state["state"].map(shares).round(4))
        low = per_state.loc[per_state["grade"] == "low", "motif"].tolist()
        empty = per_state.loc[per_state["labelled_share"] == 0, "motif"].tolist()
        text += (
            f" Reproducibility per motif is graded on the weaker of two Jaccard agreements, "
            f"with a full refit under another seed and between full fits of two halves of the "
            f"sessions: high from {HIGH_AGREEMENT}, moderate from {LOW_AGREEMENT}, low below. "
            + (f"Low, look at these before naming them: {', '.join(low)}. " if low else "")
            + "Occupancy is the share of training frames the model's own decoding gives the "
            "motif; the labelled share is what the labels give it, after bouts shorter than the "
            "minimum bout are merged into their neighbours."
            + (
                f" No frame is labelled {', '.join(empty)}: every bout of it is shorter than "
                "the minimum bout."
                if empty
                else ""
            )
        )
        keep = ["motif", "occupancy", "labelled_share", "jaccard_seeds_mean", "jaccard_halves"]
        keep += ["grade", "flag"]
        tables.append(("Reproducibility per motif", per_state[[c for c in keep if c in per_state]]))
    elif stability and stability.get("skipped"):
        text += f" No stability check was made: {stability['skipped']}."
    elif stability:
        tables.append(("Stability across seeds and split halves", pd.DataFrame([stability])))
    elif source:
        text += f" Stability is checked where a model is fitted: see the report of {source}."
    else:
        text += " No stability check was run."
    return Section("The model's choices", text, figures, tables)


def postures_section(ws: Workspace, bouts: pd.DataFrame) -> Section:
    """Every motif's mean posture on one page (from the postures cached for the workbench),
    so motifs can be looked at, and named, without the workbench."""
    title = "Motif postures"
    library = PostureLibrary(ws)
    if bouts.empty:
        return Section(title, "No bout was labelled: no posture to draw.")
    start = bouts["start_frame"].to_numpy(np.int64)
    span = bouts["stop_frame"].to_numpy(np.int64) - start
    rows = np.repeat(np.arange(len(bouts)), span)
    frames = pd.DataFrame(
        {
            "session": bouts["session"].to_numpy()[rows],
            "animal": bouts["animal"].to_numpy()[rows],
            "frame": start[rows] + np.arange(len(rows)) - np.repeat(np.cumsum(span) - span, span),
            "state": bouts["state"].to_numpy(np.int64)[rows],
        }
    )
    library.set_states(frames, int(frames["state"].max()) + 1)
    if not library.available:
        return Section(title, f"No posture could be drawn: {library.problem}.")
    motifs = bouts.groupby("motif", sort=True)["state"].unique()
    motifs = motifs[[m not in ("", UNASSIGNED) for m in motifs.index]]
    postures = {m: library.mean_posture(sorted(states)) for m, states in motifs.items()}
    figure = posture_grid_figure(
        postures, library.keypoints, library.edges, library.units, library.second_axis
    )
    text = (
        "Each motif's mean posture in the body frame (every frame of its bouts, the animal "
        "turned to face right): what a motif looks like, to check a name against. A mean "
        "hides movement within a bout (a rhythm's phases average out): the workbench plays "
        "example bouts."
    )
    if library.edges_note:
        text += f" {library.edges_note[:1].upper()}{library.edges_note[1:]}."
    if library.problem:
        text += f" {library.problem}."
    return Section(title, text, [figure])


def _fit_to_model_table(fit: Any) -> pd.DataFrame | None:
    """``session, % poorly explained, flagged, why`` from summary.json's ``fit_to_model``
    (``why``: which of the two tests flagged it, the share or the offset)."""
    if not isinstance(fit, dict) or not fit.get("checked") or not fit.get("sessions"):
        return None
    rows = pd.DataFrame(fit["sessions"])
    flagged = {str(s) for s in fit.get("flagged") or []}
    table = pd.DataFrame(
        {
            "session": rows["session"].astype(str),
            "% poorly explained": (100 * rows["share"].astype(float)).round(1),
            "flagged": rows["session"].astype(str).isin(flagged),
        }
    )
    warn_above = float(fit.get("warn_above", 0.1))
    why = []
    for r, is_flagged in zip(fit["sessions"], table["flagged"], strict=True):
        test = poor_fit_test(r, warn_above) if is_flagged else None
        if test == "share":
            why.append(f"more than {warn_above:.0%} of frames poorly explained")
        elif test == "offset":
            d2, limit = r["offset_distance"], r["offset_limit"]
            why.append(f"feature levels offset from the training animals' ({d2:.0f} > {limit:.0f})")
        else:
            why.append("")
    table["why"] = why
    table.attrs["warn_above"] = warn_above
    return table


def _state_names(ws: Workspace) -> dict[int, str]:
    """State -> current motif name (curated when the journal renamed it); a fitted state
    split in two is named by its halves."""
    cur = ws.curation()
    names = {int(k): str(v) for k, v in cur.names.items()}
    for state, halves in cur.split_into.items():
        names.setdefault(state, f"split into {' and '.join(halves)}")
    return names


def ethogram_sections(
    bouts: pd.DataFrame,
    budgets: pd.DataFrame,
    groups: Mapping[str, str] | pd.DataFrame | None = None,
    seed: int = 0,  # kept for callers; nothing on these pages is random any more
    min_bout_s: float | None = None,
) -> list[Section]:
    """Raster, time budgets, bout durations and transitions (current motif names).

    ``budgets`` is ``time_budget`` per session and animal; ``groups`` maps session -> group
    (or is a table ``session, animal, group``: animals of a session in different groups).
    """
    n_rows = len(bouts[["session", "animal"]].drop_duplicates())
    n_bins = int(np.clip(RASTER_BARS // max(n_rows, 1), 100, 2000))
    raster = ethogram_raster(bouts, max_bars=RASTER_BARS, n_bins=n_bins)
    sections = [
        Section(
            "Ethogram",
            "One row per session and animal; gaps are frames without a label. Long studies are "
            "drawn from evenly spaced samples (the title says so); bouts.csv has every bout.",
            [raster],
        )
    ]
    grouped = groups is not None and len(groups) > 0
    by = ("group",) if grouped else ()
    pooled = pool_time_budgets(budgets, by=by, groups=groups)
    sections.append(
        Section(
            "Time budgets",
            "Share of each session's valid time spent in each motif; one point per "
            + ("session and animal." if several_animals(budgets) else "session."),
            [time_budget_figure(budgets, groups)],
            [("Pooled over sessions" + (" by group" if grouped else ""), pooled)],
        )
    )
    cut = [c for c in ("cut_before", "cut_after") if c in bouts.columns]
    uncut = bouts[~bouts[cut].any(axis=1)] if cut else bouts
    sections.append(
        Section(
            "Bout durations",
            "The figure shows the bouts not cut by a gap or a recording edge (a cut bout's "
            "true length is unknown, and it can be shorter than the minimum bout). The table "
            "counts every bout, cut ones included, as the group comparison's mean and median "
            "bout durations do.",
            [duration_figure(uncut, min_bout_s=min_bout_s)],
            [("Bout durations", duration_summary(bouts, by=by, groups=groups))],
        )
    )
    sections.append(_transition_section(bouts, budgets))
    return sections


def _transition_section(bouts: pd.DataFrame, budgets: pd.DataFrame) -> Section:
    title = "Transitions"
    matrix = transition_matrix(bouts)
    if not np.isfinite(matrix.to_numpy(np.float64)).any():
        return Section(title, "No bout is directly followed by another motif's bout.")
    text = (
        "Probability that a bout of one motif is directly followed by a bout of another, pooled "
        "over sessions (bouts separated by invalid frames are not linked). The diagram keeps "
        "the transitions that happen more often than if the next motif did not depend on the "
        "current one (tested per transition; the table lists every test)."
    )
    tests = transitions_above_chance(transition_table(bouts, by=()))
    figures = [
        transition_heatmap(matrix),
        transition_diagram(tests, pool_time_budgets(budgets)),
    ]
    shown = tests.sort_values(["above_chance", "q_value"], ascending=[False, True], kind="stable")
    shown = shown.assign(
        probability=shown["probability"].round(3),
        expected_probability=shown["expected_probability"].round(3),
        ratio=shown["ratio"].round(2),
    )
    tables = [
        ("Transition probabilities (row: from, column: to)", matrix.round(3).reset_index()),
        ("Transitions against chance", shown),
    ]
    return Section(title, text, figures, tables)


def group_section(
    stats: pd.DataFrame, alpha: float, metrics: pd.DataFrame | None = None
) -> Section:
    """Group differences: planned tests first, how tests were corrected, then the exploratory
    families (forest plot of the smallest adjusted p-values and a table)."""
    planned = stats[stats["analysis"] == "planned"]
    paired = bool(stats.attrs.get("paired"))
    text = (
        "Planned comparisons are the confirmatory tests a study names before it looks at the "
        "data (--primary); they are corrected together with Holm's method (Holm 1979). Every "
        "other test is exploratory, as is common practice in confirmatory research: corrected "
        "with Benjamini-Hochberg (1995) within its family of measurements (time budget, bout "
        "rate, bout duration, transitions), it is a reason to look at the bouts, not a finding. "
        "Tests whose values do not vary are listed as not testable and are not counted. "
    )
    if paired:
        text += (
            "Paired design: each subject is compared with itself across conditions (paired "
            "permutation tests of the within-subject differences, or Wilcoxon signed-rank); n "
            "counts subjects measured in both conditions. Effects are condition a minus "
            "condition b: Hedges' g of the differences (their mean over their standard "
            "deviation, small-sample corrected; not comparable with an unpaired g) with its 95% "
            "interval from the noncentral t distribution."
        )
    else:
        text += (
            "Effects are group a minus group b: Hedges' g with its 95% interval from the "
            "noncentral t distribution (exact for normal values; with a few sessions per group "
            "it is wide, as it should be). Each subject (the session where none is given) is "
            "one value: the animals of one session are averaged, as they are not independent."
        )
    said = headline(stats, alpha)
    if paired:
        said += " Tests paired by subject (within-subject differences; see the note below)."
    warnings = stats.attrs.get("warnings") or []
    if warnings:  # read before the figures, not under the method's note
        said += " Design notes: " + " ".join(w.rstrip(".") + "." for w in warnings)
    tables = [("How the tests were corrected", family_summary(stats, alpha))]
    figures = []
    if len(planned):
        table, shared = shown_tests(planned, paired)
        tables.insert(0, (f"Planned comparisons (confirmatory){shared}", table))
        if metrics is not None:
            values, unit = unit_values(metrics)
            figures.append(planned_values_figure(values, planned, unit=unit, paired=paired))
    explore = stats[(stats["analysis"] != "planned") & stats["testable"]]
    if len(explore):
        figure = group_difference_figure(explore, max_rows=FOREST_ROWS)
        figure.layout.title.text = "Exploratory: " + figure.layout.title.text
        figures.append(figure)
        top = explore.sort_values(["q_value", "p_value"], kind="stable").head(TOP_ROWS)
        table, shared = shown_tests(top, paired)
        caption = f"Exploratory tests with the smallest q (group_stats.csv has all {len(stats)})"
        tables.append((caption + shared, table))
    return Section("Group differences", said, figures, tables, note=text)


def _g(v: float) -> str:
    return "" if not np.isfinite(v) else f"{v:.3g}"


def shown_tests(rows: pd.DataFrame, paired: bool = False) -> tuple[pd.DataFrame, str]:
    """Test rows as a compact table for the page (group_stats.csv keeps every column), and a
    caption suffix naming what every row shares.

    The family is left out (the metric names it), and the groups and their sizes, when every
    row compares the same two (the usual design), are said once in the caption: as columns
    they repeat on every row and push the adjusted p off a laptop-width page.
    """
    table = pd.DataFrame(
        {
            "metric": rows["metric"],
            "motif": rows["motif"].astype(str),
            "a vs b": rows["group_a"] + " vs " + rows["group_b"],
            "n": rows["n_a"].astype(int).astype(str) + " pairs"
            if paired
            else rows["n_a"].astype(int).astype(str) + " / " + rows["n_b"].astype(int).astype(str),
            "mean a": rows["mean_a"].map(_g),
            "mean b": rows["mean_b"].map(_g),
            "Hedges' g [95% CI]": [
                f"{_g(g)} [{_g(lo)}, {_g(hi)}]" if np.isfinite(g) else ""
                for g, lo, hi in zip(
                    rows["effect_size"], rows["ci_low"], rows["ci_high"], strict=True
                )
            ],
            "p": rows["p_value"].map(_g),
            "adjusted p": rows["q_value"].map(_g),
        }
    )
    pairs = rows[["group_a", "group_b", "n_a", "n_b"]].drop_duplicates()
    if len(rows) < 2 or len(pairs) != 1:
        return table, ""
    a, b, n_a, n_b = pairs.iloc[0]
    n = f"{int(n_a)} pairs" if paired else f"{int(n_a)} / {int(n_b)}"
    shared = f"; every row: a = {a}, b = {b}, n = {n}"
    return table.drop(columns=["a vs b", "n"]), shared
