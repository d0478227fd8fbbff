"""An expert's coding against a workspace: agreement with the motifs, and learning from it.

``agreement`` writes ``agreement.json``, ``confusion.csv``, ``per_behaviour.csv`` and
``report.html`` into a folder of the user's choice. ``learn`` fits a
:class:`~ethoscribe.segment.supervised.BehaviourClassifier` on the coded frames, scores it
session by session, saves it in ``learned/`` (see :mod:`ethoscribe.workspace.learned_labels`)
and labels every session of the workspace with the expert's behaviours; ``label_sessions``
carries it to new cohorts.
"""

from __future__ import annotations

import shutil
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe.errors import InputError, InputWarning, WorkspaceError
from ethoscribe.ethogram import bout_table
from ethoscribe.features import FeatureSet
from ethoscribe.io import atomic_write_json, atomic_write_text, read_json, write_table
from ethoscribe.io.bundle import read_bundle, write_bundle
from ethoscribe.io.expert import CodedSession, frames_at_rate, read_expert_coding
from ethoscribe.label_table import csv_rounded
from ethoscribe.plots.agreement import confusion_heatmap
from ethoscribe.report import Section, render_report
from ethoscribe.segment.expert_agreement import ExpertAgreement, expert_agreement
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.segment.supervised import BehaviourClassifier, coded_bouts
from ethoscribe.workspace.files import append_journal, load_features
from ethoscribe.workspace.folder import (
    Workspace,
    check_output_folder,
    jsonable,
    now,
    versions,
    write_ethogram_tables,
)
from ethoscribe.workspace.learned_labels import LEARNED_FOLDER, learned_labels_path

MIN_BOUTS = 10  # fewer coded bouts of a behaviour than this: its figures are anecdotes
CLASSIFIER_FOLDER = "classifier"


def _workspace(workspace: str | Path | Workspace) -> Workspace:
    return workspace if isinstance(workspace, Workspace) else Workspace(workspace)


def read_coding(workspace: str | Path | Workspace, expert: str | Path) -> pd.DataFrame:
    """The expert's coding checked against the workspace's sessions (one row per coded frame)."""
    ws = _workspace(workspace)
    sessions = ws.sessions
    labels = ws.state_labels()[["session", "animal"]].drop_duplicates()
    animals = labels.groupby("session")["animal"].agg(lambda a: tuple(sorted(map(str, a))))
    known = {
        str(r.session): CodedSession(float(r.fps), int(r.n_frames), animals.get(str(r.session), ()))
        for r in sessions.itertuples()
    }
    coded = read_expert_coding(expert, known)
    return _on_label_frames(coded, {k: c.fps for k, c in known.items()}, label_fps(ws))


def _read_coding_noted(ws: Workspace, expert: str | Path) -> tuple[pd.DataFrame, list[str]]:
    """:func:`read_coding` and what its reading warned about (names joined, sessions left
    out): the warnings are issued as usual and also returned, for the saved records and the
    workbench, which shows no console."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", InputWarning)
        coded = read_coding(ws, expert)
    notes = []
    for w in caught:
        if issubclass(w.category, InputWarning):
            notes.append(str(w.message))
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno, module=__name__)
    return coded, notes


def label_fps(ws: Workspace) -> float:
    """Frame rate of the workspace's labels: the model's (one rate for every session; the
    ``--target-fps`` when discovery resampled them)."""
    return float(ws.model().fps_)


def _on_label_frames(coded: pd.DataFrame, input_fps: dict[str, float], fps: float) -> pd.DataFrame:
    """The coding (frames at each session's input rate) on the labels' frames at ``fps``
    (each label frame takes the behaviour coded at the time it starts; see
    :func:`ethoscribe.io.expert.frames_at_rate`)."""
    parts = []
    for (session, animal), g in coded.groupby(["session", "animal"], sort=False):
        frames, behaviour = frames_at_rate(
            g["frame"].to_numpy(np.int64), g["behaviour"].to_numpy(object),
            input_fps[str(session)], fps,
        )  # fmt: skip
        parts.append(
            pd.DataFrame(
                {"session": session, "animal": animal, "frame": frames, "behaviour": behaviour}
            )
        )
    return pd.concat(parts, ignore_index=True) if parts else coded


# --- agreement ----------------------------------------------------------------------------
def agreement(
    workspace: str | Path | Workspace,
    expert: str | Path,
    out: str | Path,
    tolerance_s: float = 0.2,
) -> ExpertAgreement:
    """Compare the discovered (curated) motifs with an expert's coding; write the figures.

    Writes ``out/agreement.json`` (see :mod:`ethoscribe.segment.expert_agreement` for the
    definitions), ``confusion.csv`` (behaviour x motif, frames and seconds),
    ``per_behaviour.csv`` (best motif, F1, which motifs share the behaviour) and ``report.html``
    (the confusion heatmap and the tables).

    Examples
    --------
    >>> result = agreement("study_ws", "coding.csv", "agreement_out")  # doctest: +SKIP
    >>> result.summary["matched_accuracy"]                             # doctest: +SKIP
    """
    ws = _workspace(workspace)
    out = check_output_folder(out, "agreement")  # never the workspace or a folder of other files
    coded, notes = _read_coding_noted(ws, expert)
    labels = ws.labels()
    motif = "discovered_motif" if "discovered_motif" in labels.columns else "motif"
    frames = coded.merge(
        labels[["session", "animal", "frame", motif]].rename(columns={motif: "motif"}),
        on=["session", "animal", "frame"],
        how="left",
        validate="one_to_one",
    )
    frames["fps"] = label_fps(ws)  # the labels' rate (--target-fps when discovery resampled)
    frames["motif"] = frames["motif"].fillna("")
    result = expert_agreement(frames, tolerance_s)
    result.summary["reading_warnings"] = notes
    out.mkdir(parents=True, exist_ok=True)
    record = {
        **result.summary,
        "workspace": str(ws.path),
        "expert_coding": str(expert),
        "created": now(),
        "versions": versions(),
        "definitions": _definitions(),
    }
    atomic_write_json(out / "agreement.json", jsonable(record))
    # rounded as every other CSV of a run (label_table.csv_rounded); agreement.json keeps all
    write_table(csv_rounded(result.confusion), out / "confusion.csv")
    write_table(csv_rounded(result.per_behaviour), out / "per_behaviour.csv")
    atomic_write_text(out / "report.html", _agreement_report(result, record))
    return result


def _definitions() -> dict[str, str]:
    return {
        "ari": "adjusted Rand index over the coded frames (Hubert & Arabie 1985; scikit-learn)",
        "nmi": "normalised mutual information, arithmetic normalisation (scikit-learn)",
        "matched_accuracy": "frames of behaviour-motif pairs from the Hungarian one-to-one "
        "matching (scipy linear_sum_assignment) / frames compared",
        "purity": "every motif named after its most overlapping behaviour; frames so named "
        "correctly / frames compared",
        "boundary_f1": "boundaries within tolerance_s of an expert boundary, matched one to one "
        "inside stretches of coded frames (precision, recall and their harmonic mean)",
        "frames_unscored": "coded frames the tool left without a label; they form a label of "
        "their own in ari/nmi and count as errors in the accuracies",
    }


def _agreement_report(result: ExpertAgreement, record: dict[str, Any]) -> str:
    s = result.summary
    text = (
        f"{s['frames_compared']} coded frames of {s['sessions_compared']} sessions "
        f"({s['seconds_compared']:.0f} s; {s['frames_unscored']} left unscored by the tool). "
        f"Adjusted Rand index {s['ari']:.3f}, normalised mutual information {s['nmi']:.3f}, "
        f"accuracy with one motif per behaviour {s['matched_accuracy']:.3f}, purity "
        f"{s['purity']:.3f}; boundaries within {s['tolerance_s']:g} s: precision "
        f"{s['precision']:.3f}, recall {s['recall']:.3f}, F1 {s['boundary_f1']:.3f}. Motifs "
        "listed together under 'motifs_sharing' are candidates for merging."
    ) + "".join(f" Read with a warning: {n}" for n in s.get("reading_warnings", []))
    sections = [
        Section(
            "Agreement with the expert's coding",
            text,
            figures=[confusion_heatmap(result.matrix)],
            tables=[("Per behaviour", result.per_behaviour)],
        )
    ]
    params = {k: record[k] for k in ("workspace", "expert_coding", "tolerance_s", "versions")}
    return render_report("ethoscribe: agreement with an expert", sections, params)


# --- the classifier's inputs --------------------------------------------------------------
def recording_features(ws: Workspace) -> list[FeatureSet]:
    """The saved features of every recording (session and animal) of ``ws``."""
    files = sorted((ws.path / "features").glob("*.npz"))
    if not files:
        raise WorkspaceError(f"{ws.path}: no saved features (features/ is empty)")
    return [load_features(p) for p in files]


def classifier_inputs(model: BehaviourModel, feats: Sequence[FeatureSet]) -> list[np.ndarray]:
    """Per recording: the model's features, then the HMM's state posteriors (NaN where invalid).

    Returns one array ``(frames, n_features + n_fitted_states)`` per feature set (the posterior
    block is absent when the model's segmenter is not an HMM).
    """
    seg = model.segmenter_
    out = []
    for f in feats:
        blocks = [np.asarray(f.values, dtype=np.float64)]
        if isinstance(seg, GaussianHMM):
            # every fitted state's posterior (phases of one rhythm, when joined, stay apart)
            post = np.full((len(f.valid), int(seg.n_states_)), np.nan)
            if f.valid.any():
                post[f.valid] = seg.predict_proba(f.values[f.valid], [int(f.valid.sum())])
            blocks.append(post)
        out.append(np.concatenate(blocks, axis=1))
    return out


def _targets(feats: Sequence[FeatureSet], coded: pd.DataFrame) -> list[np.ndarray]:
    by_recording = {k: g for k, g in coded.groupby(["session", "animal"], sort=False)}
    targets = []
    for f in feats:
        y = np.full(len(f.valid), "", dtype=object)
        g = by_recording.get((str(f.session), str(f.animal)))
        if g is not None:
            frames = g["frame"].to_numpy(np.int64)
            inside = frames < len(y)
            y[frames[inside]] = g["behaviour"].to_numpy(object)[inside]
        targets.append(y)
    return targets


# --- learning -----------------------------------------------------------------------------
@dataclass(frozen=True)
class LearnResult:
    """What :func:`learn` measured: ``evaluation`` (JSON-able), ``per_behaviour`` and the
    warnings (behaviours with too few coded bouts)."""

    evaluation: dict[str, Any]
    per_behaviour: pd.DataFrame
    warnings: list[str]


def learn(
    workspace: str | Path | Workspace,
    expert: str | Path,
    evaluate: bool = True,
    min_bouts: int = MIN_BOUTS,
    random_state: int = 0,
    **classifier: Any,
) -> LearnResult:
    """Learn the expert's behaviours from the coded frames; label the workspace with them.

    Fits a :class:`~ethoscribe.segment.supervised.BehaviourClassifier` (extra keyword
    arguments are its parameters) on every coded frame, after scoring it leave-one-session-out
    (each coded session predicted by a classifier fitted on the others; ``evaluate=False``
    skips this). Saves the classifier and the learned labels in ``learned/``, journals the run
    and rewrites the ethogram tables with the expert's behaviour names.
    """
    ws = _workspace(workspace)
    coded, read_notes = _read_coding_noted(ws, expert)
    model = ws.model()
    feats = recording_features(ws)
    X = classifier_inputs(model, feats)
    y = _targets(feats, coded)
    fps = float(model.fps_)
    params = {"fps": fps, "random_state": random_state, **classifier}
    has_coding = [i for i, t in enumerate(y) if (t != "").any()]
    classes = np.array(sorted(set(coded["behaviour"])), dtype=object)
    oof = _leave_one_session_out(feats, X, y, has_coding, params) if evaluate else None
    counts = _coded_counts(y, has_coding, classes, fps, feats)
    evaluation, per, notes = _scores(y, oof, has_coding, classes, counts, min_bouts, feats)
    for note in notes:
        warnings.warn(note, UserWarning, stacklevel=2)
    notes = read_notes + notes  # the reading's were issued when reading
    clf = BehaviourClassifier(**params).fit(
        np.concatenate([X[i] for i in has_coding]),
        np.concatenate([y[i] for i in has_coding]),
        [len(X[i]) for i in has_coding],
    )
    evaluation.update(
        {
            "created": now(),
            "expert_coding": str(expert),
            "classifier": clf.get_params(),
            "n_train_frames": clf.n_train_frames_,
            "versions": versions(),
            "warnings": notes,
        }
    )
    folder = ws.path / LEARNED_FOLDER
    with ws.lock():
        folder.mkdir(exist_ok=True)
        meta, arrays = clf.to_state()
        write_bundle(folder / CLASSIFIER_FOLDER, meta, arrays)
        atomic_write_json(folder / "evaluation.json", jsonable(evaluation))
        write_table(csv_rounded(per), folder / "per_behaviour.csv")
        _label_with(ws, clf, model, feats, X)
        append_journal(
            folder / "journal.jsonl",
            {
                "op": "learn",
                "time": evaluation["created"],
                "expert_coding": str(expert),
                "classes": [str(c) for c in clf.classes_],
                "coded_sessions": evaluation["coded_sessions"],
                "accuracy": evaluation.get("accuracy"),
                "classifier": clf.get_params(),
            },
        )
    return LearnResult(evaluation, per, notes)


def _leave_one_session_out(
    feats: Sequence[FeatureSet],
    X: Sequence[np.ndarray],
    y: Sequence[np.ndarray],
    has_coding: Sequence[int],
    params: dict[str, Any],
) -> dict[int, np.ndarray] | None:
    """Out-of-session behaviour names for every coded recording (None with one session)."""
    sessions = sorted({str(feats[i].session) for i in has_coding})
    if len(sessions) < 2:
        return None
    out: dict[int, np.ndarray] = {}
    for held in sessions:
        train = [i for i in has_coding if str(feats[i].session) != held]
        test = [i for i in has_coding if str(feats[i].session) == held]
        labels = np.concatenate([y[i] for i in train])
        if len(set(labels[labels != ""])) < 2:
            continue
        clf = BehaviourClassifier(**params).fit(
            np.concatenate([X[i] for i in train]), labels, [len(X[i]) for i in train]
        )
        for i in test:
            codes = clf.predict(X[i], [len(X[i])])
            names = np.append(clf.classes_, "").astype(object)
            out[i] = names[codes]  # -1 -> "" (not labelled)
    return out


def _coded_counts(
    y: Sequence[np.ndarray],
    has_coding: Sequence[int],
    classes: np.ndarray,
    fps: float,
    feats: Sequence[FeatureSet],
) -> pd.DataFrame:
    rows = []
    for c in classes:
        frames = sum(int((y[i] == c).sum()) for i in has_coding)
        bouts = 0
        for i in has_coding:
            code = np.where(y[i] == c, 1, np.where(y[i] == "", -1, 0))
            labels, _ = coded_bouts(code, [len(code)])
            bouts += int((labels == 1).sum())
        sessions = sorted({str(feats[i].session) for i in has_coding if (y[i] == c).any()})
        rows.append({"behaviour": str(c), "coded_frames": frames, "coded_seconds": frames / fps,
                     "coded_bouts": bouts, "coded_sessions": len(sessions),
                     "sessions": ";".join(sessions)})  # fmt: skip
    return pd.DataFrame(rows)


def _scores(
    y: Sequence[np.ndarray],
    oof: dict[int, np.ndarray] | None,
    has_coding: Sequence[int],
    classes: np.ndarray,
    counts: pd.DataFrame,
    min_bouts: int,
    feats: Sequence[FeatureSet],
) -> tuple[dict[str, Any], pd.DataFrame, list[str]]:
    """Leave-one-session-out accuracy and per-behaviour precision, recall and F1.

    Computed over coded frames with ``sklearn.metrics.precision_recall_fscore_support``; a
    frame left unlabelled counts as wrong. A behaviour coded in one session only cannot be
    scored this way (held out, its session is predicted by a classifier that never saw it):
    its precision, recall and F1 are left empty, and a warning says so; its frames still count
    in the accuracy.
    """
    from sklearn.metrics import precision_recall_fscore_support

    per = counts.copy()
    evaluation: dict[str, Any] = {
        "coded_sessions": sorted({str(feats[i].session) for i in has_coding}),
        "coded_frames": int(counts["coded_frames"].sum()),
        "behaviours": [str(c) for c in classes],
        "evaluation": "leave-one-session-out",
        "accuracy": None,
    }
    if oof:
        keys = sorted(oof)
        true = np.concatenate([y[i] for i in keys])
        pred = np.concatenate([oof[i] for i in keys])
        mask = true != ""
        true, pred = true[mask].astype(str), pred[mask].astype(str)
        p, r, f, _ = precision_recall_fscore_support(
            true, pred, labels=[str(c) for c in classes], zero_division=0
        )
        alone = (per["coded_sessions"] < 2).to_numpy()
        per["precision"], per["recall"], per["f1"] = (np.where(alone, np.nan, v) for v in (p, r, f))
        evaluation["accuracy"] = float((true == pred).mean())
        evaluation["frames_evaluated"] = len(true)
        evaluation["frames_unlabelled"] = int((pred == "").sum())
        evaluation["per_session_accuracy"] = {
            str(feats[i].session): float((y[i][y[i] != ""] == oof[i][y[i] != ""]).mean())
            for i in keys
        }
    notes = [
        f"behaviour {row.behaviour!r} has only {row.coded_bouts} coded bouts (fewer than "
        f"{min_bouts}); its labels and scores rest on little evidence: code more of it"
        for row in per.itertuples()
        if row.coded_bouts < min_bouts
    ]
    if oof:
        notes += [
            f"behaviour {row.behaviour!r} is coded in one session only ({row.sessions}): "
            "leave-one-session-out cannot score it (held out, that session is predicted by a "
            "classifier that never saw it), so its precision, recall and F1 are left empty; "
            "code it in another session"
            for row in per.itertuples()
            if row.coded_sessions < 2
        ]
    if oof is None and len(evaluation["coded_sessions"]) < 2:  # not when evaluation was skipped
        notes.append("only one session is coded: no leave-one-session-out score; code another")
    return evaluation, per, notes


# --- labelling with the learned classifier -------------------------------------------------
def load_classifier(workspace: str | Path | Workspace) -> BehaviourClassifier | None:
    """The workspace's learned classifier, or None when nothing was learned."""
    folder = _workspace(workspace).path / LEARNED_FOLDER / CLASSIFIER_FOLDER
    if not folder.is_dir():
        return None
    meta, arrays = read_bundle(folder)
    try:
        return BehaviourClassifier.from_state(meta, arrays)
    except InputError as exc:
        raise WorkspaceError(f"{folder}: {exc}") from None


def _label_with(
    ws: Workspace,
    clf: BehaviourClassifier,
    model: BehaviourModel,
    feats: Sequence[FeatureSet],
    X: Sequence[np.ndarray] | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Write ``learned/labels.parquet`` for every recording and rewrite the ethogram tables
    (the caller holds the workspace lock)."""
    X = classifier_inputs(model, feats) if X is None else X
    if X and X[0].shape[1] != clf.n_features_in_:
        raise WorkspaceError(
            f"{ws.path}: the learned classifier takes {clf.n_features_in_} inputs but this "
            f"workspace's model gives {X[0].shape[1]}; run 'ethoscribe learn' on it again"
        )
    parts = []
    names = np.append(clf.classes_, "").astype(object)
    for f, x in zip(feats, X, strict=True):
        codes, prob = clf.predict_with_probability(x, [len(x)])
        parts.append(
            pd.DataFrame(
                {
                    "session": str(f.session),
                    "animal": str(f.animal),
                    "frame": np.arange(len(x), dtype=np.int64),
                    "behaviour": names[codes],
                    "probability": prob,
                }
            )
        )
    table = pd.concat(parts, ignore_index=True)
    write_table(table, learned_labels_path(ws.path))
    return write_ethogram_tables(ws.path, ws.labels())


def carry_learned(
    source: str | Path, target: Workspace, locked: bool = False
) -> tuple[pd.DataFrame, pd.DataFrame] | None:
    """Copy the learned classifier of workspace ``source`` into ``target`` and label its
    sessions with it; returns the new bouts and budgets (None when ``source`` learned none).
    ``locked``: the caller already holds ``target``'s lock (a labelling run)."""
    folder = Path(source) / LEARNED_FOLDER / CLASSIFIER_FOLDER
    if not folder.is_dir():
        return None
    clf = load_classifier(source)
    if locked:
        return _carry(source, target, clf)
    with target.lock():
        return _carry(source, target, clf)


def _carry(
    source: str | Path, target: Workspace, clf: BehaviourClassifier
) -> tuple[pd.DataFrame, pd.DataFrame]:
    dest = target.path / LEARNED_FOLDER
    dest.mkdir(exist_ok=True)
    meta, arrays = clf.to_state()
    write_bundle(dest / CLASSIFIER_FOLDER, meta, arrays)
    evaluation = Path(source) / LEARNED_FOLDER / "evaluation.json"
    if evaluation.is_file():
        shutil.copyfile(evaluation, dest / "evaluation.json")
    append_journal(
        dest / "journal.jsonl",
        {"op": "carry", "time": now(), "from": str(source),
         "classes": [str(c) for c in clf.classes_]},
    )  # fmt: skip
    return _label_with(target, clf, target.model(), recording_features(target))


def learned_evaluation(workspace: str | Path | Workspace) -> dict[str, Any] | None:
    """``learned/evaluation.json`` of a workspace, or None."""
    path = _workspace(workspace).path / LEARNED_FOLDER / "evaluation.json"
    return read_json(path) if path.is_file() else None


def uncertain_bouts(workspace: str | Path | Workspace, n: int = 10) -> pd.DataFrame:
    """The ``n`` learned bouts whose labels are least certain (lowest mean probability):
    the ones an expert should code next. Empty when nothing was learned."""
    ws = _workspace(workspace)
    labels = ws.labels()
    if "discovered_motif" not in labels.columns:
        return pd.DataFrame()
    bouts = bout_table(labels)
    bouts = bouts[bouts["n_frames"] >= 2]
    cols = ["session", "animal", "motif", "start_s", "duration_s", "mean_probability",
            "start_frame", "stop_frame"]  # fmt: skip
    top = bouts.sort_values(["mean_probability", "start_s"], kind="stable").head(n)
    return top[cols].rename(columns={"motif": "behaviour"}).reset_index(drop=True)


# --- one-paragraph descriptions for the command line ------------------------------------------
def describe_agreement(result: ExpertAgreement, out: str | Path) -> str:
    s = result.summary
    boundaries = (
        f"boundary F1 {s['boundary_f1']:.3f} (precision {s['precision']:.3f}, recall "
        f"{s['recall']:.3f}, within {s['tolerance_s']:g} s)"
        if s.get("boundaries_expert", 1)
        else "boundary F1 not measurable (the coding changes behaviour only across uncoded "
        "time: no boundary inside its coded stretches)"
    )
    return (
        f"agreement of {s['frames_compared']} coded frames ({s['frames_unscored']} unscored): "
        f"ARI {s['ari']:.3f}, NMI {s['nmi']:.3f}, matched accuracy {s['matched_accuracy']:.3f}, "
        f"purity {s['purity']:.3f}, {boundaries}; "
        f"files: {Path(out) / 'agreement.json'}, confusion.csv, per_behaviour.csv, report.html"
    )


def describe_learning(result: LearnResult, workspace: str | Path) -> str:
    e = result.evaluation
    acc = e.get("accuracy")
    score = (
        f"leave-one-session-out accuracy {acc:.3f} over {e['frames_evaluated']} coded frames"
        if acc is not None
        else "no leave-one-session-out score"
    )
    per = ", ".join(
        f"{r.behaviour} F1 "
        + (f"{r.f1:.2f}" if np.isfinite(r.f1) else "not scored (one session)")
        + f" ({r.coded_seconds:.0f} s)"
        for r in result.per_behaviour.itertuples()
        if hasattr(r, "f1")
    )
    lines = [
        f"learned {len(e['behaviours'])} behaviours from {len(e['coded_sessions'])} coded "
        f"sessions; {score}" + (f"; {per}" if per else ""),
        f"saved in {Path(workspace) / LEARNED_FOLDER}; labels.csv and bouts.csv now name the "
        "expert's behaviours (the discovered motifs in discovered_motif)",
    ]
    # result.warnings were issued as warnings when learning (the command line prints them)
    return "\n".join(lines)
