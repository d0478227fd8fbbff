"""The "new study" panel: from a folder of pose files to the workbench, without writing code.

Choose the pose files (a folder, or a manifest listing them), the frame rate and units, look at
what would be read and at the automatic body axis (:func:`ethoscribe.workspace.preview.
preview_study`), change the origin, axis, vertical axis (3-D tracks), camera view (2-D
tracks) or number of states if needed, and run ``discover``; the workbench opens on the
result. Each button calls one library function.
"""

from __future__ import annotations

import html
from pathlib import Path
from typing import Any

import ipywidgets as w

from ethoscribe.errors import EthoscribeError, InputError, counted, listed
from ethoscribe.widgets.common import button, flow, heading, message_html, note
from ethoscribe.widgets.workbench import Workbench
from ethoscribe.workspace import discover
from ethoscribe.workspace.preview import preview_study

AUTOMATIC = "automatic"
UNITS = [("as the files or manifest say", ""), ("pixels", "px"), ("mm", "mm"), ("cm", "cm")]


class NewStudy(w.VBox):
    """A panel that discovers motifs in a folder of pose files and opens the workbench.

    Examples
    --------
    >>> import ethoscribe
    >>> ethoscribe.new_study()  # doctest: +SKIP
    """

    def __init__(self, folder: str | Path = "") -> None:
        label = {"description_width": "150px"}
        wide = w.Layout(width="460px", max_width="100%")
        self.folder = w.Text(
            value=str(folder),
            description="Pose files folder",
            style=label,
            layout=wide,
            placeholder="folder of CSV / Parquet / NWB files",
        )
        self.manifest = w.Text(
            description="Manifest (optional)",
            style=label,
            layout=wide,
            placeholder="CSV: session, path, fps, group, ...",
        )
        self.fps = w.FloatText(
            value=0.0, description="Frame rate (fps)", style=label, layout=w.Layout(width="260px")
        )
        self.units = w.Dropdown(
            options=UNITS,
            value="",
            description="Units",
            style=label,
            layout=w.Layout(width="340px"),
        )
        self.origin = w.Dropdown(
            options=[AUTOMATIC],
            description="Body origin",
            style=label,
            layout=w.Layout(width="340px"),
        )
        self.tail = w.Dropdown(
            options=[AUTOMATIC],
            description="Body axis from",
            style=label,
            layout=w.Layout(width="340px"),
        )
        self.head = w.Dropdown(
            options=[AUTOMATIC], description="to (head side)", layout=w.Layout(width="240px")
        )
        # shown once the check has read the files: 3-D tracks the first two, 2-D the third
        self.up = _hidden_choice("Vertical axis", ["z", "y", "x"], "ethoscribe-up-axis", label)
        self.upward = _hidden_choice("It points", ["up", "down"], "ethoscribe-up-direction", label)
        self.view = _hidden_choice(
            "Camera", [("from above", "above"), ("from the side", "side")], "ethoscribe-view", label
        )
        self.states = w.Dropdown(
            options=[AUTOMATIC, *range(2, 21)],
            description="Motifs",
            style=label,
            layout=w.Layout(width="260px"),
        )
        self.out = w.Text(
            description="Results folder",
            style=label,
            layout=wide,
            placeholder="a new folder, e.g. results",
        )
        self.check = button("Check the files", "ethoscribe-check-button", self._check, self.say)
        self.run = button(
            "Discover motifs", "ethoscribe-discover-button", self._run, self.say, "primary"
        )
        self.found = w.HTML()
        self.found.add_class("ethoscribe-preview")
        self.message = w.HTML()
        self.message.add_class("ethoscribe-new-study-message")
        self.result = w.VBox()
        self.workbench: Any = None
        self.preview: dict[str, Any] | None = None
        super().__init__(
            [
                heading("New study: discover motifs in a folder of pose files", 16),
                self.folder,
                self.manifest,
                flow([self.fps, self.units]),
                self.check,
                self.found,
                flow([self.origin]),
                flow([self.tail, self.head]),
                self.up,
                self.upward,
                self.view,
                self.states,
                self.out,
                self.run,
                self.message,
                self.result,
            ],
            layout=w.Layout(width="100%"),
        )
        self.add_class("ethoscribe-new-study")

    def say(self, kind: str, text: str) -> None:
        self.message.value = message_html(kind, text)

    def _inputs(self) -> dict[str, Any]:
        folder, manifest = self.folder.value.strip(), self.manifest.value.strip()
        if not folder and not manifest:
            raise _error("choose a folder of pose files, or a manifest that lists them")
        return {
            "inputs": [folder] if folder else [],
            "manifest": manifest or None,
            "fps": self.fps.value if self.fps.value > 0 else None,
            "reader_options": {"units": self.units.value} if self.units.value else None,
        }

    def _check(self) -> None:
        self.say("info", "Reading the first sessions ...")
        info = preview_study(**self._inputs(), up_axis=self.up.value, view=self.view.value)
        self.preview = info
        keypoints = info["keypoints"]
        tail, head = info["axis"]
        named = [(k, k) for k in keypoints]  # (label, value) pairs throughout, as ipywidgets wants
        self.origin.options = [(f"automatic ({info['origin']})", AUTOMATIC), *named]
        self.tail.options = [(f"automatic ({tail})", AUTOMATIC), *named]
        self.head.options = [(f"automatic ({head})", AUTOMATIC), *named]
        # 3-D tracks: which axis points up decides headings and heights (check again after a change)
        self.up.layout.display = "" if info.get("n_dims") == 3 else "none"
        _say_automatic(self.up, info["up_axis_auto"])
        # ... and which way it points (only the drawn postures depend on it)
        self.upward.layout.display = self.up.layout.display
        if info.get("up_direction_auto"):
            _say_automatic(self.upward, info["up_direction_auto"])
        # 2-D tracks: filmed from above or from the side decides what the body frame keeps
        self.view.layout.display = "" if info.get("n_dims") == 2 else "none"
        _say_automatic(
            self.view, "from the side" if info.get("view_auto") == "side" else "from above"
        )
        sessions = info["sessions"]
        shown = listed(sessions, 6)
        text = (
            f"{counted(len(sessions), 'session')} ({shown}); {counted(len(keypoints), 'keypoint')} "
            f"({', '.join(keypoints)}); {len(info['animals'])} animal(s); "
            f"{info['fps']:g} frames per second; coordinates in {info['units']}. "
            f"{info['axis_text']}"
            + (f" Vertical axis: {info['up_axis_text']}." if info.get("up_axis_text") else "")
            + (f" Camera: {info['view_text']}." if info.get("view_text") else "")
        )
        shown_warnings = list(info["warnings"])
        if info.get("n_dims") == 3 and any("vertical axis" in t for t in shown_warnings):
            shown_warnings.append(
                "Choose the axis that points up under 'Vertical axis' and check the files again."
            )
        self.found.value = note(html.escape(text)).value + "".join(
            message_html("error", warning) for warning in shown_warnings
        )
        if not self.out.value.strip():
            base = Path(self.folder.value.strip() or self.manifest.value.strip()).resolve()
            parent = base if base.is_dir() else base.parent
            self.out.value = str(parent.with_name(parent.name + "_results"))
        self.say("ok", "Files read. Change the choices below if needed, then discover motifs.")

    def _run(self) -> None:
        out = self.out.value.strip()
        if not out:
            raise _error("choose a results folder (a new folder is created)")
        axis = None
        if (self.tail.value == AUTOMATIC) != (self.head.value == AUTOMATIC):
            raise _error("choose both ends of the body axis, or leave both automatic")
        if self.tail.value != AUTOMATIC:
            axis = (self.tail.value, self.head.value)
        self.say("info", f"Discovering motifs; the workbench opens here when done ({out}) ...")
        ws = discover(
            **self._inputs(),
            out=out,
            origin=None if self.origin.value == AUTOMATIC else self.origin.value,
            axis=axis,
            up_axis=self.up.value,
            up_direction=self.upward.value,
            view=self.view.value,
            states="auto" if self.states.value == AUTOMATIC else int(self.states.value),
        )
        self.workbench = Workbench(ws.path)
        self.result.children = [self.workbench]
        self.say("ok", f"Done: {ws.describe()}")


def _hidden_choice(
    description: str, options: list, css_class: str, style: dict[str, str]
) -> w.Dropdown:
    """A menu whose first option, "auto", reads the choice from the files, hidden until the
    check shows it (``options``: values, or (label, value) pairs)."""
    menu = w.Dropdown(
        options=[("automatic", "auto"), *((o, o) if isinstance(o, str) else o for o in options)],
        value="auto",
        description=description,
        style=style,
        layout=w.Layout(width="340px", display="none"),
    )
    menu.add_class(css_class)
    return menu


def _say_automatic(menu: w.Dropdown, reads: str) -> None:
    """Label the menu's first option, "auto", with what it reads now; keep the choice."""
    chosen = menu.value
    menu.options = [(f"automatic ({reads})", "auto"), *menu.options[1:]]
    menu.value = chosen


def _error(text: str) -> EthoscribeError:
    return InputError(text)


def new_study(folder: str | Path = "") -> NewStudy:
    """The new-study panel (display it in a notebook); see :class:`NewStudy`."""
    return NewStudy(folder)
