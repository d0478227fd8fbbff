"""2-D tracks filmed from above or from the side: read from the tracks, and side views keep
their vertical.

Invented data: the package's simulated fish (``glass_minnow``, 3-D, z up), seeds fixed below,
projected onto its floor (x, y: filmed from above) or onto a wall (x, z: filmed from the side).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from sklearn.metrics import adjusted_rand_score  # reference: scikit-learn

from ethoscribe.errors import InputError, InputWarning
from ethoscribe.features.view_check import (
    MIRROR_MIN,
    SIDE_CONCENTRATION,
    choose_view,
    lift_side_view,
    mirror_evidence,
    resolve_view,
    view_evidence,
)
from ethoscribe.io import from_arrays
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.simulate.session import simulate_session


@pytest.fixture(scope="module")
def fish():
    made = [
        simulate_session("glass_minnow", duration_s=120, fps=50, seed=s, session=f"f{s}")
        for s in (1, 2, 3)
    ]
    return [t for t, _ in made], np.concatenate([truth["state"].to_numpy() for _, truth in made])


def _seen(tracks, axes):
    return [t.replace(coords=np.ascontiguousarray(t.coords[..., list(axes)])) for t in tracks]


def test_axial_concentration_by_hand():
    # a body turning through every direction in equal steps: the doubled angles cancel (0);
    # one fixed direction: 1 (Mardia & Jupp 2000, mean resultant length of axial data)
    turn = np.linspace(0, np.pi, 40, endpoint=False)
    c = np.zeros((40, 2, 2))
    c[:, 1] = np.c_[np.cos(turn), np.sin(turn)]
    assert view_evidence([from_arrays(c, keypoints=["a", "b"], fps=30)])["concentration"] < 1e-9
    fixed = np.zeros((40, 2, 2))
    fixed[:, 1, 1] = 1.0  # along y
    e = view_evidence([from_arrays(fixed, keypoints=["a", "b"], fps=30)])
    assert e["concentration"] == pytest.approx(1.0) and abs(e["angle"]) == pytest.approx(90.0)


def test_axial_concentration_and_angle_equal_scipys_circular_statistics():
    # Two keypoints per frame: every frame equally elongated (weight 1), so the statistic is
    # the plain mean resultant length of the doubled angles: 1 - scipy.stats.circvar, and its
    # direction scipy.stats.circmean halved (reference library: scipy, circular statistics)
    from scipy.stats import circmean, circvar

    rng = np.random.default_rng(5)  # seed 5
    theta = rng.vonmises(np.radians(30.0), 1.5, size=500) / 2  # axial, about 15 degrees
    c = np.zeros((500, 2, 2))
    c[:, 1] = np.c_[np.cos(theta), np.sin(theta)] * rng.uniform(1, 3, size=(500, 1))
    e = view_evidence([from_arrays(c, keypoints=["a", "b"], fps=30)])
    assert e["concentration"] == pytest.approx(1 - circvar(2 * theta), abs=1e-12)
    expected = np.degrees(circmean(2 * theta, high=np.pi, low=-np.pi) / 2)
    assert e["angle"] == pytest.approx(expected, abs=1e-9)


def test_side_and_top_views_are_read_from_the_tracks(fish):
    tracks, _ = fish
    assert choose_view(_seen(tracks, (0, 1)))[0] == "above"
    view, vertical, why = choose_view(_seen(tracks, (0, 2)))
    assert (view, vertical) == ("side", "y") and "concentration" in why
    assert view_evidence(_seen(tracks, (0, 2)))["concentration"] > SIDE_CONCENTRATION
    assert choose_view(_seen(tracks, (2, 0)))[:2] == ("side", "x")  # camera turned a quarter
    assert resolve_view(_seen(tracks, (0, 1)), "side")[:2] == ("side", "y")  # given: kept
    # given "side" with the camera turned a quarter: the vertical still read from the ranges
    assert resolve_view(_seen(tracks, (2, 0)), "side")[:2] == ("side", "x")
    assert resolve_view(tracks, "auto") == ("above", None, "")  # 3-D: not a camera's view
    with pytest.raises(InputError, match="view must be one of"):
        resolve_view(tracks, "front")


def test_a_runway_filmed_from_above_is_not_taken_for_a_side_view(fish):
    # Facing along one image axis only, a body filmed from above looks like one seen from the
    # side (concentration ~1, the path along x); turned half round, its lateral keypoints
    # cross the axis, where a mirrored side view keeps each keypoint's height.
    from benchmarks.probe_designs import CHANGES  # the bench's probe of such a study

    runway = [CHANGES["in a runway, from above"](t) for t in _seen(fish[0], (0, 1))]
    e = view_evidence(runway)
    assert e["concentration"] > 0.9 and e["range"][1] < 0.7 * e["range"][0]
    view, _, why = choose_view(runway)
    assert view == "above" and "runway" in why
    m = mirror_evidence(runway, "y")
    side = mirror_evidence(_seen(fish[0], (0, 2)), "y")
    print(
        f"runway even/odd {m['even']:.3f}/{m['odd']:.3f}; side {side['even']:.3f}/{side['odd']:.3f}"
    )
    assert m["odd"] > MIRROR_MIN > side["odd"] and side["even"] > side["odd"]
    assert choose_view(_seen(fish[0], (0, 2)))[0] == "side"
    # one way of facing only (no turn seen): no evidence, the other rules decide
    ahead = [(r.coords[:, 0, 0, 0] > r.coords[:, 0, -1, 0]) for r in runway]
    kept = [
        r.replace(coords=r.coords[f], confidence=r.confidence[f])
        for r, f in zip(runway, ahead, strict=True)
    ]
    assert mirror_evidence(kept, "y") is None


def _swim_the_height(tracks):
    """Every body moved up and down as far as it travels across: the ranges are alike."""
    out = []
    for t in tracks:
        c = t.coords.copy()
        with warnings.catch_warnings():  # frames with every keypoint lost: NaN, left so
            warnings.simplefilter("ignore", RuntimeWarning)
            centre = np.nanmean(c[..., 0], axis=(1, 2))
        reach = np.nanpercentile(centre, 95) - np.nanpercentile(centre, 5)
        c[..., 1] += 0.45 * reach * np.sin(np.linspace(0, 6 * np.pi, len(c)))[:, None, None]
        out.append(t.replace(coords=c))
    return out


def test_a_side_view_whose_animals_range_as_far_up_as_across_is_read_by_its_keypoints(fish):
    # A fish swimming the tank's whole height: the ranges no longer name the vertical; the
    # keypoints keeping their side of the body's axis when it faces the other way do.
    side = _swim_the_height(_seen(fish[0], (0, 2)))
    rx, ry = view_evidence(side)["range"]
    assert 0.7 * rx < ry < rx / 0.7
    view, vertical, why = choose_view(side)
    assert (view, vertical) == ("side", "y") and "keep their side" in why
    # the runway seen from above, moved alike, stays a view from above (its keypoints cross)
    from benchmarks.probe_designs import CHANGES

    runway = _swim_the_height(
        [CHANGES["in a runway, from above"](t) for t in _seen(fish[0], (0, 1))]
    )
    assert choose_view(runway)[0] == "above"
    # from above given for side-view tracks: said, with the option that fits them
    with pytest.warns(InputWarning, match=r"read as filmed from the side.*view='side'"):
        assert resolve_view(side, "above")[0] == "above"


def test_lifting_keeps_the_vertical_and_adds_no_depth(fish):
    side = _seen(fish[0][:1], (0, 2))[0]
    lifted = lift_side_view(side, "y")
    np.testing.assert_array_equal(lifted.coords[..., 0], side.coords[..., 0])
    np.testing.assert_array_equal(lifted.coords[..., 2], side.coords[..., 1])
    assert np.nanmax(np.abs(lifted.coords[..., 1])) == 0.0


def test_a_side_view_is_labelled_with_its_vertical(fish):
    # Recovery on the simulated fish filmed from the side, the count given: the body frame
    # that turns with the animal (from above) loses the fish's pitch and height
    tracks, truth = fish
    side = _seen(tracks, (0, 2))
    scores = {}
    for view in ("auto", "above"):
        with warnings.catch_warnings(record=True) as given:
            warnings.simplefilter("always")
            model = BehaviourModel(n_states=4, features={"view": view}, random_state=0)
            model.fit(side)
        # given against the tracks, the fit says so too
        assert any("read as filmed from the side" in str(w.message) for w in given) == (
            view == "above"
        )
        if view == "above":  # given against the tracks: labelling says so
            with pytest.warns(InputWarning, match="look filmed from the side"):
                scores[view] = adjusted_rand_score(truth, model.label(side)["state"])
        else:
            scores[view] = adjusted_rand_score(truth, model.label(side)["state"])
        if view == "auto":
            assert (model.view_, model.view_vertical_) == ("side", "y")
            assert model.view_report_.startswith("from the side, y vertical (read from")
            assert not model.view_flip_  # the simulator's mm, z up
            meta, arrays = model.to_state()
            again = BehaviourModel.from_state(meta, arrays)
            assert again.view_ == "side" and again.n_dims_ == 2 and not again.view_flip_
            assert again.label(side[:1])["state"].equals(model.label(side[:1])["state"])
    print(f"ARI from the side {scores['auto']:.3f}, as if from above {scores['above']:.3f}")
    assert scores["auto"] > scores["above"] + 0.2  # measured 0.657 against 0.228


def test_a_causal_side_view_model_streams_as_it_labels_offline(fish):
    # A closed-loop model of a fish filmed from the side: fitted through the causal path with
    # the side view (each frame lifted alone), the streaming labeller lifts each pushed frame
    # alike, so its labels equal the offline causal labels (the docs' promise, >= 99 %).
    from ethoscribe.segment.streaming import StreamingLabeller

    side = _seen(fish[0], (0, 2))
    model = BehaviourModel(n_states=3, causal=True, random_state=0).fit(side[:2])
    assert (model.view_, model.view_vertical_) == ("side", "y")
    new = side[2].replace(coords=side[2].coords[:1500], confidence=side[2].confidence[:1500])
    offline = model.label([new])["state"].to_numpy()
    live = StreamingLabeller(model)
    streamed = np.array(
        [live.push(new.coords[t], new.confidence[t])[0].state for t in range(new.n_frames)]
    )
    print(f"\ncausal side view: streamed vs offline agree on {np.mean(streamed == offline):.2%}")
    assert np.mean(streamed == offline) >= 0.99 and (offline >= 0).mean() > 0.8


@pytest.mark.filterwarnings("default:view='above' is given:UserWarning")  # shown by the CLI
def test_command_line_reads_and_takes_the_camera_view(fish, tmp_path, capsys):
    import json

    from ethoscribe.cli import main
    from ethoscribe.io import write_tidy

    data = tmp_path / "data"
    data.mkdir()
    for t in _seen(fish[0][:2], (0, 2)):
        write_tidy(t.replace(coords=t.coords[:2000], confidence=t.confidence[:2000]),
                   data / f"{t.session}.parquet")  # fmt: skip
    common = ["--fps", "50", "--states", "3", "--quiet", "--jobs", "1", "--no-stability-check"]
    assert main(["discover", str(data), "--out", str(tmp_path / "a"), *common]) == 0
    features = json.loads((tmp_path / "a" / "summary.json").read_text())["features"]
    assert features["view"] == "side" and features["up_axis"] is None
    assert (
        "Camera: from the side, y vertical (read from the tracks"
        in (tmp_path / "a" / "report.html").read_text()
    )
    capsys.readouterr()
    assert main(["discover", str(data), "--out", str(tmp_path / "b"), "--view", "above",
                 *common]) == 0  # fmt: skip
    said = capsys.readouterr().err
    assert "--view above is given, but the tracks read as filmed from the side" in said
    assert "pass --view side" in said
    features = json.loads((tmp_path / "b" / "summary.json").read_text())["features"]
    assert features["view"] == "above" and features["view_report"] == "from above (given)"
    # the workbench draws what the camera saw: forward and height, so labelled
    from ethoscribe.plots.motifs import posture_figure
    from ethoscribe.workspace import Workspace
    from ethoscribe.workspace.postures import PostureLibrary

    ws = Workspace(tmp_path / "a")
    lib = PostureLibrary(ws)
    lib.set_states(ws.state_labels(), ws.summary["n_states"])
    mean = lib.mean_posture([0])
    assert lib.second_axis == "height" and mean.shape == (len(lib.keypoints), 2)
    fig = posture_figure(mean, lib.keypoints, lib.edges, second_axis=lib.second_axis)
    assert fig.layout.yaxis.title.text.startswith("height")


def test_animals_that_do_not_travel_give_no_sign_of_the_view(fish):
    # a tethered fish seen from the side: its long axis keeps level, but nothing travels
    side = _seen(fish[0][:1], (0, 2))[0]
    still = side.coords - np.nanmean(side.coords, axis=2, keepdims=True)
    view, vertical, why = choose_view([side.replace(coords=still)])
    assert (view, vertical) == ("above", None) and "no sign of gravity" in why


def test_sessions_filmed_otherwise_than_the_model_are_named(fish):
    import warnings

    tracks, _ = fish
    quick = {"n_restarts": 1, "n_iter": 20}
    side, top = _seen(tracks[:2], (0, 2)), _seen(tracks[:2], (0, 1))
    for fitted, same, other in (("side", side, top), ("above", top, side)):
        model = BehaviourModel(n_states=3, segmenter=quick, random_state=0).fit(same)
        assert model.view_ == fitted
        with warnings.catch_warnings(record=True) as said:
            warnings.simplefilter("always")
            model.label(same[:1])
        assert not [w for w in said if "look filmed" in str(w.message)]
        with warnings.catch_warnings(record=True) as said:  # the poor fit is said too
            warnings.simplefilter("always")
            model.label(other[:1])
        texts = [str(w.message) for w in said]
        assert any(f"model was fitted on tracks filmed from {fitted}" in t for t in texts), texts


def test_image_coordinates_are_turned_up(fish):
    # Pixel tracks (and tracks calibrated from pixels) have y growing downwards: the side
    # view's vertical is -y, so heights and the drawn postures stand upright; the model keeps
    # the choice for new sessions whatever their units
    side = _seen(fish[0][:2], (0, 2))
    rows_down = [s.replace(coords=s.coords * [1.0, -1.0], units="px") for s in side]  # y down
    model = BehaviourModel(n_states=3, segmenter={"n_restarts": 1, "n_iter": 20}, random_state=0)
    model.fit(rows_down)
    assert model.view_ == "side" and model.view_flip_
    lifted = lift_side_view(rows_down[0], "y", flip=True)
    np.testing.assert_allclose(lifted.coords[..., 2], side[0].coords[..., 1])  # upright again
    meta, arrays = model.to_state()
    assert BehaviourModel.from_state(meta, arrays).view_flip_
