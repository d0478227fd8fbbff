"""Saving and rebuilding a fitted ``FeaturePipeline`` (JSON metadata + float arrays, no pickle)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

from ethoscribe.errors import InputError, listed
from ethoscribe.saved_state import check_header, header

if TYPE_CHECKING:
    from ethoscribe.features.pipeline import FeaturePipeline

KIND, FORMAT_VERSION = "ethoscribe.FeaturePipeline", 1
_FITTED_ARRAYS = (
    "log_offset_",
    "mean_posture_",
    "pca_mean_",
    "pca_components_",
    "explained_variance_",
    "explained_variance_ratio_",
    "scaler_mean_",
    "scaler_scale_",
)
_FITTED_META = (
    "origin_",
    "axis_",
    "axis_report_",
    "axis_details_",
    "keypoints_",
    "n_dims_",
    "units_",
    "fps_",
    "social_",
    "n_components_",
    "columns_",
    "frequencies_",
    "height_floor_",
    "body_size_",
    "up_sign_",
    "up_report_",
)
# Parameters added after the first saved states, with the value that reproduces those states
# (a later change of the default must not change what an old saved pipeline computes).
_ADDED_PARAMS = {
    "posture_window_s": None,
    "speed_window_s": None,
    "band_window_s": None,
    "vertical": "posture",
    "scale_by_size": False,
    "band_smoothing": "butterworth",
}


def pipeline_state(pipe: FeaturePipeline) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """JSON-able parameters and fitted metadata, plus the fitted arrays (no pickle)."""
    pipe._check_fitted()
    params = pipe.get_params()
    if pipe.frequencies is not None:
        params["frequencies"] = [float(f) for f in pipe.frequencies]
    params["axis"] = None if pipe.axis is None else list(pipe.axis)
    fitted = {k: getattr(pipe, k) for k in _FITTED_META}
    for k in ("axis_", "keypoints_", "columns_", "frequencies_"):
        fitted[k] = list(fitted[k])
    meta = {**header(KIND, FORMAT_VERSION), "params": params, "fitted": fitted}
    arrays = {k: np.array(getattr(pipe, k), dtype=np.float64) for k in _FITTED_ARRAYS}
    return meta, arrays


def pipeline_from_state(
    cls: type[FeaturePipeline], meta: Mapping[str, Any], arrays: Mapping[str, np.ndarray]
) -> FeaturePipeline:
    """Rebuild a fitted pipeline from ``to_state`` output."""
    # Saved before the shared header: {"estimator": "FeaturePipeline", "version": ...}.
    check_header(meta, KIND, FORMAT_VERSION, "FeaturePipeline state", {"estimator": KIND[11:]})
    try:
        params = dict(meta["params"])
        fitted = dict(meta["fitted"])
        arrays = dict(arrays)
        if "feature_set" not in params:  # saved before feature sets: the detailed one
            params["feature_set"] = "detailed"
            arrays.setdefault("log_offset_", np.zeros(len(fitted["columns_"])))
        for k, v in _ADDED_PARAMS.items():
            params.setdefault(k, v)
        if "frequencies_" not in fitted:  # saved before automatic bands: the given list
            fitted["frequencies_"] = list(params.get("frequencies", []))
        fitted.setdefault("height_floor_", None)
        fitted.setdefault("body_size_", None)
        fitted.setdefault("up_sign_", 1)  # saved before the vertical's direction was read
        fitted.setdefault("up_report_", "")
        missing = [k for k in (*_FITTED_META,) if k not in fitted]
        missing += [k for k in _FITTED_ARRAYS if k not in arrays]
    except (KeyError, TypeError) as exc:
        raise InputError(f"not a FeaturePipeline state (missing {exc})") from None
    if missing:
        raise InputError(f"FeaturePipeline state lacks {missing}; save it again with to_state()")
    unknown = sorted(set(params) - set(cls._get_param_names()))
    if unknown:
        raise InputError(
            f"FeaturePipeline state: unknown parameters {listed(map(repr, unknown))}; valid: "
            f"{cls._get_param_names()}"
        )
    for k in ("frequencies", "axis"):  # saved as JSON lists
        if isinstance(params.get(k), list):
            params[k] = tuple(params[k])
    pipe = cls(**params)
    pipe._check_params()  # InputError naming each bad parameter
    _check_fitted_meta(fitted)
    needs = {
        "height_floor_": params.get("vertical") == "separate" and fitted["n_dims_"] == 3,
        "body_size_": bool(params.get("scale_by_size")),
    }
    lacking = [k for k, needed in needs.items() if needed and fitted[k] is None]
    if lacking:
        raise InputError(
            f"FeaturePipeline state lacks {lacking} for its parameters (vertical="
            f"{params.get('vertical')!r}, scale_by_size={params.get('scale_by_size')!r}); "
            "save it again with to_state()"
        )
    for k in ("axis_", "keypoints_", "columns_"):
        fitted[k] = tuple(fitted[k])
    fitted["frequencies_"] = tuple(float(f) for f in fitted["frequencies_"])
    for k, v in fitted.items():
        setattr(pipe, k, v)
    try:
        for k in _FITTED_ARRAYS:
            setattr(pipe, k, np.array(arrays[k], dtype=np.float64))
    except (TypeError, ValueError) as exc:
        raise InputError(f"FeaturePipeline state: arrays must hold numbers ({exc})") from None
    n, m = len(pipe.columns_), pipe.n_components_
    n_kp, n_dims = len(pipe.keypoints_), pipe.n_dims_
    shapes = {
        "scaler_mean_": (n,), "scaler_scale_": (n,), "log_offset_": (n,),
        "pca_mean_": (n_kp * n_dims,), "pca_components_": (m, n_kp * n_dims),
        "explained_variance_": (m,), "mean_posture_": (n_kp, n_dims),
    }  # fmt: skip
    wrong = [
        f"{k} {getattr(pipe, k).shape} (expected {shape})"
        for k, shape in shapes.items()
        if getattr(pipe, k).shape != shape
    ]
    if wrong:
        raise InputError(
            "FeaturePipeline state is inconsistent: array shapes do not match the columns, "
            f"keypoints and components: {'; '.join(wrong)}"
        )
    return pipe


def _check_fitted_meta(fitted: Mapping[str, Any]) -> None:
    """Types of the saved fitted fields of a FeaturePipeline (an InputError names each)."""

    def names(v: Any) -> bool:
        return isinstance(v, list | tuple) and all(isinstance(x, str) for x in v)

    kps = fitted["keypoints_"]
    n_comp, fps = fitted["n_components_"], fitted["fps_"]
    rules = {
        "keypoints_": names(kps) and len(kps) >= 2 and len(set(kps)) == len(kps),
        "columns_": names(fitted["columns_"]) and len(fitted["columns_"]) >= 1,
        "axis_": names(fitted["axis_"]) and len(fitted["axis_"]) == 2,
        "origin_": fitted["origin_"] is None or isinstance(fitted["origin_"], str),
        "axis_report_": isinstance(fitted["axis_report_"], str),
        "axis_details_": isinstance(fitted["axis_details_"], Mapping),
        "n_dims_": fitted["n_dims_"] in (2, 3) and not isinstance(fitted["n_dims_"], bool),
        "units_": isinstance(fitted["units_"], str),
        "social_": isinstance(fitted["social_"], bool | np.bool_),
        "frequencies_": isinstance(fitted["frequencies_"], list | tuple)
        and all(
            isinstance(f, int | float) and not isinstance(f, bool) and 0 < f < np.inf
            for f in fitted["frequencies_"]
        ),
        "body_size_": fitted["body_size_"] is None
        or (
            isinstance(fitted["body_size_"], int | float)
            and not isinstance(fitted["body_size_"], bool)
            and 0 < fitted["body_size_"] < np.inf
        ),
        "up_sign_": fitted["up_sign_"] in (1, -1) and not isinstance(fitted["up_sign_"], bool),
        "up_report_": isinstance(fitted["up_report_"], str),
        "height_floor_": fitted["height_floor_"] is None
        or (
            isinstance(fitted["height_floor_"], int | float)
            and not isinstance(fitted["height_floor_"], bool)
            and np.isfinite(fitted["height_floor_"])
        ),
        "n_components_": isinstance(n_comp, int | np.integer)
        and not isinstance(n_comp, bool)
        and 0 <= n_comp <= 100_000,  # 0: a rigid body (no posture, motion only)
        "fps_": fps is None
        or (
            isinstance(fps, int | float | np.number)
            and not isinstance(fps, bool)
            and 0 < fps <= 1e6
        ),
    }
    bad = [k for k, ok in rules.items() if not ok]
    if not bad and isinstance(kps, list | tuple):
        named = [*fitted["axis_"], *([fitted["origin_"]] if fitted["origin_"] else [])]
        bad = (
            [f"axis_/origin_ (names {named} not all in keypoints_)"]
            if set(named) - set(kps)
            else []
        )
    if bad:
        shown = ", ".join(f"{k}={fitted.get(k)!r:.60}" for k in bad if k in fitted) or bad[0]
        raise InputError(
            f"FeaturePipeline state has fields of the wrong type or value: {shown}; save it "
            "again with to_state()"
        )
