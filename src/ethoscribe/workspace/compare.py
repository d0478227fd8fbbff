"""Group statistics and the HTML reports of a workspace.

:func:`compare` takes a workspace's curated labels (motif names replayed from its journal), joins
each session to a group (from a manifest, or the manifest columns recorded at discovery), tests
every metric x motif between the groups and writes the tables, ``metadata.json`` and
``report.html`` into a folder of its own. Every input is checked before anything is written, and
the files are moved into place together with ``metadata.json`` last.

:func:`write_ethogram_report` writes the report without group statistics.
"""

from __future__ import annotations

import os
import warnings
from collections import Counter
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe.curation import UNASSIGNED
from ethoscribe.errors import InputError, InputWarning, counted, listed
from ethoscribe.ethogram import bout_table, time_budget, transition_table
from ethoscribe.io import atomic_write_json, atomic_write_text, read_manifest, write_table
from ethoscribe.label_table import GroupSpec, csv_rounded, with_groups
from ethoscribe.multiplicity import family_summary, headline
from ethoscribe.report import Section, render_report
from ethoscribe.stats import EXACT_THRESHOLD, compare_groups, parse_planned, session_metrics
from ethoscribe.workspace.folder import (
    CAUTION,
    Staging,
    Workspace,
    check_output_folder,
    jsonable,
    now,
    versions,
)
from ethoscribe.workspace.report_sections import (
    ethogram_sections,
    group_section,
    model_section,
    postures_section,
    quality_section,
)

ALPHA = 0.05
EFFECT_INTERVAL = "Hedges' g, 95% noncentral-t interval"
TESTS = ("permutation", "rank")
METADATA_FILE = "metadata.json"
MULTIPLE_TESTING = (
    "planned comparisons: Holm over the planned set (confirmatory); every other test "
    "exploratory: Benjamini-Hochberg within its family (time_budget, bout_rate, bout_duration, "
    "transitions); tests without variation are not testable and not counted"
)


def compare(
    workspace_dir: str | Path,
    out: str | Path,
    manifest: str | Path | None = None,
    by: str = "group",
    test: str = "permutation",
    paired: bool = False,
    seed: int = 0,
    n_resamples: int = 10_000,
    planned: str | list | None = None,
) -> str:
    """Compare groups of sessions of a workspace; write tables and a report into ``out``.

    Parameters
    ----------
    workspace_dir : str or Path
        A folder written by ``discover`` (its curated motif names are used).
    out : str or Path
        Output folder (created; not the workspace itself).
    manifest : str or Path, optional
        CSV with a ``session`` column (the pose file names without suffix) and the column
        ``by``; default: the manifest columns the workspace recorded at discovery.
    by : str
        Grouping column (with ``paired``, the condition; subjects come from ``subject``).
    test : {"permutation", "rank"}
        See :func:`ethoscribe.stats.compare_groups`.
    paired, seed, n_resamples
        Paired design; random seed of permutations; Monte Carlo resamples when
        an exact permutation test would need more than 50 000 arrangements.
    planned : str or list, optional
        The comparisons the study planned, e.g. ``"time_budget:digging,bout_rate:digging"``
        (curated motif names; ``--primary`` on the command line): Holm-corrected together as
        the confirmatory set. Every other test is exploratory, Benjamini-Hochberg-corrected
        within its family (time budget, bout rate, bout duration, transitions).

    Returns
    -------
    str
        A one-paragraph summary ending with the caution sentence.

    Writes ``group_stats.csv/.parquet``, ``session_metrics.csv``, ``bouts``, ``time_budget`` and
    ``transitions`` (``.csv/.parquet``, per session, with the group), ``metadata.json`` and
    ``report.html``.

    Examples
    --------
    >>> print(compare("study_ws", "study_ws/groups"))  # doctest: +SKIP
    Compared 16 sessions in 2 groups of 'group' (enriched: 8, standard: 8) ...
    """
    _check_options(by, test, n_resamples, seed)
    planned = parse_planned(planned)
    ws = Workspace(workspace_dir)
    out = _output_folder(out, ws)
    labels = ws.labels()
    design = _design(ws, labels, manifest, by, paired)
    left_out = design.attrs["left_out"]
    if left_out:
        named = _recordings(labels, "animal" in design)
        labels = labels[~named.isin(left_out)].reset_index(drop=True)
        shown = listed(map(repr, left_out), 10)
        whose = "animals (session/animal)" if "animal" in design else "sessions"
        _warn(f"{whose} {shown} have an empty {by!r}: left out of the comparison")
    bouts = bout_table(labels)
    metrics = session_metrics(labels, bouts, design)
    # Frames the scientist set aside are no behaviour to test: described in the tables only
    # (they stay in the time budgets' denominators: the animal was seen then).
    set_aside = metrics["motif"].map(lambda m: UNASSIGNED in str(m).split("->"))
    tested = metrics[~set_aside]
    stats = compare_groups(
        tested, by="group", test=test, paired=paired, alpha=ALPHA, n_resamples=n_resamples,
        random_state=seed, planned=planned,
    )  # fmt: skip
    groups = (
        design[["session", "animal", "group"]]
        if "animal" in design
        else dict(zip(design["session"], design["group"], strict=True))
    )
    budgets = time_budget(labels)
    tables = {
        "group_stats": (stats, True),
        "session_metrics": (_renamed(metrics, by), False),
        "bouts": (_tagged(bouts, groups, by), True),
        "time_budget": (_tagged(budgets, groups, by), True),
        "transitions": (_tagged(transition_table(bouts), groups, by), True),
    }
    options = {
        "by": by, "test": test, "paired": paired, "seed": seed, "n_resamples": n_resamples,
        "effect_interval": EFFECT_INTERVAL, "alpha": ALPHA, "exact_threshold": EXACT_THRESHOLD,
        "unit_of_analysis": "subject (the session where none is given)",
        "manifest": None if manifest is None else str(Path(manifest).resolve()),
        "planned": [f"{m}:{t}" for m, t in planned],
        "multiple_testing": MULTIPLE_TESTING,
        "not_tested": [UNASSIGNED] if set_aside.any() else [],
    }  # fmt: skip
    meta = _metadata(ws, options, design, stats)
    sections = [group_section(stats, ALPHA, tested)]
    sections += [s for s in (quality_section(ws, labels), model_section(ws)) if s is not None]
    sections += ethogram_sections(bouts, budgets, groups, seed, _min_bout(ws))
    title = f"Group comparison by {by!r}: {ws.path.name}"
    page = render_report(title, sections, meta, parameters_link=METADATA_FILE)
    _write_outputs(out, tables, meta, page)
    return _summary(design, stats, labels, by, test, paired, out)


def write_ethogram_report(
    workspace: Workspace | str | Path,
    path: str | Path,
    tables: tuple[pd.DataFrame, pd.DataFrame] | None = None,
) -> Path:
    """Write the ethogram report of a workspace (no group statistics) to ``path``.

    Sessions are grouped in the time-budget figure when the workspace's sessions table has a
    ``group`` for every session. ``tables``: the current (bouts, per-session time budgets),
    as :func:`~ethoscribe.workspace.folder.write_ethogram_tables` returns them; without them
    they are computed from the per-frame labels.

    Examples
    --------
    >>> write_ethogram_report("study_ws", "study_ws/report.html")  # doctest: +SKIP
    """
    ws = workspace if isinstance(workspace, Workspace) else Workspace(workspace)
    if tables is None:
        labels = ws.labels()
        bouts, budgets = bout_table(labels), time_budget(labels)
        del labels
    else:
        bouts, budgets = tables
    sessions = _sessions_table(ws)
    names = set(budgets["session"].astype(str))
    groups = None
    if "group" in sessions.columns:
        lookup = dict(zip(sessions["session"], sessions["group"], strict=True))
        if all(lookup.get(s, "") for s in names):
            groups = {s: lookup[s] for s in names}
    sections = [s for s in (quality_section(ws), model_section(ws)) if s is not None]
    sections += ethogram_sections(bouts, budgets, groups, 0, _min_bout(ws))
    sections.append(postures_section(ws, bouts))
    sections.append(Section("Group statistics", "Run 'ethoscribe compare' for group tests."))
    params = {
        "created": now(),
        "versions": versions(),
        "workspace": str(ws.path.resolve()),
        "workspace_parameters": ws.summary.get("parameters"),
        "seeds": {"discovery": ws.summary.get("seed")},
        "journal": _journal_summary(ws),
    }
    link = Path(os.path.relpath(ws.path / "summary.json", Path(path).parent)).as_posix()
    page = render_report(f"Ethogram: {ws.path.name}", sections, jsonable(params), link)
    return atomic_write_text(path, page)


def _min_bout(ws: Workspace) -> float | None:
    value = (ws.summary.get("parameters") or {}).get("min_bout_s")
    return float(value) if isinstance(value, (int, float)) and value > 0 else None


# --- checks -------------------------------------------------------------------------------
def _check_options(by: Any, test: Any, n_resamples: Any, seed: Any) -> None:
    if not isinstance(by, str) or not by.strip():
        raise InputError(f"by must name a grouping column (e.g. 'group'); got {by!r}")
    if test not in TESTS:
        raise InputError(f"test must be one of {list(TESTS)}; got {test!r}")
    if isinstance(n_resamples, bool) or not isinstance(n_resamples, (int, np.integer)):
        raise InputError(f"n_resamples must be a whole number >= 100; got {n_resamples!r}")
    if n_resamples < 100:
        raise InputError(f"n_resamples must be a whole number >= 100; got {n_resamples!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise InputError(f"seed must be a whole number >= 0; got {seed!r}")


def _output_folder(out: str | Path, ws: Workspace) -> Path:
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError(f"--out {out} is a file; give a folder for the comparison outputs")
    check_output_folder(out, "comparison")  # never another workspace or a folder of other files
    if out.exists() and out.resolve() == ws.path.resolve():
        msg = f"--out {out} is the workspace itself; write the comparison to a folder of its own"
        raise InputError(f"{msg}, e.g. {ws.path / 'comparison'}")
    return out


def _text(column: pd.Series) -> pd.Series:
    """Cells as text ("" when empty); whole numbers without a trailing ".0"."""

    def cell(v: Any) -> str:
        if v is None or (isinstance(v, float) and np.isnan(v)):
            return ""
        if isinstance(v, (float, np.floating)) and float(v).is_integer():
            return str(int(v))
        return str(v).strip()

    return column.map(cell).astype(object)


def _sessions_table(ws: Workspace) -> pd.DataFrame:
    # Read as text: session names such as "007" must not turn into numbers.
    return pd.read_csv(ws.path / "sessions.csv", dtype=str, keep_default_na=False)


def _recordings(table: pd.DataFrame, per_animal: bool) -> pd.Series:
    """Each row's recording as the comparison names it: the session, or with ``per_animal``
    (a manifest row per animal) ``session/animal``."""
    session = table["session"].astype(str)
    return session + "/" + table["animal"].astype(str) if per_animal else session


def _warn(text: str) -> None:
    warnings.warn(text, InputWarning, stacklevel=3)


def _design(
    ws: Workspace, labels: pd.DataFrame, manifest: str | Path | None, by: str, paired: bool
) -> pd.DataFrame:
    """``session, group, subject`` for every session of the workspace, checked."""
    if manifest is not None:
        table, source = read_manifest(manifest, require_paths=False), f"manifest {manifest}"
        fix = (
            f"Add a {by!r} column to it, or name another of its columns: "
            "pass by='COLUMN' (command line: --by COLUMN)"
        )
    else:
        table, source = _sessions_table(ws), f"{ws.path / 'sessions.csv'}"
        fix = (
            "Name the grouping column among these: pass by='COLUMN' (command line: --by COLUMN);"
            " or give a manifest with columns 'session' and the groups: pass manifest='CSV' "
            "(command line: --manifest CSV)"
        )
    if by not in table.columns:
        found = [c for c in table.columns if c != "path"]
        raise InputError(f"{source} has no grouping column {by!r}; columns found: {found}. {fix}")
    if paired and "subject" not in table.columns:
        msg = f"{source} has no 'subject' column; a paired comparison matches sessions by subject"
        raise InputError(f"{msg}. Add one (the animal measured under each {by!r})")
    design = pd.DataFrame({"session": _text(table["session"]), "group": _text(table[by])})
    # one row per animal (animals of one session in different groups): each animal is a
    # subject of its own unless the manifest's subjects say otherwise
    per_animal = manifest is not None and "animal" in table.columns  # not sessions.csv's
    if per_animal:
        design.insert(1, "animal", _text(table["animal"]))
    own = _recordings(design, per_animal)
    subject = _text(table["subject"]) if "subject" in table else own
    # a session whose subject is left empty is a subject of its own (not one with the others)
    design["subject"] = subject.where(subject != "", own)
    _check_coverage(design, labels, source, ws)
    # An empty group leaves the session (animal) out of the comparison (the caller says so)
    empty = own[design["group"] == ""].tolist()
    design = design[design["group"] != ""].reset_index(drop=True)
    design.attrs["left_out"] = sorted(empty)
    unit = "subject" if "subject" in table or per_animal else "session"  # unit of analysis
    sizes = design.groupby("group")[unit].nunique()
    if len(sizes) < 2:
        shown = listed(map(repr, sizes.index), 10)
        msg = f"{source}: column {by!r} holds {len(sizes)} group ({shown})"
        raise InputError(f"{msg}; a comparison needs at least two groups")
    single = sizes[sizes < 2].index.tolist()
    if single:
        alone = [f"{g!r} ({design.loc[design['group'] == g, unit].iloc[0]})" for g in single]
        msg = f"{source}: group(s) {', '.join(alone)} of {by!r} have a single {unit}; "
        raise InputError(
            msg + f"each group needs at least two {unit}s to be compared: give it the group "
            f"of others, or leave its {by!r} empty in a manifest to leave it out"
        )
    return design


def _check_coverage(design: pd.DataFrame, labels: pd.DataFrame, source: str, ws: Workspace) -> None:
    # per animal: every animal of the workspace's sessions, named session/animal
    per_animal = "animal" in design
    have, given = set(_recordings(labels, per_animal)), set(_recordings(design, per_animal))
    missing, extra = sorted(have - given), sorted(given - have)
    problems = []
    if missing:
        problems.append(
            f"sessions of the workspace missing from it: {listed(map(repr, missing), 10)}"
        )
    if extra:
        problems.append(
            f"sessions in it that the workspace {ws.path} lacks: {listed(map(repr, extra), 10)}"
        )
    if problems:
        msg = (
            f"{source} does not match the workspace: {'; '.join(problems)}. The session column "
            f"must list the sessions as discovery named them (the 'session' column of "
            f"{ws.path / 'sessions.csv'})"
            + (", the animal column their animals (as in labels.csv)" if "animal" in design else "")
        )
        if missing:
            msg += "; to leave a session out of the comparison, keep its row with the group empty"
        raise InputError(msg + ".")


# --- outputs ------------------------------------------------------------------------------
def _tagged(table: pd.DataFrame, groups: GroupSpec, by: str) -> pd.DataFrame:
    """``table`` with the grouping column ``by`` after ``session`` (``group`` if taken)."""
    name = by if by not in table.columns else "group"
    group = with_groups(table, groups)["group"].to_numpy()
    out = table.copy()
    out.insert(1, name, group)
    return out


def _renamed(metrics: pd.DataFrame, by: str) -> pd.DataFrame:
    """The metrics with their ``group`` column named after ``by`` (when that name is free)."""
    return metrics if by in metrics.columns else metrics.rename(columns={"group": by})


def _journal_summary(ws: Workspace) -> dict[str, Any]:
    records = ws.journal()
    cur = ws.curation()
    edits = [r.get("op") for r in records if r.get("op") != "start"]
    return {
        "n_edits": len(edits),
        "edits_by_kind": dict(sorted(Counter(edits).items())),
        "names": {str(k): v for k, v in cur.names.items()},
        "motifs": cur.motifs,
    }


def _metadata(ws: Workspace, options: dict, design: pd.DataFrame, stats: pd.DataFrame) -> dict:
    summary = ws.summary
    members = _recordings(design, "animal" in design).groupby(design["group"]).apply(sorted)
    members = members.to_dict()
    return jsonable(
        {
            "kind": "ethoscribe.comparison",
            "created": now(),
            "versions": versions(),
            "workspace": str(ws.path.resolve()),
            "comparison": options,
            "seeds": {"comparison": options["seed"], "discovery": summary.get("seed")},
            "groups": members,
            "left_out": list(design.attrs.get("left_out") or []),
            "workspace_parameters": summary.get("parameters"),
            "workspace_summary": {
                k: summary.get(k)
                for k in ("n_states", "n_sessions", "n_frames", "n_labelled_frames", "created")
            },
            "journal": _journal_summary(ws),
            "n_tests": int(stats["testable"].sum()),
            "n_not_testable": int((~stats["testable"]).sum()),
            "families": family_summary(stats, ALPHA).to_dict(orient="records"),
            "warnings": list(stats.attrs.get("warnings") or []),
            "caution": CAUTION,
        }
    )


def _write_outputs(out: Path, tables: dict, meta: dict, page: str) -> None:
    stage = Staging(out)
    try:
        for name, (table, parquet) in tables.items():
            write_table(csv_rounded(table), stage.path(f"{name}.csv"))
            if parquet:
                write_table(table, stage.path(f"{name}.parquet"))
        atomic_write_text(stage.path("report.html"), page)
        atomic_write_json(stage.path(METADATA_FILE), meta)
        stage.commit(last=METADATA_FILE)
    except BaseException:
        stage.abort()
        raise


def _summary(
    design: pd.DataFrame,
    stats: pd.DataFrame,
    labels: pd.DataFrame,
    by: str,
    test: str,
    paired: bool,
    out: Path,
) -> str:
    """The paragraph ``compare`` returns: groups, planned tests, families, notes, the caution."""
    per_animal = "animal" in design
    counts = design.groupby("group")["subject" if per_animal else "session"].nunique()
    sizes = ", ".join(f"{g}: {n}" for g, n in counts.items())
    motifs = sorted(set(labels["motif"].astype(str)) - {"", UNASSIGNED})
    kind = f"{'paired ' if paired else ''}{test} tests"
    what = (
        f"{counted(len(design), 'animal')} of {counted(design['session'].nunique(), 'session')}"
        if per_animal
        else counted(len(design), "session")
    )
    text = (
        f"Compared {what} in {len(counts)} groups of {by!r} ({sizes}) "
        f"over {counted(len(motifs), 'motif')} with {kind}. {headline(stats, ALPHA)}"
    )
    warnings = stats.attrs.get("warnings") or []
    text += " " + (" ".join(w.rstrip(".") + "." for w in warnings) + " " if warnings else "")
    left_out = design.attrs.get("left_out") or []
    if left_out:
        whose = "Animals (session/animal)" if per_animal else "Sessions"
        text += f"{whose} left out (empty {by!r}): {listed(map(repr, left_out), 10)}. "
    if UNASSIGNED in set(labels["motif"].astype(str)):
        text += "Frames set aside as unassigned are in the tables, not tested. "
    return f"{text}Tables, metadata.json and report.html are in {out}. {CAUTION}"
