"""The segmenters ``BehaviourModel`` can use, registered by plain name with what each supports.

A segmenter is an estimator with ``fit(X, lengths)``, ``predict(X, lengths)``,
``predict_proba(X, lengths)`` (state posteriors, or hard 0/1 rows where it has none), the fitted
``n_states_`` and ``n_features_in_``, ``get_params()`` and ``to_state()`` / ``from_state()``
(JSON-able metadata plus arrays, no pickle). Many sessions go in as one stacked matrix plus
``lengths`` (see :mod:`ethoscribe.segment.inputs`).

``BehaviourModel``, the checks of a saved model, the state-count choice, the stability report,
the streaming labeller and the command line read this registry, so a new method is one file
(its estimator) plus one :func:`register` line (below, or in a plugin's entry point of group
``ethoscribe.segmenters`` naming a :class:`SegmenterSpec`, so that worker processes find it too).

Examples
--------
>>> segmenter_names()[:2]
('hmm', 'changepoint')
>>> get_segmenter("hmm").auto_states
'heldout'
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from importlib.metadata import entry_points
from types import MappingProxyType
from typing import Any, Protocol

import numpy as np

from ethoscribe.errors import InputError

ENTRY_POINT_GROUP = "ethoscribe.segmenters"
AUTO_STATES = ("heldout", "own")


class Segmenter(Protocol):
    """What a registered segmenter provides (scikit-learn conventions)."""

    n_states_: int
    n_features_in_: int

    def fit(self, X: np.ndarray, lengths: np.ndarray | None = None) -> Segmenter: ...
    def predict(self, X: np.ndarray, lengths: np.ndarray | None = None) -> np.ndarray: ...
    def predict_proba(self, X: np.ndarray, lengths: np.ndarray | None = None) -> np.ndarray: ...
    def get_params(self, deep: bool = True) -> dict[str, Any]: ...
    def to_state(self) -> tuple[dict[str, Any], dict[str, np.ndarray]]: ...


def _resolve(target: str | Any) -> Any:
    """``"package.module:Name"`` imported on first use (keeps ``--help`` fast), or the object."""
    if not isinstance(target, str):
        return target
    module, _, name = target.partition(":")
    return getattr(importlib.import_module(module), name)


@dataclass(frozen=True)
class SegmenterSpec:
    """One registered segmentation method.

    Parameters
    ----------
    name : str
        The method's plain name (``BehaviourModel(method=name)``, ``--method name``).
    estimator : class or "module:Class"
        The segmenter class (a string is imported on first use).
    summary : str
        One line for help texts.
    state_param : str
        Constructor parameter that takes the number of states.
    options : mapping
        Constructor options this method sets (the user's ``segmenter`` options override them).
    auto_states : {"heldout", "own"} or None
        How ``n_states="auto"`` is resolved: "heldout" by the held-out likelihood of quick fits
        (:func:`ethoscribe.segment.select.choose_n_states`; the estimator needs
        ``score``/``score_per_session``/``n_parameters``), "own" by the segmenter itself (it is
        given "auto"), None: a number of states is required.
    max_states_param : str or None
        Constructor parameter that receives the top of ``BehaviourModel.state_range``.
    min_states_param : str or None
        Constructor parameter that receives the bottom of ``BehaviourModel.state_range``.
    quick_options : mapping
        Options of the quick candidate fits of ``auto_states="heldout"`` (less effort: the
        count is read from the shape of the curve, then fitted in full).
    stability : bool
        Whether refits with other seeds and on halves of the sessions make sense (the
        stability report); ``stability_options`` are set on those refits. They are fitted
        as the model is (a cheaper refit measures less agreement than there is: see
        benchmarks/README.md, "Is the stability check a fair measurement?"), so these are
        display options only.
    posteriors : bool
        True when ``predict_proba`` gives real posteriors; False: labels carry probability 1.
    streaming : callable or "module:function" or None
        Makes a frame-by-frame filter from a fitted segmenter (``push(row) -> posterior``,
        ``n_states``); None: no live labelling.
    warm_start : bool
        With ``auto_states="heldout"``: the estimator's ``fit(X, lengths, init_models=...)``
        starts from fitted models of the same count (the quick fits of the chosen count).
    """

    name: str
    estimator: Any
    summary: str = ""
    state_param: str = "n_states"
    options: Mapping[str, Any] = field(default_factory=dict)
    auto_states: str | None = None
    max_states_param: str | None = None
    min_states_param: str | None = None
    quick_options: Mapping[str, Any] = field(default_factory=dict)
    stability: bool = True
    stability_options: Mapping[str, Any] = field(default_factory=dict)
    posteriors: bool = False
    streaming: Callable[[Any], Any] | str | None = None
    warm_start: bool = False

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name.isidentifier():
            raise InputError(f"a segmenter name is a plain word like 'hmm'; got {self.name!r}")
        if self.auto_states not in (*AUTO_STATES, None):
            raise InputError(
                f"segmenter {self.name!r}: auto_states must be one of {AUTO_STATES} or None; "
                f"got {self.auto_states!r}"
            )
        for name in ("options", "quick_options", "stability_options"):
            object.__setattr__(self, name, MappingProxyType(dict(getattr(self, name))))
        object.__setattr__(
            self, "stability_options", MappingProxyType(dict(self.stability_options))
        )

    @property
    def cls(self) -> type:
        """The estimator class."""
        return _resolve(self.estimator)

    @property
    def reserved(self) -> frozenset[str]:
        """Constructor options the model sets itself (never taken from ``segmenter``)."""
        return frozenset({self.state_param, "fps", "random_state"})

    def build(
        self,
        n_states: int | str,
        fps: float,
        random_state: Any,
        options: Mapping[str, Any] | None = None,
        max_states: int | None = None,
        min_states: int | None = None,
    ) -> Any:
        """An unfitted segmenter of this method.

        ``n_states="auto"`` is passed on only to a segmenter that chooses its own count.
        """
        options = dict(options or {})
        clash = sorted(set(options) & self.reserved)
        if clash:
            raise InputError(
                f"segmenter options {clash} are set by the model (n_states, fps, random_state); "
                "remove them from the segmenter options"
            )
        if n_states == "auto" and self.auto_states != "own":
            raise InputError(
                f"method {self.name!r} needs a number of states here, not 'auto'"
                + (" (choose it first)" if self.auto_states else "")
            )
        params = {**self.options, **options}
        if self.max_states_param is not None and max_states is not None:
            params.setdefault(self.max_states_param, max_states)
        if self.min_states_param is not None and min_states is not None:
            params.setdefault(self.min_states_param, min_states)
        params.update({self.state_param: n_states, "fps": fps, "random_state": random_state})
        return self.cls(**params)

    def live(self, segmenter: Any) -> Any:
        """A frame-by-frame filter of a fitted segmenter (see ``streaming``)."""
        if self.streaming is None:
            raise InputError(f"method {self.name!r} cannot label frames as they arrive")
        return _resolve(self.streaming)(segmenter)


_SEGMENTERS: dict[str, SegmenterSpec] = {}
_entry_points_loaded = False


def register(spec: SegmenterSpec, replace: bool = False) -> SegmenterSpec:
    """Make ``spec`` usable by name everywhere (model, saved-model checks, command line)."""
    if not isinstance(spec, SegmenterSpec):
        raise InputError(f"register() takes a SegmenterSpec; got {type(spec).__name__}")
    if spec.name in _SEGMENTERS and not replace and _SEGMENTERS[spec.name] != spec:
        raise InputError(
            f"a segmenter named {spec.name!r} is already registered; pick another name or "
            "pass replace=True"
        )
    _SEGMENTERS[spec.name] = spec
    return spec


def unregister(name: str) -> None:
    """Remove a registered method (tests, plugins)."""
    _SEGMENTERS.pop(name, None)


def _load_entry_points() -> None:
    global _entry_points_loaded
    if _entry_points_loaded:
        return
    _entry_points_loaded = True
    for ep in entry_points(group=ENTRY_POINT_GROUP):
        try:
            spec = ep.load()
        except Exception as exc:  # a broken plugin must not break the built-in methods
            msg = f"segmenter plugin {ep.name!r} ({ep.value}) cannot be loaded: {exc}"
            raise InputError(msg) from exc
        if spec.name not in _SEGMENTERS:
            register(spec)


def segmenter_names() -> tuple[str, ...]:
    """Names of every registered method, built-in first."""
    _load_entry_points()
    return tuple(_SEGMENTERS)


def get_segmenter(name: str) -> SegmenterSpec:
    """The spec registered as ``name``; an InputError lists the known names."""
    _load_entry_points()
    try:
        return _SEGMENTERS[name]
    except (KeyError, TypeError):
        msg = f"method must be one of {list(_SEGMENTERS)}; got {name!r}"
        raise InputError(msg) from None


def spec_of_estimator(class_name: str) -> list[SegmenterSpec]:
    """Specs whose estimator class is named ``class_name`` (saved models record it)."""
    _load_entry_points()
    return [s for s in _SEGMENTERS.values() if s.cls.__name__ == class_name]


# --- the built-in methods: one registration each -------------------------------------
register(
    SegmenterSpec(
        "hmm",
        "ethoscribe.segment.hmm:GaussianHMM",
        "Gaussian HMM over frames (default)",
        auto_states="heldout",
        # Speed of the defaults (benchmarks/bench_speed.py): two restarts of the final fit
        # (ARI 0.79 against 0.80 with four on the 54,000-frame example study, a third of the
        # CPU) and short quick fits for the state count; the stability refits are full fits.
        # Per-session offsets (segment.session_offsets): on the validation bench at seeds 0-2
        # mean ARI 0.565 -> 0.575 and boundary F1 0.455 -> 0.465, no source lower by more than
        # 0.002 on average (benchmarks/README.md, "Per-individual offsets inside the HMM").
        # Causal models keep them off (BehaviourModel): the causal path cannot estimate them.
        # EM first on frames thinned to >= 15 per second, screening included, then on every
        # frame (GaussianHMM fit_rate, thin_screening): on the validation bench at seeds 0-2
        # mean ARI 0.575 -> 0.580, boundary F1 0.465 -> 0.474, no source lower by more than
        # 0.04 on average; discover on the 54,000-frame study 27.4 -> 18.6 s CPU
        # (benchmarks/README.md, "EM on thinned frames"). 15: the fastest default feature,
        # the 8 Hz band's power smoothed at 4 Hz, needs 8 frames/s, and 15 keeps about twice
        # that; 25-fps recordings are not thinned (10 lost 0.12 ARI on the independent
        # simulator, 25 fps thinned to 12.5).
        # Covariance floor 0.01 (each state's variance along any standardised feature at least
        # 1 % of the feature's variance over all frames): states were tighter than tracking
        # noise makes meaningful (smallest eigenvalues ~0.003 on the example study), and such
        # frames' evidence outweighed their neighbours'. On the validation bench at seeds 0-2
        # mean ARI 0.568 -> 0.580, boundary F1 0.435 -> 0.451, no source lower by more than
        # 0.03 on average (benchmarks/README.md, "A covariance floor").
        options={
            "n_restarts": 2,
            "session_offsets": True,
            "fit_rate": 15.0,
            "thin_screening": True,
            "min_covar": 0.01,
        },
        # The quick fits read every frame unless the count's own fit_rate says otherwise
        # (BehaviourModel.state_count_options): the count moved when they were thinned. They
        # keep the class's floor: with 0.01 the held-out curve kept rising on some sources
        # (the fish: 6 states for 4 at seed 2) and the bench fell at seed 2.
        quick_options={
            "n_restarts": 1,
            "n_iter": 25,
            "init_candidates": 2,
            "fit_max_frames": None,
            "fit_rate": None,
            "min_covar": 1e-3,
        },
        stability_options={"progress": False},
        posteriors=True,
        streaming="ethoscribe.segment.streaming_hmm:HMMFilter",
        warm_start=True,
    )
)
register(
    SegmenterSpec(
        "changepoint",
        "ethoscribe.segment.changepoint:ChangePointSegmenter",
        "change points (kernel search) clustered into motifs",
        state_param="n_motifs",
        options={"method": "kernel"},
        auto_states="own",
        max_states_param="max_motifs",
    )
)
register(
    SegmenterSpec(
        "prediction_error",
        "ethoscribe.segment.changepoint:ChangePointSegmenter",
        "prediction-error peaks clustered into motifs",
        state_param="n_motifs",
        options={"method": "prediction_error"},
        auto_states="own",
        max_states_param="max_motifs",
    )
)
register(
    SegmenterSpec(
        "grouped_hmm",
        "ethoscribe.segment.grouped_hmm:GroupedHMM",
        "Gaussian HMM with many fine states, grouped into behaviours (PCCA+ sets)",
        auto_states="own",
        max_states_param="max_states",
        min_states_param="min_states",
        options={"n_restarts": 2},
        stability_options={"progress": False},
        posteriors=True,
    )
)
