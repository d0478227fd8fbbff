"""The "Ethogram" page: one session's raster of bouts, the list of the chosen motif's bouts in
it, and a close-up that plays a bout's skeleton (and video, if the session has one)."""

from __future__ import annotations

import ipywidgets as w
import numpy as np

from ethoscribe.plots.ethogram import ethogram_raster, motif_colours
from ethoscribe.plots.motifs import posture_figure
from ethoscribe.postures import evenly_spaced_frames
from ethoscribe.widgets.common import (
    FigureSlot,
    LazyDrawing,
    blank_figure,
    flow,
    heading,
    note,
)
from ethoscribe.widgets.state import WorkbenchState

RASTER_BARS = 3000  # above this many bouts a session's raster is drawn from samples
CLOSEUP_FRAMES = 90  # frames of a bout the close-up steps through (evenly spaced)
RASTER_WIDTH = 880  # fits a 1366 px laptop screen with the file browser open
RASTER_MARGIN = {"l": 140, "r": 20, "t": 50, "b": 125}  # the bottom holds two legend rows


class EthogramPage(LazyDrawing):
    """Raster of a session; click a bout (or pick one from the list) to see it move."""

    visible = False  # the Motifs page comes first

    def __init__(self, state: WorkbenchState) -> None:
        self.state = state
        sessions = state.sessions["session"].astype(str).tolist()
        self.session = w.Dropdown(options=sessions, value=state.session, description="Session")
        self.session.add_class("ethoscribe-session")
        # Made when the page is first shown: opening the workbench does not wait for them.
        n_rows = max(state.session_bouts(state.session)["animal"].nunique(), 1)
        self.raster_slot = FigureSlot(
            self._raster_fig, "ethoscribe-raster", RASTER_WIDTH, 225 + 45 * n_rows,
            self._hook_clicks,
        )  # fmt: skip
        self._dirty = True
        self.bouts = w.Select(options=[], rows=9, layout=w.Layout(width="300px"))
        self.bouts.add_class("ethoscribe-bout-list")
        self.bouts.add_class("ethoscribe-motif-list")  # the same monospace list style
        self.bouts_title = heading("")
        self.closeup_slot = FigureSlot(  # stepped frame by frame: traces updated in place
            self._current_closeup, "ethoscribe-closeup", 360, 360, in_place=True
        )
        self._step = 0
        self.play = w.Play(value=0, min=0, max=0, interval=100, description="play")
        self.step = w.IntSlider(
            value=0, min=0, max=0, description="frame", layout=w.Layout(width="300px")
        )
        w.jslink((self.play, "value"), (self.step, "value"))
        self.video = w.Image(format="png", layout=w.Layout(width="360px", display="none"))
        self.info = note("")
        self._frames: np.ndarray | None = None
        self._postures: np.ndarray | None = None
        self._span = 1.0
        self._quiet = False
        self.session.observe(lambda c: state.select_session(c["new"]), "value")
        self.bouts.observe(self._picked, "value")
        self.step.observe(lambda c: self.show_step(c["new"]), "value")
        state.on("session", self._session_changed)
        state.on("names", self.request_draw)
        state.on("motif", self._motif_changed)
        state.on("bout", self.show_bout)
        self._list_bouts()
        self.widget = w.VBox(
            [
                flow(
                    [
                        self.session,
                        note(
                            "  Colours follow the motifs' names in alphabetical order (hover "
                            "a bar for its motif); the black bar marks the bout in the close-up."
                        ),
                    ]
                ),
                self.raster_slot,
                flow(
                    [
                        w.VBox([self.bouts_title, self.bouts], layout=w.Layout(width="320px")),
                        w.VBox([self.closeup_slot, w.HBox([self.play, self.step]), self.info]),
                        self.video,
                    ]
                ),
            ]
        )

    # --- raster ---------------------------------------------------------------------------
    def _raster_fig(self):
        bouts = self.state.session_bouts(self.state.session)
        n_rows = max(bouts["animal"].nunique(), 1)
        fig = ethogram_raster(
            bouts, max_bars=RASTER_BARS, n_bins=1500, title=f"Ethogram of {self.state.session}"
        )
        colours = motif_colours([*self.state.curation.names.values()])
        for trace in fig.data:  # the same colour for a motif in every session
            trace.marker.color = colours.get(trace.name, "#888888")
        bout = self.state.bout
        if bout is not None and str(bout["session"]) == self.state.session:
            row = f"{bout['session']} / {bout['animal']}"
            end = bout["start_s"] + bout["duration_s"]
            fig.add_scatter(
                x=[bout["start_s"], end],
                y=[row, row],
                mode="lines+markers",
                name="shown in close-up",
                line={"color": "black", "width": 4},
                marker={"symbol": "line-ns", "size": 18, "line": {"width": 3}},
                hoverinfo="skip",
                showlegend=False,
            )
        # The legend goes under the axis title (70 px below the plot), in rows of its own.
        plot_height = 45 * n_rows + 50
        fig.update_layout(
            width=RASTER_WIDTH,
            height=plot_height + RASTER_MARGIN["t"] + RASTER_MARGIN["b"],
            template="plotly_white",
            margin=RASTER_MARGIN,
            legend={"orientation": "h", "y": -70 / plot_height, "yanchor": "top", "x": 0},
        )
        return fig

    # The figures as FigureWidgets (each made on first use).
    raster = property(lambda self: self.raster_slot.figure)
    closeup = property(lambda self: self.closeup_slot.figure)

    def _hook_clicks(self, raster) -> None:
        for trace in raster.data:
            if trace.type == "bar":
                trace.on_click(self._clicked, append=False)

    def _clicked(self, trace, points, _selector=None) -> None:
        """A click on a bar: the bout running at its middle goes to the close-up."""
        if not points.point_inds:
            return
        i = points.point_inds[0]
        start, length = float(trace.base[i]), float(trace.x[i])
        session, _, animal = str(trace.y[i]).partition(" / ")
        bout = self.state.bout_at(session, start + length / 2, animal or None)
        if bout is not None:
            self.state.select_bout(bout)

    def draw(self) -> None:
        self.raster_slot.show()
        self.closeup_slot.show()
        self._list_bouts()

    def _session_changed(self) -> None:
        if self.session.value != self.state.session:
            self.session.value = self.state.session
        if self.state.bout is None or str(self.state.bout["session"]) != self.state.session:
            self.request_draw()  # otherwise show_bout draws it, with the bout marked

    # --- bouts of the motif ----------------------------------------------------------------
    def _list_bouts(self) -> None:
        motif = self.state.motif or ""
        bouts = self.state.session_bouts(self.state.session)
        rows = bouts[bouts["motif"] == motif].head(500)
        self._rows = rows.to_dict("records")
        multi = rows["animal"].nunique() > 1
        options = [
            (
                f"{r['start_s']:8.1f} s  {r['duration_s']:5.1f} s long"
                + (f"  {r['animal']}" if multi else ""),
                i,
            )
            for i, r in enumerate(self._rows)
        ]
        self._quiet = True
        self.bouts.options = options
        self.bouts.value = None
        self._quiet = False
        self.bouts_title.value = (
            f"<div style='font-weight:600'>Bouts of {motif} in {self.state.session} "
            f"({len(bouts[bouts['motif'] == motif])})</div>"
        )

    def _motif_changed(self) -> None:
        if self.visible:
            self._list_bouts()
        else:
            self._dirty = True

    def _picked(self, change) -> None:
        if not self._quiet and change["new"] is not None:
            self.state.select_bout(self._rows[change["new"]])

    # --- close-up --------------------------------------------------------------------------
    def _current_closeup(self):
        shown = self._postures is not None and self._step < len(self._postures)
        return self._closeup_fig(self._postures[self._step] if shown else None, self._step)

    def _closeup_fig(self, posture, step: int):
        lib = self.state.postures
        if posture is None or not lib.available:
            text = (
                lib.problem
                if not lib.available
                else "Click a bout in the ethogram above,<br>or pick one from the list."
            )
            return blank_figure(text or "", 360, 360)
        bout = self.state.bout
        title = f"{bout['motif']}: {bout['session']}, frame {int(self._frames[step])}"
        colour = motif_colours([*self.state.curation.names.values()]).get(bout["motif"], "#0072B2")
        return posture_figure(
            posture,
            lib.keypoints,
            lib.edges,
            title=title,
            colour=colour,
            units=lib.units,
            span=self._span,
            second_axis=lib.second_axis,
        )

    def show_bout(self) -> None:
        bout = self.state.bout
        if bout is None:
            return
        if self.session.value != str(bout["session"]):
            self.session.value = str(bout["session"])
        self.request_draw()
        lib = self.state.postures
        self.info.value = (
            f"<div style='color:#555;font-size:12px'>{self.state.bout_caption(bout)}</div>"
        )
        if not lib.available:
            return
        self._frames = evenly_spaced_frames(
            int(bout["start_frame"]), int(bout["stop_frame"]), CLOSEUP_FRAMES
        )
        self._postures = lib.frames(bout["session"], bout["animal"], self._frames)
        finite = np.abs(self._postures[np.isfinite(self._postures)])
        self._span = float(finite.max()) * 1.15 if finite.size else 1.0
        self.play.playing = False
        self.step.max = self.play.max = len(self._frames) - 1
        self.step.value = 0
        self.show_step(0)

    def show_step(self, step: int) -> None:
        if self._postures is None or step >= len(self._postures):
            return
        self._step = step
        self.closeup_slot.show()
        bout = self.state.bout
        time_s = bout["start_s"] + (self._frames[step] - bout["start_frame"]) * (
            bout["duration_s"] / max(bout["n_frames"], 1)
        )
        png = self.state.video_png(str(bout["session"]), float(time_s))
        self.video.layout.display = None if png else "none"
        if png:
            self.video.value = png
