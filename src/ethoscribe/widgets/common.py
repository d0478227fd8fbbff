"""Small pieces shared by the workbench panels: redrawing figures in place, messages, styles."""

from __future__ import annotations

import asyncio
import html
from collections.abc import Callable
from typing import Any

import ipywidgets as w
import pandas as pd
import plotly.graph_objects as go

from ethoscribe.errors import EthoscribeError

MESSAGE_COLOURS = {"ok": "#1b6e3a", "info": "#444444", "error": "#a4262c"}
MESSAGE_BACKGROUNDS = {"ok": "#e9f5ee", "info": "#f3f3f3", "error": "#fdecea"}
LABEL_STYLE = {"description_width": "initial"}
# Rows of panels wrap onto the next line when the notebook is narrow (a laptop with the file
# browser open) instead of running off the right edge.
FLOW = {"flex_flow": "row wrap", "align_items": "flex-start"}


def flow(children: list, **layout: str) -> w.HBox:
    """A row of panels that wraps when the page is too narrow for it."""
    return w.HBox(children, layout=w.Layout(**FLOW, **layout))


SETTLE_S = 0.3


def on_enter(box: w.Text, action: Callable[[], Any]) -> None:
    """Call ``action()`` when Enter is pressed in ``box`` (not when it merely loses focus).

    The browser sends a box's keystrokes one update at a time and holds the rest until the
    kernel answers, while the Enter message goes at once: in a notebook it can arrive before
    the last letters (seen in the browser test: 'b' of 'browser_named'). So the action waits
    until the box's value has not changed for ``SETTLE_S`` (at most 10 s).
    """
    changes = [0]
    box.observe(lambda _: changes.__setitem__(0, changes[0] + 1), "value")

    def message(_, content, buffers) -> None:
        if content.get("event") != "submit":  # what the text box sends on Enter
            return
        try:
            loop = asyncio.get_running_loop()
        except RuntimeError:  # driven from Python (no kernel loop): the value is final
            action()
            return

        def settled(seen: int, tries: int) -> None:
            if changes[0] != seen and tries > 0:
                loop.call_later(SETTLE_S, settled, changes[0], tries - 1)
            else:
                action()

        loop.call_later(SETTLE_S, settled, changes[0], int(10 / SETTLE_S))

    box.on_msg(message)


def after_display(action: Callable[[], Any]) -> None:
    """Call ``action()`` once the running cell has finished (and shown its output).

    In a notebook the kernel's event loop runs it after the cell, so what the cell displays
    is on screen first. Without a running loop (plain Python) nothing is scheduled: what
    ``action`` would make is made when first used.
    """
    try:
        loop = asyncio.get_running_loop()
    except RuntimeError:
        return
    loop.call_soon(action)


class LazyDrawing:
    """Redraw only what is on screen: a page hidden behind another tab redraws when shown."""

    visible = True
    _dirty = False

    def draw(self) -> None:  # pragma: no cover - every page defines it
        raise NotImplementedError

    def request_draw(self) -> None:
        if self.visible:
            self.draw()
        else:
            self._dirty = True

    def set_visible(self, visible: bool) -> None:
        self.visible = visible
        if visible and self._dirty:
            self._dirty = False
            self.draw()


class FigureSlot(w.Box):
    """The place of one plotly figure; its ``FigureWidget`` is made when first needed.

    plotly's widget module takes 1.5-2 s to import in a fresh kernel (its renderers import
    nbformat and jsonschema), more than the rest of the workbench's first screen. So a slot
    shows a short note in a box of the figure's size until :attr:`figure` is first read (the
    workbench reads it right after its first screen is shown); from then on :meth:`draw`
    redraws it.

    A redraw shows a new FigureWidget, made whole from the new figure, and nothing when the
    figure did not change. plotly's update messages (restyle, relayout, add or delete traces)
    that reach a view still being drawn can leave it with axes and no traces: the browser test
    saw it on a 2-core machine, where the quickstart's merge and undo arrive while the
    figures' first views are drawn. Only a slot made with ``in_place=True`` (a figure stepped
    through frames while the user watches, long after it was drawn) updates its traces in
    place when their number and kinds match.

    Parameters
    ----------
    make : callable returning a ``plotly.graph_objects.Figure``
        Builds the figure from the current state (called at creation and on each draw).
    css : str
        CSS class of the FigureWidget (for tests and styling).
    width, height : int
        Size of the box before the figure is made (pixels).
    on_created : callable, optional
        Called with the new FigureWidget and after each redraw (e.g. to bind clicks).
    in_place : bool
        Update the traces of the shown widget when they match (see above).
    """

    def __init__(
        self,
        make: Callable[[], go.Figure],
        css: str,
        width: int,
        height: int,
        on_created: Callable[[Any], None] | None = None,
        in_place: bool = False,
    ) -> None:
        waiting = note("drawing ...")
        size = {"width": f"{width}px", "max_width": "100%", "min_height": f"{height}px"}
        super().__init__([waiting], layout=w.Layout(**size))
        self.add_class(f"{css}-slot")
        self.make, self.css, self._on_created = make, css, on_created
        self.in_place = in_place
        self._figure: Any = None
        self._shown = ""  # JSON of the figure shown, to skip redraws that change nothing
        self._tallest = 0  # px: the slot never shrinks below a figure it showed

    @property
    def created(self) -> bool:
        return self._figure is not None

    @property
    def figure(self) -> go.FigureWidget:
        """The FigureWidget (made, and shown in the slot, on first use)."""
        if self._figure is None:
            fig = self.make()
            self._figure, self._shown = figure_widget(fig, self.css), fig.to_json()
            self.layout.min_height = None
            self.children = (self._figure,)
            if self._on_created is not None:
                self._on_created(self._figure)
        return self._figure

    def show(self) -> None:
        """Make the figure, or redraw it if it was made."""
        if self._figure is None:
            self.figure  # noqa: B018 - made on first use
        else:
            self.draw()

    def draw(self) -> None:
        """Redraw from the current state (nothing to do before the figure is made)."""
        if self._figure is None:
            return
        fig = self.make()
        shown = fig.to_json()
        if shown == self._shown:
            return
        self._shown = shown
        if self.in_place and same_traces(self._figure, fig):
            redraw(self._figure, fig)
        else:
            old, self._figure = self._figure, figure_widget(fig, self.css)
            # the slot keeps the height of its tallest figure so far: what lies below (the
            # curation panel) does not jump while a person aims at it
            tallest = max(old.layout.height or 0, fig.layout.height or 0, self._tallest)
            self._tallest = tallest
            self.layout.min_height = f"{tallest}px" if tallest else None
            self.children = (self._figure,)
            old.close()
        if self._on_created is not None:
            self._on_created(self._figure)


def blank_figure(text: str, width: int, height: int) -> go.Figure:
    """A figure with no axes that only says ``text`` (in place of a figure not drawn)."""
    note = {"text": text, "showarrow": False, "x": 0.5, "y": 0.5, "xref": "paper", "yref": "paper"}
    hidden = {"visible": False}
    return go.Figure(
        layout={
            "width": width,
            "height": height,
            "template": "plotly_white",
            "xaxis": hidden,
            "yaxis": hidden,
            "annotations": [{**note, "font": {"size": 13, "color": "#555555"}}],
        }
    )


def figure_widget(fig: go.Figure, css: str) -> go.FigureWidget:
    """A FigureWidget of ``fig`` carrying the CSS class ``css`` (for tests and styling)."""
    widget = go.FigureWidget(fig)
    # the toolbar upright in the right margin: across the top it hid the middle of the titles
    widget.layout.modebar.orientation = "v"
    right = widget.layout.margin.r
    widget.layout.margin.r = max(40, 80 if right is None else right)  # plotly's default: 80
    widget.add_class(css)
    return widget


def same_traces(widget: go.FigureWidget, fig: go.Figure) -> bool:
    """Whether ``fig`` has as many traces as ``widget``, of the same kinds in the same order."""
    return len(widget.data) == len(fig.data) and all(
        a.type == b.type for a, b in zip(widget.data, fig.data, strict=True)
    )


def redraw(widget: go.FigureWidget, fig: go.Figure) -> None:
    """Show ``fig`` in ``widget`` by updating traces and layout in place.

    Only restyle and relayout messages go to the browser (applying one twice changes nothing);
    ``fig`` must have the widget's traces (:func:`same_traces`).
    """
    if not same_traces(widget, fig):
        raise ValueError("redraw needs the same traces; make a new FigureWidget instead")
    new = fig.layout.to_plotly_json()
    new.pop("template", None)  # the widget keeps the one it was made with
    old = widget.layout.to_plotly_json()
    changed = {k: v for k, v in new.items() if old.get(k) != v}
    gone = [k for k in old if k not in new and k in ("annotations", "shapes", "images")]
    with widget.batch_update():
        for old_trace, new_trace in zip(widget.data, fig.data, strict=True):
            old_trace.update(new_trace.to_plotly_json(), overwrite=True)
        for key in gone:
            widget.layout[key] = ()
        if changed:
            widget.update_layout(changed, overwrite=True)


def message_html(kind: str, text: str) -> str:
    """A one-line coloured message box (text escaped), CSS class ``ethoscribe-note-<kind>``."""
    if not text:
        return ""
    colour, background = MESSAGE_COLOURS.get(kind, "#444"), MESSAGE_BACKGROUNDS.get(kind, "#fff")
    return (
        f'<div class="ethoscribe-note-{kind}" style="color:{colour};background:{background};'
        'padding:4px 10px;border-radius:4px;font-size:13px;line-height:1.4">'
        f"{html.escape(text)}</div>"
    )


def heading(text: str, size: int = 14) -> w.HTML:
    return w.HTML(f'<div style="font-weight:600;font-size:{size}px;margin:4px 0">{text}</div>')


def note(text: str) -> w.HTML:
    return w.HTML(f'<div style="color:#555;font-size:12px;line-height:1.4">{text}</div>')


def table_html(table: pd.DataFrame, max_rows: int = 30) -> str:
    """A compact HTML table (numbers to 3 significant digits)."""
    shown = table.head(max_rows)
    body = shown.to_html(index=False, border=0, na_rep="", float_format=lambda v: f"{v:.3g}")
    more = f"<div style='color:#666'>first {max_rows} of {len(table)} rows</div>"
    style = (
        "<style>.ethoscribe-table table{border-collapse:collapse;font-size:12px}"
        ".ethoscribe-table th,.ethoscribe-table td{border-bottom:1px solid #e3e3e3;"
        "padding:2px 8px;text-align:right}.ethoscribe-table th{background:#f5f5f5}</style>"
    )
    extra = more if len(table) > max_rows else ""
    return f"{style}<div class='ethoscribe-table'>{body}{extra}</div>"


def button(
    label: str,
    css: str,
    handler: Callable[[], Any],
    report: Callable[[str, str], None],
    style: str = "",
) -> w.Button:
    """A button calling ``handler()``; an ethoscribe error becomes a message via ``report``."""
    b = w.Button(description=label, button_style=style, layout=w.Layout(width="auto"))
    b.add_class(css)

    def clicked(_):
        try:
            handler()
        except EthoscribeError as exc:  # bad input: say so, never a traceback
            report("error", str(exc))

    b.on_click(clicked)
    return b
