"""Ethogram tables: bouts, round trip, time budgets, durations, survival, transitions, figures.

References outside the project: a plain ``itertools.groupby`` run-length encoder, hand-worked
examples written out below, ``statsmodels`` Kaplan-Meier, ``scipy.stats.entropy`` and the
two-state entropy rate of Cover & Thomas. Random tables are seeded (seed printed in the name).
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats as sps

from ethoscribe.errors import InputError
from ethoscribe.ethogram import (
    BOUT_COLUMNS,
    bout_rate,
    bout_table,
    duration_summary,
    labels_from_bouts,
    survival_curve,
    time_budget,
    transition_entropy,
    transition_matrix,
    transition_table,
)
from ethoscribe.plots.ethogram import (
    duration_figure,
    ethogram_raster,
    motif_colours,
    time_budget_figure,
    transition_diagram,
    transition_heatmap,
)

FPS = 10.0


def make_labels(states, session="s1", animal="a", frames=None, fps=FPS) -> pd.DataFrame:
    """A label table from a state sequence (-1 = invalid); motif_NN names states one to one."""
    states = np.asarray(states, dtype=np.int64)
    frames = np.arange(len(states)) if frames is None else np.asarray(frames)
    return pd.DataFrame(
        {
            "session": session,
            "animal": animal,
            "frame": frames,
            "time_s": frames / fps,
            "state": states,
            "motif": [f"motif_{s + 1:02d}" if s >= 0 else "" for s in states],
            "probability": np.where(states >= 0, 0.5 + 0.05 * (frames % 10), np.nan),
        }
    )


def random_labels(seed: int, n_sessions=3, n_animals=2, n_frames=300) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    parts = []
    for s, a in itertools.product(range(n_sessions), range(n_animals)):
        runs = rng.integers(1, 12, size=n_frames)
        states = np.repeat(rng.integers(-1, 4, size=n_frames), runs)[:n_frames]
        frames = np.sort(rng.choice(n_frames + 20, size=n_frames, replace=False))  # gaps
        parts.append(make_labels(states, f"s{s}", f"a{a}", frames))
    return pd.concat(parts, ignore_index=True)


def groupby_bouts(labels: pd.DataFrame) -> list[tuple]:
    """Reference encoder with plain Python: split at gaps, then itertools.groupby on motif."""
    out = []
    for (session, animal), rows in labels.groupby(["session", "animal"], sort=True):
        rows = rows.sort_values("frame")
        records = list(zip(rows["frame"], rows["state"], rows["motif"], strict=True))
        segment, previous, keyed = 0, None, []
        for frame, state, motif in records:
            if previous is not None and frame != previous + 1:
                segment += 1
            keyed.append((segment, frame, state, motif))
            previous = frame
        runs = [list(g) for _, g in itertools.groupby(keyed, key=lambda r: (r[0], r[3], r[2] >= 0))]
        for i, run in enumerate(runs):
            if run[0][2] < 0:
                continue

            def linked(other, edge):
                return other is not None and other[0][2] >= 0 and other[0][0] == edge[0]

            before = runs[i - 1] if i > 0 else None
            after = runs[i + 1] if i + 1 < len(runs) else None
            out.append(
                (
                    session,
                    animal,
                    run[0][3],
                    run[0][1],
                    run[-1][1] + 1,
                    len(run),
                    not linked(before, run[0]),
                    not linked(after, run[-1]),
                )
            )
    return out


def test_bouts_match_an_itertools_groupby_reference():
    labels = random_labels(seed=11)
    bouts = bout_table(labels, fps=FPS)
    assert list(bouts.columns) == list(BOUT_COLUMNS)
    cols = [
        "session",
        "animal",
        "motif",
        "start_frame",
        "stop_frame",
        "n_frames",
        "cut_before",
        "cut_after",
    ]
    ours = [tuple(r) for r in bouts[cols].itertuples(index=False)]
    # reference: plain itertools.groupby run-length encoding written in this test
    assert ours == groupby_bouts(labels)
    np.testing.assert_allclose(bouts["duration_s"], bouts["n_frames"] / FPS)


def test_bout_table_hand_example_cuts_at_gaps_and_edges():
    # frames 0-1 m1 | 2 invalid | 3-4 m2 | 5 m1 | (frame 6 missing) | 7-8 m3
    labels = make_labels([0, 0, -1, 1, 1, 0, 2, 2], frames=[0, 1, 2, 3, 4, 5, 7, 8])
    bouts = bout_table(labels)  # fps inferred from time_s / frame
    assert bouts["motif"].tolist() == ["motif_01", "motif_02", "motif_01", "motif_03"]
    assert bouts["start_frame"].tolist() == [0, 3, 5, 7]
    assert bouts["stop_frame"].tolist() == [2, 5, 6, 9]
    assert bouts["cut_before"].tolist() == [True, True, False, True]
    assert bouts["cut_after"].tolist() == [True, False, True, True]
    np.testing.assert_allclose(bouts["duration_s"], [0.2, 0.2, 0.1, 0.2])
    np.testing.assert_allclose(bouts["mean_probability"], [0.525, 0.675, 0.75, 0.875])


def test_the_bout_duration_caption_says_what_the_figure_and_the_table_each_count():
    # The report's caption said the durations left cut bouts out and, in brackets, that the
    # table counts every bout; a reader took the table's means for those of uncut bouts.
    # m1 (cut at the start) | m2 | m1 | m2 (cut at the end), at 10 fps.
    from ethoscribe.workspace.report_sections import ethogram_sections

    labels = make_labels([0] * 3 + [1] * 4 + [0] * 5 + [1] * 2)
    bouts = bout_table(labels)
    assert (bouts["cut_before"] | bouts["cut_after"]).tolist() == [True, False, False, True]
    (section,) = [x for x in ethogram_sections(bouts, time_budget(labels)) if
                  x.title == "Bout durations"]  # fmt: skip
    assert section.text.startswith("The figure shows the bouts not cut by a gap or a recording")
    assert "The table counts every bout, cut ones included" in section.text
    (figure,) = section.figures
    medians = {t.name: t.median[0] for t in figure.data}
    assert medians == pytest.approx({"motif_01": 0.5, "motif_02": 0.4})  # the uncut bouts
    ((_, table),) = section.tables
    assert table["count"].tolist() == [2, 2]
    np.testing.assert_allclose(table["mean_s"], [np.mean([0.3, 0.5]), np.mean([0.4, 0.2])])


def test_merged_states_form_one_bout_and_row_order_does_not_matter():
    labels = make_labels([0, 1, 1, 2])
    labels["motif"] = ["walk", "walk", "walk", "rest"]  # states 0 and 1 share a name
    bouts = bout_table(labels, fps=FPS)
    assert bouts["n_frames"].tolist() == [3, 1] and bouts["state"].tolist() == [0, 2]
    many = random_labels(seed=3)
    shuffled = many.sample(frac=1.0, random_state=3)
    pd.testing.assert_frame_equal(bout_table(shuffled, fps=FPS), bout_table(many, fps=FPS))


@settings(max_examples=40, deadline=None)
@given(
    st.lists(st.lists(st.integers(-1, 3), min_size=1, max_size=40), min_size=1, max_size=3),
    st.floats(5, 120),
)
def test_round_trip_labels_bouts_labels(sequences, fps):
    labels = pd.concat(
        [make_labels(s, session=f"s{i}", fps=fps) for i, s in enumerate(sequences)],
        ignore_index=True,
    )
    sizes = {f"s{i}": len(s) for i, s in enumerate(sequences)}
    back = labels_from_bouts(bout_table(labels, fps=fps), sizes)
    if not (labels["state"] >= 0).any():
        return
    kept = labels[labels["session"].isin(back["session"].unique())].reset_index(drop=True)
    for col in ("session", "animal", "frame", "state", "motif"):
        assert back[col].astype(str).tolist() == kept[col].astype(str).tolist()
    np.testing.assert_allclose(back["time_s"], kept["time_s"], atol=1e-9)


@settings(max_examples=30, deadline=None)
@given(st.lists(st.integers(-1, 4), min_size=2, max_size=60), st.integers(0, 2**16))
def test_time_budgets_sum_to_one_and_transition_rows_sum_to_one(states, seed):
    rng = np.random.default_rng(seed)
    labels = pd.concat([make_labels(states, "s1"), make_labels(rng.permutation(states), "s2")])
    if not (labels["state"] >= 0).any():
        assert bout_table(labels).empty and time_budget(labels).empty
        return
    budget = time_budget(labels, by=("session",))
    sums = budget.groupby("session")["fraction"].sum().dropna()
    np.testing.assert_allclose(sums, 1.0)
    pooled = time_budget(labels, by=())
    np.testing.assert_allclose(pooled["fraction"].sum(), 1.0)
    trans = transition_table(bout_table(labels), include_zeros=True)
    if len(trans):
        np.testing.assert_allclose(trans.groupby(["session", "from_motif"])["probability"].sum(), 1)
        assert (trans["from_motif"] != trans["to_motif"]).all()


def test_transitions_hand_worked_example():
    # Bouts in order: A B A C | gap | C A B  (C|C across the gap is not a transition).
    # Linked pairs: A->B, B->A, A->C, C->A, A->B  => from A: B 2, C 1; from B: A 1; from C: A 1
    seq = [0, 0, 1, 0, 2, 2, -1, 2, 0, 0, 1]
    labels = make_labels(seq)
    labels["motif"] = labels["state"].map({0: "A", 1: "B", 2: "C", -1: ""})
    table = transition_table(bout_table(labels, fps=FPS))
    got = {(r.from_motif, r.to_motif): (r.count, r.probability) for r in table.itertuples()}
    expected = {
        ("A", "B"): (2, 2 / 3),
        ("A", "C"): (1, 1 / 3),
        ("B", "A"): (1, 1.0),
        ("C", "A"): (1, 1.0),
    }
    assert got.keys() == expected.keys()
    for key, (count, prob) in expected.items():
        assert got[key][0] == count and got[key][1] == pytest.approx(prob)
    mat = transition_matrix(bout_table(labels, fps=FPS))
    np.testing.assert_allclose(mat.to_numpy(), [[0, 2 / 3, 1 / 3], [1, 0, 0], [1, 0, 0]])
    np.testing.assert_array_equal(
        transition_matrix(table, counts=True), [[0, 2, 1], [1, 0, 0], [1, 0, 0]]
    )


def test_transition_entropy_against_scipy_and_cover_thomas():
    p = pd.DataFrame(
        [[0, 0.5, 0.5], [0.9, 0, 0.1], [0.2, 0.8, 0]], index=list("xyz"), columns=list("xyz")
    )
    result = transition_entropy(p)
    # per-row entropy in bits vs scipy.stats.entropy(base=2)
    np.testing.assert_allclose(result.row_bits, [sps.entropy(r, base=2) for r in p.to_numpy()])
    # stationary distribution vs numpy's left eigenvector for eigenvalue 1
    w, v = np.linalg.eig(p.to_numpy().T)
    pi = np.real(v[:, np.argmin(np.abs(w - 1))])
    np.testing.assert_allclose(result.stationary, pi / pi.sum(), atol=1e-10)
    # Two-state chain: H = (b H(a) + a H(b)) / (a + b) (Cover & Thomas, Elements of Information
    # Theory, eq. 4.28, from memory), here a = 0.2, b = 0.4.
    a, b = 0.2, 0.4
    two = pd.DataFrame([[1 - a, a], [b, 1 - b]], index=["u", "v"], columns=["u", "v"])
    h = lambda q: -q * np.log2(q) - (1 - q) * np.log2(1 - q)  # noqa: E731
    assert transition_entropy(two).rate_bits == pytest.approx((b * h(a) + a * h(b)) / (a + b))


def test_durations_rates_and_survival_against_statsmodels():
    labels = random_labels(seed=5, n_sessions=2, n_animals=1, n_frames=600)
    bouts = bout_table(labels, fps=FPS)
    summary = duration_summary(bouts, by=("session",))
    one = bouts[(bouts["session"] == "s0") & (bouts["motif"] == "motif_02")]["duration_s"]
    row = summary[(summary["session"] == "s0") & (summary["motif"] == "motif_02")].iloc[0]
    # numpy's default (linear) percentiles are the reference for the quartiles
    np.testing.assert_allclose(
        [row.q25_s, row.median_s, row.q75_s], np.percentile(one, [25, 50, 75])
    )
    assert row["count"] == len(one) and row.total_s == pytest.approx(one.sum())
    rate = bout_rate(bouts, labels, by=("session",), fps=FPS)
    valid_min = (labels[labels["session"] == "s0"]["state"] >= 0).sum() / FPS / 60
    r = rate[(rate["session"] == "s0") & (rate["motif"] == "motif_02")].iloc[0]
    assert r.bouts_per_min == pytest.approx(len(one) / valid_min)
    from statsmodels.duration.survfunc import SurvfuncRight

    curve = survival_curve(bouts, "motif_02")
    rows = bouts[bouts["motif"] == "motif_02"]
    ended = ~(rows["cut_before"] | rows["cut_after"])
    ref = SurvfuncRight(rows["duration_s"].to_numpy(), ended.to_numpy().astype(int))
    at = curve.set_index("time_s").loc[ref.surv_times]
    # statsmodels SurvfuncRight: Kaplan-Meier estimate and Greenwood standard errors
    np.testing.assert_allclose(at["survival"], ref.surv_prob)
    np.testing.assert_allclose(at["std_error"], ref.surv_prob_se)
    plain = survival_curve(bouts, "motif_02", censor_cut=False)
    ecdf = (rows["duration_s"].to_numpy()[:, None] > plain["time_s"].to_numpy()).mean(axis=0)
    np.testing.assert_allclose(plain["survival"], ecdf)  # empirical survival, by definition


def test_groups_pool_time_and_clear_errors():
    labels = pd.concat([make_labels([0, 0, 1], "s1"), make_labels([1, 1, 1, 1, 0], "s2")])
    budget = time_budget(labels, by=("group",), groups={"s1": "g", "s2": "g"})
    np.testing.assert_allclose(budget["fraction"], [3 / 8, 5 / 8])
    with pytest.raises(InputError, match="no group given for session"):
        time_budget(labels, by=("group",), groups={"s1": "g"})
    with pytest.raises(InputError, match="missing column"):
        bout_table(labels.drop(columns="motif"))
    with pytest.raises(InputError, match="appears twice"):
        bout_table(pd.concat([labels, labels.iloc[:1]]))
    with pytest.raises(InputError, match="empty motif name"):
        bout_table(labels.assign(motif=""))
    with pytest.raises(InputError, match="cannot infer the frame rate"):
        bout_table(make_labels([0]))
    with pytest.raises(InputError, match="no frame rate given"):
        bout_table(labels, fps={"s1": 30.0})
    with pytest.raises(InputError, match="beyond n_frames_per_session"):
        labels_from_bouts(bout_table(labels), {"s1": 2, "s2": 5})
    with pytest.raises(InputError, match="has no bouts"):
        survival_curve(bout_table(labels), "nothing")


def test_figures_build_and_colours_are_deterministic():
    labels = random_labels(seed=2, n_sessions=2, n_animals=1)
    bouts = bout_table(labels, fps=FPS)
    colours = motif_colours(bouts["motif"])
    assert colours == motif_colours(reversed(bouts["motif"].tolist()))
    assert len(set(colours.values())) == len(colours)
    # black marks the workbench's shown bout, so no motif takes it (a user mistook one for it)
    many = motif_colours([f"m{i:02d}" for i in range(30)])
    assert "#000000" not in many.values() and len(set(many.values())) == 17
    fig = ethogram_raster(bouts)
    assert {t.name for t in fig.data} == set(colours)
    small = ethogram_raster(labels, fps=FPS, max_bars=10, n_bins=50)
    assert sum(len(t.x) for t in small.data) <= 2 * 50 and "resampled" in small.layout.title.text
    budget = time_budget(labels)
    assert len(time_budget_figure(budget, groups={"s0": "a", "s1": "b"}).data) == 2
    assert len(duration_figure(bouts).data) == len(colours)
    mat = transition_matrix(bouts)
    assert transition_heatmap(mat).data[0].z.shape == mat.shape
    diagram = transition_diagram(transition_table(bouts, by=()), time_budget(labels, by=()))
    assert len(diagram.layout.annotations) > 0


# --- a study summarised one session at a time -------------------------------------------------
def _three_sessions() -> pd.DataFrame:
    # Invented labels: s2 never shows motif "c"; s3 has no valid frame at all.
    rng = np.random.default_rng(3)
    parts = []
    for name, motifs in [("s1", "abc"), ("s2", "ab"), ("s3", "")]:
        n = 60
        state = rng.integers(0, len(motifs), n) if motifs else np.full(n, -1)
        state[rng.random(n) < 0.1] = -1
        parts.append(
            pd.DataFrame(
                {
                    "session": name,
                    "animal": "a",
                    "frame": np.arange(n),
                    "time_s": np.arange(n) / 10,
                    "state": state,
                    "motif": [motifs[s] if s >= 0 else "" for s in state],
                    "probability": 1.0,
                }
            )
        )
    return pd.concat(parts, ignore_index=True)


def test_time_budgets_joined_per_session_equal_the_whole_table_budget():
    from ethoscribe.ethogram import time_budgets_joined

    labels = _three_sessions()
    parts = [time_budget(g) for _, g in labels.groupby("session", sort=False)]
    joined = time_budgets_joined(parts, labels[["session", "animal"]])
    pd.testing.assert_frame_equal(joined, time_budget(labels), check_dtype=False)
    # s3 (no valid frame) is listed with zeros and an undefined fraction, as in the whole table.
    assert joined.loc[joined["session"] == "s3", "fraction"].isna().all()


def test_pooled_time_budgets_from_per_session_budgets_equal_the_label_table_ones():
    from ethoscribe.ethogram import pool_time_budgets

    labels = _three_sessions()
    per_session = time_budget(labels)
    groups = {"s1": "x", "s2": "y", "s3": "y"}
    for by, g in [((), None), (("group",), groups)]:
        pd.testing.assert_frame_equal(
            pool_time_budgets(per_session, by=by, groups=g),
            time_budget(labels, by=by, groups=g),
        )
