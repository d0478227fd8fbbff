"""Cleaning of keypoint tracks: calibrate, mask, repair, fill, smooth, resample.

Every step is a pure function on arrays ``coords (frames, animals, keypoints, dims)`` (NaN =
missing) with parameters in seconds and physical units, never frames. ``clean`` runs them in this
order, for these reasons:

1. calibrate - every threshold below (speed, distances) is then in physical units;
2. mask low confidence - unreliable points must not become references for the speed test;
3. mask jumps - an outlier kept as "last position" would mislead the swap choice (the speed test
   accepts a point that lands where its left/right partner was: that is a swap, not a jump);
4. repair swaps - before filling, or interpolation would draw paths across the body;
5. fill gaps - short gaps only; smoothing then runs over uninterrupted stretches;
6. smooth - at the recorded rate, where noise is independent from frame to frame;
7. resample - last, so every earlier step works on measured frames.

Nothing is invented in a gap longer than ``max_gap_s``: those points stay NaN and their frames
are flagged invalid in the ``QualityReport``. ``causal=True`` (and ``StreamingCleaner``) use only
past frames, for closed-loop use.
"""

from __future__ import annotations

from ethoscribe.clean.params import CleanParams
from ethoscribe.clean.pipeline import (
    StreamingCleaner,
    clean,
    cleaned_again,
    streaming_cleaning,
)
from ethoscribe.clean.report import QualityReport
from ethoscribe.clean.steps import (
    calibrate,
    estimate_max_speed,
    fill_gaps,
    mask_jumps,
    mask_low_confidence,
    repair_swaps,
    resample,
    smooth,
)

__all__ = [
    "CleanParams",
    "QualityReport",
    "StreamingCleaner",
    "calibrate",
    "clean",
    "cleaned_again",
    "estimate_max_speed",
    "fill_gaps",
    "mask_jumps",
    "mask_low_confidence",
    "repair_swaps",
    "resample",
    "smooth",
    "streaming_cleaning",
]
