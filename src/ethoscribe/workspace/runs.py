"""Batch runs that create workspaces: discovery on a study, labelling a new cohort."""

from __future__ import annotations

import shutil
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from ethoscribe import __version__
from ethoscribe.clean import CleanParams
from ethoscribe.curation import Curation
from ethoscribe.errors import EthoscribeError, WorkspaceError
from ethoscribe.features import FeatureSet
from ethoscribe.io._atomic import atomic_write_json, write_table
from ethoscribe.io.bundle import write_bundle
from ethoscribe.pose import PoseTracks, check_same_body_plan
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.model import BehaviourModel, motif_name, stack_valid
from ethoscribe.segment.stability import stability_report
from ethoscribe.workspace.cache import CACHE_FOLDER, load_prepared, prepare_session
from ethoscribe.workspace.compare import write_ethogram_report
from ethoscribe.workspace.executor import connect, map_sessions
from ethoscribe.workspace.files import load_model
from ethoscribe.workspace.folder import (
    CAUTION,
    FORMAT_VERSION,
    JOURNAL_FILE,
    WORKSPACE_FILE,
    Staging,
    Workspace,
    append_journal,
    features_table,
    jsonable,
    now,
    save_features,
    table_json,
    versions,
    write_ethogram_tables,
)
from ethoscribe.workspace.reading import plan_sessions, read_sessions, sessions_table


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
) -> Workspace:
    """Read, clean, featurise and segment sessions; write a workspace into ``out``.

    Parameters
    ----------
    inputs : files or folders of pose files (or none, with a manifest that lists paths)
    out : the workspace folder
    manifest : CSV with per-session fps, calibration, group, subject ...
    jobs : worker processes for the per-session reading and cleaning (None: every CPU)
    scheduler : a Dask scheduler address or ``dask.distributed.Client`` to run those on
        (the workspace folder must then be on a file system the workers share)
    force : recompute cleaned sessions even when the cache holds them
    replace_curation : allow a new discovery in a workspace whose motifs were already named

    Writes ``labels.csv``, ``bouts.csv``, ``transitions.csv``, ``time_budget.csv``,
    ``quality.csv``, ``sessions.csv``, ``summary.json``, ``report.html``, ``model/`` and
    ``features/``; cleaned sessions are cached in ``cache/``. If the run fails in a folder it
    created, the folder is removed: nothing half-written is left.
    """
    out = Path(out)
    _refuse_to_overwrite_curation(out, replace_curation)
    plan = plan_sessions(inputs, manifest, fps)
    cleaning = CleanParams.from_dict(
        {} if min_confidence is None else {"min_confidence": min_confidence}
    ).to_dict()
    created = not out.exists()
    try:
        cleaned, quality, table = _prepare(out, plan, cleaning, jobs, scheduler, force, progress)
        model = BehaviourModel(
            cleaning=cleaning,
            features={"origin": origin, "axis": axis},
            method=method,
            n_states=states,
            random_state=seed,
            progress=progress,
        ).fit_cleaned(cleaned, quality)
        feats = model.featurise_cleaned(cleaned)
        labels = model.label_features(feats)
        report = _stability(model, feats, seed, progress) if stability and method == "hmm" else None
        summary = _summary(model, table, seed, report)
        _write_workspace(out, table, model, feats, quality, labels, report, summary)
    except EthoscribeError:
        # Bad input in a folder this run made: leave nothing behind. (An interrupted run keeps
        # its cache, so the next run resumes.)
        if created:
            shutil.rmtree(out, ignore_errors=True)
        raise
    ws = Workspace(out)
    write_ethogram_report(ws, out / "report.html")
    return ws


def _prepare(
    out: Path,
    plan: Sequence[dict[str, Any]],
    cleaning: dict[str, Any],
    jobs: int | None,
    scheduler: Any,
    force: bool,
    progress: bool,
) -> tuple[list[PoseTracks], list[pd.DataFrame], pd.DataFrame]:
    """Read and clean every session (in parallel, through the cache); load the results."""
    work = [
        {"entry": e, "cleaning": cleaning, "cache": str(out / CACHE_FOLDER), "force": force}
        for e in plan
    ]
    infos = map_sessions(
        prepare_session,
        work,
        jobs=jobs,
        client=connect(scheduler),
        progress=progress,
        desc="reading and cleaning",
    )
    loaded = [load_prepared(i) for i in infos]
    cleaned = [t for t, _, _ in loaded]
    check_same_body_plan(cleaned)
    return cleaned, [q for _, q, _ in loaded], sessions_table([r for _, _, r in loaded])


def label_sessions(
    source: str | Path,
    inputs: Sequence[str | Path],
    out: str | Path,
    manifest: str | Path | None = None,
    fps: float | None = None,
    progress: bool = True,
) -> Workspace:
    """Label new sessions with the model of workspace ``source`` (same states, same names).

    The curation journal of ``source`` is copied, so the new cohort carries the motif names
    the scientist gave, including merges and splits.
    """
    source = Path(source)
    if (source / "model").is_dir() and (source / WORKSPACE_FILE).is_file():
        ws = Workspace(source)
        model, journal = ws.model(), ws.journal()
    else:  # a bare model/ folder
        model, journal = load_model(source), []
    out = Path(out)
    if out.resolve() == source.resolve():
        raise WorkspaceError(f"{out}: write the new cohort's labels to a folder of its own")
    _refuse_to_overwrite_curation(out, False)
    sessions, table = read_sessions(inputs, manifest, fps, progress)
    feats, quality = model.transform_features(sessions)
    labels = model.label_features(feats)
    summary = _summary(model, table, model.random_state, None)
    summary["labelled_with"] = str(source)
    _write_workspace(out, table, model, feats, quality, labels, None, summary, journal)
    ws = Workspace(out)
    write_ethogram_report(ws, out / "report.html")
    return ws


def _summary(model: BehaviourModel, table: pd.DataFrame, seed: int, report: Any) -> dict:
    selection = model.selection_
    return {
        "created": now(),
        "versions": versions(),
        "parameters": model.get_params(),
        "seed": seed,
        "n_states": model.n_states_,
        "state_count_choice": None
        if selection is None
        else {
            "best": int(selection.best),
            "criterion": str(selection.criterion),
            "table": table_json(selection.table),
        },
        "features": {
            "origin": model.features_.origin_,
            "axis": list(model.features_.axis_),
            "axis_report": model.features_.axis_report_,
        },
        "n_sessions": len(table),
        "n_frames": int(table["n_frames"].sum()),
        "n_training_frames": model.n_training_frames_,
        "stability": None if report is None else report.summary,
        "caution": CAUTION,
    }


def _write_workspace(
    out: Path,
    table: pd.DataFrame,
    model: BehaviourModel,
    feats: Sequence[FeatureSet],
    quality: Sequence[Any],
    labels: pd.DataFrame,
    report: Any,
    summary: dict,
    journal: Sequence[dict] = (),
) -> None:
    stage = Staging(out)
    try:
        write_table(table, stage.path("sessions.csv"))
        if quality:
            frames = [q if isinstance(q, pd.DataFrame) else q.to_frame() for q in quality]
            write_table(pd.concat(frames, ignore_index=True), stage.path("quality.csv"))
        write_table(labels, stage.path("labels.parquet"))
        if report is not None:
            write_table(report.table, stage.path("stability.csv"))
        meta, arrays = model.to_state()
        write_bundle(stage.path("model"), meta, arrays)
        for i, f in enumerate(feats):
            save_features(stage.path(f"features/{i:05d}.npz"), f)
        atomic_write_json(stage.path("summary.json"), jsonable(summary))
        atomic_write_json(
            stage.path(WORKSPACE_FILE),
            {
                "kind": "ethoscribe.workspace",
                "format_version": FORMAT_VERSION,
                "created": summary["created"],
                "ethoscribe_version": __version__,
            },
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
        named = cur.apply(labels, features_table(feats) if needs else None)
        write_ethogram_tables(out, named, stage)
        stage.commit(last=WORKSPACE_FILE)
    except BaseException:
        stage.abort()
        raise


def _stability(
    model: BehaviourModel, feats: Sequence[FeatureSet], seed: int, progress: bool
) -> Any:
    X, lengths = stack_valid(feats)
    params = model.segmenter_.get_params()

    def make(s: int) -> GaussianHMM:
        return GaussianHMM(**{**params, "random_state": s, "n_restarts": 1, "progress": False})

    return stability_report(make, X, lengths, seeds=(seed, seed + 1, seed + 2), split_halves=True)


def _refuse_to_overwrite_curation(out: Path, allowed: bool) -> None:
    journal = out / JOURNAL_FILE
    if journal.exists() and journal.stat().st_size > 0 and not allowed:
        raise WorkspaceError(
            f"{out} holds curated motif names ({journal.name}); a new discovery would replace the "
            "states they name. Choose another --out folder, or pass replace_curation=True (the old "
            "journal is kept beside the new one)."
        )
