"""The "Expert coding" part of the study page: agreement with an expert, learning the expert's
behaviours, and the learned bouts to code next. Each button calls one library function."""

from __future__ import annotations

import html
from pathlib import Path
from typing import Any

import ipywidgets as w
import pandas as pd

from ethoscribe.plots.agreement import confusion_heatmap
from ethoscribe.widgets.common import LABEL_STYLE, button, figure_widget, heading, note, table_html
from ethoscribe.widgets.state import WorkbenchState
from ethoscribe.workspace import expert

AGREEMENT_FOLDER = "agreement"
N_SUGGESTED = 10
N_VIDEO_FRAMES = 4


class ExpertSection:
    """Agreement, learning and the least certain learned bouts, for one workspace."""

    def __init__(self, state: WorkbenchState) -> None:
        self.state = state
        self.coding = w.Text(
            description="Expert coding file",
            placeholder="coding.csv (session, frame, behaviour) or bouts (start_s, stop_s)",
            style=LABEL_STYLE,
            layout=w.Layout(width="560px"),
        )
        self.tolerance = w.BoundedFloatText(
            value=0.2, min=0.0, max=10.0, step=0.05, description="Boundary tolerance (s)",
            style=LABEL_STYLE, layout=w.Layout(width="240px"),
        )  # fmt: skip
        self.agree_button = button(
            "Check agreement", "ethoscribe-agreement-button", self.check_agreement, state.say
        )
        self.learn_button = button(
            "Learn the behaviours", "ethoscribe-learn-button", self.learn, state.say, "primary"
        )
        self.agreement = w.VBox()
        self.learned = w.HTML()
        self.suggestions = w.HTML()
        self.pick = w.Dropdown(options=[], description="Look at", layout=w.Layout(width="560px"))
        self.pick.observe(lambda _: self.show_frames(), "value")
        self.frames = w.HBox()
        self.widget = w.VBox(
            [
                heading("Expert coding"),
                note(
                    "Compare the motifs with an expert's coding (uncoded time is left out), "
                    "or learn the expert's behaviours from a few coded sessions: every session "
                    "is then labelled with them, the motifs kept beside them."
                ),
                self.coding,
                w.HBox([self.tolerance, self.agree_button, self.learn_button]),
                self.agreement,
                self.learned,
                self.suggestions,
                self.pick,
                self.frames,
            ]
        )
        self.draw_learned()

    def _path(self) -> Path:
        return Path(self.coding.value.strip()).expanduser()

    def check_agreement(self) -> None:
        """Run :func:`ethoscribe.workspace.expert.agreement` into the workspace's agreement/."""
        out = self.state.ws.path / AGREEMENT_FOLDER
        result = expert.agreement(self.state.ws, self._path(), out, self.tolerance.value)
        text = expert.describe_agreement(result, out)
        fig = confusion_heatmap(result.matrix)
        warned = "".join(
            f"<li>{html.escape(n)}</li>" for n in result.summary.get("reading_warnings", [])
        )
        self.agreement.children = [
            note(html.escape(text)),
            *([w.HTML(f"<ul>{warned}</ul>")] if warned else []),
            figure_widget(fig, "ethoscribe-agreement"),
            w.HTML(table_html(result.per_behaviour, 40)),
        ]
        self.state.say("ok", f"agreement written to {out}")

    def learn(self) -> None:
        """Run :func:`ethoscribe.workspace.expert.learn` and show its scores."""
        result = expert.learn(self.state.ws, self._path())
        self.state.say("ok", expert.describe_learning(result, self.state.ws.path).split("\n")[0])
        self.draw_learned()

    def draw_learned(self) -> None:
        evaluation = expert.learned_evaluation(self.state.ws)
        if evaluation is None:
            self.learned.value = ""
            self.suggestions.value = ""
            self.pick.options = []
            return
        acc = evaluation.get("accuracy")
        score = "no leave-one-session-out score" if acc is None else f"accuracy {acc:.3f}"
        per_path = self.state.ws.path / "learned" / "per_behaviour.csv"
        per = pd.read_csv(per_path) if per_path.is_file() else pd.DataFrame()
        warn = "".join(f"<li>{html.escape(w_)}</li>" for w_ in evaluation.get("warnings", []))
        self.learned.value = (
            f"<b>Learned behaviours</b> ({html.escape(', '.join(evaluation['behaviours']))}), "
            f"from {len(evaluation['coded_sessions'])} coded sessions, {score} "
            "(each coded session predicted by a classifier trained on the others)."
            + (f"<ul>{warn}</ul>" if warn else "")
            + table_html(per, 40)
        )
        bouts = expert.uncertain_bouts(self.state.ws, N_SUGGESTED)
        self._bouts = bouts
        self.suggestions.value = (
            "<b>Code these next</b>: the learned bouts the classifier is least sure of."
            + table_html(bouts, N_SUGGESTED)
        )
        self.pick.options = [
            (f"{r.session} {r.animal} {r.behaviour} at {r.start_s:.1f} s", i)
            for i, r in enumerate(bouts.itertuples())
        ]

    def show_frames(self) -> None:
        """Video frames of the chosen bout, when the session's video is known."""
        if self.pick.value is None or not len(getattr(self, "_bouts", [])):
            self.frames.children = []
            return
        bout: dict[str, Any] = self._bouts.iloc[int(self.pick.value)].to_dict()
        images = self.state.video_frames(bout, N_VIDEO_FRAMES)
        if not images:
            self.frames.children = [note("No video for this session.")]
            return
        self.frames.children = [
            w.Image(value=png, format="png", layout=w.Layout(width="200px")) for png in images
        ]
