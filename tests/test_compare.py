"""Group comparison of a workspace: outputs, curated names, bad inputs, the command line.

The workspace is built by hand from invented labels (no discovery run): two groups of 8 sessions
("001".."008" control, "009".."016" treated) whose bouts draw motifs with fixed shares of time;
the treated group is planted to spend 1.5 times as much time in motif_01 (30% vs 20%). Seed 11.
"""

from __future__ import annotations

import html
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps
from statsmodels.stats.multitest import multipletests

from ethoscribe.cli import main
from ethoscribe.curation import Curation
from ethoscribe.errors import InputError, InputWarning, WorkspaceError
from ethoscribe.report import CAUTION as REPORT_CAUTION
from ethoscribe.stats import COMPARISON_COLUMNS
from ethoscribe.workspace import Workspace, compare, write_ethogram_report
from ethoscribe.workspace.folder import CAUTION, append_journal
from ethoscribe.workspace.report_sections import shown_tests

FPS = 10.0
PLANNED = "time_budget:digging,bout_rate:digging"
N_FRAMES = 1500
SEED = 11
SHARES = {"control": (0.2, 0.4, 0.4), "treated": (0.3, 0.35, 0.35)}  # motif_01 planted +50%
GROUP_OF = {f"{i:03d}": ("control" if i <= 8 else "treated") for i in range(1, 17)}
REQUIRED = (
    "metric", "motif", "group_a", "group_b", "n_a", "n_b", "mean_a", "mean_b", "effect_size",
    "ci_low", "ci_high", "p_value", "q_value",
)  # fmt: skip
OUTPUTS = (
    "group_stats.csv", "group_stats.parquet", "session_metrics.csv", "bouts.csv",
    "bouts.parquet", "time_budget.csv", "time_budget.parquet", "transitions.csv",
    "transitions.parquet", "metadata.json", "report.html",
)  # fmt: skip


def _session_labels(session: str, rng: np.random.Generator) -> pd.DataFrame:
    """Bouts of 5-14 frames whose motif is drawn with the group's shares; 20 invalid frames."""
    lengths = rng.integers(5, 15, size=N_FRAMES // 5)
    states = rng.choice(3, size=len(lengths), p=SHARES[GROUP_OF[session]])
    state = np.repeat(states, lengths)[:N_FRAMES]
    state[700:720] = -1
    frame = np.arange(N_FRAMES)
    return pd.DataFrame(
        {
            "session": session,
            "animal": "animal_1",
            "frame": frame,
            "time_s": frame / FPS,
            "state": state,
            "motif": np.where(state >= 0, [f"motif_{s + 1:02d}" for s in state], ""),
            "probability": np.where(state >= 0, 0.9, np.nan),
        }
    )


def make_workspace(folder: Path) -> Path:
    """Write a minimal workspace folder by hand (invented data, see the module docstring)."""
    folder.mkdir(parents=True)
    rng = np.random.default_rng(SEED)
    labels = pd.concat([_session_labels(s, rng) for s in GROUP_OF], ignore_index=True)
    labels.to_parquet(folder / "labels.parquet", index=False)
    sessions = pd.DataFrame(
        {
            "session": list(GROUP_OF),
            "source": [f"/data/{s}.parquet" for s in GROUP_OF],
            "fps": FPS,
            "n_frames": N_FRAMES,
            "duration_s": N_FRAMES / FPS,
            "n_animals": 1,
            "units": "mm",
            "group": list(GROUP_OF.values()),
            "subject": [f"vole_{i:02d}" for i in range(16)],
        }
    )
    sessions.to_csv(folder / "sessions.csv", index=False)
    quality = pd.DataFrame(
        [
            {"session": s, "animal": "animal_1", "keypoint": k, "frac_missing_raw": 0.01,
             "frac_low_confidence": 0.02, "frac_jumps": 0.0, "frac_filled": 0.02,
             "frac_missing_after": 0.013}
            for s in GROUP_OF
            for k in ("nose", "tail_base")
        ]
    )  # fmt: skip
    quality.to_csv(folder / "quality.csv", index=False)
    summary = {
        "n_states": 3, "n_sessions": 16, "n_frames": 16 * N_FRAMES, "seed": 0,
        "parameters": {"n_states": 3, "method": "hmm", "random_state": 0}, "stability": None,
    }  # fmt: skip
    (folder / "summary.json").write_text(json.dumps(summary))
    marker = {"kind": "ethoscribe.workspace", "format_version": 1, "created": "2026-01-01"}
    (folder / "workspace.json").write_text(json.dumps(marker))
    return folder


def rename_motif(folder: Path, motif: str, name: str) -> None:
    """Journal a rename the way the workbench does."""
    record = Curation(Workspace(folder).default_names()).rename(motif, name)
    append_journal(folder / "journal.jsonl", record)


def write_manifest(path: Path, groups: dict[str, str], column: str = "group") -> Path:
    pd.DataFrame({"session": list(groups), column: list(groups.values())}).to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def compared(tmp_path_factory):
    """One comparison of the curated workspace (motif_01 renamed 'digging'), shared by tests;
    the time budget and bout rate of digging are the planned comparisons."""
    folder = make_workspace(tmp_path_factory.mktemp("study") / "ws")
    rename_motif(folder, "motif_01", "digging")
    out = folder.parent / "comparison"
    summary = compare(folder, out, seed=3, planned=PLANNED)
    return folder, out, summary


def test_compare_writes_every_output(compared):
    _, out, summary = compared
    assert sorted(p.name for p in out.iterdir()) == sorted(OUTPUTS)
    stats = pd.read_csv(out / "group_stats.csv")
    assert set(REQUIRED) <= set(stats.columns)
    assert list(stats.columns[: len(COMPARISON_COLUMNS)]) == list(COMPARISON_COLUMNS)
    assert len(pd.read_parquet(out / "group_stats.parquet")) == len(stats)
    assert summary.endswith(CAUTION)
    assert "16 sessions in 2 groups" in summary and str(out) in summary


def test_planted_time_budget_difference_is_found(compared):
    _, out, _ = compared
    stats = pd.read_csv(out / "group_stats.csv")
    row = stats[(stats["metric"] == "time_budget") & (stats["motif"] == "digging")].iloc[0]
    assert row["q_value"] < 0.05  # recovery of the planted +50% (invented data)
    assert row["analysis"] == "planned" and row["correction"] == "Holm over 2 planned tests"
    assert (row["group_a"], row["group_b"]) == ("control", "treated")
    assert row["mean_b"] / row["mean_a"] == pytest.approx(1.5, abs=0.2)


def test_p_and_q_values_match_reference_libraries(compared):
    _, out, _ = compared
    stats = pd.read_parquet(out / "group_stats.parquet")  # full precision (the CSV is rounded)
    metrics = pd.read_csv(out / "session_metrics.csv", dtype={"session": str})
    budget = metrics[(metrics["metric"] == "time_budget") & (metrics["motif"] == "digging")]
    a = budget.loc[budget["group"] == "control", "value"].to_numpy()
    b = budget.loc[budget["group"] == "treated", "value"].to_numpy()
    ref = sps.permutation_test(
        (a, b), lambda x, y: x.mean() - y.mean(), n_resamples=np.inf, vectorized=False
    )
    row = stats[(stats["metric"] == "time_budget") & (stats["motif"] == "digging")].iloc[0]
    assert row["p_value"] == pytest.approx(ref.pvalue)  # scipy.stats.permutation_test, exact
    planned = stats[stats["analysis"] == "planned"]
    assert len(planned) == 2 and list(planned.index) == [0, 1]  # planned rows come first
    holm = multipletests(planned["p_value"], method="holm")[1]
    np.testing.assert_allclose(planned["q_value"], holm)  # statsmodels multipletests, Holm
    explore = stats[(stats["analysis"] == "exploratory") & stats["testable"]]
    families = {"time_budget", "bout_rate", "bout_duration", "transitions"}
    assert set(explore["family"]) == families
    for family, rows in explore.groupby("family"):
        bh = multipletests(rows["p_value"], method="fdr_bh")[1]
        # statsmodels multipletests: Benjamini-Hochberg within each family on its own
        np.testing.assert_allclose(rows["q_value"], bh, err_msg=family)
        assert (
            rows["correction"] == f"Benjamini-Hochberg within {family} ({len(rows)} tests)"
        ).all()
    untestable = stats[~stats["testable"]]
    assert untestable["p_value"].isna().all() and untestable["q_value"].isna().all()
    assert untestable["note"].astype(str).str.startswith("not testable").all()
    assert not untestable["significant"].any()


def test_curated_names_reach_every_table(compared):
    _, out, _ = compared
    for name in ("group_stats.csv", "bouts.csv", "time_budget.csv", "session_metrics.csv"):
        motifs = set(pd.read_csv(out / name)["motif"])
        assert "digging" in motifs and "motif_01" not in motifs, name
    bouts = pd.read_parquet(out / "bouts.parquet")
    assert set(bouts["group"]) == {"control", "treated"}
    assert set(pd.read_csv(out / "transitions.csv")["from_motif"]) >= {"digging"}


def test_metadata_records_versions_parameters_and_journal(compared):
    _, out, _ = compared
    meta = json.loads((out / "metadata.json").read_text())
    assert {"ethoscribe", "numpy", "scipy"} <= set(meta["versions"])
    assert meta["comparison"]["by"] == "group" and meta["comparison"]["seed"] == 3
    assert meta["seeds"] == {"comparison": 3, "discovery": 0}
    assert meta["workspace_parameters"]["method"] == "hmm"
    assert meta["journal"]["n_edits"] == 1
    assert meta["journal"]["names"] == {"0": "digging", "1": "motif_02", "2": "motif_03"}
    assert meta["groups"]["control"] == [f"{i:03d}" for i in range(1, 9)]


def test_report_opens_offline_with_figures_and_caution(compared):
    _, out, _ = compared
    page = (out / "report.html").read_text()
    assert html.escape(REPORT_CAUTION) in page
    assert "plotly-graph-div" in page and "Traceback" not in page
    assert "<script src=" not in page  # plotly.js is embedded, nothing is fetched
    for title in ("Data quality", "The model&#x27;s choices", "Ethogram", "Time budgets"):
        assert title in page
    assert "Bout durations" in page and "Transitions" in page and "Group differences" in page
    # the group differences come first, planned comparisons before the exploratory families
    assert page.index("Group differences") < page.index("Data quality")
    assert page.index("Planned comparisons (confirmatory)") < page.index("Exploratory tests")
    assert "How the tests were corrected" in page
    assert "<pre>" not in page and "href='metadata.json'" in page  # parameters as a table
    assert (out / "report.html").stat().st_size < 2e6


def test_groups_from_a_manifest_with_another_column(tmp_path):
    folder = make_workspace(tmp_path / "ws")
    manifest = write_manifest(tmp_path / "m.csv", GROUP_OF, column="housing")
    summary = compare(folder, tmp_path / "out", manifest=manifest, by="housing", test="rank")
    stats = pd.read_csv(tmp_path / "out" / "group_stats.csv")
    assert set(stats["test"]) <= {"mann-whitney u"}
    assert "housing" in pd.read_csv(tmp_path / "out" / "bouts.csv").columns
    assert "groups of 'housing'" in summary


def test_subjects_are_the_unit_and_an_empty_subject_is_the_session(tmp_path):
    # Sessions of one subject in one group are one value; a session whose subject is left
    # empty in the manifest is its own (not one subject with the other empty ones).
    folder = make_workspace(tmp_path / "ws")
    table = pd.DataFrame({"session": list(GROUP_OF), "group": list(GROUP_OF.values())})
    table["subject"] = [f"vole_{i // 2}" for i in range(16)]  # two sessions per vole
    table.loc[[0, 1, 2, 3], "subject"] = ""
    table.to_csv(tmp_path / "m.csv", index=False)
    summary = compare(folder, tmp_path / "out", manifest=tmp_path / "m.csv")
    stats = pd.read_csv(tmp_path / "out" / "group_stats.csv")
    groups = table.assign(unit=table["subject"].where(table["subject"] != "", table["session"]))
    sizes = groups.groupby("group")["unit"].nunique()
    assert (stats["n_a"] == sizes[stats["group_a"]].to_numpy()).all()
    assert (stats["n_b"] == sizes[stats["group_b"]].to_numpy()).all()
    assert "recordings" in summary and "subjects: each subject's values are averaged" in summary


def test_paired_design_matches_subjects(tmp_path):
    folder = make_workspace(tmp_path / "ws")
    table = pd.DataFrame({"session": list(GROUP_OF), "condition": list(GROUP_OF.values())})
    table["subject"] = [f"vole_{i % 8}" for i in range(16)]  # each vole in both conditions
    table.to_csv(tmp_path / "paired.csv", index=False)
    compare(folder, tmp_path / "out", manifest=tmp_path / "paired.csv", by="condition", paired=True)
    stats = pd.read_csv(tmp_path / "out" / "group_stats.csv")
    assert stats["test"].str.startswith("paired permutation").all()
    assert (stats["n_a"] == 8).all()


def _bad_manifest(tmp_path: Path, case: str) -> tuple[dict, str]:
    groups = dict(GROUP_OF)
    if case == "no group column":
        return {"manifest": write_manifest(tmp_path / "m.csv", groups, "housing")}, "columns found"
    if case == "group of one":
        groups["001"] = "alone"
        return {"manifest": write_manifest(tmp_path / "m.csv", groups)}, "single session"
    if case == "session missing from manifest":
        del groups["005"]
        expected = r"missing from it: '005'.*sessions\.csv.*keep its row with the group empty"
        return {"manifest": write_manifest(tmp_path / "m.csv", groups)}, expected
    if case == "session missing from workspace":
        groups["099"] = "control"
        return {"manifest": write_manifest(tmp_path / "m.csv", groups)}, "lacks: '099'"
    if case == "one group":
        groups = dict.fromkeys(groups, "control")
        return {"manifest": write_manifest(tmp_path / "m.csv", groups)}, "at least two groups"
    if case == "unknown by":
        return {"by": "genotype"}, "no grouping column 'genotype'"
    if case == "paired without subject":
        m = write_manifest(tmp_path / "m.csv", groups)
        return {"manifest": m, "paired": True}, "no 'subject' column"
    if case == "bad test":
        return {"test": "t-test"}, "test must be one of"
    raise AssertionError(case)


@pytest.mark.parametrize(
    "case",
    [
        "no group column", "group of one", "session missing from manifest",
        "session missing from workspace", "one group", "unknown by", "paired without subject",
        "bad test",
    ],
)  # fmt: skip
def test_bad_inputs_raise_clearly_and_write_nothing(tmp_path, case):
    folder = make_workspace(tmp_path / "ws")
    kwargs, message = _bad_manifest(tmp_path, case)
    out = tmp_path / "out"
    with pytest.raises(InputError, match=message):
        compare(folder, out, **kwargs)
    assert not out.exists()


def test_existing_output_folder_is_left_alone_on_bad_input(tmp_path):
    folder = make_workspace(tmp_path / "ws")
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    # A folder of the user's own files is refused before anything is read or written.
    with pytest.raises(InputError, match=r"holds files ethoscribe did not write \(notes.txt\)"):
        compare(folder, out, by="genotype")
    assert [p.name for p in out.iterdir()] == ["notes.txt"]
    (out / "notes.txt").unlink()
    with pytest.raises(InputError, match="genotype"):
        compare(folder, out, by="genotype")
    assert list(out.iterdir()) == []
    with pytest.raises(InputError, match="folder of its own"):
        compare(folder, folder)
    with pytest.raises(WorkspaceError, match="not an ethoscribe workspace"):
        compare(tmp_path / "elsewhere", out)


def test_ethogram_report_without_groups(tmp_path):
    folder = make_workspace(tmp_path / "ws")
    rename_motif(folder, "motif_02", "grooming")
    path = write_ethogram_report(Workspace(folder), folder / "report.html")
    page = path.read_text()
    assert "grooming" in page and "plotly-graph-div" in page
    assert html.escape(REPORT_CAUTION) in page and "Traceback" not in page
    assert "Group differences" not in page


def test_command_line_compare(tmp_path, capsys):
    folder = make_workspace(tmp_path / "ws")
    manifest = write_manifest(tmp_path / "m.csv", GROUP_OF)
    args = ["compare", str(folder), "--out", str(tmp_path / "out"), "--manifest", str(manifest)]
    assert main(args) == 0
    printed = capsys.readouterr().out
    assert printed.startswith("Compared 16 sessions") and CAUTION in printed
    assert "No planned comparisons were given (--primary)" in printed
    assert (tmp_path / "out" / "report.html").is_file()
    rename_motif(folder, "motif_01", "digging")
    args = [*args[:2], "--out", str(tmp_path / "out2"), "--primary", PLANNED]
    assert main(args) == 0
    printed = capsys.readouterr().out
    assert "Planned (confirmatory, Holm over 2 tests): time_budget of 'digging'" in printed
    assert "Exploratory (Benjamini-Hochberg within each family" in printed


def test_planned_comparison_names_are_checked(tmp_path, capsys):
    folder = make_workspace(tmp_path / "ws")
    with pytest.raises(InputError, match=r"no motif 'digging'.*motif_01.*after curation"):
        compare(folder, tmp_path / "out", planned="time_budget:digging")
    with pytest.raises(InputError, match="not METRIC:MOTIF"):
        compare(folder, tmp_path / "out", planned="digging")
    with pytest.raises(InputError, match="no metric 'speed'"):
        compare(folder, tmp_path / "out", planned="speed:motif_01")
    assert not (tmp_path / "out").exists()
    args = ["compare", str(folder), "--out", str(tmp_path / "out"), "--primary", "x:y"]
    assert main(args) == 2
    assert "no metric 'x'" in capsys.readouterr().err


def test_command_line_reports_a_missing_group_column(tmp_path, capsys):
    folder = make_workspace(tmp_path / "ws")
    manifest = write_manifest(tmp_path / "m.csv", GROUP_OF, column="housing")
    args = ["compare", str(folder), "--out", str(tmp_path / "out"), "--manifest", str(manifest)]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert "ethoscribe compare: error:" in err and "no grouping column 'group'" in err
    assert "housing" in err and "Traceback" not in err
    assert "pass --by COLUMN" in err and "by=" not in err
    assert not (tmp_path / "out").exists()


def test_command_line_names_each_option_once_for_a_missing_group_column(tmp_path, capsys):
    # No manifest: the workspace's own sessions table has no such column; the fix names
    # --by and --manifest once each, with no Python argument names left in the message.
    folder = make_workspace(tmp_path / "ws")
    args = ["compare", str(folder), "--out", str(tmp_path / "out"), "--by", "housing"]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert "no grouping column 'housing'" in err and "Traceback" not in err
    assert err.count("--manifest") == 1 and err.count("--by") == 1
    assert "by=" not in err and "manifest=" not in err


def test_csv_tables_are_rounded_to_what_the_measurement_supports(compared):
    _, out, _ = compared
    stats_csv = pd.read_csv(out / "group_stats.csv")
    stats = pd.read_parquet(out / "group_stats.parquet")
    # six significant digits in the CSV, full precision in Parquet
    np.testing.assert_allclose(stats_csv["p_value"], stats["p_value"], rtol=5e-6)
    lines = (out / "bouts.csv").read_text().splitlines()
    at = lines[0].split(",").index("duration_s")
    seconds = [row.split(",")[at] for row in lines[1:]]
    assert all(len(s.partition(".")[2]) <= 4 for s in seconds)  # 0.1 ms
    fractions = pd.read_csv(out / "time_budget.csv", dtype=str)["fraction"]
    digits = fractions.str.replace(r"^0\.0*|\.|e.*$", "", regex=True).str.len()
    assert digits.max() <= 6


def test_page_tables_name_the_shared_groups_once():
    # Two groups throughout: the groups and sizes go in the caption, not in two columns that
    # repeat on every row (they pushed the adjusted p off a 1366 px page with long motif names).
    rows = pd.DataFrame(
        {
            "metric": ["time_budget", "transition"],
            "motif": ["a", "a->b"],
            "group_a": "enriched",
            "group_b": "standard",
            "n_a": 8,
            "n_b": 7,
            "mean_a": [0.2, 0.3],
            "mean_b": [0.1, 0.4],
            "effect_size": [1.0, -0.5],
            "ci_low": [0.2, -1.0],
            "ci_high": [2.0, 0.1],
            "p_value": [0.01, 0.2],
            "q_value": [0.02, 0.2],
        }
    )
    table, shared = shown_tests(rows)
    assert "a vs b" not in table and "n" not in table and "adjusted p" in table
    assert shared == "; every row: a = enriched, b = standard, n = 8 / 7"
    mixed = rows.assign(group_b=["standard", "control"])
    table, shared = shown_tests(mixed)
    assert list(table["a vs b"]) == ["enriched vs standard", "enriched vs control"]
    assert shared == ""


def test_table_headers_may_break_after_underscores():
    # Motif names as a transition matrix's columns: the header may wrap after "_" (<wbr>, not
    # in the copied text); the cells keep their names whole.
    from ethoscribe.report import _table_html

    page = _table_html("t", pd.DataFrame({"from_motif": ["walking_along_the_wall"], "a_b": [1]}))
    assert "<th>from_<wbr>motif</th>" in page and "<th>a_<wbr>b</th>" in page
    assert "<td>walking_along_the_wall</td>" in page


def test_sessions_with_an_empty_group_are_left_out_and_named(tmp_path):
    """A manifest whose group cell is empty for some sessions (an animal of unknown group, or
    one the scientist excludes): compare refused the whole study ('fill it in') and a manifest
    without those rows was refused too ('missing from it'), so no comparison was possible. Now
    they are left out, named in a warning, in the summary and in metadata.json."""
    folder = make_workspace(tmp_path / "ws")
    groups = dict(GROUP_OF)
    groups["003"] = groups["012"] = ""
    manifest = write_manifest(tmp_path / "m.csv", groups)
    with pytest.warns(InputWarning, match=r"'003', '012'.*empty 'group'.*left out"):
        summary = compare(folder, tmp_path / "out", manifest=manifest)
    assert "left out" in summary and "'003'" in summary
    stats = pd.read_csv(tmp_path / "out" / "group_stats.csv")
    budget = stats[stats["metric"] == "time_budget"]
    assert (budget["n_a"] == 7).all() and (budget["n_b"] == 7).all()
    metrics = pd.read_csv(tmp_path / "out" / "session_metrics.csv", dtype={"session": str})
    assert not {"003", "012"} & set(metrics["session"])
    meta = json.loads((tmp_path / "out" / "metadata.json").read_text())
    assert meta["left_out"] == ["003", "012"]


def test_frames_set_aside_are_described_not_tested(tmp_path):
    """A motif set aside as unassigned is no behaviour: it was tested (time budget, bout rate,
    durations, transitions to and from it) and counted in the Benjamini-Hochberg families
    beside the motifs. Now its rows stay in the tables and leave the tests."""
    folder = make_workspace(tmp_path / "ws")
    record = Curation(Workspace(folder).default_names()).unassign("motif_03")
    append_journal(folder / "journal.jsonl", record)
    summary = compare(folder, tmp_path / "out", seed=3)
    stats = pd.read_csv(tmp_path / "out" / "group_stats.csv")
    assert not stats["motif"].str.contains("unassigned").any()
    assert set(stats.loc[stats["metric"] == "time_budget", "motif"]) == {"motif_01", "motif_02"}
    metrics = pd.read_csv(tmp_path / "out" / "session_metrics.csv")
    assert (metrics["motif"] == "unassigned").any()  # described
    assert "over 2 motifs" in summary and "unassigned are in the tables, not tested" in summary
    meta = json.loads((tmp_path / "out" / "metadata.json").read_text())
    assert meta["comparison"]["not_tested"] == ["unassigned"]
    # The families are corrected over the tested rows only: statsmodels multipletests,
    # Benjamini-Hochberg over each family's p values, gives the q values written.
    full = pd.read_parquet(tmp_path / "out" / "group_stats.parquet")  # full precision
    for family, rows in full[full["testable"]].groupby("family"):
        q = multipletests(rows["p_value"], method="fdr_bh")[1]
        np.testing.assert_allclose(rows["q_value"], q, err_msg=family)


def test_animals_of_one_session_in_different_groups(tmp_path, capsys):
    # Two animals per arena, one of each genotype: a manifest row per animal sets its group;
    # each animal is a subject of its own. The time budgets' test against scipy's exact
    # permutation test of the per-animal budgets (counted here with pandas).
    folder = make_workspace(tmp_path / "ws")
    labels = pd.read_parquet(folder / "labels.parquet")
    rng = np.random.default_rng(11)
    other = pd.concat([_session_labels(s, rng) for s in GROUP_OF], ignore_index=True)
    labels = pd.concat([labels, other.assign(animal="animal_2")], ignore_index=True)
    labels.to_parquet(folder / "labels.parquet", index=False)
    rows = [
        (s, a, "ko" if a == "animal_1" else "wt")
        for s in GROUP_OF
        for a in ("animal_1", "animal_2")
    ]
    table = pd.DataFrame(rows, columns=["session", "animal", "genotype"])
    table.loc[1, "genotype"] = ""  # one animal of unknown genotype: left out, named
    table.to_csv(tmp_path / "animals.csv", index=False)
    with pytest.warns(
        InputWarning, match=r"animals \(session/animal\) '001/animal_2' have an empty"
    ):
        summary = compare(
            folder, tmp_path / "out", manifest=tmp_path / "animals.csv", by="genotype"
        )
    assert "Compared 31 animals of 16 sessions" in summary and "(ko: 16, wt: 15)" in summary
    stats = pd.read_csv(tmp_path / "out" / "group_stats.csv")
    row = stats[(stats["metric"] == "time_budget") & (stats["motif"] == "motif_01")].iloc[0]
    assert (row["n_a"], row["n_b"]) == (16, 15)
    valid = labels[labels["state"] >= 0].assign(key=lambda t: t["session"] + "/" + t["animal"])
    share = valid.groupby("key")["motif"].value_counts(normalize=True).unstack(fill_value=0)
    ko = share.loc[[f"{s}/animal_1" for s in GROUP_OF], "motif_01"].to_numpy()
    wt = share.loc[[f"{s}/animal_2" for s in list(GROUP_OF)[1:]], "motif_01"].to_numpy()
    ref = sps.permutation_test(
        (ko, wt), lambda x, y, axis: np.mean(x, axis=axis) - np.mean(y, axis=axis),
        n_resamples=20000, random_state=0,
    )  # fmt: skip
    assert abs(row["p_value"] - ref.pvalue) < 0.01  # scipy (Monte Carlo above 10,000 splits)
    budgets = pd.read_csv(tmp_path / "out" / "time_budget.csv")
    assert set(budgets.groupby("animal")["genotype"].unique().map(tuple)) == {("ko",), ("wt",)}
    # a column of one's own named 'animal' in sessions.csv (from discover's manifest) is not
    # a per-animal design: compare without a manifest still groups sessions
    sessions = pd.read_csv(folder / "sessions.csv", dtype=str).assign(animal="animal_1")
    sessions.to_csv(folder / "sessions.csv", index=False)
    assert "Compared 16 sessions" in compare(folder, tmp_path / "by_session")
    # without the animal column, a repeated session is refused with the way to give animals
    table.drop(columns="animal").to_csv(tmp_path / "no_animals.csv", index=False)
    with pytest.raises(InputError, match="with an 'animal' column"):
        compare(folder, tmp_path / "out2", manifest=tmp_path / "no_animals.csv", by="genotype")
