"""The "Study" page (sessions, data quality, the model's choices) and the "Groups" page
(group comparison and its plots)."""

from __future__ import annotations

import html

import ipywidgets as w
import pandas as pd

from ethoscribe.plots.stats import group_difference_figure
from ethoscribe.widgets.common import (
    FigureSlot,
    LazyDrawing,
    button,
    figure_widget,
    heading,
    note,
    table_html,
)
from ethoscribe.widgets.expert import ExpertSection
from ethoscribe.widgets.state import WorkbenchState
from ethoscribe.workspace.reading import LABELLED_FPS, LABELLED_FRAMES
from ethoscribe.workspace.report_sections import model_section, quality_section

SESSION_COLUMNS = (
    "session",
    "group",
    "subject",
    "fps",
    "n_frames",
    LABELLED_FPS,  # fewer frames than read when resampled: the labels' rows
    LABELLED_FRAMES,
    "duration_s",
    "n_animals",
    "units",
)
FIGURE_WIDTH = 880  # fits a 1366 px laptop screen with the file browser open


class StudyPage(LazyDrawing):
    """Sessions, cleaning quality per keypoint and session, state count and stability.

    Built the first time the page is shown (its figures take a second or two), not when the
    workbench opens.
    """

    visible = False

    def __init__(self, state: WorkbenchState) -> None:
        self.state = state
        self.widget = w.VBox([note("Loading the study overview ...")])
        self._dirty = True

    def draw(self) -> None:
        self.widget.children = self._parts(self.state)

    def _parts(self, state: WorkbenchState) -> list[w.Widget]:
        ws = state.ws
        sessions = state.sessions[[c for c in state.sessions.columns if c in SESSION_COLUMNS]]
        parts: list[w.Widget] = [heading("Sessions"), w.HTML(table_html(sessions, 50))]
        quality = quality_section(ws)
        parts.append(heading("Data quality"))
        if quality is None:
            parts.append(note("This workspace has no quality.csv."))
        else:
            parts.append(note(html.escape(quality.text)))
            parts += [self._figure(f, "ethoscribe-quality") for f in quality.figures]
        model = model_section(ws)
        parts += [heading("The model's choices"), note(html.escape(model.text))]
        parts += [self._figure(f, "ethoscribe-model") for f in model.figures]
        for caption, table in model.tables:
            parts += [note(html.escape(caption)), w.HTML(table_html(table))]
        self.expert = ExpertSection(state)
        parts.append(self.expert.widget)
        return parts

    @staticmethod
    def _figure(fig, css: str):
        fig.update_layout(width=FIGURE_WIDTH, height=max(fig.layout.height or 380, 380))
        return figure_widget(fig, css)


class GroupPage:
    """Choose a grouping column and a test, run the comparison, read its plots."""

    def __init__(self, state: WorkbenchState) -> None:
        self.state = state
        columns = state.grouping_columns()
        self.by = w.Dropdown(
            options=columns, value=columns[0] if columns else None, description="Group by"
        )
        self.test = w.Dropdown(
            options=[("permutation test", "permutation"), ("rank test", "rank")], description="Test"
        )
        motif = state.motifs[0] if state.motifs else "MOTIF"
        self.planned = w.Text(
            description="Planned",
            placeholder=f"e.g. time_budget:{motif}, bout_rate:{motif}",
            layout=w.Layout(width="420px"),
        )
        self.planned.add_class("ethoscribe-planned-text")
        self.run = button(
            "Compare groups", "ethoscribe-compare-button", self._run, state.say, "primary"
        )
        if not columns:
            self.run.disabled = True
        self.summary = w.HTML()
        self.figure_slot = FigureSlot(self._figure, "ethoscribe-groups", FIGURE_WIDTH, 220)
        self.table = w.HTML()
        state.on("comparison", self.draw)
        hint = (
            "Compares every motif's time budget, bout rate, bout durations and transitions "
            "between the groups (one value per subject, the session where no subject is given: "
            "the animals of a session are averaged), with Benjamini-Hochberg q-values "
            "within each of these families of tests. The comparisons the study planned before "
            "looking (metric:motif, comma-separated; metrics time_budget, bout_rate, "
            "bout_duration, or transition with from-&gt;to) go in 'Planned': the confirmatory "
            "tests, "
            "corrected together with Holm's method. Results are written to "
            "comparison_&lt;column&gt;/ in the workspace."
            if columns
            else "sessions.csv has no column that splits the sessions into groups; give a "
            "manifest with a group column when discovering."
        )
        self.widget = w.VBox(
            [
                heading("Group comparison"),
                note(hint),
                w.HBox([self.by, self.test, self.run]),
                self.planned,
                self.summary,
                self.figure_slot,
                self.table,
            ]
        )

    figure = property(lambda self: self.figure_slot.figure)  # made on first use

    def _run(self) -> None:
        if self.by.value:
            self.state.run_comparison(self.by.value, self.test.value, self.planned.value)

    def _figure(self):
        result = self.state.comparison
        if result is None:
            import plotly.graph_objects as go

            fig = go.Figure()
            fig.add_annotation(
                text="no comparison run yet",
                showarrow=False,
                x=0.5,
                y=0.5,
                xref="paper",
                yref="paper",
            )
            fig.update_layout(
                width=FIGURE_WIDTH,
                height=220,
                template="plotly_white",
                xaxis={"visible": False},
                yaxis={"visible": False},
            )
            return fig
        fig = group_difference_figure(result["stats"], max_rows=30)
        fig.update_layout(width=FIGURE_WIDTH, template="plotly_white", margin={"l": 330})
        return fig

    def draw(self) -> None:
        result = self.state.comparison
        self.summary.value = (
            f"<div style='font-size:13px;line-height:1.5;max-width:{FIGURE_WIDTH}px'>"
            f"{html.escape(result['summary'])}</div>"
        )
        self.figure_slot.show()
        stats: pd.DataFrame = result["stats"]
        cols = [
            c
            for c in ("metric", "motif", "group_a", "group_b", "effect_size", "q_value")
            if c in stats.columns
        ]
        top = stats.sort_values("q_value", kind="stable")[cols]
        self.table.value = table_html(top, 15)
