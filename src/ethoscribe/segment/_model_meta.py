"""Checks of a saved behaviour model's summary fields, before anything is rebuilt from them.

A ``model.json`` may come from a colleague, by e-mail: every field is checked for type, range
and known keys, and one :class:`~ethoscribe.errors.InputError` lists every problem by name.
"""

from __future__ import annotations

import inspect
from collections.abc import Iterable, Mapping
from typing import Any

from ethoscribe.checks import int_between, is_real
from ethoscribe.errors import InputError, listed
from ethoscribe.features import FeaturePipeline
from ethoscribe.segment.registry import get_segmenter, segmenter_names, spec_of_estimator

RESAVE = (
    "The file was edited by hand, is damaged or comes from another program; save the model "
    "again from its workspace (or refit it)."
)
MAX_SAVED_STATES = 1000  # more states than anyone names: a damaged or hostile file
MAX_SAVED_FPS = 1e6  # frames per second; beyond any camera, so a damaged number


def _show(v: Any) -> str:
    """Short repr of a found value (a hostile file may hold a 5000-digit number)."""
    text = repr(v)
    return text if len(text) <= 60 else text[:57] + "..."


def known_keys(obj: Any) -> set[str]:
    return {n for n in inspect.signature(obj.__init__).parameters if n != "self"}


def _check_params_meta(params: Any, model_keys: Iterable[str]) -> list[str]:
    """Problems of the saved constructor parameters ``meta['params']``."""
    if not isinstance(params, Mapping):
        return [f"'params' must be an object of BehaviourModel parameters, got {_show(params)}"]
    problems = []
    unknown = sorted(set(params) - set(model_keys))
    if unknown:
        problems.append(f"'params' has unknown keys {listed(map(repr, unknown))}")
    method = params.get("method", "hmm")
    methods = segmenter_names()
    if not isinstance(method, str) or method not in methods:
        problems.append(f"'params.method' must be one of {list(methods)}, got {_show(method)}")
    n = params.get("n_states", "auto")
    if n != "auto" and not int_between(n, 1, MAX_SAVED_STATES):
        problems.append(
            f"'params.n_states' must be 'auto' or an integer from 1 to {MAX_SAVED_STATES}, "
            f"got {_show(n)}"
        )
    rng = params.get("state_range", (3, 12))
    if (
        not isinstance(rng, list | tuple)
        or len(rng) != 2
        or not all(int_between(v, 1, MAX_SAVED_STATES) for v in rng)
        or rng[0] > rng[1]
    ):
        problems.append(
            f"'params.state_range' must be [low, high] with 1 <= low <= high <= "
            f"{MAX_SAVED_STATES}, got {_show(rng)}"
        )
    bout = params.get("min_bout_s", 0.5)
    if not is_real(bout) or bout < 0:
        problems.append(f"'params.min_bout_s' must be a number >= 0 seconds, got {_show(bout)}")
    decoding = params.get("decoding", "merge")
    if decoding not in ("min_duration", "merge"):
        problems.append(
            f"'params.decoding' must be 'min_duration' or 'merge', got {_show(decoding)}"
        )
    seen = params.get("min_body_seen", 0.6)
    if seen is not None and (not is_real(seen) or not 0 < seen <= 1):
        problems.append(
            f"'params.min_body_seen' must be a fraction in (0, 1] or null, got {_show(seen)}"
        )
    filled = params.get("filled_frames", "as_seen")
    if filled not in ("as_seen", "shape_left_out"):
        problems.append(
            f"'params.filled_frames' must be 'as_seen' or 'shape_left_out', got {_show(filled)}"
        )
    seed = params.get("random_state", 0)
    if seed is not None and not int_between(seed, 0, 2**63 - 1):
        problems.append(f"'params.random_state' must be an integer >= 0, got {_show(seed)}")
    if not isinstance(params.get("progress", False), bool):
        problems.append(f"'params.progress' must be true or false, got {_show(params['progress'])}")
    for name in ("cleaning", "features", "segmenter"):
        value = params.get(name)
        if value is not None and not isinstance(value, Mapping):
            problems.append(f"'params.{name}' must be an object or null, got {_show(value)}")
    features = params.get("features")
    if isinstance(features, Mapping):
        # "view" is read by BehaviourModel itself (2-D tracks filmed from the side)
        unknown = sorted(set(features) - known_keys(FeaturePipeline) - {"view"})
        if unknown:
            shown = listed(map(repr, unknown))
            problems.append(f"'params.features' has unknown FeaturePipeline options {shown}")
    segmenter = params.get("segmenter")
    if isinstance(segmenter, Mapping) and isinstance(method, str) and method in methods:
        spec = get_segmenter(method)
        cls = spec.cls
        # Options the model sets itself: a saved duplicate could not be refitted.
        bad = sorted((set(segmenter) - known_keys(cls)) | (set(segmenter) & spec.reserved))
        if bad:
            problems.append(
                f"'params.segmenter' has options {listed(map(repr, bad))} that {cls.__name__} "
                "does not take "
                "from there"
            )
    return problems


def _check_selection_meta(selection: Any) -> list[str]:
    if selection is None:
        return []
    if not isinstance(selection, Mapping):
        return [f"'selection' must be an object or null, got {_show(selection)}"]
    problems = []
    if not int_between(selection.get("best"), 1, MAX_SAVED_STATES):
        problems.append(
            f"'selection.best' must be an integer from 1 to {MAX_SAVED_STATES}, "
            f"got {_show(selection.get('best'))}"
        )
    if not isinstance(selection.get("criterion", ""), str):
        problems.append(f"'selection.criterion' must be text, got {_show(selection['criterion'])}")
    table = selection.get("table", {})
    columns_ok = isinstance(table, Mapping) and all(
        isinstance(k, str) and isinstance(v, list) for k, v in table.items()
    )
    if not columns_ok or len({len(v) for v in table.values()}) > 1:
        problems.append("'selection.table' must be an object of equally long column lists")
    return problems


def check_meta(meta: Mapping[str, Any], model_keys: Iterable[str]) -> None:
    """Refuse a saved model whose summary fields have the wrong type or an absurd value.

    The nested parts (``features``, ``segmenter``) are checked by their own ``from_state``;
    here only that they are objects. One ``InputError`` lists every problem found.
    """
    required = (
        "params", "cleaning", "features", "segmenter_kind", "segmenter", "n_states", "fps",
        "keypoints", "n_dims", "training_sessions", "n_training_frames", "selection",
    )  # fmt: skip
    missing = [k for k in required if k not in meta]
    if missing:
        raise InputError(f"the model file (model.json) lacks the fields {missing}. {RESAVE}")
    problems = _check_params_meta(meta["params"], model_keys)
    if meta.get("filler") is not None and not isinstance(meta["filler"], Mapping):
        problems.append(f"'filler' must be an object or null, got {_show(meta['filler'])}")
    for name in ("cleaning", "features", "segmenter"):
        if not isinstance(meta[name], Mapping):
            problems.append(f"'{name}' must be an object, got {_show(meta[name])}")
    kind = meta["segmenter_kind"]
    if not isinstance(kind, str) or not spec_of_estimator(kind):
        known = sorted({get_segmenter(m).cls.__name__ for m in segmenter_names()})
        problems.append(
            f"unknown segmenter kind {_show(kind)} ('segmenter_kind' must be one of {known})"
        )
    if not int_between(meta["n_states"], 1, MAX_SAVED_STATES):
        problems.append(
            f"'n_states' must be an integer from 1 to {MAX_SAVED_STATES}, "
            f"got {_show(meta['n_states'])}"
        )
    fps = meta["fps"]
    if not is_real(fps) or not 0 < fps <= MAX_SAVED_FPS:
        problems.append(
            f"'fps' must be a number of frames per second in (0, {MAX_SAVED_FPS:g}], "
            f"got {_show(fps)}"
        )
    kps = meta["keypoints"]
    if (
        not isinstance(kps, list | tuple)
        or len(kps) < 2
        or not all(isinstance(k, str) and k for k in kps)
        or len(set(kps)) != len(kps)
    ):
        problems.append(
            f"'keypoints' must be a list of at least 2 distinct keypoint names, got {_show(kps)}"
        )
    if meta["n_dims"] not in (2, 3) or isinstance(meta["n_dims"], bool):
        problems.append(f"'n_dims' must be 2 or 3, got {_show(meta['n_dims'])}")
    sessions = meta["training_sessions"]
    if not isinstance(sessions, list | tuple) or not all(isinstance(s, str) for s in sessions):
        problems.append(
            f"'training_sessions' must be a list of session names, got {_show(sessions)}"
        )
    if not int_between(meta["n_training_frames"], 0, 2**63 - 1):
        problems.append(
            f"'n_training_frames' must be an integer >= 0, got {_show(meta['n_training_frames'])}"
        )
    problems += _check_selection_meta(meta["selection"])
    if problems:
        raise InputError(
            "the model file (model.json) is not valid: " + "; ".join(problems) + f". {RESAVE}"
        )
