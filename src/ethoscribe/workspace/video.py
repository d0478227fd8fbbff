"""Video frames beside the keypoints: the optional ``video`` column of ``sessions.csv``.

A manifest column ``video`` (carried into ``sessions.csv`` by discovery) names each session's
video file. Frames are read with imageio and its ffmpeg plugin (``pip install imageio
imageio-ffmpeg``, or ``pip install "ethoscribe[video]"``), imported only when a video is shown.
The video frame of a label frame is found by time (``time_s * video fps``), so it is right even
when cleaning resampled the tracks.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from ethoscribe.errors import InputError
from ethoscribe.workspace.folder import Workspace
from ethoscribe.workspace.postures import source_file

VIDEO_COLUMN = "video"
INSTALL = 'pip install imageio imageio-ffmpeg   (or: pip install "ethoscribe[video]")'


def video_file(ws: Workspace, session: str) -> Path | None:
    """The session's video, or None when ``sessions.csv`` names none or the file is absent."""
    if VIDEO_COLUMN not in ws.sessions.columns:
        return None
    try:
        return source_file(ws, session, VIDEO_COLUMN)
    except InputError:
        return None


class VideoFrames:
    """Random access to the frames of one video file (opened on first use).

    Examples
    --------
    >>> frames = VideoFrames("session_01.mp4")  # doctest: +SKIP
    >>> frames.png_at(12.5)[:4]  # doctest: +SKIP
    b'\\x89PNG'
    """

    def __init__(self, path: str | Path, max_width: int = 480) -> None:
        self.path = Path(path)
        self.max_width = int(max_width)
        self._reader = None
        self.fps = float("nan")
        self.n_frames = 0

    def _open(self):
        if self._reader is None:
            try:
                import imageio.v2 as imageio
            except ImportError:
                raise InputError(f"showing video frames needs imageio: {INSTALL}") from None
            try:
                self._reader = imageio.get_reader(self.path, format="ffmpeg")
            except Exception as exc:  # imageio raises several types for missing codecs/plugins
                raise InputError(f"{self.path}: cannot open the video ({exc}); {INSTALL}") from None
            meta = self._reader.get_meta_data()
            self.fps = float(meta.get("fps") or float("nan"))
            n = meta.get("nframes", float("inf"))  # often unknown (inf): use the duration
            if not np.isfinite(n):
                n = round(float(meta.get("duration") or 0.0) * self.fps) if self.fps > 0 else 0
            self.n_frames = int(n)
        return self._reader

    def frame_at(self, time_s: float) -> np.ndarray:
        """The video frame shown at ``time_s`` seconds, (height, width, 3) uint8."""
        reader = self._open()
        index = int(np.clip(round(time_s * self.fps), 0, max(self.n_frames - 1, 0)))
        try:
            frame = np.asarray(reader.get_data(index))
        except (IndexError, RuntimeError, OSError) as exc:
            raise InputError(f"{self.path}: cannot read frame {index} ({exc})") from None
        step = int(np.ceil(frame.shape[1] / self.max_width)) if self.max_width else 1
        return frame[::step, ::step] if step > 1 else frame

    def png_at(self, time_s: float) -> bytes:
        """The frame at ``time_s`` as PNG bytes (for an image widget)."""
        import imageio.v3 as iio

        buffer = io.BytesIO()
        iio.imwrite(buffer, self.frame_at(time_s), extension=".png")
        return buffer.getvalue()

    def close(self) -> None:
        if self._reader is not None:
            self._reader.close()
            self._reader = None
