"""Writing simulated studies to disk: tidy Parquet tracks, manifest, truth and a record.

Layout of one study folder::

    manifest.csv              session, path, fps, group, subject, px_per_unit, units
    <session>.parquet         frame, keypoint, x, y, [z], confidence, [animal]
    truth/frames.parquet      session, frame, animal, behaviour, state (one row per frame, animal)
    truth/bouts.csv           session, animal, behaviour, state, start_frame, end_frame, ...
    simulation.json           generator version, parameters, seeds, expected time budgets

Files are written to a temporary name first and then moved into place.
"""

from __future__ import annotations

import argparse
import json
import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from ethoscribe.errors import InputError
from ethoscribe.pose import PoseTracks
from ethoscribe.simulate.animals import get_body_plan
from ethoscribe.simulate.plan import BodyPlan, expected_time_budget
from ethoscribe.simulate.session import simulate_study

COORD_STEP = 1 / 64  # stored coordinates are float32 multiples of this: far below the jitter
CONF_STEP = 1 / 1024
# floats split into byte streams (not dictionary-coded) compress ~40 % better with zstd
PARQUET_OPTIONS = {
    "index": False,
    "compression": "zstd",
    "compression_level": 9,
    "use_dictionary": ["keypoint", "animal"],
}


def _replace_into(path: Path, write) -> None:
    tmp = path.with_name(path.name + ".tmp")
    write(tmp)
    os.replace(tmp, path)


def tidy_table(tracks: PoseTracks) -> pd.DataFrame:
    """One row per frame, animal and keypoint: frame, keypoint, x, y, [z], confidence, [animal].

    Coordinates are rounded to 1/64 unit and confidence to 1/1024 and stored as float32 (they
    compress well and lose nothing that matters); ``animal`` only appears with several animals.
    """
    F, A, K, D = tracks.coords.shape
    cols: dict[str, object] = {
        "frame": np.repeat(np.arange(F, dtype=np.int32), A * K),
        "keypoint": pd.Categorical.from_codes(np.tile(np.arange(K), F * A), tracks.keypoints),
    }
    for d, name in enumerate("xyz"[:D]):
        cols[name] = (np.round(tracks.coords[..., d].ravel() / COORD_STEP) * COORD_STEP).astype(
            np.float32
        )
    conf = np.round(tracks.confidence.ravel() / CONF_STEP) * CONF_STEP
    cols["confidence"] = conf.astype(np.float32)
    if A > 1:
        codes = np.tile(np.repeat(np.arange(A), K), F)
        cols["animal"] = pd.Categorical.from_codes(codes, tracks.animals)
    return pd.DataFrame(cols)


def bout_table(truth: pd.DataFrame, fps: float, session: str) -> pd.DataFrame:
    """Bouts (runs of one behaviour) of a frame-level truth table; ``end_frame`` is exclusive."""
    rows = []
    for animal, part in truth.groupby("animal", observed=True, sort=False):
        frame, state = part["frame"].to_numpy(), part["state"].to_numpy()
        starts = np.flatnonzero(np.r_[True, np.diff(state) != 0])
        ends = np.r_[starts[1:], len(state)]
        rows.append(
            pd.DataFrame(
                {
                    "session": session,
                    "animal": str(animal),
                    "behaviour": part["behaviour"].to_numpy()[starts].astype(str),
                    "state": state[starts],
                    "start_frame": frame[starts],
                    "end_frame": frame[ends - 1] + 1,
                    "start_s": np.round(frame[starts] / fps, 4),
                    "duration_s": np.round((ends - starts) / fps, 4),
                }
            )
        )
    return pd.concat(rows, ignore_index=True)


def write_study(
    folder: str | Path,
    sessions: Sequence[PoseTracks],
    truths: Sequence[pd.DataFrame],
    manifest: pd.DataFrame,
    record: dict | None = None,
) -> Path:
    """Write a simulated study (from :func:`simulate_study`) into ``folder``.

    Returns the folder. See the module docstring for the layout.

    Examples
    --------
    >>> import tempfile
    >>> from ethoscribe.simulate import simulate_study
    >>> s, t, m = simulate_study(n_per_group=1, duration_s=2)
    >>> out = write_study(tempfile.mkdtemp(), s, t, m)
    >>> sorted(p.name for p in out.iterdir())[:3]
    ['manifest.csv', 'session_01.parquet', 'session_02.parquet']
    """
    folder = Path(folder)
    if len(sessions) != len(truths) or len(sessions) != len(manifest):
        msg = (
            f"write_study needs one truth table and one manifest row per session; got "
            f"{len(sessions)} sessions, {len(truths)} truth tables, {len(manifest)} rows"
        )
        raise InputError(msg)
    (folder / "truth").mkdir(parents=True, exist_ok=True)
    floats = ["x", "y", "z", "confidence"]
    frames, bouts = [], []
    for tracks, truth, path in zip(sessions, truths, manifest["path"], strict=True):
        table = tidy_table(tracks)
        split = [c for c in floats if c in table.columns]
        _replace_into(
            folder / path,
            lambda p, t=table, s=split: t.to_parquet(p, **PARQUET_OPTIONS, use_byte_stream_split=s),
        )
        frames.append(truth.assign(session=tracks.session))
        bouts.append(bout_table(truth, tracks.fps, tracks.session))
    frame_table = pd.concat(frames, ignore_index=True)
    frame_table = frame_table[["session", "frame", "animal", "behaviour", "state"]]
    frame_table["session"] = frame_table["session"].astype("category")
    _replace_into(
        folder / "truth" / "frames.parquet",
        lambda p: frame_table.to_parquet(p, index=False, compression="zstd"),
    )
    _replace_into(
        folder / "truth" / "bouts.csv",
        lambda p: pd.concat(bouts, ignore_index=True).to_csv(p, index=False),
    )
    _replace_into(folder / "manifest.csv", lambda p: manifest.to_csv(p, index=False))
    if record is not None:
        text = json.dumps(record, indent=2)
        _replace_into(folder / "simulation.json", lambda p: p.write_text(text + "\n"))
    return folder


def study_record(plan: BodyPlan, sessions: Sequence[PoseTracks], **params) -> dict:
    """What a simulated study folder records: version, plan summary, parameters, seeds, budgets
    and each session's drawn camera and body size."""
    from ethoscribe import __version__

    n_animals = params.get("n_animals", 1)
    keys = ("subject", "group", "seed", "px_per_unit", "body_scale", "arena_corners")
    return {
        "generator": "ethoscribe.simulate",
        "ethoscribe_version": __version__,
        "simulated": True,
        "body_plan": plan.name,
        "description": plan.description,
        **params,
        "keypoints": list(plan.keypoints),
        "skeleton": [list(e) for e in plan.skeleton],
        "swap_pairs": [list(p) for p in plan.swap_pairs],
        "origin": plan.origin,
        "axis": list(plan.axis),
        "behaviours": list(plan.behaviour_names),
        "coordinate_units": plan.coordinate_units,
        "physical_units": plan.physical_units,
        "arena_size": list(plan.arena),
        "planted_effects": {
            g: {
                "behaviour": e.behaviour,
                "time_budget_ratio": e.time_budget_ratio,
                "duration_ratio": e.duration_ratio,
            }
            for g, e in plan.group_effects.items()
        },
        "expected_time_budget": {
            g: expected_time_budget(plan, g, n_animals).round(5).to_dict() for g in plan.groups
        },
        "sessions": {s.session: {k: s.meta[k] for k in keys} for s in sessions},
    }


def _study(folder: Path, plan_name: str, **params) -> Path:
    plan = get_body_plan(plan_name)
    sessions, truths, manifest = simulate_study(plan, **params)
    record = study_record(plan, sessions, **params)
    return write_study(folder, sessions, truths, manifest, record)


def write_example_sessions(
    folder: str | Path,
    n_per_group: int = 8,
    duration_s: float = 300.0,
    fps: float = 30.0,
    seed: int = 0,
    fish_per_group: int = 1,
    fish_duration_s: float = 180.0,
    fish_fps: float = 50.0,
    pairs_per_group: int = 1,
    pairs_duration_s: float = 120.0,
) -> list[Path]:
    """Write the example studies: dune voles in ``folder``, glass minnows in
    ``folder/glass_minnow`` and pairs of voles in ``folder/dune_vole_pairs``.

    A count of 0 skips that study. Returns the study folders written.

    Examples
    --------
    >>> import tempfile
    >>> out = write_example_sessions(tempfile.mkdtemp(), n_per_group=1, duration_s=2,
    ...                              fish_per_group=0, pairs_per_group=0)
    >>> (out[0] / "manifest.csv").exists()
    True
    """
    folder = Path(folder)
    written = [
        _study(
            folder, "dune_vole", n_per_group=n_per_group, duration_s=duration_s, fps=fps, seed=seed
        )
    ]
    if fish_per_group > 0:
        written.append(
            _study(
                folder / "glass_minnow",
                "glass_minnow",
                n_per_group=fish_per_group,
                duration_s=fish_duration_s,
                fps=fish_fps,
                seed=seed + 1,
            )
        )
    if pairs_per_group > 0:
        written.append(
            _study(
                folder / "dune_vole_pairs",
                "dune_vole",
                n_per_group=pairs_per_group,
                duration_s=pairs_duration_s,
                fps=fps,
                seed=seed + 2,
                n_animals=2,
            )
        )
    return written


def main(argv: Sequence[str] | None = None) -> int:
    """Command line: ``python -m ethoscribe.simulate --out DIR [--sessions N] ...``."""
    parser = argparse.ArgumentParser(
        prog="python -m ethoscribe.simulate",
        description="Write simulated example sessions (invented animals, known behaviour).",
    )
    parser.add_argument("--out", required=True, help="folder to write into (created if needed)")
    parser.add_argument("--sessions", type=int, default=8, help="dune-vole sessions per group")
    parser.add_argument("--duration", type=float, default=300.0, help="seconds per session")
    parser.add_argument("--seed", type=int, default=0, help="study seed")
    parser.add_argument("--fps", type=float, default=30.0, help="dune-vole frame rate")
    parser.add_argument("--fish-sessions", type=int, default=1, help="fish sessions per group")
    parser.add_argument("--pair-sessions", type=int, default=1, help="vole-pair sessions per group")
    args = parser.parse_args(argv)
    if args.sessions < 1 or args.duration <= 0:
        parser.error("--sessions must be at least 1 and --duration positive")
    folders = write_example_sessions(
        args.out,
        n_per_group=args.sessions,
        duration_s=args.duration,
        fps=args.fps,
        seed=args.seed,
        fish_per_group=args.fish_sessions,
        pairs_per_group=args.pair_sessions,
    )
    for f in folders:
        n = len(pd.read_csv(f / "manifest.csv"))
        print(f"wrote {n} simulated sessions to {f}")
    return 0
