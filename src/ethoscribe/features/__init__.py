"""Egocentric posture and movement features: ``PoseTracks`` in, one ``FeatureSet`` per animal out.

Per frame, each animal's keypoints are put in its own body frame (origin at a keypoint or the
centroid; x along the tail-to-head axis; in 3-D heights kept). Postures are projected on
principal components fitted over all sessions; speeds are in the tracks' units per second;
band amplitudes describe rhythm; with several animals, social features describe the nearest
other animal.

Two column sets (``<u>`` = the tracks' units, e.g. ``cm``). ``feature_set="compact"``
(default), for segmentation::

    posture_pc<i>                       egocentric posture on principal component i
    log_centroid_speed_<u>_s            log(speed of the keypoint centroid + c)
    log_turning_speed_rad_s             log(|turning rate of the body axis| + c)
    log_posture_speed_<u>_s             log(speed of the posture in component space + c)
    log_posture_band_<f>hz              log(RMS amplitude of the whole posture, summed over the
                                        components, in the one-octave band around f Hz + c)

Band centres: by default 0.5, 1, 2, 4 and 8 Hz, those whose band ends at or below 95 % of the
Nyquist frequency (all from 24 fps; 0.5-2 Hz at 10 fps; ``frequencies_``). In 3-D, by default
(``vertical="separate"``), postures are the body's shape (the centroid's height taken off
every keypoint), with two more columns::

    height_<u>                          height of the centroid above the floor (its 1 % quantile)
    log_vertical_speed_<u>_s            log(|vertical speed of the centroid| + c)

and the centroid speed is horizontal (``vertical="posture"`` keeps heights in the posture).
Options (off by default): ``posture_window_s`` / ``speed_window_s`` replace the posture
components / speeds by their average over about that many seconds (``..._mean_<w>s``: one
level for every phase of a rhythm); ``band_window_s`` averages the band powers over about
that many seconds as well; ``scale_by_size=True`` brings every animal's posture to
the typical body size (individuals of several sizes share one posture space);
``band_smoothing="critically_damped"`` smooths the band powers with a low-pass
that never undershoots, so they do not fall to exactly 0 after a burst.
benchmarks/README.md has the validation bench with each option.

Why: a Gaussian HMM models each state by a mean and a covariance, so every column should be
informative, low in noise and roughly Gaussian within a behaviour. Speeds and amplitudes are
skewed over orders of magnitude (still 1-5 mm/s, walking 100-300 mm/s); their logarithm is
close to Gaussian within a behaviour, and the offset ``c`` (``log_offset_``, the 5 % quantile
over the fitted frames, about the tracking-noise floor) keeps noise at rest from spreading
over many log units (for a speed whose quantile is float rounding, positions repeated exactly
on many frames, it is the quantile of the frames that move). One amplitude per band for the
whole posture finds a rhythm in whichever component it lives. On the simulated example
study this set (16 columns) gave an adjusted Rand index with the truth of 0.84 against 0.67
for the detailed set (41 columns; the same 7-state HMM), and an EM iteration cost 3.6x less.
Signed velocities (zero mean in every behaviour, heavy tails when walking) and one speed per
keypoint (dominated by tracking jitter) are left out: with them walking was split in two and
resting, scanning and freezing merged.

``feature_set="detailed"``, for inspection and custom models (linear units)::

    posture_pc<i>                       egocentric posture on principal component i
    centroid_speed_<u>_s                speed of the keypoint centroid
    forward_velocity_<u>_s, lateral_velocity_<u>_s   centroid velocity in the body frame
    heading_velocity_rad_s              turning rate of the body axis
    <keypoint>_ego_speed_<u>_s          keypoint speed in the body frame (origin keypoint left out)
    height_<keypoint>_<u>               3-D only: coordinate along the vertical axis
    posture_pc<i>_band_<f>hz            RMS amplitude of pc i in the one-octave band around f Hz
    posture_pc<i>_std_<w>s, centroid_speed_<u>_s_std_<w>s   rolling std over w seconds

Social columns (both sets; the three distances log-transformed in the compact set)::

    dist_to_nearest_<u>, head_to_nearest_body_<u>, nearest_head_to_body_<u>,
    facing_nearest_cos/_sin, nearest_heading_cos/_sin, nearest_approach_speed_<u>_s

Social columns describe the nearest other animal (by centroid), so sessions whose animals have
other ids still share one column set.
"""

from __future__ import annotations

from ethoscribe.features.motion import FeatureStream
from ethoscribe.features.pipeline import LOG_OFFSET_QUANTILE, FeaturePipeline
from ethoscribe.features.sets import FeatureSet

__all__ = ["LOG_OFFSET_QUANTILE", "FeaturePipeline", "FeatureSet", "FeatureStream"]
