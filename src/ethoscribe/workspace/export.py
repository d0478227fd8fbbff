"""Saving a curated ethogram: the tables for people and programs, and the report.

:func:`save_ethogram` writes, with the current (curated) motif names, into the workspace::

    exports/labels.csv, labels.parquet    per-frame labels
    exports/bouts.csv, bouts.parquet      one row per bout
    exports/transitions.csv               bout-to-bout counts and probabilities per recording
    exports/transition_matrix.csv         pooled from-motif x to-motif probabilities
    exports/time_budget.csv               share of valid time per recording and motif
    exports/bout_durations.csv            duration statistics per recording and motif
    exports/motif_names.csv               state id -> motif name (replayed from the journal)
    report.html                           the ethogram report

Each file is written atomically. The root tables of the workspace (``labels.csv``,
``bouts.csv``, ...) are kept current by every edit already; ``exports/`` adds the rest.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from ethoscribe.ethogram import bout_table, duration_summary, time_budget, transition_matrix
from ethoscribe.ethogram import transition_table as transitions_of
from ethoscribe.io import safe_child, write_table
from ethoscribe.label_table import csv_rounded
from ethoscribe.workspace.compare import write_ethogram_report
from ethoscribe.workspace.folder import Workspace

EXPORT_FOLDER = "exports"
REPORT_FILE = "report.html"


def save_ethogram(
    workspace: Workspace | str | Path, folder: str = EXPORT_FOLDER, report: bool = True
) -> dict[str, Path]:
    """Write the curated ethogram tables into ``workspace/folder`` and the report beside it.

    Returns
    -------
    dict of str to Path
        What was written, by name (``"labels.csv"``, ..., ``"report.html"``).

    Examples
    --------
    >>> files = save_ethogram("study_ws")  # doctest: +SKIP
    >>> sorted(files)[:2]  # doctest: +SKIP
    ['bout_durations.csv', 'bouts.csv']
    """
    ws = workspace if isinstance(workspace, Workspace) else Workspace(workspace)
    out = safe_child(ws.path, str(folder), "export folder")
    # Under the edit lock: an edit in another process cannot change the names half-way through.
    with ws.lock():
        return _save_ethogram(ws, out, report)


def _save_ethogram(ws: Workspace, out: Path, report: bool) -> dict[str, Path]:
    out.mkdir(exist_ok=True)
    labels = ws.labels()
    bouts, budgets = bout_table(labels), time_budget(labels)
    cur = ws.curation()
    names = pd.DataFrame({"state": list(cur.names), "motif": list(cur.names.values())})
    tables = {
        "labels.csv": labels,
        "labels.parquet": labels,
        "bouts.csv": bouts,
        "bouts.parquet": bouts,
        "transitions.csv": transitions_of(bouts),
        "transition_matrix.csv": transition_matrix(bouts).rename_axis("from_motif").reset_index(),
        "time_budget.csv": budgets,
        "bout_durations.csv": duration_summary(bouts),
        "motif_names.csv": names,
    }
    written = {}
    for name, table in tables.items():
        # CSVs rounded as every other CSV of a run; Parquet keeps full precision
        rounded = csv_rounded(table) if name.endswith(".csv") else table
        written[name] = write_table(rounded, out / name)
    if report:
        path = write_ethogram_report(ws, ws.path / REPORT_FILE, (bouts, budgets))
        written[REPORT_FILE] = Path(path)
    return written
