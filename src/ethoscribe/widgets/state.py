"""The plain state of an open workbench: what is selected, the current naming, cached views.

Panels read this object and call its methods; it never touches a widget. Everything slow is
prepared when the workbench opens (state runs, per-state posture sums) so that selecting, naming
and merging motifs only recombine small tables.

An edit is shown as done only once its journal line is on disk (see
:mod:`ethoscribe.widgets.editing`); the ethogram tables follow a moment later, rewritten by a
worker process, and :meth:`WorkbenchState.flush` waits for them (saving and comparing flush
first). An edit refused on disk (another program holds the workspace) changes nothing on screen.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe.curation import UNASSIGNED
from ethoscribe.errors import EthoscribeError, InputError
from ethoscribe.io import safe_child
from ethoscribe.postures import evenly_spaced_frames, example_bouts
from ethoscribe.widgets.editing import CurationEdits
from ethoscribe.workspace import Workspace, compare
from ethoscribe.workspace.browsing import (
    bouts_for_names,
    budget_from_bouts,
    motif_overview,
    neighbour_counts,
    state_runs,
)
from ethoscribe.workspace.edit_worker import TableWriter
from ethoscribe.workspace.export import save_ethogram
from ethoscribe.workspace.postures import PostureLibrary
from ethoscribe.workspace.reading import RECORDED_COLUMNS
from ethoscribe.workspace.video import VideoFrames, video_file

SORT_KEYS = {
    "time share": "time_share",
    "number of bouts": "n_bouts",
    "median bout duration": "median_s",
    "stability": "stability",
    "name": "motif",
}
# What a run records about each session, and the manifest's columns that are not groupings.
TECHNICAL_COLUMNS = {*RECORDED_COLUMNS, "path", "px_per_unit", "video"}


class WorkbenchState(CurationEdits):
    """Selections, naming and cached tables of one workspace (no widgets).

    Parameters
    ----------
    path : str or Path
        A workspace folder written by ``discover`` or ``label_sessions``.
    skeleton : sequence of (str, str), optional
        Keypoint pairs to draw as bones (default: see ``ethoscribe.workspace.postures``).
    write_behind : bool
        Rewrite the ethogram tables in a worker process (True) or before ``edit`` returns
        (False). Either way the edit itself is on disk before ``edit`` returns.

    Examples
    --------
    >>> state = WorkbenchState("study_ws")  # doctest: +SKIP
    >>> state.edit("rename", motif="motif_01", name="resting")  # doctest: +SKIP
    True
    >>> state.flush()  # doctest: +SKIP
    """

    def __init__(
        self,
        path: str | Path,
        skeleton: Sequence[tuple[str, str]] | None = None,
        write_behind: bool = True,
    ) -> None:
        self.ws = Workspace(path)
        self.sessions = self.ws.sessions.astype({"session": str})
        self.summary = self.ws.summary
        stability = self.ws.path / "stability.csv"
        self.stability = pd.read_csv(stability) if stability.is_file() else None
        self.curation = self.ws.curation()
        self._labels = self.ws.state_labels()
        self._writer = TableWriter(self.ws.path) if write_behind else None
        if self._writer is not None and not self.ws.exports_current():
            self._writer.request()  # an earlier session ended before its tables were rewritten
        self._listeners: dict[str, list[Callable[[], None]]] = defaultdict(list)
        self._leading: dict[str, int] = defaultdict(int)  # listeners registered first=True
        self._views: dict[Any, dict[Any, Any]] = {}
        self._state_key: frozenset[int] | None = None
        self.postures = PostureLibrary(self.ws, skeleton)
        self.sort_by, self.descending = "time share", True
        self.min_share, self.min_median_s, self.min_stability = 0.0, 0.0, 0.0
        self.message: tuple[str, str] = ("info", "")
        self._prepare_states()
        shown = self.motif_table()
        self.motif: str | None = str(shown["motif"].iloc[0]) if len(shown) else None
        self.session: str = str(self.sessions["session"].iloc[0])
        self.bout: dict[str, Any] | None = None
        self.comparison: dict[str, Any] | None = None
        self._videos: dict[str, VideoFrames | None] = {}
        self._single_animal = self._labels["animal"].nunique() == 1

    # --- listeners ------------------------------------------------------------------------
    def on(self, event: str, callback: Callable[[], None], first: bool = False) -> None:
        """Call ``callback()`` after ``event``: names, motif, filter, session, bout, message,
        comparison. ``first``: before the callbacks registered without it -- for what a
        person acts on (the curation panel), which must follow a new motif at once, not after
        seconds of figures being redrawn (edits otherwise hit the motif the panel no longer
        showed)."""
        if first:  # after the earlier 'first' ones, before every other
            self._listeners[event].insert(self._leading[event], callback)
            self._leading[event] += 1
        else:
            self._listeners[event].append(callback)

    def _emit(self, *events: str) -> None:
        callbacks: list[Callable[[], None]] = []
        for event in events:  # a panel bound to several of the events redraws once
            callbacks += [c for c in self._listeners[event] if c not in callbacks]
        for callback in callbacks:
            callback()

    def say(self, kind: str, text: str) -> None:
        """Show a message (``kind``: "ok", "info" or "error")."""
        self.message = (kind, text)
        self._emit("message")

    # --- states and views -----------------------------------------------------------------
    def _prepare_states(self) -> None:
        """Per-frame states under the splits in effect, their runs and posture sums."""
        key = frozenset(self.curation.names)
        if key == self._state_key:
            return
        labels = self._labels
        if max(key, default=-1) >= int(self.summary["n_states"]):
            labels = self.curation.apply(labels, self.ws.features())  # a split is in effect
        self._frame_states = labels[["session", "animal", "frame", "state"]]
        self._runs = state_runs(labels)
        self._recordings = labels[["session", "animal"]].drop_duplicates()
        self._state_frames = self._runs.groupby("state")["n_frames"].sum().to_dict()
        self.postures.set_states(self._frame_states, max(key, default=-1) + 1)
        self._state_key, self._views = key, {}

    def _view(self) -> dict[Any, Any]:
        """Bouts, budgets, neighbours and the overview under the current naming (cached)."""
        names = self.curation.names
        key = tuple(sorted(names.items()))
        if key in self._views:
            return self._views[key]
        old = next(iter(self._views.items()), None)
        renamed = _renaming(dict(old[0]), names) if old is not None else None
        if renamed is not None:  # same bouts, other labels: relabel instead of rebuilding
            view = old[1]
            relabel = {
                c: view[c].assign(**{m: view[c][m].map(renamed) for m in cols})
                for c, cols in (
                    ("bouts", ["motif"]),
                    ("budgets", ["motif"]),
                    ("neighbours", ["from_motif", "to_motif"]),
                )
            }
            bouts, budgets, pairs = relabel["bouts"], relabel["budgets"], relabel["neighbours"]
        else:
            bouts = bouts_for_names(self._runs, names)
            budgets = budget_from_bouts(bouts, recordings=self._recordings)
            pairs = neighbour_counts(bouts)
        overview = motif_overview(bouts, names, self.stability, self._state_frames)
        view = {"bouts": bouts, "budgets": budgets, "neighbours": pairs, "overview": overview}
        self._views = {key: view}
        return view

    @property
    def bouts(self) -> pd.DataFrame:
        """Bouts under the current naming (``BOUT_COLUMNS``)."""
        return self._view()["bouts"]

    @property
    def motifs(self) -> list[str]:
        """Current motif names (sorted; without "unassigned")."""
        return self.curation.motifs

    def motif_table(self) -> pd.DataFrame:
        """The motif overview, filtered and sorted as the controls say."""
        table = self._view()["overview"]
        keep = (table["time_share"] >= self.min_share) & (table["median_s"] >= self.min_median_s)
        if self.min_stability > 0:
            keep &= table["stability"] >= self.min_stability
        keep &= table["motif"] != UNASSIGNED
        column = SORT_KEYS[self.sort_by]
        ascending = True if column == "motif" else not self.descending  # names read A to Z
        rows = table[keep].sort_values([column, "motif"], ascending=[ascending, True])
        return rows.reset_index(drop=True)

    def set_order(
        self,
        sort_by: str | None = None,
        descending: bool | None = None,
        min_share: float | None = None,
        min_median_s: float | None = None,
        min_stability: float | None = None,
    ) -> None:
        """Change the sorting and filtering of the motif list."""
        if sort_by is not None and sort_by not in SORT_KEYS:
            raise InputError(f"sort_by must be one of {list(SORT_KEYS)}; got {sort_by!r}")
        for name, value in (
            ("sort_by", sort_by),
            ("descending", descending),
            ("min_share", min_share),
            ("min_median_s", min_median_s),
            ("min_stability", min_stability),
        ):
            if value is not None:
                setattr(self, name, value)
        self._emit("filter")

    def select_motif(self, motif: str) -> None:
        if motif not in self.motifs:
            self.say("error", f"unknown motif {motif!r}; current motifs: {self.motifs}")
            return
        if motif != self.motif:
            self.motif = motif
            self._emit("motif")

    def neighbours(self, motif: str) -> tuple[pd.Series, pd.Series]:
        """Shares of the motifs directly before and after ``motif``'s bouts."""
        pairs = self._view()["neighbours"]
        before = pairs[pairs["to_motif"] == motif].set_index("from_motif")["count"]
        after = pairs[pairs["from_motif"] == motif].set_index("to_motif")["count"]
        share = lambda s: s / s.sum() if s.sum() else s.astype(float)  # noqa: E731
        return share(before), share(after)

    def session_shares(self, motif: str) -> pd.DataFrame:
        """``session, fraction[, group]`` for ``motif`` (animals of a session averaged)."""
        budgets = self._view()["budgets"]
        rows = budgets[budgets["motif"] == motif].groupby("session", as_index=False)["fraction"]
        rows = rows.mean()
        if "group" in self.sessions.columns:
            groups = dict(zip(self.sessions["session"], self.sessions["group"], strict=True))
            rows["group"] = rows["session"].map(groups).fillna("").astype(str)
        return rows

    def session_bouts(self, session: str) -> pd.DataFrame:
        return self.bouts[self.bouts["session"].astype(str) == str(session)]

    def select_session(self, session: str) -> None:
        if session != self.session:
            self.session = str(session)
            self._emit("session")

    def select_bout(self, bout: dict[str, Any] | pd.Series) -> None:
        """Show ``bout`` (a row of :attr:`bouts`) in the close-up; its motif becomes current."""
        self.bout = dict(bout)
        motif, session = str(self.bout["motif"]), str(self.bout["session"])
        events = []
        if session != self.session:
            self.session, events = session, ["session"]
        if motif in self.motifs and motif != self.motif:
            self.motif = motif
            events.append("motif")
        self._emit(*events, "bout")

    def bout_at(self, session: str, time_s: float, animal: str | None = None) -> dict | None:
        """The bout of ``session`` (and ``animal``) running at ``time_s``, if any."""
        rows = self.session_bouts(session)
        if animal is not None:
            rows = rows[rows["animal"].astype(str) == str(animal)]
        inside = rows[(rows["start_s"] <= time_s) & (rows["start_s"] + rows["duration_s"] > time_s)]
        return None if inside.empty else inside.iloc[0].to_dict()

    def preview_split(self, motif: str, names: list[str]) -> pd.DataFrame | None:
        """Bout statistics of the halves splitting ``motif`` would make (nothing is kept);
        None, with a message, if the split cannot be made."""
        try:
            table = self.ws.preview_split(motif, names)
        except EthoscribeError as exc:
            self.say("error", str(exc))
            return None
        self.say("info", f"Preview of splitting {motif!r}; press 'Split in two' to keep it.")
        return table

    def suggested_merges(self) -> list[list[str]]:
        """Groups of motifs the model suggests merging (its state tree), if it gives any.

        Read from ``summary.json`` (``suggested_merges``: lists of state ids) when discovery
        recorded a state tree; empty otherwise.
        """
        groups = self.summary.get("suggested_merges") or []
        names = self.curation.names
        out = []
        for group in groups if isinstance(groups, list) else []:
            shown = sorted({names[s] for s in group if isinstance(s, int) and s in names})
            if len(shown) >= 2:
                out.append(shown)
        return out

    def state_tree(self) -> tuple[list[dict], dict[int, str]] | None:
        """The model's state tree levels and the current ``state id -> motif name`` of the
        motifs in it (set-aside states left out); None when the model kept no tree (older
        saved models, change-point methods) or it has fewer than two motifs."""
        tree = self.summary.get("state_tree")
        levels = tree.get("levels") if isinstance(tree, dict) else None
        if not isinstance(levels, list) or not levels:
            return None
        n_states = min(len(lv.get("assignment") or []) for lv in levels)
        names = {s: m for s, m in self.curation.names.items() if m != UNASSIGNED and s < n_states}
        return (levels, names) if len(set(names.values())) >= 2 else None

    # --- postures and video ---------------------------------------------------------------
    def examples(self, motif: str, n_examples: int = 4) -> list[dict[str, Any]]:
        """Example bouts of ``motif`` from different sessions (longest uncut first)."""
        view = self._view()
        key = ("examples", motif, n_examples)
        if key not in view:
            bouts = view["bouts"]
            view[key] = example_bouts(bouts[bouts["motif"] == motif], n_examples).to_dict("records")
        return view[key]

    def bout_postures(self, bout: dict[str, Any], n_shown: int) -> np.ndarray:
        """Body-frame postures (n, K, D) of ``n_shown`` evenly spaced frames of ``bout``.

        The frames are spread over those of the bout where some keypoint was tracked (a frame
        with none would draw nothing); over all of them if none was.
        """
        start, stop = int(bout["start_frame"]), int(bout["stop_frame"])
        every = self.postures.frames(bout["session"], bout["animal"], np.arange(start, stop))
        tracked = np.flatnonzero(np.isfinite(every).any(axis=(1, 2)))
        if not len(tracked):
            return every[evenly_spaced_frames(0, len(every), n_shown)]
        return every[tracked[evenly_spaced_frames(0, len(tracked), n_shown)]]

    def bout_caption(self, bout: dict[str, Any]) -> str:
        animal = "" if self._single_animal else f" {bout['animal']}"
        return (
            f"{bout['session']}{animal} at {bout['start_s']:.1f} s, {bout['duration_s']:.1f} s long"
        )

    def video_frames(self, bout: dict[str, Any], n_shown: int) -> list[bytes]:
        """PNG images of ``n_shown`` moments of ``bout`` from the session's video ([] if none)."""
        video = self._video(str(bout["session"]))
        if video is None:
            return []
        times = np.linspace(bout["start_s"], bout["start_s"] + bout["duration_s"], n_shown + 2)
        try:
            return [video.png_at(float(t)) for t in times[1:-1]]
        except EthoscribeError as exc:
            self._videos[str(bout["session"])] = None
            self.say("error", f"video of {bout['session']}: {exc}")
            return []

    def video_png(self, session: str, time_s: float) -> bytes | None:
        video = self._video(str(session))
        if video is None:
            return None
        try:
            return video.png_at(time_s)
        except EthoscribeError as exc:
            self._videos[str(session)] = None
            self.say("error", f"video of {session}: {exc}")
            return None

    def _video(self, session: str) -> VideoFrames | None:
        if session not in self._videos:
            path = video_file(self.ws, session)
            self._videos[session] = None if path is None else VideoFrames(path)
        return self._videos[session]

    # --- saving and comparing ------------------------------------------------------------
    def save(self) -> dict[str, Path] | None:
        """Write the exports and the report into the workspace; None (and a message) on error."""
        self.flush()
        try:
            files = save_ethogram(self.ws)
        except EthoscribeError as exc:
            self.say("error", f"could not save: {exc}")
            return None
        folder = self.ws.path  # as the user named it (the header's tooltip has the full path)
        self.say(
            "ok",
            f"Saved the ethogram in {folder}: exports/ (labels, bouts, transitions, time "
            "budgets, bout durations, motif names) and report.html",
        )
        return files

    def grouping_columns(self) -> list[str]:
        """Columns of ``sessions.csv`` that split the sessions into at least two groups."""
        out = []
        for column in self.sessions.columns:
            if column in TECHNICAL_COLUMNS:
                continue
            values = self.sessions[column].dropna().astype(str)
            if 2 <= values.nunique() < len(values):
                out.append(str(column))
        return out

    def run_comparison(self, by: str, test: str = "permutation", planned: str = "") -> bool:
        """Compare groups of sessions by column ``by`` (writes ``comparison_<by>/``);
        ``planned``: the confirmatory comparisons, e.g. ``"time_budget:digging"``."""
        self.flush()
        try:
            out = safe_child(self.ws.path, f"comparison_{by}", "grouping column")
            text = compare(self.ws.path, out, by=by, test=test, planned=planned.strip() or None)
            text = text.replace("(--primary)", "(the 'Planned' box)")  # the page's own words
        except EthoscribeError as exc:
            self.say("error", f"could not compare by {by!r}: {exc}")
            return False
        stats = pd.read_csv(out / "group_stats.csv")
        self.comparison = {
            "by": by, "test": test, "planned": planned, "summary": text, "stats": stats,
            "folder": out,
        }  # fmt: skip
        self.say("ok", f"Compared groups by {by!r}; tables and report.html are in {out}")
        self._emit("comparison")
        return True


def _renaming(old: dict[int, str], new: dict[int, str]) -> dict[str, str] | None:
    """``old name -> new name`` when ``new`` only relabels ``old``'s motifs, else None."""
    if old.keys() != new.keys():
        return None
    pairs = {(old[k], new[k]) for k in old}
    forward = dict(pairs)
    if len(forward) != len(pairs) or len(set(forward.values())) != len(forward):
        return None  # a merge or a split: the bouts themselves change
    return forward
