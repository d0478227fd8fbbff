"""A session in pixels among calibrated ones is named before fitting (bundled simulated
example sessions, seed 0 of ``ethoscribe.simulate``; trimmed to 1500 frames each)."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from _example_study import EXAMPLES
from ethoscribe.clean import calibrate
from ethoscribe.errors import InputWarning
from ethoscribe.features import FeaturePipeline
from ethoscribe.features.scale_check import session_spreads, warn_scale_outliers
from ethoscribe.io import read_tidy

N_FRAMES = 1500
NAMES = ["session_01", "session_02", "session_09", "session_10"]


def _sessions(left_in_pixels: str | None = None):
    manifest = pd.read_csv(EXAMPLES / "manifest.csv").set_index("session")
    out = []
    for name in NAMES:
        t = read_tidy(EXAMPLES / f"{name}.parquet", fps=30.0, session=name)
        t = t.replace(coords=t.coords[:N_FRAMES], confidence=t.confidence[:N_FRAMES])
        if name == left_in_pixels:  # the manifest's px_per_unit forgotten: pixels read as mm
            out.append(t.replace(units="mm"))
        else:
            out.append(calibrate(t, float(manifest.loc[name, "px_per_unit"]), "mm"))
    return out, manifest


def test_the_spread_scales_with_the_camera_calibration():
    # Known answer: the same session in pixels and in mm differs by its px_per_unit exactly
    # (the simulator's camera scale, example_sessions/manifest.csv).
    mm, manifest = _sessions()
    px, _ = _sessions(left_in_pixels="session_02")
    ratio = session_spreads(px)["session_02"] / session_spreads(mm)["session_02"]
    assert ratio == pytest.approx(manifest.loc["session_02", "px_per_unit"], rel=1e-9)


def test_calibrated_sessions_pass_and_a_pixel_session_is_named():
    mm, _ = _sessions()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert warn_scale_outliers(mm) == []
    px, _ = _sessions(left_in_pixels="session_09")
    with pytest.warns(InputWarning, match=r"'session_09' \(2\.\d times.*px_per_unit"):
        assert warn_scale_outliers(px) == ["session_09"]


def test_two_sessions_are_not_compared():
    # Nothing tells which of two is off (random-walk test tracks differ by 3x), so no warning.
    px, _ = _sessions(left_in_pixels="session_09")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert warn_scale_outliers(px[1:3]) == []


def test_fitting_features_warns_unless_sizes_are_scaled():
    px, _ = _sessions(left_in_pixels="session_01")
    with pytest.warns(InputWarning, match="session_01"):
        FeaturePipeline().fit(px)
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputWarning)
        FeaturePipeline(scale_by_size=True).fit(px)


def test_sessions_without_a_complete_frame_are_left_out_of_the_comparison():
    mm, _ = _sessions()
    blank = mm[0].replace(coords=np.full_like(mm[0].coords, np.nan))
    assert np.isnan(session_spreads([blank, *mm[1:]])["session_01"])
    assert warn_scale_outliers([blank, *mm[1:]]) == []


def test_many_odd_sessions_are_counted_beyond_the_most_extreme():
    # A study of many short clips can flag dozens of sessions: the warning names the five
    # most extreme and counts the rest, instead of one long list.
    from ethoscribe.io import from_arrays

    rng = np.random.default_rng(0)
    body = rng.normal(size=(40, 4, 2))
    scales = [1.0] * 12 + [2.0 + i / 10 for i in range(8)]  # 8 sessions 2.0-2.7 times larger
    sessions = [
        from_arrays(body * k, keypoints=list("abcd"), fps=30, session=f"s{i:02d}")
        for i, k in enumerate(scales)
    ]
    with pytest.warns(InputWarning) as caught:
        odd = warn_scale_outliers(sessions)
    assert odd == [f"s{i:02d}" for i in range(12, 20)]
    text = str(caught[0].message)
    assert text.startswith("the animals of session(s) 's19' (2.7 times")  # the largest first
    assert "and 3 more of 20" in text and "'s14'" not in text
