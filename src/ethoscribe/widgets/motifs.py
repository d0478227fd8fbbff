"""The "Motifs" page: the motif list (sorted, filtered), the chosen motif's portrait, and the
curation desk (rename, merge, split, set aside, undo, redo)."""

from __future__ import annotations

import html

import ipywidgets as w
import numpy as np

from ethoscribe.plots.ethogram import motif_colours
from ethoscribe.plots.motifs import (
    TREE_NOTE,
    bout_strip_figure,
    duration_histogram,
    neighbour_figure,
    posture_figure,
    session_share_figure,
    state_tree_figure,
)
from ethoscribe.widgets.common import (
    FigureSlot,
    LazyDrawing,
    blank_figure,
    button,
    flow,
    heading,
    message_html,
    note,
    on_enter,
    table_html,
)
from ethoscribe.widgets.state import SORT_KEYS, WorkbenchState

LIST_STYLE = (
    "<style>.ethoscribe-motif-list select{font-family:ui-monospace,Menlo,Consolas,monospace;"
    "font-size:12px}</style>"
)


def _label(row, stability: bool) -> str:
    """One fixed-width line of the motif list (the list uses a monospace font)."""
    name = row.motif if len(row.motif) <= 16 else row.motif[:15] + "~"
    text = f"{name:<16} {row.time_share:6.1%} {int(row.n_bouts):6d} {row.median_s:6.2f}s"
    if stability:
        text += "    -" if not np.isfinite(row.stability) else f" {row.stability:4.2f}"
    return text


def _header(stability: bool) -> str:
    return "motif              share  bouts median" + ("  stab" if stability else "")


class MotifList:
    """Sort and filter controls over a list of motifs; picking one selects it."""

    def __init__(self, state: WorkbenchState) -> None:
        self.state = state
        table = state.motif_table()
        has_stability = bool(np.isfinite(table["stability"]).any())
        top_share = float(np.ceil(np.max(table["time_share"].to_numpy(), initial=0.0) * 100) / 100)
        top_median = float(
            np.ceil(np.max(table["median_s"].fillna(0).to_numpy(), initial=0.0) * 2) / 2
        )
        self._stability = has_stability
        self.sort = w.Dropdown(options=list(SORT_KEYS), value=state.sort_by, description="Sort by")
        self.largest = w.Checkbox(value=state.descending, description="largest first", indent=False)
        self.min_share = w.FloatSlider(
            value=0.0,
            min=0.0,
            max=max(top_share, 0.01),
            step=0.005,
            description="Time share at least",
            readout_format=".1%",
        )
        self.min_median = w.FloatSlider(
            value=0.0,
            min=0.0,
            max=max(top_median, 0.5),
            step=0.05,
            description="Median bout (s) at least",
        )
        self.min_stability = w.FloatSlider(
            value=0.0,
            min=0.0,
            max=1.0,
            step=0.05,
            description="Stability at least",
            disabled=not has_stability,
        )
        for slider in (self.min_share, self.min_median, self.min_stability):
            slider.style = {"description_width": "165px"}
            slider.layout = w.Layout(width="355px")
        self.sort.layout = w.Layout(width="225px")
        self.largest.layout = w.Layout(width="auto")
        self.largest.disabled = state.sort_by == "name"
        rows = int(np.clip(len(state.motifs), 6, 14))
        self.list = w.Select(options=[], rows=rows, layout=w.Layout(width="355px"))
        self.list.add_class("ethoscribe-motif-list")
        self.count = note("")
        self.suggested = w.HTML()  # the model's suggested merges, when its state tree gives any
        self.suggested.add_class("ethoscribe-suggested-merges")
        # The model's state tree over the motifs; made after the first screen (see FigureSlot).
        self.tree = FigureSlot(self._tree_fig, "ethoscribe-state-tree", 355, 230)
        self.tree_box = w.VBox([note(TREE_NOTE), self.tree])
        self._quiet = False
        self.sort.observe(self._order, "value")
        self.largest.observe(self._order, "value")
        for slider in (self.min_share, self.min_median, self.min_stability):
            slider.observe(self._order, "value")
        self.list.observe(self._picked, "value")
        state.on("names", self.refresh)
        state.on("filter", self.refresh)
        state.on("motif", self._show_selection, first=True)
        header = _header(has_stability)
        self.widget = w.VBox(
            [
                w.HTML(LIST_STYLE),
                heading("Motifs"),
                w.HBox([self.sort, self.largest], layout=w.Layout(align_items="center")),
                self.min_share,
                self.min_median,
                self.min_stability,
                w.HTML(
                    "<pre style='margin:6px 0 0 6px;font-size:12px;color:#555;font-family:"
                    f"ui-monospace,Menlo,Consolas,monospace'>{header}</pre>"
                ),
                self.list,
                self.count,
                self.suggested,
                self.tree_box,
            ],
            layout=w.Layout(width="365px", margin="0 12px 0 0", flex="0 0 auto"),
        )
        self.refresh()

    def _order(self, _=None) -> None:
        self.largest.disabled = self.sort.value == "name"  # names always read A to Z
        self.state.set_order(
            self.sort.value,
            self.largest.value,
            self.min_share.value,
            self.min_median.value,
            self.min_stability.value,
        )

    def refresh(self) -> None:
        table = self.state.motif_table()
        options = [(_label(r, self._stability), r.motif) for r in table.itertuples(index=False)]
        self._quiet = True
        try:
            self.list.options = options
            self._show_selection()
        finally:
            self._quiet = False
        total = len(self.state.motifs)
        about = (
            "stab: agreement of the states between fits with other seeds (1 = identical)"
            if self._stability
            else "no stability check in this workspace (discover with stability=True)"
        )
        self.count.value = (
            f"<div style='color:#555;font-size:12px;line-height:1.4'>{len(options)} of {total} "
            f"motifs shown; median bout duration in seconds; {about}</div>"
        )
        groups = self.state.suggested_merges()
        self.suggested.value = (
            ""
            if not groups
            else note(
                "Suggested merges (motifs the model finds close): "
                + "; ".join(" + ".join(html.escape(m) for m in g) for g in groups)
            ).value
        )
        has_tree = self.state.state_tree() is not None
        self.tree_box.layout.display = None if has_tree else "none"
        self.tree.draw()

    def make_figures(self) -> None:
        """Make the state tree's figure, if the model kept a tree (it shows a note until then)."""
        if self.state.state_tree() is not None:
            self.tree.figure  # noqa: B018 - made on first use

    def _tree_fig(self):
        tree = self.state.state_tree()
        if tree is None:
            return blank_figure("the model kept no state tree", 355, 230)
        return state_tree_figure(*tree)

    def _show_selection(self) -> None:
        values = [v for _, v in self.list.options]
        was, self._quiet = self._quiet, True
        self.list.value = self.state.motif if self.state.motif in values else None
        self._quiet = was

    def _picked(self, change) -> None:
        if not self._quiet and change["new"] is not None:
            self.state.select_motif(change["new"])


class MotifPortrait(LazyDrawing):
    """Mean posture, example bouts, time per session, bout durations and neighbours."""

    def __init__(self, state: WorkbenchState) -> None:
        self.state = state
        lib = state.postures
        self._span = self._common_span()
        # Figures are made right after the first screen is shown (see FigureSlot).
        self.slots = {
            "posture": FigureSlot(self._posture_fig, "ethoscribe-posture", 360, 360),
            "strip": FigureSlot(self._strip_fig, "ethoscribe-examples", 720, 360),
            "shares": FigureSlot(self._shares_fig, "ethoscribe-shares", 420, 250),
            "durations": FigureSlot(self._durations_fig, "ethoscribe-durations", 420, 250),
            "neighbours": FigureSlot(self._neighbours_fig, "ethoscribe-neighbours", 520, 250),
        }
        self.video = w.HBox([], layout=w.Layout(align_items="center"))
        self.skeleton_note = note(lib.edges_note if lib.available else (lib.problem or ""))
        state.on("motif", self.request_draw)
        state.on("names", self.request_draw)
        self.draw_video()
        slot = self.slots
        self.centre = w.VBox([slot["posture"], self.skeleton_note])
        # Side by side when this pair wraps below the list (a laptop with the file browser open)
        self.right = flow([slot["shares"], slot["durations"]])
        self.examples = w.VBox([slot["strip"], self.video])

    # The figures as FigureWidgets (each made on first use).
    posture = property(lambda self: self.slots["posture"].figure)
    strip = property(lambda self: self.slots["strip"].figure)
    shares = property(lambda self: self.slots["shares"].figure)
    durations = property(lambda self: self.slots["durations"].figure)
    neighbours = property(lambda self: self.slots["neighbours"].figure)

    def make_figures(self) -> None:
        """Make every figure of the portrait (it shows notes until then)."""
        for slot in self.slots.values():
            slot.figure  # noqa: B018 - made on first use

    def _common_span(self) -> float | None:
        lib = self.state.postures
        if not lib.available:
            return None
        means = np.stack([lib.mean_posture([s]) for s in self.state.curation.names])
        finite = np.abs(means[np.isfinite(means)])
        return float(finite.max()) * 1.15 if finite.size else None

    def _colour(self) -> str:
        names = [*self.state.curation.names.values()]
        return motif_colours(names).get(self.state.motif or "", "#0072B2")

    def _states(self) -> list[int]:
        return [k for k, v in self.state.curation.names.items() if v == self.state.motif]

    def _posture_fig(self):
        lib, motif = self.state.postures, self.state.motif or ""
        if not lib.available or not motif:
            return blank_figure(lib.problem or "no motif selected", 360, 360)
        return posture_figure(
            lib.mean_posture(self._states()),
            lib.keypoints,
            lib.edges,
            title=f"{motif}: mean posture (body frame)",
            colour=self._colour(),
            units=lib.units,
            span=self._span,
            second_axis=lib.second_axis,
        )

    def _strip_fig(self):
        lib, motif = self.state.postures, self.state.motif or ""
        if not lib.available or not motif:
            return blank_figure(lib.problem or "no motif selected", 720, 200)
        rows = [
            (self.state.bout_caption(b), self.state.bout_postures(b, 7))
            for b in self.state.examples(motif)
        ]
        return bout_strip_figure(
            rows,
            lib.keypoints,
            lib.edges,
            colour=self._colour(),
            title=f"Example bouts of {motif}, frames left to right in time",
        )

    def _shares_fig(self):
        return session_share_figure(
            self.state.session_shares(self.state.motif or ""),
            self.state.motif or "",
            self._colour(),
        )

    def _durations_fig(self):
        bouts = self.state.bouts
        d = bouts.loc[bouts["motif"] == self.state.motif, "duration_s"].to_numpy()
        return duration_histogram(d, self.state.motif or "", self._colour())

    def _neighbours_fig(self):
        before, after = self.state.neighbours(self.state.motif or "")
        colours = motif_colours([*self.state.curation.names.values()])
        return neighbour_figure(before, after, self.state.motif or "", colours)

    def draw(self) -> None:
        for slot in self.slots.values():
            slot.draw()
        self.draw_video()

    def draw_video(self) -> None:
        """Frames (start, middle, end) of the first example bout that has a video."""
        shown = []
        for bout in self.state.examples(self.state.motif or ""):
            frames = self.state.video_frames(bout, 3)
            if frames:
                caption = note(f"video of {self.state.bout_caption(bout)}")
                images = [
                    w.Image(value=png, format="png", layout=w.Layout(width="160px"))
                    for png in frames
                ]
                shown = [w.VBox([caption, w.HBox(images)])]
                break
        self.video.children = shown


class CurationDesk:
    """Rename, merge, split, set aside, undo and redo -- every edit goes to the journal."""

    def __init__(self, state: WorkbenchState) -> None:
        self.state = state
        say = state.say
        wide = w.Layout(width="260px")
        self.title = heading("")
        self.name = w.Text(placeholder="new name", layout=wide)
        self.name.add_class("ethoscribe-rename-text")
        on_enter(self.name, lambda: self.rename.click())
        self.merge_with = w.SelectMultiple(options=[], rows=4, layout=wide)
        self.merge_with.add_class("ethoscribe-merge-with")
        self.merge_into = w.Text(placeholder="name of the merged motif", layout=wide)
        on_enter(self.merge_into, lambda: self.merge.click())
        self.split_names = [
            w.Text(placeholder="larger part", layout=w.Layout(width="125px")),
            w.Text(placeholder="smaller part", layout=w.Layout(width="125px")),
        ]
        self.rename = button("Rename", "ethoscribe-rename-button", self._rename, say, "primary")
        self.merge = button("Merge", "ethoscribe-merge-button", self._merge, say)
        self.split = button("Split in two", "ethoscribe-split-button", self._split, say)
        self.preview = button(
            "Preview split", "ethoscribe-preview-split-button", self._preview, say
        )
        self.split_preview = w.HTML()
        self.split_preview.add_class("ethoscribe-split-preview")
        self.unassign = button(
            "Set aside as unassigned", "ethoscribe-unassign-button", self._unassign, say
        )
        self.undo = button("Undo", "ethoscribe-undo-button", lambda: state.edit("undo"), say)
        self.redo = button("Redo", "ethoscribe-redo-button", lambda: state.edit("redo"), say)
        self.message = w.HTML()
        self.message.add_class("ethoscribe-desk-message")
        state.on("motif", self.refresh, first=True)  # before the figures' slow redraw
        state.on("names", self.refresh, first=True)
        state.on("message", self._show_message)
        lab = lambda text: w.HTML(f"<div style='width:90px;font-size:13px'>{text}</div>")  # noqa: E731
        row = lambda *items: flow(list(items))  # noqa: E731
        self.widget = w.VBox(
            [
                self.title,
                row(lab("Name"), self.name, self.rename),
                row(lab("Merge with"), self.merge_with, w.VBox([self.merge_into, self.merge])),
                row(lab("Split into"), *self.split_names, self.preview, self.split),
                self.split_preview,
                row(lab(""), self.unassign, self.undo, self.redo),
                self.message,
            ],
            layout=w.Layout(
                border="1px solid #ddd", padding="6px 10px", width="auto", max_width="720px"
            ),
        )
        self.widget.add_class("ethoscribe-curation")
        self._shown: str | None = None  # the motif the panel shows
        self.refresh()

    def refresh(self) -> None:
        motif = self.state.motif or "(none)"
        self.title.value = f"<div style='font-weight:600;font-size:14px'>Curate {motif}</div>"
        self.name.placeholder = f"new name for {motif}"
        if self.state.motif != self._shown:  # another motif picked:
            self.merge_with.value = ()  # ticks and typed names were for the one shown before
            self.name.value = self.merge_into.value = ""
            self._shown = self.state.motif
        self.merge_with.options = [m for m in self.state.motifs if m != self.state.motif]

    def _show_message(self) -> None:
        self.message.value = message_html(*self.state.message)

    def _need_motif(self) -> str | None:
        if self.state.motif is None:
            self.state.say("error", "pick a motif in the list first")
        return self.state.motif

    def _rename(self) -> None:
        motif = self._need_motif()
        if motif and not self.name.value.strip():
            self.state.say("error", f"type the new name for {motif} in the Name box")
        elif motif and self.state.edit("rename", motif=motif, name=self.name.value.strip()):
            self.name.value = ""

    def _merge(self) -> None:
        motif = self._need_motif()
        if not motif:
            return
        if not self.merge_with.value:
            self.state.say("error", f"tick the motifs to merge with {motif} under 'Merge with'")
            return
        chosen = [motif, *self.merge_with.value]
        into = self.merge_into.value.strip() or motif
        if self.state.edit("merge", motifs=chosen, into=into):
            self.merge_into.value = ""

    def _split(self) -> None:
        motif = self._need_motif()
        names = [t.value.strip() for t in self.split_names]
        if motif and not all(names):
            self.state.say("error", f"type the names of both parts of {motif} under 'Split into'")
        elif motif and self.state.edit("split", motif=motif, names=names):
            self.split_preview.value = ""
            for t in self.split_names:
                t.value = ""

    def _preview(self) -> None:
        """Bout statistics of the two halves, before the split is kept."""
        motif = self._need_motif()
        typed = [t.value.strip() for t in self.split_names]
        names = [name or f"{motif}_{part}" for name, part in zip(typed, "ab", strict=True)]
        table = self.state.preview_split(motif, names) if motif else None
        if table is not None:
            caption = (
                f"If {motif} were split (along its features, then along time: stretches shorter "
                "than the minimum bout join their neighbour), its halves would be:"
            )
            self.split_preview.value = note(caption).value + table_html(table)

    def _unassign(self) -> None:
        motif = self._need_motif()
        if motif:
            self.state.edit("unassign", motif=motif)
