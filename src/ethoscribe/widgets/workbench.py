"""The workbench: a header (workspace, save, messages) over four pages -- Motifs, Ethogram,
Study and Groups -- all bound to one :class:`~ethoscribe.widgets.state.WorkbenchState`."""

from __future__ import annotations

import html
import traceback
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import ipywidgets as w

from ethoscribe.errors import EthoscribeError, counted
from ethoscribe.widgets.common import after_display, button, flow, message_html, note
from ethoscribe.widgets.ethogram import EthogramPage
from ethoscribe.widgets.motifs import CurationDesk, MotifList, MotifPortrait
from ethoscribe.widgets.state import WorkbenchState
from ethoscribe.widgets.study import GroupPage, StudyPage
from ethoscribe.workspace.folder import frames_said

PAGES = ("Motifs", "Ethogram", "Study", "Groups")


class Workbench(w.VBox):
    """The workbench widget; display it in a notebook. Its methods edit like its buttons do.

    Parameters
    ----------
    path : str or Path
        A workspace folder (from ``discover`` or ``label_sessions``).
    skeleton : sequence of (str, str), optional
        Keypoint pairs to draw as bones. Default: the bundled body plan whose keypoints match,
        else the minimum spanning tree of the mean keypoint distances.
    write_behind : bool
        Write edits to disk on a background thread (the view updates at once).
    """

    def __init__(
        self,
        path: str | Path,
        skeleton: Sequence[tuple[str, str]] | None = None,
        write_behind: bool = True,
    ) -> None:
        self.state = state = WorkbenchState(path, skeleton, write_behind)
        self.motif_list = MotifList(state)
        self.portrait = MotifPortrait(state)
        self.desk = CurationDesk(state)
        self.ethogram = EthogramPage(state)
        self.study = StudyPage(state)
        self.groups = GroupPage(state)
        self.closer = w.Dropdown(options=[], layout=w.Layout(width="280px", max_width="100%"))
        self.closer_button = button("Play it", "ethoscribe-closer-button", self._closer, state.say)
        self.save_button = button(
            "Save ethogram", "ethoscribe-save-button", self.state.save, state.say, "success"
        )
        self.message = w.HTML()
        self.message.add_class("ethoscribe-message")
        state.on("message", self._show_message)
        state.on("motif", self._list_examples)
        state.on("names", self._list_examples)
        state.on("bout", self._to_ethogram)
        self._list_examples()
        self.tabs = w.Tab(
            children=[
                self._motif_page(),
                self.ethogram.widget,
                self.study.widget,
                self.groups.widget,
            ]
        )
        self.tabs.titles = PAGES
        self.tabs.add_class("ethoscribe-pages")
        self.tabs.observe(self._page_shown, "selected_index")
        super().__init__([self._header(), self.tabs], layout=w.Layout(width="100%"))
        self.add_class("ethoscribe-workbench")
        after_display(self._make_figures)

    def _make_figures(self) -> None:
        """The Motifs page's figures, made once its first screen is on view (see FigureSlot)."""
        try:
            self.portrait.make_figures()
            self.motif_list.make_figures()
        except EthoscribeError as exc:  # e.g. a source file gone: say so, keep the page
            self.state.say("error", f"could not draw the motif's figures: {exc}")
        except Exception as exc:  # run by the event loop: nobody else would show it
            traceback.print_exc()
            self.state.say("error", f"could not draw the motif's figures: {exc!r}")

    # --- layout ---------------------------------------------------------------------------
    def _header(self) -> w.Widget:
        title = w.HTML()

        def show() -> None:  # the motif count follows merges, splits and undos
            s = self.state.summary
            folder = self.state.ws.path.resolve()
            name, where = html.escape(folder.name), html.escape(str(folder), quote=True)
            facts = (
                f"{counted(s.get('n_sessions') or 0, 'session')} · {frames_said(s)} · "
                f"{counted(len(self.state.motifs), 'motif')}"
            )
            title.value = (
                f"<div style='font-size:18px;font-weight:600' title='{where}'>ethoscribe "
                f"workbench: {name}</div><div style='color:#555;font-size:12px'>{facts}</div>"
            )

        show()
        self.state.on("names", show)
        self.title = title
        bar = w.HBox(
            [title, self.save_button],
            layout=w.Layout(
                justify_content="space-between", align_items="center", flex_flow="row wrap"
            ),
        )
        return w.VBox([bar, self.message], layout=w.Layout(padding="4px 2px 8px 2px"))

    def _motif_page(self) -> w.Widget:
        p = self.portrait
        # "Play it" sits under the posture, near the top: the Ethogram page it opens is
        # shorter, and from low on this page the notebook would show only its empty end.
        closer = w.VBox(
            [
                note("Watch an example bout move, with its video if the session has one:"),
                flow([self.closer, self.closer_button]),
            ],
            layout=w.Layout(max_width="380px", margin="6px 0 0 0"),
        )
        top = flow([self.motif_list.widget, w.VBox([p.centre, closer]), p.right])
        middle = flow([p.examples, p.slots["neighbours"]])
        return w.VBox([top, middle, self.desk.widget])

    # --- bindings -------------------------------------------------------------------------
    def _show_message(self) -> None:
        self.message.value = message_html(*self.state.message)

    def _list_examples(self) -> None:
        self._examples = self.state.examples(self.state.motif or "")
        options = [(self.state.bout_caption(b), i) for i, b in enumerate(self._examples)]
        self.closer.options = options
        self.closer.value = 0 if options else None

    def _closer(self) -> None:
        if self.closer.value is not None:
            self.state.select_bout(self._examples[self.closer.value])

    def _page_shown(self, change) -> None:
        page = PAGES[change["new"]] if change["new"] is not None else ""
        self.portrait.set_visible(page == "Motifs")
        self.ethogram.set_visible(page == "Ethogram")
        self.study.set_visible(page == "Study")
        if page == "Groups":
            self.groups.figure_slot.show()

    def _to_ethogram(self) -> None:
        self.tabs.selected_index = PAGES.index("Ethogram")

    def close(self) -> None:
        """Finish writing pending edits, then close the widgets."""
        self.state.close()
        super().close()

    # --- the same edits from code ----------------------------------------------------------
    def _report(self, ok: bool) -> None:
        print(self.state.message[1])

    def rename_motif(self, motif: str, name: str) -> None:
        """Give ``motif`` a new ``name`` (journaled)."""
        self._report(self.state.edit("rename", motif=motif, name=name))

    def merge_motifs(self, motifs: Sequence[str], into: str) -> None:
        """Give all ``motifs`` one name ``into`` (journaled)."""
        self._report(self.state.edit("merge", motifs=list(motifs), into=into))

    def split_motif(self, motif: str, names: Sequence[str]) -> None:
        """Split ``motif`` in two by its frames' features (journaled)."""
        self._report(self.state.edit("split", motif=motif, names=list(names)))

    def unassign_motif(self, motif: str) -> None:
        """Set ``motif`` aside as unassigned (journaled)."""
        self._report(self.state.edit("unassign", motif=motif))

    def undo(self) -> None:
        self._report(self.state.edit("undo"))

    def redo(self) -> None:
        self._report(self.state.edit("redo"))

    def save(self) -> dict[str, Path] | None:
        """Write ``exports/`` and ``report.html`` into the workspace; prints where."""
        files = self.state.save()
        print(self.state.message[1])
        return files

    def compare(self, by: str = "group", test: str = "permutation", planned: str = "") -> Any:
        """Run the group comparison (as the Groups page does) and show its page; ``planned``:
        the confirmatory comparisons, e.g. ``"time_budget:digging,bout_rate:digging"``."""
        if self.state.run_comparison(by, test, planned):
            self.groups.planned.value = planned
            self.groups.by.value = by if by in self.groups.by.options else self.groups.by.value
            self.tabs.selected_index = PAGES.index("Groups")
        print(self.state.message[1])


def workbench(path: str | Path, skeleton: Sequence[tuple[str, str]] | None = None) -> Workbench:
    """Open the workbench on a workspace folder (display the result in a notebook).

    Examples
    --------
    >>> import ethoscribe
    >>> wb = ethoscribe.workbench("study_ws")  # doctest: +SKIP
    >>> wb  # doctest: +SKIP
    """
    return Workbench(path, skeleton)
