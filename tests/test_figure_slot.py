"""A figure's place in the workbench: redraws never ask the browser to delete or add traces.

plotly's FigureWidget applies its delete/add-trace messages both to the browser's copy of the
figure and to each view; a view still being drawn when they arrive could show axes without
traces. So a redraw with other traces makes a new widget, and one with the same traces only
restyles and relayouts (messages that change nothing when applied twice).
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


def test_same_traces_are_updated_in_place():
    values = {"y": 1.0}

    def make():
        return go.Figure([go.Bar(x=["a", "b"], y=[values["y"], 2.0])])

    slot = FigureSlot(make, "test-figure", 300, 200)
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
