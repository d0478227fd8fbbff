"""Where a workspace keeps what ``ethoscribe learn`` made, and how its labels take over.

``learned/`` in a workspace holds::

    classifier/          the fitted behaviour classifier (classifier JSON + arrays npz, no pickle)
    labels.parquet       per frame: session, animal, frame, behaviour, probability
    evaluation.json      leave-one-session-out figures, warnings, parameters, versions
    per_behaviour.csv    per behaviour: coded seconds, bouts and sessions, precision, recall, F1
    journal.jsonl        one record per learning run (appended, fsynced)

When ``labels.parquet`` is present the workspace's label table names the expert's behaviours
in ``motif`` (with the classifier's ``probability``); the discovered motifs stay beside them in
``discovered_motif`` and ``discovered_probability``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa

from ethoscribe.errors import WorkspaceError

LEARNED_FOLDER = "learned"
LEARNED_LABELS = "labels.parquet"
LEARNED_COLUMNS = ["session", "animal", "frame", "behaviour", "probability"]


def learned_labels_path(folder: str | Path) -> Path:
    return Path(folder) / LEARNED_FOLDER / LEARNED_LABELS


def read_learned_labels(folder: str | Path) -> pd.DataFrame | None:
    """The learned per-frame labels of a workspace, or None when nothing was learned."""
    path = learned_labels_path(folder)
    if not path.is_file():
        return None
    try:
        table = pd.read_parquet(path)
    except (OSError, ValueError, pa.ArrowException) as exc:
        msg = f"{path}: cannot be read ({exc}); run 'ethoscribe learn' again"
        raise WorkspaceError(msg) from None
    missing = [c for c in LEARNED_COLUMNS if c not in table.columns]
    if missing:
        raise WorkspaceError(f"{path}: columns {missing} missing; run 'ethoscribe learn' again")
    return table


def with_learned(folder: str | Path, named: pd.DataFrame) -> pd.DataFrame:
    """``named`` (a label table with curated motif names) with the learned behaviours in
    ``motif``/``probability`` when the workspace has them; unchanged otherwise."""
    learned = read_learned_labels(folder)
    if learned is None:
        return named
    keys = ["session", "animal", "frame"]
    right = learned[[*keys, "behaviour", "probability"]].rename(
        columns={"probability": "_learned_probability"}
    )
    out = named.merge(right, on=keys, how="left", sort=False, validate="one_to_one")
    behaviour = out["behaviour"].fillna("").astype(str).to_numpy(object)
    names = np.array(sorted(set(behaviour) - {""}), dtype=object)
    state = np.full(len(out), -1, dtype=np.int64)
    has = behaviour != ""
    state[has] = np.searchsorted(names, behaviour[has].astype(str))
    result = named.copy()
    result["discovered_motif"] = named["motif"].to_numpy()
    result["discovered_probability"] = named["probability"].to_numpy()
    result["state"] = state
    result["motif"] = behaviour
    result["probability"] = out["_learned_probability"].to_numpy(float)
    return result


def retire_learned(folder: str | Path, stamp: str) -> Path | None:
    """Move ``learned/`` aside (``learned-before-STAMP``) after a run that made new states: the
    classifier learned from the old features no longer applies. Returns where it went."""
    learned = Path(folder) / LEARNED_FOLDER
    if not learned.is_dir():
        return None
    target = Path(folder) / f"{LEARNED_FOLDER}-before-{stamp}"
    learned.replace(target)
    return target
