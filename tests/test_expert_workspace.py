"""Expert coding end to end on trimmed example sessions (simulated animals, their truth as the
"expert"): agreement files equal to an independent computation, learn, label a new cohort."""

from __future__ import annotations

import json
import re
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import linear_sum_assignment
from sklearn.metrics import adjusted_rand_score, normalized_mutual_info_score
from sklearn.metrics.cluster import contingency_matrix

from _example_study import EXAMPLES, trimmed_study
from ethoscribe.cli import main
from ethoscribe.io.bundle import read_bundle
from ethoscribe.workspace import Workspace, discover, expert, label_sessions

SESSIONS = ["session_01", "session_02", "session_09"]
N_FRAMES = 1800  # one minute of each


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    root = tmp_path_factory.mktemp("expert")
    (root / "data").mkdir()
    data = trimmed_study(root / "data", SESSIONS, N_FRAMES)
    ws = discover(
        [], root / "ws", manifest=data / "manifest.csv", states=5, progress=False,
        stability=False, seed=0,
    )  # fmt: skip
    truth = pd.read_parquet(EXAMPLES / "truth" / "frames.parquet")
    truth = truth[truth["session"].isin(SESSIONS) & (truth["frame"] < N_FRAMES)]
    truth = truth.astype({"session": str, "animal": str, "behaviour": str})
    truth.to_csv(root / "truth.csv", index=False)
    coded = truth[truth["session"].isin(SESSIONS[:2])]
    coded.to_csv(root / "coded.csv", index=False)
    return {"root": root, "data": data, "ws": ws, "truth": truth}


def test_agreement_files_equal_an_independent_computation(study):
    out = study["root"] / "agreement"
    main([
        "agreement", str(study["ws"].path), str(study["root"] / "truth.csv"), "--out", str(out),
    ])  # fmt: skip
    record = json.loads((out / "agreement.json").read_text())
    labels = pd.read_csv(
        study["ws"].path / "labels.csv", dtype={"motif": str}, keep_default_na=False
    )
    both = study["truth"].merge(labels, on=["session", "animal", "frame"])
    b = both["behaviour"].to_numpy()
    m = np.where(both["motif"] == "", "(unscored)", both["motif"])
    # reference: scikit-learn adjusted_rand_score / normalized_mutual_info_score
    assert record["ari"] == pytest.approx(adjusted_rand_score(b, m), abs=1e-12)
    assert record["nmi"] == pytest.approx(normalized_mutual_info_score(b, m), abs=1e-12)
    # reference: scipy linear_sum_assignment on the scored motifs' contingency table
    table = contingency_matrix(b, m)
    scored = np.unique(m) != "(unscored)"
    r, c = linear_sum_assignment(table[:, scored], maximize=True)
    assert record["matched_accuracy"] == pytest.approx(table[:, scored][r, c].sum() / len(b))
    assert record["frames_compared"] == len(study["truth"])
    assert record["frames_unscored"] == int((~np.isin(m, np.unique(m)[scored])).sum())
    confusion = pd.read_csv(out / "confusion.csv")
    assert confusion["frames"].sum() == len(b)
    # seconds are written to 4 decimals, as in every CSV of a run (label_table.csv_rounded)
    assert np.allclose(confusion["seconds"], confusion["frames"] / 30.0, rtol=0, atol=5e-5)
    per = pd.read_csv(out / "per_behaviour.csv")
    assert set(per["behaviour"]) == set(b)
    for name in ("confusion.csv", "per_behaviour.csv"):  # no 82.66666666666505 s
        numbers = re.findall(r"-?\d*\.\d+", (out / name).read_text())
        digits = [n.replace("-", "").replace(".", "").lstrip("0") for n in numbers]
        assert max(map(len, digits), default=0) <= 6, name
    assert "plotly" in (out / "report.html").read_text()


def test_learn_then_label_a_new_cohort(study, tmp_path):
    ws: Workspace = study["ws"]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = expert.learn(ws, study["root"] / "coded.csv", max_iter=40)
    # one minute per session: some behaviours have few bouts, and the learner says so
    assert any("coded bouts" in str(w.message) for w in caught)
    assert result.evaluation["coded_sessions"] == SESSIONS[:2]
    assert 0.0 <= result.evaluation["accuracy"] <= 1.0
    assert {"precision", "recall", "f1", "coded_seconds", "coded_bouts"} <= set(
        result.per_behaviour.columns
    )
    meta, arrays = read_bundle(ws.path / "learned" / "classifier")
    assert meta["kind"] == "ethoscribe.BehaviourClassifier"
    assert all(not a.dtype.hasobject for a in arrays.values())
    labels = ws.labels()
    assert {"discovered_motif", "discovered_probability"} <= set(labels.columns)
    assert set(labels["motif"]) - {""} <= set(study["truth"]["behaviour"])
    on_disk = pd.read_csv(ws.path / "labels.csv", keep_default_na=False)
    assert set(on_disk["motif"]) - {""} <= set(study["truth"]["behaviour"])
    bouts = pd.read_csv(ws.path / "bouts.csv")
    assert set(bouts["motif"]) <= set(study["truth"]["behaviour"])
    journal = (ws.path / "learned" / "journal.jsonl").read_text().splitlines()
    assert json.loads(journal[-1])["op"] == "learn"
    suggested = expert.uncertain_bouts(ws, 5)
    assert len(suggested) == 5 and suggested["mean_probability"].is_monotonic_increasing
    # the unseen session: learned labels beat chance by far on it
    truth = study["truth"]
    unseen = truth[truth["session"] == SESSIONS[2]].merge(labels, on=["session", "animal", "frame"])
    assert (unseen["behaviour"] == unseen["motif"]).mean() > 0.6

    new = label_sessions(
        ws.path, [], tmp_path / "cohort", manifest=study["data"] / "manifest.csv", progress=False
    )
    cohort = new.labels()
    # the run's one-line description said '5 motifs' while the tables name the expert's
    n_learned = len(result.evaluation["behaviours"])
    for w in (ws, new):
        assert f"(labels name {n_learned} behaviours learned from an expert's coding)" in (
            w.describe()
        )
    assert set(cohort["motif"]) - {""} <= set(study["truth"]["behaviour"])
    assert "discovered_motif" in cohort.columns
    same = cohort.merge(labels, on=["session", "animal", "frame"], suffixes=("", "_src"))
    assert (same["motif"] == same["motif_src"]).all()  # same classifier, same features
    # a curation edit keeps the learned names in the tables
    motif = str(ws.curation().motifs[0])
    ws.rename_motif(motif, "renamed")
    after = pd.read_csv(ws.path / "labels.csv", keep_default_na=False)
    assert set(after["motif"]) - {""} <= set(study["truth"]["behaviour"])
    assert "renamed" in set(after["discovered_motif"])


def test_learn_command_line_and_bad_coding(study, tmp_path, capsys):
    bad = tmp_path / "bad.csv"
    bad.write_text("session,behaviour,start_s,stop_s\nsession_77,rest,0,1\n")
    assert main(["learn", str(study["ws"].path), str(bad)]) == 2
    assert "row 2: session 'session_77'" in capsys.readouterr().err
    assert main(["agreement", str(study["ws"].path), str(bad), "--out", str(tmp_path / "a")]) == 2
    # --out naming the workspace replaced its ethogram report with the agreement's
    ws_path, truth = study["ws"].path, str(study["root"] / "truth.csv")
    before = (ws_path / "report.html").read_bytes()
    assert main(["agreement", str(ws_path), truth, "--out", str(ws_path)]) == 2
    assert "is an ethoscribe workspace; an agreement goes to a folder of its own" in (
        capsys.readouterr().err
    )
    (tmp_path / "notes").mkdir()
    (tmp_path / "notes" / "report.html").write_text("mine")
    assert main(["agreement", str(ws_path), truth, "--out", str(tmp_path / "notes")]) == 2
    assert "holds files ethoscribe did not write (report.html)" in capsys.readouterr().err
    assert (ws_path / "report.html").read_bytes() == before
    assert (tmp_path / "notes" / "report.html").read_text() == "mine"
    # a behaviour with few coded bouts is warned about once, not again in the summary
    with warnings.catch_warnings():
        warnings.simplefilter("default")  # as a terminal's Python shows them
        assert main(["learn", str(study["ws"].path), str(study["root"] / "coded.csv")]) == 0
    out, err = capsys.readouterr()
    warned = [line for line in (out + err).splitlines() if "warning:" in line]
    assert warned and all(line.startswith("ethoscribe learn: warning:") for line in warned)
    assert len(set(warned)) == len(warned)


def test_workbench_expert_section(study):
    """The study page's expert section (runs after the learning test above, in file order)."""
    from ethoscribe.widgets.expert import N_SUGGESTED, ExpertSection
    from ethoscribe.widgets.state import WorkbenchState

    state = WorkbenchState(study["ws"].path, write_behind=False)
    section = ExpertSection(state)
    section.coding.value = str(study["root"] / "truth.csv")
    section.check_agreement()
    assert "ARI" in section.agreement.children[0].value
    assert (study["ws"].path / "agreement" / "agreement.json").is_file()
    assert "Learned behaviours" in section.learned.value
    assert len(section.pick.options) == N_SUGGESTED
    section.pick.value = 1
    assert "No video" in section.frames.children[0].value
    section.coding.value = str(study["root"] / "missing.csv")
    section.agree_button.click()  # a bad path becomes a message, not a traceback
    assert state.message[0] == "error" and "missing.csv" in state.message[1]


def test_a_behaviour_coded_in_one_session_is_not_scored_as_zero():
    # 'rear' is coded in session a only: held out, a is predicted by a classifier that never
    # saw 'rear', so its recall was reported as 0 (F1 0.00) as if it could not be learned.
    # Now its scores are empty and a warning says why; the others match scikit-learn's
    # precision_recall_fscore_support over the pooled out-of-session predictions.
    from types import SimpleNamespace

    from sklearn.metrics import precision_recall_fscore_support

    feats = [SimpleNamespace(session=s) for s in ("a", "b", "c")]
    y = [
        np.array(["walk"] * 20 + ["rear"] * 10 + [""] * 5 + ["groom"] * 15, dtype=object),
        np.array(["walk"] * 25 + ["groom"] * 25, dtype=object),
        np.array(["groom"] * 10 + ["walk"] * 40, dtype=object),
    ]
    oof = {
        0: np.array(["walk"] * 25 + ["groom"] * 25, dtype=object),
        1: np.array(["walk"] * 20 + ["groom"] * 30, dtype=object),
        2: np.array(["groom"] * 12 + ["walk"] * 36 + ["rear"] * 2, dtype=object),
    }
    classes = np.array(["groom", "rear", "walk"], dtype=object)
    counts = expert._coded_counts(y, [0, 1, 2], classes, 30.0, feats)
    evaluation, per, notes = expert._scores(y, oof, [0, 1, 2], classes, counts, 1, feats)
    per = per.set_index("behaviour")
    assert per.loc["rear", "coded_sessions"] == 1 and per.loc["rear", "sessions"] == "a"
    assert per.loc[["rear"], ["precision", "recall", "f1"]].isna().all(axis=None)
    true = np.concatenate(y)
    pred = np.concatenate([oof[i] for i in range(3)])[true != ""]
    true = true[true != ""]
    p, r, f, _ = precision_recall_fscore_support(
        true.astype(str), pred.astype(str), labels=["groom", "walk"], zero_division=0
    )
    np.testing.assert_allclose(per.loc[["groom", "walk"], "f1"], f)
    np.testing.assert_allclose(per.loc[["groom", "walk"], "recall"], r)
    np.testing.assert_allclose(per.loc[["groom", "walk"], "precision"], p)
    assert evaluation["accuracy"] == pytest.approx(float((true == pred).mean()))
    assert any("'rear' is coded in one session only (a)" in n for n in notes)
    text = expert.describe_learning(expert.LearnResult(evaluation, per.reset_index(), notes), "w")
    assert "rear F1 not scored (one session)" in text
    # --no-evaluation on three coded sessions said 'only one session is coded'
    _, _, skipped = expert._scores(y, None, [0, 1, 2], classes, counts, 1, feats)
    assert not any("only one session" in n for n in skipped)
    _, _, one = expert._scores(y[:1], None, [0], classes, counts, 1, feats[:1])
    assert any("only one session is coded" in n for n in one)


def test_reading_warnings_are_kept_with_the_results(study, tmp_path, capsys):
    # What the reading warned about (names joined by case, sessions left out) went only to
    # the console: the workbench (no console) and the saved records did not say it.
    from ethoscribe.errors import InputWarning
    from ethoscribe.widgets.expert import ExpertSection
    from ethoscribe.widgets.state import WorkbenchState

    coded = pd.read_csv(study["root"] / "coded.csv")
    first = coded["session"] == SESSIONS[0]
    coded.loc[first, "behaviour"] = coded.loc[first, "behaviour"].str.upper()
    extra = coded.iloc[:3].assign(session="session_77")
    path = tmp_path / "coding.csv"
    pd.concat([coded, extra]).to_csv(path, index=False)
    with warnings.catch_warnings():
        warnings.simplefilter("default")
        args = ["agreement", str(study["ws"].path), str(path), "--out", str(tmp_path / "a")]
        assert main(args) == 0
    err = capsys.readouterr().err
    assert err.count("warning:") == 2 and "left out ('session_77'" in err
    record = json.loads((tmp_path / "a" / "agreement.json").read_text())
    assert len(record["reading_warnings"]) == 2
    assert "Read with a warning" in (tmp_path / "a" / "report.html").read_text()
    state = WorkbenchState(study["ws"].path, write_behind=False)
    section = ExpertSection(state)
    section.coding.value = str(path)
    with pytest.warns(InputWarning):
        section.check_agreement()
    assert "session_77" in section.agreement.children[1].value
