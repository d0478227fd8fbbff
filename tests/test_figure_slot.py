"""A figure's place in the workbench: redraws send no update messages to a shown figure.

plotly's update messages (restyle, relayout, add or delete traces) that reach a view still
being drawn can leave it with axes and no traces (the real-browser test saw it on a 2-core
machine). So a redraw shows a new widget made whole, or nothing when the figure is unchanged;
only a slot made with ``in_place=True`` (the close-up stepped frame by frame) updates matching
traces in place.
"""

from __future__ import annotations

import plotly.graph_objects as go
import pytest

from ethoscribe.widgets.common import FigureSlot, redraw


def _messages(widget) -> list[str]:
    seen: list[str] = []
    names = ["_py2js_addTraces", "_py2js_deleteTraces", "_py2js_restyle", "_py2js_relayout",
             "_py2js_update"]  # fmt: skip
    widget.observe(lambda change: seen.append(change["name"]) if change["new"] else None, names)
    return seen


def test_a_changed_figure_is_a_new_widget_and_an_unchanged_one_is_left_alone():
    values = {"y": 1.0}

    def make():
        return go.Figure([go.Bar(x=["a", "b"], y=[values["y"], 2.0])])

    created = []
    slot = FigureSlot(make, "test-figure", 300, 200, on_created=created.append)
    first = slot.figure
    seen = _messages(first)
    slot.draw()  # nothing changed: the same widget, nothing sent
    assert slot.figure is first and seen == [] and created == [first]
    values["y"] = 5.0
    slot.draw()
    assert slot.figure is not first and tuple(slot.figure.data[0].y) == (5.0, 2.0)
    assert seen == [] and first.comm is None  # the old one was closed, never updated


def test_other_traces_make_a_new_widget_without_trace_messages():
    traces = {"n": 1}

    def make():
        bars = [go.Bar(x=["a"], y=[float(i + 1)]) for i in range(traces["n"])]
        return go.Figure(bars, layout={"title": {"text": f"{traces['n']} bars"}})

    created = []
    slot = FigureSlot(make, "test-figure", 300, 200, on_created=created.append)
    first = slot.figure
    seen = _messages(first)
    traces["n"] = 3
    slot.draw()
    second = slot.figure
    assert second is not first and slot.children == (second,)
    assert len(second.data) == 3 and second.layout.title.text == "3 bars"
    assert "test-figure" in second._dom_classes
    assert seen == []  # nothing was sent to the old one
    assert first.comm is None  # closed: no model left behind in the browser
    assert created == [first, second]  # clicks are bound again on the new widget


def test_an_in_place_slot_updates_same_traces_in_place():
    values = {"y": 1.0}

    def make():
        return go.Figure([go.Bar(x=["a", "b"], y=[values["y"], 2.0])])

    slot = FigureSlot(make, "test-figure", 300, 200, in_place=True)
    first = slot.figure
    seen = _messages(first)
    values["y"] = 5.0
    slot.draw()
    assert slot.figure is first
    assert tuple(first.data[0].y) == (5.0, 2.0)
    assert seen and not {"_py2js_addTraces", "_py2js_deleteTraces"} & set(seen)


def test_redraw_refuses_other_traces():
    widget = go.FigureWidget(go.Figure([go.Bar(y=[1])]))
    with pytest.raises(ValueError, match="same traces"):
        redraw(widget, go.Figure([go.Scatter(y=[1])]))
