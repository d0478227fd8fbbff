"""Batch runs that create workspaces: discovery on a study, labelling a new cohort."""

from __future__ import annotations

import functools
import shutil
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe.clean import CleanParams, cleaned_again, streaming_cleaning
from ethoscribe.clean.steps import position_text
from ethoscribe.curation import Curation
from ethoscribe.errors import InputError, InputWarning, WorkspaceError, counted, listed
from ethoscribe.features import FeatureSet
from ethoscribe.features.vertical_check import resolve_up_axis
from ethoscribe.features.view_check import resolve_view
from ethoscribe.io import atomic_table_writer, atomic_write_json, read_json, write_table
from ethoscribe.io.bundle import write_bundle
from ethoscribe.label_table import csv_rounded
from ethoscribe.pose import IN_SESSIONS, PoseTracks, study_keypoints
from ethoscribe.saved_state import header
from ethoscribe.segment.model import (
    POOR_FIT_PERCENTILE,
    POOR_FIT_WARN_SHARE,
    BehaviourModel,
    check_one_rate,
    labels_like_model,
    motif_name,
    poor_fit_messages,
    poorly_fitted,
    stack_valid,
)
from ethoscribe.segment.registry import get_segmenter
from ethoscribe.segment.sampling import representative_blocks, take_blocks
from ethoscribe.segment.stability import stability_report
from ethoscribe.workspace.cache import (
    CACHE_FOLDER,
    CLEANING_USED,
    cache_model,
    decode_session,
    load_prepared,
    prepare_session,
)
from ethoscribe.workspace.compare import write_ethogram_report
from ethoscribe.workspace.executor import connect, default_jobs, map_sessions
from ethoscribe.workspace.expert import carry_learned
from ethoscribe.workspace.files import load_features, load_model
from ethoscribe.workspace.fits import CachedReport, fit_digest, fit_or_reuse, ticking
from ethoscribe.workspace.folder import (
    CAUTION,
    FORMAT_VERSION,
    JOURNAL_FILE,
    WORKSPACE_FILE,
    Staging,
    Workspace,
    append_journal,
    features_table,
    hold_output,
    jsonable,
    now,
    read_journal,
    table_json,
    versions,
    write_ethogram_tables,
)
from ethoscribe.workspace.learned_labels import retire_learned
from ethoscribe.workspace.postures import cache_postures
from ethoscribe.workspace.reading import (
    LABELLED_FPS,
    as_path,
    as_paths,
    check_readers_portable,
    cleaning_summary,
    discovery_cleaning,
    labelled_frames,
    plan_sessions,
    read_planned,
    reading_summary,
    sessions_table,
)

STABILITY_FRAMES = 30_000

# A cohort filmed this much slower than the model (29.97 against 30 fps, 59.94 against 60) is
# resampled up to the model's rate for labelling: one frame in a hundred at most interpolated
# between measured neighbours of a smoothed track. Slower still is refused.
RATE_TOLERANCE = 0.01


def discover(
    inputs: Sequence[str | Path],
    out: str | Path,
    manifest: str | Path | None = None,
    fps: float | None = None,
    origin: str | None = None,
    axis: tuple[str, str] | None = None,
    min_confidence: float | None = None,
    states: int | str = "auto",
    method: str = "hmm",
    seed: int = 0,
    progress: bool = True,
    stability: bool = True,
    jobs: int | None = 1,
    scheduler: Any = None,
    force: bool = False,
    replace_curation: bool = False,
    fit_frames: int | None = 1_000_000,
    format: str | None = None,
    reader_options: Mapping[str, Any] | None = None,
    cleaning: CleanParams | Mapping[str, Any] | None = None,
    causal: bool = False,
    join_tracks: bool = False,
    social: bool = True,
    up_axis: str = "auto",
    slow_regimes: bool = True,
    view: str = "auto",
    up_direction: str = "auto",
) -> Workspace:
    """Read, clean, featurise and segment sessions; write a workspace into ``out``.

    Parameters
    ----------
    inputs : a file or folder of pose files, a list of them (or none, with a manifest that
        lists paths)
    out : the workspace folder
    manifest : CSV (or table) with per-session fps, calibration, group, subject ...
    min_confidence : shorthand for ``cleaning={"min_confidence": ...}``
    format : reader name ("tidy", "wide", "nwb" or a registered one; default by suffix)
    reader_options : options of that reader, e.g. ``{"pattern": "{keypoint}_{axis}"}``
    join_tracks : chain a tracker's track pieces (``track0``, ``track1`` ...) into animals by
        continuity; the joins are listed per session in ``sessions.csv`` (``track_joins``).
        Without it, each piece is an animal of its own.
    social : add features of the nearest other animal when sessions have several animals
        (every session must then have two or more); False for a study that mixes single- and
        multi-animal sessions
    up_axis : the vertical axis of 3-D tracks ("x", "y" or "z"; motion capture often has y
        up): headings and heights are taken about it. "auto" (default) reads it from the
        tracks (the body's spread stands apart along the vertical and the animals range least
        along it; z when they give no clear sign); ``summary.json`` and the report say which
        and why
    up_direction : which way that axis points, "up" or "down" (camera coordinates grow
        downwards); "auto" (default) reads it from the floor. Only the drawn postures depend
        on it (turned upright when it points down)
    view : how a camera filmed 2-D tracks: "above" (the body frame turns with the animal),
        "side" (the image's y is vertical: the body frame only mirrors the animal to face one
        way and keeps its height and pitch), or "auto" (default: read from the tracks, from
        the side when the body's long axis keeps to an image axis and the animals travel
        along the other; ``features.view_check``); ``summary.json`` and the report say which
    slow_regimes : label stretches of minutes whose states alternate in a steady mix by that
        mix when the training labels hold such stretches (``BehaviourModel(slow_regimes=
        "auto")``; the report says when it happened); False keeps the states as the motifs
        (sessions whose first minutes hold other behaviours than their last can be read as
        two regimes)
    cleaning : :class:`~ethoscribe.clean.CleanParams` or a dict of its fields; unset fields
        take their defaults, except ``swap_pairs``, which defaults to ``"auto"`` (left/right
        pairs read from the keypoint names; pass ``()`` to switch repair off). Every value used
        is recorded in ``summary.json`` under ``cleaning``.
    jobs : worker processes for the per-session work (None: every CPU)
    scheduler : a Dask scheduler address or ``dask.distributed.Client`` to run it on
        (the workspace folder must then be on a file system the workers share)
    force : recompute cleaned and labelled sessions even when the cache holds them
    replace_curation : allow a new discovery in a workspace whose motifs were already named
    fit_frames : fit the features and the model on at most this many frames (blocks of
        about five minutes from every session; None: all). Memory then grows with this
        sample plus the largest session, not with the study. 1,000,000 frames (9 h at 30 fps)
        holds many thousands of bouts of every common behaviour, and the model fit itself
        works on a subsample of 200,000 frames (the HMM's ``fit_max_frames``).
    causal : fit a model meant for closed-loop labelling
        (:class:`~ethoscribe.segment.streaming.StreamingLabeller`): causal cleaning with a
        fixed speed bound (the median of the sessions' automatic ones), causal features and
        forward-filtered labels (``BehaviourModel(causal=True)``). The workspace's labels are
        then those streaming gives, on >= 99 % of frames.

    Reading and cleaning, then features and decoding, run per session in worker processes
    (or on the Dask cluster); the fit runs here, on the sample.

    Writes ``labels.csv``, ``bouts.csv``, ``transitions.csv``, ``time_budget.csv``,
    ``quality.csv``, ``sessions.csv``, ``summary.json``, ``report.html``, ``model/`` and
    ``features/``; cleaned sessions are cached in ``cache/``. If the run fails in a folder it
    created, the folder is removed: nothing half-written is left.
    """
    out = as_path(out, "out")
    # One lock from start to end, checked before any work.
    with hold_output(out, as_paths(inputs, "inputs")):
        _refuse_to_overwrite_curation(out, replace_curation)
        plan = plan_sessions(inputs, manifest, fps, format, reader_options, join_tracks)
        cleaning = discovery_cleaning(cleaning, min_confidence).to_dict()
        _refuse_mixed_rates(plan, cleaning)
        client = connect(scheduler)
        with warnings.catch_warnings(record=True) as said:
            warnings.simplefilter("always")
            prepared, quality, table, used = _prepare(
                out, plan, cleaning, jobs, client, force, progress, causal
            )
        redo = False
        if causal:
            # Streaming needs fixed settings: the sessions' median speed bound and confidence
            # scale, every placeholder they showed, held points only where no repeat can be
            # chance.
            given = CleanParams.from_dict(cleaning)
            fixed = streaming_cleaning(given, [u for u in used if u])
            cleaning = fixed.to_dict()
            # else the same points are masked: the first cleaning stands
            redo = cleaned_again(given, fixed, [u for u in used if u])
        if redo:  # its own warnings are the ones that hold (once, not twice)
            prepared, quality, table, used = _prepare(
                out, plan, cleaning, jobs, client, force, progress, causal
            )
        else:
            for w in said:
                warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
        sample = _training_sample(prepared, table, fit_frames, seed)
        no_social = {"social": False}  # set only when off: earlier fits keep their digest
        # Likewise; fits made before the axis was read from the tracks assumed z, so only an
        # automatic axis other than z must not reuse them (the version number did not change).
        auto_z = up_axis == "auto" and resolve_up_axis(sample, "auto")[0] == "z"
        up = {} if auto_z else {"up_axis": up_axis}
        if up_direction != "auto":  # set only when given: earlier fits keep their digest
            up = {**up, "up_direction": up_direction}
        # 2-D: fits made before the view was read were from above; keep their digest
        if view == "side" or resolve_view(sample, "auto")[0] != view.replace("auto", "above"):
            up = {**up, "view": view}
        regimes = {} if slow_regimes else {"slow_regimes": "off"}  # likewise
        # The fit's features of whole sessions, kept for labelling them in this process.
        in_process = client is None and (default_jobs() if jobs is None else jobs) == 1
        fitted_features: dict[str, list[FeatureSet]] = {}

        def fit() -> tuple[BehaviourModel, Any]:
            with ticking("fitting the model", progress):
                model = BehaviourModel(
                    cleaning=cleaning,
                    features={
                        "origin": origin,
                        "axis": axis,
                        **({} if social else no_social),
                        **up,
                    },
                    method=method,
                    n_states=states,
                    random_state=seed,
                    progress=progress,
                    causal=causal,
                    **regimes,
                )
                feats = model.fit_transform_cleaned(sample, quality)
            if in_process:
                fitted_features.update(_whole_sessions(feats, table))
            report = None
            if stability and get_segmenter(method).stability:
                with ticking("checking stability (refits)", progress):
                    report = _stability(model, feats, seed, progress)
            return model, report

        # An unchanged rerun reuses the fit (same sample, parameters, seed and versions).
        settings = {"cleaning": cleaning, "origin": origin, "axis": axis, "method": method,
                    "states": states, "seed": seed, "stability": stability,
                    "causal": causal, "versions": versions(),
                    **({} if social else no_social), **up, **regimes}  # fmt: skip
        digest = fit_digest(sample, quality, settings)
        model, report, _ = fit_or_reuse(out, digest, fit, force)
        model.set_params(progress=progress)
        sample.clear()  # memory for the decoding that follows
        decoded = _decode(
            out, prepared, model, jobs, client, force, progress, fitted_features, table
        )
        fitted_features.clear()
        summary = _summary(model, table, seed, report)
        summary["fit_frames"] = fit_frames  # the sample's budget; n_training_frames its size
        summary["cleaning"] = cleaning_summary(cleaning, used, table)
        summary["reading"] = reading_summary(plan)
        tables = _write_workspace(out, table, model, decoded, quality, report, summary)
        retire_learned(out, now().replace(":", ""))  # learned from the old states' features
        ws = Workspace(out)
        _warn_unscored(ws)
        with ticking("postures for the workbench", progress):  # the report draws them too
            cache_postures(ws, model, _cleaned_loaders(prepared, table, causal))
        write_ethogram_report(ws, out / "report.html", tables)
        return ws


def _prepare(
    out: Path,
    plan: Sequence[dict[str, Any]],
    cleaning: dict[str, Any] | Sequence[dict[str, Any]],
    jobs: int | None,
    client: Any,
    force: bool,
    progress: bool,
    causal: bool = False,
    keypoints: Sequence[str] | None = None,
) -> tuple[list[dict[str, Any]], list[pd.DataFrame], pd.DataFrame, list[Any]]:
    """Read and clean every session (in parallel, through the cache).

    ``cleaning`` is one set of cleaning values for every session, or one per entry of ``plan``.
    ``keypoints``: the model's, when labelling; a session's quality table gets rows for those it
    lacks (default: the study's, :func:`~ethoscribe.pose.study_keypoints`).
    Returns where each cleaned session lies, the quality tables, the sessions table and the
    cleaning values each session used; the tracks stay on disk until a step needs them.
    """
    parallel = client is not None or ((default_jobs() if jobs is None else jobs) > 1)
    if parallel and len(plan) > 1:
        check_readers_portable(plan)
    work = [
        {
            "entry": e,
            "cleaning": cleaning if isinstance(cleaning, dict) else cleaning[i],
            "cache": str(out / CACHE_FOLDER),
            "force": force,
            "causal": causal,
        }
        for i, e in enumerate(plan)
    ]
    infos = map_sessions(
        prepare_session, work, jobs=jobs, client=client, progress=progress,
        desc="reading and cleaning",
    )  # fmt: skip
    _say(infos)
    quality = [pd.read_parquet(i["quality"]) for i in infos]
    rows = [read_json(i["row"]) for i in infos]
    used = [r.pop(CLEANING_USED, None) for r in rows]
    _warn_short_sessions(rows)
    _warn_repeated_frames(rows, used)
    _warn_placeholders(rows, used)
    _warn_held_points(rows, used)
    _warn_interpolated_points(rows, used)
    _warn_identity_exchanges(rows, used)
    _warn_unseen_keypoints(quality)
    first = cleaning if isinstance(cleaning, dict) else (cleaning[0] if cleaning else {})
    if first.get("confidence_scale", "auto") == "auto":  # read from the files, not given
        _warn_confidence_scale(rows, used)
    _warn_low_confidence(quality, first.get("min_confidence"))
    quality = _with_absent_keypoints(quality, keypoints)
    return infos, quality, sessions_table(rows), used


def _with_absent_keypoints(
    quality: list[pd.DataFrame], keypoints: Sequence[str] | None
) -> list[pd.DataFrame]:
    """Quality tables with a row for every keypoint of the study (or ``keypoints``) that a
    session's files lack: missing on every frame, so every frame of it lacks a keypoint (its
    frames are still scored from the others, as frames with lost keypoints are)."""
    if keypoints is None:
        names = [q["keypoint"].astype(str).unique().tolist() for q in quality if "keypoint" in q]
        keypoints = study_keypoints(names) if names else []
    out = []
    for q in quality:
        seen = set(q["keypoint"]) if "keypoint" in q else set(keypoints)
        absent = [k for k in keypoints if k not in seen]
        if absent and len(q):
            units = q.drop_duplicates(["session", "animal"])[["session", "animal"]]
            rows = units.merge(pd.DataFrame({"keypoint": absent}), how="cross")
            numbers = [c for c in q.columns if c.startswith("frac_")]
            rows = rows.assign(**{c: 0.0 for c in numbers})
            rows[["frac_missing_raw", "frac_missing_after"]] = 1.0
            q = pd.concat([q, rows[q.columns]], ignore_index=True)
            q["frac_invalid_frames"] = 1.0
            rank = {k: i for i, k in enumerate(keypoints)}  # the study's order, as elsewhere
            order = np.lexsort(
                (q["keypoint"].map(rank).fillna(len(rank)), pd.factorize(q["animal"])[0])
            )
            q = q.iloc[order].reset_index(drop=True)
        out.append(q)
    return out


def _say(infos: Sequence[dict[str, Any]]) -> None:
    """Warnings the workers sent back, each text once, as the user's own warnings."""
    texts = dict.fromkeys((kind, text) for i in infos for kind, text in i.get("warnings", []))
    grouped: dict[tuple[str, str], list[str]] = {}  # one warning of many sessions: said once
    for kind, text in texts:
        head, _, names = text.rpartition(IN_SESSIONS)
        grouped.setdefault((kind, head or text), []).extend([names] if head else [])
    texts = [(k, f"{h}{IN_SESSIONS}{listed(n)}" if n else h) for (k, h), n in grouped.items()]
    for kind, text in texts:
        category = InputWarning if kind == "InputWarning" else UserWarning
        warnings.warn(text, category, stacklevel=4)


def _refuse_mixed_rates(plan: Sequence[dict[str, Any]], cleaning: dict[str, Any]) -> None:
    """Refuse, before reading, sessions whose given frame rates differ with no common rate
    to resample to (the fit would refuse them after every session was read and cleaned)."""
    if not cleaning.get("target_fps"):
        given = [e for e in plan if e.get("fps") is not None]
        check_one_rate([e["fps"] for e in given], [e["session"] for e in given])


def _at_model_rate(
    plan: Sequence[dict[str, Any]], cleaning: dict[str, Any], model: BehaviourModel
) -> list[dict[str, Any]]:
    """Cleaning values per session for labelling: a session filmed faster than the model's
    frame rate is resampled to it (as discovery's ``target_fps`` does; the user is told); a
    slower one is refused before any work, since its in-between frames would be invented,
    unless it is slower by at most ``RATE_TOLERANCE`` (29.97 against 30 fps: one frame in a
    thousand interpolated), which is resampled up with a warning."""
    model_fps = float(model.fps_)
    if cleaning.get("target_fps") or model.causal:  # resampled already / the model refuses it
        return [cleaning] * len(plan)
    given = [(e, float(e["fps"]) if e.get("fps") is not None else None) for e in plan]
    close = model_fps * (1 - RATE_TOLERANCE) - 1e-9
    slower = [f"'{e['session']}' ({r:g} fps)" for e, r in given if r and r < close]
    if slower:
        msg = (
            f"session(s) {listed(slower)} filmed slower than the model's {model_fps:g} "
            "fps: labelling would invent the frames in between. Fit a model that includes them "
            f"(ethoscribe discover with --target-fps set to their rate), or leave them out"
        )
        raise InputError(msg)
    nearly = [f"'{e['session']}' ({r:g} fps)" for e, r in given if r and close <= r < model_fps]
    if nearly:
        warnings.warn(
            f"session(s) {listed(nearly)} filmed slightly slower than the model's "
            f"{model_fps:g} fps (within {RATE_TOLERANCE:.0%}) are resampled up to it before "
            "labelling: at most one frame in a hundred is interpolated; labels.csv counts "
            "frames at the model's rate (time_s gives the time)",
            InputWarning,
            stacklevel=3,
        )
    faster = [f"'{e['session']}' ({r:g} fps)" for e, r in given if r and r > model_fps + 1e-9]
    if faster:
        warnings.warn(
            f"session(s) {listed(faster)} resampled to the model's {model_fps:g} fps "
            "before labelling; labels.csv counts frames at that rate (time_s gives the time)",
            InputWarning,
            stacklevel=3,
        )
    return [
        {**cleaning, "target_fps": model_fps} if r and abs(r - model_fps) > 1e-9 else cleaning
        for _, r in given
    ]


def _warn_short_sessions(rows: Sequence[dict[str, Any]]) -> None:
    """Say which sessions are shorter than one bout (the model's minimum bout)."""
    shortest = float(BehaviourModel().min_bout_s)
    short = [f"'{r['session']}' ({r['duration_s']:.2g} s)" for r in rows
             if float(r["duration_s"]) < shortest]  # fmt: skip
    if short:
        warnings.warn(
            f"session(s) {listed(short)} last less than one bout ({shortest:g} s): each "
            "is a single bout cut at both ends, and says little about time budgets or "
            "transitions; leave them out or use longer recordings",
            InputWarning,
            stacklevel=3,
        )


UNSCORED_SHARE = 0.25  # more frames than this without a motif: the animal's tables are partial


def _warn_unscored(ws: Workspace) -> None:
    """Name the animals left unscored (too little of the body seen, e.g. out of view) on more
    than a quarter of their session: their time budgets and bouts cover the rest only."""
    labels = pd.read_parquet(ws.path / "labels.parquet", columns=["session", "animal", "state"])
    share = (labels["state"] < 0).groupby([labels["session"], labels["animal"]]).mean()
    high = share[share > UNSCORED_SHARE]
    if high.empty:
        return
    named = [f"'{s}' ({a}): {v:.0%}" for (s, a), v in high.items()]
    warnings.warn(
        f"session(s) {listed(named)} of frames "
        "unscored (too little of the body seen, e.g. out of view); their time budgets and bouts "
        "cover the scored frames only. See quality.csv and the report's data quality",
        InputWarning,
        stacklevel=2,  # from the run in ethoscribe, as the run's other notes
    )


UNSEEN_SHARE = 0.9  # missing on this share of frames: the keypoint is hardly ever tracked


def _warn_unseen_keypoints(quality: Sequence[pd.DataFrame]) -> None:
    """Name keypoints missing after cleaning on most of a session's frames: their values are
    then the posture model's guesses, and a renamed or untracked keypoint looks like this."""
    table = pd.concat(quality, ignore_index=True) if quality else pd.DataFrame()
    if table.empty or "frac_missing_after" not in table:
        return
    unseen = table[table["frac_missing_after"] >= UNSEEN_SHARE]
    # never seen anywhere: the fit leaves them out and says so
    nowhere = table.groupby("keypoint", observed=True)["frac_missing_after"].min() >= 1.0
    unseen = unseen[~unseen["keypoint"].isin(nowhere[nowhere].index)]
    if len(unseen):
        several = table.groupby("session")["animal"].nunique().max() > 1
        said = [
            f"'{r.keypoint}' in session '{r.session}'"
            + (f" (animal '{r.animal}')" if several else "")
            + f" ({r.frac_missing_after:.0%})"
            for r in unseen.itertuples()
        ]
        warnings.warn(
            f"keypoint(s) missing on most frames after cleaning: {listed(said)} "
            "(quality.csv). Their positions are filled from the posture model, so motifs say "
            "little about them; check the tracker's output and the keypoint names",
            InputWarning,
            stacklevel=3,
        )


REPEATED_SHARE = 0.01  # more of a session's frames than this repeated: say so


def _sessions_named(
    rows: Sequence[dict[str, Any]],
    used: Sequence[Any],
    say: Callable[[dict[str, Any], dict[str, Any]], str | None],
) -> list[str]:
    """``'session' (what)`` for each session whose cleaning values (``used``, a dict, else
    nothing was recorded) ``say`` something about; the warnings' list of sessions."""
    named = []
    for row, params in zip(rows, used, strict=True):
        what = say(row, params) if isinstance(params, dict) else None
        if what:
            named.append(f"'{row.get('session')}' ({what})")
    return named


def _warn_points_share(
    rows: Sequence[dict[str, Any]], used: Sequence[Any], key: str, what: str, why: str
) -> None:
    """Warn that the points ``what`` describes, more than 1 % of a session's (its cleaning
    value ``key``), were set missing in the sessions named, and ``why``."""

    def share(row: dict[str, Any], params: dict[str, Any]) -> str | None:
        value = params.get(key, 0.0)  # of the session's points
        return f"{value:.0%} of its points" if value > REPEATED_SHARE else None

    named = _sessions_named(rows, used, share)
    if named:
        warnings.warn(f"{what} in session(s) {listed(named)} {why}", InputWarning, stacklevel=4)


def _warn_interpolated_points(rows: Sequence[dict[str, Any]], used: Sequence[Any]) -> None:
    """Name sessions with more than 1 % of their points on straight lines between seen points
    (set lost by the cleaning): a track interpolated over its gaps before export."""
    _warn_points_share(
        rows, used, "interpolated_share",
        "points on straight lines at an even pace, or on cubic curves, between seen points",
        "were taken for points filled in over the tracker's gaps (a track interpolated before "
        "export?) and set missing: no body part moves exactly so. To keep them, pass "
        "cleaning={'mask_interpolated': False} (command line: --keep-interpolated-points)",
    )  # fmt: skip


def _warn_held_points(rows: Sequence[dict[str, Any]], used: Sequence[Any]) -> None:
    """Name sessions with more than 1 % of their points held still (set lost by the cleaning):
    a track forward-filled over its gaps, or a tracker keeping lost points where it last saw
    them."""
    _warn_points_share(
        rows, used, "held_share",
        "points held exactly where they were on the frame before",
        "were taken for points the tracker lost and held (a track forward-filled over its "
        "gaps?) and set missing: a living animal never repeats a position to the last digit "
        "(in whole pixels, where it can: holds that end in a leap to where the animal went). "
        "To keep them, pass cleaning={'mask_held': False} (command line: --keep-held-points)",
    )  # fmt: skip


def _warn_placeholders(rows: Sequence[dict[str, Any]], used: Sequence[Any]) -> None:
    """Name sessions whose files wrote lost points as a fixed position (set missing by the
    cleaning): the user should know their tracker's convention, and how to keep them."""

    def placed(row: dict[str, Any], params: dict[str, Any]) -> str | None:
        n = params.get("placeholder_points", 0)
        return f"{n:,} points" if n else None

    named = _sessions_named(rows, used, placed)
    places = {
        tuple(q)
        for params in used
        if isinstance(params, dict) and params.get("placeholder_points", 0)
        for q in params.get("placeholders") or ()
    }
    if named:
        shown = listed(position_text(q) for q in sorted(places))
        warnings.warn(
            f"points at {shown}, a position held exactly on many frames away from the body, "
            f"were taken for lost points written as a placeholder and set missing in "
            f"session(s) {listed(named)}. If that position is real, pass "
            "cleaning={'placeholders': None} (command line: --keep-placeholder-positions)",
            InputWarning,
            stacklevel=3,
        )


def _warn_identity_exchanges(rows: Sequence[dict[str, Any]], used: Sequence[Any]) -> None:
    """Name sessions whose tracks exchanged animals (given back by the cleaning): per-animal
    results rest on that repair, so the user should know, and how to keep the tracks."""

    def exchanged(row: dict[str, Any], params: dict[str, Any]) -> str | None:
        n, parts = params.get("identity_exchanges", 0), params.get("part_exchanges", 0)
        said = [counted(n, "time")] if n else []
        said += [f"{counted(parts, 'stretch', 'stretches')} of some keypoints"] if parts else []
        return ", ".join(said) or None

    named = _sessions_named(rows, used, exchanged)
    if named:
        warnings.warn(
            f"tracks that took over another animal (leapt to where its track had just been, or "
            f"came back from a loss with its proportions), or keypoints that sat on the other "
            f"animal's body, were given back to their animal in session(s) {listed(named)}: a "
            "tracker exchanging the animals' identities (often as they touch). Check those "
            "sessions' per-animal results; to keep the tracks as they are, pass "
            "cleaning={'repair_identities': False} (command line: --keep-track-identities)",
            InputWarning,
            stacklevel=3,
        )


def _warn_repeated_frames(rows: Sequence[dict[str, Any]], used: Sequence[Any]) -> None:
    """Name sessions with many frames that repeat the frame before exactly (filled from their
    neighbours by the cleaning): the video's frame rate was likely raised by repeating
    images, so the file's rate overstates the camera's."""

    def repeated(row: dict[str, Any], params: dict[str, Any]) -> str | None:
        share = params.get("repeated_frames", 0) / max(int(row.get("n_frames", 0) or 0), 1)
        return f"{share:.0%}" if share > REPEATED_SHARE else None

    named = _sessions_named(rows, used, repeated)
    if named:
        warnings.warn(
            f"frames that repeat the frame before exactly in session(s) {listed(named)} were "
            "filled from their neighbours: a video whose frame rate was raised by showing "
            "images twice (the tracker reports the same pose twice, and the animal would seem "
            "to stop every few frames). To keep them, pass cleaning={'fill_repeated': False} "
            "(command line: --keep-repeated-frames)",
            InputWarning,
            stacklevel=3,
        )


def _warn_confidence_scale(rows: Sequence[dict[str, Any]], used: Sequence[Any]) -> None:
    """Name sessions whose tracker rated points on a lower scale (the confidence threshold
    taken as a share of it), grouped by the threshold: the user should know, and how to keep
    the threshold as given."""
    groups: dict[tuple[float, float], list[str]] = {}
    for row, params in zip(rows, used, strict=True):
        params = params if isinstance(params, dict) else {}
        scale, thr = params.get("confidence_scale", 1.0), params.get("confidence_threshold")
        if scale != 1.0 and thr is not None:
            groups.setdefault((scale, thr), []).append(f"'{row.get('session')}'")
    if not groups:
        return
    said = "; ".join(
        f"{listed(names)} (90% of the points below {scale:.2g}: threshold {thr:.2g})"
        for (scale, thr), names in groups.items()
    )
    warnings.warn(
        f"the tracker's confidences run low in session(s) {said}: fewer than a tenth of the "
        "points reach 0.9, so min_confidence was taken as a share of the confidence of "
        "well-tracked points (their 90th percentile). To mask below min_confidence as given, "
        "pass cleaning={'confidence_scale': 1} (command line: --confidence-scale 1)",
        InputWarning,
        stacklevel=3,
    )


LOW_CONFIDENCE_SHARE = 0.25  # more tracked points than this below the threshold: say so


def _warn_low_confidence(quality: Sequence[pd.DataFrame], threshold: float | None) -> None:
    """Say when the confidence threshold removes much of what the tracker reported (another
    tracker's confidences may run lower): those points are then filled, not seen."""
    table = pd.concat(quality, ignore_index=True) if quality else pd.DataFrame()
    if threshold is None or table.empty or "frac_low_confidence" not in table:
        return
    share = float(table["frac_low_confidence"].mean())
    if share <= LOW_CONFIDENCE_SHARE:
        return
    warnings.warn(
        f"{share:.0%} of the keypoint positions (mean over sessions and keypoints) have a "
        f"confidence below the threshold (min_confidence={threshold:g}, times the tracker's "
        "scale where its confidences run low) and were treated as lost (filled from "
        "their neighbours in time or from the posture model, quality.csv). If this tracker's "
        "confidences run low for good positions, give a lower threshold; else check the "
        "tracking",
        InputWarning,
        stacklevel=3,
    )


def _cleaned_loaders(
    prepared: Sequence[dict[str, Any]], table: pd.DataFrame, causal: bool
) -> dict[str, Any]:
    """Per session, a function loading the run's cleaned copy (postures are made from it
    rather than from the source file read and cleaned again). Causal runs clean otherwise
    than the postures do (from past frames only): none."""
    if causal:
        return {}
    sessions = table["session"].astype(str)  # the sessions table, in ``prepared`` order
    return {s: functools.partial(_load_tracks, i) for s, i in zip(sessions, prepared, strict=True)}


def _load_tracks(info: dict[str, Any]) -> PoseTracks:
    return load_prepared(info)[0]


def _training_sample(
    prepared: Sequence[dict[str, Any]], table: pd.DataFrame, max_frames: int | None, seed: int
) -> list[PoseTracks]:
    """Cleaned sessions to fit on: all of them, or blocks from each, ``max_frames`` in all.

    Blocks of about five minutes are drawn from every session, spread over its length
    (:func:`~ethoscribe.segment.sampling.representative_blocks`), so each animal and each part
    of a recording is represented while memory is bounded by the sample plus one session. Five
    minutes: long enough that the slowest feature filters (seconds) barely feel the block edges.
    """
    # The cleaned sessions' lengths and rate (resampled ones have fewer frames than read),
    # from the sessions table, in ``prepared`` order.
    lengths = labelled_frames(table)
    if max_frames is None or lengths.sum() <= max_frames:
        return [load_prepared(i)[0] for i in prepared]
    if max_frames < 1:
        raise InputError(f"fit_frames must be a positive number of frames; got {max_frames}")
    block = max(1, round(300 * float(table[LABELLED_FPS].iloc[0])))
    starts, stops = representative_blocks(lengths, max_frames, block, np.random.default_rng(seed))
    offsets = np.cumsum(lengths) - lengths
    owner = np.searchsorted(offsets, starts, side="right") - 1
    sample = []
    for i, info in enumerate(prepared):
        mine = np.flatnonzero(owner == i)
        if not len(mine):
            continue
        tracks = load_prepared(info)[0]
        for a, b in zip(starts[mine] - offsets[i], stops[mine] - offsets[i], strict=True):
            sample.append(
                tracks.replace(
                    coords=tracks.coords[a:b].copy(),
                    confidence=tracks.confidence[a:b].copy(),
                    session=f"{tracks.session} [{a}:{b}]",
                )
            )
        del tracks
    return sample


def _whole_sessions(
    feats: Sequence[FeatureSet], table: pd.DataFrame
) -> dict[str, list[FeatureSet]]:
    """The feature sets of each session fitted whole (a training sample of blocks names its
    pieces ``session [a:b]``, which match no session of ``table``)."""
    by_session: dict[str, list[FeatureSet]] = {}
    for f in feats:
        by_session.setdefault(str(f.session), []).append(f)
    names = set(table["session"].astype(str))
    return {s: v for s, v in by_session.items() if s in names}


def _decode(
    out: Path,
    prepared: Sequence[dict[str, Any]],
    model: BehaviourModel,
    jobs: int | None,
    client: Any,
    force: bool,
    progress: bool,
    features: Mapping[str, list[FeatureSet]] | None = None,
    table: pd.DataFrame | None = None,
    fit_check: bool = False,
) -> list[dict[str, Any]]:
    """Features and labels of every session under ``model``, per session in parallel.

    ``features``: feature sets already computed under ``model`` by session name (``table``,
    the sessions table in ``prepared`` order, names them), used instead of computing them
    again (in this process only: arrays are not sent to workers). ``fit_check``: also how
    well the model explains each session (``"fit"``; new sessions only, one more pass)."""
    folder, key = cache_model(model, out)
    work = [
        {"prepared": p, "model": folder, "model_key": key, "cache": str(out), "force": force,
         "fit_check": fit_check}
        for p in prepared
    ]  # fmt: skip
    if features and table is not None:
        for job, session in zip(work, table["session"].astype(str), strict=True):
            if session in features:
                job["features"] = features[session]
    decoded = map_sessions(
        decode_session, work, jobs=jobs, client=client, progress=progress, desc="labelling"
    )
    _say(decoded)
    return decoded


def label_sessions(
    source: str | Path,
    inputs: Sequence[str | Path],
    out: str | Path,
    manifest: str | Path | None = None,
    fps: float | None = None,
    progress: bool = True,
    jobs: int | None = 1,
    scheduler: Any = None,
    force: bool = False,
    format: str | None = None,
    reader_options: Mapping[str, Any] | None = None,
    join_tracks: bool = False,
) -> Workspace:
    """Label new sessions with the model of workspace ``source`` (same states, same names).

    The curation journal of ``source`` is copied, so the new cohort carries the motif names
    the scientist gave, including merges and splits. A classifier learned from an expert's
    coding (``ethoscribe learn``) is carried too: ``motif`` then names the expert's behaviours
    and the discovered motifs stay in ``discovered_motif``. Sessions are read, cleaned and labelled
    one by one (in ``jobs`` processes or on a Dask ``scheduler``), through ``out``'s cache.
    """
    source = as_path(source, "source")
    if (source / "model").is_dir() and (source / WORKSPACE_FILE).is_file():
        ws = Workspace(source)
        model, journal = ws.model(), ws.journal()
    else:  # a bare model/ folder
        model, journal = load_model(source), []
    out = as_path(out, "out")
    if out.resolve() == source.resolve():
        raise WorkspaceError(f"{out}: write the new cohort's labels to a folder of its own")
    # One lock from start to end, checked before any work.
    with hold_output(out, as_paths(inputs, "inputs")):
        _refuse_to_drop_cohort_edits(out, source, journal)
        plan = plan_sessions(inputs, manifest, fps, format, reader_options, join_tracks)
        _check_units(plan, model)  # before any heavy work: one file read
        client = connect(scheduler)
        cleaning = model.cleaning_.to_dict()
        per_session = _at_model_rate(plan, cleaning, model)

        def prepare(plan: Sequence[dict[str, Any]], per_session: Sequence[dict[str, Any]]) -> tuple:
            return _prepare(
                out, plan, per_session, jobs, client, force, progress, bool(model.causal),
                model.keypoints_,
            )  # fmt: skip

        prepared, quality, table, used = prepare(plan, per_session)
        timed = _rates_read(plan, table, float(model.fps_))
        if timed is not None:  # rates known only from the files: the same rule, then again
            plan, per_session = timed, _at_model_rate(timed, cleaning, model)
            prepared, quality, table, used = prepare(plan, per_session)
        decoded = _decode(out, prepared, model, jobs, client, force, progress, fit_check=True)
        summary = _summary(model, table, model.random_state, None)
        summary["labelled_with"] = str(source.resolve())
        summary["cleaning"] = cleaning_summary(cleaning, used, table)
        summary["reading"] = reading_summary(plan)
        summary["fit_to_model"] = _fit_to_model(model, decoded)
        tables = _write_workspace(out, table, model, decoded, quality, None, summary, journal)
        retire_learned(out, now().replace(":", ""))  # the source's classifier, if any, follows
        ws = Workspace(out)
        _warn_unscored(ws)
        tables = carry_learned(source, ws, locked=True) or tables  # the expert's names
        with ticking("postures for the workbench", progress):  # the report draws them too
            cache_postures(ws, model, _cleaned_loaders(prepared, table, bool(model.causal)))
        write_ethogram_report(ws, out / "report.html", tables)
        return ws


def _rates_read(
    plan: Sequence[dict[str, Any]], table: pd.DataFrame, model_fps: float
) -> list[dict[str, Any]] | None:
    """The plan with the frame rates read from the files (a time column, a file's record)
    where it had none and they differ from the model's, so that ``_at_model_rate`` resamples
    or refuses them as it does rates given in a manifest; None when there are none."""
    read = dict(zip(table["session"].astype(str), table["fps"].astype(float), strict=True))
    found = {
        i: read[str(e["session"])]
        for i, e in enumerate(plan)
        if e.get("fps") is None and abs(read.get(str(e["session"]), model_fps) - model_fps) > 1e-9
    }
    if not found:
        return None
    return [{**e, "fps": found[i]} if i in found else e for i, e in enumerate(plan)]


def _fit_to_model(model: BehaviourModel, decoded: Sequence[dict[str, Any]]) -> dict[str, Any]:
    """How well ``model`` explains each new session (``BehaviourModel.fit_shares``), for the
    summary; warns, one line per session, where far more frames than the expected 1 % are
    explained worse than the worst 1 % of the training frames."""
    threshold = getattr(model, "poor_fit_threshold_", None)
    sessions = [r for d in decoded for r in d.get("fit") or []]
    for text in poor_fit_messages(sessions, model):
        warnings.warn(text, InputWarning, stacklevel=3)
    return {
        "checked": threshold is not None,
        "threshold": threshold,
        "expected_share": POOR_FIT_PERCENTILE / 100,
        "warn_above": POOR_FIT_WARN_SHARE,
        "sessions": sessions,
        "flagged": [r["session"] for r in poorly_fitted(sessions)],
        "meaning": (
            "share: frames of the session whose log-likelihood under their best state is below "
            "threshold, the 1st percentile of the training frames' own (about 1 % when the "
            "model fits the session as well as its training sessions)"
        ),
    }


def _check_units(plan: Sequence[dict[str, Any]], model: BehaviourModel) -> None:
    """Refuse, with the fix, new sessions whose coordinates are not in the model's units."""
    wanted = getattr(model.features_, "units_", None)
    if not plan or wanted is None:
        return
    cleaning = model.cleaning_
    for entry in plan[:1]:  # the others are checked as they are read
        # The run reads this file again and says its warnings then: said here too, they came
        # twice (a confidence read as percent, for the first file only).
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            units = read_planned(entry).units
        if units == "px" and cleaning.px_per_unit is not None:
            units = cleaning.unit  # the model's calibration converts them
        if units != wanted:
            msg = (
                f"{entry['path']}: coordinates in '{units}' but the model was fitted on tracks "
                f"in '{wanted}'; give this cohort's calibration in its manifest (columns "
                f"px_per_unit and units, as for discovery), or write the files in {wanted}"
                + (
                    f". Files already in {wanted} (read as pixels when nothing says otherwise): "
                    f"a manifest column units={wanted} with px_per_unit left empty, or pass "
                    f"reader_options={{'units': '{wanted}'}} "
                    f"(command line: --reader-option units={wanted})"
                    if units == "px"
                    else ""
                )
            )
            raise InputError(msg)


def _summary(model: BehaviourModel, table: pd.DataFrame, seed: int, report: Any) -> dict:
    selection = model.selection_
    return {
        "created": now(),
        "versions": versions(),
        "parameters": model.saved_params(),
        "seed": seed,
        "n_states": model.n_states_,
        "state_count_choice": None
        if selection is None
        else {
            "best": int(selection.best),
            "criterion": str(selection.criterion),
            "heldout": str(getattr(selection, "heldout", "")),
            "rule": str(getattr(selection, "rule", "")),
            "reason": str(getattr(selection, "reason", "")),
            "table": table_json(selection.table),
        },
        "features": {
            "origin": model.features_.origin_,
            "axis": list(model.features_.axis_),
            "axis_report": model.features_.axis_report_,
            "up_axis": model.features_.up_axis if model.n_dims_ == 3 else None,
            "up_axis_report": getattr(model, "up_axis_report_", ""),
            "keypoints_left_out": list(getattr(model, "keypoints_left_out_", [])),
            "keypoints": list(model.keypoints_),  # those the model reads
            "view": getattr(model, "view_", "above") if model.n_dims_ == 2 else None,
            "view_report": getattr(model, "view_report_", ""),
            "social": bool(model.features_.social_),
            "social_report": getattr(model.features_, "social_report_", ""),
        },
        "n_sessions": len(table),
        "n_frames": int(table["n_frames"].sum()),  # as read from the files
        # as labelled: fewer than read when sessions were resampled to the model's rate
        "n_labelled_frames": int(labelled_frames(table).sum()),
        "labelled_fps": float(model.fps_),
        "n_training_frames": model.n_training_frames_,
        # Added to every state covariance's diagonal after each M-step: no singular covariance.
        "covariance_floor": getattr(model.segmenter_, "covariance_floor_", None),
        # Each animal of each session has its own offset of the feature levels (HMM option).
        "individual_offsets": _offsets_summary(model.segmenter_),
        "stability": None if report is None else report.summary,
        # States that alternate within bouts (PCCA+ sets of the transition matrix): advice.
        "state_tree": getattr(model, "state_tree_", None),
        "suggested_merges": model.merge_groups(),
        "caution": CAUTION,
    }


def _offsets_summary(segmenter: Any) -> dict[str, Any] | None:
    """The HMM's per-individual offsets: their spread in units of a state's own spread (the
    offsets' prior is N(0, spread^2 x the within-state covariance)); None without them."""
    if not getattr(segmenter, "session_offsets", False):
        return None
    spread = float(getattr(segmenter, "offset_spread_", 0.0))
    return {"relative_spread": round(float(np.sqrt(max(spread, 0.0))), 4)}


def _write_workspace(
    out: Path,
    table: pd.DataFrame,
    model: BehaviourModel,
    decoded: Sequence[dict[str, Any]],
    quality: Sequence[Any],
    report: Any,
    summary: dict,
    journal: Sequence[dict] = (),
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Move a finished run's files into ``out``, one session at a time for per-frame tables.

    Returns the bouts and per-session time budgets written (for the report)."""
    stage = Staging(out, held=True)  # the run holds the lock from its start
    try:
        write_table(table, stage.path("sessions.csv"))
        if quality:
            frames = [q if isinstance(q, pd.DataFrame) else q.to_frame() for q in quality]
            q = pd.concat(frames, ignore_index=True)
            if "keypoint" in q and not set(q["keypoint"].astype(str)) <= set(model.keypoints_):
                q = _invalid_of_model_keypoints(q, decoded)
            write_table(csv_rounded(q), stage.path("quality.csv"))
        if report is not None and report.table is not None:
            write_table(csv_rounded(report.table), stage.path("stability.csv"))
        meta, arrays = model.to_state()
        write_bundle(stage.path("model"), meta, arrays)
        atomic_write_json(stage.path("summary.json"), jsonable(summary))
        atomic_write_json(
            stage.path(WORKSPACE_FILE),
            {**header("ethoscribe.workspace", FORMAT_VERSION), "created": summary["created"]},
        )
        for record in journal:
            append_journal(stage.path(JOURNAL_FILE), record)
        if (out / JOURNAL_FILE).exists() and not journal:
            # New states: the old names no longer apply. They are kept aside, and only once the
            # commit has begun, so a run killed before it leaves the old workspace whole.
            stage.retire(JOURNAL_FILE, f"journal-before-{now().replace(':', '')}.jsonl")
        # The tables carry the current names (those of a copied journal, if any).
        cur = Curation.from_journal(journal, {k: motif_name(k) for k in range(model.n_states_)})
        needs = any(r.get("op") == "split" for r in journal)
        with atomic_table_writer(stage.path("labels.parquet")) as write_labels:
            named = _named(decoded, cur, needs, stage, write_labels)
            tables = write_ethogram_tables(out, named, stage)
        stage.commit(last=WORKSPACE_FILE)
        return tables
    except BaseException:
        stage.abort()
        raise


def _invalid_of_model_keypoints(
    quality: pd.DataFrame, decoded: Sequence[dict[str, Any]]
) -> pd.DataFrame:
    """``quality`` with ``frac_invalid_frames`` counted over the model's keypoints, from the
    labels' ``body_seen``: cleaning counted every keypoint read, and the model leaves some out
    (never tracked at the fit, or more than it was fitted on in a new cohort's files)."""
    if "frac_invalid_frames" not in quality:
        return quality
    parts = [
        pd.read_parquet(d["labels"], columns=["session", "animal", "body_seen"]) for d in decoded
    ]
    labels = pd.concat(parts, ignore_index=True)
    share = (labels["body_seen"] < 1).groupby([labels["session"], labels["animal"]]).mean()
    key = pd.MultiIndex.from_frame(quality[["session", "animal"]].astype(str))
    share.index = share.index.set_levels([lv.astype(str) for lv in share.index.levels])
    found = share.reindex(key).to_numpy()
    return quality.assign(
        frac_invalid_frames=np.where(np.isnan(found), quality["frac_invalid_frames"], found)
    )


def _named(
    decoded: Sequence[dict[str, Any]], cur: Curation, needs: bool, stage: Staging, write: Any
) -> Iterator[pd.DataFrame]:
    """Each session's labels with the current names; its state labels and features saved."""
    n = 0
    for d in decoded:
        labels = pd.read_parquet(d["labels"])
        write(labels.drop(columns="motif"))  # names are the journal's, written to labels.csv
        feats = []
        for path in d["features"]:
            shutil.copyfile(path, stage.path(f"features/{n:05d}.npz"))
            n += 1
            if needs:
                feats.append(load_features(Path(path)))
        yield cur.apply(labels, features_table(feats) if needs else None)


def _stability(
    model: BehaviourModel, feats: Sequence[FeatureSet], seed: int, progress: bool
) -> Any:
    """Agreement between independent fits (another seed, halves of the sessions), compared
    on a sample of the training frames.

    The first seed's labels are the model's own (so the table lists the model's states, the
    motifs' states). The second seed is a refit of every training frame with the model's own
    fitting options and another seed (the best of its restarts, as the model is); the split
    halves are fits with the same options of two halves of the training sessions (shuffled
    and dealt alternately; a single session is split in time). The seed's refit subsamples as
    the model does (its ``fit_max_frames``), each half to half of that: a half is half the
    data, and on 1e6 frames halves fitted on 100,000 frames graded the states as fits of
    all their frames did, at about 60 % of the cost of fits of 200,000 frames
    (benchmarks/README.md, "Fast by default"). The three fits run side by side in threads;
    ``stability=False`` skips them.
    The labelings are compared on at most ``STABILITY_FRAMES`` frames (blocks from every
    session, hundreds of bouts of every common behaviour).

    Cheaper stand-ins were measured and dropped (benchmarks/README.md, "Is the stability
    check a fair measurement?"): the model's losing restart is selected for a poorer optimum
    and agreed less than any independent fit (independent_sim: ARI 0.42 against 0.99-1.00);
    the state count's quick fold fits and short refits (one restart, 25-30 iterations) made
    states look less reproducible between halves than full fits of the halves do (example
    study: Jaccard 0.29 and 0.38 against 0.56 and 0.70).
    """
    X_fit, lengths_fit = stack_valid(feats)
    block = max(100, round(60 * model.fps_))
    rng = np.random.default_rng(seed)
    X, lengths = take_blocks(X_fit, lengths_fit, STABILITY_FRAMES, block, rng)
    params = model.segmenter_.get_params()
    shown = get_segmenter(model.method).stability_options  # display options only
    cls = type(model.segmenter_)

    def make(s: int, **changed: Any) -> Any:
        # fitted as the model was; labels as the model does (phases of one rhythm joined)
        return labels_like_model(model, cls(**{**params, **shown, "random_state": s, **changed}))

    # A half of the sessions is fitted on at most half the frames the model's fit subsamples
    cap = params.get("fit_max_frames")
    halves = {} if cap is None else {"fit_max_frames": max(100, int(cap) // 2)}
    try:
        return stability_report(
            make, X, lengths, seeds=(seed, seed + 1), split_halves=True,
            reference=labels_like_model(model, model.segmenter_, own=True),
            fit_on=(X_fit, lengths_fit), make_half_model=lambda s: make(s, **halves),
        )  # fmt: skip
    except InputError as exc:  # too little data for a refit (a half of a short study)
        reason = (
            f"too little data: a refit on half of the {len(X_fit):,} training frames could not "
            f"be made ({exc})"
        )
        warnings.warn(f"the stability check was skipped: {reason}", InputWarning, stacklevel=3)
        return CachedReport(table=None, summary={"skipped": reason})


def _refuse_to_drop_cohort_edits(out: Path, source: Path, journal: Sequence[dict]) -> None:
    """Labelling again into ``out`` replaces its journal by ``source``'s: allowed when ``out``'s
    is a copy of (an earlier part of) it, refused when it holds edits made in ``out`` itself."""
    path = out / JOURNAL_FILE
    if not path.exists() or path.stat().st_size == 0:
        return
    records, problems = read_journal(path)
    if not problems and list(journal[: len(records)]) == records:
        return  # the names come from source: relabelling carries its later edits
    own = [r for r in records if r not in journal]
    names = sorted({str(r.get("name") or r.get("into") or "") for r in own} - {""})
    shown = f" ({listed(map(repr, names), 3)})" if names else ""
    raise WorkspaceError(
        f"{out} holds motif names edited there{shown} that {source} does not have "
        f"({JOURNAL_FILE}); labelling again would drop them. Choose another --out folder, or "
        f"make those edits in {source} and move {path} aside."
    )


def _refuse_to_overwrite_curation(out: Path, allowed: bool) -> None:
    journal = out / JOURNAL_FILE
    if journal.exists() and journal.stat().st_size > 0 and not allowed:
        raise WorkspaceError(
            f"{out} holds curated motif names ({journal.name}); a new discovery would replace the "
            "states they name. Choose another --out folder, or pass replace_curation=True (the old "
            "journal is kept beside the new one)."
        )
