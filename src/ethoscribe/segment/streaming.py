"""Closed-loop labelling: one pose frame in, the current most probable state out.

``StreamingLabeller`` chains the causal cleaner, the causal feature stream and HMM forward
filtering of a fitted :class:`~ethoscribe.segment.model.BehaviourModel`. Frames that cannot be
scored (a keypoint lost, not enough history yet) return state -1 and do not advance the filter —
exactly as offline labelling stacks the valid frames back to back — so the streamed posteriors
equal offline forward filtering (:meth:`GaussianHMM.filter`) of the same session's valid frames.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import replace
from typing import NamedTuple

import numpy as np

from ethoscribe.clean import StreamingCleaner
from ethoscribe.errors import InputError, InputWarning
from ethoscribe.features.view_check import lift_side_coords
from ethoscribe.pose import PAD_SHARE, enough_keypoints
from ethoscribe.segment.inputs import check_fitted
from ethoscribe.segment.registry import get_segmenter, segmenter_names

# The streamed frames are checked once against the model's poor-fit threshold (the 1st
# percentile of its training frames' best-state log-likelihood, as ``fit_shares`` reads it for
# a labelled session): after POOR_FIT_CHECK_S seconds of scored frames, a warning when more
# than half fall below it, i.e. the typical frame fits worse than 99 % of the training frames.
# Measured (a 4-state causal model of one simulated 60-s session, four 40-s sessions streamed):
# new sessions of the same simulator 1-18 % below it, the same frames twice or five times
# larger (pixels read as mm) 96-100 %. Offline flagging (fit_shares) uses 10 % per session.
POOR_FIT_CHECK_S = 10.0
POOR_FIT_STREAM_SHARE = 0.5


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
    keypoints : sequence of str, optional
        Names of the keypoints in the order the pushed frames hold them (a tracker's own
        order); others are ignored. A model keypoint missing from them is taken as never seen
        (one warning), as offline for a session lacking it: allowed when the tracker has at
        least ``PAD_SHARE`` (60 %) of the model's keypoints and the model fills lost ones
        (``min_body_seen``, the default); its frames are scored from the others. Default: the
        model's order (``model.keypoints_``).
    units : str, optional
        Units of the pushed coordinates: ``"px"``, ``"mm"``, ``"cm"`` or ``"m"``. Default: the
        units the model was fitted in (``model.features_.units_``). Pixels for a model fitted
        in physical units need ``px_per_unit``.
    px_per_unit : float, optional
        Pixels per unit of the model's cleaning (``model.cleaning_.unit``) for pixel frames:
        the camera's calibration, as ``px_per_unit`` in a manifest.

    Attributes
    ----------
    poorly_explained : (int, int)
        Scored frames so far (all animals) and how many of them the model explains poorly
        (best-state log-likelihood below ``model.poor_fit_threshold_``, which about 1 % of its
        training frames are). After ``POOR_FIT_CHECK_S`` seconds of scored frames one
        :class:`~ethoscribe.errors.InputWarning` is given when more than half are: frames in
        other units or another calibration, keypoints in another order, another animal or
        camera than the model was fitted on (the labels are then not to be trusted). Not
        counted (0, 0) for a model with per-session offsets (fit it with ``causal=True``).

    Examples
    --------
    >>> live = StreamingLabeller(model)                         # doctest: +SKIP
    >>> [label] = live.push(coords_of_one_frame, confidence)     # doctest: +SKIP
    >>> live = StreamingLabeller(model, keypoints=tracker_names, units="px", px_per_unit=2.5)
    ... # doctest: +SKIP
    """

    def __init__(
        self,
        model,
        n_animals: int = 1,
        keypoints: Sequence[str] | None = None,
        units: str | None = None,
        px_per_unit: float | None = None,
    ) -> None:
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
        fills = getattr(model, "filler_", None) is not None
        self._order = _keypoint_order(model.keypoints_, keypoints, fills)
        self.n_keypoints_in = len(model.keypoints_) if keypoints is None else len(keypoints)
        fitted_units = model.features_.units_
        units = fitted_units if units is None else units
        if px_per_unit is None and units == "px":
            px_per_unit = model.cleaning_.px_per_unit  # the fitting's own calibration, if any
        self.cleaner = StreamingCleaner(
            replace(model.cleaning_, px_per_unit=px_per_unit if units == "px" else None),
            model.keypoints_,
            model.fps_,
            n_animals=self.n_animals,
            n_dims=model.n_dims_,
            units=units,
            # held points: a causal fit keeps the rule only where its repeats were no chance
            held=bool(model.causal and model.cleaning_.mask_held),
        )
        if self.cleaner.units != fitted_units:
            fix = (
                f"give px_per_unit (pixels per {model.cleaning_.unit}, the camera's calibration)"
                if self.cleaner.units == "px"
                else f"push pixel frames without px_per_unit, or frames in {fitted_units!r}"
            )
            msg = (
                f"the model was fitted on coordinates in {fitted_units!r} but the pushed frames "
                f"would be cleaned into {self.cleaner.units!r}: {fix}"
            )
            raise InputError(msg)
        self.features = model.features_.stream(self.n_animals)
        self.filters = [spec.live(model.segmenter_) for _ in range(self.n_animals)]
        # A model with per-session offsets sets its threshold on frames minus their session's
        # offset, which the causal path does not take off: no comparable threshold then.
        offsets = bool(getattr(model.segmenter_, "session_offsets", False))
        self._threshold = None if offsets else getattr(model, "poor_fit_threshold_", None)
        self.poorly_explained = (0, 0)
        self._checked = self._threshold is None
        # a side-view model's frames are lifted as its sessions were (vertical, flip)
        side = getattr(model, "view_", "above") == "side"
        self._lift = (model.view_vertical_, model.view_flip_) if side else None

    def push(self, coords: np.ndarray, confidence: np.ndarray | None = None) -> list[LiveLabel]:
        """Add one frame ``coords (animals, keypoints, dims)``; return one label per animal.

        ``keypoints`` are in the order given to the constructor (default: the model's).
        """
        if self._order is not None:
            coords, confidence = self._reordered(coords, confidence)
        cleaned = self.cleaner.push(coords, confidence)
        if self._lift is not None:
            cleaned = lift_side_coords(cleaned, *self._lift)
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
            self._count_fit(getattr(live, "best_log_likelihood", None))
        return out

    def _count_fit(self, best: float | None) -> None:
        """Count a scored frame against the poor-fit threshold; warn once (class doc)."""
        if self._threshold is None or best is None or not np.isfinite(best):
            return
        n, poor = self.poorly_explained
        n, poor = n + 1, poor + int(best < self._threshold)
        self.poorly_explained = (n, poor)
        if self._checked or n < POOR_FIT_CHECK_S * self.model.fps_ * self.n_animals:
            return
        self._checked = True
        share = poor / n
        if share > POOR_FIT_STREAM_SHARE:
            warnings.warn(
                f"the model explains {share:.0%} of the first {n} streamed frames poorly "
                f"(about 1 % of its training frames are): check the units and calibration "
                f"(units=, px_per_unit=; the model is in {self.model.features_.units_!r}), the "
                "keypoint order (keypoints=), and that the animal and camera are like those "
                "the model was fitted on; until then the labels are not to be trusted",
                InputWarning,
                stacklevel=3,
            )

    def _reordered(
        self, coords: np.ndarray, confidence: np.ndarray | None
    ) -> tuple[np.ndarray, np.ndarray | None]:
        x = np.asarray(coords, dtype=np.float64)
        if x.ndim != 3 or x.shape[1] != self.n_keypoints_in:
            msg = (
                f"frame {self.cleaner.n_frames_seen}: coords must have shape (animals, "
                f"{self.n_keypoints_in} keypoints as given in keypoints=, dims); got {x.shape}"
            )
            raise InputError(msg)
        if confidence is not None:
            c = np.asarray(confidence, dtype=np.float64)
            if c.ndim != 2 or c.shape[1] != self.n_keypoints_in:
                msg = (
                    f"frame {self.cleaner.n_frames_seen}: confidence must have shape (animals, "
                    f"{self.n_keypoints_in}); got {c.shape}"
                )
                raise InputError(msg)
            confidence = np.where(self._order >= 0, c[:, self._order], 0.0)
        absent = self._order < 0  # a model keypoint the tracker lacks: never seen
        return np.where(absent[None, :, None], np.nan, x[:, self._order]), confidence


def _keypoint_order(
    model_keypoints: Sequence[str], given: Sequence[str] | None, fills: bool = False
) -> np.ndarray | None:
    """Indices taking the pushed keypoints to the model's order (None: already in it); -1
    for a model keypoint the tracker lacks, allowed when the model ``fills`` lost keypoints
    and the tracker has at least ``PAD_SHARE`` of the model's (as for a session read offline)."""
    if given is None:
        return None
    if isinstance(given, str):
        raise InputError(f"keypoints must be a list of names; got the string {given!r}")
    given = [str(k) for k in given]
    if len(set(given)) != len(given):
        twice = sorted({k for k in given if given.count(k) > 1})
        raise InputError(f"keypoints names {twice} more than once; each keypoint once")
    missing = [k for k in model_keypoints if k not in given]
    have = len(model_keypoints) - len(missing)
    if missing and not (fills and enough_keypoints(have, len(model_keypoints))):
        why = (
            "a model without a keypoint filler (min_body_seen=None) needs every one"
            if not fills
            else f"a tracker lacking some is labelled only with at least "
            f"{PAD_SHARE * 100:.0f} % of them ({have} of {len(model_keypoints)} given)"
        )
        msg = (
            f"the pushed frames lack the model's keypoints {missing} (given {given}); the model "
            f"needs {list(model_keypoints)} ({why}): map the tracker's names onto these"
        )
        raise InputError(msg)
    if missing:
        warnings.warn(
            f"the pushed frames lack the model's keypoints {missing}: taken as never seen, "
            "and frames are scored from the others (the model's posture fill), as a session "
            "lacking them is labelled offline",
            InputWarning,
            stacklevel=3,
        )
    order = np.array([given.index(k) if k in given else -1 for k in model_keypoints], np.intp)
    return None if list(order) == list(range(len(given))) else order
