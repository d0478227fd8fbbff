"""The whole behaviour model: cleaning, feature pipeline and segmenter, fitted and applied as one.

A fitted ``BehaviourModel`` carries everything needed to label a new session the same way:
the cleaning parameters, the fitted egocentric feature pipeline (alignment, PCA, scaler) and the
fitted segmenter. New cohorts therefore get the same state ids, hence the same motif names.
"""

from __future__ import annotations

import inspect
import warnings
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator
from tqdm.auto import tqdm

from ethoscribe.checks import is_real, seed_from
from ethoscribe.clean import CleanParams, QualityReport, clean, cleaned_again, streaming_cleaning
from ethoscribe.errors import EthoscribeError, InputError, InputWarning, listed
from ethoscribe.features import FeaturePipeline, FeatureSet
from ethoscribe.features.vertical_check import resolve_up_axis
from ethoscribe.features.view_check import (
    image_rows_down,
    lift_side_view,
    resolve_view,
    warn_other_view,
)
from ethoscribe.missing_keypoints import KeypointFiller, fill_tracks, fit_filler
from ethoscribe.pose import (
    PoseTracks,
    check_same_body_plan,
    keypoint_mismatch,
    match_keypoint_order,
    without_unseen_keypoints,
)
from ethoscribe.saved_state import check_header, header
from ethoscribe.segment._hmm_gaussian import GaussianEmission
from ethoscribe.segment._model_meta import RESAVE, check_meta, known_keys
from ethoscribe.segment.duration import OUTLIER_SHARE
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.inputs import check_fitted, check_X_lengths, split_by_lengths
from ethoscribe.segment.lumping import (
    join_across_units,
    join_modes,
    join_phases,
    lump_states,
    lumped_transitions,
    membership,
    merge_tree,
    pair_components,
    stationary_distribution,
    suggested_merges,
    unit_overlap,
    unit_shares,
)
from ethoscribe.segment.postprocess import enforce_min_bout
from ethoscribe.segment.regimes import SlowRegimes
from ethoscribe.segment.registry import get_segmenter
from ethoscribe.segment.select import choose_n_states, selection_from_json, selection_to_json

FORMAT_VERSION = 1
# The automatic count's defaults (see ``state_count_options``): held-out blocks, so both folds see
# every animal (read by the elbow rule); with join_units they scored best on the validation bench
# as a whole (benchmarks/README.md, "One behaviour in different units joined after the fit").
COUNT_DEFAULTS = {"heldout": "blocks"}
DECODINGS = ("min_duration", "merge")
SLOW_REGIMES = ("auto", "off")
# How frames with filled keypoints are scored (``filled_frames``): every column as if seen, or
# the Gaussian marginal of the columns not computed from the body's shape (name prefixes: the
# posture components and what is computed from them, posture speed, band amplitudes).
FILLED_COLUMNS = {"as_seen": (), "shape_left_out": ("posture_pc", "log_posture_")}
FILLED_FRAMES = tuple(FILLED_COLUMNS)
# How well a saved model explains new frames (``BehaviourModel.fit_shares``). The threshold is
# the 1st percentile of the training frames' log-likelihood under their best state, so a frame
# from the training distribution falls below it with probability 1 %. A session is flagged at
# ten times that: frames come in bouts (about a second), so a 100 s session holds some 100
# independent draws, and Binomial(100, 0.01) exceeds 10 of them with probability < 1e-7.
POOR_FIT_PERCENTILE = 1.0
POOR_FIT_WARN_SHARE = 0.10
# With session offsets (segment.session_offsets) a session is also flagged when its offset is
# beyond what one individual in a thousand like the training ones would show: its squared
# distance under the offsets' prior above the chi-square quantile of 1 - POOR_FIT_OFFSET_TAIL.
POOR_FIT_OFFSET_TAIL = 1e-3


# Clips of one behaviour each, not sessions in which behaviours follow one another: knowing a
# frame's unit (session x animal) tells its state. Measured by Goodman and Kruskal's lambda of
# the state given the unit (the share of the errors of guessing every frame's state as the most
# frequent one overall that guessing its unit's most frequent state removes): 0 when every unit
# holds the states in the same proportions (however much one behaviour dominates), 1 when each
# unit holds one state. From UNIT_LAMBDA on, the rules that read units apart (per-session
# offsets, states joined as one behaviour in different units) are left out: a unit's own level
# or its own state cannot be told from its behaviour. 0.5, more than half the errors removed,
# is the plain reading; on the validation bench multi-unit sources give 0.00-0.13 (seeds 0-2)
# and five of them cut into clips 0.79-0.94 (seeds 0-1; benchmarks/README.md, "Clips of one
# behaviour each").
UNIT_LAMBDA = 0.5


def unit_lambda(states: np.ndarray, lengths: Sequence[int] | np.ndarray) -> float:
    """Goodman and Kruskal's lambda of the state given the unit (Goodman & Kruskal 1954): the
    proportional reduction of the errors in guessing each frame's state when its unit's most
    frequent state is guessed instead of the most frequent state overall. 0 without frames or
    when a single state holds every frame.

    Examples
    --------
    >>> unit_lambda(np.array([0, 0, 0, 1, 1, 1, 1, 2]), [4, 4])  # errors 4 -> 2
    0.5
    """
    states = np.asarray(states, dtype=np.int64)
    parts = [p for p in split_by_lengths(states, lengths) if len(p)]
    if not parts:
        return 0.0
    within = sum(int(np.bincount(p).max()) for p in parts)
    overall = int(np.bincount(states).max())
    return (within - overall) / (len(states) - overall) if len(states) > overall else 0.0


def unit_lambda_said(value: float) -> str:
    """The selection reason's words when the unit rules are left out."""
    return (
        f"a frame's session tells its state (Goodman-Kruskal lambda {value:.2f}: clips of one "
        "behaviour each?): a session's own level or its own states cannot be told from a "
        "behaviour there, so states used in different sessions were not joined"
    )


def motif_name(state: int) -> str:
    """Neutral default name of state ``state`` (0-based): ``motif_01``, ``motif_02`` ..."""
    return f"motif_{state + 1:02d}"


def stack_valid(features: Sequence[FeatureSet]) -> tuple[np.ndarray, np.ndarray]:
    """Valid rows of every feature set stacked, and the length of each non-empty piece.

    A session whose valid frames are interrupted by invalid ones is still one sequence here:
    the segmenter sees the valid frames back to back. Bouts are later cut at the gaps.
    """
    # Sessions without a valid frame contribute no sequence (their frames all stay -1).
    # A fully valid session is taken as it is: one copy (the concatenation), not two.
    parts = [
        p for p in (f.values if f.valid.all() else f.values[f.valid] for f in features) if len(p)
    ]
    lengths = np.array([len(p) for p in parts], dtype=np.int64)
    if lengths.sum() == 0:
        raise InputError(
            "no valid frames in any session after cleaning: every frame misses at least one "
            "keypoint. Lower min_confidence, raise max_gap_s, or check the keypoint names."
        )
    return np.concatenate(parts), lengths


def steady_columns(columns: Sequence[str]) -> list[int]:
    """Indices of the feature columns that do not change with the phase of a rhythm: the band
    amplitudes (``..._band_<f>hz``: each band's power smoothed over about two of its cycles).

    Examples
    --------
    >>> steady_columns(["posture_pc1", "log_centroid_speed_mm_s", "log_posture_band_2hz"])
    [2]
    """
    return [i for i, name in enumerate(columns) if "_band_" in str(name)]


class BehaviourModel(BaseEstimator):
    """Cleaning + egocentric features + unsupervised segmentation, fitted across sessions.

    Parameters
    ----------
    cleaning : dict or CleanParams, optional
        Cleaning parameters (see :class:`ethoscribe.clean.CleanParams`).
    features : dict, optional
        Keyword parameters of :class:`ethoscribe.features.FeaturePipeline`. ``up_axis``
        (3-D tracks) may also be "auto", the default here: the vertical axis is chosen from
        the training tracks (:func:`ethoscribe.features.vertical_check.resolve_up_axis`; z
        when they give no clear sign), and said in :attr:`up_axis_report_`. ``view`` (2-D
        tracks): "above", "side" (the image's y vertical unless the animals range clearly
        less along x) or "auto" (the default: read from
        the tracks, :func:`ethoscribe.features.view_check.resolve_view`); side-view tracks
        are featurised as 3-D tracks without depth, so the body frame keeps height and pitch
        (:attr:`view_`, :attr:`view_vertical_`, :attr:`view_report_`), causal models
        included (the streaming labeller lifts each frame alike).
    method : str
        A registered segmentation method (:mod:`ethoscribe.segment.registry`): "hmm" (Gaussian
        HMM over frames), "changepoint" or "prediction_error" (change points, by penalised
        search or prediction-error peaks, whose segments are clustered into motifs), or a
        method registered by a plugin.
    n_states : int or "auto"
        Number of states (motifs); "auto" chooses it from ``state_range``: for the HMM the
        elbow of the held-out log-likelihood per frame, from quick fits on a subsample
        (:func:`ethoscribe.segment.select.choose_n_states`), then the chosen count is fitted
        in full; for change points the BIC of the segment clustering (each method declares
        how, in the registry).
    state_range : (int, int)
        Smallest and largest state count tried when ``n_states="auto"``. (3, 12): from the
        fewest states with a transition structure worth describing to more motifs than are
        usually named; each candidate costs two quick fits.
    segmenter : dict, optional
        Extra keyword parameters of the segmenter (e.g. ``expected_bout_s`` for the HMM).
        The HMM gives every session (every animal of a session) an offset of its state means
        by default (``{"session_offsets": False}`` turns it off; causal models keep it off:
        :mod:`ethoscribe.segment.session_offsets`). Where a frame's session tells its state
        (clips of one behaviour each) the model leaves the offsets out by itself, unless they
        are asked for here (see ``join_units``).
        With ``method="grouped_hmm"`` and ``{"group_rule": "phases"}`` the phase-free columns
        (``steady_columns``) are the band amplitudes unless given (:func:`steady_columns`).
    min_bout_s : float
        Shortest bout of the final labels (see ``decoding``). 0.5 s: a rhythm of 2-8 Hz shows
        only 1-4 cycles in it, so shorter "bouts" are mostly frames of a transition between
        two behaviours; on the simulated studies (2 % of true bouts shorter) it raised the
        precision of boundaries from 0.6 to 0.85 at equal agreement. 0: no minimum.
    decoding : {"min_duration", "merge"}
        How the minimum bout is kept. "min_duration": the HMM decodes under the rule itself
        (:mod:`ethoscribe.segment.duration`: each state is held ``min_bout_s`` before the
        fitted transition probabilities apply, and 5 % of frames may be uninformative, so a
        burst shorter than the minimum can be absorbed rather than stretched; Viterbi gives
        the labels, forward-backward on the same model their ``probability``). "merge": plain
        Viterbi, then bouts shorter than ``min_bout_s`` are merged into a neighbour
        (``postprocess.enforce_min_bout``); the merge takes such a bout for noise, so
        ``probability`` is the HMM's posterior with the merged frames' evidence left out (what
        the frames around them say through the transitions; on the validation bench, seed 0,
        no scored frame below 0.01 for its own label on the sources labelled by states,
        against 0.9-4.7 % when merged frames kept the plain posterior of a label the HMM had
        not chosen). Slow regimes are decoded with their own minimum bout
        (:meth:`~ethoscribe.segment.regimes.SlowRegimes.label_bouts`).
        Methods without posteriors over a state chain (change points) always merge; causal
        models never apply the minimum (it needs future frames).
    min_body_seen : float or None
        Smallest fraction of keypoints a frame must show to be scored. Keypoints lost in such
        a frame are filled with their expected position given the visible ones, under a
        probabilistic-PCA model of the aligned body shape fitted on all sessions
        (:class:`ethoscribe.missing_keypoints.KeypointFiller`); frames showing less stay
        unscored. 0.6: with 10 keypoints up to 4 may be lost (on the example study with each
        paw hidden 1-4 s at a time on 15 % of frames, unscored frames fell from 55 % to
        0.1 %). None: every keypoint is needed, as before filling existed.
    filled_frames : {"as_seen", "shape_left_out"}
        How a frame whose lost keypoints were filled (``body_seen`` < 1) is scored by the
        HMM. "as_seen": every feature, as if the filled keypoints had been seen.
        "shape_left_out": by the Gaussian marginal of the features not computed from the
        body's shape (the posture components, posture speed and band amplitudes are left
        out; the speeds of the body and its turning stay), so the frame's label comes from
        what was seen and from its neighbours through the transitions, and its
        ``probability`` says how sure that is (exact for a Gaussian state:
        :meth:`~ethoscribe.segment.hmm.GaussianHMM.decode` ``hidden=``). Only labelling
        changes (the fit does not); a session without filled frames gets the same labels
        and probabilities. Use it when a keypoint that
        tells behaviours apart is lost for seconds at a time (a paw under the body): on the
        example study with one keypoint removed for 3.3 s eight times (five placements,
        three keypoints) the labels of those frames agreed with the truth 0.79 -> 0.86, the
        left forepaw 0.76 -> 0.89, while their mean probability went 0.90 -> 0.87. Not the
        default: on the validation bench (seeds 0-2) mean ARI and boundary F1 did not rise
        and the independent simulator's tracker failures fell at two seeds
        (benchmarks/README.md, "Frames with filled keypoints"). HMM methods, not causal.
    join_phases : bool
        Label phases of one rhythm as one state (HMM methods; not in causal models): after the
        fit, states that alternate more than by chance, whose band amplitudes (the columns
        that do not change with a rhythm's phase) lie within one pooled standard deviation and
        that are each held at most 1 s are joined
        (:func:`ethoscribe.segment.lumping.join_phases`); every other state stays as fitted.
        The labels' ``state`` is then the joined state, a ``fine_state`` column gives the
        fitted one, and :attr:`phase_groups_` maps fitted states to labelled ones (None:
        nothing was joined). False: the fitted states are the labels. On the validation bench
        (benchmarks/README.md) joining changed only the two sources with rhythmic phases and
        raised them there (BasicMotions ARI 0.59 -> 0.74, two seeds); every other source kept
        identical labels.
    join_units : bool
        Also label as one state two fitted states that are one behaviour seen in different
        units (the fitted sequences: sessions x animals), composed with ``join_phases`` (HMM
        methods; not in causal models): two states used apart (Bhattacharyya coefficient of
        their shares of the units' frames below 0.5) that are mutual nearest neighbours in
        posture among the states used apart from them
        (:func:`ethoscribe.segment.lumping.join_across_units`, the rule of
        ``method="grouped_hmm"``'s ``join="units"``). The joined states go through the same
        ``phase_groups_`` / ``fine_state`` mechanism, and :attr:`unit_pairs_` lists the pairs
        with their evidence. With one unit nothing is joined. Where a frame's unit tells its
        state (:func:`unit_lambda` at least :data:`UNIT_LAMBDA`, on labels with phases and
        modes joined and bouts of ``min_bout_s``: clips of one behaviour each), "used apart"
        says nothing and no unit pair is joined; the default
        per-session offsets are left out too and the model fitted again without them
        (:attr:`unit_lambda_`, :attr:`unit_rules_left_out_`; bench sources cut into
        clips: benchmarks/README.md, "Clips of one behaviour each"). On by default, with the
        count on held-out blocks (``state_count_options``): on the validation bench
        (benchmarks/README.md, "One behaviour in different units joined after the fit", two
        seeds) the two together raised mean ARI 0.517 -> 0.570 and 0.544 -> 0.567 over the
        count on held-out sessions (pairs 0.51 -> 0.76, independent simulator 0.57 / 0.62 ->
        0.83 / 0.82); the fish fell at seed 0 (0.81 -> 0.72, 0.82 at seed 1).
    join_modes : bool
        Also label as one state two fitted states that are parts of one cluster of frames,
        composed with ``join_phases`` and ``join_units`` (HMM methods; not in causal models):
        they alternate more than by chance, each is held at most 1 s, and the mixture of their
        two Gaussians has a single mode (:func:`ethoscribe.segment.lumping.join_modes`; the
        ridgeline of Ray & Lindsay 2005). No pair of fitted states on the simulated sources
        of the validation bench is one mode; BasicMotions' badminton, fitted as three states of
        different vigour, is. On by default: on the bench at two seeds mean ARI 0.570 -> 0.579
        and 0.567 -> 0.576, boundary F1 0.457 -> 0.475 and 0.435 -> 0.449, only BasicMotions
        (0.72 / 0.74 -> 0.81) and one series (0.25 -> 0.23) changed (benchmarks/README.md,
        "Parts of one mode joined"). Joined states go through ``phase_groups_`` /
        ``fine_state``; :attr:`mode_pairs_` lists them.
    slow_regimes : {"auto", "off"}
        Label stretches of minutes in which the states alternate in a steady mix, instead of
        the states themselves, when the training labels hold such stretches (HMM methods; not in
        causal models): "auto" measures how the mix of states in 16-s windows persists from
        one window to the next (over windows where no state holds more than 80 %: minutes of
        rest between active spells are no mix), and when it persists (at least 0.4 on the 0-1
        scale of :func:`ethoscribe.segment.regimes.persistence`, and more than the same windows
        in random orders, permutation p <= 0.01) each frame is labelled with the regime
        of the state mix around it (:class:`ethoscribe.segment.regimes.SlowRegimes`). The
        ``state`` is then the regime, ``fine_state`` the state it was before, and
        :attr:`regimes_` says what was measured (``persistence_``, ``p_value_``, ``used_``).
        Behaviours of a few seconds give a persistence near 0 (-0.12 to 0.19 on every simulated
        source of the validation bench, seeds 0-2) and keep their labels; the real activity
        recordings and benchmark series whose activities last minutes reach 0.47-0.64 and gain
        (mean ARI over seeds 0-2: GunPoint 0.11 -> 0.87, ElectricDevices 0.22 -> 0.48, HAPT
        0.40 -> 0.44; benchmarks/README.md, "Slow regimes"). A regime bout lasts at least the
        window. "off": the states are the labels.
    random_state : int, numpy.random.Generator or None
        Seed of every random choice (initialisations, subsamples). A generator gives one seed
        per fit (``random_seed_``, what a saved model records).
    progress : bool
        Show progress bars.
    state_count_options : dict, optional
        Options of the automatic state count (:func:`ethoscribe.segment.select.choose_n_states`
        for the HMM: ``max_frames``, ``stop_after``, ``rule`` ("elbow", "kneedle", "one_se"),
        ``heldout`` ("sessions", "blocks"; default here ``"blocks"``, :data:`COUNT_DEFAULTS`);
        e.g. ``{"stop_after": None}`` fits every
        candidate of ``state_range`` instead of stopping two past the elbow), and
        ``warm_start``: True adds to the final fit two restarts started from the count's two
        quick fits of the chosen count (``GaussianHMM.fit(..., init_models=...)``). Off by
        default: on the validation bench (seed 0) it did not pay (see benchmarks/README.md,
        "Fast by default"). ``fit_rate``: the quick fits' EM on thinned frames (the HMM's
        ``fit_rate``; the segmenter's own ``fit_rate`` applies to the final fit and the
        stability refits only). ``offset_scoring``: how a held-out block is scored under the
        HMM's per-session offsets, "marginal" (the offset integrated over its prior;
        :func:`ethoscribe.segment.session_offsets.marginal_log_likelihood`; the default) or
        "map" (its own MAP offset plugged in, which credits the block with a free shift). On
        the validation bench the two chose the same counts at seeds 0-2 (benchmarks/README.md,
        "Held-out blocks scored with their offsets integrated out").
    causal : bool
        Fit and label through the causal path, for a model meant for closed-loop use
        (:class:`~ethoscribe.segment.streaming.StreamingLabeller`): causal cleaning (past frames
        only), causal features, and labels from the forward filter ``P(state_t | frames up to
        t)`` with no minimum-bout merge (it would need future frames). An automatic speed bound
        is fixed at fitting time (median over the training sessions), as streaming needs a
        number. Offline labels of such a model then agree with streamed labels on >= 99 % of
        frames (tests/test_streaming.py). Needs a method that can stream (the HMM).

    Examples
    --------
    >>> from ethoscribe.simulate import simulate_session
    >>> tracks, truth = simulate_session(duration_s=60, seed=1)
    >>> model = BehaviourModel(n_states=4).fit([tracks])   # doctest: +SKIP
    >>> labels = model.label([tracks])                      # doctest: +SKIP
    """

    def __init__(
        self,
        cleaning: dict | CleanParams | None = None,
        features: dict | None = None,
        method: str = "hmm",
        n_states: int | str = "auto",
        state_range: tuple[int, int] = (3, 12),
        segmenter: dict | None = None,
        min_bout_s: float = 0.5,
        decoding: str = "merge",
        min_body_seen: float | None = 0.6,
        filled_frames: str = "as_seen",
        join_phases: bool = True,
        join_units: bool = True,
        join_modes: bool = True,
        slow_regimes: str = "auto",
        random_state: int | np.random.Generator | None = 0,
        progress: bool = False,
        causal: bool = False,
        state_count_options: dict | None = None,
    ) -> None:
        self.cleaning = cleaning
        self.features = features
        self.method = method
        self.n_states = n_states
        self.state_range = state_range
        self.segmenter = segmenter
        self.min_bout_s = min_bout_s
        self.decoding = decoding
        self.min_body_seen = min_body_seen
        self.filled_frames = filled_frames
        self.join_phases = join_phases
        self.join_units = join_units
        self.join_modes = join_modes
        self.slow_regimes = slow_regimes
        self.random_state = random_state
        self.progress = progress
        self.causal = causal
        self.state_count_options = state_count_options

    def saved_params(self) -> dict[str, Any]:
        """JSON-able constructor parameters, as saved models and ``summary.json`` record them.

        ``progress`` is left out (it changes no result); a generator ``random_state`` is
        recorded as the seed the fit drew from it.
        """
        cleaning = (
            self.cleaning.to_dict() if isinstance(self.cleaning, CleanParams) else self.cleaning
        )
        seed = self.random_state
        if not (seed is None or isinstance(seed, int | np.integer)):
            seed = getattr(self, "random_seed_", None)
        return {
            "cleaning": cleaning,
            "features": self.features,
            "method": self.method,
            "n_states": self.n_states,
            "state_range": list(self.state_range),
            "segmenter": self.segmenter,
            "min_bout_s": self.min_bout_s,
            "decoding": self.decoding,
            "min_body_seen": self.min_body_seen,
            "filled_frames": self.filled_frames,
            "join_phases": bool(self.join_phases),
            "join_units": bool(self.join_units),
            "join_modes": bool(self.join_modes),
            "random_state": seed,
            "causal": bool(self.causal),
            "state_count_options": self.state_count_options,
        }

    # --- fitting --------------------------------------------------------------------------
    def _check_params(self) -> None:
        get_segmenter(self.method)  # InputError naming the registered methods
        if self.n_states != "auto":
            if not isinstance(self.n_states, (int, np.integer)) or self.n_states < 1:
                raise InputError(
                    f"n_states must be a positive integer or 'auto'; got {self.n_states!r}"
                )
        lo, hi = self.state_range
        if not (1 <= lo <= hi):
            raise InputError(
                f"state_range must be (low, high) with 1 <= low <= high; got {self.state_range}"
            )
        if not np.isfinite(self.min_bout_s) or self.min_bout_s < 0:
            raise InputError(f"min_bout_s must be >= 0 seconds; got {self.min_bout_s!r}")
        if self.decoding not in DECODINGS:
            raise InputError(f"decoding must be one of {list(DECODINGS)}; got {self.decoding!r}")
        if not isinstance(self.join_phases, bool | np.bool_):
            raise InputError(f"join_phases must be True or False; got {self.join_phases!r}")
        if not isinstance(self.join_units, bool | np.bool_):
            raise InputError(f"join_units must be True or False; got {self.join_units!r}")
        if not isinstance(self.join_modes, bool | np.bool_):
            raise InputError(f"join_modes must be True or False; got {self.join_modes!r}")
        if self.slow_regimes not in SLOW_REGIMES:
            raise InputError(
                f"slow_regimes must be one of {list(SLOW_REGIMES)}; got {self.slow_regimes!r}"
            )
        seen = self.min_body_seen
        if seen is not None and (
            isinstance(seen, bool) or not isinstance(seen, int | float) or not 0 < seen <= 1
        ):
            raise InputError(
                f"min_body_seen must be a fraction in (0, 1] or None (every keypoint needed); "
                f"got {seen!r}"
            )

        if self.filled_frames not in FILLED_FRAMES:
            raise InputError(
                f"filled_frames must be one of {list(FILLED_FRAMES)}; got {self.filled_frames!r}"
            )
        # Refused rather than ignored: the user asked for frames scored another way.
        if self.filled_frames != "as_seen" and (
            self.causal or not _takes_hidden(get_segmenter(self.method).cls)
        ):
            why = "a causal model" if self.causal else f"method {self.method!r}"
            raise InputError(
                f"filled_frames={self.filled_frames!r} is not available for {why} (its "
                "labelling cannot leave features out of a frame); use method='hmm' without "
                "causal=True, or filled_frames='as_seen'"
            )

        allowed = {
            "max_frames", "stop_after", "rule", "heldout", "warm_start", "fit_rate",
            "offset_scoring",
        }  # fmt: skip
        options = self.state_count_options
        if options is not None and (not isinstance(options, Mapping) or set(options) - allowed):
            raise InputError(
                f"state_count_options must be a dict with keys among {sorted(allowed)}; "
                f"got {options!r}"
            )
        if not isinstance(self.causal, bool | np.bool_):
            raise InputError(f"causal must be True or False; got {self.causal!r}")
        if self.causal and get_segmenter(self.method).streaming is None:
            raise InputError(
                f"causal=True needs a method that labels frames as they arrive; {self.method!r} "
                "cannot (use method='hmm')"
            )

    def _clean_params(self) -> CleanParams:
        if isinstance(self.cleaning, CleanParams):
            return self.cleaning
        return CleanParams.from_dict(self.cleaning or {})

    def _segmenter_options(self) -> dict[str, Any]:
        """The user's segmenter options; a causal model keeps per-session offsets off unless
        asked (the causal path labels with offset 0, so its states must cover individuals)."""
        options = dict(self.segmenter or {})
        if self.causal and "session_offsets" in get_segmenter(self.method).options:
            options.setdefault("session_offsets", False)
        return options

    def _make_segmenter(
        self,
        n_states: int | str,
        fps: float,
        seed: int | None,
        columns: Sequence[str] = (),
        **changed: Any,
    ) -> Any:
        spec = get_segmenter(self.method)
        lo, hi = self.state_range
        options = {**self._segmenter_options(), **changed}
        if options.get("group_rule") == "phases" and options.get("steady_columns") is None:
            # Phases of one rhythm share what does not change with the phase: band amplitudes.
            options["steady_columns"] = steady_columns(columns)
        return spec.build(n_states, fps, seed, options, hi, lo)

    def fit(self, sessions: Sequence[PoseTracks]) -> BehaviourModel:
        """Fit cleaning-resolved features and the segmenter on all ``sessions`` at once."""
        self._check_params()
        sessions = match_keypoint_order(sessions)
        check_same_body_plan(sessions)
        params = self._clean_params()
        rates = sorted({float(s.fps) for s in sessions})
        auto_rate = len(rates) > 1 and params.target_fps is None and not self.causal
        if auto_rate:
            # Sessions filmed at several rates: all resampled to the lowest one (no detail is
            # invented), and labels mapped back to every session's own frames (label()).
            params = replace(params, target_fps=rates[0])
        cleaned, quality = self._clean_all(sessions, params)
        if self.causal:
            # Streaming needs one fixed bound and confidence scale (the medians of the
            # sessions' automatic ones), the placeholders as positions, and held points only
            # where no repeat can be chance.
            used = [s.meta.get("cleaning", {}) for s in cleaned]
            fixed = streaming_cleaning(params, used)
            redo = cleaned_again(params, fixed, used)
            params = fixed
            if redo:  # else the same points are masked: the first cleaning stands
                cleaned, quality = self._clean_all(sessions, params)
        self._fit_cleaned(cleaned, quality, params)
        self.labels_at_input_rate_ = auto_rate
        return self

    def fit_cleaned(
        self, cleaned: Sequence[PoseTracks], quality: Sequence[QualityReport] = ()
    ) -> BehaviourModel:
        """Fit on sessions already cleaned with this model's cleaning parameters.

        Batch runs clean each session in its own worker (and cache the result), then fit here
        on the cleaned tracks, or on a representative sample of them.
        """
        self.fit_transform_cleaned(cleaned, quality)
        return self

    def fit_transform_cleaned(
        self, cleaned: Sequence[PoseTracks], quality: Sequence[QualityReport] = ()
    ) -> list[FeatureSet]:
        """:meth:`fit_cleaned`, returning the training sessions' features: what
        :meth:`featurise_cleaned` gives for ``cleaned`` afterwards, without computing them
        again (one feature set per session and animal)."""
        feats = self._fit_cleaned(cleaned, quality, self._clean_params())
        self.labels_at_input_rate_ = False
        return feats

    def _fit_cleaned(
        self, cleaned: Sequence[PoseTracks], quality: Sequence[QualityReport], params: CleanParams
    ) -> list[FeatureSet]:
        self._check_params()
        cleaned = match_keypoint_order(cleaned)
        check_same_body_plan(cleaned)
        check_one_rate([s.fps for s in cleaned], [s.session for s in cleaned])
        if self.causal:
            params = _causal_cleaning(cleaned, params)
        cleaned, self.keypoints_left_out_ = without_unseen_keypoints(cleaned)
        if self.keypoints_left_out_:
            left = ", ".join(f"'{k}'" for k in self.keypoints_left_out_)
            warnings.warn(
                f"keypoint(s) {left} have no tracked position in any frame of the training "
                "sessions (missing, or below the confidence threshold, everywhere): left out "
                f"of the model, whose motifs are made from the other "
                f"{cleaned[0].n_keypoints}. Check the tracker's output and the keypoint names "
                "(a renamed keypoint looks untracked).",
                InputWarning,
                stacklevel=3,
            )
        sessions = cleaned
        options = {**(self.features or {}), **({"causal": True} if self.causal else {})}
        view = options.pop("view", "auto")
        # 2-D tracks filmed from the side keep their vertical: labelled as 3-D tracks with no
        # depth, whose body frame turns about the vertical only (features.view_check); the
        # lift is per frame, so the causal path (and the streaming labeller) takes it too
        self.view_, self.view_vertical_, self.view_report_ = resolve_view(cleaned, view)
        # image coordinates (y down) are turned so that z points up, as at labelling
        self.view_flip_ = image_rows_down(cleaned, self.view_vertical_)
        cleaned = self.as_featurised(cleaned)
        if self.view_ == "side":
            options["up_axis"] = "z"
        up, self.up_axis_report_ = resolve_up_axis(cleaned, options.get("up_axis", "auto"))
        if self.view_ == "side":
            self.up_axis_report_ = ""  # the tracks are 2-D: view_report_ says it
        pipeline = FeaturePipeline(**{**options, "up_axis": up})
        self.filler_ = None
        if self.min_body_seen is not None:
            self.filler_ = fit_filler(cleaned, float(self.min_body_seen), up)
        filled = [fill_tracks(self.filler_, s) for s in cleaned]
        feats = _with_seen(pipeline.fit_transform([t for t, _ in filled]), filled)
        if self.up_axis_report_ and pipeline.up_report_:
            self.up_axis_report_ += f"; {pipeline.up_report_}"
        X, lengths = stack_valid(feats)
        fps_value = cleaned[0].fps
        seed = seed_from(self.random_state)
        columns = feats[0].columns
        selection, segmenter = self._count_and_fit(X, lengths, fps_value, seed, columns)
        offsets = _offsets_of(segmenter, X, lengths)  # once, for the joins and the threshold
        # Where a frame's unit (session x animal) tells its state, a unit's offset, or its
        # being used apart from another unit's state, cannot be told from its behaviour
        self.unit_lambda_ = float("nan")
        if self._unit_rules(segmenter, lengths):
            self.unit_lambda_ = self._unit_lambda(
                segmenter, columns, X, lengths, offsets, fps_value
            )
        if self.unit_rules_left_out_:
            said = unit_lambda_said(self.unit_lambda_)
            if self._offsets_by_default():
                selection, segmenter = self._count_and_fit(
                    X, lengths, fps_value, seed, columns, session_offsets=False
                )
                offsets = None
                said += "; the states were fitted without per-session offsets"
            if selection is not None:
                selection = replace(selection, reason=f"{selection.reason}; {said}")
        self.phase_groups_, self.phase_pairs_, self.unit_pairs_, self.mode_pairs_ = (
            self._phase_groups(
                segmenter, columns, X, lengths, offsets, units=not self.unit_rules_left_out_
            )
        )
        self.random_seed_ = seed
        self.cleaning_ = params
        self.features_ = pipeline
        self.segmenter_ = segmenter
        self.selection_ = selection
        self.n_states_ = int(segmenter.n_states_)
        if self.phase_groups_ is None:
            self.state_tree_ = _state_tree(segmenter, fps_value)
        else:
            self.n_states_ = max(self.phase_groups_) + 1
            said = _joined_said(
                self.phase_groups_, self.phase_pairs_, self.unit_pairs_, self.mode_pairs_
            )
            self.state_tree_ = _phase_tree(segmenter, self.phase_groups_, fps_value, said)
            if selection is not None:
                self.selection_ = replace(
                    selection,
                    reason=f"{selection.reason}; {self.n_states_} states labelled: {said}",
                )
        self.fps_ = fps_value
        self.keypoints_ = tuple(sessions[0].keypoints)
        self.n_dims_ = sessions[0].n_dims
        self.quality_ = list(quality)
        self.training_sessions_ = [s.session for s in sessions]
        self.n_training_frames_ = int(lengths.sum())
        self.poor_fit_threshold_ = poor_fit_threshold(segmenter, X, lengths, offsets)
        self.regimes_ = None
        if self._regimes_possible():
            min_frames = round(self.min_bout_s * fps_value)
            states, _ = self._states_and_probability(
                X, lengths, min_frames, offsets, self._hidden(feats), probability=False
            )
            regimes = SlowRegimes(random_state=seed).fit(states, lengths, self.n_states_, fps_value)
            self.regimes_ = regimes
            if regimes.used_:
                said = (
                    f"the {self.n_states_} states alternate in mixes that hold for minutes "
                    f"(persistence {regimes.persistence_:.2f} at {regimes.window_s:g} s): "
                    f"{regimes.n_regimes_} regimes of the mix labelled (fine_state keeps "
                    "the states; slow_regimes off keeps them as the motifs)"
                )
                if regimes.one_change_:
                    once = (
                        "the mix changes about once in each recording (the regimes change "
                        f"{regimes.changes_per_recording_:.1f} times per recording; residual "
                        f"persistence {regimes.residual_persistence_:.2f} after one change): "
                        "if that is a change of condition (a treatment given during the "
                        "session, an animal settling, recordings joined in one file), the "
                        "regimes mark before and after it, not behaviours; slow_regimes='off' "
                        "keeps the behaviours as the motifs"
                    )
                    said = f"{said}; {once}"
                    warnings.warn(
                        f"{regimes.n_regimes_} slow regimes of the state mix were labelled as "
                        f"the motifs, but {once}.",
                        InputWarning,
                        stacklevel=3,
                    )
                self.n_states_ = regimes.n_regimes_
                self.state_tree_ = None
                if self.selection_ is not None:
                    self.selection_ = replace(
                        self.selection_, reason=f"{self.selection_.reason}; {said}"
                    )
        return feats

    def _count_and_fit(
        self,
        X: np.ndarray,
        lengths: np.ndarray,
        fps: float,
        seed: int,
        columns: Sequence[str],
        **changed: Any,
    ) -> tuple[Any, Any]:
        """The state count (when automatic) and the final fit; ``changed``: segmenter
        options other than the model's own."""
        n_states = self.n_states
        selection = None
        count_options = {**COUNT_DEFAULTS, **(self.state_count_options or {})}
        warm = count_options.pop("warm_start", False)
        starts: Sequence[Any] = ()
        if n_states == "auto" and get_segmenter(self.method).auto_states == "heldout":
            lo, hi = self.state_range
            selection = choose_n_states(
                X,
                lengths,
                candidates=range(lo, hi + 1),
                model_params={"fps": fps, **self._segmenter_options(), **changed},
                random_state=seed,
                progress=self.progress,
                method=self.method,
                **count_options,
            )
            n_states = int(selection.best)
            if warm and get_segmenter(self.method).warm_start:
                starts = getattr(selection, "fold_models", {}).get(n_states, ())
        segmenter = self._make_segmenter(n_states, fps, seed, columns, **changed)
        if starts:  # the count's two quick fits of this count start restarts of their own
            segmenter.fit(X, lengths, init_models=starts)
        else:
            segmenter.fit(X, lengths)
        if selection is None:  # a segmenter that chose its own count may show how
            selection = getattr(segmenter, "selection_", None)
        return selection, segmenter

    def _unit_lambda(
        self,
        segmenter: Any,
        columns: Sequence[str],
        X: np.ndarray,
        lengths: np.ndarray,
        offsets: np.ndarray | None,
        fps: float,
    ) -> float:
        """:func:`unit_lambda` of labels close to the user's from ``segmenter``, before any
        rule that reads units apart: phases of one rhythm and parts of one mode joined (a clip
        of a rhythm holds its phases), bouts shorter than ``min_bout_s`` merged into their
        longer neighbour (the labels merge by posterior; this reads the Viterbi path only)."""
        states = segmenter.predict(X, lengths, **_given(offsets=offsets))
        groups = self._phase_groups(segmenter, columns, X, lengths, offsets, units=False)[0]
        if groups is not None:
            states = np.asarray(groups, dtype=np.int64)[states]
        min_frames = round(self.min_bout_s * fps)
        return unit_lambda(enforce_min_bout(states, min_frames, lengths), lengths)

    @property
    def unit_rules_left_out_(self) -> bool:
        """Whether the rules that read units apart were left out (:data:`UNIT_LAMBDA`)."""
        return bool(getattr(self, "unit_lambda_", float("nan")) >= UNIT_LAMBDA)

    def _unit_rules(self, segmenter: Any, lengths: np.ndarray) -> bool:
        """Whether a rule reads units apart: per-session offsets, or states joined as one
        behaviour in different units (with more than one unit)."""
        if len(lengths) < 2:
            return False
        joins = self.join_units and not self._causal_path() and hasattr(segmenter, "transmat_")
        return bool(getattr(segmenter, "session_offsets", False) or joins)

    def _offsets_by_default(self) -> bool:
        """Whether the segmenter gets per-session offsets by default, not by the user's
        choice (so the model may leave them out)."""
        options = self._segmenter_options()
        return "session_offsets" in get_segmenter(self.method).options and (
            "session_offsets" not in options
        )

    def _causal_path(self) -> bool:
        """Fitted or labelled from past frames only (``causal`` or causal features): nothing
        that needs later frames (joins, regimes) applies."""
        return bool(self.causal) or bool((self.features or {}).get("causal"))

    def _regimes_possible(self) -> bool:
        return (
            self.slow_regimes == "auto"
            and not self._causal_path()
            and get_segmenter(self.method).posteriors
            and hasattr(self.segmenter_, "transmat_")
        )

    def _regimes_used(self) -> bool:
        regimes = getattr(self, "regimes_", None)
        return regimes is not None and regimes.used_

    def _phase_groups(
        self,
        segmenter: Any,
        columns: Sequence[str],
        X: np.ndarray,
        lengths: np.ndarray,
        offsets: np.ndarray | None = None,
        units: bool = True,
    ) -> tuple[list[int] | None, list[dict], list[dict], list[dict]]:
        """Labelled state of every fitted state when ``join_phases`` / ``join_units`` /
        ``join_modes`` join some (None when nothing is joined, the options are off, the model
        is causal or the segmenter has no Gaussian states and transitions), and the joined
        pairs with their evidence: phases of one rhythm, one behaviour in different units,
        parts of one mode."""
        causal = self._causal_path()
        needed = ("transmat_", "means_", "covars_")
        modes = bool(getattr(self, "join_modes", False))
        if (
            not (self.join_phases or self.join_units or modes)
            or causal
            or hasattr(segmenter, "fine_")
        ):
            return None, [], [], []
        if not all(hasattr(segmenter, a) for a in needed):
            return None, [], [], []
        return joined_states(
            segmenter,
            steady_columns(columns),
            X if self.join_units and units else None,
            lengths,
            phases=bool(self.join_phases),
            modes=modes,
            offsets=offsets,
        )

    def _to_labelled(self, states: np.ndarray, prob: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Fitted states and their probabilities mapped to the labelled (phase-joined) ones."""
        groups = getattr(self, "phase_groups_", None)
        if groups is None:
            return states, prob
        g = np.asarray(groups, dtype=np.int64)
        return g[np.asarray(states, dtype=np.int64)], np.asarray(prob) @ membership(g)

    def _clean_all(
        self, sessions: Sequence[PoseTracks], params: CleanParams
    ) -> tuple[list[PoseTracks], list[QualityReport]]:
        out, reports = [], []
        for s in tqdm(sessions, desc="cleaning", unit="session", disable=not self.progress):
            cleaned, report = clean(s, params, causal=bool(self.causal))
            out.append(cleaned)
            reports.append(report)
        return out, reports

    # --- applying -------------------------------------------------------------------------
    def transform_features(
        self, sessions: Sequence[PoseTracks]
    ) -> tuple[list[FeatureSet], list[QualityReport]]:
        """Clean and featurise ``sessions`` exactly as at fitting time."""
        check_fitted(self, "segmenter_")
        sessions = match_keypoint_order(sessions, self.keypoints_, roles=self._keypoint_roles())
        for s in sessions:
            self._check_body_plan(s)
        cleaned, quality = self._clean_all(sessions, self.cleaning_)
        return self.featurise_cleaned(cleaned), quality

    def _keypoint_roles(self) -> dict[str, str]:
        """The keypoints the body frame rests on (see :func:`match_keypoint_order`)."""
        pipe = self.features_
        axis = getattr(pipe, "axis_", None)
        roles = {}
        if axis:
            for end in axis:
                roles[end] = f"an end of the model's body axis ({axis[0]} -> {axis[1]})"
        if getattr(pipe, "origin_", None):
            roles[pipe.origin_] = "the model's origin (the body frame is centred on it)"
        return roles

    def featurise_cleaned(self, cleaned: Sequence[PoseTracks]) -> list[FeatureSet]:
        """Features of sessions already cleaned with :attr:`cleaning_` (one set per animal)."""
        check_fitted(self, "segmenter_")
        cleaned = match_keypoint_order(cleaned, self.keypoints_, roles=self._keypoint_roles())
        for s in cleaned:
            self._check_body_plan(s)
        if self.n_dims_ == 2:
            warn_other_view(cleaned, getattr(self, "view_", "above"))
        cleaned = self.as_featurised(cleaned)
        filled = [fill_tracks(getattr(self, "filler_", None), s) for s in cleaned]
        return _with_seen([f for t, _ in filled for f in self.features_.transform(t)], filled)

    def as_featurised(self, cleaned: Sequence[PoseTracks]) -> list[PoseTracks]:
        """Cleaned tracks in the geometry the feature pipeline reads: 2-D side views
        (:attr:`view_`) lifted to 3-D without depth, z up; any others as they are."""
        if getattr(self, "view_", "above") != "side":
            return list(cleaned)
        flip = getattr(self, "view_flip_", False)
        return [lift_side_view(s, self.view_vertical_, flip) for s in cleaned]

    def _check_body_plan(self, s: PoseTracks) -> None:
        if tuple(s.keypoints) != self.keypoints_ or s.n_dims != self.n_dims_:
            source = s.meta.get("source")
            differ, hint = keypoint_mismatch(self.keypoints_, s.keypoints)
            raise InputError(
                f"session '{s.session}'" + (f" ({source})" if source else "") + " has "
                f"keypoints {list(s.keypoints)} in {s.n_dims}-D but the model was fitted on "
                f"{list(self.keypoints_)} in {self.n_dims_}-D ({differ}).{hint}"
                + self._dims_hint(s.n_dims)
            )
        if abs(s.fps - self.fps_) > 1e-9 and not self.cleaning_.target_fps:
            raise InputError(
                f"session '{s.session}' runs at {s.fps:g} fps but the model at {self.fps_:g} fps; "
                "resample it (cleaning target_fps) before labelling"
            )

    def _dims_hint(self, n_dims: int) -> str:
        """How to fix a session whose dimensions differ from the model's."""
        if n_dims == self.n_dims_:
            return ""
        if n_dims > self.n_dims_:
            return " Leave the z column out of its files (x and y only), or fit a 3-D model."
        return " Label it with a model fitted on 2-D sessions (ethoscribe discover)."

    def label(self, sessions: Sequence[PoseTracks]) -> pd.DataFrame:
        """Per-frame label table of ``sessions``.

        Returns
        -------
        DataFrame with columns ``session, animal, frame, time_s, state, motif, probability,
        body_seen``; unscored frames have state -1, motif "" and probability NaN. When the
        states are groups of finer states (``method="grouped_hmm"``) a ``fine_state`` column
        gives the fine state of every frame (-1 where unscored); :attr:`state_tree_`
        ``["fine_assignment"]`` maps fine states to the labelled ones.
        ``body_seen`` is the fraction of keypoints seen in the frame after cleaning (lost ones
        are filled when it is at least ``min_body_seen``).
        """
        sessions = list(sessions)
        feats, _ = self.transform_features(sessions)
        offsets = self.offsets(feats)  # once, for the labels and the fit check
        labels = self.label_features(feats, offsets=offsets)
        for text in poor_fit_messages(self.fit_shares(feats, offsets=offsets), self):
            warnings.warn(text, InputWarning, stacklevel=2)
        if getattr(self, "labels_at_input_rate_", False):
            labels = _at_input_rate(labels, sessions, self.fps_)
        return labels

    def offsets(self, feats: Sequence[FeatureSet]) -> np.ndarray | None:
        """Session offset of every feature set with valid frames under the fitted segmenter
        (``GaussianHMM`` with ``session_offsets``), shape (n_sets_with_valid_frames, D); None
        for a segmenter without offsets. The same estimate :meth:`label_features` and
        :meth:`fit_shares` make; compute it once and pass it to both when they read the same
        feature sets."""
        check_fitted(self, "segmenter_")
        if not any(f.valid.any() for f in feats):
            return None
        return _offsets_of(self.segmenter_, *stack_valid(feats))

    def label_features(
        self, feats: Sequence[FeatureSet], offsets: np.ndarray | None = None
    ) -> pd.DataFrame:
        """Label already computed feature sets (see :meth:`label`); ``offsets`` as
        :meth:`offsets` gives them for ``feats`` (None: estimated here)."""
        check_fitted(self, "segmenter_")
        min_frames = round(self.min_bout_s * self.fps_)
        if any(f.valid.any() for f in feats):
            X, lengths = stack_valid(feats)
            if offsets is None:
                offsets = _offsets_of(self.segmenter_, X, lengths)
            self._check_offsets(offsets, len(lengths))
            hidden = self._hidden(feats)
            states, prob = self._states_and_probability(
                X, lengths, min_frames, offsets, hidden, probability=not self._regimes_used()
            )
            if self._regimes_used():
                before = states
                states, prob = self.regimes_.label_bouts(before, lengths, self.fps_, min_frames)
        else:  # nothing to decode (e.g. one session, all invalid): every frame stays -1
            X, lengths = np.zeros((0, 0)), np.zeros(0, dtype=np.int64)
            hidden = None
            states, prob = np.zeros(0, dtype=np.int64), np.zeros((0, self.n_states_))
        # Posterior of the label given; clipped because scaled recursions round to 1 + 1e-15.
        prob = np.clip(np.take_along_axis(prob, states[:, None], axis=1)[:, 0], 0.0, 1.0)
        if self._regimes_used() and len(X):  # the states under the regimes
            fine = before
        else:
            fine = self._fine_states(X, lengths, offsets, hidden)
        tables = []
        parts = [split_by_lengths(states, lengths), split_by_lengths(prob, lengths)]
        if fine is not None:
            parts.append(split_by_lengths(fine, lengths))
        nonempty = iter(zip(*parts, strict=True))
        for f in feats:
            n = len(f.valid)
            state = np.full(n, -1, dtype=np.int64)
            p = np.full(n, np.nan)
            fine_state = np.full(n, -1, dtype=np.int64)
            if f.valid.any():
                s_part, p_part, *f_part = next(nonempty)
                state[f.valid] = s_part
                p[f.valid] = p_part
                if f_part:
                    fine_state[f.valid] = f_part[0]
            columns = {
                "session": f.session,
                "animal": f.animal,
                "frame": np.arange(n),
                "time_s": np.arange(n) / f.fps,
                "state": state,
                "probability": p,
                "body_seen": f.meta.get("body_seen", np.where(f.valid, 1.0, np.nan)),
            }
            if fine is not None:
                columns["fine_state"] = fine_state
            tables.append(pd.DataFrame(columns))
        labels = pd.concat(tables, ignore_index=True)
        names = np.array([""] + [motif_name(k) for k in range(self.n_states_)], dtype=object)
        labels.insert(5, "motif", names[labels["state"].to_numpy() + 1])
        return labels

    def fit_shares(
        self, feats: Sequence[FeatureSet], offsets: np.ndarray | None = None
    ) -> list[dict[str, Any]]:
        """How well the model explains each session's frames, one record per session.

        A frame is poorly explained when its log-likelihood under its best state (the Gaussian
        state that explains it best) is below :attr:`poor_fit_threshold_`, the 1st percentile
        of the training frames' own: under a well-fitting model about 1 % of a new session's
        frames are, far more means the new frames are unlike the training ones (e.g. larger
        animals or another camera scale). Records: ``session``, ``n_frames`` (scored frames,
        all animals), ``n_poor`` and ``share`` (n_poor / n_frames; None without frames).
        Empty when the model has no threshold (saved before it was kept, or a method
        without Gaussian states). ``offsets``: as :meth:`offsets` gives them for ``feats``
        (None: estimated here), the offsets the labels were made with.
        """
        check_fitted(self, "segmenter_")
        threshold = getattr(self, "poor_fit_threshold_", None)
        if threshold is None:
            return []
        seg = self.segmenter_
        with_offsets = bool(getattr(seg, "session_offsets", False))
        if with_offsets and offsets is None:
            offsets = self.offsets(feats)
        self._check_offsets(offsets, sum(bool(f.valid.any()) for f in feats))
        counts: dict[str, list[int]] = {}
        distance: dict[str, float] = {}
        row = 0  # the feature set's row of offsets (sets with valid frames)
        for f in feats:
            n, poor = counts.setdefault(str(f.session), [0, 0]), 0
            if f.valid.any():
                values = f.values[f.valid]
                b = offsets[row : row + 1] if with_offsets else None
                row += 1
                ll = best_state_log_likelihood(seg, values, [len(values)], b)
                if ll is None:
                    return []
                poor = int(np.count_nonzero(ll < threshold))
                if b is not None:
                    d2 = offset_distance(seg, b[0])
                    distance[str(f.session)] = max(distance.get(str(f.session), 0.0), d2)
            n[0] += int(np.count_nonzero(f.valid))
            n[1] += poor
        limit = offset_limit(seg) if with_offsets else None
        return [
            {
                "session": s, "n_frames": n, "n_poor": k, "share": k / n if n else None,
                **({"offset_distance": distance.get(s), "offset_limit": limit} if limit else {}),
            }
            for s, (n, k) in counts.items()
        ]  # fmt: skip

    def _check_offsets(self, offsets: np.ndarray | None, n_sequences: int) -> None:
        """Offsets are given for a segmenter with them, one row per sequence."""
        if offsets is None:
            return
        if not getattr(self.segmenter_, "session_offsets", False):
            msg = (
                f"offsets were given but this model's segmenter ({self.method!r}) has no "
                "session offsets; pass offsets=None"
            )
            raise InputError(msg)
        if len(offsets) != n_sequences:
            msg = (
                f"offsets has {len(offsets)} rows but {n_sequences} feature sets have valid "
                "frames; pass BehaviourModel.offsets of the same feature sets"
            )
            raise InputError(msg)

    def _hidden(self, feats: Sequence[FeatureSet]) -> np.ndarray | None:
        """Columns left out of the emission of each stacked valid frame (``filled_frames``):
        on frames with lost keypoints filled (``body_seen`` < 1), the columns computed from
        the body's shape; None when nothing is left out or the segmenter cannot."""
        how = getattr(self, "filled_frames", "as_seen")
        if how == "as_seen" or self.causal or not _takes_hidden(self.segmenter_):
            return None
        columns = np.array([c.startswith(FILLED_COLUMNS[how]) for c in feats[0].columns])
        rows = [
            np.asarray(f.meta.get("body_seen", np.ones(len(f.valid))))[f.valid] < 1
            for f in feats
            if f.valid.any()
        ]
        filled = np.concatenate(rows)
        if not columns.any() or not filled.any():
            return None
        return filled[:, None] & columns[None, :]

    def _fine_states(
        self,
        X: np.ndarray,
        lengths: np.ndarray,
        offsets: np.ndarray | None = None,
        hidden: np.ndarray | None = None,
    ) -> np.ndarray | None:
        """Fine state of every valid frame when the labels are groups of fine states (a
        segmenter with ``predict_fine``, e.g. ``method="grouped_hmm"``); None otherwise."""
        seg = self.segmenter_
        joined = getattr(self, "phase_groups_", None) is not None
        if self.causal or not (hasattr(seg, "predict_fine") or joined):
            return None
        if len(X) == 0:
            return np.zeros(0, dtype=np.int64)
        if joined:  # the fitted states under the phase-joined labels
            given = _given(offsets=offsets, hidden=hidden)
            return np.asarray(seg.predict(X, lengths, **given), dtype=np.int64)
        return np.asarray(seg.predict_fine(X, lengths), dtype=np.int64)

    def suggested_merges(self, labels: pd.DataFrame | None = None, top: int = 10) -> list[dict]:
        """Pairs of states worth merging into one behaviour-level motif, with the evidence.

        Parameters
        ----------
        labels : DataFrame, optional
            A label table of this model (:meth:`label`); gives how often two states alternate
            within half a second. Without it only the state tree and posture distance count.
        top : int

        Returns
        -------
        list of dict (best first): ``states`` (a, b), ``alternations``,
        ``alternation_share``, ``distance`` (between state means, standard units),
        ``same_set_levels`` (levels of :attr:`state_tree_` that keep them together), ``score``
        (see :func:`ethoscribe.segment.lumping.suggested_merges`).
        """
        check_fitted(self, "segmenter_")
        seg = self.segmenter_
        if not hasattr(seg, "transmat_") or self._regimes_used():
            return []  # regimes are mixes of states: no one posture to compare
        state = np.zeros(0, dtype=np.int64)
        if labels is not None:
            state = labels["state"].to_numpy(dtype=np.int64)
        means, transmat = seg.means_, seg.transmat_
        groups = getattr(self, "phase_groups_", None)
        if groups is not None:
            means, transmat = _joined_arrays(seg, groups)
        return suggested_merges(state, means, transmat, self.fps_, LAG_S, top)

    def cut_tree(self, labels: pd.DataFrame, n_sets: int | None = None) -> np.ndarray:
        """The ``state`` column of ``labels`` at a coarser level of :attr:`state_tree_`.

        Parameters
        ----------
        labels : DataFrame
            A label table of this model (:meth:`label`).
        n_sets : int, optional
            Level of the tree (number of sets); None: the level the time-scale rule suggests
            (``state_tree_["suggested_assignment"]``).

        Returns
        -------
        int array (n_frames,): the set of each frame's state (-1 where unscored).
        """
        tree = getattr(self, "state_tree_", None)
        if not tree:
            raise InputError("this model has no state tree (its method has no transitions)")
        if n_sets is None:
            assignment = tree["suggested_assignment"]
        else:
            found = [lv["assignment"] for lv in tree["levels"] if lv["n_sets"] == n_sets]
            if not found:
                have = sorted(lv["n_sets"] for lv in tree["levels"])
                raise InputError(f"n_sets must be one of the tree's levels {have}; got {n_sets!r}")
            assignment = found[0]
        state = labels["state"].to_numpy(dtype=np.int64)
        return np.where(state >= 0, np.r_[np.asarray(assignment, dtype=np.int64), -1][state], -1)

    def merge_groups(self) -> list[list[int]]:
        """Groups of states (2 or more) of the metastable sets chosen by the time-scale rule
        (:func:`ethoscribe.segment.lumping.lump_states`): suggestions, labels are unchanged."""
        tree = getattr(self, "state_tree_", None)
        if not tree:
            return []
        groups: dict[int, list[int]] = {}
        for k, g in enumerate(tree["suggested_assignment"]):
            groups.setdefault(g, []).append(k)
        return [v for v in groups.values() if len(v) >= 2]

    def _states_and_probability(
        self,
        X: np.ndarray,
        lengths: np.ndarray,
        min_frames: int,
        offsets: np.ndarray | None,
        hidden: np.ndarray | None = None,
        probability: bool = True,
    ) -> tuple[np.ndarray, np.ndarray]:
        """Labels (n_frames,) and state probabilities (n_frames, K) of the stacked frames,
        every bout at least ``min_frames`` long (except in causal models); ``offsets``: the
        sequences' session offsets (None: the segmenter has none); ``hidden``: columns left
        out of each frame's emission (:meth:`_hidden`). ``probability`` False: the caller
        reads only the labels, so the merged frames' probabilities are not recomputed."""
        seg = self.segmenter_
        if self.causal:  # what streaming gives: the forward filter's most probable state
            prob = _filtered(self.method, seg, X, lengths)
            return np.argmax(prob, axis=1), prob
        chain = getattr(seg, "predict_min_duration", None)
        given = _given(offsets=offsets, hidden=hidden)
        if min_frames > 1 and self.decoding == "min_duration" and chain is not None:
            # joined phases only merge neighbouring bouts, each already >= the minimum
            return self._to_labelled(*chain(X, lengths, min_frames, OUTLIER_SHARE, **given))
        posteriors = get_segmenter(self.method).posteriors
        if posteriors:
            states = seg.predict(X, lengths, **given)
            prob = seg.predict_proba(X, lengths, **given)
            # phases joined before the minimum bout: a phase is shorter than a bout
            states, prob = self._to_labelled(states, prob)
        else:
            states = seg.predict(X, lengths)  # hard labels: probability 1 (the registry says so)
            prob = np.zeros((len(states), self.n_states_))
            prob[np.arange(len(states)), states] = 1.0
        if min_frames <= 1:
            return states, prob
        merged = enforce_min_bout(states, min_frames, lengths=lengths, probabilities=prob)
        moved = merged != states
        if probability and posteriors and moved.any() and _takes_hidden(seg):
            # the merge takes a bout shorter than the minimum for noise: its frames are left
            # out of the evidence, so their probability is what the frames around them say
            # through the transitions (not near 0 for the new label)
            left_out = np.repeat(moved[:, None], X.shape[1], axis=1)
            if hidden is not None:
                left_out |= hidden
            kept = seg.predict_proba(X, lengths, **_given(offsets=offsets, hidden=left_out))
            prob = self._to_labelled(merged, kept)[1]
        return merged, prob

    # --- persistence (arrays + JSON; written by ethoscribe.io.bundle) ---------------------
    def to_state(self) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
        """JSON-able description and arrays that rebuild this fitted model exactly."""
        check_fitted(self, "segmenter_")
        f_meta, f_arrays = self.features_.to_state()
        s_meta, s_arrays = self.segmenter_.to_state()
        lam = getattr(self, "unit_lambda_", float("nan"))
        meta = {
            **header("ethoscribe.BehaviourModel", FORMAT_VERSION),
            "params": self.saved_params(),
            "cleaning": self.cleaning_.to_dict(),
            "features": f_meta,
            "segmenter_kind": type(self.segmenter_).__name__,
            "segmenter": s_meta,
            "n_states": self.n_states_,
            "fps": self.fps_,
            "keypoints": list(self.keypoints_),
            "n_dims": self.n_dims_,
            "training_sessions": self.training_sessions_,
            "n_training_frames": self.n_training_frames_,
            "selection": None if self.selection_ is None else selection_to_json(self.selection_),
            "labels_at_input_rate": bool(getattr(self, "labels_at_input_rate_", False)),
            "state_tree": getattr(self, "state_tree_", None),
            "phase_groups": getattr(self, "phase_groups_", None),
            "phase_pairs": getattr(self, "phase_pairs_", []),
            "unit_pairs": getattr(self, "unit_pairs_", []),
            "mode_pairs": getattr(self, "mode_pairs_", []),
            "poor_fit_threshold": getattr(self, "poor_fit_threshold_", None),
            "unit_lambda": None if np.isnan(lam) else float(lam),
            "up_axis_report": getattr(self, "up_axis_report_", ""),
            "keypoints_left_out": list(getattr(self, "keypoints_left_out_", [])),
            "view": getattr(self, "view_", "above"),
            "view_vertical": getattr(self, "view_vertical_", None),
            "view_report": getattr(self, "view_report_", ""),
            "view_flip": bool(getattr(self, "view_flip_", False)),
        }
        arrays = {f"features/{k}": v for k, v in f_arrays.items()}
        arrays.update({f"segmenter/{k}": v for k, v in s_arrays.items()})
        if getattr(self, "regimes_", None) is not None:
            reg_meta, reg_arrays = self.regimes_.to_state()
            meta["regimes"] = reg_meta
            arrays.update({f"regimes/{k}": v for k, v in reg_arrays.items()})
        if getattr(self, "filler_", None) is not None:
            fill_meta, fill_arrays = self.filler_.to_state()
            meta["filler"] = fill_meta
            arrays.update({f"filler/{k}": v for k, v in fill_arrays.items()})
        return meta, arrays

    @classmethod
    def from_state(cls, meta: dict[str, Any], arrays: dict[str, np.ndarray]) -> BehaviourModel:
        """Rebuild a fitted model saved by :meth:`to_state`.

        Every field of ``meta`` is checked (type, range, known keys) before use, so a
        hand-edited or foreign ``model.json`` is refused with an :class:`InputError` naming
        the field, never with a bare ``TypeError`` or ``KeyError`` from deep inside.
        """
        if not isinstance(meta, Mapping):
            raise InputError(
                f"model.json must hold a JSON object (a mapping of fields); got "
                f"{type(meta).__name__}. {RESAVE}"
            )
        check_header(meta, "ethoscribe.BehaviourModel", FORMAT_VERSION, "model.json")
        check_meta(meta, known_keys(cls))
        try:
            return cls._rebuild(meta, arrays)
        except EthoscribeError as exc:
            raise InputError(f"model file: {exc}") from None
        except (KeyError, TypeError, ValueError, AttributeError, IndexError, OverflowError) as exc:
            # Backstop for what the explicit checks cannot foresee (nested parts).
            raise InputError(
                f"the model file does not hold what ethoscribe writes "
                f"({type(exc).__name__}: {exc}). {RESAVE}"
            ) from None

    @classmethod
    def _rebuild(cls, meta: Mapping[str, Any], arrays: Mapping[str, np.ndarray]) -> BehaviourModel:
        """``from_state`` after ``_check_meta``: build the parts and check they agree."""
        params = dict(meta["params"])
        # Models saved before the decoding option merged short bouts: they keep doing so.
        params.setdefault("decoding", "merge")
        if "state_range" in params:
            params["state_range"] = tuple(params["state_range"])
        model = cls(**params)
        model._check_params()
        kind = meta["segmenter_kind"]

        def pick(prefix: str) -> dict[str, np.ndarray]:
            return {k[len(prefix) :]: v for k, v in arrays.items() if k.startswith(prefix)}

        # saved before placeholders, held or interpolated points and exchanged identities
        # were looked for, or a tracker's confidence scale read: they still are not
        saved = {
            "placeholders": None, "mask_held": False, "mask_interpolated": False,
            "repair_identities": False, "confidence_scale": 1.0, **meta["cleaning"],
        }  # fmt: skip
        model.cleaning_ = CleanParams.from_dict(saved)
        model.features_ = FeaturePipeline.from_state(meta["features"], pick("features/"))
        cls = get_segmenter(model.method).cls
        if kind != cls.__name__:
            raise InputError(
                f"'segmenter_kind' {kind!r} is not the estimator of method {model.method!r} "
                f"({cls.__name__}). {RESAVE}"
            )
        model.segmenter_ = cls.from_state(meta["segmenter"], pick("segmenter/"))
        # Models saved before keypoint filling have no filler: every keypoint stays needed.
        filler = meta.get("filler")
        if filler is not None:
            filler = KeypointFiller.from_state(filler, pick("filler/"))
        model.filler_ = filler
        # Models saved before slow regimes label their states.
        regimes = meta.get("regimes")
        if regimes is not None:
            regimes = SlowRegimes.from_state(regimes, pick("regimes/"))
        model.regimes_ = regimes
        selection = meta["selection"]
        model.selection_ = None if selection is None else selection_from_json(selection)
        model.labels_at_input_rate_ = meta.get("labels_at_input_rate") is True
        model.state_tree_ = _checked_tree(meta.get("state_tree"), int(meta["n_states"]))
        model.n_states_ = int(meta["n_states"])
        # Models saved before the phase join label their fitted states.
        labelled = model.n_states_
        if model._regimes_used():
            labelled = model.regimes_.n_states_in_
            if model.regimes_.n_regimes_ != model.n_states_:
                raise InputError(
                    f"'n_states' {model.n_states_} differs from the {model.regimes_.n_regimes_} "
                    f"slow regimes. {RESAVE}"
                )
        model.phase_groups_ = _checked_groups(
            meta.get("phase_groups"), int(model.segmenter_.n_states_), labelled
        )
        pairs = meta.get("phase_pairs") or []
        model.phase_pairs_ = list(pairs) if isinstance(pairs, list) else []
        pairs = meta.get("unit_pairs") or []
        model.unit_pairs_ = list(pairs) if isinstance(pairs, list) else []
        pairs = meta.get("mode_pairs") or []
        model.mode_pairs_ = list(pairs) if isinstance(pairs, list) else []
        model.random_seed_ = model.random_state
        model.fps_ = float(meta["fps"])
        model.keypoints_ = tuple(meta["keypoints"])
        model.n_dims_ = int(meta["n_dims"])
        model.quality_ = []
        model.training_sessions_ = list(meta["training_sessions"])
        model.n_training_frames_ = int(meta["n_training_frames"])
        # Models saved before the threshold was kept: no check of new sessions' fit.
        threshold = meta.get("poor_fit_threshold")
        if threshold is not None and (
            isinstance(threshold, bool)
            or not isinstance(threshold, int | float)
            or not np.isfinite(threshold)
        ):
            raise InputError(
                f"'poor_fit_threshold' must be a number or null, got {threshold!r}. {RESAVE}"
            )
        model.poor_fit_threshold_ = None if threshold is None else float(threshold)
        model.saved_without_fit_check_ = "poor_fit_threshold" not in meta
        value = meta.get("unit_lambda")
        if value is not None and not (is_real(value) and 0 <= value <= 1):
            raise InputError(
                f"'unit_lambda' must be a number from 0 to 1 or null, got {value!r}. {RESAVE}"
            )
        model.unit_lambda_ = float("nan") if value is None else float(value)
        said = meta.get("up_axis_report", "")
        if not isinstance(said, str):
            raise InputError(f"'up_axis_report' must be text, got {said!r}. {RESAVE}")
        model.up_axis_report_ = said
        left = meta.get("keypoints_left_out", [])
        if not (isinstance(left, list) and all(isinstance(k, str) for k in left)):
            raise InputError(
                f"'keypoints_left_out' must be a list of names, got {left!r}. {RESAVE}"
            )
        model.keypoints_left_out_ = left
        view, vertical = meta.get("view", "above"), meta.get("view_vertical")
        said = meta.get("view_report", "")
        if view not in ("above", "side") or vertical not in (
            (None,) if view == "above" else ("x", "y")
        ):
            raise InputError(
                f"'view' must be 'above' (view_vertical null) or 'side' (view_vertical 'x' or "
                f"'y'), got {view!r} / {vertical!r}. {RESAVE}"
            )
        if not isinstance(said, str):
            raise InputError(f"'view_report' must be text, got {said!r}. {RESAVE}")
        model.view_, model.view_vertical_, model.view_report_ = view, vertical, said
        flip = meta.get("view_flip", False)
        if not isinstance(flip, bool):
            raise InputError(f"'view_flip' must be true or false, got {flip!r}. {RESAVE}")
        model.view_flip_ = flip
        # The parts must describe the same body plan and state count as the summary fields.
        problems = []
        if model.features_.keypoints_ != model.keypoints_:
            problems.append(
                f"'keypoints' {list(model.keypoints_)} differ from the feature pipeline's "
                f"{list(model.features_.keypoints_)}"
            )
        if model.features_.n_dims_ != model.n_dims_ + (model.view_ == "side"):
            problems.append(
                f"'n_dims' {model.n_dims_} differs from the feature pipeline's "
                f"{model.features_.n_dims_}"
                + (" (a side view's features are 3-D)" if model.view_ == "side" else "")
            )
        if model.phase_groups_ is None and int(model.segmenter_.n_states_) != labelled:
            problems.append(
                f"'n_states' {model.n_states_} differs from the segmenter's "
                f"{model.segmenter_.n_states_}"
            )
        n_features = len(model.features_.columns_)
        if int(model.segmenter_.n_features_in_) != n_features:
            problems.append(
                f"the segmenter expects {model.segmenter_.n_features_in_} features but the "
                f"feature pipeline makes {n_features}"
            )
        if problems:
            raise InputError("the model file is inconsistent: " + "; ".join(problems) + ".")
        return model


def _offsets_of(segmenter: Any, X: np.ndarray, lengths: np.ndarray) -> np.ndarray | None:
    """Every sequence's session offset under ``segmenter`` (``GaussianHMM.offsets``), to be
    estimated once for every use of the same frames; None for a segmenter without offsets."""
    if not getattr(segmenter, "session_offsets", False) or not len(X):
        return None
    return segmenter.offsets(X, lengths)


def _given(**options: np.ndarray | None) -> dict[str, np.ndarray]:
    """The keyword options of a segmenter's decoding call that have a value (``offsets=``
    when there are offsets to give, ``hidden=`` when columns are left out)."""
    return {k: v for k, v in options.items() if v is not None}


def _takes_hidden(seg: Any) -> bool:
    """Whether the segmenter's decoding can leave columns out of a frame (``hidden=``)."""
    try:
        return "hidden" in inspect.signature(seg.predict).parameters
    except (TypeError, ValueError):
        return False


def check_one_rate(rates: Iterable[float], sessions: Sequence[str] | None = None) -> None:
    """Refuse sessions of different frame rates, naming the rate to resample them to and,
    given ``sessions`` (one name per rate), the sessions filmed at each rate.

    >>> try:
    ...     check_one_rate([30.0, 30.0, 60.0], ["a", "b", "c"])
    ... except InputError as exc:
    ...     print(str(exc).split(";")[0])
    sessions have different frame rates: 30 fps ('a', 'b'), 60 fps ('c')
    """
    rates = [float(r) for r in rates]
    distinct = sorted(set(rates))
    if len(distinct) > 1:
        found = f" {distinct}"
        if sessions is not None and len(sessions) == len(rates):
            pairs = list(zip(sessions, rates, strict=True))
            at = {r: [repr(str(s)) for s, q in pairs if q == r] for r in distinct}
            found = ": " + ", ".join(f"{r:g} fps ({listed(names)})" for r, names in at.items())
        raise InputError(
            f"sessions have different frame rates{found}; resample them to one rate, e.g. the "
            f"lowest, with cleaning={{'target_fps': {distinct[0]:g}}}"
        )


def best_state_log_likelihood(
    segmenter: Any,
    X: np.ndarray,
    lengths: Sequence[int] | None = None,
    offsets: np.ndarray | None = None,
) -> np.ndarray | None:
    """Per frame, ``max_k log N(x | mean_k, cov_k)``: the log-density of the fitted Gaussian
    state that explains the frame best (the fine states of a grouped model), shape (n,);
    None for a segmenter without Gaussian states. A segmenter with session offsets reads each
    session's frames (``lengths``) minus its offset (``offsets``, estimated if not given), as
    it labels them."""
    seg = getattr(segmenter, "fine_", segmenter)
    means, covars = getattr(seg, "means_", None), getattr(seg, "covars_", None)
    kind = getattr(seg, "covariance_type", None)
    if means is None or covars is None or kind not in ("full", "diag"):
        return None
    if np.ndim(covars) != 3:
        return None
    X = np.asarray(X, dtype=np.float64)
    if not len(X):
        return np.zeros(0)
    if getattr(seg, "session_offsets", False):
        lengths = np.asarray([len(X)] if lengths is None else lengths, dtype=np.int64)
        offsets = seg.offsets(X, lengths) if offsets is None else offsets
        X = X - np.repeat(offsets, lengths, axis=0)
    return GaussianEmission(means, covars, kind).log_likelihood(X).max(axis=1)


def poor_fit_threshold(
    segmenter: Any,
    X: np.ndarray,
    lengths: Sequence[int] | None = None,
    offsets: np.ndarray | None = None,
) -> float | None:
    """The 1st percentile (``POOR_FIT_PERCENTILE``) of the training frames' best-state
    log-likelihood (:func:`best_state_log_likelihood`, ``offsets`` as there); None without
    Gaussian states."""
    ll = best_state_log_likelihood(segmenter, X, lengths, offsets)
    if ll is None or not len(ll):
        return None
    return float(np.percentile(ll, POOR_FIT_PERCENTILE))


def offset_distance(segmenter: Any, offset: np.ndarray) -> float:
    """``b^T P_0 b`` of one session's offset under the prior of the training individuals'
    offsets (:mod:`ethoscribe.segment.session_offsets`): about chi-square with one degree of
    freedom per offset column for an individual like those."""
    cols = np.asarray(segmenter.offset_columns_, dtype=np.int64)
    b = np.asarray(offset, dtype=np.float64)[cols]
    return float(b @ segmenter.offset_precision_ @ b)


def offset_limit(segmenter: Any) -> float | None:
    """The largest :func:`offset_distance` of an individual like the training ones, but for
    one in ``1 / POOR_FIT_OFFSET_TAIL``; None for a model fitted on one session.

    The prior's spread is estimated from the training offsets: ``(n_sessions - 1) * m``
    squared whitened components for ``m`` offset columns. A new individual's distance over
    ``m`` is then an F(m, (n_sessions - 1) m) variable (a ratio of two independent
    chi-square means), so the limit is ``m`` times its ``1 - POOR_FIT_OFFSET_TAIL``
    quantile: wide when few individuals were seen, the chi-square quantile with many.
    """
    if float(getattr(segmenter, "offset_spread_", 0.0)) <= 0:
        return None
    from scipy.stats import f as f_dist

    m = len(segmenter.offset_columns_)
    seen = max(len(segmenter.session_offsets_) - 1, 1) * m
    return float(m * f_dist.ppf(1.0 - POOR_FIT_OFFSET_TAIL, m, seen))


def poor_fit_test(r: Mapping[str, Any], warn_above: float = POOR_FIT_WARN_SHARE) -> str | None:
    """Which test flags a session (record of :meth:`BehaviourModel.fit_shares`): ``"share"``
    where more than ``warn_above`` of its frames are poorly explained, else ``"offset"`` where
    its offset (with session offsets) lies beyond ``offset_limit``, else None."""
    share = r.get("share")
    if share is not None and share > warn_above:
        return "share"
    d2, limit = r.get("offset_distance"), r.get("offset_limit")
    return "offset" if d2 is not None and limit is not None and d2 > limit else None


def poorly_fitted(shares: Sequence[Mapping[str, Any]]) -> list[Mapping[str, Any]]:
    """The records of :meth:`BehaviourModel.fit_shares` whose share of poorly explained frames
    is above ``POOR_FIT_WARN_SHARE``, or whose offset (with session offsets) lies beyond
    ``offset_limit`` (the sessions to warn about)."""
    return [r for r in shares if poor_fit_test(r)]


POOR_FIT_LINES = 3
"""At most this many sessions get a warning line each; more are said in one line (a study of
a thousand short clips flagged 35 of them, one long line each)."""


def poor_fit_messages(shares: Sequence[Mapping[str, Any]], model: BehaviourModel) -> list[str]:
    """One warning line per session explained far worse than the training frames (share of
    poorly explained frames above ``POOR_FIT_WARN_SHARE``; beyond ``POOR_FIT_LINES`` of them
    one line for all, naming the worst), or one line saying the check could not run because
    ``model`` was saved before it kept its threshold (a method without Gaussian states has
    none either: no check, no line)."""
    if getattr(model, "poor_fit_threshold_", None) is None:
        if not getattr(model, "saved_without_fit_check_", False):
            return []
        return [
            "the model was saved before it kept the fit threshold, so how well it explains the "
            "new sessions is not checked; fit it again (discover) to have the check"
        ]
    flagged = poorly_fitted(shares)
    if len(flagged) <= POOR_FIT_LINES:
        return [_poor_fit_line(r) for r in flagged]
    worst = sorted(flagged, key=_poor_fit_rank, reverse=True)[:POOR_FIT_LINES]
    named = ", ".join(f"'{r['session']}' ({_poor_fit_reason(r)})" for r in worst)
    return [
        f"{len(flagged)} of {len(shares)} sessions are explained far worse than the training "
        f"frames (over {POOR_FIT_WARN_SHARE:.0%} of their frames below the worst 1 % of the "
        f"training frames, about 1 % expected, or feature levels offset far beyond the training "
        f"individuals'), e.g. {named}; every session's share and offset: "
        f"BehaviourModel.fit_shares, or a labelling run's summary.json ('fit_to_model') and "
        f"report. {_POOR_FIT_ADVICE}"
    ]


def _poor_fit_reason(r: Mapping[str, Any]) -> str:
    """Which test flagged a session, in a few words (``fit_shares`` record)."""
    if poor_fit_test(r) == "share":
        return f"{r['share']:.0%} of frames poorly explained"
    return f"offset {r['offset_distance']:.0f}, limit {r['offset_limit']:.0f}"


def _poor_fit_rank(r: Mapping[str, Any]) -> tuple[float, float]:
    """Shares over the limit first (most poorly explained first), then offsets by their
    distance over the limit."""
    if poor_fit_test(r) == "share":
        return (1.0, r["share"])
    return (0.0, (r.get("offset_distance") or 0.0) / (r.get("offset_limit") or 1.0))


_POOR_FIT_ADVICE = (
    "Look at the bouts of such sessions before trusting their labels; likely the body size "
    "or camera scale differs from training (check units and px_per_unit in the manifest), "
    "keypoints are missing, the frame rate differs (a session filmed faster and resampled to "
    "the model's rate is smoother than one filmed at it: its levels of jitter are offset), "
    "the sessions are too short for the features' windows, or the behaviour is new: refit "
    "with these sessions included (ethoscribe discover), or in Python fit with "
    "features={'scale_by_size': True}"
)


def _poor_fit_line(r: Mapping[str, Any]) -> str:
    """The warning of one poorly fitted session (record of ``fit_shares``)."""
    if poor_fit_test(r) == "share":
        what = (
            f"the model explains {r['share']:.0%} of its frames worse than the worst 1 % of "
            "its own training frames (about 1 % expected)"
        )
    else:
        what = (
            "its feature levels are offset from the training individuals' far more than "
            f"theirs differ (squared distance {r['offset_distance']:.0f}; "
            f"{1 - POOR_FIT_OFFSET_TAIL:.1%} of individuals like them stay below "
            f"{r['offset_limit']:.0f})"
        )
    return f"session '{r['session']}': {what}. {_POOR_FIT_ADVICE}"


def _causal_cleaning(cleaned: Sequence[PoseTracks], params: CleanParams) -> CleanParams:
    """Cleaning of a causal model: tracks cleaned causally, and fixed settings where the
    cleaning chose them from the recordings (:func:`~ethoscribe.clean.streaming_cleaning`)."""
    batch = [s.session for s in cleaned if not s.meta.get("cleaning", {}).get("causal", False)]
    if batch:
        raise InputError(
            f"causal=True needs tracks cleaned with clean(..., causal=True); session "
            f"'{batch[0]}' was cleaned in batch"
        )
    if params.target_fps is not None:
        raise InputError("causal=True cannot resample; set cleaning target_fps=None")
    return streaming_cleaning(params, [s.meta.get("cleaning", {}) for s in cleaned])


def _filtered(method: str, seg: Any, X: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """Forward-filtered posteriors of every frame, each session from its own start."""
    if hasattr(seg, "filter"):
        return seg.filter(X, lengths)
    spec, out, start = get_segmenter(method), [], 0
    for n in lengths:
        live = spec.live(seg)
        out.extend(live.push(x) for x in X[start : start + n])
        start += n
    return np.asarray(out, dtype=np.float64).reshape(len(X), -1)


class PhaseJoined:
    """A segmenter labelling as ``BehaviourModel(join_phases=True)`` does: its fitted states
    with phases of one rhythm joined (:func:`ethoscribe.segment.lumping.join_phases`), for refits
    that must label like the model (the stability check). ``groups``: the joined state of every
    fitted state, for a segmenter fitted already; otherwise found when :meth:`fit` runs.
    ``units``: as ``join_units=True``, also join states that are one behaviour in different
    units (found in :meth:`fit`, which sees the units; a segmenter given fitted joins phases
    only). ``phases``: as ``join_phases``."""

    def __init__(
        self,
        segmenter: Any,
        steady: Sequence[int],
        groups: Sequence[int] | None = None,
        units: bool = False,
        phases: bool = True,
        modes: bool = False,
    ):
        self.segmenter = segmenter
        self.steady = list(steady)
        self.units = units
        self.phases = phases
        self.modes = modes
        self.groups = None if groups is None else np.asarray(groups, dtype=np.int64)
        if groups is None and hasattr(segmenter, "transmat_"):
            self.groups = self._find(None, None)

    def _find(self, X: np.ndarray | None, lengths: Any) -> np.ndarray | None:
        if X is not None and self.units:
            X, lengths = check_X_lengths(X, lengths)
        else:
            X = None
        groups, *_ = joined_states(self.segmenter, self.steady, X, lengths, self.phases, self.modes)
        return None if groups is None else np.asarray(groups, dtype=np.int64)

    def fit(self, X: np.ndarray, lengths: Any = None) -> PhaseJoined:
        self.segmenter.fit(X, lengths)
        self.groups = self._find(X, lengths)
        return self

    def predict(self, X: np.ndarray, lengths: Any = None) -> np.ndarray:
        states = np.asarray(self.segmenter.predict(X, lengths), dtype=np.int64)
        return states if self.groups is None else self.groups[states]

    @property
    def n_states_(self) -> int:
        if self.groups is None:
            return int(self.segmenter.n_states_)
        return int(self.groups.max()) + 1


class RegimeLabelled:
    """A segmenter whose labels go through slow regimes (``BehaviourModel(slow_regimes=...)``):
    ``regimes`` fitted already (the model's own), or fitted on the segmenter's labels after each
    :meth:`fit` with the model's settings (a refit of the stability check)."""

    def __init__(self, inner: Any, fps: float, regimes: SlowRegimes) -> None:
        self.inner = inner
        self.fps = fps
        self.regimes = regimes

    def fit(self, X: np.ndarray, lengths: Any = None) -> RegimeLabelled:
        self.inner.fit(X, lengths)
        X, lengths = check_X_lengths(X, lengths)
        states = np.asarray(self.inner.predict(X, lengths), dtype=np.int64)
        r = self.regimes
        self.regimes = SlowRegimes(r.window_s, r.threshold, r.max_regimes, r.random_state)
        self.regimes.fit(states, lengths, int(self.inner.n_states_), self.fps)
        return self

    def predict(self, X: np.ndarray, lengths: Any = None) -> np.ndarray:
        X, lengths = check_X_lengths(X, lengths)
        states = np.asarray(self.inner.predict(X, lengths), dtype=np.int64)
        if not self.regimes.used_:
            return states
        return self.regimes.label_bouts(states, lengths, self.fps)[0]  # as the model labels

    @property
    def n_states_(self) -> int:
        if not self.regimes.used_:
            return int(self.inner.n_states_)
        return self.regimes.n_regimes_


def labels_like_model(model: BehaviourModel, segmenter: Any, own: bool = False) -> Any:
    """``segmenter`` (fitted or not) labelling as ``model`` does: wrapped in
    :class:`PhaseJoined` when the model joins phases and in :class:`RegimeLabelled` when it
    labels slow regimes, as it is otherwise. ``own``: it is the model's own segmenter, whose
    joined states are the model's labelled states."""
    inner = _joined_like_model(model, segmenter, own)
    if not model._regimes_used():
        return inner
    return RegimeLabelled(inner, model.fps_, model.regimes_)


def _joined_like_model(model: BehaviourModel, segmenter: Any, own: bool) -> Any:
    steady = steady_columns(model.features_.columns_)
    if own:
        groups = getattr(model, "phase_groups_", None)
        return segmenter if groups is None else PhaseJoined(segmenter, steady, groups)
    causal = model._causal_path()
    units = bool(getattr(model, "join_units", False))
    modes = bool(getattr(model, "join_modes", False))
    if (
        not (model.join_phases or units or modes)
        or causal
        or not isinstance(segmenter, GaussianHMM)
    ):
        return segmenter
    return PhaseJoined(segmenter, steady, units=units, phases=bool(model.join_phases), modes=modes)


def joined_states(
    segmenter: Any,
    steady: Sequence[int],
    X: np.ndarray | None,
    lengths: Any,
    phases: bool = True,
    modes: bool = False,
    offsets: np.ndarray | None = None,
) -> tuple[list[int] | None, list[dict], list[dict], list[dict]]:
    """Labelled state of every fitted state of ``segmenter`` (Gaussian states, transitions),
    with the pairs joined and their evidence; None when nothing is joined.

    ``phases``: join phases of one rhythm (:func:`ethoscribe.segment.lumping.join_phases` on the
    ``steady`` columns). ``X`` given (the fitted frames, ``lengths`` per unit): also join states
    that are one behaviour in different units (:func:`ethoscribe.segment.lumping.
    join_across_units`, shares of the units' frames from the state posteriors). ``modes``:
    also join parts of one mode (:func:`ethoscribe.segment.lumping.join_modes`). The sets of
    pairs are joined together (connected components). ``offsets``: the units' session offsets
    (``GaussianHMM.offsets``) when the segmenter has them, else None (estimated if needed).
    """
    n = int(segmenter.n_states_)
    phase_pairs: list[dict] = []
    if phases:
        _, found = join_phases(
            segmenter.transmat_, segmenter.means_, segmenter.covars_, steady, float(segmenter.fps)
        )
        phase_pairs = [
            {
                "states": [int(a) for a in p["states"]],
                "lift": p["lift"],
                "distance": p["distance"],
                "stay_s": list(p["stay_s"]),
            }
            for p in found
        ]
    unit_pairs: list[dict] = []
    if X is not None and lengths is not None and len(lengths) >= 2 and n >= 2:
        share = unit_shares(segmenter.predict_proba(X, lengths, **_given(offsets=offsets)), lengths)
        _, found = join_across_units(segmenter.means_, share, mutual=True)
        overlap = unit_overlap(share)
        means = np.asarray(segmenter.means_, dtype=np.float64)
        unit_pairs = [
            {
                "states": [int(a), int(b)],
                "overlap": float(overlap[a, b]),
                "distance": float(np.linalg.norm(means[a] - means[b])),
            }
            for a, b in found
        ]
    mode_pairs: list[dict] = []
    if modes:
        _, found = join_modes(
            segmenter.transmat_, segmenter.means_, segmenter.covars_, float(segmenter.fps)
        )
        mode_pairs = [
            {"states": [int(a) for a in p["states"]], "lift": p["lift"], "stay_s": p["stay_s"]}
            for p in found
        ]
    pairs = [tuple(p["states"]) for p in phase_pairs + unit_pairs + mode_pairs]
    if not pairs:
        return None, [], [], []
    groups = [int(a) for a in pair_components(n, pairs)]
    return groups, phase_pairs, unit_pairs, mode_pairs


def _joined_said(
    groups: Sequence[int],
    phase_pairs: Sequence[dict],
    unit_pairs: Sequence[dict],
    mode_pairs: Sequence[dict] = (),
) -> str:
    """What was joined, in words: ``phases of one rhythm joined (fitted 4+5 as 4)`` and / or
    ``one behaviour in different units joined (fitted 1+3 as 1)``."""
    said = []
    for pairs, what in (
        (phase_pairs, "phases of one rhythm joined"),
        (unit_pairs, "one behaviour in different units joined"),
        (mode_pairs, "parts of one mode joined"),
    ):
        if pairs:
            joined = ", ".join(
                f"fitted {a}+{b} as {groups[a]}" for p in pairs for a, b in [p["states"]]
            )
            said.append(f"{what} ({joined})")
    return "; ".join(said)


def _joined_arrays(segmenter: Any, groups: Sequence[int]) -> tuple[np.ndarray, np.ndarray]:
    """Means (occupancy-weighted) and per-frame transitions of the phase-joined states."""
    g = np.asarray(groups, dtype=np.int64)
    weight = membership(g) * stationary_distribution(segmenter.transmat_)[:, None]
    means = (weight.T @ segmenter.means_) / np.maximum(weight.sum(0), 1e-300)[:, None]
    return means, lumped_transitions(segmenter.transmat_, g)


def _phase_tree(segmenter: Any, groups: Sequence[int], fps: float, reason: str) -> dict | None:
    """State tree of the phase-joined states, with the fitted states as its fine level."""
    _, transmat = _joined_arrays(segmenter, groups)
    tree = _state_tree(_Transitions(transmat), fps) if len(transmat) >= 2 else None
    if tree is None:
        return None
    return {
        **tree,
        "fine_assignment": [int(a) for a in groups],
        "fine_lag_s": LAG_S,
        "fine_reason": reason,
        "fine_levels": merge_tree(segmenter.transmat_, fps, LAG_S),
    }


class _Transitions:
    """A transition matrix dressed as a segmenter, for :func:`_state_tree`."""

    def __init__(self, transmat: np.ndarray) -> None:
        self.transmat_ = transmat


def _checked_groups(groups: Any, n_fitted: int, n_states: int) -> list[int] | None:
    """Saved phase groups if well formed (one labelled state per fitted state, covering
    0..n_states-1); None when absent. Refused when present but damaged: labels depend on it."""
    if groups is None:
        return None
    ok = (
        isinstance(groups, list)
        and len(groups) == n_fitted
        and all(isinstance(a, int) and not isinstance(a, bool) for a in groups)
        and set(groups) == set(range(n_states))
    )
    if not ok:
        raise InputError(
            f"'phase_groups' must list, for each of the {n_fitted} fitted states, its labelled "
            f"state (integers covering 0..{n_states - 1}); got {groups!r:.80}. {RESAVE}"
        )
    return [int(a) for a in groups]


LAG_S = 0.5  # lag of the state tree: about one short bout (the minimum bout)
MIN_TIMESCALE_S = 1.0  # exchanges slower than this are between behaviours


def _state_tree(segmenter: Any, fps: float) -> dict | None:
    """Merge tree of the fitted states (PCCA+ sets at every level), JSON-able; None without a
    transition matrix (change-point segmenters)."""
    transmat = getattr(segmenter, "transmat_", None)
    if transmat is None or len(transmat) < 2:
        return None
    lump = lump_states(transmat, fps, lag_s=LAG_S, min_timescale_s=MIN_TIMESCALE_S)
    return {
        "lag_s": LAG_S,
        "min_timescale_s": MIN_TIMESCALE_S,
        "timescales_s": [float(t) if np.isfinite(t) else None for t in lump.timescales_s],
        "suggested_n_sets": lump.n_sets,
        "suggested_assignment": lump.assignment.tolist(),
        "reason": lump.reason,
        "levels": merge_tree(transmat, fps, LAG_S),
        **_fine_tree(segmenter, fps),
    }


def _fine_tree(segmenter: Any, fps: float) -> dict:
    """The level below the labelled states, for segmenters whose states group finer ones:
    the group of every fine state and the fine states' own merge tree (at the grouping lag)."""
    fine, assignment = getattr(segmenter, "fine_", None), getattr(segmenter, "assignment_", None)
    if fine is None or assignment is None:
        return {}
    lag = segmenter._lag_s()
    return {
        "fine_assignment": [int(a) for a in assignment],
        "fine_lag_s": lag,
        "fine_reason": str(getattr(segmenter, "group_reason_", "")),
        "fine_levels": merge_tree(fine.transmat_, fps, lag),
    }


def _checked_tree(tree: Any, n_states: int) -> dict | None:
    """A saved state tree if it is well formed for ``n_states`` states; otherwise None (the
    tree is advice only, so a damaged one is dropped rather than refused)."""
    try:
        levels = tree["levels"]
        ok = all(
            len(lv["assignment"]) == n_states
            and all(isinstance(a, int) and 0 <= a < lv["n_sets"] for a in lv["assignment"])
            for lv in levels
        )
        chosen = tree["suggested_assignment"]
        ok = ok and len(chosen) == n_states and all(isinstance(a, int) for a in chosen)
    except (KeyError, TypeError):
        return None
    return tree if ok else None


def _at_input_rate(
    labels: pd.DataFrame, sessions: Sequence[PoseTracks], fps: float
) -> pd.DataFrame:
    """Labels of resampled sessions put back on each session's own frames (nearest frame in
    time of the model's rate)."""
    rates = {s.session: (float(s.fps), s.n_frames) for s in sessions}
    parts = []
    for (session, _animal), part in labels.groupby(["session", "animal"], sort=False):
        own, n = rates[str(session)]
        if abs(own - fps) < 1e-9:
            parts.append(part)
            continue
        at = np.minimum(np.rint(np.arange(n) * fps / own).astype(np.int64), len(part) - 1)
        out = part.iloc[at].reset_index(drop=True)
        out["frame"] = np.arange(n)
        out["time_s"] = np.arange(n) / own
        parts.append(out)
    return pd.concat(parts, ignore_index=True)


def _with_seen(
    feats: list[FeatureSet], filled: Sequence[tuple[PoseTracks, np.ndarray]]
) -> list[FeatureSet]:
    """Feature sets (sessions in order, animals within) with ``meta['body_seen']`` (F,)."""
    seen = [s[:, a] for _, s in filled for a in range(s.shape[1])]
    return [replace(f, meta={**f.meta, "body_seen": v}) for f, v in zip(feats, seen, strict=True)]
