"""Closed-loop labelling: one pose frame in, the current most probable state out.

``StreamingLabeller`` chains the causal cleaner, the causal feature stream and HMM forward
filtering of a fitted :class:`~ethoscribe.segment.model.BehaviourModel`. Frames that cannot be
scored (a keypoint lost, not enough history yet) return state -1 and do not advance the filter —
exactly as offline labelling stacks the valid frames back to back — so the streamed posteriors
equal offline forward filtering (:meth:`GaussianHMM.filter`) of the same session's valid frames.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ethoscribe.clean import StreamingCleaner
from ethoscribe.errors import InputError
from ethoscribe.segment.inputs import check_fitted
from ethoscribe.segment.registry import get_segmenter, segmenter_names


class LiveLabel(NamedTuple):
    """The label of one animal after a frame: state id (-1 if unscorable) and its probability."""

    state: int
    probability: float
    posterior: np.ndarray


class StreamingLabeller:
    """Label a session frame by frame with a fitted model (causal features, and a method that
    can filter frame by frame: ``streaming`` in the registry, the Gaussian HMM among built-ins).

    Parameters
    ----------
    model : fitted BehaviourModel
        Best fitted with ``causal=True`` (causal cleaning with a fixed speed bound, causal
        features, forward-filter labels): its offline labels (``model.label``) then equal the
        streamed ones on >= 99 % of frames (tests/test_streaming.py). At least it needs
        ``features={"causal": True}``, a streaming method, and a numeric ``max_speed`` in its
        cleaning (an automatic bound needs the whole recording).
    n_animals : int
        Animals per frame.

    Examples
    --------
    >>> live = StreamingLabeller(model)                         # doctest: +SKIP
    >>> [label] = live.push(coords_of_one_frame, confidence)     # doctest: +SKIP
    """

    def __init__(self, model, n_animals: int = 1) -> None:
        check_fitted(model, "segmenter_")
        spec = get_segmenter(model.method)
        if spec.streaming is None:
            live = [n for n in segmenter_names() if get_segmenter(n).streaming is not None]
            raise InputError(
                f"method {model.method!r} cannot label frames as they arrive; fit the model "
                f"with a method that can: {live}"
            )
        if not model.features_.causal:
            raise InputError(
                "this model's features look at future frames; fit it with "
                "features={'causal': True} to label frames as they arrive"
            )
        self.model = model
        self.n_animals = int(n_animals)
        self.cleaner = StreamingCleaner(
            model.cleaning_,
            model.keypoints_,
            model.fps_,
            n_animals=self.n_animals,
            n_dims=model.n_dims_,
            units=model.features_.units_,
        )
        self.features = model.features_.stream(self.n_animals)
        self.filters = [spec.live(model.segmenter_) for _ in range(self.n_animals)]

    def push(self, coords: np.ndarray, confidence: np.ndarray | None = None) -> list[LiveLabel]:
        """Add one frame ``coords (animals, keypoints, dims)``; return one label per animal."""
        cleaned = self.cleaner.push(coords, confidence)
        filler = getattr(self.model, "filler_", None)
        if filler is not None and not np.isfinite(cleaned).all():
            cleaned = np.stack([filler.transform(c[None])[0][0] for c in cleaned])
        rows = self.features.push(cleaned)
        out = []
        for row, live in zip(rows, self.filters, strict=True):
            if not np.isfinite(row).all():
                out.append(LiveLabel(-1, float("nan"), np.full(live.n_states, np.nan)))
                continue
            posterior = live.push(row)
            state = int(np.argmax(posterior))
            out.append(LiveLabel(state, float(posterior[state]), posterior))
        return out
